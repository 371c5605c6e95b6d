"""Start-up benchmarks: ``saed`` run as a new process, as a microscopist runs it, against ``python -c pass``.

The cold case runs ``saed index`` on a 2048 x 2048 16-bit TIFF against 10 phases in a fresh
interpreter, so imports, the phase tables, the image and the match are all in the time (issue 15.13:
target 1.0 s wall). The floor is a fresh interpreter that does nothing, measured in the same run; the
difference is what saed costs. A third case imports only the libraries that call needs (numpy,
scipy.ndimage, tifffile, gemmi): the part of the start-up saed's own code cannot cut.

As at the microscope PC: the operating system's file cache is warm after the first (warm-up) run, and
Python's bytecode cache exists (an installed saed has it; the child may write it for a checkout even
when this shell sets PYTHONDONTWRITEBYTECODE, as some development tools do: compiling saed's modules on
every run would add about 0.15 s that no user pays).

Each run also records the child's CPU seconds (user + system): on a loaded machine the wall time
waits for the cores and the CPU time does not, so the CPU median is the better estimate of the wall
time on an idle machine. The 1-minute load average before and after the runs says how loaded it was.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
from pathlib import Path

from saed.bench import Case
from saed.bench.bench_index import TEN_PHASES  # the same 10 phases as the in-process index benchmark

#: What a cold 'saed index' imports besides saed (checked by tests/test_startup.py). Not scipy.spatial
#: (0.17 s of CPU: the image stage's neighbour queries are saed.image.nearby) nor scipy.optimize
#: (0.24 s: the mistilt fit's least squares is saed.index.robust_lsq).
INDEX_LIBRARIES = ("numpy", "scipy.ndimage", "tifffile", "gemmi")


def _env() -> dict:
    """The environment of the child: this saed first on the path (a checkout runs its own code), and
    allowed to keep its bytecode cache (see the module notes)."""
    import saed

    root = str(Path(saed.__file__).resolve().parent.parent)
    env = dict(os.environ)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def _state(argv: list[str], tmp=None) -> dict:
    return {"tmp": tmp, "argv": argv, "env": _env(), "cpu_s": [], "load": []}


def _index_setup():
    from saed.bench.bench_index import speed_pattern_file

    tmp, path, scale = speed_pattern_file()
    argv = [sys.executable, "-m", "saed", "index", str(path), "--scale", repr(scale), "--json", str(Path(tmp.name) / "r.json")]
    for name in TEN_PHASES:
        argv += ["--phase", name]
    return _state(argv, tmp)


def _parser_setup():
    return _state([sys.executable, "-m", "saed", "index", "--help"])


def _libraries_setup():
    return _state([sys.executable, "-c", "import " + ", ".join(INDEX_LIBRARIES)])


def _run(state):
    import resource

    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    done = subprocess.run(state["argv"], env=state["env"], capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(state['argv'][2:5])} failed: {done.stderr.strip()[-300:]}")
    state["cpu_s"].append((after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime))
    state["load"].append(os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan"))
    cpu = state["cpu_s"][1:] or state["cpu_s"]  # the first call is the warm-up
    return {"child_cpu_s median": round(statistics.median(cpu), 3), "child_cpu_s min": round(min(cpu), 3),
            "load_1min first..last": f"{state['load'][0]:.2f} .. {state['load'][-1]:.2f}"}


def cases():
    return [
        Case("start-up: cold 'saed index' 2048x2048, 10 phases", _index_setup, _run, target_s=1.0, repeat=7,
             floor="python", note="a new process per run"),
        Case("start-up: cold imports of the libraries 'saed index' needs", _libraries_setup, _run, repeat=7,
             floor="python", note="numpy, scipy.ndimage, tifffile, gemmi"),
        Case("start-up: cold 'saed index --help' (imports + parser)", _parser_setup, _run, repeat=7, floor="python"),
    ]

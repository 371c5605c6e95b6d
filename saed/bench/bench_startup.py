"""Start-up benchmarks: ``saed`` run as a new process, as a microscopist runs it, against ``python -c pass``.

The cold case runs ``saed index`` on a 2048 x 2048 16-bit TIFF against 10 phases in a fresh
interpreter, so imports, the phase tables, the image and the match are all in the time (issue 15.13:
target 1.0 s wall). The floor is a fresh interpreter that does nothing, measured in the same run; the
difference is what saed costs. The operating system's file cache is warm after the first run, as it
is at the microscope PC.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

from saed.bench import Case
from saed.bench.bench_index import TEN_PHASES  # the same 10 phases as the in-process index benchmark


def _env() -> dict:
    """The environment of the child: this saed first on the path (a checkout runs its own code)."""
    import saed

    root = str(Path(saed.__file__).resolve().parent.parent)
    env = dict(os.environ)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def _index_setup():
    from saed.bench.bench_index import speed_pattern_file

    tmp, path, scale = speed_pattern_file()
    argv = [sys.executable, "-m", "saed", "index", str(path), "--scale", repr(scale), "--json", str(Path(tmp.name) / "r.json")]
    for name in TEN_PHASES:
        argv += ["--phase", name]
    return tmp, argv, _env()


def _parser_setup():
    return None, [sys.executable, "-m", "saed", "index", "--help"], _env()


def _run(state):
    import resource

    _tmp, argv, env = state
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    done = subprocess.run(argv, env=env, capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(argv[2:5])} failed: {done.stderr.strip()[-300:]}")
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    # CPU seconds of the child: on a loaded machine the wall time waits for the cores, the CPU time does not
    return {"child_cpu_s (last run)": round(cpu, 3), "load_1min": round(load, 2)}


def cases():
    return [
        Case("start-up: cold 'saed index' 2048x2048, 10 phases", _index_setup, _run, target_s=1.0, repeat=5,
             floor="python", note="a new process per run; load_1min = the machine's load meanwhile"),
        Case("start-up: cold 'saed index --help' (imports + parser)", _parser_setup, _run, repeat=7, floor="python"),
    ]

"""Issue 15.13, start-up: what a cold 'saed index' imports, and the numpy stand-ins for what it no longer imports.

Speed itself is measured by 'saed bench --only start-up' (a cold process against 'python -c pass'),
never by a timed assertion here.
"""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, stats

import saed
from saed import physics
from saed.index.score import spearman_rho

ROOT = str(Path(saed.__file__).resolve().parent.parent)


def _modules_after(code: str) -> set[str]:
    env = dict(os.environ, PYTHONPATH=ROOT)
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys, json; print(json.dumps(sorted(sys.modules)))"],
                         env=env, capture_output=True, text=True, check=True).stdout
    return set(json.loads(out.splitlines()[-1]))


def test_index_path_imports_neither_scipy_stats_nor_matplotlib():
    mods = _modules_after("from saed.cli import build_parser; build_parser('index')\n"
                          "import saed.index, saed.image.measure, saed.report.index_summary, saed.report.index_json")
    assert "saed.cli.cmd_index" in mods and "saed.index.match" in mods  # the code did load
    assert not {m for m in mods if m == "scipy.stats" or m.startswith("matplotlib")}
    assert "saed.cli.cmd_simulate" not in mods  # only the command asked for is imported


#: Never on the start-up path of the commands checked below (each costs 0.1-1 s to import, or is only for
#: plots, scans, microscope formats and the web page).
NEVER_AT_START = ("matplotlib", "scipy.stats", "dask", "distributed", "rsciio", "skimage", "h5py", "zarr",
                  "starlette", "fastapi", "uvicorn", "PIL", "pandas", "ase", "xraylib", "mrcfile")


def _imported(argv: list[str], tmp_path) -> set[str]:
    """Every module in sys.modules when a fresh interpreter running `saed ARGV` (or `-c CODE`) exits.

    (sys.modules, not ``-X importtime``: the interpreter does not log modules loaded by
    importlib.import_module, which is how the command modules are found.)"""
    out = tmp_path / "modules.json"
    hook = f"import atexit, json, sys; atexit.register(lambda: open({str(out)!r}, 'w').write(json.dumps(sorted(sys.modules))))"
    if argv[0] == "-c":
        code = hook + "\n" + argv[1]
    else:
        code = hook + f"\nimport runpy; sys.argv = ['saed', *{argv!r}]; runpy.run_module('saed', run_name='__main__')"
    env = dict(os.environ, PYTHONPATH=ROOT)
    done = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-2000:]
    return set(json.loads(out.read_text()))


def _banned(names: set[str]) -> set[str]:
    return {n for n in names if any(n == b or n.startswith(b + ".") for b in NEVER_AT_START)}


def test_help_builds_every_command_parser_without_a_heavy_library(tmp_path):
    names = _imported(["--help"], tmp_path)
    assert {"saed.cli.cmd_index", "saed.cli.cmd_batch", "saed.cli.cmd_serve"} <= names  # the whole parser was built
    assert _banned(names) == set()
    assert not {n for n in names if n.split(".")[0] in ("scipy", "gemmi", "tifffile")}


def test_importing_the_cli_imports_no_numpy(tmp_path):
    names = _imported(["-c", "import saed.cli"], tmp_path)
    assert "saed.cli" in names and "numpy" not in names and _banned(names) == set()


def test_a_real_index_run_imports_only_what_indexing_needs(tmp_path):
    """The cold 'saed index' call itself (not just its modules): the libraries it loads are the ones the
    start-up benchmark names, and none of the heavy ones it has no use for."""
    from saed.bench.bench_startup import INDEX_LIBRARIES

    ex = __import__("importlib.resources").resources.files("saed").joinpath("data/examples")
    img, cal = tmp_path / "b.tif", tmp_path / "b.json"
    img.write_bytes(ex.joinpath("grain_B_hcp.tif").read_bytes())
    cal.write_bytes(ex.joinpath("grain_B_hcp.json").read_bytes())
    names = _imported(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--phase", "Co-fcc",
                       "--json", str(tmp_path / "r.json")], tmp_path)
    assert json.loads((tmp_path / "r.json").read_text())["solutions"]  # it did index
    assert _banned(names) == set(), sorted(_banned(names))
    assert set(INDEX_LIBRARIES) <= names  # the benchmark's list is what the call really loads ...
    third_party = {n.split(".")[0] for n in names} & {"numpy", "scipy", "tifffile", "gemmi", "matplotlib", "PIL",
                                                      "skimage", "dask", "rsciio", "h5py", "zarr", "pandas"}
    assert third_party == {"numpy", "scipy", "tifffile", "gemmi"}  # ... and nothing more of weight
    # scipy.spatial and scipy.optimize cost 0.17 and 0.24 s of CPU to import: the image stage's neighbour
    # queries (saed.image.nearby) and the mistilt fit (saed.index.robust_lsq) do without them
    assert not {n for n in names if n.split(".")[:2] in (["scipy", "spatial"], ["scipy", "optimize"])}
    assert not {n for n in names if n.startswith("saed.cli.cmd_") and n != "saed.cli.cmd_index"}


def test_the_superlattice_probe_adds_no_heavy_import(tmp_path):
    """A Ni pattern with faint Ni3Al spots makes 'saed index' probe the image (saed.index.superlattice_probe):
    that path, too, does without scipy.spatial and scipy.optimize."""
    import numpy as np
    import tifffile

    from saed.crystal import builtin_phase
    from saed.synth.overlap import overlap_image

    img, _ = overlap_image(builtin_phase("Ni"), (0, 0, 1), [(builtin_phase("Ni3Al"), np.eye(3), 0.15)],
                           in_plane_rotation_deg=31.0, scale_inv_nm_per_px=0.05, rng=40)
    tif = tmp_path / "ni.tif"
    tifffile.imwrite(tif, np.clip(np.rint(img), 0, 65535).astype(np.uint16), photometric="minisblack")
    names = _imported(["index", str(tif), "--scale", "0.05", "--phase", "Ni", "--phase", "Ni3Al",
                       "--json", str(tmp_path / "r.json")], tmp_path)
    # two crystals: only the probe sees Ni3Al here (tests/test_ordering_probe.py: Ni alone without the image)
    assert len(json.loads((tmp_path / "r.json").read_text())["crystals"]) == 2
    assert not {n for n in names if n.split(".")[:2] in (["scipy", "spatial"], ["scipy", "optimize"])}


def test_phases_and_version_need_no_scipy():
    mods = _modules_after("from saed.cli import build_parser; build_parser('phases')\nimport saed.physics, saed.calibration")
    assert "saed.physics" in mods and not {m for m in mods if m.startswith("scipy")}


def test_version_is_answered_without_numpy():
    env = dict(os.environ, PYTHONPATH=ROOT)
    code = "import sys; from saed.cli import main; rc = main(['--version']); print(sorted(sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True).stdout
    assert out.startswith(f"saed {saed.__version__}") and "'numpy'" not in out


def test_pinned_constants_are_codata_as_scipy_has_them():
    # scipy.constants is the outside reference (CODATA 2018 in older scipy differs in m_e by 1.4e-9 relative)
    for name, ours in (("h", physics._c.h), ("e", physics._c.e), ("c", physics._c.c), ("m_e", physics._c.m_e)):
        assert ours == pytest.approx(getattr(constants, name), rel=1e-8), name


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(-5, 5), st.floats(-1e3, 1e3, allow_nan=False)), min_size=2, max_size=40))
def test_spearman_matches_scipy_with_ties(pairs):
    a = np.array([p[0] for p in pairs], float)  # small integers: many ties
    b = np.array([p[1] for p in pairs], float)
    ours = spearman_rho(a, b)
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        assert math.isnan(ours)
        return
    assert ours == pytest.approx(stats.spearmanr(a, b).statistic, abs=1e-9)


def test_subcommand_parser_alone_parses_like_the_whole_one():
    from saed.cli import build_parser

    argv = ["ratio", "0.2", "0.1", "60", "--phase", "Cu", "--top", "3"]
    whole, alone = build_parser().parse_args(argv), build_parser("ratio").parse_args(argv)
    assert {k: v for k, v in vars(whole).items() if k != "_run"} == {k: v for k, v in vars(alone).items() if k != "_run"}

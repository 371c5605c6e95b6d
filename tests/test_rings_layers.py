"""Issue 16.2: the ring code imports only downward.

Layers (DEVELOPERS.md, common practice of this project): physics -> crystal -> simulate / image /
synth -> index / rings -> calibrate -> report, batch, serve, cli. Every ``saed`` import of the ring
modules (at module level or inside a function) must point to the same layer or a lower one; the
generator in synth/ in particular may not reach up into rings/.
"""

import ast
from pathlib import Path

import pytest

import saed

ROOT = Path(saed.__file__).parent
#: Layer of each top-level saed module or package; bottom-layer plumbing is 0.
LAYER = {"physics": 0, "errors": 0, "units": 0, "files": 0, "calibration": 0, "readonly": 0,
         "crystal": 1, "data": 1,
         "simulate": 2, "image": 2, "synth": 2,
         "index": 3, "rings": 3,
         "calibrate": 4,
         "report": 5, "batch": 5, "serve": 5, "cli": 5, "bench": 5}
RING_MODULES = ["simulate/rings.py", "synth/rings.py", *sorted(p.relative_to(ROOT).as_posix()
                                                               for p in (ROOT / "rings").glob("*.py")),
                "calibrate/rings.py", "report/rings_plot.py"]


def _saed_imports(path: Path) -> set[str]:
    out = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names = [node.module] + ([f"{node.module}.{a.name}" for a in node.names] if node.module == "saed" else [])
        elif isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        else:
            continue
        out |= {n.split(".")[1] for n in names if n.startswith("saed.")}
    return out


@pytest.mark.parametrize("module", RING_MODULES)
def test_ring_module_imports_only_its_layer_or_lower(module):
    own = LAYER[module.split("/")[0]]
    upward = {m for m in _saed_imports(ROOT / module) if LAYER.get(m, 99) > own}
    assert not upward, f"{module} (layer {own}) imports from higher layers: {sorted(upward)}"


def test_the_check_sees_an_upward_import(tmp_path):
    """The old synth/rings.py imported ring lines from rings/: the check must catch that form."""
    old = tmp_path / "old.py"
    old.write_text("from saed.rings.lines import ring_lines\n\ndef f():\n    from saed import report\n")
    assert _saed_imports(old) == {"rings", "report"}


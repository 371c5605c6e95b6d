"""Imports run downward only: the layer order of DEVELOPERS.md, and no import cycle between modules.

The order (lowest first) is written here, not read from the code: a module may import its own
package and any package of a LOWER tier, never one of its own tier or above. The walk reads every
``import`` statement of saed/ with :mod:`ast` (inside functions too: a lazy import is still a
dependency), so nothing is imported to run it.

Exceptions are listed one by one with the reason; an allowed cycle must stay lazy on one side.
"""

from __future__ import annotations

import ast
from collections import defaultdict
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "saed"

#: Packages (and top-level modules) of saed, lowest tier first.
TIERS = (
    {"saed", "errors"},  # ``saed`` itself: the version string only
    {"units", "files", "readonly", "physics", "vectors2d"},  # bottom-layer plumbing, constants, plane geometry
    {"calibration"},
    {"crystal"},
    {"simulate", "image"},
    {"rings"},
    {"synth", "calibrate"},
    {"index"},
    {"report"},
    {"batch", "serve"},
    {"bench"},  # the speed cases: `saed bench` (cli) runs them
    {"cli"},
    {"__main__"},
)

#: Imports against the order, each (importer module, imported module): why it is allowed for now.
UPWARD_EXCEPTIONS: dict = {}

#: Module pairs that import each other, allowed because one side imports lazily (inside a function).
CYCLE_EXCEPTIONS = {
    # io reads microscope formats through microscope.py lazily (rosettasciio is slow to import);
    # microscope.py checks each frame against io's size limits.
    frozenset({"saed.image.io", "saed.image.microscope"}),
    # notation writes indices for people; miller's error messages use it (lazily) to quote indices.
    frozenset({"saed.crystal.miller", "saed.crystal.notation"}),
}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports():
    """{(importer, imported, lazy)} for every saed import in saed/ (``from saed import x`` -> saed.x)."""
    modules = {_module_name(p) for p in ROOT.rglob("*.py")}
    found = set()
    for path in ROOT.rglob("*.py"):
        me = _module_name(path)
        tree = ast.parse(path.read_text(encoding="utf-8"))
        top = {id(n) for n in tree.body}
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                targets = [f"{node.module}.{a.name}" if f"{node.module}.{a.name}" in modules else node.module
                           for a in node.names]
            else:
                continue
            for t in targets:
                if t == "saed" or t.startswith("saed."):
                    while t not in modules:
                        t = t.rsplit(".", 1)[0]
                    found.add((me, t, id(node) not in top))
    return found


def _package(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "saed"


def _tier(module: str) -> int:
    pkg = _package(module)
    for i, names in enumerate(TIERS):
        if pkg in names:
            return i
    raise AssertionError(f"{module}: package {pkg!r} has no tier in tests/test_layers.py (add it, and to DEVELOPERS.md)")


IMPORTS = _imports()


def test_the_walk_sees_known_imports():
    # imports written in the code today (a walk that finds nothing would pass every check below)
    assert ("saed.index.tables", "saed.crystal.reflections", False) in IMPORTS
    assert ("saed.cli.cmd_spots", "saed.report.spots_json", False) in IMPORTS
    assert any(a == "saed.cli.cmd_simulate" and b == "saed.report.simulate_json" and lazy for a, b, lazy in IMPORTS)


def test_imports_run_downward():
    wrong = []
    for a, b, lazy in sorted(IMPORTS):
        if _package(a) == _package(b) or _tier(b) < _tier(a):
            continue
        if (a, b) in UPWARD_EXCEPTIONS:
            continue
        wrong.append(f"{a} -> {b} ({_package(a)} may not import {_package(b)})")
    assert not wrong, "imports against the layer order:\n" + "\n".join(wrong)


def _cycles(edges) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan, iterative)."""
    graph = defaultdict(set)
    for a, b in edges:
        graph[a].add(b)
    index, low, on, stack, out, counter = {}, {}, set(), [], [], [0]
    for start in sorted(graph):
        if start in index:
            continue
        work = [(start, iter(sorted(graph[start])))]
        index[start] = low[start] = counter[0]
        counter[0] += 1
        stack.append(start)
        on.add(start)
        while work:
            v, it = work[-1]
            for w in it:
                if w not in index:
                    index[w] = low[w] = counter[0]
                    counter[0] += 1
                    stack.append(w)
                    on.add(w)
                    work.append((w, iter(sorted(graph[w]))))
                    break
                if w in on:
                    low[v] = min(low[v], index[w])
            else:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[v])
                if low[v] == index[v]:
                    comp = []
                    while True:
                        w = stack.pop()
                        on.discard(w)
                        comp.append(w)
                        if w == v:
                            break
                    if len(comp) > 1:
                        out.append(sorted(comp))
    return out


def test_cycle_finder_finds_a_cycle_written_here():
    assert _cycles([("a", "b"), ("b", "c"), ("c", "a"), ("c", "d")]) == [["a", "b", "c"]]
    assert _cycles([("a", "b"), ("b", "c")]) == []


@pytest.mark.parametrize("lazy_only", [False, True], ids=["module-level", "with-lazy"])
def test_no_import_cycles(lazy_only):
    # A package's __init__ re-exporting its modules is not a cycle: its modules never import it back.
    edges = {(a, b) for a, b, lazy in IMPORTS if a != b and (lazy_only or not lazy)}
    allowed = {frozenset(pair) for pair in CYCLE_EXCEPTIONS}
    bad = [c for c in _cycles(edges) if frozenset(c) not in allowed]
    assert not bad, f"import cycles: {bad}"
    for pair in allowed:  # an allowed cycle stays lazy on at least one side
        a, b = sorted(pair)
        assert not ({(a, b, False), (b, a, False)} <= IMPORTS), f"{a} <-> {b} both import at module level"

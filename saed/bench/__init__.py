"""Benchmarks behind ``saed bench``: medians, and a ratio to a floor measured in the same run.

The floor is what no pattern analysis can beat on this machine: reading a
2048x2048 16-bit TIFF and one Gaussian filter pass over it (float32). A case's
ratio = its median / the floor median, so numbers from machines of different
speed compare. Each ``saed/bench/bench_*.py`` module defines ``cases()``
returning :class:`Case` objects; they are found automatically.

Benchmarks are never run by the test suite as timed assertions.
"""

from __future__ import annotations

import importlib
import pkgutil
import statistics
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

__all__ = ["Case", "Result", "measure", "floor_case", "all_cases", "run"]


@dataclass(frozen=True)
class Case:
    """One benchmark: ``setup()`` returns the state passed to ``fn(state)``, which is timed.

    ``target_s``: the goal for the median (None: no goal, report only); ``per``: a count the
    median is divided by for a rate (e.g. patterns per call); ``floor``: which floor the ratio
    uses ('image2048', 'image256', or 'python' for cold-process cases: ``python -c pass``).
    """

    name: str
    setup: Callable[[], object]
    fn: Callable[[object], object]
    target_s: float | None = None
    repeat: int = 7
    warmup: int = 1
    per: int = 1
    floor: str = "image2048"
    note: str = ""


@dataclass
class Result:
    name: str
    median_s: float
    min_s: float
    n: int
    target_s: float | None
    ratio_to_floor: float | None = None
    per: int = 1
    note: str = ""
    extra: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool | None:
        return None if self.target_s is None else self.median_s <= self.target_s


def measure(case: Case, *, repeat: int | None = None) -> Result:
    state = case.setup()
    for _ in range(case.warmup):
        out = case.fn(state)
    times = []
    for _ in range(repeat or case.repeat):
        t0 = time.perf_counter()
        out = case.fn(state)
        times.append(time.perf_counter() - t0)
    extra = out if isinstance(out, dict) else {}
    return Result(case.name, statistics.median(times), min(times), len(times), case.target_s,
                  per=case.per, note=case.note, extra=extra)


def _floor_setup(size: int):
    import tifffile

    tmp = tempfile.TemporaryDirectory()
    path = Path(tmp.name) / f"floor_{size}.tif"
    rng = np.random.default_rng(0)
    tifffile.imwrite(path, rng.poisson(50, (size, size)).astype(np.uint16))
    return tmp, path


def _floor_fn(state):
    import tifffile
    from scipy import ndimage

    _tmp, path = state
    img = tifffile.imread(path).astype(np.float32)
    ndimage.gaussian_filter(img, 2.0)


def _python_floor_fn(_state):
    import subprocess
    import sys

    subprocess.run([sys.executable, "-c", "pass"], check=True)


def floor_case(kind: str = "image2048") -> Case:
    if kind == "python":  # a cold interpreter that does nothing: the floor of every cold-process case
        return Case("floor: cold process 'python -c pass'", lambda: None, _python_floor_fn, repeat=9)
    size = {"image2048": 2048, "image256": 256}[kind]
    return Case(f"floor: read {size}x{size} uint16 TIFF + 1 Gaussian pass", lambda: _floor_setup(size), _floor_fn,
                repeat=9 if size > 1000 else 51)


def all_cases() -> list[Case]:
    import saed.bench as pkg

    cases = []
    for info in sorted(pkgutil.iter_modules(pkg.__path__), key=lambda i: i.name):
        if info.name.startswith("bench_"):
            mod = importlib.import_module(f"saed.bench.{info.name}")
            cases.extend(mod.cases())
    return cases


def run(*, only: str | None = None, repeat: int | None = None, progress=None) -> tuple[dict[str, Result], list[Result]]:
    """Run the floors and every case whose name contains `only`; returns (floors, results)."""
    cases = [c for c in all_cases() if not only or only.lower() in c.name.lower()]
    kinds = sorted({c.floor for c in cases}) or ["image2048"]
    floors = {k: measure(floor_case(k)) for k in kinds}
    results = []
    for i, case in enumerate(cases):
        if progress:
            progress(i, len(cases), case.name)
        r = measure(case, repeat=repeat)
        r.ratio_to_floor = r.median_s / floors[case.floor].median_s
        results.append(r)
    if progress:
        progress(len(cases), len(cases), "done")
    return floors, results

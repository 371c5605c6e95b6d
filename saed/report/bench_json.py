"""The JSON document of ``saed bench``: the floors measured in the run and every case's timing.

Times are written as measured (seconds, not rounded): a reader compares them between runs. An extra
value that is not a number or text is written as its text.
"""

from __future__ import annotations

__all__ = ["bench_json"]


def _extra_value(v):
    return v if isinstance(v, (int, float, str)) else str(v)


def bench_json(floors: dict, results: list) -> dict:
    """The whole ``saed bench`` document from :func:`saed.bench.run`'s floors (by kind) and results."""
    return {
        "floors": {k: {"name": f.name, "median_s": f.median_s} for k, f in floors.items()},
        "results": [{"name": r.name, "median_s": r.median_s, "min_s": r.min_s, "n": r.n,
                     "ratio_to_floor": r.ratio_to_floor, "target_s": r.target_s, "per": r.per,
                     "extra": {k: _extra_value(v) for k, v in r.extra.items()}}
                    for r in results],
    }

"""``saed bench``: timing medians with the ratio to a floor measured in the same run."""

from __future__ import annotations

import os
import platform

from saed.cli.common import write_json
from saed.cli.progress import Progress

NAME = "bench"
HELP = "run the speed benchmarks (medians and ratio to a floor measured in the same run)"
ORDER = 95


def add_arguments(p):
    p.add_argument("--only", metavar="TEXT", help="run only cases whose name contains TEXT")
    p.add_argument("--repeat", type=int, metavar="N", help="timed repetitions per case (default per case)")
    p.add_argument("--json", metavar="PATH", help="also write the results as JSON ('-' for stdout)")


def run(args) -> int:
    from saed import bench

    with Progress(0, "bench") as bar:
        floors, results = bench.run(only=args.only, repeat=args.repeat, progress=bar)
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}")
    for kind, f in floors.items():
        print(f"{f.name:<58} median {f.median_s * 1e3:9.2f} ms  (floor '{kind}')")
    print(f"{'case':<58} {'median':>12} {'x floor':>8} {'target':>10}  verdict")
    for r in results:
        tgt = f"{r.target_s * 1e3:.0f} ms" if r.target_s is not None else "-"
        verdict = {True: "ok", False: "SLOWER THAN TARGET", None: ""}[r.ok]
        rate = f"  ({r.per / r.median_s:.1f}/s)" if r.per > 1 else ""
        print(f"{r.name:<58} {r.median_s * 1e3:9.2f} ms {r.ratio_to_floor:8.2f} {tgt:>10}  {verdict}{rate}"
              + (f"  {r.note}" if r.note else ""))
        for k, v in r.extra.items():
            print(f"    {k}: {v}")
    if args.json:
        from saed.report.bench_json import bench_json

        write_json(args.json, bench_json(floors, results))
    return 0

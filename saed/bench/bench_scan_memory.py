"""Scan memory benchmark: the peak resident memory of each Dask worker over scans of 10k, 30k and 100k frames.

``saed batch`` promises that a worker's memory does not grow with the scan (a task reads its
block of up to 256 frames, indexes it and hands the rows back; the client keeps only the set of
frames done). This case measures it: the same real scan path as ``saed batch`` (the per-frame
function :func:`saed.batch.scanindex.index_scan_frame`, 2 local workers, tasks of 256 frames)
over scans of growing size, sampling every worker's resident memory after every task and keeping
the maximum.

The frames are 64 x 64 pixels (a scan of 100k frames of 256 x 256 would be 13 GB of pixels to
write first): a 32 x 32 synthetic scan of the coating (:func:`saed.synth.scan.write_scan_hdf5`:
the eight grains of Co-fcc, Co-hcp and Cr of :data:`saed.synth.scan.COATING_GRAINS` and eight patches of
vacuum, so about half the frames are empty and the run takes minutes, not an hour; scale 0.32 1/nm per
px so the same reflections fall on the smaller detector), repeated along the slow scan axis by an HDF5 virtual
dataset (``(32 b, 32, 64, 64)``, b blocks), so a 100k-frame scan costs 2 MB of disk. The workers
read it as they read any HDF5 scan: a lazy Dask array, a slice per run of frames.

``SAED_BENCH_SCAN_MEMORY_FRAMES`` sets the sizes (default ``10000,30000,100000``; each is rounded
up to whole blocks of 1024 frames). It is slow (all frames are indexed): run it alone,
``saed bench --only "scan memory"``.
"""

from __future__ import annotations

import math
import os
import sys
import tempfile
from pathlib import Path

from saed.bench import Case

PHASES = ("Co-fcc", "Co-hcp", "Cr")
SIZE = 64
SCALE_INV_NM_PER_PX = 0.32
BLOCK = (32, 32)


def sizes_default() -> tuple[int, ...]:
    text = os.environ.get("SAED_BENCH_SCAN_MEMORY_FRAMES", "10000,30000,100000")
    return tuple(int(t) for t in text.split(",") if t.strip())


def write_repeated_scan(folder: Path, n_frames: int) -> Path:
    """An HDF5 file whose one 4-D dataset repeats a 32 x 32 scan b times along the slow axis (b*1024 >= n)."""
    import h5py

    from saed.synth.scan import COATING_GRAINS, ScanGrain, write_scan_hdf5

    src = folder / "block.h5"
    if not src.exists():
        grains = tuple(g for g in COATING_GRAINS if g.phase) + (ScanGrain("", None),) * 8
        write_scan_hdf5(src, BLOCK, dataset="scan/frames", size=SIZE, scale_inv_nm_per_px=SCALE_INV_NM_PER_PX,
                        grains=grains)
    b = max(1, math.ceil(n_frames / (BLOCK[0] * BLOCK[1])))
    layout = h5py.VirtualLayout(shape=(BLOCK[0] * b, BLOCK[1], SIZE, SIZE), dtype="uint16")
    source = h5py.VirtualSource(str(src), "scan/frames", shape=(BLOCK[0], BLOCK[1], SIZE, SIZE))
    for k in range(b):
        layout[k * BLOCK[0]:(k + 1) * BLOCK[0]] = source
    path = folder / f"scan_{b}.h5"
    with h5py.File(path, "w") as f:
        f.create_virtual_dataset("frames", layout)
    return path


def _rss_mib() -> float:
    import psutil

    return psutil.Process().memory_info().rss / 2**20


def _run(path: Path, tmp: Path) -> dict:
    import logging
    import time

    import distributed  # noqa: F401

    from saed.batch import discover_inputs, run_batch
    from saed.batch.cluster import dask_client
    from saed.batch.results import ResultsFile, iter_rows
    from saed.batch.scanindex import index_scan_frame
    from saed.bench.bench_batch import scan_job

    logging.getLogger("distributed").setLevel(logging.CRITICAL)
    job = scan_job(path, phases=PHASES, scale_inv_nm_per_px=SCALE_INV_NM_PER_PX, size=SIZE)
    inputs = discover_inputs([str(path)])
    marks = {}
    with dask_client(workers=2) as client:
        first = {}

        def sample(done, total, text):
            now = client.run(_rss_mib)
            for w, v in now.items():
                first.setdefault(w, v)
                marks.setdefault("peak", {})[w] = max(marks.get("peak", {}).get(w, 0.0), v)
            for at in (1024, 10240, 30720):
                if done >= at and at < total and at not in marks:
                    marks[at] = max(marks["peak"].values())
            if done and done % 8192 < 256:          # a line now and then on stderr: a long run shows where it is
                print(f"scan memory: {done} of {total} frames, worker peak so far "
                      f"{', '.join(f'{v:.0f}' for v in marks['peak'].values())} MiB", file=sys.stderr, flush=True)

        out = tmp / f"{path.stem}.csv"
        t0 = time.perf_counter()
        with ResultsFile(out) as res:
            outcome = run_batch(inputs, res, index_scan_frame, job, client=client, progress=sample)
        elapsed = time.perf_counter() - t0
    ok = sum(r.status == "ok" for r in iter_rows(out))
    out.unlink()
    return {"frames": outcome.n_written, "ok_rows": ok, "s": elapsed, "before_first_task": max(first.values()),
            "marks": {k: v for k, v in marks.items() if k != "peak"}, "peak_per_worker": sorted(marks["peak"].values())}


def _setup(sizes):
    tmp = tempfile.TemporaryDirectory(prefix="saed-bench-scan-memory-")
    paths = [write_repeated_scan(Path(tmp.name), n) for n in sizes]
    return {"tmp": tmp, "paths": paths}


def _case_fn(state):
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    extra = {"load_average_at_start (other work on the machine)": round(load, 2),
             "frames": f"{SIZE}x{SIZE} px, tasks of 256 frames, 2 local workers"}
    for path in state["paths"]:
        r = _run(path, Path(state["tmp"].name))
        n = r["frames"]
        extra[f"{n} frames: peak RSS per worker, MiB (each worker)"] = [round(v) for v in r["peak_per_worker"]]
        extra[f"{n} frames: worker max before the first task / after 1024 / 10240 / 30720 frames, MiB"] = (
            [round(r["before_first_task"])] + [round(v) for k, v in sorted(r["marks"].items())])
        extra[f"{n} frames: rows ok, s"] = (r["ok_rows"], round(r["s"], 1))
    return extra


def cases(sizes=None):
    sizes = tuple(sizes or sizes_default())
    return [Case(f"scan memory per worker over {', '.join(str(n) for n in sizes)} frames (64x64, 2 workers)",
                 lambda: _setup(sizes), _case_fn, repeat=1, warmup=0, floor="image256",
                 note="see the extra lines; SAED_BENCH_SCAN_MEMORY_FRAMES sets the sizes; slow")]

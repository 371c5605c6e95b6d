"""Batch benchmark: a scan of 256x256 patterns with grains against 3 phases on 1 and 2 local Dask workers.

Reports (as the case's extra lines): throughput in patterns/s on 1 and 2 workers and their
ratio (goal >= 1.7 on 2 cores), the per-pattern time on 1 worker against the 'image256'
floor (read a 256x256 uint16 TIFF + one Gaussian pass) as a ratio, and the peak RSS of the
workers and the client (resident memory sampled after every task, the maximum so far) after
1024 patterns and at the end of the 2-worker run (memory must stay flat as the stack grows). The case's own median is the whole case (cluster start-up
included); the rates are timed over the batch runs alone, after a warm-up task per worker.

The stack size is ``SAED_BENCH_BATCH_FRAMES`` (default 4096, the issue's size); e.g.
``SAED_BENCH_BATCH_FRAMES=512 saed bench --only batch`` for a quick run. The stack is a square
scan of the coating (:func:`saed.synth.scan.write_scan_npy`: Voronoi grains of Co-fcc, Co-hcp and
Cr at several zones, and vacuum), written as a 4-D memory-mapped ``.npy``. The floor is measured
in the same run on the same frames: read each frame of the scan and one Gaussian pass over it.
Also reported: how the frames were solved (warm start, full search) and how often the warm start
agreed with the full search on the checked frames, and the frames wrong against the scan's truth.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np

from saed.bench import Case

PHASES = ("Co-fcc", "Co-hcp", "Cr")
SIZE = 256
SCALE_INV_NM_PER_PX = 0.08


def scan_job(path, *, phases=PHASES, scale_inv_nm_per_px: float = SCALE_INV_NM_PER_PX, size: int = SIZE):
    """The IndexJob ``saed batch`` makes for the scan at `path`: 200 kV, its phases, and the centre hint
    measured on the scan's first frame (:func:`saed.batch.scanindex.scan_centre_hint`)."""
    from saed.batch import discover_inputs
    from saed.batch.indexing import make_index_job
    from saed.batch.scanindex import scan_centre_hint
    from saed.calibration import Calibration
    from saed.crystal import builtin_phase

    cal = Calibration(scale_inv_nm_per_px, 200.0)
    hint = scan_centre_hint(discover_inputs([str(path)]).sources[0], cal)
    return make_index_job([builtin_phase(p) for p in phases], cal, frame_shape=(size, size), centre_hint_px=hint)


def n_frames_default() -> int:
    return int(os.environ.get("SAED_BENCH_BATCH_FRAMES", "4096"))


def write_stack(path, n_frames: int):
    """A 4-D uint16 (side, side, 256, 256) scan of the coating with side = sqrt(n_frames); returns its truth."""
    from saed.synth.scan import write_scan_npy

    side = max(2, int(round(n_frames ** 0.5)))
    return write_scan_npy(path, (side, side), size=SIZE, scale_inv_nm_per_px=SCALE_INV_NM_PER_PX)


def scan_floor_s(path, n: int = 256, *, clock=None) -> float:
    """Seconds per frame to read frames of the scan (memory map) and run one Gaussian pass over each.

    `clock` is ``time.perf_counter`` (wall, the default) or ``time.process_time`` (this process's CPU:
    the measure to set against the workers' CPU per pattern on a machine other work shares).
    """
    import time

    from scipy import ndimage as ndi

    clock = clock or time.perf_counter
    arr = np.load(path, mmap_mode="r")
    flat = arr.reshape((-1,) + arr.shape[-2:])
    n = min(n, len(flat))
    best = float("inf")
    for _ in range(3):
        t = clock()
        for k in range(n):
            ndi.gaussian_filter(np.asarray(flat[k], dtype=np.float32), 1.0)
        best = min(best, (clock() - t) / n)
    return best


def cpu_by_kind(path, n: int = 1024) -> dict[str, tuple[int, float]]:
    """CPU ms per frame by how it was solved (``search`` column), in this process over the first `n` frames.

    The same per-frame function as the workers run, on frames checked as the workers check them, in
    tasks of 256 frames, timed frame by frame (the check included) with the process's CPU clock: where a worker's time goes (warm start, empty frames, full searches).
    """
    import time

    from saed.batch.runner import _checked
    from saed.batch.scanindex import index_scan_frame

    job = scan_job(path)
    flat = np.load(path, mmap_mode="r")
    flat = flat.reshape((-1,) + flat.shape[-2:])
    # one frame first, untimed, as a worker's warm-up task: the compiled lean-stage kernels are loaded (or,
    # with no cache yet, compiled) on a process's first scan frame, which is not a per-frame cost
    index_scan_frame.new_task(job)
    index_scan_frame(_checked(np.asarray(flat[1]), index_scan_frame, name="warm-up"), job, name="warm-up", frame=1)
    spent: dict = {}
    for k in range(min(n, len(flat))):
        if k % 256 == 0:
            index_scan_frame.new_task(job)
        t = time.process_time()
        # as a worker gets it (saed.batch.runner.process_chunk): checked, 16-bit counts as recorded
        image = _checked(np.asarray(flat[k]), index_scan_frame, name=f"scan frame {k}")
        row = index_scan_frame(image, job, name="scan", frame=k)
        d = time.process_time() - t
        c, total = spent.get(row.search, (0, 0.0))
        spent[row.search] = (c + 1, total + d)
    return {kind: (c, round(1e3 * total / c, 2)) for kind, (c, total) in sorted(spent.items())}


def _rss_mib() -> float:
    """Resident memory of this process now, MiB (run on each worker by client.run).

    Sampled after every task and the maximum kept: the kernel's own peak (``ru_maxrss``) of a
    spawned worker includes its parent's memory at the fork, so it would not show the worker's.
    """
    import psutil

    return psutil.Process().memory_info().rss / 2**20


def _cpu_s() -> float:
    """CPU seconds (user + system) this process has used (run on each worker by client.run)."""
    import resource

    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def _setup(n_frames: int):
    tmp = tempfile.TemporaryDirectory(prefix="saed-bench-batch-")
    stack = Path(tmp.name) / "stack.npy"
    truth = write_stack(stack, n_frames)
    warm = Path(tmp.name) / "warm.npy"
    write_stack(warm, 4)
    return {"tmp": tmp, "stack": stack, "warm": warm, "n": int(truth.grain.size), "truth": truth}


def _run(state, workers: int, memory_at: int | None):
    import logging
    import time

    import distributed  # noqa: F401
    import psutil

    from saed.batch import discover_inputs, run_batch
    from saed.batch.cluster import dask_client
    from saed.batch.scanindex import index_scan_frame as index_frame
    from saed.batch.results import ResultsFile, iter_rows

    logging.getLogger("distributed").setLevel(logging.CRITICAL)   # after its import, which sets the level
    tmp = Path(state["tmp"].name)
    job = scan_job(state["stack"])
    memory = {}
    with dask_client(workers=workers) as client:
        warm_csv = tmp / f"warm{workers}.csv"
        with ResultsFile(warm_csv) as res:
            run_batch(discover_inputs([str(state["warm"])]), res, index_frame, job, client=client, chunk_frames=1)
        warm_csv.unlink()

        peak = [0.0, 0.0]                               # worker max, client

        def sample(done, total, text):
            peak[0] = max(peak[0], max(client.run(_rss_mib).values()))
            peak[1] = max(peak[1], psutil.Process().memory_info().rss / 2**20)
            if memory_at and done >= memory_at and "at_1k" not in memory:
                memory["at_1k"] = tuple(peak)

        out = tmp / f"out{workers}.csv"
        cpu0 = sum(client.run(_cpu_s).values())
        client_cpu0 = _cpu_s()
        t0 = time.perf_counter()
        with ResultsFile(out) as res:
            outcome = run_batch(discover_inputs([str(state["stack"])]), res, index_frame, job, client=client,
                                progress=sample)
        elapsed = time.perf_counter() - t0
        n_done = max(outcome.n_written, 1)
        memory["cpu_ms_per_pattern"] = 1e3 * (sum(client.run(_cpu_s).values()) - cpu0) / n_done
        memory["client_cpu_ms_per_pattern"] = 1e3 * (_cpu_s() - client_cpu0) / n_done
        memory["end"] = tuple(peak)
    memory["rows"] = list(iter_rows(out))
    out.unlink()
    return outcome.n_written / elapsed, memory


def _case_fn(state):
    from saed.bench import floor_case, measure

    n = state["n"]
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    from collections import Counter

    from saed.batch.scanindex import CHECK_DIFFER, CHECK_SAME

    floor_tiff_s = measure(floor_case("image256")).median_s
    import time

    floor_s = scan_floor_s(state["stack"])
    floor_cpu_s = scan_floor_s(state["stack"], clock=time.process_time)
    by_kind = cpu_by_kind(state["stack"])
    rate1, mem1 = _run(state, 1, None)
    rate2, mem = _run(state, 2, 1024 if n > 1024 else None)
    truth = state["truth"]
    grains = truth.grain.ravel()
    wrong = 0
    for r in mem["rows"]:
        g = truth.grains[grains[r.frame]]
        wrong += not (r.status == "no-solution" if not g.phase else r.phase == g.phase)
    how = Counter(r.search for r in mem["rows"])
    checked = how[CHECK_SAME] + how[CHECK_DIFFER]
    extra = {
        "patterns": n,
        "solved by (2-worker run)": dict(how),
        "warm start agrees with the full search on checked frames": f"{how[CHECK_SAME]} of {checked}",
        "frames whose phase (or vacuum) is wrong against the scan's truth": wrong,
        "load_average_at_start (other work on the machine)": round(load, 2),
        "worker_cpu_ms_per_pattern (1 worker, 2 workers)": (round(mem1["cpu_ms_per_pattern"], 1),
                                                            round(mem["cpu_ms_per_pattern"], 1)),
        "client_cpu_ms_per_pattern (1 worker, 2 workers)": (round(mem1["client_cpu_ms_per_pattern"], 1),
                                                            round(mem["client_cpu_ms_per_pattern"], 1)),
        # what 2 dedicated cores would give from the CPU each pattern costs (other work on the machine
        # takes cores from the measured rates, not CPU from the patterns): 2 C1 / (C2 + client C2)
        "scaling_from_cpu_time (2 dedicated cores)": round(
            2 * mem1["cpu_ms_per_pattern"] / (mem["cpu_ms_per_pattern"] + mem["client_cpu_ms_per_pattern"]), 2),
        "rate_1_worker_per_s": round(rate1, 2),
        "rate_2_workers_per_s": round(rate2, 2),
        "scaling_2_vs_1 (goal >= 1.7)": round(rate2 / rate1, 2),
        "per_pattern_ms_1_worker": round(1e3 / rate1, 1),
        "floor_ms (read a frame of this scan + one Gaussian pass)": round(floor_s * 1e3, 3),
        "cpu_ms_per_frame_by_search (in this process, first 1024 frames: count, ms)": by_kind,
        "floor_image256_ms (256x256 TIFF + Gaussian)": round(floor_tiff_s * 1e3, 2),
        "per_pattern_x_floor (1 worker wall)": round(1.0 / rate1 / floor_s, 1),
        "floor_cpu_ms (the same, CPU time of this process)": round(floor_cpu_s * 1e3, 3),
        "worker_cpu_per_pattern_x_floor_cpu (1 worker, 2 workers)": (round(mem1["cpu_ms_per_pattern"] / 1e3 / floor_cpu_s, 1),
                                                                    round(mem["cpu_ms_per_pattern"] / 1e3 / floor_cpu_s, 1)),
    }
    if "at_1k" in mem:
        extra["peak_rss_MiB_at_1024 (worker max, client)"] = tuple(round(v) for v in mem["at_1k"])
    extra[f"peak_rss_MiB_at_{n} (worker max, client)"] = tuple(round(v) for v in mem["end"])
    return extra


def cases(n_frames: int | None = None):
    n = n_frames or n_frames_default()
    return [Case(f"batch: scan of {n} patterns 256x256 with grains, 3 phases, 1 and 2 workers (whole case)", lambda: _setup(n),
                 _case_fn, repeat=1, warmup=0, floor="image256",
                 note="see the extra lines; SAED_BENCH_BATCH_FRAMES sets the stack size")]

"""Batch benchmark: a stack of 256x256 patterns against 3 phases on 1 and 2 local Dask workers.

Reports (as the case's extra lines): throughput in patterns/s on 1 and 2 workers and their
ratio (goal >= 1.7 on 2 cores), the per-pattern time on 1 worker against the 'image256'
floor (read a 256x256 uint16 TIFF + one Gaussian pass) as a ratio, and the peak RSS of the
workers and the client (resident memory sampled after every task, the maximum so far) after
1024 patterns and at the end of the 2-worker run (memory must stay flat as the stack grows). The case's own median is the whole case (cluster start-up
included); the rates are timed over the batch runs alone, after a warm-up task per worker.

The stack size is ``SAED_BENCH_BATCH_FRAMES`` (default 4096, the issue's size); e.g.
``SAED_BENCH_BATCH_FRAMES=512 saed bench --only batch`` for a quick run. The stack holds 64
distinct synthetic patterns (Co-fcc, Co-hcp, Cr zones at several rotations, through the
detector model of :mod:`saed.synth`) repeated, written as a memory-mapped ``.npy``.
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
N_DISTINCT = 64
_ZONES = (("Co-fcc", (0, 1, 1)), ("Co-fcc", (1, 1, 2)), ("Co-fcc", (0, 0, 1)), ("Co-hcp", (0, 0, 1)),
          ("Co-hcp", (1, 0, 0)), ("Co-hcp", (1, -1, 0)), ("Cr", (0, 0, 1)), ("Cr", (1, 1, 1)))


def n_frames_default() -> int:
    return int(os.environ.get("SAED_BENCH_BATCH_FRAMES", "4096"))


def _pattern(k: int) -> np.ndarray:
    from saed.crystal import builtin_phase
    from saed.index.synthetic import synthetic_measured
    from saed.synth import Detector, Scene, render_pattern

    name, zone = _ZONES[k % len(_ZONES)]
    m, _ = synthetic_measured(builtin_phase(name), zone, scale_inv_nm_per_px=SCALE_INV_NM_PER_PX,
                              in_plane_rotation_deg=11.0 * k, image_shape=(SIZE, SIZE), position_noise_px=0.0, rng=k)
    el = m.spots.intensity / m.spots.intensity.max() * 3e4
    return render_pattern(np.stack([m.spots.x_px, m.spots.y_px], 1), el, center_px=m.center_px,
                          detector=Detector(shape=(SIZE, SIZE)), scene=Scene(haze_electrons=200.0, haze_core_px=10.0),
                          rng=k).image


def write_stack(path, n_frames: int) -> None:
    """A uint16 (n_frames, 256, 256) .npy of N_DISTINCT patterns repeated, written frame by frame."""
    distinct = [_pattern(k) for k in range(min(N_DISTINCT, n_frames))]
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint16, shape=(n_frames, SIZE, SIZE))
    for k in range(n_frames):
        out[k] = distinct[k % len(distinct)]
    out.flush()
    del out


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
    write_stack(stack, n_frames)
    warm = Path(tmp.name) / "warm.npy"
    write_stack(warm, 8)
    return {"tmp": tmp, "stack": stack, "warm": warm, "n": n_frames}


def _run(state, workers: int, memory_at: int | None):
    import logging
    import time

    import distributed  # noqa: F401
    import psutil

    from saed.batch import discover_inputs, run_batch
    from saed.batch.cluster import dask_client
    from saed.batch.indexing import index_frame, make_index_job
    from saed.batch.results import ResultsFile
    from saed.calibration import Calibration
    from saed.crystal import builtin_phase

    logging.getLogger("distributed").setLevel(logging.CRITICAL)   # after its import, which sets the level
    tmp = Path(state["tmp"].name)
    job = make_index_job([builtin_phase(p) for p in PHASES], Calibration(SCALE_INV_NM_PER_PX, 200.0))
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
    out.unlink()
    return outcome.n_written / elapsed, memory


def _case_fn(state):
    from saed.bench import floor_case, measure

    n = state["n"]
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    floor_s = measure(floor_case("image256")).median_s
    rate1, mem1 = _run(state, 1, None)
    rate2, mem = _run(state, 2, 1024 if n > 1024 else None)
    extra = {
        "patterns": n,
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
        "floor_image256_ms": round(floor_s * 1e3, 2),
        "per_pattern_x_floor": round(1.0 / rate1 / floor_s, 1),
    }
    if "at_1k" in mem:
        extra["peak_rss_MiB_at_1024 (worker max, client)"] = tuple(round(v) for v in mem["at_1k"])
    extra[f"peak_rss_MiB_at_{n} (worker max, client)"] = tuple(round(v) for v in mem["end"])
    return extra


def cases(n_frames: int | None = None):
    n = n_frames or n_frames_default()
    return [Case(f"batch: {n} patterns 256x256, 3 phases, 1 and 2 workers (whole case)", lambda: _setup(n),
                 _case_fn, repeat=1, warmup=0, floor="image256",
                 note="see the extra lines; SAED_BENCH_BATCH_FRAMES sets the stack size")]

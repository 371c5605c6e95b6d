"""saed.batch on a real Dask LocalCluster (2 worker processes on loopback, started here).

The per-frame function in these tests is a small real one (frame mean and maximum), so the
plumbing is checked against numpy directly: every frame gets exactly one row, failures of one
frame become error rows, the shared value is sent to the workers once, and an interrupted run
resumes to the same rows as an uninterrupted one.
"""

import logging
import os
import socket

import numpy as np
import pytest
import tifffile

from saed.batch import discover_inputs, read_rows, run_batch
from saed.batch.cluster import dask_client
from saed.batch.results import ResultsFile, Row
from saed.errors import InputError

logging.getLogger("distributed").setLevel(logging.ERROR)


class Divisor:
    """The shared value of the tests; counts how often the client pickles it."""

    pickled = 0

    def __init__(self, value):
        self.value = value

    def __reduce__(self):
        Divisor.pickled += 1
        return (Divisor, (self.value,))


def frame_stats(image, shared, *, name, frame, context=None):
    if frame == 13 and name.endswith("die.npy"):
        os._exit(3)                      # a frame that kills its worker process
    return Row(name, frame, score=float(image.mean(dtype=np.float64)) / shared.value, n_spots=int(image.max()),
               note=str(context or ""))


@pytest.fixture(scope="module")
def client():
    import dask
    import distributed  # noqa: F401 - its config defaults must exist before config.set, or leaving it drops them

    with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
        with dask_client(workers=2) as c:
            yield c


def _stack(n, seed=0, shape=(32, 32)):
    return np.random.default_rng(seed).poisson(30, (n,) + shape).astype(np.float32)


def _rows_by_key(path):
    rows = read_rows(path)
    keys = [(r.file, r.frame) for r in rows]
    assert len(keys) == len(set(keys)), "duplicate rows"
    return {(r.file, r.frame): r for r in rows}


def test_every_frame_of_files_and_stacks_gets_one_row(client, tmp_path):
    npy = _stack(12)
    npy[5] = np.nan                                        # a frame of NaNs
    np.save(tmp_path / "tilt.npy", npy)
    tif = _stack(4, seed=1).astype(np.uint16)
    tifffile.imwrite(tmp_path / "series.tif", tif, photometric="minisblack")
    scan = _stack(6, seed=2).reshape(2, 3, 32, 32)
    np.save(tmp_path / "scan.npy", scan)
    (tmp_path / "readme.txt").write_text("not an image")
    inputs = discover_inputs([str(tmp_path)])
    assert [s.reason for s in inputs.skipped] == ["not an image file (.txt)"]
    out = tmp_path / "out.csv"
    with ResultsFile(out) as res:
        outcome = run_batch(inputs, res, frame_stats, Divisor(2.0), client=client, chunk_frames=3)
    assert (outcome.n_frames, outcome.n_written, outcome.n_before) == (22, 22, 0)
    rows = _rows_by_key(out)
    assert len(rows) == 22
    truth = {"tilt.npy": npy, "series.tif": tif.astype(np.float32), "scan.npy": scan.reshape(6, 32, 32)}
    for fname, frames in truth.items():
        for k, img in enumerate(frames):
            r = rows[(str(tmp_path / fname), k)]
            if fname == "tilt.npy" and k == 5:
                assert r.status.startswith("error:") and "NaN" in r.status
                continue
            assert r.status == "ok"
            assert r.score == pytest.approx(img.mean(dtype=np.float64) / 2.0, abs=1e-4)
            assert r.n_spots == int(img.max())


def test_shared_value_is_sent_once_not_per_frame(client, tmp_path):
    np.save(tmp_path / "s.npy", _stack(24, seed=3))
    Divisor.pickled = 0
    with ResultsFile(tmp_path / "out.csv") as res:
        run_batch(discover_inputs([str(tmp_path / "s.npy")]), res, frame_stats, Divisor(1.0), client=client,
                  chunk_frames=1)                           # 24 tasks
    assert len(read_rows(tmp_path / "out.csv")) == 24
    assert 1 <= Divisor.pickled <= 2                        # scattered to the 2 workers, never per task


def _worker_environment():
    return {k: os.environ.get(k) for k in ("MALLOC_TRIM_THRESHOLD_", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                           "MKL_NUM_THREADS")}


def test_local_workers_keep_one_native_thread_and_glibc_malloc_defaults(client):
    # glibc mallopt(3): setting M_TRIM_THRESHOLD (the MALLOC_TRIM_THRESHOLD_ variable) turns off the
    # dynamic mmap threshold, so every large numpy temporary becomes a fresh mmap + page faults; the
    # native pools stay at one thread per single-threaded worker (no spinning BLAS threads on shared cores)
    if "MALLOC_TRIM_THRESHOLD_" in os.environ:
        pytest.skip("this process's own environment sets MALLOC_TRIM_THRESHOLD_, which the workers inherit")
    for env in client.run(_worker_environment).values():
        assert env["MALLOC_TRIM_THRESHOLD_"] is None
        assert env["OMP_NUM_THREADS"] == env["OPENBLAS_NUM_THREADS"] == env["MKL_NUM_THREADS"] == "1"


def test_interrupted_run_resumes_to_the_same_rows(client, tmp_path):
    np.save(tmp_path / "s.npy", _stack(40, seed=4))
    inputs = discover_inputs([str(tmp_path / "s.npy")])
    with ResultsFile(tmp_path / "ref.csv") as res:
        run_batch(inputs, res, frame_stats, Divisor(1.0), client=client, chunk_frames=2)

    def stop_early(done, total, text):
        if done >= 9:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        with ResultsFile(tmp_path / "out.csv") as res:
            run_batch(inputs, res, frame_stats, Divisor(1.0), client=client, chunk_frames=2, progress=stop_early)
    partial = _rows_by_key(tmp_path / "out.csv")
    assert 9 <= len(partial) < 40
    with ResultsFile(tmp_path / "out.csv") as res:
        outcome = run_batch(inputs, res, frame_stats, Divisor(1.0), client=client, chunk_frames=2)
    assert outcome.n_before == len(partial) and outcome.n_written == 40 - len(partial)
    done, ref = _rows_by_key(tmp_path / "out.csv"), _rows_by_key(tmp_path / "ref.csv")
    assert {k: r.cells() for k, r in done.items()} == {k: r.cells() for k, r in ref.items()}


def _write_hspy(path, data):
    """A 4-D scan (scan_y, scan_x, rows, cols) in rosettasciio's .hspy format, written with rosettasciio itself."""
    from rsciio.hspy import file_writer

    names = ("scan_y", "scan_x", "ky", "kx")
    axes = [dict(name=n, units="nm" if k < 2 else "1/nm", index_in_array=k, size=data.shape[k], offset=0.0,
                 scale=5.0 if k < 2 else 0.08, navigate=k < 2) for k, n in enumerate(names)]
    signal = {"data": data, "axes": axes, "metadata": {"General": {"title": "scan"}}, "original_metadata": {},
              "attributes": {"_lazy": False}, "tmp_parameters": {}, "package_info": {"name": "test", "version": "0"},
              "learning_results": {}, "models": {}}
    file_writer(str(path), signal, chunks=(1, 2) + data.shape[2:], show_progressbar=False)


def test_a_scan_in_a_microscope_format_is_read_lazily_with_its_scan_shape(client, tmp_path):
    from saed.batch.stacks import read_frames

    data = _stack(12, seed=7, shape=(32, 40)).astype(np.uint16).reshape(3, 4, 32, 40)
    _write_hspy(tmp_path / "scan.hspy", data)
    inputs = discover_inputs([str(tmp_path / "scan.hspy")])
    (src,) = inputs.sources
    assert (src.n_frames, src.scan_shape, src.frame_shape, src.stack) == (12, (3, 4), (32, 40), True)
    got = read_frames(src.path, [5, 6, 7, 11])                 # frames 5-7 are one run along a scan row
    for k, img in got.items():
        assert np.array_equal(img, data.reshape(12, 32, 40)[k])
    with ResultsFile(tmp_path / "out.csv") as res:
        run_batch(inputs, res, frame_stats, Divisor(1.0), client=client, chunk_frames=5)
    rows = _rows_by_key(tmp_path / "out.csv")
    assert sorted(k for _, k in rows) == list(range(12))
    for (_, k), r in rows.items():
        iy, ix = divmod(k, 4)                                  # frame = iy * nx + ix (docs/batch.md)
        assert r.score == pytest.approx(data[iy, ix].mean(dtype=np.float64), abs=1e-4)


@pytest.fixture()
def own_client():
    """A cluster of its own for the tests that kill or remove workers (the shared one stays healthy).

    ``allowed-failures`` 0: a task whose worker dies is given up at once (saed then runs its frames
    one by one), so a frame that kills its worker costs three restarts, not six: fewer chances for a
    loaded machine to be slow to restart one.
    """
    import dask
    import distributed  # noqa: F401

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        with dask_client(workers=2) as c:
            yield c


def test_a_frame_that_kills_its_worker_gets_an_error_row(own_client, tmp_path):
    np.save(tmp_path / "die.npy", _stack(16, seed=5))
    with ResultsFile(tmp_path / "out.csv") as res:
        # the watchdog bounds the test: it can fail, never hang (the workers restart within seconds;
        # 120 s leaves room for a loaded machine)
        run_batch(discover_inputs([str(tmp_path / "die.npy")]), res, frame_stats, Divisor(1.0), client=own_client,
                  chunk_frames=4, no_workers_timeout_s=120.0)
    rows = _rows_by_key(tmp_path / "out.csv")
    assert len(rows) == 16
    bad = [r for r in rows.values() if r.status != "ok"]
    assert [r.frame for r in bad] == [13]
    assert "worker process died" in bad[0].status


def test_a_run_whose_workers_are_all_gone_ends_with_an_error_and_keeps_its_rows(own_client, tmp_path):
    import time

    from saed.batch.runner import NoWorkersError

    np.save(tmp_path / "s.npy", _stack(64, seed=6))
    out = tmp_path / "out.csv"

    def remove_workers(done, total, text):
        if done:                                            # after the first task: the cluster loses every worker
            own_client.cluster.scale(0)

    t0 = time.monotonic()
    with pytest.raises(NoWorkersError, match="no Dask worker for 2 s") as info:
        with ResultsFile(out) as res:
            run_batch(discover_inputs([str(tmp_path / "s.npy")]), res, frame_stats, Divisor(1.0), client=own_client,
                      chunk_frames=4, progress=remove_workers, no_workers_timeout_s=2.0)
    assert time.monotonic() - t0 < 60
    assert "\n" not in str(info.value)
    rows = _rows_by_key(out)                                 # what was written before is all there, once
    assert 4 <= len(rows) < 64 and all(r.status == "ok" for r in rows.values())
    assert all(len({k for k in rows if k[1] // 4 == t}) in (0, 4) for t in range(16))   # whole tasks only


def _closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler_is_a_one_line_error_naming_it():
    address = f"tcp://127.0.0.1:{_closed_port()}"
    with pytest.raises(InputError, match=address.replace(".", r"\.")) as info:
        with dask_client(scheduler=address, connect_timeout_s=0.5):
            pass
    assert "\n" not in str(info.value)
    with pytest.raises(InputError, match="not a scheduler address"):
        with dask_client(scheduler="head-node-without-port", connect_timeout_s=0.5):
            pass
    with pytest.raises(InputError, match="not both"):
        with dask_client(scheduler=address, workers=2):
            pass

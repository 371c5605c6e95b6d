"""`saed batch` end to end with the real indexer: stacks, scans, bad input, and kill-and-resume.

Patterns are drawn from the kinematic simulation (saed.synth.kinematic.synthetic_measured for spot
positions and intensities) through the detector model of saed.synth (noise, haze, direct beam),
so every frame has a known phase and zone axis.
"""

import logging
import os
import signal
import socket
import subprocess
import sys
import time

import numpy as np
import pytest

from saed.batch.results import read_rows
from saed.batch.scan import zone_family
from saed.calibration import Calibration
from saed.cli import main
from saed.crystal import builtin_phase

logging.getLogger("distributed").setLevel(logging.ERROR)

SIZE = 192
SCALE = 0.08 * 256 / SIZE          # 1/nm per px: spots out to about 10 1/nm inside the frame
PHASES = ("Co-fcc", "Co-hcp", "Cr")
TRUTH_CYCLE = (("Co-fcc", (0, 1, 1)), ("Co-fcc", (1, 1, 2)), ("Co-hcp", (0, 0, 1)), ("Co-hcp", (1, 0, 0)))
PHASE_ARGS = [a for p in PHASES for a in ("--phase", p)]


def _pattern(phase_name, zone, rot_deg, seed):
    from saed.synth.kinematic import synthetic_measured
    from saed.synth import Detector, Scene, render_pattern

    m, _ = synthetic_measured(builtin_phase(phase_name), zone, scale_inv_nm_per_px=SCALE,
                              in_plane_rotation_deg=rot_deg, image_shape=(SIZE, SIZE), position_noise_px=0.0, rng=seed)
    el = m.spots.intensity / m.spots.intensity.max() * 3e4
    p = render_pattern(np.stack([m.spots.x_px, m.spots.y_px], 1), el, center_px=m.center_px,
                       detector=Detector(shape=(SIZE, SIZE)),
                       scene=Scene(haze_electrons=200.0, haze_core_px=10.0), rng=seed)
    return p.image


def _stack(path, n):
    """A uint16 stack of n patterns on disk; frame k shows TRUTH_CYCLE[(k // 5) % 4] at rotation 13k deg."""
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint16, shape=(n, SIZE, SIZE))
    truth = []
    for k in range(n):
        name, zone = TRUTH_CYCLE[(k // 5) % 4]
        out[k] = _pattern(name, zone, 13.0 * k, k)
        truth.append((name, zone))
    out.flush()
    del out
    return truth


@pytest.fixture(scope="module")
def scheduler():
    from saed.batch.cluster import dask_client

    with dask_client(workers=2) as client:
        yield client.scheduler.address


N_FRAMES = 24


@pytest.fixture(scope="module")
def stack(tmp_path_factory):
    path = tmp_path_factory.mktemp("stack") / "grains.npy"
    return str(path), _stack(path, N_FRAMES)


@pytest.fixture(scope="module")
def reference(scheduler, stack, tmp_path_factory):
    """An uninterrupted run over `stack`: (CSV path, what it printed)."""
    import contextlib
    import io

    out = tmp_path_factory.mktemp("ref") / "ref.csv"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["batch", stack[0], "--out", str(out), "--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler])
    assert code == 0
    return out, buf.getvalue()


def _cells(path):
    rows = read_rows(path)
    keys = [r.key for r in rows]
    assert len(keys) == len(set(keys)), "a frame has two rows"
    return {r.key: tuple(r.cells()) for r in rows}


def test_batch_indexes_every_frame_like_index_image(stack, reference):
    from saed.index import index_image, prepare_phases

    path, truth = stack
    out, text = reference
    rows = {r.frame: r for r in read_rows(out)}
    assert sorted(rows) == list(range(N_FRAMES))
    for k, (name, zone) in enumerate(truth):
        r = rows[k]
        assert r.status == "ok" and r.phase == name, (k, r)
        ph = builtin_phase(name)
        assert zone_family(r.zone_axis, ph) == zone_family(zone, ph)
    # the batch row is what the indexer says for that frame on its own
    tables = prepare_phases([builtin_phase(p) for p in PHASES])
    for k in (0, 17, N_FRAMES - 1):
        best = index_image(np.load(path, mmap_mode="r")[k].astype(np.float32), tables, Calibration(SCALE, 200.0)).best
        assert (rows[k].phase, rows[k].zone_axis) == (best.phase_name, best.zone_axis)
        # a frame measured by the full image stage scores exactly as `saed index`; one solved on the lean
        # stage's spots (warm start or full search) is scored by the same function on those spots
        exact = rows[k].search in ("full", "full+warm same")
        assert rows[k].score == pytest.approx(best.score, abs=1e-4 if exact else 0.05)
    assert "Co-fcc" in text and "<011>" in text and "<0001>" in text


def test_killed_run_resumes_without_losing_or_duplicating_rows(scheduler, stack, reference, tmp_path):
    psutil = pytest.importorskip("psutil")
    path, _ = stack
    ref, out = reference[0], tmp_path / "out.csv"
    common = [path, "--scale", str(SCALE), *PHASE_ARGS]

    proc = subprocess.Popen([sys.executable, "-m", "saed", "batch", *common, "--out", str(out), "--workers", "1"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        t_end = time.monotonic() + 60
        n_rows = 0
        while time.monotonic() < t_end and proc.poll() is None:
            n_rows = len(read_rows(out)) if out.exists() else 0
            if n_rows >= 1:
                break
            time.sleep(0.02)
        children = psutil.Process(proc.pid).children(recursive=True)
        os.kill(proc.pid, signal.SIGKILL)             # no clean-up at all: as a crash or power cut
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.stderr.close()
    assert 1 <= n_rows
    partial = _cells(out)
    assert len(partial) < N_FRAMES, "the run ended before it could be interrupted"
    _, alive = psutil.wait_procs(children, timeout=15)
    for p in alive:                                   # our own worker processes, by id
        p.kill()
    assert not alive, "worker processes outlived the killed run"

    assert main(["batch", *common, "--out", str(out), "--scheduler", scheduler]) == 0
    assert _cells(out) == _cells(ref)
    assert set(partial.items()) <= set(_cells(ref).items())


def test_scan_map_and_summary(scheduler, tmp_path, capsys):
    path = tmp_path / "scan.npy"
    truth = _stack(tmp_path / "flat.npy", 12)
    np.save(path, np.load(tmp_path / "flat.npy").reshape(3, 4, SIZE, SIZE))
    os.remove(tmp_path / "flat.npy")
    out = tmp_path / "scan.csv"
    summary = tmp_path / "summary.csv"
    assert main(["batch", str(path), "--out", str(out), "--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler,
                 "--summary", str(summary)]) == 0
    map_png = tmp_path / "scan_map.png"
    assert map_png.stat().st_size > 10_000
    text = capsys.readouterr().out
    assert f"map: {map_png}" in text
    fcc = sum(1 for name, _ in truth if name == "Co-fcc")
    assert "Co-fcc,0 1 1,5," in summary.read_text()
    assert any(line.startswith("Co-fcc ") and f" {fcc} " in line for line in text.splitlines())


def _closed_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_bad_inputs_exit_2_with_one_line(tmp_path, capsys):
    good = tmp_path / "one.npy"
    np.save(good, _pattern("Co-fcc", (0, 1, 1), 0.0, 1))
    args = ["--scale", str(SCALE), "--phase", "Co-fcc"]

    foreign = tmp_path / "notes.csv"
    foreign.write_text("grain,comment\n1,bent\n")
    assert main(["batch", str(good), "--out", str(foreign), *args]) == 2
    err = capsys.readouterr().err
    assert "not a saed batch CSV" in err and str(foreign) in err and "Traceback" not in err
    assert foreign.read_text() == "grain,comment\n1,bent\n"

    address = f"tcp://127.0.0.1:{_closed_port()}"
    assert main(["batch", str(good), "--out", str(tmp_path / "a.csv"), *args, "--scheduler", address,
                 "--connect-timeout", "0.5"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert address in err[-1] and "cannot reach the Dask scheduler" in err[-1]

    bad = tmp_path / "flat.npy"
    np.save(bad, np.zeros(4096, np.float32))
    assert main(["batch", str(bad), "--out", str(tmp_path / "b.csv"), *args]) == 2
    err = capsys.readouterr().err
    assert "neither an image" in err and "nothing to index" in err

    assert main(["batch", str(good), "--out", str(tmp_path / "c.csv"), *args, "--workers", "2",
                 "--scheduler", address]) == 2
    assert main(["batch", str(good), "--out", str(good), *args]) == 2
    assert main(["batch", str(good), "--out", str(tmp_path / "d.csv"), *args, "--scan-shape", "2", "3"]) == 2
    assert "1 frames" in capsys.readouterr().err


def test_folder_with_non_images_and_a_nan_frame(scheduler, tmp_path, capsys):
    d = tmp_path / "session"
    d.mkdir()
    np.save(d / "g1.npy", _pattern("Co-hcp", (0, 0, 1), 5.0, 2))
    nan = np.full((SIZE, SIZE), np.nan, np.float32)
    np.save(d / "g2.npy", np.stack([_pattern("Co-fcc", (0, 1, 1), 0.0, 3).astype(np.float32), nan]))
    (d / "g1.json").write_text("{}")
    (d / "log.txt").write_text("tired")
    out = tmp_path / "out.csv"
    assert main(["batch", str(d), "--out", str(out), "--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler]) == 0
    err = capsys.readouterr().err
    assert "skipped " + str(d / "g1.json") in err and "skipped " + str(d / "log.txt") in err
    rows = {(os.path.basename(r.image), r.frame): r for r in read_rows(out)}
    assert set(rows) == {("g1.npy", 0), ("g2.npy", 0), ("g2.npy", 1)}
    assert rows[("g1.npy", 0)].phase == "Co-hcp"
    assert rows[("g2.npy", 1)].status.startswith("error:") and "NaN" in rows[("g2.npy", 1)].status


def test_tiff_tags_calibrate_when_no_scale_is_given_and_mask_applies(scheduler, tmp_path):
    import tifffile

    img = _pattern("Co-fcc", (0, 1, 1), 20.0, 4)
    tif = tmp_path / "tagged.tif"
    # ImageJ stores a calibrated pattern as pixels per unit with unit=1/nm (what saed.image.io reads)
    tifffile.imwrite(tif, img, imagej=True, resolution=(1 / SCALE, 1 / SCALE), metadata={"unit": "1/nm"})
    out = tmp_path / "tags.csv"
    assert main(["batch", str(tif), "--out", str(out), *PHASE_ARGS, "--scheduler", scheduler]) == 0
    (row,) = read_rows(out)
    assert row.status == "ok" and row.phase == "Co-fcc"
    assert row.scale_inv_nm_per_px == pytest.approx(SCALE, rel=0.01)

    mask = np.zeros((SIZE, SIZE), np.uint8)
    mask[:, SIZE // 2:] = 255                          # hide the right half of every frame
    mask_png = tmp_path / "mask.png"
    from PIL import Image

    Image.fromarray(mask).save(mask_png)
    out2 = tmp_path / "masked.csv"
    assert main(["batch", str(tif), "--out", str(out2), *PHASE_ARGS, "--scheduler", scheduler,
                 "--mask", str(mask_png)]) == 0
    (masked,) = read_rows(out2)
    assert 0 < masked.n_spots < row.n_spots


def test_sigterm_ends_a_run_like_ctrl_c():
    # a cluster's time limit sends SIGTERM: the run must stop through the same clean path as Ctrl-C
    from saed.cli.cmd_batch import _terminate_as_interrupt

    before = signal.getsignal(signal.SIGTERM)
    with pytest.raises(KeyboardInterrupt):
        with _terminate_as_interrupt():
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(5)                           # interrupted long before this ends
    assert signal.getsignal(signal.SIGTERM) is before


def test_resume_from_another_working_directory_finds_the_rows(scheduler, tmp_path, monkeypatch, capsys):
    work = tmp_path / "session"
    (work / "frames").mkdir(parents=True)
    np.save(work / "frames" / "p1.npy", _pattern("Co-hcp", (0, 0, 1), 5.0, 2))
    np.save(work / "frames" / "p2.npy", _pattern("Co-fcc", (0, 1, 1), 9.0, 3))
    common = ["--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler]
    monkeypatch.chdir(work)
    assert main(["batch", "frames", "--out", "out.csv", *common]) == 0
    first = read_rows(work / "out.csv")
    assert sorted(r.image for r in first) == [os.path.join("frames", "p1.npy"), os.path.join("frames", "p2.npy")]
    capsys.readouterr()
    # the same files typed from the parent folder, and through a symlink: nothing is done twice
    monkeypatch.chdir(tmp_path)
    os.symlink(work / "frames", tmp_path / "link")
    for spelling in (os.path.join("session", "frames"), "link"):
        assert main(["batch", spelling, "--out", os.path.join("session", "out.csv"), *common]) == 0
        assert "2 already in" in capsys.readouterr().err
    assert len(read_rows(work / "out.csv")) == 2
    # a file changed since its row was written is another file: done again
    np.save(work / "frames" / "p2.npy", _pattern("Co-fcc", (0, 1, 1), 29.0, 4))
    assert main(["batch", "link", "--out", os.path.join("session", "out.csv"), *common]) == 0
    assert "1 to index" in capsys.readouterr().err
    assert len(read_rows(work / "out.csv")) == 3


def test_resume_with_other_phases_or_frame_sizes_is_refused(scheduler, tmp_path, capsys):
    d = tmp_path / "frames"
    d.mkdir()
    np.save(d / "a.npy", _pattern("Co-fcc", (0, 1, 1), 0.0, 1))
    out = tmp_path / "out.csv"
    assert main(["batch", str(d), "--out", str(out), "--scale", str(SCALE), "--phase", "Co-fcc", "--phase", "Co-hcp",
                 "--scheduler", scheduler]) == 0
    before = out.read_bytes()
    capsys.readouterr()
    np.save(d / "b.npy", _pattern("Co-hcp", (0, 0, 1), 0.0, 2))
    assert main(["batch", str(d), "--out", str(out), "--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "cannot resume" in err[0] and "Co-fcc, Co-hcp" in err[0] and "Cr" in err[0]
    assert out.read_bytes() == before
    # a frame of another size in the inputs: refused before any work, naming the file
    np.save(d / "c.npy", np.random.default_rng(0).poisson(50, (SIZE + 8, SIZE)).astype(np.uint16))
    assert main(["batch", str(d), "--out", str(out), "--scale", str(SCALE), "--phase", "Co-fcc", "--phase", "Co-hcp",
                 "--scheduler", scheduler]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "c.npy" in err[0] and f"{SIZE + 8}x{SIZE}" in err[0] and "one frame size" in err[0]
    assert out.read_bytes() == before


def test_hdf5_scan_gives_maps_and_an_array_set(scheduler, tmp_path, capsys):
    import h5py

    from saed.synth.scan import ScanGrain, write_scan_hdf5

    grains = (ScanGrain("Co-fcc", (0, 1, 1), 12.0), ScanGrain("Co-hcp", (0, 0, 1), 35.0), ScanGrain("", None))
    h5 = tmp_path / "coating.h5"
    truth = write_scan_hdf5(h5, (4, 6), grains=grains, variants=1, size=SIZE, scale_inv_nm_per_px=SCALE, seed=2)
    nan_frame = tmp_path / "nan.npy"
    out, arrays = tmp_path / "scan.csv", tmp_path / "scan.zarr"
    assert main(["batch", str(h5), "--out", str(out), "--scale", str(SCALE), *PHASE_ARGS, "--scheduler", scheduler,
                 "--arrays", str(arrays), "--scan-step", "25"]) == 0
    text = capsys.readouterr().out
    assert "map:" in text and "arrays:" in text and "warm start" in text
    rows = {r.frame: r for r in read_rows(out)}
    for k, g in enumerate(truth.grain.ravel()):
        assert rows[k].phase == grains[g].phase, (k, rows[k])
    import zarr

    z = zarr.open_group(str(arrays), mode="r")
    assert list(z.attrs["scan_shape"]) == [4, 6] and z["phase"].shape == (24,)
    assert (tmp_path / "scan_map.png").stat().st_size > 10_000
    # a NaN frame's error names the problem, not the file (so the summary can group equal errors)
    np.save(nan_frame, np.stack([np.full((SIZE, SIZE), np.nan, np.float32)] * 2))
    assert main(["batch", str(nan_frame), "--out", str(tmp_path / "nan.csv"), "--scale", str(SCALE), *PHASE_ARGS,
                 "--scheduler", scheduler]) == 0
    statuses = {r.status for r in read_rows(tmp_path / "nan.csv")}
    (status,) = statuses
    assert "NaN" in status and "nan.npy" not in status and str(tmp_path) not in status
    assert "2 x error:" in capsys.readouterr().out
    with h5py.File(h5) as f:
        assert f["scan/frames"].shape == (4, 6, SIZE, SIZE)

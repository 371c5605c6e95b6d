"""``saed calibrate`` and ``saed rings`` through the command line: the CONTRACT.md JSON, files, bad input."""

import json

import numpy as np
import pytest
import tifffile

from saed import physics
from saed.calibration import Ellipse, read_calibration_file
from saed.cli import main
from saed.crystal import builtin_phase
from saed.synth.rings import ring_pattern

SCALE = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)  # 0.055823 1/nm per px (worked example)

CALIBRATE_KEYS = {"standard", "scale_inv_nm_per_px", "center_px", "ellipse", "camera_constant_nm_mm",
                  "camera_length_mm", "residual_pct"}
RINGS_KEYS = {"center_px", "rings", "solutions"}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("rings_cli")
    au = ring_pattern([builtin_phase("Au")], shape_px=(512, 512), scale_inv_nm_per_px=SCALE,
                      ellipse=Ellipse(1.01, 20.0), rng=1)
    cu = ring_pattern([builtin_phase("Cu")], shape_px=(512, 512), scale_inv_nm_per_px=SCALE,
                      ellipse=Ellipse(1.01, 20.0), rng=2)
    paths = {"au": d / "au.tif", "cu": d / "cu.tif"}
    tifffile.imwrite(paths["au"], np.round(au.image).astype(np.uint16))
    tifffile.imwrite(paths["cu"], np.round(cu.image).astype(np.uint16))
    paths["dir"] = d
    paths["truth"] = au.truth
    return paths


def _run(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


@pytest.fixture(scope="module")
def calibrated(files, tmp_path_factory):
    """calibrate run once: (JSON document, calibration file path, history folder)."""
    hist = tmp_path_factory.mktemp("history")
    cal = files["dir"] / "cal.json"
    out = files["dir"] / "calibrate.json"
    rc = main(["calibrate", str(files["au"]), "--standard", "Au", "--pixel-pitch", "14", "--camera-length", "100",
               "--out", str(cal), "--json", str(out), "--history", str(hist)])
    assert rc == 0
    return json.loads(out.read_text()), cal, hist


def test_calibrate_json_follows_the_contract(calibrated, files):
    doc, cal_path, hist = calibrated
    assert CALIBRATE_KEYS <= set(doc)
    assert set(doc["ellipse"]) >= {"axis_ratio", "major_axis_angle_deg"}
    assert doc["standard"] == "Au"
    assert doc["scale_inv_nm_per_px"] == pytest.approx(SCALE, rel=1e-3)
    assert doc["camera_length_mm"] == pytest.approx(100.0, rel=1e-3)
    assert doc["camera_constant_nm_mm"] == pytest.approx(0.25079, rel=1e-3)  # check-value sheet section 8
    assert doc["ellipse"]["axis_ratio"] == pytest.approx(1.01, abs=0.002)
    assert doc["residual_pct"] < 0.3


def test_calibration_file_is_read_back_and_filed_in_the_history(calibrated, capsys):
    doc, cal_path, hist = calibrated
    cal = read_calibration_file(cal_path)
    assert cal.scale_inv_nm_per_px == doc["scale_inv_nm_per_px"] and cal.ellipse is not None and cal.date
    stored = list(hist.glob("L100mm_*_Au.json"))
    assert len(stored) == 1
    rc, out, _ = _run(capsys, "calibrate", "--list", hist)
    assert rc == 0 and stored[0].name in out and "100" in out


def test_calibrate_with_env_history_and_no_history(files, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("SAED_CALIBRATION_DIR", str(tmp_path / "h"))
    rc, out, _ = _run(capsys, "calibrate", files["au"], "--standard", "Au", "--no-history")
    assert rc == 0 and not (tmp_path / "h").exists()
    rc, out, _ = _run(capsys, "calibrate", "--list")
    assert rc == 0 and "no calibrations" in out


def test_rings_with_the_calibration_file(calibrated, files, capsys):
    _, cal_path, _ = calibrated
    rc, out, _ = _run(capsys, "rings", files["cu"], "--calibration", cal_path, "--phase", "Au", "--phase", "Cu",
                      "--phase", "Co-hcp", "--json", "-")
    assert rc == 0
    doc = json.loads(out)
    assert RINGS_KEYS <= set(doc)
    assert {"radius_px", "g_inv_nm", "d_nm", "intensity"} <= set(doc["rings"][0])
    sol = doc["solutions"][0]
    assert {"rank", "phase", "score", "rings_matched"} <= set(sol)
    assert sol["phase"] == "Cu" and sol["rank"] == 1
    assert {"d_nm", "hkl"} <= set(sol["rings_matched"][0])
    # Cu 111: d = a/sqrt(3) with a = 0.36149 nm (ICDD 04-0836, from memory; check-value sheet section 2)
    first = [m for m in sol["rings_matched"] if m["hkl"] == [1, 1, 1]][0]
    assert first["d_nm"] == pytest.approx(0.36149 / 3**0.5, rel=2e-3)


def test_rings_plot_is_a_png(files, tmp_path, capsys):
    png = tmp_path / "rings.png"
    rc, out, _ = _run(capsys, "rings", files["au"], "--scale", f"{SCALE:.6f}", "--phase", "Au", "--phase", "Al",
                      "--plot", png)
    assert rc == 0 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "#1 Au" in out


def _one_line_exit_2(rc, err, *words):
    assert rc == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    for w in words:
        assert w in err


def test_rings_refuses_a_file_that_is_not_a_calibration(files, tmp_path, capsys):
    bad = tmp_path / "notes.json"
    bad.write_text('{"scale": 0.05}', encoding="utf-8")
    rc, _, err = _run(capsys, "rings", files["au"], "--calibration", bad)
    _one_line_exit_2(rc, err, "notes.json", "not a saed calibration file")


def test_rings_refuses_a_single_crystal_pattern(tmp_path, capsys):
    from saed.synth.zone import detector_image
    from saed.simulate.zone import zone_pattern

    det = detector_image(zone_pattern(builtin_phase("Si"), [0, 1, 1]), shape_px=(512, 512),
                         scale_inv_nm_per_px=0.04, noise=True, rng=3)
    path = tmp_path / "si.tif"
    tifffile.imwrite(path, np.round(det.image).astype(np.uint16))
    rc, _, err = _run(capsys, "rings", path, "--phase", "Si")
    _one_line_exit_2(rc, err, "single-crystal", "saed index")


def test_no_rings_and_bad_files(tmp_path, capsys):
    noise = tmp_path / "noise.npy"
    np.save(noise, np.random.default_rng(0).poisson(200, (256, 256)).astype(np.float32))
    rc, _, err = _run(capsys, "rings", noise, "--phase", "Au")
    _one_line_exit_2(rc, err, "no rings")
    rc, _, err = _run(capsys, "calibrate", noise, "--standard", "Au", "--no-history")
    _one_line_exit_2(rc, err, "no rings")
    trunc = tmp_path / "cut.tif"
    tifffile.imwrite(trunc, np.zeros((256, 256), np.uint16) + 5)
    trunc.write_bytes(trunc.read_bytes()[:4000])
    rc, _, err = _run(capsys, "calibrate", trunc, "--standard", "Au", "--no-history")
    _one_line_exit_2(rc, err, "cut.tif")


def test_wrong_standard_says_which_rings(files, capsys):
    rc, _, err = _run(capsys, "calibrate", files["au"], "--standard", "Fe-bcc", "--no-history")
    _one_line_exit_2(rc, err, "do not fit Fe-bcc", "px")


@pytest.mark.parametrize("argv,words", [
    (["calibrate", "--standard", "Au"], ["IMAGE"]),
    (["calibrate", "x.tif"], ["--standard"]),
    (["calibrate", "x.tif", "--standard", "Au", "--list"], ["--list"]),
    (["calibrate", "x.tif", "--standard", "Au", "--history", "h", "--no-history"], ["--no-history"]),
    (["rings", "x.tif", "--scale", "0.05", "--camera-length", "100", "--pixel-pitch", "14"], ["--scale"]),
])
def test_contradicting_options(argv, words, capsys):
    rc, _, err = _run(capsys, *argv)
    _one_line_exit_2(rc, err, *words)


def test_nothing_written_when_the_analysis_fails(files, tmp_path, capsys):
    out = tmp_path / "cal.json"
    out.write_text("keep me", encoding="utf-8")
    rc, _, _ = _run(capsys, "calibrate", files["au"], "--standard", "Co-hcp", "--out", out, "--no-history")
    assert rc == 2 and out.read_text(encoding="utf-8") == "keep me"


def test_scale_and_calibration_file_contradict(calibrated, files, capsys):
    _, cal_path, _ = calibrated
    rc, _, err = _run(capsys, "rings", files["au"], "--scale", "0.05", "--calibration", cal_path)
    _one_line_exit_2(rc, err, "--scale", "--calibration")
    rc, _, err = _run(capsys, "rings", files["au"], "--voltage", "300", "--calibration", cal_path)
    _one_line_exit_2(rc, err, "300", "200")

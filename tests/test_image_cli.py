"""``saed spots``: summary, JSON, overlay, and one-line errors with exit status 2 for bad input."""

import json
import math

import numpy as np
import pytest
import tifffile
from PIL import Image

from saed.cli import main
from saed.synth import BeamStop, Detector, Scene, render_lattice


@pytest.fixture(scope="module")
def pattern_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("spots")
    pat, _ = render_lattice([36.5, 6.2], [-13.1, 44.0], center_px=(260.4, 249.7), detector=Detector(shape=(512, 512)),
                            scene=Scene(beam_stop=BeamStop(angle_deg=120.0, width_px=26.0, transmission=0.0)), rng=21)
    p = d / "coating_grain.tif"
    tifffile.imwrite(p, pat.image, photometric="minisblack")
    return p, pat


def test_summary_json_and_overlay(pattern_file, tmp_path, capsys):
    path, pat = pattern_file
    js, png = tmp_path / "s.json", tmp_path / "s.png"
    assert main(["spots", str(path), "--scale", "0.025", "--json", str(js), "--overlay", str(png)]) == 0
    out = capsys.readouterr().out
    assert "centre" in out and "g1" in out and "1/nm" in out and "d =" in out and "beam stop masked" in out
    doc = json.loads(js.read_text())
    assert doc["n_spots"] == len(doc["spots"]) > 50
    assert math.hypot(doc["center_px"][0] - 260.4, doc["center_px"][1] - 249.7) < 0.2
    s0 = doc["spots"][0]
    for key in ("x", "y", "intensity", "intensity_sigma", "snr", "sigma_xy_px", "size_px", "saturated", "on_lattice",
                "index", "g_inv_nm", "d_nm"):
        assert key in s0
    b = doc["basis"]
    assert b["g1_length_px"] == pytest.approx(math.hypot(36.5, 6.2), rel=0.002)
    assert b["d1_nm"] == pytest.approx(1 / (b["g1_length_px"] * 0.025), rel=1e-4)
    with Image.open(png) as im:
        assert im.size[0] > 500 and im.mode in ("RGBA", "RGB")


def test_uncalibrated_summary_says_so(pattern_file, capsys):
    path, _ = pattern_file
    assert main(["spots", str(path)]) == 0
    out = capsys.readouterr().out
    assert "uncalibrated" in out and "1/nm per px" not in out


@pytest.mark.parametrize("make,match", [
    (lambda p: np.save(p, np.zeros((64, 64), np.uint16)), "every pixel is zero"),
    (lambda p: np.save(p, np.full((64, 64), np.nan, np.float32)), "NaN"),
    (lambda p: np.save(p, np.ones((1, 64), np.uint16)), "1x64"),
    (lambda p: np.save(p, np.full((64, 64), 65535, np.uint16)), "same value"),
])
def test_bad_images_exit_2_with_one_line(tmp_path, capsys, make, match):
    p = tmp_path / "bad.npy"
    make(p)
    assert main(["spots", str(p)]) == 2
    err = capsys.readouterr().err
    assert match in err and err.count("\n") == 1 and "Traceback" not in err


def test_truncated_tiff_and_rgb(pattern_file, tmp_path, capsys):
    path, _ = pattern_file
    cut = tmp_path / "cut.tif"
    cut.write_bytes(path.read_bytes()[:40000])
    assert main(["spots", str(cut)]) == 2
    err = capsys.readouterr().err
    assert "truncated" in err and err.count("\n") == 1
    rgb = np.zeros((64, 64, 3), np.uint8)
    rgb[..., 0] = 200
    Image.fromarray(rgb).save(tmp_path / "rgb.png")
    assert main(["spots", str(tmp_path / "rgb.png")]) == 2
    assert "colour" in capsys.readouterr().err


def test_all_saturated_and_no_spots(tmp_path, capsys):
    img = np.full((128, 128), 4095, np.uint16)
    img[:20] = 50
    np.save(tmp_path / "sat.npy", img)
    assert main(["spots", str(tmp_path / "sat.npy")]) == 2
    assert "saturated" in capsys.readouterr().err
    noise = np.random.default_rng(0).poisson(60.0, (128, 128)).astype(np.uint16)
    np.save(tmp_path / "blank.npy", noise)
    js = tmp_path / "blank.json"
    assert main(["spots", str(tmp_path / "blank.npy"), "--json", str(js)]) == 0
    doc = json.loads(js.read_text())
    assert doc["spots"] == [] and doc["basis"] is None and any("no spots" in n for n in doc["notes"])
    assert "no spots" in capsys.readouterr().err


def test_frame_and_mask_options(pattern_file, tmp_path, capsys):
    path, pat = pattern_file
    stack = np.stack([np.random.default_rng(1).poisson(50, pat.image.shape).astype(np.uint16), pat.image])
    tifffile.imwrite(tmp_path / "stack.tif", stack, photometric="minisblack")
    js = tmp_path / "f.json"
    assert main(["spots", str(tmp_path / "stack.tif"), "--frame", "1", "--json", str(js)]) == 0
    n_all = json.loads(js.read_text())["n_spots"]
    assert n_all > 50
    assert main(["spots", str(tmp_path / "stack.tif"), "--frame", "2"]) == 2
    assert "frame 2 does not exist" in capsys.readouterr().err
    mask = np.zeros(pat.image.shape, np.uint8)
    mask[:, :256] = 255  # ignore the left half
    Image.fromarray(mask).save(tmp_path / "mask.png")
    assert main(["spots", str(tmp_path / "stack.tif"), "--frame", "1", "--mask", str(tmp_path / "mask.png"),
                 "--json", str(js)]) == 0
    doc = json.loads(js.read_text())
    assert all(s["x"] > 250 for s in doc["spots"]) and doc["n_spots"] < 0.7 * n_all
    Image.fromarray(mask[:100]).save(tmp_path / "small.png")
    assert main(["spots", str(path), "--mask", str(tmp_path / "small.png")]) == 2
    assert "the mask is" in capsys.readouterr().err
    assert main(["spots", str(path), "--overlay", str(tmp_path / "nofolder" / "o.png")]) == 2
    assert "does not exist" in capsys.readouterr().err

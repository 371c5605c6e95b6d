"""The holder's alpha-axis direction, stored per camera length with the calibration (issue 15, item 11).

The direction is what the operator measured (common practice: tilt alpha and watch which way a
Kikuchi band or the specimen image moves); saed only stores and uses it. Check values are
geometry written here: a rotation vector of length theta about the in-plane axis at azimuth phi
splits onto the alpha axis (azimuth a) and the beta axis (a + 90 deg) as theta cos(phi - a) and
theta sin(phi - a) (small-angle decomposition of a rotation vector; common practice).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import tifffile

from saed import physics
from saed.calibration import Calibration, read_calibration_file, write_calibration_file
from saed.calibrate.history import list_calibrations, store_calibration
from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.synth.rings import ring_pattern


def test_calibration_file_keeps_the_alpha_axis(tmp_path):
    p = tmp_path / "cal.json"
    write_calibration_file(Calibration(0.05, 200.0, alpha_axis_deg=-28.0), p)
    assert json.loads(p.read_text())["alpha_axis_deg"] == pytest.approx(332.0)
    assert read_calibration_file(p).alpha_axis_deg == pytest.approx(332.0)
    d = json.loads(p.read_text())
    d["alpha_axis_deg"] = "north"
    p.write_text(json.dumps(d))
    with pytest.raises(InputError, match="alpha_axis_deg"):
        read_calibration_file(p)


def test_history_keeps_one_alpha_axis_per_camera_length(tmp_path):
    store_calibration(Calibration(0.0558, 200.0, pixel_pitch_um=14.0, alpha_axis_deg=31.0, date="2026-01-05T10:00:00"),
                      tmp_path, nominal_camera_length_mm=100)
    store_calibration(Calibration(0.0280, 200.0, pixel_pitch_um=14.0, alpha_axis_deg=77.5, date="2026-01-05T11:00:00"),
                      tmp_path, nominal_camera_length_mm=200)
    entries, _ = list_calibrations(tmp_path)
    got = {round(e.label_mm): e.calibration.alpha_axis_deg for e in entries}
    assert got == {100: pytest.approx(31.0), 200: pytest.approx(77.5)}


def test_calibrate_stores_the_alpha_axis_and_index_uses_it(tmp_path, capsys):
    from saed.cli import main
    from saed.synth.kinematic import synthetic_image

    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    pat = ring_pattern([builtin_phase("Au")], shape_px=(448, 448), scale_inv_nm_per_px=scale, graininess=0.2, rng=4)
    au = tmp_path / "au.tif"
    tifffile.imwrite(au, pat.image.astype(np.float32))
    cal = tmp_path / "cal.json"
    assert main(["calibrate", str(au), "--standard", "Au", "--pixel-pitch", "14", "--alpha-axis", "40",
                 "--out", str(cal), "--history", str(tmp_path / "hist")]) == 0
    assert "alpha axis" in capsys.readouterr().out
    assert read_calibration_file(cal).alpha_axis_deg == pytest.approx(40.0)
    # a tilted Co-hcp pattern indexed with that calibration gives the mistilt as alpha/beta
    img, _ = synthetic_image(builtin_phase("Co-hcp"), [2, -1, -1, 0], scale_inv_nm_per_px=scale, tilt_deg=1.2,
                             tilt_toward_hkl=[0, 1, 0], image_shape=(512, 512), max_g_inv_nm=13.0, rng=8,
                             intensity_noise=0.1)
    p = tmp_path / "p.tif"
    tifffile.imwrite(p, img.image)
    out = tmp_path / "r.json"
    assert main(["index", str(p), "--calibration", str(cal), "--phase", "Co-hcp", "--json", str(out)]) == 0
    mt = json.loads(out.read_text())["solutions"][0]["mistilt"]
    assert mt["alpha_deg"] is not None
    phi = math.radians(mt["correction_axis_deg"])
    assert mt["alpha_deg"] == pytest.approx(mt["tilt_deg"] * math.cos(phi - math.radians(40.0)), abs=0.02)
    assert mt["beta_deg"] == pytest.approx(mt["tilt_deg"] * math.sin(phi - math.radians(40.0)), abs=0.02)

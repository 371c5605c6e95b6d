"""Issue 15.10: calibrate warns when the measured camera length is far from the nominal or from the history."""

import json
from pathlib import Path

import numpy as np
import pytest
import tifffile
from scipy import constants

from saed import physics
from saed.calibrate.checks import history_warning, nominal_warning
from saed.calibrate.history import HistoryEntry
from saed.calibration import Calibration
from saed.cli import main
from saed.crystal import builtin_phase
from saed.synth.rings import ring_pattern


def _cal(length_mm, *, pitch_um=14.0, kv=200.0):
    # scale = pitch / (lambda L), with the relativistic wavelength written out from scipy.constants (CODATA)
    ev = kv * 1e3 * constants.e
    lam_nm = 1e9 * constants.h / np.sqrt(2 * constants.m_e * ev * (1 + ev / (2 * constants.m_e * constants.c ** 2)))
    scale = pitch_um * 1e-3 / (lam_nm * length_mm)
    return Calibration(scale_inv_nm_per_px=scale, voltage_kv=kv, camera_length_mm=length_mm, pixel_pitch_um=pitch_um)


def _entry(length_mm, nominal_mm=100.0, **kw):
    return HistoryEntry(Path(f"L{length_mm}.json"), _cal(length_mm, **kw), nominal_mm, 0.1)


@pytest.mark.parametrize("measured, nominal, warns", [
    (166.0, 100.0, True),    # the case: 66 % off, a wrong pixel pitch or binning
    (111.0, 100.0, True),    # just beyond 10 %
    (89.0, 100.0, True),
    (109.0, 100.0, False),   # within 10 %
    (100.0, None, False),    # no nominal stated: nothing to compare
])
def test_nominal_warning(measured, nominal, warns):
    w = nominal_warning(_cal(measured), nominal)
    assert (w is not None) == warns
    if warns:
        assert "pixel-pitch" in w and f"{nominal:g} mm" in w and "\n" not in w


def test_history_warning_against_the_median_of_that_camera_length():
    hist = [_entry(100.0), _entry(100.2), _entry(99.9), _entry(160.0, nominal_mm=150.0)]
    assert history_warning(_cal(100.5), hist, nominal_camera_length_mm=100.0) is None      # +0.4 %
    w = history_warning(_cal(101.6), hist, nominal_camera_length_mm=100.0)      # median 100.0: +1.6 %
    assert w is not None and "+1.60 %" in w and "median 100.0 mm of 3 stored calibrations" in w
    assert history_warning(_cal(98.8), hist, nominal_camera_length_mm=100.0) is not None    # -1.2 %
    assert history_warning(_cal(99.2), hist, nominal_camera_length_mm=100.0) is None        # -0.8 %
    # another camera length's history does not count
    assert history_warning(_cal(152.0), hist, nominal_camera_length_mm=150.0) is not None  # 152 vs 160: -5 %
    assert history_warning(_cal(101.6), [], nominal_camera_length_mm=100.0) is None
    # without a pixel pitch: scales compared at one voltage and detector, not across voltages
    no_len = Calibration(scale_inv_nm_per_px=0.0500, voltage_kv=200.0)
    old = HistoryEntry(Path("x.json"), Calibration(scale_inv_nm_per_px=0.0490, voltage_kv=200.0), None, None)
    old300 = HistoryEntry(Path("y.json"), Calibration(scale_inv_nm_per_px=0.0490, voltage_kv=300.0), None, None)
    assert "scale" in history_warning(no_len, [old])
    assert history_warning(no_len, [old300]) is None


@pytest.fixture(scope="module")
def au_tif(tmp_path_factory):
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    pat = ring_pattern([builtin_phase("Au")], shape_px=(448, 448), scale_inv_nm_per_px=scale, rng=3)
    path = tmp_path_factory.mktemp("au") / "au.tif"
    tifffile.imwrite(path, np.round(pat.image).astype(np.uint16))
    return path


def test_calibrate_command_warns_and_still_files(au_tif, tmp_path, capsys):
    hist = tmp_path / "hist"
    base = ["calibrate", str(au_tif), "--standard", "Au", "--history", str(hist), "--camera-length", "100"]
    assert main(base + ["--pixel-pitch", "14"]) == 0
    out = capsys.readouterr().out
    assert "WARNING" not in out
    # the same pattern, a pixel pitch 4 % too large: the measured L moves 4 % against the stored one
    js = tmp_path / "c.json"
    assert main(base + ["--pixel-pitch", "14.56", "--json", str(js)]) == 0
    out = capsys.readouterr().out
    assert out.count("WARNING") == 1 and "stored calibration" in out
    assert len(json.loads(js.read_text())["warnings"]) == 1
    assert len(list(hist.glob("*.json"))) == 2  # a warning refuses nothing
    # a nominal of 60 mm for a pattern taken at 100 mm: the 66 % case
    assert main(["calibrate", str(au_tif), "--standard", "Au", "--camera-length", "60", "--pixel-pitch", "14",
                 "--no-history", "--json", "-"]) == 0
    cap = capsys.readouterr()
    assert json.loads(cap.out)["warnings"][0].startswith("measured camera length")
    assert "warning: measured camera length" in cap.err and cap.err.count("\n") == 1

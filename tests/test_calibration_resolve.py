"""The calibration resolution order, unit spellings and conversions, checked against hand-worked values.

Hand-worked values (wavelength at 200 kV 0.0025079 nm: CONTRACT.md; relativistic formula in
saed.physics, checked against scipy.constants in tests/test_physics.py):
- 200 kV, L = 100 mm, 14 um pixels: lambda L = 0.25079 nm mm; scale = 0.014 mm / 0.25079 nm mm
  = 0.055823 1/nm per px (reference/check-values.md section 8, worked example, convention [C]).
- 200 kV, L = 120 mm, 15 um pixels: 0.015 / (0.0025079 x 120) = 0.049842 1/nm per px (the demo).
- 1/Å = 10 1/nm; 1/m = 1e-9 1/nm (1 m = 1e9 nm); Å cm = 1e-1 nm x 1e1 mm = 1 nm mm.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import tifffile

import microscope_writers as w
from saed.calibrate.history import store_calibration
from saed.calibrate.resolve import SOURCES, resolve_calibration
from saed.calibration import Calibration
from saed.cli import main
from saed.errors import InputError
from saed.image.io import read_pattern
from saed.image.metadata import FileMetadata
from saed.units import (camera_constant_factor_nm_mm, parse_scale_text, reciprocal_factor_inv_nm,
                        scale_from_camera_constant_inv_nm_per_px, unit_kind)

DEMO_SCALE = 0.015 / (0.0025079 * 120)   # hand-worked above


# ----------------------------------------------------------------------------- units
@pytest.mark.parametrize("unit,factor", [("1/nm", 1.0), ("nm^-1", 1.0), ("nm⁻¹", 1.0), ("1 / nm", 1.0),
                                         ("1/Å", 10.0), ("1/A", 10.0), ("Å^-1", 10.0), ("1/m", 1e-9),
                                         ("1 / m", 1e-9), ("1/meters", 1e-9), ("1/um", 1e-3), ("1/pm", 1e3)])
def test_reciprocal_spellings(unit, factor):
    assert reciprocal_factor_inv_nm(unit) == pytest.approx(factor, rel=1e-12)
    assert unit_kind(unit) == "reciprocal"


@pytest.mark.parametrize("text,expected", [("0.0498", 0.0498), ("0.00498 1/Å", 0.0498), ("4.98e7 1/m", 0.0498),
                                           ("0.0498 nm^-1", 0.0498), ("0.0498 nm⁻¹", 0.0498),
                                           ("0.0498 1/nm per px", 0.0498)])
def test_scale_text_in_any_reciprocal_unit(text, expected):
    assert parse_scale_text(text)[0] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("text,what", [("0.12 nm", "real-space pixel size"), ("2.5 Å", "real-space"),
                                       ("0.25 nm mm", "camera constant"), ("3 furlongs", "unknown unit")])
def test_scale_text_refuses_real_space_and_camera_constants(text, what):
    with pytest.raises(InputError, match=what):
        parse_scale_text(text)


def test_camera_constant_is_told_from_a_per_pixel_scale():
    assert unit_kind("nm mm") == unit_kind("Å cm") == "camera constant"
    assert camera_constant_factor_nm_mm("Å cm") == pytest.approx(1.0)    # 0.1 nm x 10 mm
    assert camera_constant_factor_nm_mm("Å mm") == pytest.approx(0.1)
    # worked example: lambda L = 0.25079 nm mm with 14 um pixels -> 0.055823 1/nm per px
    assert scale_from_camera_constant_inv_nm_per_px(0.25079, 14.0) == pytest.approx(0.055823, rel=2e-5)


def test_binning_is_applied_once():
    # 7 um sensor pixels binned 2 are 14 um stored pixels: the worked example's 0.055823
    m = FileMetadata("DM4", (512, 512), voltage_kv=200, camera_length_mm=100, pixel_pitch_um=7, binning=2)
    assert m.effective_pixel_pitch_um == 14
    assert m.nominal_scale_inv_nm_per_px == pytest.approx(0.055823, rel=1e-4)
    # a stored reciprocal scale is already per binned pixel: used as it is
    m2 = FileMetadata("DM4", (512, 512), scale_inv_nm_per_px=0.05, pixel_pitch_um=7, binning=2)
    r = resolve_calibration("x.dm4", m2, history_folder="/nonexistent")
    assert r.calibration.scale_inv_nm_per_px == 0.05 and r.calibration.pixel_pitch_um == 14


# ----------------------------------------------------------------------------- the order
@pytest.fixture()
def dm_pattern(tmp_path):
    """A DM4 'pattern' with a stored scale of 0.05 1/nm (the pixels do not matter to the resolution)."""
    p = tmp_path / "p.dm4"
    w.write_dm(p, np.random.default_rng(1).integers(1, 100, (64, 64)).astype(np.uint16), version=4, scale=0.05,
               units="1/nm", voltage_v=200000, mode="DIFFRACTION", camera_length_mm=120)
    return p


def _cal_file(path, scale, voltage=200.0):
    path.write_text(json.dumps({"format": "saed-calibration-1", "scale_inv_nm_per_px": scale, "voltage_kv": voltage}))
    return path


def test_each_level_beats_the_ones_below(tmp_path, dm_pattern):
    meta = read_pattern(dm_pattern)[1]
    hist = tmp_path / "hist"
    store_calibration(Calibration(0.0502, 200.0, date="2026-11-30T10:00:00", standard="Au"), hist,
                      nominal_camera_length_mm=120)

    def res(**kw):
        return resolve_calibration(dm_pattern, meta, history_folder=hist, **kw)

    r = res()
    assert (r.source, r.calibration.scale_inv_nm_per_px) == ("file metadata", pytest.approx(0.05, rel=1e-6))
    assert any("agrees within 0.40 %" in n for n in r.notes)   # 0.0502 vs 0.05: 0.4 %
    _cal_file(tmp_path / "p.json", 0.051)
    r = res()
    assert (r.source, r.calibration.scale_inv_nm_per_px) == ("sidecar", 0.051)
    assert any("2.0 % from the sidecar" in x for x in r.warnings)   # |0.05 - 0.051| / 0.051 = 1.96 %
    r = res(calibration_file=_cal_file(tmp_path / "cal.json", 0.052))
    assert (r.source, r.calibration.scale_inv_nm_per_px) == ("calibration file", 0.052)
    r = res(scale_inv_nm_per_px=0.053)
    assert (r.source, r.calibration.scale_inv_nm_per_px) == ("option", 0.053)
    assert any("5.7 % from the --scale" in x for x in r.warnings)   # |0.05 - 0.053| / 0.053 = 5.66 %
    assert set(SOURCES) >= {r.source}


def test_history_by_camera_length_and_voltage_and_the_one_percent_warning(tmp_path):
    hist = tmp_path / "hist"
    store_calibration(Calibration(0.0498, 200.0, pixel_pitch_um=15.0, date="2026-11-01T10:00:00", standard="Au"), hist,
                      nominal_camera_length_mm=120)
    store_calibration(Calibration(0.0700, 200.0, pixel_pitch_um=15.0, date="2026-11-02T10:00:00", standard="Au"), hist,
                      nominal_camera_length_mm=80)
    store_calibration(Calibration(0.0400, 300.0, pixel_pitch_um=15.0, date="2026-11-03T10:00:00", standard="Au"), hist,
                      nominal_camera_length_mm=120)
    # the file gives L and voltage but no pixel pitch: nothing to compute a scale from -> the history
    meta = FileMetadata("EMD", (512, 512), voltage_kv=200, camera_length_mm=120)
    r = resolve_calibration("x.emd", meta, history_folder=hist)
    assert r.source == "calibration history" and r.calibration.scale_inv_nm_per_px == pytest.approx(0.0498)
    # binned 2 now (30 um stored pixels) against a calibration made at 15 um: twice the scale per pixel
    meta2 = FileMetadata("EMD", (256, 256), voltage_kv=200, camera_length_mm=120, scale_inv_nm_per_px=0.0996,
                         pixel_pitch_um=15, binning=2)
    r2 = resolve_calibration("x.emd", meta2, history_folder=hist)
    assert r2.source == "file metadata" and not r2.warnings   # 0.0996 vs 2 x 0.0498: equal
    meta3 = FileMetadata("EMD", (512, 512), voltage_kv=200, camera_length_mm=120, scale_inv_nm_per_px=0.0510,
                         pixel_pitch_um=15)
    r3 = resolve_calibration("x.emd", meta3, history_folder=hist)
    assert r3.source == "file metadata" and r3.calibration.scale_inv_nm_per_px == 0.0510
    assert any("2.4 % from the file's metadata" in x and "--calibration" in x for x in r3.warnings)  # 0.0012/0.0498


def test_real_space_pixel_size_is_refused_as_a_diffraction_calibration(tmp_path):
    p = tmp_path / "img.dm4"
    w.write_dm(p, np.random.default_rng(2).integers(1, 100, (64, 64)).astype(np.uint16), version=4, scale=0.12,
               units="nm", voltage_v=200000, mode="IMAGING")
    meta = read_pattern(p)[1]
    assert meta.mode == "image" and meta.real_pixel_size_nm == pytest.approx(0.12)
    with pytest.raises(InputError, match=r"calibrated in real space \(0\.12 nm per px, image mode\)"):
        resolve_calibration(p, meta, history_folder=tmp_path)
    r = resolve_calibration(p, meta, scale_inv_nm_per_px=0.05)   # an explicit calibration wins, with a warning
    assert r.source == "option" and any("image mode" in x for x in r.warnings)


def test_a_json_beside_the_image_that_is_no_calibration_is_passed_over(tmp_path):
    img = tmp_path / "g.tif"
    tifffile.imwrite(img, np.random.default_rng(3).integers(1, 100, (64, 64)).astype(np.uint16))
    (tmp_path / "g.json").write_text(json.dumps({"image": "g.tif", "solutions": []}))   # an earlier --json
    r = resolve_calibration(img, read_pattern(img)[1], history_folder=tmp_path)
    assert r.source == "none (uncalibrated)" and any("not a saed calibration file" in n for n in r.notes)
    (tmp_path / "g.json").write_text('{"format": "saed-calibration-1", "scale_inv_nm_per_px": "x"}')
    with pytest.raises(InputError, match="sidecar"):
        resolve_calibration(img, None)


def test_an_implausible_scale_in_the_file_is_not_used(tmp_path):
    meta = FileMetadata("DM4", (512, 512), scale_inv_nm_per_px=5.0, voltage_kv=200)   # 1/Å taken as 1/nm?
    r = resolve_calibration("x.dm4", meta, history_folder=tmp_path)
    assert r.source == "none (uncalibrated)" and any("outside the plausible" in x for x in r.warnings)


def test_voltage_option_against_the_file(tmp_path, dm_pattern):
    meta = read_pattern(dm_pattern)[1]
    r = resolve_calibration(dm_pattern, meta, voltage_kv=300, history_folder=tmp_path)
    assert r.calibration.voltage_kv == 300 and any("300 kV differs from the 200 kV" in x for x in r.warnings)


# ----------------------------------------------------------------------------- the commands
def test_index_and_spots_say_where_the_calibration_came_from(tmp_path, dm_pattern, capsys):
    out = tmp_path / "s.json"
    assert main(["spots", str(dm_pattern), "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["calibration_source"] == "file metadata" and doc["scale_inv_nm_per_px"] == pytest.approx(0.05)
    assert doc["file_metadata"]["format"] == "DM4" and doc["file_metadata"]["camera_length_mm"] == 120
    assert "(file metadata: DM4 scale 0.05 1/nm per px)" in capsys.readouterr().out
    assert main(["spots", str(dm_pattern), "--scale", "0.0006 1/Å", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["calibration_source"] == "option" and doc["scale_inv_nm_per_px"] == pytest.approx(0.006)
    assert "warning: the file's metadata give 0.05 1/nm per px" in capsys.readouterr().out
    assert main(["spots", str(dm_pattern), "--uncalibrated", "--json", str(out)]) == 0
    assert json.loads(out.read_text())["calibration_source"] == "none (uncalibrated)"


def test_image_mode_file_is_refused_in_one_line(tmp_path, capsys):
    p = tmp_path / "img.dm3"
    w.write_dm(p, np.random.default_rng(2).integers(1, 100, (64, 64)).astype(np.uint16), version=3, scale=0.3,
               units="nm", voltage_v=200000, mode="IMAGING")
    assert main(["index", str(p), "--phase", "Co-fcc"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "real space" in err and "--scale or --calibration" in err


def test_calibrate_takes_voltage_pitch_and_camera_length_from_the_file(tmp_path, capsys):
    from saed.crystal import builtin_phase
    from saed.synth.rings import ring_pattern

    # worked example above: 200 kV, L = 100 mm, 7 um sensor pixels binned 2 = 14 um -> 0.055823 1/nm per px
    pat = ring_pattern([builtin_phase("Au")], shape_px=(384, 384), scale_inv_nm_per_px=0.055823, rng=4)
    p = tmp_path / "au.dm4"
    w.write_dm(p, np.clip(pat.image, 0, 65535).astype(np.uint16), version=4, voltage_v=200000, mode="DIFFRACTION",
               camera_length_mm=100, pixel_size_um=7, binning=2)
    out = tmp_path / "c.json"
    assert main(["calibrate", str(p), "--standard", "Au", "--no-history", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["voltage_kv"] == 200 and doc["pixel_pitch_um"] == 14        # binned pitch, from the file
    assert doc["camera_length_mm"] == pytest.approx(100.0, rel=2e-3)
    assert doc["calibration_source"] == "file metadata"                       # the nominal L, pitch and voltage
    assert abs(doc["scale_change_from_source_pct"]) < 0.2
    assert "nominal 100 mm" in capsys.readouterr().out


def test_the_alpha_axis_of_the_camera_length_comes_with_the_history(tmp_path):
    """The holder's alpha-axis azimuth is measured per camera length and stored with its calibration
    (issue 15 item 11): a pattern calibrated from the history, or from its own metadata at a camera
    length the history knows, keeps it; the ellipse of the entry too."""
    from saed.calibration import Ellipse

    hist = tmp_path / "hist"
    ell = Ellipse(1.012, 30.0)
    store_calibration(Calibration(0.0498, 200.0, pixel_pitch_um=15.0, date="2026-11-01T10:00:00", standard="Au",
                                  ellipse=ell, alpha_axis_deg=302.0), hist, nominal_camera_length_mm=120)
    meta = FileMetadata("EMD", (512, 512), voltage_kv=200, camera_length_mm=120)
    r = resolve_calibration("x.emd", meta, history_folder=hist)
    assert r.source == "calibration history"
    assert r.calibration.alpha_axis_deg == 302.0 and r.calibration.ellipse == ell
    meta2 = FileMetadata("EMD", (512, 512), voltage_kv=200, camera_length_mm=120, scale_inv_nm_per_px=0.0500,
                         pixel_pitch_um=15)
    r2 = resolve_calibration("x.emd", meta2, history_folder=hist)
    assert r2.source == "file metadata" and r2.calibration.scale_inv_nm_per_px == 0.0500
    assert r2.calibration.alpha_axis_deg == 302.0
    assert any("alpha tilt axis at 302 deg" in n for n in r2.notes)
    # another camera length: the image turns with it, so no axis is carried over
    meta3 = FileMetadata("EMD", (512, 512), voltage_kv=200, camera_length_mm=80, scale_inv_nm_per_px=0.07,
                         pixel_pitch_um=15)
    assert resolve_calibration("x.emd", meta3, history_folder=hist).calibration.alpha_axis_deg is None


def test_tiff_resolution_tags_keep_the_rest_of_the_calibration(tmp_path):
    """A scale read from the TIFF's tags fills in the scale only: the alpha axis given stays."""
    from saed.image.measure import inspect_file

    ex = __import__("importlib.resources").resources.files("saed").joinpath("data/examples")
    img = tmp_path / "b.tif"
    img.write_bytes(ex.joinpath("grain_B_hcp.tif").read_bytes())
    scale = 0.02
    data = tifffile.imread(img)
    # ImageJ's convention (tifffile documentation): unit '1/nm' in the description, X/YResolution in pixels per unit
    tifffile.imwrite(img, data, imagej=True, resolution=(1.0 / scale, 1.0 / scale), metadata={"unit": "1/nm"})
    from saed.image.io import read_image_calibration

    assert read_image_calibration(img) == pytest.approx(scale)
    ins = inspect_file(img, Calibration(None, 200.0, alpha_axis_deg=12.5))
    assert ins.measured.calibration.alpha_axis_deg == 12.5
    assert ins.measured.calibration.scale_inv_nm_per_px == pytest.approx(scale)

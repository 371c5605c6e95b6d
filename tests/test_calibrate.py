"""Calibration from standards against outside values: the camera-constant worked example, Al rings, Si [011]."""

import math
import re

import numpy as np
import pytest
from scipy import constants

from saed import physics
from saed.calibration import Calibration, Ellipse, read_calibration_file
from saed.calibrate.history import list_calibrations, store_calibration
from saed.calibrate.rings import calibrate_from_rings
from saed.calibrate.zone import calibrate_from_zone
from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.synth.rings import ring_pattern

# Camera-constant worked example (check-value sheet section 8, computed from CODATA constants): 200 kV,
# L = 100 mm, 14 um pixels: lambda L = 0.25079 nm mm, scale 0.055823 1/nm per px, Au 111 ring at 76.08 px.
WORKED_LAMBDA_L_NM_MM = 0.25079
WORKED_AU111_RADIUS_PX = 76.08


@pytest.fixture(scope="module")
def worked_example():
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    pat = ring_pattern([builtin_phase("Au")], shape_px=(768, 768), scale_inv_nm_per_px=scale,
                       ellipse=Ellipse(1.008, 120.0), graininess=0.2, rng=21)
    return pat, calibrate_from_rings(pat.image, builtin_phase("Au"), voltage_kv=200.0, pixel_pitch_um=14.0)


def test_worked_example_camera_constant(worked_example):
    _, res = worked_example
    cal = res.calibration
    assert cal.camera_constant_nm_mm == pytest.approx(WORKED_LAMBDA_L_NM_MM, rel=1e-3)
    assert cal.implied_camera_length_mm == pytest.approx(100.0, rel=1e-3)
    assert cal.scale_inv_nm_per_px == pytest.approx(0.055823, rel=1e-3)


def test_worked_example_au111_ring_radius(worked_example):
    _, res = worked_example
    first = [r for r in res.ring_rows if r[1] == "111"]
    assert first and first[0][0] == pytest.approx(WORKED_AU111_RADIUS_PX, abs=0.08)


def test_worked_example_ellipse_and_centre(worked_example):
    pat, res = worked_example
    cal = res.calibration
    assert cal.ellipse.axis_ratio == pytest.approx(1.008, abs=0.002)
    assert math.dist(cal.center_px, pat.truth.center_px) < 0.1
    assert res.residual_pct < 0.2 and not res.unfit


def test_al_standard_with_two_percent_ellipticity():
    al = builtin_phase("Al")
    pat = ring_pattern([al], shape_px=(640, 640), scale_inv_nm_per_px=0.03, ellipse=Ellipse(1.02, 70.0), rng=5)
    res = calibrate_from_rings(pat.image, al)
    assert res.calibration.scale_inv_nm_per_px == pytest.approx(0.03, rel=1e-3)
    assert res.calibration.ellipse.axis_ratio == pytest.approx(1.02, abs=0.002)
    # d-spacings once calibrated: every matched ring within 0.2 % of its Al line.
    assert all(abs(r[4]) < 0.2 for r in res.ring_rows if r[4] is not None)


def test_calibration_without_pixel_pitch_has_no_camera_length():
    au = builtin_phase("Au")
    pat = ring_pattern([au], shape_px=(384, 384), scale_inv_nm_per_px=0.06, rng=4)
    cal = calibrate_from_rings(pat.image, au).calibration
    assert cal.implied_camera_length_mm is None and cal.camera_constant_nm_mm is None


@pytest.mark.parametrize("rotation_deg", [23.0, 61.0])
def test_si_011_single_crystal_against_the_codata_lattice_parameter(rotation_deg):
    # Si [011] zone pattern rendered at 200 kV, L = 100 mm, 14 um pixels; the calibration found from it must
    # give d(111) = a / sqrt(3) with a = CODATA 'lattice parameter of silicon' (scipy.constants, in m).
    from saed.synth.zone import detector_image
    from saed.simulate.zone import zone_pattern

    si = builtin_phase("Si")
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    zp = zone_pattern(si, [0, 1, 1])
    det = detector_image(zp, shape_px=(768, 768), scale_inv_nm_per_px=scale, center_px=(390.4, 377.7),
                         in_plane_rotation_deg=rotation_deg, noise=True, rng=2, double_diffraction_strength=0.1)
    res = calibrate_from_zone(det.image, si, [0, 1, 1], voltage_kv=200.0, pixel_pitch_um=14.0)
    a_nm = constants.physical_constants["lattice parameter of silicon"][0] * 1e9
    rows111 = [r for r in res.ring_rows if [abs(int(v)) for v in re.findall(r"-?\d", r[1])] == [1, 1, 1]]
    assert len(rows111) == 4  # 11-1, -11-1 and their Friedel mates
    for r in rows111:
        # Poisson noise of the frame alone spreads d(111) by up to 6e-4 over seeds 0-3 (measured with both the
        # old and the synth detector renderer), so 1e-3 is the tolerance that a correct calibration meets
        assert r[3] == pytest.approx(a_nm / math.sqrt(3), rel=1e-3)
    assert res.calibration.implied_camera_length_mm == pytest.approx(100.0, rel=1e-3)
    assert res.calibration.ellipse.axis_ratio < 1.002


def test_zone_of_the_wrong_standard_is_refused():
    from saed.synth.zone import detector_image
    from saed.simulate.zone import zone_pattern

    zp = zone_pattern(builtin_phase("Fe-bcc"), [0, 0, 1])  # square lattice of 110 spots
    det = detector_image(zp, shape_px=(512, 512), scale_inv_nm_per_px=0.04, noise=True, rng=1)
    with pytest.raises(InputError, match="does not match Si"):
        calibrate_from_zone(det.image, builtin_phase("Si"), [0, 1, 1])


@pytest.mark.parametrize("truth,standard,says", [
    ("Si", "Au", "Au 200"),          # diamond rings fit fcc except the strong 200: named as missing
    ("Co-hcp", "Au", "match no Au line"),
])
def test_rings_that_do_not_fit_the_standard_are_named(truth, standard, says):
    pat = ring_pattern([builtin_phase(truth)], shape_px=(448, 448), scale_inv_nm_per_px=0.045, rng=2)
    with pytest.raises(InputError, match="do not fit") as err:
        calibrate_from_rings(pat.image, builtin_phase(standard))
    assert says in str(err.value) and "\n" not in str(err.value)


def test_one_ring_is_not_enough():
    # One Gaussian ring on a falling background, written out here.
    yy, xx = np.mgrid[:300, :300]
    r = np.hypot(xx - 151.2, yy - 148.7)
    img = 300 * np.exp(-r / 150) + 400 * np.exp(-0.5 * ((r - 90) / 1.5) ** 2) + 50
    img = np.random.default_rng(1).poisson(img).astype(np.float32)
    with pytest.raises(InputError, match="only one ring"):
        calibrate_from_rings(img, builtin_phase("Au"))


def test_history_groups_by_camera_length_newest_first(tmp_path):
    def cal(scale, date):
        return Calibration(scale, 200.0, pixel_pitch_um=14.0, standard="Au", date=date)

    store_calibration(cal(0.0558, "2026-01-05T10:00:00+00:00"), tmp_path, nominal_camera_length_mm=100)
    store_calibration(cal(0.0556, "2026-03-01T09:00:00+00:00"), tmp_path, nominal_camera_length_mm=100)
    store_calibration(cal(0.0280, "2026-02-01T09:00:00+00:00"), tmp_path, nominal_camera_length_mm=200)
    (tmp_path / "notes.json").write_text("{not json", encoding="utf-8")
    entries, problems = list_calibrations(tmp_path)
    assert [round(e.label_mm) for e in entries] == [100, 100, 200]
    assert entries[0].calibration.date.startswith("2026-03") and entries[1].calibration.date.startswith("2026-01")
    assert len(problems) == 1 and "notes.json" in problems[0]
    for e in entries:  # every stored file is an ordinary calibration file
        assert read_calibration_file(e.path).scale_inv_nm_per_px == e.calibration.scale_inv_nm_per_px


def test_ring_pattern_given_with_zone_is_told_to_drop_it():
    pat = ring_pattern([builtin_phase("Au")], shape_px=(448, 448), scale_inv_nm_per_px=0.045, rng=9)
    with pytest.raises(InputError, match="drop --zone"):
        calibrate_from_zone(pat.image, builtin_phase("Au"), [0, 1, 1])

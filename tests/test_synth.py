"""The synthetic-pattern generator: counting statistics, geometry, and the zone-pattern adapter.

Check values:
* Poisson counting: mean = variance in electrons; with gain g and read noise r the counts have
  mean = offset + g N and variance = g^2 N + r^2 (common practice for counting detectors);
* the geometry convention of saed.simulate.geometry: position = centre + Rz(phi) xy / scale;
* fcc Co, a = 0.3545 nm (the built-in value): |g_111| = sqrt(3)/a = 4.886 1/nm, |g_200| = 2/a =
  5.642 1/nm, angle(111, 200) = 54.74 deg, and on [011] the 111 and 1-11 spots make 70.53 deg
  (arccos(1/3); from the cubic metric, computed here).
"""

import math

import numpy as np
import pytest

from saed.calibration import Ellipse
from saed.synth import BeamStop, Detector, Scene, distortion_matrix, render_lattice, render_pattern
from saed.synth.zone import render_zone, spot_lattice_basis


def test_counting_statistics_of_a_flat_field():
    det = Detector(shape=(300, 300), gain_counts_per_electron=2.5, read_noise_counts=3.0, dark_offset_counts=100.0,
                   dtype="float32")
    scene = Scene(haze_electrons=0.0, floor_electrons=40.0, direct_beam_electrons=0.0)
    pat = render_pattern(np.zeros((0, 2)), np.zeros(0), center_px=(150, 150), detector=det, scene=scene, rng=1)
    img = pat.image.astype(float)
    assert img.mean() == pytest.approx(100.0 + 2.5 * 40.0, rel=0.01)
    assert img.var() == pytest.approx(2.5**2 * 40.0 + 3.0**2, rel=0.03)


def test_spot_positions_intensities_and_saturation():
    det = Detector(shape=(128, 128), read_noise_counts=0.0, dark_offset_counts=0.0, dtype="float64")
    scene = Scene(haze_electrons=0.0, floor_electrons=0.0, direct_beam_electrons=0.0, spot_sigma_px=1.3)
    xy = np.array([[40.3, 50.8], [90.6, 70.1]])
    pat = render_pattern(xy, [2e5, 1e5], center_px=(64, 64), detector=det, scene=scene, rng=2)
    img = pat.image
    for (x, y), n in zip(xy, [2e5, 1e5]):
        win = img[int(y) - 8 : int(y) + 9, int(x) - 8 : int(x) + 9]
        yy, xx = np.mgrid[int(y) - 8 : int(y) + 9, int(x) - 8 : int(x) + 9]
        assert win.sum() == pytest.approx(n, rel=0.01)
        assert (win * xx).sum() / win.sum() == pytest.approx(x, abs=0.02)
        assert (win * yy).sum() / win.sum() == pytest.approx(y, abs=0.02)
    sat = render_pattern(xy, [1e5, 1e5], center_px=(64, 64), detector=Detector(shape=(128, 128)),
                         scene=Scene(direct_beam_electrons=5e7), rng=3)
    assert sat.direct_beam_saturated and sat.image.max() == 65535


def test_beam_stop_and_ellipse_geometry():
    stop = BeamStop(angle_deg=0.0, width_px=20.0, transmission=0.0)
    det = Detector(shape=(200, 200))
    pat = render_pattern(np.array([[150.0, 100.0], [100.0, 150.0]]), [1e4, 1e4], center_px=(100, 100), detector=det,
                         scene=Scene(beam_stop=stop), rng=4)
    assert pat.beam_stop_mask[100, 190] and pat.beam_stop_mask[100, 100] and not pat.beam_stop_mask[130, 150]
    assert pat.visible.tolist() == [False, True]
    ell = Ellipse(1.04, 30.0)
    d = distortion_matrix(ell)
    # D is the inverse of Ellipse.corrected_px, and area-preserving
    x, y = ell.corrected_px(*(d @ [37.0, -12.0]))
    assert (float(x), float(y)) == pytest.approx((37.0, -12.0))
    assert np.linalg.det(d) == pytest.approx(1.0)
    pat2, _ = render_lattice([30.0, 0.0], [0.0, 30.0], center_px=(100, 100), detector=det,
                             scene=Scene(ellipse=ell), max_radius_px=90, rng=5)
    np.testing.assert_allclose(pat2.extra["g1_detector_px"], d @ [30.0, 0.0])


def test_zone_adapter_follows_the_geometry_convention():
    pytest.importorskip("gemmi")
    from saed.crystal import builtin_phase
    from saed.simulate.zone import zone_pattern

    zp = zone_pattern(builtin_phase("Co-fcc"), [0, 1, 1], voltage_kv=200.0, max_g_inv_nm=9.0, thickness_nm=10.0)
    scale, phi, c = 0.025, 33.0, np.array([250.5, 240.25])
    r = render_zone(zp, scale_inv_nm_per_px=scale, center_px=c, rotation_deg=phi, detector=Detector(shape=(512, 512)),
                    min_intensity=1e-6, rng=6)
    p = math.radians(phi)
    rot = np.array([[math.cos(p), -math.sin(p)], [math.sin(p), math.cos(p)]])
    expect = (np.asarray(zp.xy_inv_nm)[r.rows] @ rot.T) / scale + c
    np.testing.assert_allclose(r.pattern.spot_xy_px, expect, atol=1e-9)
    a_nm = builtin_phase("Co-fcc").lattice.a_nm
    g1 = np.hypot(*r.g1_px) * scale
    g2 = np.hypot(*r.g2_px) * scale
    assert g1 == pytest.approx(math.sqrt(3) / a_nm, rel=1e-6)         # 111
    assert g2 == pytest.approx(math.sqrt(3) / a_nm, rel=1e-6)         # 1-11: same length
    ang = math.degrees(math.acos(r.g1_px @ r.g2_px / (np.hypot(*r.g1_px) * np.hypot(*r.g2_px))))
    assert ang == pytest.approx(math.degrees(math.acos(1 / 3)), abs=1e-6)  # 70.53 deg
    assert a_nm == pytest.approx(0.3545, abs=0.002)


def test_spot_lattice_basis_brute_force():
    g1, g2 = spot_lattice_basis(np.array([[2.0, 0.0], [0.0, 3.0], [2.0, 3.0], [4.0, 3.0], [-2.0, 6.0]]))
    assert sorted([np.hypot(*g1), np.hypot(*g2)]) == pytest.approx([2.0, 3.0])


def test_without_counting_noise_a_frame_holds_the_expected_counts():
    # counting_noise=False (the picture of a simulation): no Poisson or read noise, so the frame does not
    # depend on the seed, and a spot of N electrons sums to g N counts above the dark level (the pixel-
    # integrated Gaussian integrates to 1; common practice)
    det = Detector(shape=(96, 96), gain_counts_per_electron=2.0, read_noise_counts=5.0, dark_offset_counts=30.0,
                   dtype="float64", counting_noise=False)
    scene = Scene(haze_electrons=0.0, floor_electrons=0.0, direct_beam_electrons=0.0, spot_sigma_px=1.7)
    a = render_pattern([[40.3, 51.8]], [1234.5], center_px=(48, 48), detector=det, scene=scene, rng=1).image
    b = render_pattern([[40.3, 51.8]], [1234.5], center_px=(48, 48), detector=det, scene=scene, rng=2).image
    assert np.array_equal(a, b)
    assert float(np.sum(a - 30.0)) == pytest.approx(2.0 * 1234.5, rel=1e-6)
    assert float(a.min()) == pytest.approx(30.0)


def test_simulate_picture_and_the_zone_renderer_share_one_pixel_mapping():
    # saed simulate --image (detector_image) and render_zone place a reflection at the same pixel:
    # centre + Rz(phi) xy / scale (saed.simulate.geometry), here Al 200 at |g| = 2/a = 4.939 1/nm (a = 0.40495 nm,
    # ICDD 04-0787 from memory) turned by 30 deg
    from saed.crystal import builtin_phase
    from saed.simulate.zone import zone_pattern
    from saed.synth.zone import detector_image, zone_offsets_px

    zp = zone_pattern(builtin_phase("Al"), [0, 0, 1])
    det = detector_image(zp, shape_px=(256, 256), scale_inv_nm_per_px=0.05, center_px=(120.0, 130.0),
                         in_plane_rotation_deg=30.0)
    i = int(np.flatnonzero(np.all(zp.hkl == [2, 0, 0], axis=1))[0])
    off = zone_offsets_px(zp, scale_inv_nm_per_px=0.05, rotation_deg=30.0)[i]
    assert np.hypot(*off) == pytest.approx(2 / 0.40495 / 0.05, rel=1e-4)
    assert det.spot_xy_px[i] == pytest.approx(np.array([120.0, 130.0]) + off)
    assert not det.image.flags.writeable

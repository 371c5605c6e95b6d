"""Ring measurement: ellipse convention, radial profile, sub-pixel radii, centre and ellipse fits, bad input."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.calibration import Ellipse
from saed.crystal import builtin_phase
from saed.errors import ImageError
from saed.rings.profile import radial_profile
from saed.rings.peaks import find_profile_rings
from saed.rings.measure import measure_rings
from saed.synth.rings import ring_pattern


@settings(max_examples=50, deadline=None)
@given(q=st.floats(1.0, 1.05), angle=st.floats(0, 180), r=st.floats(10, 500), t=st.floats(0, 2 * math.pi))
def test_corrected_radius_of_a_point_on_the_distorted_ring(q, angle, r, t):
    # A ring of radius r drawn as an ellipse with semi-axes r sqrt(q) (long axis at `angle`) and r / sqrt(q):
    # its points, written out with the rotation here, must come back at corrected radius r.
    a, b = r * math.sqrt(q), r / math.sqrt(q)
    th = math.radians(angle)
    u, v = a * math.cos(t), b * math.sin(t)
    x, y = u * math.cos(th) - v * math.sin(th), u * math.sin(th) + v * math.cos(th)
    cx, cy = Ellipse(q, angle).corrected_px(x, y)
    assert math.hypot(float(cx), float(cy)) == pytest.approx(r, rel=1e-9)


@pytest.fixture(scope="module")
def au_pattern():
    # Au film, 640x640 detector, 1.2 % ellipticity at 35 deg, spotty rings, beam stop: geometry known exactly.
    return ring_pattern([builtin_phase("Au")], shape_px=(640, 640), scale_inv_nm_per_px=0.032,
                        ellipse=Ellipse(1.012, 35.0), graininess=0.3, rng=11)


def _truth_radii(pat):
    return np.array(pat.truth.ring_g_inv_nm[0]) / pat.truth.scale_inv_nm_per_px


def test_profile_rings_at_known_geometry_are_subpixel(au_pattern):
    t = au_pattern.truth
    prof = radial_profile(au_pattern.image, center_px=t.center_px, ellipse=t.ellipse, bin_px=0.5)
    rings = find_profile_rings(prof, r_min_px=40, r_max_px=300)
    truth = _truth_radii(au_pattern)
    assert len(rings) >= 5  # 111, 200, 220, 311, 222 lie inside 300 px
    err = [r - truth[np.argmin(np.abs(truth - r))] for r in rings.radius_px]
    assert np.max(np.abs(err)) < 0.08  # px


def test_centre_and_ellipse_from_the_rings_themselves(au_pattern):
    m = measure_rings(au_pattern.image)
    t = au_pattern.truth
    assert math.dist(m.center_px, t.center_px) < 0.05
    assert m.ellipse.axis_ratio == pytest.approx(1.012, abs=0.002)
    assert abs((m.ellipse.major_axis_angle_deg - 35.0 + 90) % 180 - 90) < 3.0
    truth = _truth_radii(au_pattern)
    err = [r - truth[np.argmin(np.abs(truth - r))] for r in m.rings.radius_px]
    assert np.median(np.abs(err)) < 0.05


def test_masked_pixels_take_no_part(au_pattern):
    img = np.array(au_pattern.image)
    mask = np.zeros(img.shape, bool)
    mask[400:470, 100:200] = True
    img[mask] = 60000.0  # a bright artefact under the mask
    m = measure_rings(img, mask=mask)
    assert math.dist(m.center_px, au_pattern.truth.center_px) < 0.1
    assert m.ellipse.axis_ratio == pytest.approx(1.012, abs=0.003)


def test_no_rings_in_noise():
    rng = np.random.default_rng(0)
    img = rng.poisson(300, (256, 256)).astype(np.float32)
    with pytest.raises(ImageError, match="no rings"):
        measure_rings(img)


def test_uniform_image_is_refused():
    with pytest.raises(ImageError, match="empty or uniform"):
        measure_rings(np.full((128, 128), 7.0, np.float32))


def _spot_pattern(shape=(512, 512), seed=3):
    """A single-crystal-like pattern written out here: a 2-D lattice of Gaussian spots on a haze."""
    rng = np.random.default_rng(seed)
    ny, nx = shape
    yy, xx = np.mgrid[:ny, :nx]
    c = np.array([nx / 2 + 3.3, ny / 2 - 2.1])
    img = 200 + 2000 * np.exp(-np.hypot(xx - c[0], yy - c[1]) / 60)
    g1, g2 = np.array([41.0, 7.0]), np.array([-13.0, 47.0])
    for m in range(-6, 7):
        for n in range(-6, 7):
            if m == n == 0:
                continue
            p = c + m * g1 + n * g2
            if 8 < p[0] < nx - 8 and 8 < p[1] < ny - 8:
                x0, y0 = int(p[0]) - 8, int(p[1]) - 8
                win = (slice(y0, y0 + 17), slice(x0, x0 + 17))
                img[win] += 3000 * np.exp(-0.5 * ((xx[win] - p[0]) ** 2 + (yy[win] - p[1]) ** 2) / 2.0**2)
    return rng.poisson(img).astype(np.float32)


def test_single_crystal_pattern_is_recognised():
    img = _spot_pattern()
    with pytest.raises(ImageError, match="single-crystal"):
        measure_rings(img)


@settings(max_examples=20, deadline=None)
@given(kind=st.sampled_from(["noise", "constant", "gradient", "spikes", "one_ring", "zeros_with_hot_pixel"]),
       size=st.integers(24, 96), seed=st.integers(0, 10_000))
def test_any_image_gives_rings_or_one_image_error(kind, size, seed):
    # Whatever the image, measure_rings returns a measurement or raises one SaedError (a one-line message).
    from saed.errors import SaedError

    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:size, :size]
    r = np.hypot(xx - size / 2, yy - size / 2)
    img = {
        "noise": rng.poisson(50, (size, size)).astype(float),
        "constant": np.full((size, size), 3.0),
        "gradient": xx * 10.0 + 1,
        "spikes": np.where(rng.random((size, size)) < 0.01, 60000.0, 10.0),
        "one_ring": 100 + 500 * np.exp(-0.5 * ((r - size / 4) / 1.2) ** 2) + rng.normal(0, 3, (size, size)),
        "zeros_with_hot_pixel": np.pad(np.full((1, 1), 9.0), ((size // 2, size - size // 2 - 1),) * 2),
    }[kind].astype(np.float32)
    try:
        m = measure_rings(img)
    except SaedError as exc:
        assert "\n" not in str(exc)
    else:
        assert len(m.rings) >= 1 and np.all(np.isfinite(m.rings.radius_px))

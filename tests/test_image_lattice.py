"""The 2-D lattice: Gauss reduction, basis finding with missing spots and outliers, refinement, Friedel centre.

Check values:
* a Gauss (Lagrange-Gauss) reduced basis holds the shortest non-zero lattice vector and satisfies
  |g1| <= |g2|, |g1.g2| <= |g1|^2/2 (C. F. Gauss, Disquisitiones Arithmeticae, art. 171; P. Q.
  Nguyen and D. Stehle, ACM Trans. Algorithms 5, 46 (2009)); the shortest vector is checked against
  a brute-force enumeration written out here;
* the hexagonal net (1, 0), (1/2, sqrt(3)/2) reduces to two vectors of length 1 at 60 deg
  (common practice).
"""

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.image.centre import friedel_center
from saed.image.lattice2d import find_basis, gauss_reduce, refine_lattice

def _unimodular(shears):
    """Integer 2x2 matrix of determinant +-1: a product of shears (and a swap when the shear is 0)."""
    m = np.eye(2, dtype=np.int64)
    for lower, k in shears:
        e = np.array([[1, 0], [k, 1]]) if lower else np.array([[1, k], [0, 1]])
        if k == 0:
            e = np.array([[0, 1], [1, 0]])
        m = e @ m
    return tuple(int(v) for v in m.ravel())


unimodular = st.lists(st.tuples(st.booleans(), st.integers(-3, 3)), max_size=5).map(_unimodular)


def _shortest_by_enumeration(a, b, reach=12):
    best = math.inf
    for m, n in itertools.product(range(-reach, reach + 1), repeat=2):
        if m or n:
            best = min(best, float(np.hypot(*(m * a + n * b))))
    return best


@settings(max_examples=200, deadline=None)
@given(ax=st.floats(5, 80), ay=st.floats(-40, 40), ang=st.floats(25, 155), ratio=st.floats(0.6, 2.5), t=unimodular)
def test_gauss_reduction_properties(ax, ay, ang, ratio, t):
    a = np.array([ax, ay])
    r = math.radians(ang)
    rot = np.array([[math.cos(r), -math.sin(r)], [math.sin(r), math.cos(r)]])
    b = ratio * rot @ a
    m = np.array(t, float).reshape(2, 2)
    u, v = m @ np.stack([a, b])  # the same lattice in a skewed basis
    g1, g2, tt = gauss_reduce(u, v)
    assert abs(round(np.linalg.det(tt))) == 1
    np.testing.assert_allclose(tt @ np.stack([u, v]), np.stack([g1, g2]), atol=1e-9 * np.abs(np.stack([u, v])).max())
    n1, n2 = np.hypot(*g1), np.hypot(*g2)
    assert n1 <= n2 * (1 + 1e-12)
    assert abs(g1 @ g2) <= 0.5 * n1 * n1 * (1 + 1e-9)
    assert g1 @ g2 >= -1e-9
    assert n1 == pytest.approx(_shortest_by_enumeration(a, b), rel=1e-9)


def test_hexagonal_net_reduces_to_60_degrees():
    a = np.array([1.0, 0.0])
    b = np.array([0.5, math.sqrt(3) / 2])
    g1, g2, _ = gauss_reduce(7 * a + 2 * b, 3 * a + b)  # det [[7,2],[3,1]] = 1
    assert np.hypot(*g1) == pytest.approx(1.0) and np.hypot(*g2) == pytest.approx(1.0)
    ang = math.degrees(math.acos(g1 @ g2))
    assert ang == pytest.approx(60.0)


def _lattice_points(g1, g2, reach=6, radius=260.0):
    pts, idx = [], []
    for m, n in itertools.product(range(-reach, reach + 1), repeat=2):
        v = m * g1 + n * g2
        if (m or n) and np.hypot(*v) <= radius:
            pts.append(v)
            idx.append((m, n))
    return np.array(pts), np.array(idx)


def test_basis_with_missing_spots_and_outliers():
    rng = np.random.default_rng(4)
    g1, g2 = np.array([41.0, 9.0]), np.array([-14.0, 47.0])
    pts, _ = _lattice_points(g1, g2)
    keep = rng.random(len(pts)) > 0.35                       # a third of the spots missing
    pts = pts[keep] + rng.normal(0, 0.15, (keep.sum(), 2))
    outliers = rng.uniform(-250, 250, (12, 2))               # another grain / noise
    allp = np.vstack([pts, outliers])[rng.permutation(len(pts) + 12)]
    found = find_basis(allp, tol_px=1.5)
    assert found is not None
    r1, r2, _ = gauss_reduce(g1, g2)
    f1, f2, _ = found
    assert np.hypot(*f1) == pytest.approx(np.hypot(*r1), rel=0.01)
    assert np.hypot(*f2) == pytest.approx(np.hypot(*r2), rel=0.01)


def test_coarsest_lattice_is_chosen_not_a_finer_one():
    # Only spots with m + n even: a centred arrangement whose true (primitive) basis is g1+g2, g1-g2.
    g1, g2 = np.array([30.0, 0.0]), np.array([0.0, 44.0])
    pts, idx = _lattice_points(g1, g2)
    even = (idx.sum(axis=1) % 2) == 0
    f1, f2, n = find_basis(pts[even], tol_px=1.0)
    assert n == even.sum()
    cell = abs(f1[0] * f2[1] - f1[1] * f2[0])
    assert cell == pytest.approx(2 * 30.0 * 44.0, rel=1e-6)


def test_refinement_recovers_centre_and_basis_with_uncertainties():
    rng = np.random.default_rng(8)
    c = np.array([512.3, 498.7])
    g1, g2 = np.array([52.1, 3.3]), np.array([-20.4, 61.0])
    pts, _ = _lattice_points(g1, g2, radius=400)
    sig = 0.2
    xy = pts + c + rng.normal(0, sig, pts.shape)
    fit = refine_lattice(xy, np.full(len(xy), sig), c + [1.5, -1.0], g1 * 1.01, g2 * 0.99, tol_px=4.0)
    assert fit.on_lattice.all()
    sc, s1, s2, sa = fit.sigmas()
    assert np.hypot(*(fit.center_px - c)) < 4 * sc + 1e-3
    r1, r2, _ = gauss_reduce(g1, g2)
    assert abs(np.hypot(*fit.g1_px) - np.hypot(*r1)) < 4 * s1
    assert abs(np.hypot(*fit.g2_px) - np.hypot(*r2)) < 4 * s2
    # the formal centre uncertainty is about sigma / sqrt(N) per axis
    assert sc == pytest.approx(sig / math.sqrt(len(xy)), rel=0.35)


def test_friedel_centre_from_pairs_only():
    rng = np.random.default_rng(2)
    c = np.array([300.25, 310.75])
    g = rng.uniform(-200, 200, (30, 2))
    xy = np.vstack([c + g, c - g]) + rng.normal(0, 0.1, (60, 2))
    xy = np.vstack([xy, rng.uniform(100, 500, (5, 2))])  # unpaired spots
    fr = friedel_center(xy, c + [3.0, -2.5], tol_px=8.0)
    assert fr.n_pairs == 30
    assert np.hypot(*(np.asarray(fr.center_px) - c)) < 0.05

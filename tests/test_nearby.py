"""saed.image.nearby (cell-grid neighbour queries) against scipy.spatial.cKDTree, the reference library.

The image stage used cKDTree until the start-up work of issue 15 item 13; these tests hold the numpy
replacement to the same answers on random point sets, including duplicates, points on cell edges and
non-finite rows.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from saed.image.nearby import close_pairs, k_nearest, nearest_other_distance, nearest_within, self_pairs

# rounded to 1e-6: the reference squares distances, so gaps of 1e-184 underflow to 0 there (hypot here does
# not), and such ties would test the reference's floating point, not the neighbour search
coords = st.floats(min_value=-50.0, max_value=50.0, allow_nan=False, allow_infinity=False).map(lambda v: round(v, 6))
point_sets = st.lists(st.tuples(coords, coords), min_size=0, max_size=60).map(
    lambda rows: np.array(rows, float).reshape(-1, 2))
# many points on a coarse grid: exact duplicates and distances equal to the radius
grid_sets = st.lists(st.tuples(st.integers(-5, 5), st.integers(-5, 5)), min_size=0, max_size=60).map(
    lambda rows: np.array(rows, float).reshape(-1, 2))
radii = st.sampled_from([0.0, 0.5, 1.0, 2.0, 3.7, 15.0])


def _reference_pairs(q, p, r):
    if len(q) == 0 or len(p) == 0:
        return set()
    lists = cKDTree(p).query_ball_point(q, r=r)
    return {(i, j) for i, js in enumerate(lists) for j in js}


def _off_boundary(pairs, q, p, r):
    """The pairs not within 1e-9 of the radius (there the last bit of two distance formulas decides)."""
    return {(i, j) for i, j in pairs if abs(float(np.hypot(*(q[i] - p[j]))) - r) > 1e-9}


@settings(max_examples=80, deadline=None)
@given(point_sets | grid_sets, point_sets | grid_sets, radii)
def test_close_pairs_are_the_reference_ball_queries(q, p, r):
    i, j, d = close_pairs(q, p, r)
    ours = set(zip(i.tolist(), j.tolist()))
    assert _off_boundary(ours, q, p, r) == _off_boundary(_reference_pairs(q, p, r), q, p, r)
    assert len(ours) == len(i)  # no pair twice
    if len(i):
        np.testing.assert_allclose(d, np.hypot(*(q[i] - p[j]).T))
        assert np.all(np.diff(i) >= 0)


@settings(max_examples=60, deadline=None)
@given(point_sets | grid_sets, radii)
def test_self_pairs_are_each_pair_once(p, r):
    i, j, _ = self_pairs(p, r)
    ref = {(a, b) for a, b in _reference_pairs(p, p, r) if a < b}
    assert _off_boundary(set(zip(i.tolist(), j.tolist())), p, p, r) == _off_boundary(ref, p, p, r)


@settings(max_examples=60, deadline=None)
@given(point_sets, point_sets, radii)
def test_nearest_within_matches_the_reference_nearest(q, p, r):
    idx, dist = nearest_within(q, p, r)
    if len(q) == 0:
        assert len(idx) == 0
        return
    if len(p) == 0:
        assert np.all(idx == -1)
        return
    d_ref, j_ref = cKDTree(p).query(q, k=1)
    clear = np.abs(d_ref - r) > 1e-9  # off the boundary (see _off_boundary)
    inside = d_ref <= r
    assert np.array_equal((idx >= 0)[clear], inside[clear])
    both = inside & (idx >= 0)
    np.testing.assert_allclose(dist[both], d_ref[both], atol=1e-12)  # the same distance (ties may pick another index)


@settings(max_examples=60, deadline=None)
@given(point_sets, st.integers(1, 6))
def test_k_nearest_distances_match_the_reference(p, k):
    dist, idx = k_nearest(p, k)
    n = len(p)
    if n < 2:
        assert np.all(np.isinf(dist))
        return
    d_ref, _ = cKDTree(p).query(p, k=min(k, n - 1) + 1)
    d_ref = np.asarray(d_ref).reshape(n, -1)[:, 1:]  # the reference's first neighbour is the point itself
    np.testing.assert_allclose(dist[:, : d_ref.shape[1]], d_ref, atol=1e-12)
    assert not np.any(idx == np.arange(n)[:, None])  # never oneself
    np.testing.assert_allclose(nearest_other_distance(p), d_ref[:, 0], atol=1e-12)


def test_non_finite_rows_have_no_neighbours():
    p = np.array([[0.0, 0.0], [np.nan, 1.0], [0.5, 0.0], [np.inf, 0.0]])
    i, j, _ = close_pairs(p, p, 1.0)
    assert set(zip(i.tolist(), j.tolist())) == {(0, 0), (0, 2), (2, 0), (2, 2)}


@pytest.mark.parametrize("n", [3000])
def test_a_detection_sized_set_matches_the_reference(n):
    """As many points as the spot detector's candidate limit allows, spread like peaks on a 2048 px frame."""
    rng = np.random.default_rng(7)
    p = rng.uniform(0, 2048, size=(n, 2))
    i, j, _ = self_pairs(p, 12.0)
    ref = {(a, b) for a, b in _reference_pairs(p, p, 12.0) if a < b}
    assert set(zip(i.tolist(), j.tolist())) == ref

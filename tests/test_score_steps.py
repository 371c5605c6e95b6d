"""The vectorised helpers of saed.index.score against library routines (numpy, written-out definitions).

Sources: numpy's weighted quantile (``method="inverted_cdf"``, Hyndman & Fan 1996 definition 1),
``np.linalg.cond`` and ``np.linalg.norm`` are the references; the Friedel-mate and nearest-row
definitions are written out here in plain Python.
"""

from __future__ import annotations

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from saed.index.score import _condition_2x2, _friedel_rows, _nearest, weighted_median
from saed.index.values import SPOT_KINDS, IndexedSpot, SpotKind

finite = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 40).flatmap(lambda n: st.tuples(
    arrays(np.float64, n, elements=st.sampled_from([-1.0, 0.0, 0.5, 2.0, 3.25]) | finite),
    arrays(np.float64, n, elements=st.floats(0.0, 10.0)))))
@example((np.array([0.0, -1.0]), np.array([5e-324, 0.0])))  # found by hypothesis: half a subnormal total is 0
def test_weighted_median_is_numpys_inverted_cdf_quantile(xw):
    x, w = xw
    if w.sum() <= 0:
        assert weighted_median(x, w) == x.min()  # no weight: the smallest value
    else:
        assert weighted_median(x, w) == float(np.quantile(x, 0.5, weights=w, method="inverted_cdf"))


@settings(max_examples=100, deadline=None)
@given(arrays(np.float64, (2, 2), elements=st.floats(-50, 50)))
def test_condition_2x2_matches_numpy(a):
    m = a @ a.T + 1e-3 * np.eye(2)  # symmetric positive definite, as the normal matrix of the fit
    assert np.isclose(_condition_2x2(m), np.linalg.cond(m), rtol=1e-6)


def test_condition_2x2_of_a_singular_matrix_is_infinite():
    assert _condition_2x2(np.array([[1.0, 2.0], [2.0, 4.0]])) == np.inf


@settings(max_examples=100, deadline=None)
@given(st.tuples(st.integers(0, 25), st.integers(1, 30)).flatmap(lambda nm: st.tuples(
    arrays(np.float64, (nm[0], 2), elements=finite), arrays(np.float64, (nm[1], 2), elements=finite))))
def test_nearest_row_and_distance(vp):
    v, p = vp
    j, d = _nearest(v, p)
    full = np.linalg.norm(v[:, None, :] - p[None, :, :], axis=2)
    assert np.array_equal(d, full[np.arange(len(v)), j])
    assert np.allclose(d, full.min(axis=1), rtol=0, atol=0)


@settings(max_examples=100, deadline=None)
@given(arrays(np.int64, st.tuples(st.integers(0, 40), st.just(3)), elements=st.integers(-4, 4), unique=False))
def test_friedel_rows(hkl):
    rows = {tuple(r) for r in hkl.tolist()}
    got = _friedel_rows(hkl)
    for i, r in enumerate(hkl.tolist()):
        mate = tuple(-v for v in r)
        if mate not in rows:
            assert got[i] == -1
        else:
            assert hkl[got[i]].tolist() == list(mate)


def test_spot_kinds_are_their_strings():
    """StrEnum members compare, hash, format and serialise as the strings consumers already use."""
    import json

    assert SPOT_KINDS == ("allowed", "double-diffraction", "forbidden", "holz-projection", "unindexed")
    assert json.dumps([SpotKind.DOUBLE_DIFFRACTION]) == '["double-diffraction"]'
    assert f"k-{SpotKind.HOLZ_PROJECTION}" == "k-holz-projection"
    assert {"allowed": 1}[SpotKind.ALLOWED] == 1
    spot = IndexedSpot(0, 1.0, 2.0, 3.0, None, None, "unindexed", 0.2, None, None)
    assert spot.kind is SpotKind.UNINDEXED


def test_a_misspelt_spot_kind_is_refused():
    import pytest

    with pytest.raises(ValueError):
        IndexedSpot(0, 1.0, 2.0, 3.0, None, None, "allowd", 0.2, None, None)


@settings(max_examples=200, deadline=None)
@given(arrays(np.int64, st.tuples(st.integers(1, 30), st.integers(1, 5)), elements=st.integers(-3, 3)))
def test_first_lexicographic_min_is_pythons_min_over_tuples(keys):
    from saed.index.tables import first_lexicographic_min

    assert first_lexicographic_min(keys) == min(range(len(keys)), key=lambda i: tuple(keys[i].tolist()))


def test_canonical_zone_and_orientation_as_written_with_tuples():
    """The readable zone of every zone up to index 3 of cubic, hexagonal and tetragonal phases, as the tuple rule
    (fewest negative indices then ascending; hexagonal: largest [UVTW] with W >= 0) picks it, written out here."""
    from saed.crystal import builtin_phase
    from saed.crystal.miller import direction_to_4
    from saed.index.tables import prepare_phases

    tables = prepare_phases([builtin_phase(n) for n in ("Co-fcc", "Co-hcp", "TiO2-rutile")], max_g_inv_nm=8.0)
    zones = [(u, v, w) for u in range(-3, 4) for v in range(-3, 4) for w in range(-3, 4) if (u, v, w) != (0, 0, 0)]
    rng = np.random.default_rng(7)
    for pt in tables.phases:
        rots = pt.laue[np.rint(np.linalg.det(pt.laue)).astype(int) == 1]
        for uvw in zones:
            cand = np.einsum("nij,j->ni", rots, np.array(uvw))
            if pt.phase.is_hexagonal:
                four = direction_to_4(cand)
                best = max(range(len(cand)), key=lambda k: (int(four[k][3] >= 0), tuple(int(v) for v in four[k])))
            else:
                best = min(range(len(cand)), key=lambda k: (int(np.sum(cand[k] < 0)), tuple(int(v) for v in cand[k])))
            u_in = rng.normal(size=(3, 3))
            zone, u_out = pt.canonical_orientation(uvw, u_in)
            assert zone == tuple(int(v) for v in cand[best])
            a = pt.phase.lattice.direct_matrix_nm
            assert np.allclose(u_out, u_in @ (a @ np.linalg.inv(rots[best].astype(float)) @ np.linalg.inv(a)))
            fam = np.einsum("nij,j->ni", pt.laue, np.array(uvw))
            assert pt.canonical_zone(uvw) == tuple(int(v) for v in max(map(tuple, fam.tolist())))

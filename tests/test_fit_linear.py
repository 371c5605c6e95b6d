"""The scorer's 2 x 2 map fit in closed form against numpy's least squares and SVD, written here.

The reference does it the textbook way: the similarity (and shift) by ``np.linalg.lstsq`` on the
weighted design, the general map by the normal equations, and the bounded ellipse through the polar
decomposition from ``np.linalg.svd`` and the eigen-decomposition from ``np.linalg.eigh``.
"""

import math

import numpy as np
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from saed.index.score import (DISTORTION_MIN_SPOTS, MAX_FITTED_DISTORTION, SHIFT_MIN_SPOTS, _fit_linear)


def _reference(p, v, w, *, distortion, t_max_px):
    sw = np.sqrt(w)
    n = len(p)
    use_shift = n >= SHIFT_MIN_SPOTS and t_max_px > 0
    cols = [np.concatenate([p[:, 0], p[:, 1]]), np.concatenate([-p[:, 1], p[:, 0]])]
    if use_shift:
        cols += [np.concatenate([np.ones(n), np.zeros(n)]), np.concatenate([np.zeros(n), np.ones(n)])]
    design = np.stack(cols, 1) * np.concatenate([sw, sw])[:, None]
    rhs = np.concatenate([v[:, 0], v[:, 1]]) * np.concatenate([sw, sw])
    sol = np.linalg.lstsq(design, rhs, rcond=None)[0]
    a, b = sol[:2]
    t = sol[2:4] if use_shift else np.zeros(2)
    if np.linalg.norm(t) > t_max_px:
        t = t * t_max_px / np.linalg.norm(t)
        a, b = np.linalg.lstsq(design[:, :2], rhs - np.concatenate([np.full(n, t[0]), np.full(n, t[1])])
                               * np.concatenate([sw, sw]), rcond=None)[0]
    sim = np.array([[a, -b], [b, a]])
    if not distortion or n < DISTORTION_MIN_SPOTS:
        return sim, t
    m = (p * w[:, None]).T @ p
    if np.linalg.cond(m) > 1e6:
        return sim, t
    lin = (((v - t) * w[:, None]).T @ p) @ np.linalg.inv(m)
    if np.linalg.det(lin) <= 0:
        return sim, t
    u, sv, vt = np.linalg.svd(lin)
    ev, q = np.linalg.eigh(vt.T @ np.diag(sv) @ vt)
    mean = math.sqrt(ev[0] * ev[1])
    lim = math.sqrt(1 + MAX_FITTED_DISTORTION)
    return (u @ vt) @ (q @ np.diag(np.clip(ev / mean, 1 / lim, lim) * mean) @ q.T), t


coord = st.floats(-60, 60, allow_nan=False)


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(coord, coord), min_size=2, max_size=40), st.floats(0, 2 * math.pi),
       st.floats(5.0, 20.0), st.floats(-0.08, 0.08), st.floats(0, math.pi), st.floats(-3, 3), st.floats(-3, 3),
       st.integers(0, 2**31 - 1), st.booleans(), st.floats(0.0, 2.0))
def test_closed_form_fit_matches_lstsq_and_svd(points, phi, scale, stretch, axis, tx, ty, seed, distortion, t_max):
    p = np.array(points, float)
    # spots that are not all on one point (the fit falls back to numpy's lstsq there; tested below)
    assume(np.ptp(p[:, 0]) + np.ptp(p[:, 1]) > 1.0)
    rng = np.random.default_rng(seed)
    rot = np.array([[math.cos(phi), -math.sin(phi)], [math.sin(phi), math.cos(phi)]])
    ax = np.array([math.cos(axis), math.sin(axis)])
    lin_true = scale * rot @ (np.eye(2) + stretch * np.outer(ax, ax))
    v = p @ lin_true.T + [tx, ty] + rng.normal(0, 0.3, p.shape)
    w = rng.uniform(0.05, 2.0, len(p))
    got_l, got_t = _fit_linear(p, v, w, distortion=distortion, t_max_px=t_max)
    ref_l, ref_t = _reference(p, v, w, distortion=distortion, t_max_px=t_max)
    tol = 1e-7 * (1 + np.abs(ref_l).max())
    assert np.allclose(got_l, ref_l, rtol=0, atol=tol), (got_l, ref_l)
    assert np.allclose(got_t, ref_t, rtol=0, atol=1e-7 * (1 + np.abs(ref_t).max())), (got_t, ref_t)


def test_spots_on_one_point_fall_back_to_the_minimum_norm_answer():
    p = np.array([[3.0, 4.0]] * 5)
    v = np.array([[30.0, 41.0]] * 5)
    w = np.ones(5)
    got_l, got_t = _fit_linear(p, v, w, distortion=True, t_max_px=1.0)
    ref_l, ref_t = _reference(p, v, w, distortion=True, t_max_px=1.0)
    assert np.allclose(got_l, ref_l) and np.allclose(got_t, ref_t)

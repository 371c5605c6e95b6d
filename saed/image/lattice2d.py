"""The 2-D lattice of a spot pattern: basis from difference vectors, Gauss reduction, least-squares refinement.

1. Candidate vectors (:func:`candidate_vectors`): the spot vectors from the centre and the difference
   vectors between the strongest spots. Lattice vectors recur between many spot pairs, so each is
   scored by how many other vectors (of either sign) fall within the tolerance; noise spots, a
   second grain or missing spots only thin the votes.
2. Basis (:func:`find_basis`): every non-collinear pair of candidates indexes all spots; the pair
   that puts most spots within the tolerance of a lattice point wins, and among pairs that index
   within 3 % as many, the one with the largest cell (a too-fine cell indexes everything too; the
   spot lattice is the coarsest lattice that holds the spots).
3. Gauss (Lagrange-Gauss) lattice reduction (:func:`gauss_reduce`) [1]_ [2]_ turns it into the
   shortest basis: |g1| <= |g2| and |g1 . g2| <= |g1|^2 / 2; the sign of g2 is then chosen so the
   angle lies in [60, 90] deg, and both signs are flipped if needed so that g1 points toward +x.
4. Refinement (:func:`refine_lattice`): with integer indices (m, n) per spot,
   ``p = c + m g1 + n g2`` is linear in (c, g1, g2), solved by weighted least squares over all
   indexed spots (weights 1/sigma_xy^2), re-indexed and re-solved; spots off the lattice by more
   than the tolerance are flagged. Uncertainties of c, |g1|, |g2| and the angle come from the
   covariance scaled by the residuals (reduced chi-square).

An elliptical distortion is a linear map about the centre, so the distorted spots still form a
lattice: the fit is done in detector pixels and the correction is applied to the result.

References
----------
.. [1] C. F. Gauss, *Disquisitiones Arithmeticae* (1801), art. 171 (reduction of binary quadratic forms).
.. [2] P. Q. Nguyen and D. Stehle, "Low-dimensional lattice basis reduction revisited",
   ACM Trans. Algorithms 5, 46 (2009), :doi:`10.1145/1597036.1597050`.
"""

from __future__ import annotations

import itertools
import logging
import math
from dataclasses import dataclass

import numpy as np

from saed.image.binning import median_of
from saed.image.nearby import close_pairs, k_nearest

__all__ = ["gauss_reduce", "candidate_vectors", "find_basis", "index_spots", "LatticeFit", "refine_lattice",
           "fit_spot_lattice"]

logger = logging.getLogger(__name__)


def gauss_reduce(a, b) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lagrange-Gauss reduction of the 2-D basis (a, b); returns (g1, g2, T) with [g1; g2] = T @ [a; b].

    T is an integer matrix of determinant +-1. The result has |g1| <= |g2|, |g1 . g2| <= |g1|^2 / 2
    and g1 . g2 >= 0 (angle between 60 and 90 deg).

    >>> g1, g2, t = gauss_reduce([1.0, 0.0], [7.3, 1.0])
    >>> g1.tolist(), [round(v, 6) for v in g2.tolist()], t.tolist()
    ([1.0, 0.0], [0.3, 1.0], [[1, 0], [-7, 1]])
    """
    u = np.asarray(a, np.float64).copy()
    v = np.asarray(b, np.float64).copy()
    tu = np.array([1, 0], np.int64)
    tv = np.array([0, 1], np.int64)
    if abs(u[0] * v[1] - u[1] * v[0]) <= 1e-12 * (u @ u + v @ v):
        raise ValueError("gauss_reduce: the vectors are parallel")
    for _ in range(200):
        if v @ v < u @ u:
            u, v, tu, tv = v, u, tv, tu
        mu = int(round(float(u @ v) / float(u @ u)))
        if mu == 0:
            break
        v = v - mu * u
        tv = tv - mu * tu
    if u @ v < 0:
        v, tv = -v, -tv
    return u, v, np.stack([tu, tv])


def candidate_vectors(xy_rel: np.ndarray, *, tol_px: float, max_candidates: int = 14, n_strong: int = 400,
                      neighbours: int = 6) -> np.ndarray:
    """(k, 2) short vectors that recur among the spot and difference vectors, best first.

    `xy_rel`: spot positions relative to the centre, ordered strongest first. The difference vectors
    are those from each of the `n_strong` strongest spots to its `neighbours` nearest ones (the short
    lattice vectors connect neighbours); the spot vectors from the centre are added.
    """
    p = np.asarray(xy_rel, np.float64)[:n_strong]
    n = len(p)
    if n < 2:
        return np.zeros((0, 2))
    k = min(neighbours, n - 1)
    _, nb = k_nearest(p, k)
    i = np.repeat(np.arange(n), k)
    j = nb.ravel()
    diff = p[j] - p[i]
    vec = np.vstack([p, diff])
    allv = np.vstack([vec, -vec])
    counts = np.bincount(close_pairs(vec, allv, tol_px)[0], minlength=len(vec))
    length = np.hypot(vec[:, 0], vec[:, 1])
    ok = length > 3.0 * tol_px
    vec, counts, length = vec[ok], counts[ok], length[ok]
    if len(vec) == 0:
        return np.zeros((0, 2))
    # Best first: most votes, then shortest; drop near-duplicates (either sign).
    order = np.lexsort((length, -counts))[:300]
    chosen: list[np.ndarray] = []
    ch = np.empty((max_candidates, 2))  # the chosen vectors as rows, for one vectorised test per candidate
    for k in order:
        v = vec[k]
        c = ch[:len(chosen)]
        # a near-duplicate (either sign) of one already chosen: |v - c| or |v + c| under 2 tol
        if len(chosen) and ((np.hypot(v[0] - c[:, 0], v[1] - c[:, 1]) < 2.0 * tol_px)
                            | (np.hypot(v[0] + c[:, 0], v[1] + c[:, 1]) < 2.0 * tol_px)).any():
            continue
        # Average the cluster for a better estimate.
        near = np.hypot(allv[:, 0] - v[0], allv[:, 1] - v[1]) <= tol_px
        chosen.append(allv[near].mean(axis=0) if near.any() else v)
        ch[len(chosen) - 1] = chosen[-1]
        if len(chosen) >= max_candidates:
            break
    # Also the shortest spot vectors themselves (first-order reflections), if not in yet.
    short = p[np.argsort(np.hypot(p[:, 0], p[:, 1]))][:6]
    for v in short:
        if np.hypot(*v) > 3.0 * tol_px and not any(min(np.hypot(*(v - c)), np.hypot(*(v + c))) < 2.0 * tol_px for c in chosen):
            chosen.append(v.copy())
    return np.array(chosen)


def index_spots(xy_rel, g1, g2, *, tol_px: float, max_index: int = 60):
    """Integer indices (n, 2) of spots on the lattice (g1, g2), the residual vectors (n, 2) and an on-lattice flag (n,)."""
    p = np.asarray(xy_rel, np.float64).reshape(-1, 2)
    basis = np.stack([np.asarray(g1, float), np.asarray(g2, float)])
    frac = p @ np.linalg.inv(basis)
    idx = np.rint(frac).astype(np.int64)
    resid = p - idx @ basis
    on = (np.hypot(resid[:, 0], resid[:, 1]) <= tol_px) & (np.abs(idx).max(axis=1) <= max_index) & np.any(idx != 0, axis=1)
    return idx, resid, on


def find_basis(xy_rel, *, tol_px: float, weights=None) -> tuple[np.ndarray, np.ndarray, int] | None:
    """A reduced basis (g1, g2) that indexes the most spots, and how many it indexes; None if no pair works.

    `xy_rel`: (n, 2) spot positions relative to the centre, strongest first; `weights`: (n,) how much
    each indexed spot counts (default 1).
    """
    p = np.asarray(xy_rel, np.float64).reshape(-1, 2)
    if len(p) < 2:
        return None
    w = np.ones(len(p)) if weights is None else np.asarray(weights, float)
    cand = candidate_vectors(p, tol_px=tol_px)
    if len(cand) < 2:
        return None
    pairs = []
    for a, b in itertools.combinations(range(len(cand)), 2):
        va, vb = cand[a], cand[b]
        cross = abs(va[0] * vb[1] - va[1] * vb[0])
        if cross < math.sin(math.radians(12.0)) * np.hypot(*va) * np.hypot(*vb):
            continue
        pairs.append((va, vb, cross))
    if not pairs:
        return None
    bases = np.array([[va, vb] for va, vb, _ in pairs])            # (k, 2, 2)
    areas = np.array([c for _, _, c in pairs])
    inv = np.linalg.inv(bases)
    frac = np.einsum("nj,kji->kni", p, inv)                         # (k, n, 2)
    idx = np.rint(frac)
    resid = p[None] - np.einsum("kni,kij->knj", idx, bases)
    on = (np.hypot(resid[..., 0], resid[..., 1]) <= tol_px) & (np.abs(idx).max(axis=2) <= 60) & np.any(idx != 0, axis=2)
    score = (on * w[None]).sum(axis=1)
    best = score.max()
    if best < 2:
        return None
    good = np.flatnonzero(score >= best - max(0.03 * best, 1e-9))
    k = good[np.argmax(areas[good])]
    g1, g2, _ = gauss_reduce(bases[k, 0], bases[k, 1])
    return g1, g2, int(on[k].sum())


@dataclass(frozen=True, eq=False)
class LatticeFit:
    """Refined lattice: centre (x, y), g1, g2 (px), their covariance (6x6 over cx, cy, g1x, g1y, g2x, g2y),
    per-spot indices and on-lattice flags, and the RMS residual of the on-lattice spots (px)."""

    center_px: np.ndarray
    g1_px: np.ndarray
    g2_px: np.ndarray
    cov: np.ndarray
    indices: np.ndarray
    on_lattice: np.ndarray
    rms_residual_px: float

    def sigmas(self) -> tuple[float, float, float, float]:
        """(sigma centre px, sigma |g1| px, sigma |g2| px, sigma angle deg) by linear propagation."""
        theta = np.concatenate([self.center_px, self.g1_px, self.g2_px])

        def derived(t):
            a, b = t[2:4], t[4:6]
            ang = math.degrees(math.atan2(abs(a[0] * b[1] - a[1] * b[0]), float(a @ b)))
            return np.array([np.hypot(*a), np.hypot(*b), ang])

        base = derived(theta)
        jac = np.zeros((3, 6))
        for k in range(6):
            h = 1e-6 * max(1.0, abs(theta[k]))
            t = theta.copy()
            t[k] += h
            jac[:, k] = (derived(t) - base) / h
        cov_d = jac @ self.cov @ jac.T
        sc = math.sqrt(max(0.5 * (self.cov[0, 0] + self.cov[1, 1]), 0.0))
        return sc, math.sqrt(max(cov_d[0, 0], 0)), math.sqrt(max(cov_d[1, 1], 0)), math.sqrt(max(cov_d[2, 2], 0))


def _solve(xy, sig, idx, center_obs, center_sigma):
    n = len(xy)
    a = np.zeros((2 * n, 6))
    a[0::2, 0] = 1.0
    a[1::2, 1] = 1.0
    a[0::2, 2] = idx[:, 0]
    a[1::2, 3] = idx[:, 0]
    a[0::2, 4] = idx[:, 1]
    a[1::2, 5] = idx[:, 1]
    y = xy.reshape(-1)
    w = np.repeat(1.0 / sig**2, 2)
    if center_obs is not None:
        a = np.vstack([a, [[1, 0, 0, 0, 0, 0], [0, 1, 0, 0, 0, 0]]])
        y = np.concatenate([y, center_obs])
        w = np.concatenate([w, [1.0 / center_sigma**2] * 2])
    aw = a * w[:, None]
    normal = aw.T @ a
    theta = np.linalg.solve(normal, aw.T @ y)
    r = y - a @ theta
    chi2 = float(np.sum(w * r * r))
    dof = max(len(y) - 6, 1)
    cov = np.linalg.inv(normal) * max(chi2 / dof, 1.0)
    return theta, cov


def refine_lattice(xy_px, sigma_px, center_px, g1_px, g2_px, *, tol_px: float, center_obs=None,
                   center_sigma_px: float = 1.0, iterations: int = 4) -> LatticeFit | None:
    """Least-squares refinement of centre and basis over all spots that index (see the module notes).

    `center_obs`: an independent observation of the centre (the unsaturated direct beam) with its
    1-sigma `center_sigma_px`, added as the (0, 0) point.
    """
    xy = np.asarray(xy_px, np.float64).reshape(-1, 2)
    sig = np.maximum(np.asarray(sigma_px, np.float64), 0.02)
    c = np.asarray(center_px, np.float64)
    g1, g2 = np.asarray(g1_px, float), np.asarray(g2_px, float)
    cov = np.eye(6)
    tol = tol_px
    for it in range(iterations):
        idx, resid, on = index_spots(xy - c, g1, g2, tol_px=tol)
        if on.sum() < 2 or (on.sum() < 3 and center_obs is None):
            return None
        # The centre and both vectors must be determined: the indices must not all lie on one line
        # (an affine rank of 3, or 2 through the origin when the direct beam is observed).
        design = idx[on].astype(float) if center_obs is not None else np.c_[np.ones(int(on.sum())), idx[on]]
        if np.linalg.matrix_rank(design) < design.shape[1]:
            return None
        try:
            theta, cov = _solve(xy[on], sig[on], idx[on].astype(float), center_obs, center_sigma_px)
        except np.linalg.LinAlgError:
            return None
        c, g1, g2 = theta[0:2], theta[2:4], theta[4:6]
        rr = np.hypot(*(xy[on] - c - idx[on] @ np.stack([g1, g2])).T)
        rms = float(np.sqrt(np.mean(rr**2)))
        tol = max(min(tol_px, 4.0 * rms + 3.0 * float(median_of(sig[on]))), 0.5 * tol_px, 1.0)
    # Keep the basis reduced (the refinement can move a near-tie such as a hexagonal net across the
    # boundary); the covariance follows the integer change of basis.
    g1, g2, t = gauss_reduce(g1, g2)
    if g1[0] < 0 or (g1[0] == 0 and g1[1] < 0):
        # one sign convention for reports: g1 points to +x (the pair (-g1, -g2) is the same basis)
        g1, g2, t = -g1, -g2, -t
    if not np.array_equal(t, np.eye(2, dtype=np.int64)):
        m = np.eye(6)
        m[2:6, 2:6] = np.kron(t.astype(float), np.eye(2))
        cov = m @ cov @ m.T
    idx, resid, on = index_spots(xy - c, g1, g2, tol_px=tol)
    rr = np.hypot(resid[on, 0], resid[on, 1])
    rms = float(np.sqrt(np.mean(rr**2))) if on.any() else float("nan")
    idx = np.where(on[:, None], idx, 0)
    return LatticeFit(center_px=c, g1_px=g1, g2_px=g2, cov=cov, indices=idx, on_lattice=on, rms_residual_px=rms)


def fit_spot_lattice(xy_px, sigma_px, center_guess_px, *, tol_px: float, order=None, center_tol_px: float | None = None,
                     center_obs=None, center_sigma_px: float = 1.0) -> LatticeFit | None:
    """Basis and refinement together, robust to a centre guess that is a few pixels off.

    The basis is looked for first with the spots taken from the centre guess (tolerance
    `center_tol_px`, default `tol_px`), then, if that indexes fewer than 90 % of the spots, from
    each of the three strongest spots (a spot is a lattice point; the centre then need not be known).
    The lattice point nearest the guess starts the refinement, which frees the centre. The fit that
    indexes the most spots is returned. `order`: spot indices strongest first.
    """
    xy = np.asarray(xy_px, np.float64).reshape(-1, 2)
    if len(xy) < 2:
        return None
    order = np.arange(len(xy)) if order is None else np.asarray(order)
    guess = np.asarray(center_guess_px, np.float64)
    refs = [(guess, center_tol_px if center_tol_px is not None else tol_px)]
    refs += [(xy[k], tol_px) for k in order[:3]]
    best = None
    for ref, tol in refs:
        found = find_basis(xy[order] - ref, tol_px=tol)
        if found is None:
            continue
        g1, g2, _ = found
        basis = np.stack([g1, g2])
        c_init = ref + np.rint((guess - ref) @ np.linalg.inv(basis)) @ basis
        fit = refine_lattice(xy, sigma_px, c_init, g1, g2, tol_px=max(tol_px, 0.02 * float(np.hypot(*g1))),
                             center_obs=center_obs, center_sigma_px=center_sigma_px)
        if fit is None:
            continue
        if best is None or fit.on_lattice.sum() > best.on_lattice.sum():
            best = fit
        if best.on_lattice.sum() >= 0.9 * len(xy):
            break
    if best is not None:
        best = _fix_half_lattice_origin(best, xy, sigma_px, guess, tol_px, center_obs, center_sigma_px)
    return best


def _fix_half_lattice_origin(fit: LatticeFit, xy, sigma_px, guess, tol_px, center_obs, center_sigma_px) -> LatticeFit:
    """A centre half a lattice vector off makes every index odd in one direction (the spots then look
    like the odd coset of a finer lattice). The pattern's own lattice contains its centre, so such a fit
    is moved by that vector to the coarser lattice, whichever of the two neighbouring points indexes
    more spots (then: nearer the guess)."""
    idx = fit.indices[fit.on_lattice]
    if len(idx) < 4:
        return fit
    g1, g2 = fit.g1_px, fit.g2_px
    for v, shift, basis in (((1, 0), g1, (2 * g1, g2)), ((0, 1), g2, (g1, 2 * g2)), ((1, 1), g1, (g1 + g2, g1 - g2))):
        if not np.all((idx @ np.array(v)) % 2 == 1):
            continue
        best = None
        for sign in (1.0, -1.0):
            f = refine_lattice(xy, sigma_px, fit.center_px + sign * shift, basis[0], basis[1], tol_px=tol_px,
                               center_obs=center_obs, center_sigma_px=center_sigma_px)
            if f is None:
                continue
            key = (int(f.on_lattice.sum()), -float(np.hypot(*(f.center_px - guess))))
            if best is None or key > best[0]:
                best = (key, f)
        if best is not None and best[0][0] >= 0.9 * fit.on_lattice.sum():
            logger.debug("centre moved by half a lattice vector to (%.2f, %.2f)", *best[1].center_px)
            return best[1]
    return fit

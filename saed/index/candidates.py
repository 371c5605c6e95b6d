"""Candidate (phase, zone axis, orientation, scale) from measured spot pairs, by table lookup.

A few short, strong, non-parallel spots of the measured pattern are paired ("seed pairs"); each
pair (|a|, |b|, angle) is looked up in every phase's table of allowed reflection pairs
(:mod:`saed.index.tables`): by |g1| within the calibration tolerance and the ratio within the
measurement tolerance when the pattern is calibrated, by the ratio alone when it is not
(the ratio method, e.g. Edington, *Practical Electron Microscopy in Materials Science* vol. 2,
1975, ch. 2). Every hit fixes the zone axis (h1 x h2, with the sign that makes U [uvw] = +z),
the orientation U and the scale. A vectorised quick check then asks how much of the measured
spot intensity falls on reciprocal-lattice points of the candidate, and the Laue-group copies
of each zone are merged, keeping the best.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np

from saed.image.binning import percentile_of
from saed.index.tables import IndexTables, PhaseIndexTable
from saed.readonly import freeze_in_place
from saed.vectors2d import spans_plane

__all__ = ["SpotSet", "Candidate", "spot_set", "seed_pairs", "find_candidates"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True, eq=False)
class SpotSet:
    """The measured spots as the matcher uses them (pixels, relative to the centre, ellipse-corrected).

    ``v_px`` (n, 2) vectors; ``r_px`` lengths; ``weight`` (n,) sums to 1 (square root of the
    intensity, halved for spots the image stage put off the lattice); ``sigma_px`` position
    uncertainty; ``strong`` spots eligible as seeds; ``v_seed_px`` the lattice-refined vector
    where the image stage assigned lattice indices (else the raw one).
    """

    v_px: np.ndarray
    r_px: np.ndarray
    intensity: np.ndarray
    weight: np.ndarray
    sigma_px: np.ndarray
    strong: np.ndarray
    v_seed_px: np.ndarray
    on_lattice: np.ndarray


@dataclass(frozen=True, eq=False)
class Candidate:
    """One orientation hypothesis: phase row, seed reflections, zone, U, scale and quick score."""

    phase_index: int
    i1: int
    i2: int
    zone_axis: tuple[int, int, int]
    canonical_zone: tuple[int, int, int]
    u_matrix: np.ndarray
    scale_inv_nm_per_px: float
    quick: float


def spot_set(measured) -> SpotSet:
    """Collect the measured spot vectors, weights and uncertainties from a MeasuredPattern."""
    v = np.asarray(measured.corrected_spot_vectors_px(), dtype=float).reshape(-1, 2)
    sp = measured.spots
    inten = np.asarray(sp.intensity, float)
    n = len(v)
    on_lat = np.ones(n, bool)
    v_seed = v.copy()
    basis = measured.basis
    if basis is not None and len(basis.on_lattice) == n:
        on_lat = np.asarray(basis.on_lattice, bool)
        idx = np.asarray(basis.indices, float)
        g1, g2 = measured.corrected_basis_px()
        lat_v = idx[:, :1] * np.asarray(g1)[None, :] + idx[:, 1:2] * np.asarray(g2)[None, :]
        use = on_lat & np.any(idx != 0, axis=1)
        # only where the lattice point agrees with the spot (a guard against a wrong basis)
        close = np.linalg.norm(lat_v - v, axis=1) <= np.maximum(2.0, 0.03 * np.linalg.norm(v, axis=1))
        v_seed[use & close] = lat_v[use & close]
    w = np.sqrt(np.clip(inten, 0.0, None))
    if n and w.sum() <= 0:
        w = np.ones(n)
    w = np.where(on_lat, w, 0.5 * w)
    w = w / w.sum() if n else w
    sig = np.asarray(sp.sigma_xy_px, float)
    sig = np.where(np.isfinite(sig) & (sig > 0), sig, 0.3)
    strong = np.zeros(n, bool)
    if n:
        ref = percentile_of(inten, 90.0) if n >= 3 else inten.max()
        strong = inten >= 0.12 * ref
    arrays = dict(v_px=v, r_px=np.linalg.norm(v, axis=1), intensity=inten, weight=w, sigma_px=sig, strong=strong,
                  v_seed_px=v_seed, on_lattice=on_lat)
    freeze_in_place(*arrays.values())
    return SpotSet(**arrays)


def seed_pairs(spots: SpotSet, *, max_seeds: int = 5, max_pairs: int = 8) -> list[tuple[np.ndarray, np.ndarray]]:
    """Pairs (a, b) of short, strong, non-parallel measured spot vectors (pixels), shortest first.

    Friedel mates and repeats of one direction are dropped, so each seed is a distinct row.
    """
    n = len(spots.r_px)
    if n < 2:
        return []
    order = np.argsort(spots.r_px, kind="stable")
    strong = [i for i in order if spots.strong[i] and spots.r_px[i] > 3.0]
    # strong spots first; weaker ones join when the strong ones are too few or all in one row
    cand = strong + [i for i in order if spots.r_px[i] > 3.0 and i not in set(strong)]
    seeds: list[int] = []
    for i in cand:
        vi = spots.v_seed_px[i]
        dup = False
        for j in seeds:
            vj = spots.v_seed_px[j]
            cos = float(vi @ vj) / (np.linalg.norm(vi) * np.linalg.norm(vj))
            if abs(cos) > math.cos(math.radians(4.0)) and abs(np.linalg.norm(vi) / np.linalg.norm(vj) - 1) < 0.03:
                dup = True
                break
        if not dup:
            seeds.append(int(i))
        if len(seeds) >= max_seeds and spans_plane(spots.v_seed_px[seeds]):
            break
    pairs = []
    for ai in range(len(seeds)):
        for bi in range(ai + 1, len(seeds)):
            a, b = spots.v_seed_px[seeds[ai]], spots.v_seed_px[seeds[bi]]
            if not spans_plane((a, b)):
                continue
            n_weak = int(not spots.strong[seeds[ai]]) + int(not spots.strong[seeds[bi]])
            pairs.append((n_weak, np.linalg.norm(a) + np.linalg.norm(b), ai, bi, a.copy(), b.copy()))
    pairs.sort(key=lambda t: (t[0], t[1], t[2], t[3]))  # strong pairs first, then the shortest
    out = pairs[:max_pairs]
    chosen = {(seeds[ai], seeds[bi]) for _, _, ai, bi, _, _ in out}
    # the brightest rows always seed too: bright double-diffraction spots of a second crystal, nearer the
    # centre than the first crystal's own rows, would otherwise take every seed (bcc [011] beside fcc [111])
    bright = _distinct_rows(spots, [i for i in np.argsort(-spots.intensity, kind="stable") if spots.r_px[i] > 3.0],
                            BRIGHT_SEEDS)
    extra = []
    for ai in range(len(bright)):
        for bi in range(ai + 1, len(bright)):
            i, j = sorted((bright[ai], bright[bi]), key=lambda k: spots.r_px[k])
            if (i, j) in chosen or (j, i) in chosen:
                continue
            a, b = spots.v_seed_px[i], spots.v_seed_px[j]
            if abs(a[0] * b[1] - a[1] * b[0]) / (np.linalg.norm(a) * np.linalg.norm(b)) >= math.sin(math.radians(12.0)):
                extra.append((0, 0.0, 0, 0, a.copy(), b.copy()))
    return [(a, b) for _, _, _, _, a, b in out + extra]


#: The brightest spots of this many distinct rows always form seed pairs among themselves.
BRIGHT_SEEDS = 3


def _distinct_rows(spots: SpotSet, order, n: int) -> list[int]:
    """The first `n` spots of `order` in distinct rows (Friedel mates and repeats of one direction dropped)."""
    out: list[int] = []
    for i in order:
        vi = spots.v_seed_px[i]
        if any(abs(float(vi @ spots.v_seed_px[j])) / (np.linalg.norm(vi) * np.linalg.norm(spots.v_seed_px[j]))
               > math.cos(math.radians(4.0)) for j in out):
            continue
        out.append(int(i))
        if len(out) >= n:
            break
    return out


def _range(sorted_vals: np.ndarray, lo: float, hi: float) -> tuple[int, int]:
    return int(np.searchsorted(sorted_vals, lo, "left")), int(np.searchsorted(sorted_vals, hi, "right"))


def _lookup(pt: PhaseIndexTable, a: np.ndarray, b: np.ndarray, *, scale: float | None, length_tol: float,
            ratio_tol: float, angle_tol_deg: float) -> np.ndarray:
    """Pair rows of `pt` matching measured vectors a -> h1, b -> h2 (pixels)."""
    ra, rb = float(np.linalg.norm(a)), float(np.linalg.norm(b))
    ang = math.degrees(math.acos(max(-1.0, min(1.0, float(a @ b) / (ra * rb)))))
    ratio = rb / ra
    if scale is not None:
        ga = ra * scale
        lo, hi = _range(pt.pair_g1, ga / (1 + length_tol), ga / (1 - length_tol))
        rows = np.arange(lo, hi)
        if len(rows) == 0:
            return rows
        r = pt.pair_g2[rows] / pt.pair_g1[rows]
        keep = (np.abs(r / ratio - 1) <= ratio_tol) & (np.abs(pt.pair_angle_deg[rows] - ang) <= angle_tol_deg)
        return rows[keep]
    lo, hi = _range(pt.ratio_sorted, ratio * (1 - ratio_tol), ratio * (1 + ratio_tol))
    rows = pt.by_ratio[lo:hi].astype(np.int64)
    if len(rows) == 0:
        return rows
    return rows[np.abs(pt.pair_angle_deg[rows] - ang) <= angle_tol_deg]


def _orientations(pt: PhaseIndexTable, rows: np.ndarray, a: np.ndarray, b: np.ndarray):
    """U (k, 3, 3), scale (k,), zone (k, 3) for pair rows mapping h1 -> a and h2 -> b.

    `a`, `b` are (k, 2) measured vectors (pixels), one per row.
    """
    i1 = pt.pair_i1[rows].astype(np.int64)
    i2 = pt.pair_i2[rows].astype(np.int64)
    g1c, g2c = pt.g_cart_inv_nm[i1], pt.g_cart_inv_nm[i2]
    sign = np.where(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0] > 0, 1.0, -1.0)
    zc = sign[:, None] * np.cross(g1c, g2c)
    zc /= np.linalg.norm(zc, axis=1, keepdims=True)
    e1 = g1c / np.linalg.norm(g1c, axis=1, keepdims=True)
    e2 = np.cross(zc, e1)
    crys = np.stack([e1, e2, zc], axis=1)  # rows: crystal vectors that go to detector x', y', z
    # in-plane: the rotation that best maps both g1 -> a and g2 -> b
    p2 = np.stack([np.einsum("ij,ij->i", g2c, e1), np.einsum("ij,ij->i", g2c, e2)], axis=1)
    th_a = np.arctan2(a[:, 1], a[:, 0])
    dth_b = np.arctan2(b[:, 1], b[:, 0]) - th_a - np.arctan2(p2[:, 1], p2[:, 0])
    dth_b = (dth_b + np.pi) % (2 * np.pi) - np.pi
    g1n, g2n = pt.g_inv_nm[i1], pt.g_inv_nm[i2]
    ra, rb = np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1)
    th = th_a + dth_b * rb * rb / (ra * ra + rb * rb)
    c, s = np.cos(th), np.sin(th)
    rz = np.zeros((len(rows), 3, 3))
    rz[:, 0, 0], rz[:, 0, 1], rz[:, 1, 0], rz[:, 1, 1], rz[:, 2, 2] = c, -s, s, c, 1.0
    u = np.einsum("nij,njk->nik", rz, crys)
    scale = (g1n * ra + g2n * rb) / (ra * ra + rb * rb)
    uvw = np.cross(pt.hkl[i1], pt.hkl[i2]) * sign[:, None].astype(np.int64)
    g = np.gcd.reduce(np.abs(uvw), axis=1)
    uvw = uvw // np.maximum(g, 1)[:, None]
    return u, scale, uvw


def quick_scores(pt: PhaseIndexTable, u: np.ndarray, scale: np.ndarray, spots: SpotSet, *,
                 rel_tol: float) -> np.ndarray:
    """Fraction of the spot weight that lands on allowed reciprocal-lattice points (vectorised)."""
    if len(u) == 0:
        return np.zeros(0)
    q = np.zeros((len(u), len(spots.r_px), 3))
    q[:, :, :2] = scale[:, None, None] * spots.v_px[None, :, :]
    gc = q @ u  # U^T q for every spot: (q U)_i = sum_j q_j U_ji
    a_mat = pt.phase.lattice.direct_matrix_nm
    h = gc @ a_mat  # h_j = g . a_j
    hr = np.rint(h)
    b_mat = pt.phase.lattice.reciprocal_matrix_inv_nm
    dist = np.linalg.norm((h - hr) @ b_mat.T, axis=2)
    tol = np.sqrt((3.0 * spots.sigma_px[None, :] * scale[:, None]) ** 2 + (rel_tol * spots.r_px[None, :] * scale[:, None]) ** 2
                  + (1.5 * scale[:, None]) ** 2)
    rows = pt.rows_of(hr.astype(np.int64))
    status = np.where(rows >= 0, np.where(pt.allowed[np.maximum(rows, 0)], 1.0, 0.3), 0.0)
    hit = (dist <= tol) & np.any(hr != 0, axis=2)
    return np.sum(spots.weight[None, :] * hit * status, axis=1)


def find_candidates(tables: IndexTables, spots: SpotSet, *, scale_inv_nm_per_px: float | None,
                    length_tol: float, ratio_tol: float, angle_tol_deg: float, rel_pos_tol: float,
                    phase_indices=None, per_zone: int = 2, max_candidates: int = 24,
                    good_enough: float = 0.85, max_zone_index: int = 7) -> tuple[list[Candidate], int]:
    """All table hits of the seed pairs, quick-scored and merged by (phase, Laue-equivalent zone).

    Seed pairs are tried in two batches (the three best pairs first); the second batch runs for
    the phases whose candidates explain less than `good_enough` of the spot weight so far. Returns the
    surviving candidates (best quick score first; at most `max_candidates`, plus the best of
    every phase that comes within 70 % of the best) and the number of raw table hits. Zone axes
    with an index above `max_zone_index` (3-index, conventional cell) are not considered: their
    dense nets fit any few spots by accident, and patterns are recorded along low-index zones.
    """
    pairs = seed_pairs(spots)
    qspots = _quick_subset(spots)
    idxs = list(range(len(tables.phases)) if phase_indices is None else phase_indices)
    found: list[Candidate] = []
    n_hits = 0
    best_quick: dict[int, float] = {}
    for batch in (pairs[:3], pairs[3:]):
        if not batch:
            continue
        for pi in idxs:
            if best_quick.get(pi, 0.0) >= good_enough:
                continue  # this phase is explained already; later pairs would only find it again
            pt = tables.phases[pi]
            rows_l, a_l, b_l = [], [], []
            for a, b in batch:
                for x, y in ((a, b), (b, a)):
                    rows = _lookup(pt, x, y, scale=scale_inv_nm_per_px, length_tol=length_tol, ratio_tol=ratio_tol,
                                   angle_tol_deg=angle_tol_deg)
                    if len(rows):
                        rows_l.append(rows)
                        a_l.append(np.broadcast_to(x, (len(rows), 2)))
                        b_l.append(np.broadcast_to(y, (len(rows), 2)))
            if not rows_l:
                continue
            rows = np.concatenate(rows_l)
            u, k, uvw = _orientations(pt, rows, np.concatenate(a_l), np.concatenate(b_l))
            low = np.max(np.abs(uvw), axis=1) <= max_zone_index
            rows, u, k, uvw = rows[low], u[low], k[low], uvw[low]
            if len(rows) == 0:
                continue
            n_hits += len(rows)
            qs = quick_scores(pt, u, k, qspots, rel_tol=rel_pos_tol)
            best_quick[pi] = max(best_quick.get(pi, 0.0), float(qs.max()))
            # only the promising hits need their Laue-equivalent zone worked out
            order = np.argsort(-qs, kind="stable")
            order = order[qs[order] >= max(0.2, 0.5 * float(qs[order[0]]))][:400]
            canon = dict(zip(order.tolist(), _canonical(pt, uvw[order])))
            taken: dict[tuple, int] = {}
            for j in order:
                key = canon[int(j)]
                if taken.get(key, 0) >= per_zone:
                    continue
                taken[key] = taken.get(key, 0) + 1
                zone, u_c = pt.canonical_orientation(uvw[j], u[j])
                found.append(Candidate(pi, int(pt.pair_i1[rows[j]]), int(pt.pair_i2[rows[j]]), zone, key, u_c,
                                       float(k[j]), float(qs[j])))
    return _select(found, max_candidates), n_hits


def _quick_subset(spots: SpotSet, n_max: int = 30) -> SpotSet:
    """The `n_max` spots with the largest weights (renormalised), for the quick check."""
    if len(spots.r_px) <= n_max:
        return spots
    keep = np.sort(np.argsort(-spots.weight, kind="stable")[:n_max])
    w = spots.weight[keep] / spots.weight[keep].sum()
    return SpotSet(spots.v_px[keep], spots.r_px[keep], spots.intensity[keep], w, spots.sigma_px[keep],
                   spots.strong[keep], spots.v_seed_px[keep], spots.on_lattice[keep])


def _select(found: list[Candidate], max_candidates: int) -> list[Candidate]:
    """Best quick scores first; merge duplicates of one (phase, zone) found by several seed pairs."""
    found.sort(key=lambda c: -c.quick)
    merged: list[Candidate] = []
    count: dict[tuple, int] = {}
    for c in found:
        key = (c.phase_index, c.canonical_zone)
        if count.get(key, 0) >= 2:
            continue
        count[key] = count.get(key, 0) + 1
        merged.append(c)
    if not merged:
        return merged
    best = merged[0].quick
    floor = max(0.25, 0.45 * best)
    keep = [c for c in merged if c.quick >= floor][:max_candidates]
    have = {c.phase_index for c in keep}
    for c in merged:  # the best of every phase that comes close, for look-alikes and near misses
        if c.phase_index not in have and c.quick >= 0.7 * best:
            keep.append(c)
            have.add(c.phase_index)
    if not keep:
        keep = merged[:1]
    return keep


def _canonical(pt: PhaseIndexTable, uvw: np.ndarray) -> list[tuple[int, int, int]]:
    fam = np.einsum("nij,kj->kni", pt.laue, uvw)  # (k, n_ops, 3)
    span = int(np.abs(fam).max()) + 1 if fam.size else 1
    base = 2 * span + 1
    code = ((fam[..., 0] + span) * base + (fam[..., 1] + span)) * base + (fam[..., 2] + span)
    best = np.argmax(code, axis=1)
    rep = fam[np.arange(len(uvw)), best]
    return [tuple(int(v) for v in r) for r in rep]

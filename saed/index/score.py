"""The figure of merit of one candidate against every measured spot (docs/indexing.md).

For a candidate (phase, zone [uvw], U, scale) the zero-order Laue-zone pattern comes from
:func:`saed.simulate.zone.zone_pattern` (cached per zone). Every measured spot is assigned to the
nearest predicted reflection; the in-plane rotation and the scale are refined by weighted
least squares over all assigned spots (a 2-D similarity, the complex ratio of measured to
predicted positions; when the calibration states no ellipse, a bounded elliptical distortion
of up to 3 % as well), and the assignment is repeated. The figure of merit is

    score = M * (1 - 0.5 A) * (0.85 + 0.15 T) * (1 - 0.3 D) * S * Z

with M the weighted agreement of the measured spots (position likelihood times a kind factor:
allowed 1, forbidden but reachable by double diffraction 0.95, projection of a higher-order
Laue-zone reflection 0.9 when weak and 0.15 when strong, forbidden with no route or
unexplained 0), A the share of predicted kinematic intensity that is missing inside the
observed region (Friedel pairs count as seen when either member is), T the rank correlation of
measured and kinematic intensities (robust to dynamical scattering, used lightly), D the share
of indexed spot weight whose measured/kinematic intensity ratio lies more than 10x below the
weighted median ratio (kinematically strong spots that are all but missing), S the
agreement of the refined scale with the calibration (1 when uncalibrated) and Z a faint
preference for low-index zones (0.4 % per index step, 1 % more per step above 3), which breaks
ties between patterns of identical geometry in favour of the zone a microscopist records.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.crystal.notation import projected_plane
from saed.index.candidates import Candidate, SpotSet
from saed.index.tables import IndexTables, PhaseIndexTable
from saed.index.values import IndexedSpot, Solution
from saed.simulate.geometry import orientation_matrix
from saed.simulate.zone import zone_pattern

__all__ = ["Fit", "score_candidate", "KIND_WEIGHT", "HOLZ_LAYER_SPACING_MAX_INV_NM"]

logger = logging.getLogger(__name__)

#: Kind factor of a measured spot in the agreement term M.
KIND_WEIGHT = {"allowed": 1.0, "double-diffraction": 0.95, "holz-weak": 0.9, "holz-strong": 0.15,
               "forbidden": 0.0, "unindexed": 0.0}

#: Projections of higher-order Laue-zone reflections are considered only when the reciprocal
#: layers are this close (1/nm): the stacking-direction zones (fcc <111>: 1.6 1/nm for Co) where
#: thin foils, surface steps and faults put weak spots at those positions (common practice).
HOLZ_LAYER_SPACING_MAX_INV_NM = 2.0

#: Measured/kinematic intensity ratios this far below the median ratio count as an intensity misfit.
INTENSITY_MISFIT_FACTOR = 10.0

#: A HOLZ-projection spot counts as weak below this fraction of the median indexed intensity.
HOLZ_WEAK_FRACTION = 0.1


@dataclass(frozen=True, eq=False)
class Fit:
    """Internal detail of a scored candidate that mistilt and look-alike analysis reuse."""

    table: PhaseIndexTable
    zone: object  # ZonePattern
    uvw: tuple[int, int, int]
    phi_deg: float
    scale: float
    assigned: np.ndarray  # (n_spots,) row into zone pattern, -1 none
    kinds: tuple[str, ...]
    predicted_px: np.ndarray  # (n_zone, 2) vectors from the centre, px
    seen: np.ndarray  # (n_zone,) bool, predicted row has a measured spot (or its Friedel mate does)
    in_region: np.ndarray  # (n_zone,) bool
    holz_hkl: np.ndarray  # (n_spots, 3) for holz-projection spots
    holz_xy_inv_nm: np.ndarray  # (m, 2) projected HOLZ positions in the detector frame, 1/nm


def _rot2(phi_rad: float) -> np.ndarray:
    c, s = math.cos(phi_rad), math.sin(phi_rad)
    return np.array([[c, -s], [s, c]])


def _assign(spots: SpotSet, pred_px: np.ndarray, scale: float, rel_tol: float):
    """Nearest predicted row for every spot and the position likelihood."""
    if len(pred_px) == 0:
        n = len(spots.r_px)
        return np.full(n, -1), np.full(n, np.inf), np.ones(n)
    d = np.linalg.norm(spots.v_px[:, None, :] - pred_px[None, :, :], axis=2)
    j = np.argmin(d, axis=1)
    dmin = d[np.arange(len(j)), j]
    sigma = np.sqrt(spots.sigma_px ** 2 + (rel_tol * spots.r_px) ** 2 + 0.5 ** 2)
    return j, dmin, sigma


def _observed_region(measured, spots: SpotSet, pred_px: np.ndarray) -> np.ndarray:
    """Predicted positions a detector could have recorded: inside the image and the spot radius range."""
    if len(spots.r_px) == 0:
        return np.zeros(len(pred_px), bool)
    r = np.linalg.norm(pred_px, axis=1)
    r_lo, r_hi = 0.35 * spots.r_px.min(), 1.02 * spots.r_px.max()
    cx, cy = measured.center_px
    h, w = measured.image_shape[:2]
    x, y = cx + pred_px[:, 0], cy + pred_px[:, 1]
    inside = (x >= 3) & (x <= w - 4) & (y >= 3) & (y <= h - 4)
    xm, ym = cx - pred_px[:, 0], cy - pred_px[:, 1]
    inside_mate = (xm >= 3) & (xm <= w - 4) & (ym >= 3) & (ym <= h - 4)
    return (r >= r_lo) & (r <= r_hi) & (inside | inside_mate)


def score_candidate(cand: Candidate, tables: IndexTables, spots: SpotSet, measured, *, calibrated_scale: float | None,
                    length_tol: float, rel_pos_tol: float, pixel_pitch_um: float | None = None,
                    allow_distortion: bool = True) -> tuple[Solution, Fit]:
    """Refine and score one candidate against all spots; returns the Solution and its Fit."""
    pt = tables.phases[cand.phase_index]
    phase = pt.phase
    lat = phase.lattice
    uvw = cand.zone_axis
    zp, mate, holz_xy, holz_hkl = _zone_facts(pt, tuple(int(v) for v in uvw), tables.voltage_kv, tables.max_g_inv_nm)
    u0 = orientation_matrix(lat, uvw, 0.0)
    m = cand.u_matrix @ u0.T
    phi = math.atan2(m[1, 0], m[0, 0])
    scale = cand.scale_inv_nm_per_px
    allowed = ~zp.kinematically_forbidden
    dd = zp.double_diffraction
    f_rel = zp.f_abs / max(float(zp.f_abs[allowed].max()) if np.any(allowed) else 1.0, 1e-30)
    xy = np.asarray(zp.xy_inv_nm, float)

    n = len(spots.r_px)
    fit_distortion = allow_distortion and measured.calibration.ellipse is None
    lin = _rot2(phi) / scale  # detector px per 1/nm: pred_px = xy @ lin.T + shift
    shift = np.zeros(2)
    t_max = max(3.0, 3.0 * float(measured.center_sigma_px or 0.0))
    for _ in range(4):
        pred_px = xy @ lin.T + shift
        j, dmin, sigma = _assign(spots, pred_px, scale, rel_pos_tol)
        ok = (j >= 0) & (dmin <= 3.0 * sigma)
        use = ok & (allowed[np.maximum(j, 0)] | dd[np.maximum(j, 0)]) if len(xy) else ok
        if np.count_nonzero(use) < 2:
            break
        wt = spots.weight[use] / sigma[use] ** 2
        new_lin, shift = _fit_linear(xy[j[use]], spots.v_px[use], wt, distortion=fit_distortion, t_max_px=t_max)
        new_scale = 1.0 / math.sqrt(abs(np.linalg.det(new_lin)))
        if calibrated_scale is not None:
            lo, hi = calibrated_scale * (1 - length_tol), calibrated_scale * (1 + length_tol)
            clamped = min(max(new_scale, lo), hi)
            new_lin = new_lin * (new_scale / clamped)
            new_scale = clamped
        done = np.allclose(new_lin, lin, rtol=1e-9, atol=1e-12)
        lin, scale = new_lin, new_scale
        if done:
            break
    phi = math.atan2(lin[1, 0] - lin[0, 1], lin[0, 0] + lin[1, 1])  # rotation part of the polar decomposition
    aniso_pct, aniso_deg = _anisotropy(lin)
    pred_px = xy @ lin.T + shift
    j, dmin, sigma = _assign(spots, pred_px, scale, rel_pos_tol)
    ok = (j >= 0) & (dmin <= 3.0 * sigma)
    like = np.exp(-0.5 * (dmin / sigma) ** 2)

    # HOLZ projections for spots not on a ZOLZ position
    holz_j = np.full(n, -1)
    if len(holz_xy) and n:
        hp = holz_xy @ lin.T + shift
        dh = np.linalg.norm(spots.v_px[:, None, :] - hp[None, :, :], axis=2)
        jh = np.argmin(dh, axis=1)
        hit = dh[np.arange(n), jh] <= 3.0 * sigma
        holz_j = np.where(hit & ~ok, jh, -1)

    kinds = []
    kind_w = np.zeros(n)
    indexed_int = [spots.intensity[i] for i in range(n) if ok[i] and allowed[j[i]]]
    med_int = float(np.median(indexed_int)) if indexed_int else float(np.median(spots.intensity)) if n else 1.0
    for i in range(n):
        if ok[i]:
            if allowed[j[i]]:
                k = "allowed"
            elif dd[j[i]]:
                k = "double-diffraction"
            else:
                k = "forbidden"
            kinds.append(k)
            kind_w[i] = KIND_WEIGHT[k] * like[i]
        elif holz_j[i] >= 0:
            kinds.append("holz-projection")
            weak = spots.intensity[i] < HOLZ_WEAK_FRACTION * med_int
            kind_w[i] = KIND_WEIGHT["holz-weak" if weak else "holz-strong"] * math.exp(
                -0.5 * (float(np.linalg.norm(spots.v_px[i] - holz_xy[holz_j[i]] @ lin.T - shift)) / sigma[i]) ** 2)
        else:
            kinds.append("unindexed")
    agreement = float(np.sum(spots.weight * kind_w))

    # predicted intensity that is missing inside the observed region
    region = _observed_region(measured, spots, pred_px)
    seen = np.zeros(len(xy), bool)
    seen[j[ok]] = True
    seen_pair = seen | np.where(mate >= 0, seen[np.maximum(mate, 0)], False)
    strength = np.where(allowed, f_rel ** 2, 0.0) * region
    total = float(strength.sum())
    absent = float(strength[~seen_pair].sum() / total) if total > 0 else 0.0

    # intensity agreement (rank correlation; dynamical intensities differ, so it weighs little)
    idx_allowed = np.flatnonzero(ok & np.array([k == "allowed" for k in kinds], bool))
    rank = 0.75  # neutral when the kinematic intensities do not discriminate
    if len(idx_allowed) >= 5:
        pi_ = np.round(np.log10(np.maximum(f_rel[j[idx_allowed]] ** 2, 1e-12)), 2)
        mi = spots.intensity[idx_allowed]
        if len(np.unique(pi_)) >= 2 and np.ptp(mi) > 0:
            rho = spearman_rho(mi, pi_)
            rank = float(max(0.0, rho)) if np.isfinite(rho) else 0.5
    # kinematically strong spots measured far weaker than the rest (robust: only > 10x off the median ratio)
    misfit = 0.0
    if len(idx_allowed) >= 5:
        pred = np.maximum(f_rel[j[idx_allowed]] ** 2, 1e-12)
        ratio = np.log(np.maximum(spots.intensity[idx_allowed], 1e-12) / pred)
        off = ratio < _weighted_median(ratio, spots.weight[idx_allowed]) - math.log(INTENSITY_MISFIT_FACTOR)
        misfit = float(np.sum(spots.weight[idx_allowed][off]) / max(np.sum(spots.weight[idx_allowed]), 1e-12))
    scale_term = 1.0
    scale_err = None
    if calibrated_scale is not None:
        scale_err = scale / calibrated_scale - 1.0
        scale_term = math.exp(-0.5 * (scale_err / max(length_tol / 1.5, 1e-6)) ** 2)
    idx = max(abs(v) for v in uvw)
    zone_term = 1.0 - 0.004 * (idx - 1) - 0.01 * max(0, idx - 3)
    score = agreement * (1.0 - 0.5 * absent) * (0.85 + 0.15 * rank) * (1.0 - 0.3 * misfit) * scale_term * zone_term

    # per-spot records
    use_scale = calibrated_scale if calibrated_scale is not None else scale
    cx0, cy0 = measured.center_px
    hex_axes = phase.is_hexagonal
    recs = []
    d_err, a_err = [], []
    for i in range(n):
        k = kinds[i]
        x_px = float(measured.spots.x_px[i])
        y_px = float(measured.spots.y_px[i])
        vc = spots.v_px[i] - shift  # from the refined centre
        r = float(np.hypot(vc[0], vc[1]))
        d_meas = 1.0 / (use_scale * r) if r > 0 else float("inf")
        if k in ("allowed", "double-diffraction", "forbidden"):
            h = tuple(int(v) for v in zp.hkl[j[i]])
            d_calc = float(1.0 / zp.g_inv_nm[j[i]])
            res = float(dmin[i])
            ic = float(f_rel[j[i]] ** 2) if allowed[j[i]] else 0.0
            if k == "allowed":
                d_err.append(abs(d_meas - d_calc) / d_calc * 100.0)
                pv = pred_px[j[i]] - shift
                cosang = float(vc @ pv) / (r * float(np.linalg.norm(pv)))
                a_err.append(math.degrees(math.acos(max(-1.0, min(1.0, cosang)))))
        elif k == "holz-projection":
            h = tuple(int(v) for v in holz_hkl[holz_j[i]])
            gp = float(np.linalg.norm(holz_xy[holz_j[i]]))
            d_calc = 1.0 / gp if gp > 0 else None
            res = float(np.linalg.norm(spots.v_px[i] - holz_xy[holz_j[i]] @ lin.T - shift))
            ic = None
            proj_den, proj = projected_plane(lat.metric_tensor_nm2, h, uvw)
        else:
            h, d_calc, res, ic = None, None, None, None
        if k != "holz-projection":
            proj_den, proj = 1, None
        hkil = tuple(int(v) for v in plane_to_4(np.array(h))) if (h is not None and hex_axes) else None
        recs.append(IndexedSpot(i, x_px, y_px, float(spots.intensity[i]), h, hkil, k, d_meas, d_calc, res, ic,
                                None if proj is None else tuple(int(v) for v in proj), int(proj_den)))

    notes = []
    if float(np.hypot(*shift)) >= 1.0:
        notes.append(f"the spots fit best about a centre {float(np.hypot(*shift)):.1f} px from the measured one "
                     f"(at {cx0 + shift[0]:.1f}, {cy0 + shift[1]:.1f} px)")
    if fit_distortion and aniso_pct >= 0.6 and np.count_nonzero(ok) >= 6:
        notes.append(f"the spot lattice is stretched {aniso_pct:.1f} % along {aniso_deg:.0f} deg (a projector "
                     "ellipse?): a ring calibration ('saed calibrate') measures and then corrects it")
    u = orientation_matrix(lat, uvw, math.degrees(phi))
    cam = None
    if pixel_pitch_um is not None:
        from saed.physics import camera_length_from_scale_mm

        cam = camera_length_from_scale_mm(scale, pixel_pitch_um, tables.voltage_kv)
    show = (allowed | dd) & (zp.g_inv_nm <= tables.max_g_inv_nm)
    cx, cy = measured.center_px
    pred_abs = pred_px[show] + np.array([cx, cy])[None, :]
    sol = Solution(
        phase_name=phase.name, zone_axis=uvw,
        zone_axis_4=tuple(int(v) for v in direction_to_4(np.array(uvw))) if hex_axes else None,
        orientation_matrix=u, in_plane_rotation_deg=float(math.degrees(phi) % 360.0), scale_inv_nm_per_px=float(scale),
        score=float(score), indexed=tuple(recs),
        mean_d_error_pct=float(np.mean(d_err)) if d_err else float("nan"),
        mean_angle_error_deg=float(np.mean(a_err)) if a_err else float("nan"),
        structure_type=phase.structure_type, implied_camera_length_mm=cam, notes=tuple(notes),
        scale_error_pct=None if scale_err is None else 100.0 * scale_err,
        terms=(("agreement", agreement), ("absent", absent), ("intensity_rank", rank), ("intensity_misfit", misfit),
               ("scale", scale_term), ("zone_prior", zone_term), ("distortion_pct", aniso_pct),
               ("distortion_axis_deg", aniso_deg), ("center_shift_x_px", float(shift[0])),
               ("center_shift_y_px", float(shift[1]))),
        predicted_xy_px=pred_abs, predicted_hkl=zp.hkl[show], predicted_intensity=np.where(allowed, f_rel ** 2, 0.0)[show],
        predicted_kind=tuple("allowed" if a else "double-diffraction" for a in allowed[show]),
    )
    fit = Fit(table=pt, zone=zp, uvw=uvw, phi_deg=math.degrees(phi), scale=float(scale), assigned=np.where(ok, j, -1),
              kinds=tuple(kinds), predicted_px=pred_px, seen=seen_pair, in_region=region,
              holz_hkl=np.array([holz_hkl[x] if x >= 0 else [0, 0, 0] for x in holz_j], np.int64).reshape(-1, 3),
              holz_xy_inv_nm=(holz_xy @ lin.T) * scale)
    return sol, fit


@lru_cache(maxsize=4096)
def _zone_facts_cached(pt_ref, uvw: tuple, voltage_kv: float, max_g_inv_nm: float):
    pt = pt_ref()
    zp = zone_pattern(pt.phase, uvw, voltage_kv=voltage_kv, max_g_inv_nm=max_g_inv_nm, include_holz=False,
                      thickness_nm=50.0)
    u0 = orientation_matrix(pt.phase.lattice, uvw, 0.0)
    holz_xy, holz_hkl = _holz_projections(pt, zp, uvw, u0)
    return zp, _friedel_rows(zp.hkl), holz_xy, holz_hkl


def _zone_facts(pt: PhaseIndexTable, uvw: tuple, voltage_kv: float, max_g_inv_nm: float):
    """The zone pattern of a candidate zone plus what scoring derives from it (cached per zone)."""
    import weakref

    return _zone_facts_cached(weakref.ref(pt), uvw, voltage_kv, max_g_inv_nm)  # a weak key: tables are not pinned


#: Largest elliptical distortion (axis ratio - 1) the refinement absorbs when the calibration states none.
MAX_FITTED_DISTORTION = 0.03


def _fit_linear(p: np.ndarray, v: np.ndarray, w: np.ndarray, *, distortion: bool,
                t_max_px: float) -> tuple[np.ndarray, np.ndarray]:
    """Map (L, t) with v ~ L p + t (weighted least squares): a similarity, or one with a bounded ellipse.

    t is a small shift of the pattern centre (at most `t_max_px`; Friedel pairs fix it). L is the
    similarity (rotation and scale) or, with `distortion` and at least four spots, the general
    map whose polar decomposition L = R S has the axis ratio of S clipped to
    1 + MAX_FITTED_DISTORTION: a projector ellipse of a few per cent, not the freedom to turn any
    lattice into any other.
    """
    sw = np.sqrt(w)
    n = len(p)
    # similarity with shift: [a -b tx ; b a ty]
    rows = np.zeros((2 * n, 4))
    rows[:n, 0], rows[:n, 1], rows[:n, 2] = p[:, 0], -p[:, 1], 1.0
    rows[n:, 0], rows[n:, 1], rows[n:, 3] = p[:, 1], p[:, 0], 1.0
    rhs = np.concatenate([v[:, 0], v[:, 1]])
    ww = np.concatenate([sw, sw])
    use_shift = n >= 3 and t_max_px > 0
    cols = [0, 1, 2, 3] if use_shift else [0, 1]
    sol, *_ = np.linalg.lstsq(rows[:, cols] * ww[:, None], rhs * ww, rcond=None)
    a, b = sol[0], sol[1]
    t = np.array([sol[2], sol[3]]) if use_shift else np.zeros(2)
    if np.linalg.norm(t) > t_max_px:
        t = t * (t_max_px / np.linalg.norm(t))
        sol, *_ = np.linalg.lstsq(rows[:, :2] * ww[:, None], (rhs - np.repeat(t, n)) * ww, rcond=None)
        a, b = sol
    sim = np.array([[a, -b], [b, a]])
    if not distortion or n < 4:
        return sim, t
    q = v - t
    m = (p * w[:, None]).T @ p
    if np.linalg.cond(m) > 1e6:
        return sim, t
    lin = ((q * w[:, None]).T @ p) @ np.linalg.inv(m)
    if np.linalg.det(lin) <= 0:
        return sim, t
    uu, sv, vt = np.linalg.svd(lin)
    rot = uu @ vt
    s_mat = vt.T @ np.diag(sv) @ vt
    ev, qv = np.linalg.eigh(s_mat)
    mean = math.sqrt(ev[0] * ev[1])
    lim = math.sqrt(1.0 + MAX_FITTED_DISTORTION)
    ev = np.clip(ev / mean, 1.0 / lim, lim) * mean
    return rot @ (qv @ np.diag(ev) @ qv.T), t


def _anisotropy(lin: np.ndarray) -> tuple[float, float]:
    """Axis ratio - 1 (percent) of the fitted map and the azimuth of its long axis (deg)."""
    uu, sv, vt = np.linalg.svd(lin)
    major = uu[:, 0]
    return float(100.0 * (sv[0] / sv[1] - 1.0)), float(math.degrees(math.atan2(major[1], major[0])) % 180.0)


def _holz_projections(pt: PhaseIndexTable, zp, uvw, u0: np.ndarray):
    """Projected positions (zone frame, 1/nm) of the first higher-order layers, where thin foils show spots.

    Only for stacking-direction zones: the reciprocal layers lie closer than
    HOLZ_LAYER_SPACING_MAX_INV_NM and the projection of a first-layer point is a 1/2 or 1/3
    fraction of a zero-layer lattice vector (fcc <111>: the 1/3{422} positions). Elsewhere the
    projections would be a dense, meaningless net.
    """
    empty = (np.zeros((0, 2)), np.zeros((0, 3), np.int64))
    if zp.layer_spacing_inv_nm > HOLZ_LAYER_SPACING_MAX_INV_NM:
        return empty
    n_layer = pt.hkl @ np.asarray(uvw)
    p = zp.layer_multiplicity
    sel = pt.allowed & (np.abs(n_layer) >= p) & (np.abs(n_layer) <= 2 * p)
    if not np.any(sel):
        return empty
    q = (pt.g_cart_inv_nm[sel] @ u0.T)[:, :2]
    zolz = np.asarray(zp.xy_inv_nm)[zp.laue_zone == 0]
    first = np.flatnonzero(np.abs(n_layer[sel]) == p)
    if len(first) == 0 or len(zolz) == 0:
        return empty
    shift = q[first[np.argmin(np.linalg.norm(q[first], axis=1))]]
    lattice_like = False
    for m in (2, 3):
        d = np.min(np.linalg.norm(zolz - m * shift[None, :], axis=1))
        if d < 1e-3 * max(1.0, float(np.linalg.norm(m * shift))) or np.linalg.norm(m * shift) < 1e-9:
            lattice_like = True
            break
    if not lattice_like:
        return empty
    # drop projections that coincide with zero-layer reflections
    dz = np.min(np.linalg.norm(q[:, None, :] - zolz[None, :, :], axis=2), axis=1)
    keep = dz > 1e-3
    return q[keep], pt.hkl[sel][keep]


def _average_ranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n of `x`, ties given the mean of the ranks they span (as Spearman's rho needs)."""
    x = np.asarray(x, dtype=float)
    order = np.argsort(x, kind="mergesort")
    xs = x[order]
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    ends = np.r_[starts[1:], len(xs)]
    mean_rank = (starts + ends + 1) / 2.0  # ranks start+1 .. end, averaged
    ranks = np.empty(len(x))
    ranks[order] = np.repeat(mean_rank, ends - starts)
    return ranks


def spearman_rho(a, b) -> float:
    """Spearman's rank correlation (Spearman 1904): Pearson's r of the tie-averaged ranks; nan if a side is constant.

    Written with numpy so that indexing does not import scipy.stats (about a second of start-up).

    >>> round(spearman_rho([1, 2, 3, 4, 5], [5, 6, 7, 8, 7]), 4)
    0.8208
    """
    ra, rb = _average_ranks(a), _average_ranks(b)
    ra -= ra.mean()
    rb -= rb.mean()
    den = math.sqrt(float(ra @ ra) * float(rb @ rb))
    return float(ra @ rb) / den if den > 0 else float("nan")


def _weighted_median(x: np.ndarray, w: np.ndarray) -> float:
    order = np.argsort(x)
    c = np.cumsum(w[order])
    return float(x[order][np.searchsorted(c, 0.5 * c[-1])])


def _friedel_rows(hkl: np.ndarray) -> np.ndarray:
    """Row of -hkl for every row (-1 where absent)."""
    lookup = {tuple(r): i for i, r in enumerate(np.asarray(hkl).tolist())}
    return np.array([lookup.get(tuple(-v for v in r), -1) for r in np.asarray(hkl).tolist()], dtype=np.int64)

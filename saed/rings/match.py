"""How well one phase (or a mixture of two) explains the measured rings, and at which detector scale.

For a hypothesis (phases, scale) every ring line of every phase is placed at radius g / scale;
lines closer than two ring widths blend into one (the profile cannot separate them), and so do
neighbours up to 3.5 widths apart where the measured profile shows only one ring. Each measured
ring is matched to the nearest blend within tolerance, one to one. The amount of each phase
(a scale factor on its model intensities m |F|^2 d^2) is the non-negative least-squares fit to the
matched ring intensities and to zero at every unmatched line. Three factors make the score
(higher is better, at most 1):

* intensity agreement ``1 - R``, with R an R-factor on square-root intensities (so weak rings
  count) over matched rings, unmatched rings (predicted 0) and unmatched lines (observed 0; only
  the part above the detection limit at that radius counts);
* position agreement: the sqrt-intensity-weighted mean of exp(-delta^2 / 2 sigma^2) over matched
  rings, delta the relative radius misfit and sigma its uncertainty (ring fit, a 0.1 % floor and half
  the spread of a blend);
* the scale prior exp(-(s/s0 - 1)^2 / 2 sigma0^2) when a calibration is given.

The scale itself is found, when free, by voting: every (strong ring, line) pair proposes
s = g / r; the candidates that line up the most rings are refined by weighted least squares on
their matched rings (with the prior as one more observation when calibrated).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import optimize

from saed.calibration import PLAUSIBLE_SCALE_INV_NM_PER_PX
from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.readonly import frozen_array
from saed.simulate.rings import RingLines, ring_lines

__all__ = ["ObservedRings", "RingMatch", "evaluate", "match_scale", "POSITION_FLOOR_REL"]

#: Systematic floor of the relative ring-position uncertainty (residual distortion, calibration).
POSITION_FLOOR_REL = 0.001
#: Neighbouring lines closer than this many ring widths (Gaussian sigma) count as one ring when the
#: profile shows only one there.
UNRESOLVED_WIDTHS = 3.5
#: Share of a ring's predicted intensity one phase must give for the ring to be that phase's alone.
UNIQUE_SHARE = 0.8
#: Largest |g| of the ring lists used while searching the scale (1/nm).
MAX_LINE_G_INV_NM = 20.0
#: Largest |g| of the ring lists once a scale is proposed (rings out to the edge of the detector).
MAX_EXTENDED_G_INV_NM = 30.0


@dataclass(frozen=True, eq=False)
class ObservedRings:
    """Measured rings, as the matcher sees them (corrected radii, px).

    intensity: ring areas relative to the strongest = 1; floor_radius_px / floor_intensity: the
    weakest detectable relative intensity as a function of radius; r_min_px..r_max_px: the radius
    range searched.
    """

    radius_px: np.ndarray
    radius_sigma_px: np.ndarray
    width_px: np.ndarray
    intensity: np.ndarray
    floor_radius_px: np.ndarray
    floor_intensity: np.ndarray
    r_min_px: float
    r_max_px: float

    def __post_init__(self):
        for name in ("radius_px", "radius_sigma_px", "width_px", "intensity", "floor_radius_px", "floor_intensity"):
            object.__setattr__(self, name, frozen_array(getattr(self, name), np.float64))
        if len(self.radius_px) == 0:
            raise InputError("no rings to match")

    def __len__(self) -> int:
        return len(self.radius_px)

    @classmethod
    def from_profile_rings(cls, rings, *, radius_px_of_bins, snr_min: float = 5.0) -> "ObservedRings":
        """From :class:`saed.rings.peaks.ProfileRings` and the profile's bin radii."""
        area = rings.area
        top = float(area.max())
        width = float(np.median(rings.width_px))
        noise = np.asarray(rings.noise)
        ok = np.isfinite(noise)
        floor = snr_min * noise[ok] * width * math.sqrt(2 * math.pi) / top
        return cls(rings.radius_px, np.maximum(rings.radius_sigma_px, 0.01), rings.width_px, area / top,
                   np.asarray(radius_px_of_bins)[ok], floor, rings.r_min_px, rings.r_max_px)

    @classmethod
    def from_measurement(cls, measured, *, snr_min: float = 5.0) -> "ObservedRings":
        """From a :class:`saed.rings.measure.RingMeasurement`: its rings and its profile's bin radii."""
        return cls.from_profile_rings(measured.rings, radius_px_of_bins=measured.profile.radius_px, snr_min=snr_min)

    def floor_at(self, r_px) -> np.ndarray:
        if len(self.floor_radius_px) == 0:
            return np.zeros_like(np.asarray(r_px, float))
        return np.interp(r_px, self.floor_radius_px, self.floor_intensity)


@dataclass(frozen=True, eq=False)
class RingMatch:
    """One hypothesis scored against the measured rings.

    ring_lines : per measured ring, a tuple of (phase index, line index) it is assigned to (empty:
    unexplained); ring_delta_rel : relative radius misfit (NaN: unexplained); amounts : fitted
    amount of each phase; missing : (phase index, line index, predicted relative intensity) of lines
    that should have been seen and were not; unique_rings : per phase, rings it explains alone (it gives
    at least 80 % of their predicted intensity); unique_signal : the share of the ring signal
    (sqrt-intensity) of those rings; ring_share : (n_rings, n_phases) share of each phase in each
    matched ring's predicted intensity (0 for unexplained rings).
    """

    phases: tuple[Phase, ...]
    lines: tuple[RingLines, ...]
    scale_inv_nm_per_px: float
    scale_sigma_rel: float
    amounts: tuple[float, ...]
    ring_lines: tuple[tuple[tuple[int, int], ...], ...]
    ring_delta_rel: np.ndarray
    predicted_intensity: np.ndarray
    ring_share: np.ndarray
    missing: tuple[tuple[int, int, float], ...]
    unique_rings: tuple[int, ...]
    unique_signal: tuple[float, ...]
    r_factor: float
    position_quality: float
    prior: float
    explained: float
    score: float

    @property
    def name(self) -> str:
        return " + ".join(p.name for p in self.phases)

    @property
    def n_matched(self) -> int:
        return sum(1 for a in self.ring_lines if a)


def _blends(lines: Sequence[RingLines], scale: float, *, r_lo: float, r_hi: float, blend_px: float,
            phase_weight=None):
    """Lines of all phases placed at g/scale within r_lo..r_hi, merged into blends.

    A blend sits at the intensity-weighted mean of its lines (model intensity x `phase_weight` of the
    phase, default 1); `design` holds the unweighted model intensity per phase.

    Returns (rho (n,), spread (n,), design (n, n_phases), members: list of [(p, j), ...]).
    """
    rho_l, ph_l, j_l, w_l = [], [], [], []
    for p, ln in enumerate(lines):
        rho = ln.g_inv_nm / scale
        keep = np.nonzero((rho >= r_lo) & (rho <= r_hi))[0]
        rho_l.append(rho[keep])
        ph_l.append(np.full(len(keep), p))
        j_l.append(keep)
        w_l.append(np.maximum(ln.intensity[keep], 1e-9))
    pw = np.ones(len(lines)) if phase_weight is None else np.maximum(np.asarray(phase_weight, float), 1e-3)
    rho = np.concatenate(rho_l)
    n_ph = len(lines)
    if len(rho) == 0:
        return np.zeros(0), np.zeros(0), np.zeros((0, n_ph)), []
    order = np.argsort(rho, kind="stable")
    rho, ph, jj, w = rho[order], np.concatenate(ph_l)[order], np.concatenate(j_l)[order], np.concatenate(w_l)[order]
    starts = np.concatenate([[0], np.nonzero(np.diff(rho) >= blend_px)[0] + 1])
    ends = np.concatenate([starts[1:], [len(rho)]])
    wc = w * pw[ph]
    w_b = np.add.reduceat(wc, starts)
    rho_b = np.add.reduceat(wc * rho, starts) / w_b
    spread_b = rho[ends - 1] - rho[starts]
    group = np.repeat(np.arange(len(starts)), ends - starts)
    design = np.zeros((len(starts), n_ph))
    np.add.at(design, (group, ph), w)
    pairs = list(zip(ph.tolist(), jj.tolist()))
    members = [pairs[a:b] for a, b in zip(starts.tolist(), ends.tolist())]
    return rho_b, spread_b, design, members, w_b


def _merge_unresolved(rho, spread, design, members, w_b, r_obs, *, limit_px: float, margin_px: float):
    """Merge runs of neighbouring blends closer than `limit_px` where the measured profile shows at most
    one ring.

    Two lines 2-3 ring widths apart are often measured as one broad ring; treating them as separate
    would call one of them missing.
    """
    gaps = np.diff(rho)
    if not np.any(gaps < limit_px):
        return rho, spread, design, members
    r_sorted = np.sort(r_obs)

    def n_rings(lo, hi):
        return int(np.searchsorted(r_sorted, hi, side="right") - np.searchsorted(r_sorted, lo, side="left"))

    starts = [0]
    k = 0
    while k + 1 < len(rho):
        first = starts[-1]
        if gaps[k] < limit_px and n_rings(rho[first] - spread[first] - margin_px, rho[k + 1] + margin_px) <= 1:
            k += 1  # blend k+1 joins the current run
            continue
        starts.append(k + 1)
        k += 1
    if len(starts) == len(rho):
        return rho, spread, design, members
    st = np.array(starts)
    ends = np.append(st[1:], len(rho))
    w_sum = np.add.reduceat(w_b, st)
    rho_m = np.add.reduceat(w_b * rho, st) / w_sum
    lo = np.minimum.reduceat(rho - spread, st)
    hi = np.maximum.reduceat(rho, st)
    design_m = np.add.reduceat(design, st, axis=0)
    members_m = [sum(members[a:b], []) for a, b in zip(st.tolist(), ends.tolist())]
    return rho_m, hi - lo, design_m, members_m


def _assign(obs: ObservedRings, rho, spread, tol_rel: float):
    """Each measured ring to the nearest blend within tolerance, one ring per blend: (assign, delta)."""
    n = len(obs)
    r = obs.radius_px
    assign = np.full(n, -1)
    delta = np.full(n, np.nan)
    if len(rho):
        j = np.clip(np.searchsorted(rho, r), 1, len(rho) - 1) if len(rho) > 1 else np.zeros(n, int)
        cand = np.stack([j - 1, j], axis=1) if len(rho) > 1 else j[:, None]
        dist = np.abs(r[:, None] - rho[cand])
        best = cand[np.arange(n), np.argmin(dist, axis=1)]
        d_rel = (r - rho[best]) / rho[best]
        tol = np.maximum(tol_rel, 3 * obs.radius_sigma_px / r) + spread[best] / rho[best]
        ok = np.abs(d_rel) <= tol
        for b in np.unique(best[ok]):
            idx = np.nonzero(ok & (best == b))[0]
            win = idx[np.argmin(np.abs(d_rel[idx]))]
            assign[win] = b
            delta[win] = d_rel[win]
    return assign, delta


def evaluate(obs: ObservedRings, lines: Sequence[RingLines], scale_inv_nm_per_px: float, *, tol_rel: float = 0.01,
             prior: tuple[float, float] | None = None, scale_sigma_rel: float = 0.0) -> RingMatch:
    """Score the hypothesis "these phases at this scale" against `obs` (module notes).

    For a mixture the blends are placed twice: first with equal phase amounts, then with the fitted ones
    (a blend of a strong line of one phase and a weak one of the other sits near the strong one).
    """
    s = float(scale_inv_nm_per_px)
    lines = tuple(lines)
    n_ph = len(lines)
    width = float(np.median(obs.width_px))
    blend_px = 2.0 * width
    r_in_lo = obs.r_min_px + 2 * width
    r_in_hi = obs.r_max_px - 2 * width
    g_top = min(ln.max_g_inv_nm for ln in lines)
    n = len(obs)
    r = obs.radius_px
    weights = None
    for _pass in range(1 if n_ph == 1 else 2):
        rho, spread, design, members, w_b = _blends(lines, s, r_lo=obs.r_min_px - blend_px,
                                                    r_hi=min(obs.r_max_px + blend_px, g_top / s),
                                                    blend_px=blend_px, phase_weight=weights)
        if len(rho) > 1:
            rho, spread, design, members = _merge_unresolved(rho, spread, design, members, w_b, r,
                                                             limit_px=UNRESOLVED_WIDTHS * width, margin_px=width)
        assign, delta = _assign(obs, rho, spread, tol_rel)
        matched = assign >= 0
        used = set(assign[matched].tolist())
        unmatched_b = [b for b in range(len(rho)) if b not in used and r_in_lo <= rho[b] <= r_in_hi]
        rows_x = [design[assign[i]] for i in np.nonzero(matched)[0]] + [design[b] for b in unmatched_b]
        rows_y = [obs.intensity[i] for i in np.nonzero(matched)[0]] + [0.0] * len(unmatched_b)
        if rows_x and matched.any():
            amounts, _ = optimize.nnls(np.array(rows_x).reshape(-1, n_ph), np.array(rows_y))
        else:
            amounts = np.zeros(n_ph)
        weights = amounts / amounts.max() if amounts.max() > 0 else None
    pred = np.zeros(n)
    pred[matched] = design[assign[matched]] @ amounts
    sq_i = np.sqrt(obs.intensity)
    num = np.abs(sq_i - np.sqrt(pred)).sum()
    den = (sq_i + np.sqrt(pred)).sum()
    missing = []
    if unmatched_b:
        p_un = design[unmatched_b] @ amounts
        visible = np.clip(p_un - obs.floor_at(rho[unmatched_b]), 0, None)
        num += np.sqrt(visible).sum()
        den += np.sqrt(visible).sum()
        for b, v in zip(unmatched_b, visible):
            if v > 0:
                p_idx, j_idx = max(members[b], key=lambda m: lines[m[0]].intensity[m[1]] * amounts[m[0]])
                missing.append((int(p_idx), int(j_idx), float(v)))
    r_factor = float(num / den) if den > 0 else 1.0
    if matched.any():
        sig = np.sqrt((obs.radius_sigma_px[matched] / r[matched]) ** 2 + POSITION_FLOOR_REL**2
                      + (0.5 * spread[assign[matched]] / rho[assign[matched]]) ** 2)
        q = np.exp(-0.5 * (delta[matched] / sig) ** 2)
        pos = float((sq_i[matched] * q).sum() / sq_i[matched].sum())
    else:
        pos = 0.0
    prior_f = 1.0
    if prior is not None:
        s0, sig0 = prior
        prior_f = math.exp(-0.5 * ((s / s0 - 1) / sig0) ** 2)
    explained = float(sq_i[matched].sum() / sq_i.sum())
    ring_assign = tuple(tuple(members[assign[i]]) if assign[i] >= 0 else () for i in range(n))
    # A ring belongs to one phase when that phase gives >= 80 % of its predicted intensity.
    unique = [0] * n_ph
    unique_signal = [0.0] * n_ph
    share = np.zeros((n, n_ph))
    for i in np.nonzero(matched)[0]:
        contrib = design[assign[i]] * amounts
        tot = contrib.sum()
        if tot > 0:
            share[i] = contrib / tot
        if tot > 0 and contrib.max() >= UNIQUE_SHARE * tot:
            p_i = int(np.argmax(contrib))
            unique[p_i] += 1
            unique_signal[p_i] += float(sq_i[i] / sq_i.sum())
    score = (1.0 - r_factor) * pos * prior_f
    share, delta, pred = frozen_array(share), frozen_array(delta), frozen_array(pred)
    return RingMatch(tuple(ln.phase for ln in lines), lines, s, float(scale_sigma_rel), tuple(float(a) for a in amounts),
                     ring_assign, delta, pred, share, tuple(missing), tuple(unique), tuple(unique_signal), r_factor,
                     pos, prior_f, explained, score)


def _refine_scale(obs: ObservedRings, m: RingMatch, prior) -> tuple[float, float]:
    """Weighted least-squares scale from the matched rings (and the prior as one observation)."""
    r, g, w = [], [], []
    for i, a in enumerate(m.ring_lines):
        if not a:
            continue
        gs = np.array([m.lines[p].g_inv_nm[j] for p, j in a])
        ws = np.array([max(m.lines[p].intensity[j] * m.amounts[p], 1e-9) for p, j in a])
        g_i = float((gs * ws).sum() / ws.sum())
        # a blend's measured centre depends on the real (textured) intensities of its lines: half its spread
        spread_rel = 0.5 * float(gs.max() - gs.min()) / g_i
        sig = math.sqrt((obs.radius_sigma_px[i] / obs.radius_px[i]) ** 2 + (0.3 * POSITION_FLOOR_REL) ** 2
                        + spread_rel**2)
        r.append(obs.radius_px[i])
        g.append(g_i)
        w.append(1.0 / sig**2)
    r, g, w = np.array(r), np.array(g), np.array(w)
    if len(r) == 0:
        return m.scale_inv_nm_per_px, float("inf")
    # minimise sum w (s r / g - 1)^2 (+ ((s - s0) / (s0 sig0))^2)
    a = float((w * (r / g) ** 2).sum())
    b = float((w * r / g).sum())
    if prior is not None:
        s0, sig0 = prior
        a += 1.0 / (s0 * sig0) ** 2
        b += 1.0 / (s0 * sig0**2)
    s = b / a
    sigma_rel = 1.0 / math.sqrt(a) / s
    if len(r) > 1:
        chi2 = float((w * (s * r / g - 1) ** 2).sum()) / (len(r) - 1)
        sigma_rel *= math.sqrt(max(chi2, 1.0))
    return s, sigma_rel


def _quantised_g(g_inv_nm: float) -> float:
    """Round a ring-list limit up to a multiple of 2.5 1/nm, so the cached lists are reused."""
    return float(math.ceil(g_inv_nm / 2.5) * 2.5)


def match_scale(obs: ObservedRings, phases: Sequence[Phase], *, scale_inv_nm_per_px: float | None = None,
                scale_sigma_rel: float = 0.005, scale_range=PLAUSIBLE_SCALE_INV_NM_PER_PX, tol_rel: float = 0.01,
                n_best: int = 3, seeds: Sequence[float] = ()) -> list[RingMatch]:
    """Best (scale, assignment) hypotheses for `phases` together, best first (distinct scales).

    Parameters
    ----------
    obs : measured rings
    phases : one phase, or two for a mixture
    scale_inv_nm_per_px : calibrated scale (None: free, found by voting within `scale_range`)
    scale_sigma_rel : relative uncertainty of the calibrated scale (its prior width)
    tol_rel : largest relative radius misfit of a match
    seeds : extra starting scales (e.g. the best scales of each phase alone)
    """
    lines = []
    for ph in phases:
        g_need = obs.r_max_px * (scale_inv_nm_per_px * (1 + 5 * scale_sigma_rel) if scale_inv_nm_per_px else
                                 scale_range[1])
        lines.append(ring_lines(ph, _quantised_g(min(max(g_need * 1.05, 4.0), MAX_LINE_G_INV_NM))))
    if not all(len(ln.g_inv_nm) for ln in lines):  # a phase with no line in reach cannot explain a ring
        return []
    prior = None if scale_inv_nm_per_px is None else (float(scale_inv_nm_per_px), float(scale_sigma_rel))
    lo, hi = scale_range
    if prior is not None:
        lo, hi = prior[0] * (1 - 5 * prior[1]), prior[0] * (1 + 5 * prior[1])
    # Voting: strong rings x first lines.
    strong = np.argsort(-obs.intensity)[:10]
    g_all = np.sort(np.concatenate([ln.g_inv_nm[:25] for ln in lines]))
    cands = (g_all[None, :] / obs.radius_px[strong][:, None]).ravel()
    cands = np.concatenate([cands, np.asarray(list(seeds), float)] + ([[prior[0]]] if prior else []))
    cands = cands[(cands >= lo) & (cands <= hi)]
    if len(cands) == 0:
        return []
    g_lines = np.sort(np.concatenate([ln.g_inv_nm for ln in lines]))
    w_ring = np.sqrt(obs.intensity[strong])
    r_s = obs.radius_px[strong]
    pred = g_lines[None, None, :] / cands[:, None, None]  # (C, 1, L)
    near = np.min(np.abs(pred - r_s[None, :, None]) / r_s[None, :, None], axis=2)  # (C, K)
    quick = ((near <= tol_rel) * w_ring[None, :]).sum(axis=1) / w_ring.sum()
    order = np.argsort(-quick, kind="stable")
    picked = []
    for c in order:
        s = cands[c]
        if all(abs(s / t - 1) > 0.003 for t in picked):
            picked.append(s)
        if len(picked) >= 8:
            break
    results = []
    for s in picked:
        g_out = obs.r_max_px * s * 1.05
        if g_out > min(ln.max_g_inv_nm for ln in lines):  # rings beyond the lists: extend them for this scale
            lines_s = [ring_lines(ln.phase, _quantised_g(min(max(g_out, ln.max_g_inv_nm), MAX_EXTENDED_G_INV_NM)))
                       for ln in lines]
        else:
            lines_s = lines
        m = evaluate(obs, lines_s, s, tol_rel=tol_rel, prior=prior)
        for _ in range(4):
            s_new, sig = _refine_scale(obs, m, prior)
            if not lo <= s_new <= hi:
                break
            m_new = evaluate(obs, lines_s, s_new, tol_rel=tol_rel, prior=prior, scale_sigma_rel=sig)
            converged = abs(s_new / m.scale_inv_nm_per_px - 1) < 1e-7
            m = m_new
            if converged:
                break
        results.append(m)
    results.sort(key=lambda m: -m.score)
    out = []
    for m in results:
        if all(abs(m.scale_inv_nm_per_px / o.scale_inv_nm_per_px - 1) > 0.002 for o in out):
            out.append(m)
        if len(out) >= n_best:
            break
    return out

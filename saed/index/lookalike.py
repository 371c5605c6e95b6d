"""Look-alikes: which solutions cannot be told apart, what separates them, and which tilt decides.

Two solutions are compared spot by spot in the detector frame, each with its own refined
orientation and scale: a predicted reflection of one that the other does not predict (allowed or
reachable by double diffraction) is a *separating* spot; it is *decisive* when it is strong
enough to be seen and the pattern says whether it is there. When nothing here decides, the
tilt search looks for a tilt about a reflection row common to both (the row stays excited while
tilting, so the operator can follow it) that brings one phase to a low-index zone where the two
patterns differ: the beam sweeps the great circle of zones containing that row, and for each zone
of the best solution within reach the other solution is carried along by the same rotation and
its pattern at the new beam direction is compared. Tilts are right-handed rotations of the
specimen about the row as it lies on the detector (azimuth from +x toward +y).

Cases this is written for (check values in docs/indexing.md): fcc [112] vs hcp [01-10] cobalt
(a 0.6 % ratio, undecidable; tilt 19.5 deg about 2-20 to fcc [111], where hcp reaches no zone),
fcc [111] vs hcp [0001] (the hcp 10-10 spots coincide with the fcc 1/3{422} positions that
thin foils and faults light up), ordered vs disordered alloys (superlattice spots), diamond vs
fcc and zinc blende vs diamond (200 allowed, or only by double diffraction).
"""

from __future__ import annotations

import enum
import logging
import math
from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from saed.crystal.miller import format_indices, plane_to_4, direction_to_4
from saed.crystal.notation import RECIPROCAL_UNIT, Reciprocal, UnitText
from saed.index.mistilt import with_mistilt
from saed.index.values import Lookalike, Solution, TiltAdvice
from saed.readonly import frozen_array
from saed.simulate.geometry import rotation_about_axis
from saed.simulate.zone import zone_pattern
from saed.units import percent, percent_off

logger = logging.getLogger(__name__)

__all__ = ["annotate", "compare", "separating_tilt", "sense_ambiguous", "Relation", "SAED_RATIO_ACCURACY_PCT"]


class Relation(enum.StrEnum):
    """How a look-alike stands to the best solution (``Lookalike.relation``; a str, so JSON is unchanged)."""

    #: the patterns cannot be told apart here (a tilt or another technique decides)
    AMBIGUOUS = "ambiguous"
    #: a few spots decide
    CLOSE = "close"
    #: what this phase would show is missing from the pattern
    RULED_OUT = "ruled out"
    #: uncalibrated: an isostructural phase fits by ratios and angles just as well (the scale decides)
    IDENTICAL_GEOMETRY = "identical geometry"


class _Counterpart(enum.StrEnum):
    """What the other solution has where a separating spot of one solution lies."""

    NOTHING = "nothing"
    HOLZ_PROJECTION = "holz-projection"  # a projected higher-order Laue-zone position (thin or faulted foils)

#: Relative accuracy of spacing ratios from one SAED pattern, percent (Williams & Carter 2009, ch. 18;
#: common practice: 1-2 %). Differences below this cannot separate two solutions.
SAED_RATIO_ACCURACY_PCT = 1.0

#: Kinematic |F|^2 (strongest = 1) below which a predicted spot is "weak" (set by hand; kinematic
#: intensities ignore dynamical scattering, so they only sort spots coarsely).
WEAK_I = 0.02
#: Kinematic |F|^2 above which a predicted spot counts in the tilt comparison: low, so that weak
#: superlattice spots of ordered alloys count (set by hand) ...
COUNTED_I = 2e-4
#: ... and above which it makes a row visible when deciding whether a tilt reaches a zone pattern
#: (set by hand).
VISIBLE_I = 1e-3
#: Two spot directions are independent rows when the sine of their angle exceeds this (about 11.5 deg).
TWO_ROWS_MIN_SINE = 0.2
#: Two predicted spots are the same spot when within this fraction of |g| (or the floor) of each
#: other: 1.2 %, about the SAED ratio accuracy (SAED_RATIO_ACCURACY_PCT), so differences the
#: pattern cannot measure do not separate.
SAME_SPOT_REL = 0.012
#: Relative distance within which a spot of one solution lies on a row of the other (tilt axis
#: search): looser than SAME_SPOT_REL, since the tilt only needs the row the operator follows.
COMMON_ROW_REL, COMMON_ROW_FLOOR_INV_NM = 0.02, 0.05
#: Rows closer than this in direction are one tilt axis.
SAME_ROW_DIRECTION_DEG = 3.0
#: Rows tried as tilt axes, shortest |g| first (the short rows are the strong ones the operator sees).
TILT_ROWS_TRIED = 4
#: Zone axes a tilt may aim at: readable index up to this (low-index zones have patterns an operator
#: recognises); the arc of a phase that reaches none is searched up to ARC_ZONE_MAX_INDEX.
TILT_TARGET_MAX_INDEX = 3
ARC_ZONE_MAX_INDEX = 2
#: The beam is on a zone of the best solution within this angle (deg; the tilt is computed to reach
#: it exactly), and on one of the other within OTHER_ON_ZONE_TOL_DEG (it is carried along, not aimed at).
ON_ZONE_TOL_DEG, OTHER_ON_ZONE_TOL_DEG = 0.5, 1.0
#: Floor (1/nm) of the spot coincidence in the tilt comparison, and the fraction of the recorded |g|
#: range compared (the edge of the detector is left out: spots there come and go with small errors).
TILT_SPOT_FLOOR_INV_NM, TILT_COMPARED_G_FRACTION = 0.05, 0.95
#: Smallest tilt suggested, degrees: below this the operator cannot tell it from the mistilt.
MIN_SUGGESTED_TILT_DEG = 3.0
#: Largest tilt suggested, degrees (typical double-tilt holders reach +-25..30 deg per axis).
MAX_SUGGESTED_TILT_DEG = 45.0
#: Fraction of spots that must differ for a tilt to separate two solutions (one spot in five).
DECISIVE_DISSIMILARITY = 0.2
#: Merit lost by a tilt that separates in one sense only when the sense is unknown (180-degree
#: ambiguity): more than any dissimilarity gain, so a tilt that works both ways always wins.
ONE_SENSE_PENALTY = 0.5
#: Merit costs: one unit of dissimilarity per TILT_COST_DEG of tilt, and ZONE_INDEX_COST per step of
#: the target zone's index (small tilts to low-index zones first; weights set by hand on the cases
#: of docs/indexing.md).
TILT_COST_DEG = 150.0
ZONE_INDEX_COST = 0.1
#: A zone on the tilt arc this close (deg) to the tilt itself or to no tilt is not a different one.
ARC_MIN_DISTINCT_DEG = 1.0

#: Two solutions' spots coincide on the detector within this many pixels at least (a spot's own
#: position error on a typical frame is a few tenths of a pixel; two is safely above it).
MATCH_FLOOR_PX = 2.0
#: Separating spots are looked for between this fraction of the shortest measured |g| (below one
#: half, so superlattice spots at half a fundamental spacing count) and this fraction of the
#: longest (just past the last spot seen); set by hand.
REGION_INNER_FRACTION, REGION_OUTER_FRACTION = 0.35, 1.02
#: Measured spots are "strong" against this percentile of the pattern's spot intensities (the strong
#: spots, not the median: most spots of a pattern are weak).
STRONG_REFERENCE_PERCENTILE = 90
#: A seen separating spot under this fraction of the strong reference is weak (thin-foil HOLZ
#: projections and faults make such spots; they do not decide).
WEAK_OBSERVED_STRENGTH = 0.1
#: Spacing ratios that differ by less than this (percent) are the same pattern (a third of the SAED
#: ratio accuracy: no measurement can tell them apart).
SAME_RATIOS_PCT = 0.3
#: Relative distance within which two patterns' spots are the same reflection when their spacing
#: ratios are compared (looser than SAME_SPOT_REL: the ratios are what is measured here).
SHARED_SPOT_REL = 0.03

#: Which solutions are compared as look-alikes of the best: the next COMPETITORS_CONSIDERED, those
#: within LOOKALIKE_SCORE_GAP of its score, at most MAX_COMPETING_LOOKALIKES of them and
#: MAX_LOOKALIKES with the related phases (a reader takes in three or so; more hides the one that matters).
COMPETITORS_CONSIDERED, LOOKALIKE_SCORE_GAP, MAX_COMPETING_LOOKALIKES, MAX_LOOKALIKES = 6, 0.15, 3, 5
#: A "close" look-alike this far below the best is "ruled out" (what it would show is missing).
RULED_OUT_SCORE_GAP = 0.1
#: Uncalibrated isostructural solutions within this score of each other are twins of one geometry.
TWIN_SCORE_DIFF = 0.02
#: Related phases (worth a "ruled out" note): a shared element and atomic volumes within this fraction.
RELATED_ATOMIC_VOLUME_REL = 0.15

#: Dissimilarity credited to a tilt where one phase reaches a zone pattern and the other none.
NO_ZONE_DISSIMILARITY = 0.45


@dataclass(frozen=True)
class _Pattern:
    """A predicted pattern in the detector frame: vectors (1/nm), |F|^2 relative, flags, indices.

    The one pattern representation of this module: of a fitted solution (:func:`_pattern_of`) and
    of a tilted orientation (:func:`_lab_pattern`, no HOLZ positions).
    """

    xy: np.ndarray
    inten: np.ndarray
    allowed: np.ndarray
    dd: np.ndarray
    hkl: np.ndarray
    holz_xy: np.ndarray
    hexagonal: bool
    g: np.ndarray  # the reflections' own |g| (1/nm), independent of the fitted scale and distortion


def _pattern_of(fit, g_max: float, scale_ref: float) -> _Pattern:
    """The predicted pattern of a fit on the detector, in 1/nm of the reference scale `scale_ref`.

    Two solutions of one uncalibrated pattern have different implied scales; they are compared
    where they matter, on the detector, so both are converted with the same scale.
    """
    zp = fit.zone
    allowed = ~zp.kinematically_forbidden
    f = zp.f_abs / max(float(zp.f_abs[allowed].max()) if np.any(allowed) else 1.0, 1e-30)
    xy = fit.predicted_px * scale_ref
    keep = (np.linalg.norm(xy, axis=1) <= g_max) & (allowed | zp.double_diffraction)
    holz = np.zeros((0, 2))
    if getattr(fit, "holz_xy_inv_nm", None) is not None and len(fit.holz_xy_inv_nm):
        holz = fit.holz_xy_inv_nm * (scale_ref / fit.scale)
    return _Pattern(xy[keep], np.where(allowed, f * f, 0.0)[keep], allowed[keep], zp.double_diffraction[keep],
                    zp.hkl[keep], holz, fit.table.phase.is_hexagonal, np.asarray(zp.g_inv_nm)[keep])


def _hkl_text(hkl, hexagonal: bool) -> str:
    h = np.asarray(hkl, dtype=np.int64)
    return format_indices(plane_to_4(h) if hexagonal else h)


def _zone_text(uvw, hexagonal: bool) -> str:
    u = np.asarray(uvw, dtype=np.int64)
    return format_indices(direction_to_4(u) if hexagonal else u)


def _sol_zone(sol: Solution) -> str:
    return format_indices(sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis)


def _near(a_xy: np.ndarray, b_xy: np.ndarray, *, rel: float, floor: float) -> tuple[np.ndarray, np.ndarray]:
    """For each row of a: index of the nearest row of b and whether it lies within tolerance."""
    if len(b_xy) == 0 or len(a_xy) == 0:
        return np.full(len(a_xy), -1), np.zeros(len(a_xy), bool)
    d = np.linalg.norm(a_xy[:, None, :] - b_xy[None, :, :], axis=2)
    j = np.argmin(d, axis=1)
    tol = np.maximum(rel * np.linalg.norm(a_xy, axis=1), floor)
    return j, d[np.arange(len(a_xy)), j] <= tol


@dataclass(frozen=True)
class _Extra:
    """Spots one solution predicts and the other does not, grouped by |g|."""

    g_inv_nm: float
    hkl: tuple
    count: int
    intensity: float  # kinematic, relative
    observed: int  # how many have a measured spot
    observed_strength: float  # median measured intensity / median indexed intensity
    other_kind: _Counterpart  # what the other solution has there


def _extras(p: _Pattern, q: _Pattern, meas_xy: np.ndarray, meas_i: np.ndarray, ref_i: float, *,
            region_r: tuple[float, float], tol_rel: float, floor: float) -> list[_Extra]:
    """Allowed spots of p (inside the observed radius range) with no counterpart in q."""
    r = np.linalg.norm(p.xy, axis=1)
    sel = p.allowed & (r >= region_r[0]) & (r <= region_r[1])
    if not np.any(sel):
        return []
    idx = np.flatnonzero(sel)
    _, hit = _near(p.xy[idx], q.xy, rel=tol_rel, floor=floor)
    _, holz = _near(p.xy[idx], q.holz_xy, rel=tol_rel, floor=floor)
    miss = idx[~hit]
    holz_kind = dict(zip(idx.tolist(), holz.tolist()))
    _, seen = _near(p.xy[miss], meas_xy, rel=tol_rel, floor=floor)
    jm, _ = _near(p.xy[miss], meas_xy, rel=tol_rel, floor=floor)
    groups: dict[float, list[int]] = {}
    for k, row in enumerate(miss):
        groups.setdefault(round(float(p.g[row]), 2), []).append(k)
    out = []
    for g, ks in sorted(groups.items()):
        rows = miss[ks]
        obs = [k for k in ks if seen[k]]
        strength = float(np.median(meas_i[jm[obs]]) / ref_i) if obs and ref_i > 0 else 0.0
        other = _Counterpart.HOLZ_PROJECTION if all(holz_kind[int(x)] for x in rows) else _Counterpart.NOTHING
        best = rows[np.argmax(p.inten[rows])]
        out.append(_Extra(g, tuple(int(v) for v in p.hkl[best]), len(rows), float(np.max(p.inten[rows])), len(obs),
                          strength, other))
    return out


def _ratio_difference_pct(p: _Pattern, q: _Pattern, *, floor: float) -> float:
    """Largest difference (percent) between the spacing ratios of the spots the two patterns share.

    The ratios come from the reflections' own |g|, so a fitted scale or distortion cannot hide them.
    """
    sel = np.flatnonzero(p.allowed & (p.inten >= WEAK_I))
    if len(sel) == 0:
        return 0.0
    j, hit = _near(p.xy[sel], q.xy, rel=SHARED_SPOT_REL, floor=floor)
    if not np.any(hit):
        return 0.0
    a = p.g[sel][hit]
    b = q.g[j[hit]]
    k = int(np.argmin(a))
    return float(percent(np.max(np.abs((a / a[k]) / (b / b[k]) - 1.0))))


def compare(best: Solution, fit_b, other: Solution, fit_o, measured, spots, *, g_max: float,
            calibrated: bool) -> tuple[Relation, UnitText, bool]:
    """Relation, separating text and whether a tilt is needed, for two solutions of one pattern.

    The text keeps its reciprocal lengths as numbers (:class:`~saed.crystal.notation.UnitText`):
    ``str()`` of it is the stored (JSON) text in 1/nm, and a report writes it in the chosen units.
    """
    scale = best.scale_inv_nm_per_px
    pb, po = _pattern_of(fit_b, g_max, scale), _pattern_of(fit_o, g_max, scale)
    meas_xy = spots.v_px * scale
    floor = MATCH_FLOOR_PX * scale
    r_meas = np.linalg.norm(meas_xy, axis=1)
    region = ((REGION_INNER_FRACTION * float(r_meas.min()), REGION_OUTER_FRACTION * float(r_meas.max()))
              if len(r_meas) else (0.0, 0.0))
    # "strong" is judged against the strong spots of the pattern (90th percentile), not the median
    ref_i = float(np.percentile(spots.intensity, STRONG_REFERENCE_PERCENTILE)) if len(spots.intensity) else 1.0
    ex_o = _extras(po, pb, meas_xy, spots.intensity, ref_i, region_r=region, tol_rel=SAME_SPOT_REL, floor=floor)
    ex_b = _extras(pb, po, meas_xy, spots.intensity, ref_i, region_r=region, tol_rel=SAME_SPOT_REL, floor=floor)
    ratio_pct = _ratio_difference_pct(pb, po, floor=floor)
    hexb, hexo = pb.hexagonal, po.hexagonal
    name_b = f"{best.phase_name} [{_sol_zone(best)}]"
    name_o = f"{other.phase_name} [{_sol_zone(other)}]"
    parts = []
    strong_evidence = weak_evidence = False
    caution = ""

    def listing(ex, hx) -> UnitText:
        items = [UnitText((f"{_hkl_text(e.hkl, hx)} at ", Reciprocal(e.g_inv_nm, decimals_inv_nm=2)))
                 + (" (weak)" if e.intensity < WEAK_I else "") for e in ex[:3]]
        return UnitText.join(", ", items) + UnitText((" ", RECIPROCAL_UNIT)) + (" and more" if len(ex) > 3 else "")

    for ex, who, whom, hx, mine in ((ex_o, name_o, name_b, hexo, False), (ex_b, name_b, name_o, hexb, True)):
        plain = []
        for e in ex:
            holz_weak = e.other_kind is _Counterpart.HOLZ_PROJECTION and e.observed and e.observed_strength < WEAK_OBSERVED_STRENGTH
            if holz_weak:
                caution = caution or (f"the {_hkl_text(e.hkl, hx)} spots of {who} are weak here, and weak spots at those "
                           f"positions also arise in thin or faulted foils of {whom.split(' [')[0]} (projected "
                           f"higher-order Laue-zone reflections), so they do not decide; strong ones would favour "
                           f"{who.split(' [')[0]}")
                continue
            plain.append(e)
            weak = e.intensity < WEAK_I
            if weak and not e.observed:
                weak_evidence = True
            else:
                strong_evidence = True
        unseen = [e for e in plain if not e.observed]
        seen = [e for e in plain if e.observed]
        if mine:
            if seen:
                parts.append(listing(seen, hx) + f" seen here have no place in {whom}")
            if unseen:
                parts.append(f"{who} also predicts " + listing(unseen, hx) + ": not seen")
        else:
            if unseen:
                parts.append(f"{who} would add " + listing(unseen, hx) + ": not seen")
            if seen:
                strong = [e for e in seen if e.observed_strength >= WEAK_OBSERVED_STRENGTH]
                parts.append(f"{who} explains " + listing(seen, hx) + f" seen here ({'strong' if strong else 'weak'}), "
                             f"which {whom} lacks")
    relation = Relation.CLOSE
    need_tilt = False
    if not ex_o and not ex_b:
        if ratio_pct < SAME_RATIOS_PCT:
            relation = Relation.IDENTICAL_GEOMETRY if not calibrated else Relation.AMBIGUOUS
            if best.structure_type == other.structure_type and best.phase_name != other.phase_name:
                d_pct = abs(percent_off(best.scale_inv_nm_per_px, other.scale_inv_nm_per_px))
                parts.append(f"same structure and spot pattern; the cells differ by {d_pct:.2f} % in scale"
                             + (" (below the calibration accuracy: an internal standard or another technique "
                                "such as EDS decides)" if calibrated else
                                UnitText((" (uncalibrated: the implied scale is ",
                                          Reciprocal(other.scale_inv_nm_per_px, significant=5), " ", RECIPROCAL_UNIT,
                                          f" per px for {other.phase_name})"))))
            else:
                parts.append("the same spots at the same positions in this zone")
                need_tilt = True
        else:
            relation = Relation.AMBIGUOUS if ratio_pct < SAED_RATIO_ACCURACY_PCT else Relation.CLOSE
            parts.append(f"no spot differs; spacing ratios differ by {ratio_pct:.1f} %"
                         + (" (below SAED accuracy, about 1-2 %)" if ratio_pct < SAED_RATIO_ACCURACY_PCT else ""))
            need_tilt = relation is Relation.AMBIGUOUS
    elif caution:
        relation = Relation.AMBIGUOUS
        parts.append(caution)
        need_tilt = True
    elif not strong_evidence and weak_evidence:
        parts.append(f"only weak spots decide: {best.phase_name} is favoured (a longer exposure, or a dark-field "
                     "image from one of those positions, makes sure)")
    return relation, UnitText.join("; ", parts), need_tilt


# ---------------------------------------------------------------------- tilt search
@lru_cache(maxsize=8)
def _index_directions(n: int) -> np.ndarray:
    r = np.arange(-n, n + 1)
    uvw = np.array(np.meshgrid(r, r, r, indexing="ij")).reshape(3, -1).T
    uvw = uvw[np.any(uvw != 0, axis=1)]
    g = np.gcd.reduce(np.abs(uvw), axis=1)
    uvw = uvw[g == 1]
    # one of +-uvw
    key = np.sign(uvw[:, 0]) * 9 + np.sign(uvw[:, 1]) * 3 + np.sign(uvw[:, 2])
    return frozen_array(uvw[key > 0])


@lru_cache(maxsize=16)
def _readable_directions(n: int, hexagonal: bool) -> np.ndarray:
    """Directions [uvw] (one of each +-pair, 3-index) whose index as people read it is at most n.

    The bound applies to the form it is stated in: for hexagonal axes the 4-index [UVTW] (u = U - T,
    v = V - T, so 3-index values reach 2n: <20-2-1> = [4 2 -1]); else the 3-index [uvw].
    """
    cand = _index_directions(2 * n if hexagonal else n)
    keep = np.array([_zone_index(u, hexagonal) <= n for u in cand], dtype=bool)
    return frozen_array(cand[keep])


def _nearest_zone(phase, beam_crystal: np.ndarray, *, max_index: int, tol_deg: float):
    """Lowest-index zone of `phase` (readable index <= max_index) within `tol_deg` of a beam direction, or None."""
    uvw = _readable_directions(max_index, phase.is_hexagonal)
    r = phase.lattice.r_cartesian_nm(uvw)
    r /= np.linalg.norm(r, axis=1, keepdims=True)
    b = beam_crystal / np.linalg.norm(beam_crystal)
    cos = r @ b
    ang = np.degrees(np.arccos(np.clip(np.abs(cos), -1, 1)))
    ok = np.flatnonzero(ang <= tol_deg)
    if len(ok) == 0:
        j = int(np.argmin(ang))
        return None, float(ang[j]), uvw[j] * int(np.sign(cos[j]) or 1)
    size = np.abs(direction_to_4(uvw[ok]) if phase.is_hexagonal else uvw[ok]).sum(axis=1)
    j = ok[np.argmin(size * 10 + ang[ok])]
    return uvw[j] * int(np.sign(cos[j]) or 1), float(ang[j]), None


def _lab_pattern(phase, uvw, u_lab: np.ndarray, *, voltage_kv: float, g_max: float) -> _Pattern:
    """The kinematic pattern of `phase` on zone `uvw` in orientation `u_lab`, in the detector frame (1/nm)."""
    zp = zone_pattern(phase, uvw, voltage_kv=voltage_kv, max_g_inv_nm=g_max, include_holz=False)
    allowed = ~zp.kinematically_forbidden
    f = zp.f_abs / max(float(zp.f_abs[allowed].max()) if np.any(allowed) else 1.0, 1e-30)
    xy = (phase.lattice.g_cartesian_inv_nm(zp.hkl) @ u_lab.T)[:, :2]
    return _Pattern(xy, np.where(allowed, f * f, 0.0), allowed, zp.double_diffraction, zp.hkl, np.zeros((0, 2)),
                    phase.is_hexagonal, np.asarray(zp.g_inv_nm))


def _two_rows(pat: _Pattern) -> bool:
    """True when a lab pattern has visible spots in two independent directions (a real zone pattern)."""
    v = pat.xy[pat.allowed & (pat.inten >= VISIBLE_I)]
    if len(v) < 2:
        return False
    u = v / np.linalg.norm(v, axis=1, keepdims=True)
    return bool(np.any(np.abs(u[:, None, 0] * u[None, :, 1] - u[:, None, 1] * u[None, :, 0]) > TWO_ROWS_MIN_SINE))


def _dissimilarity(a: _Pattern, b: _Pattern, *, floor: float, g_max: float) -> tuple[float, list, list]:
    """Fraction of visible spots of either pattern without a counterpart, and the separating rows.

    Spots are counted, not weighted by intensity, so weak superlattice spots count fully; a spot
    the other pattern has only by double diffraction counts half.
    """
    def side(p: _Pattern, q: _Pattern):
        sel = p.allowed & (p.inten >= COUNTED_I) & (np.linalg.norm(p.xy, axis=1) <= g_max)
        if not np.any(sel):
            return 0, 0, []
        present = q.allowed | q.dd
        _, hit = _near(p.xy[sel], q.xy[present], rel=SAME_SPOT_REL, floor=floor)
        _, hit_dd = _near(p.xy[sel], q.xy[q.dd & ~q.allowed], rel=SAME_SPOT_REL, floor=floor)
        miss = np.flatnonzero(sel)[~hit]
        miss = miss[np.argsort(-p.inten[miss], kind="stable")]
        part = np.count_nonzero(~hit) + 0.5 * np.count_nonzero(hit & hit_dd)
        return part, np.count_nonzero(sel), miss

    ma, na, miss_a = side(a, b)
    mb, nb, miss_b = side(b, a)
    tot = na + nb
    return (0.0 if tot == 0 else (ma + mb) / tot), list(miss_a), list(miss_b)


def _zone_index(uvw, hexagonal: bool) -> int:
    """Largest index of a zone axis in the notation people read (4-index for hexagonal axes)."""
    u = np.asarray(uvw, dtype=np.int64)
    return int(np.abs(direction_to_4(u) if hexagonal else u).max())


def _zones_with_row(phase, hkl, max_index: int) -> np.ndarray:
    """Zone axes [uvw] (one of each +-pair) containing reflection `hkl`, readable index <= max_index."""
    cand = _readable_directions(max_index, phase.is_hexagonal)
    return cand[(cand @ np.asarray(hkl, dtype=np.int64)) == 0]


def _tilt_to(z_lab: np.ndarray, axis: np.ndarray) -> float:
    """Signed right-handed rotation (deg) about `axis` that brings the unit vector z_lab onto +z."""
    return math.degrees(math.atan2(float(np.cross(z_lab, [0.0, 0.0, 1.0]) @ axis), float(z_lab[2])))


def sense_ambiguous(phase, uvw) -> bool:
    """True when one pattern of `phase` on zone [uvw] cannot tell the crystal from itself turned 180 deg about the beam.

    See :func:`saed.crystal.symmetry.has_twofold_axis`: the readings are equivalent only when the
    zone is a two-fold axis of the Laue group.
    """
    from saed.crystal.symmetry import has_twofold_axis

    return not has_twofold_axis(uvw, phase.space_group)


def _holder_text(phase, u_m, zone, alpha_axis_deg: float) -> tuple[str, tuple[float, float]]:
    """Holder readings (from 0, 0) that put `zone` on the beam for orientation u_m, and their text."""
    from saed.simulate.tilt import Holder, tilt_to_zone

    st = tilt_to_zone(phase, u_m, zone, Holder(alpha_axis_deg=alpha_axis_deg, alpha_range_deg=(-90, 90),
                                                beta_range_deg=(-90, 90)))
    return f"alpha {st.alpha_deg:+.1f}, beta {st.beta_deg:+.1f} deg", (st.alpha_deg, st.beta_deg)


@dataclass(frozen=True, eq=False)
class _CommonRow:
    """A reflection row both solutions share on the detector: its row in each table and its unit direction."""

    index_a: int  # row of the best solution's zone pattern
    index_b: int  # row of the other solution's zone pattern
    direction: np.ndarray  # (2,) unit vector on the detector


@dataclass(frozen=True, eq=False)
class _TiltOutcome:
    """What a tilt by some angle shows: each phase's zone (None: no low-index zone), patterns, separation.

    ``dissimilarity``: :func:`_dissimilarity` of the two patterns, or NO_ZONE_DISSIMILARITY when
    only one phase reaches a zone; ``miss_a`` / ``miss_b``: rows of ``pattern_a`` / ``pattern_b``
    (strongest first) with no counterpart in the other pattern.
    """

    zone_a: np.ndarray | None
    zone_b: np.ndarray | None
    pattern_a: _Pattern | None
    pattern_b: _Pattern | None
    dissimilarity: float
    miss_a: list
    miss_b: list

    @property
    def separates(self) -> bool:
        return self.dissimilarity >= DECISIVE_DISSIMILARITY


@dataclass(frozen=True, eq=False)
class _TiltChoice:
    """The best tilt found so far: its merit, angle, row, and the outcome in each sense of the 180-degree reading."""

    merit: float
    omega_deg: float
    row: _CommonRow
    reported: _TiltOutcome | None  # the orientation as reported
    turned: _TiltOutcome | None  # the crystal turned 180 deg about the beam (same as tilting by -omega)


def _dissimilarity_of(o: _TiltOutcome | None) -> float:
    return o.dissimilarity if o is not None else 0.0


def _common_rows(best: Solution, fit_b, other: Solution, fit_o, *, g_max: float) -> list[_CommonRow]:
    """Reflection rows both solutions put at the same place on the detector, one per direction, shortest first."""
    pa, pb = fit_b.table.phase, fit_o.table.phase
    ua, ub = np.asarray(best.orientation_matrix), np.asarray(other.orientation_matrix)
    # the other solution on the detector, in the best solution's 1/nm: its own implied scale
    f_b = best.scale_inv_nm_per_px / other.scale_inv_nm_per_px
    za, zb = fit_b.zone, fit_o.zone
    ga = (pa.lattice.g_cartesian_inv_nm(za.hkl) @ ua.T)[:, :2]
    gb = (pb.lattice.g_cartesian_inv_nm(zb.hkl) @ ub.T)[:, :2] * f_b
    sel_a = np.flatnonzero((~za.kinematically_forbidden | za.double_diffraction) & (za.g_inv_nm <= g_max))
    sel_b = np.flatnonzero(~zb.kinematically_forbidden | zb.double_diffraction)
    rows: list[_CommonRow] = []
    if len(sel_a) and len(sel_b):
        j, hit = _near(ga[sel_a], gb[sel_b], rel=COMMON_ROW_REL, floor=COMMON_ROW_FLOOR_INV_NM)
        same_direction = math.cos(math.radians(SAME_ROW_DIRECTION_DEG))
        for k in np.flatnonzero(hit):
            ia, ib = sel_a[k], sel_b[j[k]]
            d = ga[ia] / np.linalg.norm(ga[ia])
            if any(abs(float(d @ r.direction)) > same_direction for r in rows):
                continue
            rows.append(_CommonRow(int(ia), int(ib), d))
    rows.sort(key=lambda r: za.g_inv_nm[r.index_a])
    return rows


def separating_tilt(best: Solution, fit_b, other: Solution, fit_o, *, voltage_kv: float,
                    g_max: float = 10.0, holder_alpha_axis_deg: float | None = None) -> TiltAdvice | None:
    """The smallest tilt about a common row that reaches a zone where the two solutions differ.

    Candidate tilts are those that bring either phase to a low-index zone containing the row;
    at each, the other phase's beam direction follows from the same rotation, and the two
    kinematic patterns are compared (:func:`_dissimilarity`) on the detector, each solution with
    its own (implied) scale. The merit prefers decisive differences, small tilts and low-index
    target zones.

    The 180-degree ambiguity: when either zone is not a two-fold axis of its crystal
    (:func:`sense_ambiguous`), the pattern fits the reported orientation U and Rz(180) U equally.
    Both solutions turn together (they were fitted to the same spots), and a tilt by +omega of
    Rz(180) U is a tilt by -omega of U about the same detector axis. So both senses are evaluated;
    a tilt that separates the phases in both senses is preferred, and the advice names what each
    sense reaches under each reading.
    """
    pa, pb = fit_b.table.phase, fit_o.table.phase
    ua = np.asarray(best.orientation_matrix)
    ub = np.asarray(other.orientation_matrix)
    f_b = best.scale_inv_nm_per_px / other.scale_inv_nm_per_px
    za, zb = fit_b.zone, fit_o.zone
    rows = _common_rows(best, fit_b, other, fit_o, g_max=g_max)
    ambiguous = sense_ambiguous(pa, best.zone_axis) or sense_ambiguous(pb, other.zone_axis)
    beam = np.array([0.0, 0.0, 1.0])

    def outcome(axis, omega) -> _TiltOutcome | None:
        """What the reported orientations show after a tilt by omega about `axis`; None when neither reaches a zone."""
        rot = rotation_about_axis(axis, omega)
        ua2, ub2 = rot @ ua, rot @ ub
        uvw_a, _, _ = _nearest_zone(pa, ua2.T @ beam, max_index=TILT_TARGET_MAX_INDEX, tol_deg=ON_ZONE_TOL_DEG)
        uvw_b, _, _ = _nearest_zone(pb, ub2.T @ beam, max_index=TILT_TARGET_MAX_INDEX, tol_deg=OTHER_ON_ZONE_TOL_DEG)
        pat_a = _lab_pattern(pa, uvw_a, ua2, voltage_kv=voltage_kv, g_max=g_max) if uvw_a is not None else None
        pat_b = None
        if uvw_b is not None:
            lab_b = _lab_pattern(pb, uvw_b, ub2, voltage_kv=voltage_kv, g_max=g_max / f_b)
            pat_b = replace(lab_b, xy=lab_b.xy * f_b)
        if pat_a is not None and not _two_rows(pat_a):
            uvw_a, pat_a = None, None
        if pat_b is not None and not _two_rows(pat_b):
            uvw_b, pat_b = None, None
        if uvw_a is None and uvw_b is None:
            return None
        if pat_a is not None and pat_b is not None:
            dis, miss_a, miss_b = _dissimilarity(pat_a, pat_b, floor=TILT_SPOT_FLOOR_INV_NM,
                                                 g_max=TILT_COMPARED_G_FRACTION * g_max)
        else:
            # one phase shows a zone pattern, the other none: separating, but an absence is weaker
            # evidence at the microscope than two different zone patterns
            dis, miss_a, miss_b = NO_ZONE_DISSIMILARITY, [], []
        return _TiltOutcome(uvw_a, uvw_b, pat_a, pat_b, dis, miss_a, miss_b)

    def index_of(o: _TiltOutcome) -> int:
        return min(_zone_index(u, p.is_hexagonal) for u, p in ((o.zone_a, pa), (o.zone_b, pb)) if u is not None)

    best_choice: _TiltChoice | None = None
    for row in rows[:TILT_ROWS_TRIED]:
        d = row.direction
        axis = np.array([d[0], d[1], 0.0])
        omegas = set()
        for phase, u_m, h in ((pa, ua, za.hkl[row.index_a]), (pb, ub, zb.hkl[row.index_b])):
            zs = _zones_with_row(phase, h, TILT_TARGET_MAX_INDEX)
            if len(zs) == 0:
                continue
            zl = phase.lattice.r_cartesian_nm(zs) @ u_m.T
            zl /= np.linalg.norm(zl, axis=1, keepdims=True)
            for z in np.concatenate([zl, -zl]):
                w = _tilt_to(z, axis)
                if MIN_SUGGESTED_TILT_DEG <= abs(w) <= MAX_SUGGESTED_TILT_DEG:
                    omegas.add(round(w, 2))
        for omega in sorted(omegas, key=abs):
            o1 = outcome(axis, omega)
            if o1 is None and not ambiguous:
                continue
            o2 = outcome(axis, -omega) if ambiguous else None  # = +omega for the crystal turned 180 deg
            if o1 is None and o2 is None:
                continue
            d1 = _dissimilarity_of(o1)
            if ambiguous:
                d2 = _dissimilarity_of(o2)
                both = min(d1, d2)
                # separating in both senses is worth much more than in one (the sense is unknown)
                dis = both if both >= DECISIVE_DISSIMILARITY else max(d1, d2) - ONE_SENSE_PENALTY
                index = min(index_of(o) for o in (o1, o2) if o is not None)
            else:
                dis, index = d1, index_of(o1)
            merit = dis - abs(omega) / TILT_COST_DEG - ZONE_INDEX_COST * (index - 1)
            logger.debug("tilt %.2f: d1 %.2f d2 %s merit %.3f", omega, d1,
                         None if o2 is None else round(o2.dissimilarity, 2), merit)
            if (max(d1, _dissimilarity_of(o2)) >= DECISIVE_DISSIMILARITY
                    and (best_choice is None or merit > best_choice.merit)):
                best_choice = _TiltChoice(merit, omega, row, o1, o2)
    if best_choice is None:
        return None
    omega, row, o1, o2 = best_choice.omega_deg, best_choice.row, best_choice.reported, best_choice.turned
    ia, ib, d = row.index_a, row.index_b, row.direction
    if ambiguous and o1 is None or (ambiguous and o2 is not None and not o1.separates and o2.separates):
        # state the sense that separates under the reported reading first
        omega, o1, o2 = -omega, o2, o1
    hexa, hexb = pa.is_hexagonal, pb.is_hexagonal
    row_a = _hkl_text(za.hkl[ia], hexa)
    row_b = _hkl_text(zb.hkl[ib], hexb)
    az = math.degrees(math.atan2(d[1], d[0])) % 360.0
    axis = np.array([d[0], d[1], 0.0])

    def reach(name, phase, uvw, u_m, h, hexagonal, w_sense):
        if uvw is not None:
            return f"{name} reaches [{_zone_text(uvw, hexagonal)}]"
        # the zones this phase does meet on the same tilt arc (they contain the same row)
        zs = _zones_with_row(phase, h, ARC_ZONE_MAX_INDEX)
        best_z, best_w = None, None
        if len(zs):
            zl = phase.lattice.r_cartesian_nm(zs) @ u_m.T
            zl /= np.linalg.norm(zl, axis=1, keepdims=True)
            for z, uvw_z in zip(np.concatenate([zl, -zl]), np.concatenate([zs, -zs])):
                w = _tilt_to(z, axis)
                if abs(w) < ARC_MIN_DISTINCT_DEG or w * w_sense < 0 or abs(w - w_sense) < ARC_MIN_DISTINCT_DEG:
                    continue
                if best_w is not None and abs(w - w_sense) >= abs(best_w - w_sense):
                    continue
                u_at = rotation_about_axis(axis, w) @ u_m
                if _two_rows(_lab_pattern(phase, uvw_z, u_at, voltage_kv=voltage_kv, g_max=g_max)):
                    best_z, best_w = uvw_z, w
        txt = f"{name} reaches no low-index zone"
        if best_z is not None:
            txt += f" (on this tilt arc its nearest zone pattern is [{_zone_text(best_z, hexagonal)}], at {abs(best_w):.1f} deg)"
        return txt

    def both_reach(o: _TiltOutcome | None, w_sense):
        uvw_a = o.zone_a if o is not None else None
        uvw_b = o.zone_b if o is not None else None
        return (f"{reach(best.phase_name, pa, uvw_a, ua, za.hkl[ia], hexa, w_sense)}, "
                f"{reach(other.phase_name, pb, uvw_b, ub, zb.hkl[ib], hexb, w_sense)}")

    def diffs_of(o: _TiltOutcome | None):
        if o is None:
            return ""
        diffs = []
        if o.miss_a:
            diffs.append(f"{best.phase_name} shows {_hkl_text(o.pattern_a.hkl[o.miss_a[0]], hexa)}")
        if o.miss_b:
            diffs.append(f"{other.phase_name} shows {_hkl_text(o.pattern_b.hkl[o.miss_b[0]], hexb)}")
        return (" (" + " and ".join(diffs) + " where the other has no spot)") if diffs else ""

    sign = "+" if omega > 0 else "-"
    other_sign = "-" if omega > 0 else "+"
    head = (f"tilt {abs(omega):.1f} deg about the {row_a} row ({row_b} in {other.phase_name}; detector azimuth "
            f"{az:.0f} deg")
    if not ambiguous:
        text = f"{head}, {sign} sense): {both_reach(o1, omega)}{diffs_of(o1)}"
    else:
        turned = [f"[{_sol_zone(s)}] is not a two-fold axis of {s.phase_name}" for s, p in ((best, pa), (other, pb))
                  if sense_ambiguous(p, s.zone_axis)]
        text = (f"{head}); this one pattern cannot tell the crystal from the same crystal turned 180 deg about the "
                f"beam ({'; '.join(turned)}), so the sense that works is not known: "
                f"{sign} sense: {both_reach(o1, omega)}{diffs_of(o1)} if the orientation is as reported, "
                f"{both_reach(o2, -omega)} if it is turned 180 deg; {other_sign} sense: the other way round"
                + (" (this tilt separates the phases in both senses)"
                   if o1 is not None and o2 is not None and o1.separates and o2.separates else
                   " (if no zone pattern appears by then, tilt the same amount the other way)"))

    def zone_of(o: _TiltOutcome | None, which: str):
        z = None if o is None else getattr(o, which)
        return None if z is None else tuple(int(v) for v in z)

    readings = turned_readings = None
    if holder_alpha_axis_deg is not None:
        # the same tilt as holder readings, counted from readings (0, 0) (approximate from others)
        def via(o: _TiltOutcome | None, u_a, u_b):
            if o is None:
                return None, ""
            if o.zone_a is not None:
                return _holder_text(pa, u_a, o.zone_a, holder_alpha_axis_deg)[::-1]
            return _holder_text(pb, u_b, o.zone_b, holder_alpha_axis_deg)[::-1]

        rz = np.diag([-1.0, -1.0, 1.0])  # 180 deg about the beam
        readings, t1 = via(o1, ua, ub)
        if ambiguous:
            turned_readings, t2 = via(o2, rz @ ua, rz @ ub)
        if t1:
            text += (f"; as holder readings from (0, 0): {t1}" + (f" as reported, {t2} if turned 180 deg"
                                                                  if ambiguous and turned_readings else ""))
    return TiltAdvice(angle_deg=float(omega), about_hkl=tuple(int(v) for v in za.hkl[ia]),
                      about_hkl_other=tuple(int(v) for v in zb.hkl[ib]), about_azimuth_deg=float(az),
                      target_zone=zone_of(o1, "zone_a"), other_target_zone=zone_of(o1, "zone_b"), text=text,
                      sense_ambiguous=bool(ambiguous), turned_target_zone=zone_of(o2, "zone_a") if ambiguous else None,
                      turned_other_target_zone=zone_of(o2, "zone_b") if ambiguous else None,
                      holder_readings_deg=readings, turned_holder_readings_deg=turned_readings)


# ---------------------------------------------------------------------- annotate ranked solutions
def _atomic_volume_nm3(phase) -> float:
    from saed.crystal.phase import cell_atoms

    return phase.lattice.volume_nm3 / max(len(cell_atoms(phase).elements), 1)


def _related(pa, pb) -> bool:
    """Phases worth a 'ruled out' note: polymorphs and ordered variants (a shared element, atomic volume within 15 %)."""
    ea = {s.element for s in pa.sites}
    eb = {s.element for s in pb.sites}
    if not ea & eb:
        return False
    va, vb = _atomic_volume_nm3(pa), _atomic_volume_nm3(pb)
    return abs(va / vb - 1.0) <= RELATED_ATOMIC_VOLUME_REL


def annotate(scored: list[tuple[Solution, object]], measured, tables, spots, *, holder_alpha_axis_deg=None,
             calibrated: bool, min_score: float, top: int, length_tol: float, rel_pos_tol: float,
             mistilt: bool = True, tilt_advice: bool = True) -> list[Solution]:
    """Mistilt, merged identical-geometry twins and look-alike notes for ranked solutions.

    `scored` holds (Solution, Fit) for every scored candidate, best first (including those below
    `min_score`, which only serve as 'ruled out' look-alikes). `length_tol` (fraction) and
    `rel_pos_tol` are the matcher's own tolerances, passed on to the near-miss search.
    `mistilt` False skips the mistilt fit (``Solution.mistilt`` stays None; nothing else changes);
    `tilt_advice` False skips the separating tilts of the look-alikes (``Lookalike.tilt`` stays None; the
    relations, texts and ranking are the same).
    """
    good = [(s, f) for s, f in scored if s.score >= min_score]
    if not good:
        return []
    g_max = tables.max_g_inv_nm
    # merge twins of identical geometry (uncalibrated isostructural phases) into the first one
    kept: list[tuple[Solution, object, list[Lookalike]]] = []
    for s, f in good:
        twin_of = None
        for k, (s0, f0, _) in enumerate(kept):
            if s0.structure_type == s.structure_type and abs(s0.score - s.score) < TWIN_SCORE_DIFF and not calibrated:
                rel, text, _ = compare(s0, f0, s, f, measured, spots, g_max=g_max, calibrated=calibrated)
                if rel is Relation.IDENTICAL_GEOMETRY:
                    twin_of = k
                    kept[k][2].append(_lookalike(s, rel, text))
                    break
        if twin_of is None:
            kept.append((s, f, []))
    out: list[Solution] = []
    for rank, (s, f, twins) in enumerate(kept[: top + 2]):
        if rank < 3 and mistilt:
            s = with_mistilt(s, measured, tables, holder_alpha_axis_deg=holder_alpha_axis_deg)
        looks = list(twins)
        notes = list(s.notes)
        if twins:
            names = ", ".join(t.phase_name for t in twins[:6]) + (" ..." if len(twins) > 6 else "")
            notes.append(f"uncalibrated: {names} index this pattern identically; the implied scale "
                         "(camera length) tells them apart")
        if rank == 0:
            looks += _lookalikes_of_best(s, f, kept[1:], scored, measured, tables, spots, g_max=g_max,
                                         calibrated=calibrated, min_score=min_score, length_tol=length_tol,
                                         rel_pos_tol=rel_pos_tol, holder_alpha_axis_deg=holder_alpha_axis_deg,
                                         tilt_advice=tilt_advice)
            for lk in looks:
                if lk.relation == Relation.AMBIGUOUS:
                    notes.append(f"ambiguous with {lk.phase_name} [{_lk_zone(lk)}]: {lk.separating}"
                                 + (f"; {lk.tilt.text}" if lk.tilt else ""))
        out.append(replace(s, lookalikes=tuple(looks), notes=tuple(notes)))
    return out


def _lookalike(s: Solution, relation: Relation, text: UnitText, tilt: TiltAdvice | None = None) -> Lookalike:
    """The look-alike entry for solution `s`: the separating text stored in 1/nm and kept for other units."""
    return Lookalike(s.phase_name, s.zone_axis, s.zone_axis_4, s.score, relation, str(text), tilt,
                     scale_inv_nm_per_px=s.scale_inv_nm_per_px, separating_text=text)


def _observed_g_max(best: Solution, spots) -> float:
    """The |g| range the detector recorded (1/nm), at least 10: the tilt targets are judged within it."""
    r = float(np.max(spots.r_px)) if len(spots.r_px) else 0.0
    return max(10.0, 1.05 * r * best.scale_inv_nm_per_px)


def _lk_zone(lk: Lookalike) -> str:
    return format_indices(lk.zone_axis_4 if lk.zone_axis_4 is not None else lk.zone_axis)


def row_near_miss(phase_index: int, best: Solution, measured, tables, spots, *, calibrated: bool, length_tol: float,
                  rel_pos_tol: float, max_zone_index: int = 2):
    """The pattern of another phase that best matches the measured spots while sharing one of their rows.

    For a related phase that found no candidate of its own (e.g. hcp cobalt for an fcc cobalt
    pattern), the short strong measured spots are matched by length to reflections of that phase,
    each zone containing such a reflection (index <= `max_zone_index`) is turned so that the
    reflection lies along the spot, and the best of these is scored like any candidate.
    """
    from saed.index.candidates import Candidate, quick_scores
    from saed.index.score import score_candidate
    from saed.simulate.geometry import in_plane_rotation, orientation_matrix

    pt = tables.phases[phase_index]
    lat = pt.phase.lattice
    scale = best.scale_inv_nm_per_px
    order = np.argsort(spots.r_px)
    seeds = [int(i) for i in order if spots.strong[i]][:3]
    us, zones, rows = [], [], []
    for i in seeds:
        g_meas = float(spots.r_px[i] * scale)
        near = np.flatnonzero(pt.allowed & (pt.f_rel >= 0.05) & (np.abs(pt.g_inv_nm / g_meas - 1) <= 0.03))
        fams = {}
        for r in near:
            fams.setdefault(pt.canonical_zone(pt.hkl[r]), r)  # one reflection per family (same Laue action)
        th = math.atan2(spots.v_px[i, 1], spots.v_px[i, 0])
        for r in fams.values():
            for uvw in _zones_with_row(pt.phase, pt.hkl[r], max_zone_index):
                for sgn in (1, -1):
                    z = (sgn * uvw).astype(np.int64)
                    u0 = orientation_matrix(lat, z, 0.0)
                    p = u0 @ pt.g_cart_inv_nm[r]
                    phi = math.degrees(th - math.atan2(p[1], p[0]))
                    us.append(in_plane_rotation(phi) @ u0)
                    zones.append(tuple(int(v) for v in z))
                    rows.append(r)
    if not us:
        return None
    u = np.array(us)
    qs = quick_scores(pt, u, np.full(len(u), scale), spots, rel_tol=rel_pos_tol)
    simple = np.array([np.abs(z).sum() for z in zones])
    best_fit = None
    for j in np.lexsort((simple, -np.round(qs, 3)))[:3]:
        c = Candidate(phase_index, int(rows[j]), int(rows[j]), zones[j], pt.canonical_zone(zones[j]), u[j], scale,
                      float(qs[j]))
        # "what this phase would show here": at the best solution's scale, without a fitted ellipse
        sol, fit = score_candidate(c, tables, spots, measured, calibrated_scale=scale, length_tol=min(length_tol, 0.01),
                                   rel_pos_tol=rel_pos_tol, pixel_pitch_um=measured.calibration.pixel_pitch_um,
                                   allow_distortion=False)
        if best_fit is None or sol.score > best_fit[0].score + 1e-3:
            best_fit = (sol, fit)
    return best_fit


def _lookalikes_of_best(best, fit_b, others, scored, measured, tables, spots, *, g_max, calibrated, min_score,
                        length_tol, rel_pos_tol, holder_alpha_axis_deg=None, tilt_advice=True):
    looks = []
    seen_phases = {best.phase_name}
    for s, f, _ in others[:COMPETITORS_CONSIDERED]:
        if s.score < best.score - LOOKALIKE_SCORE_GAP or len(looks) >= MAX_COMPETING_LOOKALIKES:
            continue
        rel, text, need_tilt = compare(best, fit_b, s, f, measured, spots, g_max=g_max, calibrated=calibrated)
        tilt = (separating_tilt(best, fit_b, s, f, voltage_kv=tables.voltage_kv, g_max=_observed_g_max(best, spots),
                                holder_alpha_axis_deg=holder_alpha_axis_deg)
                if need_tilt and tilt_advice else None)
        looks.append(_lookalike(s, rel, text, tilt))
        seen_phases.add(s.phase_name)
    # related phases further down (polymorphs, ordered variants): say why they lost
    pa = fit_b.table.phase
    for s, f in scored:
        if s.phase_name in seen_phases or not _related(pa, f.table.phase) or len(looks) >= MAX_LOOKALIKES:
            continue
        seen_phases.add(s.phase_name)
        rel, text, _ = compare(best, fit_b, s, f, measured, spots, g_max=g_max, calibrated=calibrated)
        if rel is Relation.CLOSE and s.score < best.score - RULED_OUT_SCORE_GAP:
            rel = Relation.RULED_OUT
        looks.append(_lookalike(s, rel, text))
    # related phases with no candidate at all: the closest pattern that shares a row
    for pi, pt in enumerate(tables.phases):
        if pt.name in seen_phases or not _related(pa, pt.phase) or len(looks) >= MAX_LOOKALIKES:
            continue
        seen_phases.add(pt.name)
        nm = row_near_miss(pi, best, measured, tables, spots, calibrated=calibrated,
                           length_tol=length_tol, rel_pos_tol=rel_pos_tol)
        if nm is None:
            continue
        s, f = nm
        rel, text, _ = compare(best, fit_b, s, f, measured, spots, g_max=g_max, calibrated=calibrated)
        if rel is Relation.CLOSE:
            rel = Relation.RULED_OUT
        looks.append(_lookalike(s, rel, "closest pattern sharing a spot row: " + text))
    return looks

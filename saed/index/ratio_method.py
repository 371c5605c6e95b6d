"""The ratio method by hand: two measured reflections and the angle between them -> (phase, zone, hkl pair).

For two spots g1 and g2 of one zone-axis pattern, measured on the screen or a print as d-spacings
(or as distances from the centre, with or without the camera constant), every candidate phase is
searched for reflection pairs (h1, h2) whose spacings and angle fit; the zone axis is h1 x h2
(Weiss zone law). This is the classic ratio method of hand indexing (Edington, *Practical Electron
Microscopy in Materials Science*, vol. 2, 1975; Williams & Carter, *Transmission Electron
Microscopy*, 2nd ed. 2009, ch. 18), done over every reflection allowed by the structure factor.

Two spots carry little information: many solutions fit, and look-alikes (fcc cobalt [112] vs hcp
cobalt [01-10]) cannot be told apart. Every solution therefore names the solutions it cannot be
separated from, and the spot at g1 + g2 it predicts (a third spot of the same pattern decides
between many of them).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from saed.crystal.notation import UNITS, Units, plane_text, zone_text
from saed.crystal.phase import Phase
from saed.crystal.reflections import reflection_table
from saed.crystal.symmetry import laue_rotations
from saed.errors import InputError
from saed.units import fraction, percent, percent_off

__all__ = ["RatioMeasurement", "RatioSolution", "measurement_from_d", "measurement_from_radii", "solve_ratio",
           "solution_label", "lookalike_text", "RATIO_LOOKALIKE_PCT", "RATIO_LOOKALIKE_DEG"]

#: Two solutions whose calculated d's (or ratio) differ by less than this, percent, cannot be separated by one
#: SAED pattern without an internal standard (Williams & Carter 2009, ch. 18; common practice: 1-2 %).
RATIO_LOOKALIKE_PCT = 1.0
#: ... nor when their angles differ by less than this, degrees (common practice: angles good to 0.5-1 deg).
RATIO_LOOKALIKE_DEG = 1.0
#: Reflections considered for g1 when the pattern is uncalibrated: up to the n-th distinct allowed |g|.
UNCALIBRATED_SHELLS = 10


@dataclass(frozen=True)
class RatioMeasurement:
    """Two reflections measured by hand.

    ``ratio`` is |g2|/|g1| = d1/d2 (= R2/R1). ``d1_nm``/``d2_nm`` are None when only the ratio is known
    (radii without a camera constant). ``radii_mm`` keeps the radii when they were given.
    """

    ratio: float
    angle_deg: float
    d1_nm: float | None = None
    d2_nm: float | None = None
    radii_mm: tuple[float, float] | None = None

    @property
    def calibrated(self) -> bool:
        return self.d1_nm is not None


def _check_angle(angle_deg: float) -> float:
    a = float(angle_deg)
    if not math.isfinite(a) or a < 0.0 or a > 180.0:
        raise InputError(f"angle {angle_deg!r} deg: give the angle between the two reflections, 0 to 180 deg")
    if a < 1.0 or a > 179.0:
        raise InputError(f"angle {a:g} deg: the two reflections are (nearly) parallel, so they fix no zone axis; "
                         "measure two spots that are not on one row through the centre")
    return a


def _check_pair(v1: float, v2: float, what: str, unit: str) -> tuple[float, float]:
    a, b = float(v1), float(v2)
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(f"{what} {v1!r} {v2!r}: not finite numbers")
    if a == 0.0 and b == 0.0:
        raise InputError(f"{what} 0 0: both are zero; measure the two spots (in {unit})")
    if a <= 0.0 or b <= 0.0:
        bad = a if a <= 0.0 else b
        raise InputError(f"{what} {bad:g}: must be positive (in {unit})")
    return a, b


def measurement_from_d(d1_nm: float, d2_nm: float, angle_deg: float) -> RatioMeasurement:
    """Two d-spacings (nm) and the angle between the reflections (deg).

    >>> m = measurement_from_d(0.2047, 0.1772, 54.7)
    >>> round(m.ratio, 4), m.calibrated
    (1.1552, True)
    """
    d1, d2 = _check_pair(d1_nm, d2_nm, "d-spacings", "nm")
    if d1 > 10.0 or d2 > 10.0:
        raise InputError(f"d-spacings {d1:g} {d2:g} nm: larger than 10 nm is not a lattice spacing "
                         "(give d in nm, e.g. 0.2047; --radii for distances on the print)")
    return RatioMeasurement(ratio=d1 / d2, angle_deg=_check_angle(angle_deg), d1_nm=d1, d2_nm=d2)


def measurement_from_radii(r1_mm: float, r2_mm: float, angle_deg: float, *,
                           camera_constant_nm_mm: float | None = None) -> RatioMeasurement:
    """Two distances from the pattern centre (mm on the print or screen) and the angle.

    With the camera constant lambda*L (nm mm) the d-spacings follow from d = lambda L / R; without it only
    the ratio R2/R1 is known.

    >>> m = measurement_from_radii(12.3, 14.2, 54.7, camera_constant_nm_mm=2.5079)
    >>> round(m.d1_nm, 5), round(m.ratio, 4)
    (0.20389, 1.1545)
    """
    r1, r2 = _check_pair(r1_mm, r2_mm, "radii", "mm")
    angle = _check_angle(angle_deg)
    if camera_constant_nm_mm is None:
        return RatioMeasurement(ratio=r2 / r1, angle_deg=angle, radii_mm=(r1, r2))
    k = float(camera_constant_nm_mm)
    if not math.isfinite(k) or k <= 0:
        raise InputError(f"--camera-constant {camera_constant_nm_mm!r}: must be a positive number of nm mm")
    return RatioMeasurement(ratio=r2 / r1, angle_deg=angle, d1_nm=k / r1, d2_nm=k / r2, radii_mm=(r1, r2))


@dataclass(frozen=True)
class RatioSolution:
    """One (phase, zone, hkl pair) that fits, with the calculated values and the differences from the measurement.

    Differences are calculated minus measured: ``d1_diff_pct``, ``d2_diff_pct`` (None when uncalibrated),
    ``ratio_diff_pct``, ``angle_diff_deg``. ``misfit`` is the root-mean-square of the differences, each in
    units of its tolerance (0 = exact, 1 = at the tolerance). ``hkl_sum`` / ``d_sum_nm`` is the reflection
    g1 + g2 that the pattern must also show (kinematically allowed or not: ``sum_allowed``).
    ``other_pairs`` are further (hkl1, hkl2) of the same phase and zone that fit as well (other spots of
    the same pattern); ``same_geometry`` other phases with the same pair, ratio and angle (ratio only).
    ``lookalikes`` says, in plain text and nm (as in the JSON), which solutions this measurement cannot
    separate from it; ``lookalike_ranks`` are their ranks, for :func:`lookalike_text` in another style or unit.
    """

    phase: Phase
    zone_axis: tuple[int, int, int]
    hkl1: tuple[int, int, int]
    hkl2: tuple[int, int, int]
    d1_nm_calc: float
    d2_nm_calc: float
    angle_deg_calc: float
    ratio_calc: float
    d1_diff_pct: float | None
    d2_diff_pct: float | None
    ratio_diff_pct: float
    angle_diff_deg: float
    misfit: float
    hkl_sum: tuple[int, int, int]
    d_sum_nm: float
    sum_allowed: bool
    rank: int = 0
    same_geometry: tuple[str, ...] = ()
    other_pairs: tuple = ()
    lookalikes: tuple[str, ...] = field(default=())
    lookalike_ranks: tuple[int, ...] = ()

    @property
    def phase_name(self) -> str:
        return self.phase.name


def _reduce(v: np.ndarray) -> np.ndarray:
    g = np.gcd.reduce(np.abs(v), axis=-1)
    g[g == 0] = 1
    return v // g[..., None]


def _readable_key(phase: Phase, zone: np.ndarray, h1: np.ndarray):
    """Sort key: smaller is more readable ([001], [011], [112]; 4-index [2-1-10] with W >= 0)."""
    if phase.is_hexagonal:
        from saed.crystal.miller import direction_to_4

        four = direction_to_4(zone)
        return (-int(four[3] >= 0), tuple(-int(v) for v in four), int(np.sum(h1 < 0)), tuple(-int(v) for v in h1))
    return (int(np.sum(zone < 0)), tuple(int(v) for v in zone), int(np.sum(h1 < 0)), tuple(-int(v) for v in h1))


def _phase_solutions(phase: Phase, meas: RatioMeasurement, *, length_tol: float, angle_tol_deg: float,
                     max_zone_index: int) -> list[RatioSolution]:
    """Every symmetry-distinct reflection pair of `phase` within tolerance (unranked)."""
    if meas.calibrated:
        g1m, g2m = 1.0 / meas.d1_nm, 1.0 / meas.d2_nm
        g_max = max(g1m, g2m) * (1.0 + length_tol) * 1.001
        tab = reflection_table(phase, g_max)
        ok = tab.allowed
        a = np.flatnonzero(ok & (np.abs(tab.g_inv_nm / g1m - 1.0) <= length_tol))
        b = np.flatnonzero(ok & (np.abs(tab.g_inv_nm / g2m - 1.0) <= length_tol))
    else:
        from saed.simulate.families import shortest_allowed_g_inv_nm

        g0 = shortest_allowed_g_inv_nm(phase)
        tab = reflection_table(phase, g0 * 6.0)
        shells = np.unique(np.round(tab.g_inv_nm[tab.allowed], 6))
        g_cut = shells[min(UNCALIBRATED_SHELLS, len(shells)) - 1] if len(shells) else 0.0
        tab = reflection_table(phase, max(g0 * 6.0, g_cut * max(meas.ratio, 1.0) * (1.0 + length_tol) * 1.001))
        ok = tab.allowed
        a = np.flatnonzero(ok & (tab.g_inv_nm <= g_cut * (1 + 1e-9)))
        b = np.flatnonzero(ok)
    rots = laue_rotations(phase.space_group)
    a = a[_family_representatives(tab.hkl[a], rots)]  # g1: one reflection per family {hkl}; g2 runs over all
    if len(a) == 0 or len(b) == 0:
        return []
    ia, ib = np.nonzero(np.abs((tab.g_inv_nm[b][None, :] / tab.g_inv_nm[a][:, None]) / meas.ratio - 1.0) <= length_tol)
    va, vb = tab.g_cart_inv_nm[a[ia]], tab.g_cart_inv_nm[b[ib]]
    g1, g2 = tab.g_inv_nm[a[ia]], tab.g_inv_nm[b[ib]]
    ratio = g2 / g1
    ang = np.degrees(np.arccos(np.clip(np.einsum("ij,ij->i", va, vb) / (g1 * g2), -1.0, 1.0)))
    keep = (np.abs(ang - meas.angle_deg) <= angle_tol_deg) & (ang > 1e-6) & (ang < 180.0 - 1e-6)
    seen: dict = {}
    for n_pair in np.flatnonzero(keep).tolist():
        h1, h2 = tab.hkl[a[ia[n_pair]]], tab.hkl[b[ib[n_pair]]]
        e1 = np.einsum("i,nij->nj", h1, rots)
        e2 = np.einsum("i,nij->nj", h2, rots)
        key = max(zip(map(tuple, e1.tolist()), map(tuple, e2.tolist())))
        if key in seen:
            continue
        zones = _reduce(np.cross(e1, e2))
        best = min(range(len(rots)), key=lambda n: _readable_key(phase, zones[n], e1[n]))
        seen[key] = (e1[best], e2[best], zones[best], float(ratio[n_pair]), float(ang[n_pair]))
    out = []
    lat = phase.lattice
    for h1, h2, zone, r_calc, a_calc in seen.values():
        if int(np.max(np.abs(zone))) > max_zone_index:
            continue
        n = int(np.gcd.reduce(np.abs(np.concatenate([h1, h2]))))
        if not meas.calibrated and n > 1 and _allowed(phase, h1 // n) and _allowed(phase, h2 // n):
            continue  # a multiple of a shorter pair with the same ratio and angle: those spots lie nearer the centre
        d1c, d2c = 1.0 / float(lat.g_inv_nm(h1)), 1.0 / float(lat.g_inv_nm(h2))
        r_diff = percent_off(r_calc, meas.ratio)
        a_diff = a_calc - meas.angle_deg
        if meas.calibrated:
            dd1 = percent_off(d1c, meas.d1_nm)
            dd2 = percent_off(d2c, meas.d2_nm)
            terms = [dd1 / percent(length_tol), dd2 / percent(length_tol), a_diff / angle_tol_deg]
        else:
            dd1 = dd2 = None
            terms = [r_diff / percent(length_tol), a_diff / angle_tol_deg]
        hs = h1 + h2
        row = tab.index_of(hs)[0]
        allowed = bool(tab.allowed[row]) if row >= 0 else bool(_allowed(phase, hs))
        out.append(RatioSolution(
            phase=phase, zone_axis=tuple(int(v) for v in zone), hkl1=tuple(int(v) for v in h1),
            hkl2=tuple(int(v) for v in h2), d1_nm_calc=d1c, d2_nm_calc=d2c, angle_deg_calc=a_calc, ratio_calc=r_calc,
            d1_diff_pct=dd1, d2_diff_pct=dd2, ratio_diff_pct=r_diff, angle_diff_deg=a_diff,
            misfit=float(math.sqrt(sum(t * t for t in terms) / len(terms))),
            hkl_sum=tuple(int(v) for v in hs), d_sum_nm=1.0 / float(lat.g_inv_nm(hs)), sum_allowed=allowed))
    return out


def _family_representatives(hkl: np.ndarray, rots: np.ndarray) -> np.ndarray:
    """Boolean mask: rows that are the largest (lexicographic) member of their family {hkl}."""
    if len(hkl) == 0:
        return np.zeros(0, dtype=bool)
    span = int(np.max(np.abs(hkl))) + 1
    base = 2 * span + 1

    def code(h):
        h = h + span
        return (h[..., 0] * base + h[..., 1]) * base + h[..., 2]

    images = np.einsum("ni,rij->rnj", hkl.astype(np.int64), rots.astype(np.int64))
    return code(hkl) == code(images).max(axis=0)


def _allowed(phase: Phase, hkl) -> bool:
    from saed.crystal.structure_factor import ZERO_F_RELATIVE, scattering_sum_nm, structure_factors_nm

    h = np.atleast_2d(np.asarray(hkl, dtype=np.int64))
    return bool(abs(structure_factors_nm(phase, h)[0]) > ZERO_F_RELATIVE * scattering_sum_nm(phase, h)[0])


def solution_label(s: RatioSolution, style: str = "plain") -> str:
    """'Co-hcp [01-10] 0002/2-1-10': phase, zone and the hkl pair, 4-index on hexagonal axes; `style` as in
    :mod:`saed.crystal.notation` ('plain' minus signs, 'unicode' overbars)."""
    hexa = s.phase.is_hexagonal
    return (f"{s.phase.name} {zone_text(s.zone_axis, hexa, style)} "
            f"{plane_text(s.hkl1, hexa, style)}/{plane_text(s.hkl2, hexa, style)}")


def _separable(s: RatioSolution, o: RatioSolution, calibrated: bool) -> tuple[float, float] | None:
    """(length difference %, angle difference deg) when `o` cannot be separated from `s` by this
    measurement, else None. Without d-spacings, solutions of the same geometry were merged already
    (``same_geometry``)."""
    if calibrated:
        dd = percent(max(abs(o.d1_nm_calc / s.d1_nm_calc - 1.0), abs(o.d2_nm_calc / s.d2_nm_calc - 1.0)))
    else:
        dd = abs(percent_off(o.ratio_calc, s.ratio_calc))
    da = abs(o.angle_deg_calc - s.angle_deg_calc)
    if dd >= RATIO_LOOKALIKE_PCT or da >= RATIO_LOOKALIKE_DEG:
        return None
    return dd, da


def lookalike_text(s: RatioSolution, o: RatioSolution, calibrated: bool, *, style: str = "plain",
                   units: Units = UNITS["nm"]) -> str | None:
    """'ambiguous with ...' when `o` cannot be separated from `s` by this measurement, else None.

    Lengths in `units` (the JSON keeps nm), indices in `style` (:mod:`saed.crystal.notation`).
    """
    diff = _separable(s, o, calibrated)
    if diff is None:
        return None
    dd, da = diff
    what = "d-spacings" if calibrated else "ratios"
    if o.phase.name == s.phase.name:
        decide = "another zone axis decides"
    else:
        decide = "the other spots of the pattern ('saed index') or a second zone axis decide"

    def at(x: RatioSolution) -> str:
        where = (f"d {units.length_text(x.d_sum_nm)} {units.label(style)}" if calibrated
                 else f"{x.d1_nm_calc / x.d_sum_nm:.3f} x R1")
        return (f"{plane_text(x.hkl_sum, x.phase.is_hexagonal, style)} at {where}"
                + ("" if x.sum_allowed else " (forbidden)"))

    sums = f"g1+g2: {at(s)} vs {at(o)}"
    return (f"ambiguous with {solution_label(o, style)}: {what} differ by {dd:.1f} %, angles by {da:.1f} deg, below "
            f"SAED accuracy (about 1-2 %, 1 deg); {sums}; {decide}")


def solve_ratio(meas: RatioMeasurement, phases: list[Phase], *, length_tol_pct: float = 2.0,
                angle_tol_deg: float = 2.0, top: int = 10, max_zone_index: int = 7) -> list[RatioSolution]:
    """Ranked solutions (best first, at most `top`) over `phases`, with look-alikes named.

    Ranking: smallest misfit first; ties (within 0.05) go to the order of `phases` (ratio only: to the
    lower indices first). Zone axes with an index above `max_zone_index` (3-index conventional cell) are
    left out, as in ``saed index``: such patterns are too dense to measure by hand. Without d-spacings (ratio only), phases whose solution has the same hkl pair, ratio and
    angle are one row: the first phase keeps it and the others are listed in ``same_geometry`` (only
    the absolute scale tells them apart).
    """
    if not phases:
        raise InputError("no candidate phases given (use --phase)")
    if not (0 < length_tol_pct <= 20):
        raise InputError(f"--length-tol {length_tol_pct:g}: give a percentage above 0 and at most 20")
    if not 1 <= max_zone_index <= 20:
        raise InputError(f"--max-zone-index {max_zone_index}: give 1 to 20")
    if not (0 < angle_tol_deg <= 20):
        raise InputError(f"--angle-tol {angle_tol_deg:g}: give degrees above 0 and at most 20")
    tol = fraction(length_tol_pct)
    found: list[tuple[int, RatioSolution]] = []
    for k, ph in enumerate(phases):
        found += [(k, s) for s in _phase_solutions(ph, meas, length_tol=tol, angle_tol_deg=angle_tol_deg,
                                                   max_zone_index=max_zone_index)]
    if meas.calibrated:
        found.sort(key=lambda t: (round(t[1].misfit / 0.05), t[0], t[1].misfit))
    else:  # ratio only: the absolute size means nothing, so simple (low) indices first
        found.sort(key=lambda t: (round(t[1].misfit / 0.05), _index_size(t[1]), t[0], t[1].misfit))
    sols = []
    by_zone: dict = {}
    for _, s in found:  # one row per (phase, zone family): other spot pairs of that pattern are listed with it
        key = (s.phase.name, _zone_family_key(s.phase, s.zone_axis))
        if key in by_zone and abs(sols[by_zone[key]].misfit - s.misfit) < 0.05:
            first = sols[by_zone[key]]
            pair = _in_zone_of(first, s)
            if pair is not None:
                sols[by_zone[key]] = _with(first, other_pairs=first.other_pairs + (pair,))
                continue
        by_zone.setdefault(key, len(sols))
        sols.append(s)
    if not meas.calibrated:
        merged: list[RatioSolution] = []
        groups: dict = {}
        for s in sols:
            key = (s.hkl1, s.hkl2, round(s.ratio_calc, 4), round(s.angle_deg_calc, 2), s.zone_axis)
            if key in groups:
                first = groups[key]
                merged[first] = _with(merged[first], same_geometry=merged[first].same_geometry + (s.phase.name,))
                continue
            groups[key] = len(merged)
            merged.append(s)
        sols = merged
    sols = sols[:top]
    out = []
    ranked = [_with(s, rank=r) for r, s in enumerate(sols, start=1)]
    for s in ranked:
        others = [o for o in ranked if o is not s and (o.phase.name != s.phase.name or o.zone_axis != s.zone_axis)
                  and _separable(s, o, meas.calibrated) is not None]
        out.append(_with(s, lookalikes=tuple(lookalike_text(s, o, meas.calibrated) for o in others),
                         lookalike_ranks=tuple(o.rank for o in others)))
    return out


def _zone_family_key(phase: Phase, zone) -> tuple:
    """The same tuple for every zone axis of one family <uvw> (and its opposite)."""
    fam = np.einsum("nij,j->ni", laue_rotations(phase.space_group), np.asarray(zone, dtype=np.int64))
    return max(map(tuple, fam.tolist()))


def _in_zone_of(first: RatioSolution, other: RatioSolution):
    """`other`'s (hkl1, hkl2) re-described in the zone axis of `first` (same family), or None.

    Directions go as u' = R u; planes then as h' = h R^-1, so that h'.u' = h.u stays zero.
    """
    rots = laue_rotations(first.phase.space_group)
    z0, z1 = np.asarray(first.zone_axis), np.asarray(other.zone_axis)
    for r in rots:
        if np.array_equal(r @ z1, z0) or np.array_equal(r @ z1, -z0):
            r_inv = np.rint(np.linalg.inv(r)).astype(np.int64)
            return (tuple(int(v) for v in np.asarray(other.hkl1) @ r_inv),
                    tuple(int(v) for v in np.asarray(other.hkl2) @ r_inv))
    return None


def _index_size(s: RatioSolution) -> int:
    return sum(v * v for v in s.hkl1) + sum(v * v for v in s.hkl2)


def _with(s: RatioSolution, **kw) -> RatioSolution:
    from dataclasses import replace

    return replace(s, **kw)

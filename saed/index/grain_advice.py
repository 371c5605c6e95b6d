"""What a grain series still leaves open: look-alikes one pattern could not separate, and a third pattern.

For the joint answer of :func:`saed.index.grain.solve_grain` every phase that some pattern alone
could not separate is listed as ruled out (no single orientation of it explains the series, or it
fits worse and the predicted patterns differ at a recorded pattern) or not decided; the 180-degree
sense of the answer is listed the same way. Where a rival remains, a zone within the holder's range
where the two predicted kinematic patterns differ (one not already recorded) is named with its
readings (the pattern comparison of :mod:`saed.index.lookalike`).
"""

from __future__ import annotations

import math

import numpy as np

from saed.crystal.miller import direction_to_4, format_indices
from saed.index.grain_values import GrainLookalike, GrainSolution, ThirdPattern
from saed.simulate.geometry import in_plane_rotation
from saed.simulate.tilt import Holder, holder_rotation
from saed.units import percent

__all__ = ["lookalikes_of_series", "difference_at", "third_pattern", "UNDECIDED_SCORE"]

#: Single-pattern scores this close to the pattern's best count as "one pattern could not separate".
UNDECIDED_SCORE = 0.1


def lookalikes_of_series(patterns, sols, near, tol, diffs) -> list[GrainLookalike]:
    """Phases (and readings) that some pattern alone could not separate from the joint answer."""
    if not sols:
        return []
    best = sols[0]
    out = []
    rivals: dict[str, list[str]] = {}
    for gp in patterns:
        res = gp.result
        if not res.solutions:
            continue
        top = res.solutions[0].score
        for s in res.solutions:
            if s.phase_name != best.phase_name and s.score >= top - UNDECIDED_SCORE:
                rivals.setdefault(s.phase_name, [])
                if gp.image not in rivals[s.phase_name]:
                    rivals[s.phase_name].append(gp.image)
    for name, imgs in rivals.items():
        other = next((s for s in sols if s.phase_name == name and not s.missing), None)
        if other is None:
            d = near.get(name, math.inf)
            why = (f"{name} fits {' and '.join(imgs)} alone, but no single {name} orientation explains all "
                   f"{len(patterns)} patterns at their holder readings"
                   + (f" (the closest choice disagrees by {d:.1f} deg, tolerance {tol:g} deg)" if math.isfinite(d)
                      else f" ({name} fits none of the other patterns)"))
            out.append(GrainLookalike(name, "decided", tuple(imgs), why))
        elif other.score < best.score - UNDECIDED_SCORE:
            out.append(GrainLookalike(name, "decided", tuple(imgs),
                                      f"{name} also has a joint orientation, but it fits worse: joint score "
                                      f"{other.score:.2f} vs {best.score:.2f}, largest misfit "
                                      f"{other.max_misfit_deg:.2f} vs {best.max_misfit_deg:.2f} deg"))
        elif (id(other) in diffs and diffs[id(other)][0][0] >= 0.2 and other.score < best.score - 0.05):
            (dis, zone, txt), img = diffs[id(other)]
            out.append(GrainLookalike(name, "decided", tuple(imgs),
                                      f"in {img} the two differ ({txt}; {percent(dis):.0f} % of the spots), and {name} "
                                      f"fits it worse: joint score {other.score:.2f} vs {best.score:.2f}"))
        else:
            same = _structure(patterns, name) == _structure(patterns, best.phase_name) != ""
            out.append(GrainLookalike(name, "undecided", tuple(imgs),
                                      f"{name} explains the series as well (joint score {other.score:.2f} vs "
                                      f"{best.score:.2f}): "
                                      + ("the same structure with a cell within the calibration accuracy: no zone "
                                         "separates them; an internal standard or another technique (EDS) decides"
                                         if same else "the recorded zones do not separate the two")))
    # the 180-degree readings of the answer itself
    same = [s for s in sols[1:] if s.phase_name == best.phase_name and not s.missing
            and s.score >= best.score - UNDECIDED_SCORE]
    if same:
        out.append(GrainLookalike(best.phase_name, "undecided", tuple(p.image for p in patterns),
                                  f"a second {best.phase_name} orientation "
                                  f"(Euler {', '.join(f'{v:.1f}' for v in same[0].euler_bunge_deg)} deg) explains the "
                                  "series as well: the recorded zones leave the 180-degree sense open"))
    elif any(p.turned for p in best.patterns) or any(gp.result.best is not None and gp.result.best.sense_ambiguous_180
                                                     for gp in patterns):
        amb = [gp.image for gp in patterns if gp.result.best is not None and gp.result.best.sense_ambiguous_180]
        if amb:
            out.append(GrainLookalike(best.phase_name, "decided", tuple(amb),
                                      f"{', '.join(amb)} alone cannot tell the crystal from itself turned 180 deg about "
                                      "the beam; only one of the two readings agrees with the other patterns"))
    return out


def _observed_g_max(patterns) -> float:
    """The |g| the detectors recorded (1/nm), at least 10: predicted patterns are compared within it."""
    out = 10.0
    for gp in patterns:
        b = gp.result.best
        if b is not None and len(gp.result.measured.spots):
            r = np.linalg.norm(gp.result.measured.corrected_spot_vectors_px(), axis=1)
            out = max(out, 1.05 * float(r.max()) * b.scale_inv_nm_per_px)
    return out


def difference_at(a: GrainSolution, b: GrainSolution, phases, holder: Holder, patterns, readings, voltage_kv):
    """How the two solutions' patterns differ at holder `readings`: (fraction of spots, a's zone, text) or None."""
    from saed.index.lookalike import _dissimilarity, _lab_pattern, _nearest_zone, _two_rows

    pa, pb = phases[a.phase_name], phases[b.phase_name]
    to_h = in_plane_rotation(-patterns[0].alpha_axis_deg)
    h = holder_rotation(holder, *readings)
    ua2, ub2 = h @ to_h @ a.orientation_matrix, h @ to_h @ b.orientation_matrix
    beam = np.array([0.0, 0.0, 1.0])
    za, _, _ = _nearest_zone(pa, ua2.T @ beam, max_index=4, tol_deg=2.0)
    zb, _, _ = _nearest_zone(pb, ub2.T @ beam, max_index=4, tol_deg=2.0)
    if za is None or zb is None:
        return None
    g_max = _observed_g_max(patterns)
    pat_a = _lab_pattern(pa, za, ua2, voltage_kv=voltage_kv, g_max=g_max)
    pat_b = _lab_pattern(pb, zb, ub2, voltage_kv=voltage_kv, g_max=g_max)
    if not (_two_rows(pat_a) and _two_rows(pat_b)):
        return None
    dis, miss_a, miss_b = _dissimilarity(pat_a, pat_b, floor=0.05, g_max=0.95 * g_max)
    from saed.crystal.miller import plane_to_4

    def hkl(p, pat, k):
        v = pat.hkl[k]
        return format_indices(plane_to_4(v) if p.is_hexagonal else v)

    parts = []
    if miss_b:
        parts.append(f"{b.phase_name} predicts {hkl(pb, pat_b, miss_b[0])}" + (" and more" if len(miss_b) > 1 else "")
                     + f" where {a.phase_name} has no spot")
    if miss_a:
        parts.append(f"{a.phase_name} predicts {hkl(pa, pat_a, miss_a[0])}" + (" and more" if len(miss_a) > 1 else "")
                     + f" where {b.phase_name} has no spot")
    return dis, za, "; ".join(parts)


def _structure(patterns, phase_name: str) -> str:
    """The structure type of a phase as the single-pattern solutions report it ('' when unknown)."""
    for gp in patterns:
        for s in gp.result.solutions:
            if s.phase_name == phase_name:
                return s.structure_type
    return ""


def third_pattern(a: GrainSolution, b: GrainSolution, phases, holder: Holder, ranges, patterns,
                   voltage_kv) -> ThirdPattern | None:
    """A zone of `a` within the holder's range where `a` and `b` show different patterns, and its readings."""
    from saed.index.lookalike import _dissimilarity, _lab_pattern, _nearest_zone, _two_rows
    from saed.simulate.families import zone_families
    from saed.simulate.tilt import tilt_to_zone

    pa, pb = phases[a.phase_name], phases[b.phase_name]
    to_h = in_plane_rotation(-patterns[0].alpha_axis_deg)
    ua, ub = to_h @ a.orientation_matrix, to_h @ b.orientation_matrix
    hold = Holder(alpha_axis_deg=0.0, alpha_range_deg=ranges[0], beta_range_deg=ranges[1],
                  alpha_sign=holder.alpha_sign, beta_sign=holder.beta_sign)
    best = None
    g_max = _observed_g_max(patterns)
    beam = np.array([0.0, 0.0, 1.0])
    recorded = [ua.T @ (holder_rotation(hold, *gp.tilt_deg).T @ beam) for gp in patterns]
    members = np.array([m for fam in zone_families(pa, max_index=3) for m in fam.members.tolist()], dtype=np.int64)
    r = pa.lattice.r_cartesian_nm(members)
    r = r / np.linalg.norm(r, axis=1, keepdims=True)
    d = r @ ua.T  # the zones in the holder frame at readings (0, 0); alpha axis = x, beta axis = y
    alpha = np.degrees(np.arcsin(np.clip(d[:, 1], -1, 1))) * hold.alpha_sign
    beta = np.degrees(np.arctan2(-d[:, 0], d[:, 2])) * hold.beta_sign
    (a0, a1), (b0, b1) = hold.alpha_range_deg, hold.beta_range_deg
    ok = (alpha >= a0) & (alpha <= a1) & (beta >= b0) & (beta <= b1)
    for rb in recorded:  # a zone already recorded adds no evidence
        ok &= (r @ rb) < math.cos(math.radians(3.0))
    order = np.flatnonzero(ok)[np.argsort(np.maximum(np.abs(alpha), np.abs(beta))[ok])]
    for j in order[:24]:
        st = tilt_to_zone(pa, ua, members[j], hold)
        if not st.reachable:
            continue
        h = holder_rotation(hold, st.alpha_deg, st.beta_deg)
        ua2, ub2 = h @ ua, h @ ub
        uvw_b, _, _ = _nearest_zone(pb, ub2.T @ beam, max_index=3, tol_deg=1.0)
        pat_a = _lab_pattern(pa, st.zone_axis, ua2, voltage_kv=voltage_kv, g_max=g_max)
        if not _two_rows(pat_a):
            continue
        pat_b = _lab_pattern(pb, uvw_b, ub2, voltage_kv=voltage_kv, g_max=g_max) if uvw_b is not None else None
        if pat_b is not None and _two_rows(pat_b):
            dis, _, _ = _dissimilarity(pat_a, pat_b, floor=0.05, g_max=0.95 * g_max)
        else:
            dis, uvw_b = 0.45, None
        merit = dis - st.tilt_size_deg / 150.0 - 0.05 * max(abs(v) for v in st.zone_axis)
        if dis >= 0.2 and (best is None or merit > best[0]):
            best = (merit, st, uvw_b, dis)
    if best is None:
        return None
    _, st, uvw_b, dis = best
    za = st.zone_axis
    za4 = tuple(int(v) for v in direction_to_4(za)) if pa.is_hexagonal else None
    zt = lambda z, p: format_indices(direction_to_4(z) if p.is_hexagonal else z)  # noqa: E731
    other = (f"{b.phase_name} shows [{zt(uvw_b, pb)}] there" if uvw_b is not None
             else f"{b.phase_name} reaches no low-index zone there")
    text = (f"record a third pattern at alpha {st.alpha_deg:+.1f}, beta {st.beta_deg:+.1f} deg: {a.phase_name} "
            f"[{zt(za, pa)}] as solution 1, {other} ({percent(dis):.0f} % of the spots differ)")
    return ThirdPattern(tuple(int(v) for v in za), za4, float(st.alpha_deg), float(st.beta_deg), text)

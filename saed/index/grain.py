"""One grain from several patterns recorded at known holder tilts: the joint orientation.

The microscopist records a pattern, tilts the double-tilt holder to another zone of the same grain,
records again and notes the readings. Each pattern alone is indexed as usual (a ranked list of
(phase, zone, orientation U_i) at readings (alpha_i, beta_i)). Carried back to readings (0, 0)
with the holder rotation H of :mod:`saed.simulate.tilt`, every candidate becomes an orientation
U0 = H(alpha_i, beta_i)^T U_i; where the zone is no two-fold axis (``sense_ambiguous_180``) both
readings U_i and Rz(180) U_i are carried. A joint solution is a phase and one U0 that every
pattern agrees with, up to the crystal's symmetry, within the holder's accuracy (readings good to
about 0.3-1 deg, plus the small mistilt of each pattern). It is refined over all indexed spots of
all patterns (least squares on the detector positions, in 1/nm) and scored jointly.

Frames: all patterns are first expressed in a holder frame whose x is the alpha axis (the image
rotation differs between camera lengths, so each pattern's own alpha-axis azimuth turns its
detector frame into this one). The reported U0 maps crystal Cartesian to the detector frame of
the first pattern at readings (0, 0); the Euler angles are Bunge's (Z X Z, passive: g = U0^T maps
that frame into the crystal; Bunge, *Texture Analysis in Materials Science*, 1982, ch. 2).

What one pattern could not separate and the series decides is reported with the evidence; when
two joint solutions remain (look-alike phases whose zones stay alike at every recorded tilt, or
both 180-degree readings), a third zone within the holder's range where they differ is named
with its readings.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from saed.crystal.miller import direction_to_4
from saed.errors import InputError
from saed.index.grain_advice import UNDECIDED_SCORE, difference_at, lookalikes_of_series, third_pattern
from saed.index.grain_values import (GrainLookalike, GrainPattern, GrainResult, GrainSolution, PatternFit,
                                     ThirdPattern)
from saed.index.orientation import euler_bunge_deg, misorientation_deg, proper_symmetry_cartesian, rotation_from_vector
from saed.simulate.geometry import in_plane_rotation
from saed.simulate.tilt import Holder, holder_rotation

__all__ = ["GrainPattern", "PatternFit", "GrainSolution", "GrainLookalike", "ThirdPattern", "GrainResult",
           "solve_grain", "euler_bunge_deg", "misorientation_deg", "DEFAULT_TOLERANCE_DEG"]

#: Largest disagreement (deg) between the patterns' orientations at readings (0, 0) that still counts
#: as one grain: holder readings good to 0.3-1 deg (common practice), each pattern's own mistilt and
#: orientation error up to about 1 deg.
DEFAULT_TOLERANCE_DEG = 3.0

#: Weight of each pattern's beam direction in the refinement, 1/nm per radian: a 0.5 deg mistilt
#: then weighs like a 0.01 1/nm position error of every spot.
BEAM_WEIGHT = 1.1

#: Candidates per phase and pattern carried into the joint search.
MAX_PER_PHASE = 8

_RZ180 = np.diag([-1.0, -1.0, 1.0])


# ---------------------------------------------------------------------- candidates
@dataclass(frozen=True)
class _Cand:
    pattern: int
    sol: object
    turned: bool
    u0: np.ndarray  # holder frame, readings (0, 0)


def _candidates(patterns, holder: Holder) -> dict[str, list[list[_Cand]]]:
    """Per phase, per pattern: the candidates carried back to readings (0, 0)."""
    out: dict[str, list[list[_Cand]]] = {}
    n = len(patterns)
    for i, gp in enumerate(patterns):
        to_holder = in_plane_rotation(-gp.alpha_axis_deg)
        h = holder_rotation(holder, *gp.tilt_deg)
        for sol in gp.result.solutions:
            lists = out.setdefault(sol.phase_name, [[] for _ in range(n)])
            if len(lists[i]) >= 2 * MAX_PER_PHASE:
                continue
            u = to_holder @ np.asarray(sol.orientation_matrix)
            readings = (False, True) if sol.sense_ambiguous_180 in (True, None) else (False,)
            for turned in readings:
                lists[i].append(_Cand(i, sol, turned, h.T @ (_RZ180 @ u if turned else u)))
    return out


#: Largest number of candidate combinations searched per phase (long series keep fewer per pattern).
MAX_COMBINATIONS = 6000


def _trimmed(lists: list[list[_Cand]]) -> list[list[_Cand]]:
    """Drop the lowest-scoring candidates of the longest lists until the combinations are few enough."""
    lists = [list(lst) for lst in lists]
    while math.prod(max(len(lst), 1) for lst in lists) > MAX_COMBINATIONS:
        k = max(range(len(lists)), key=lambda i: len(lists[i]))
        if len(lists[k]) <= 2:
            break
        lists[k].pop()
    return lists


def _joint_combos(lists: list[list[_Cand]], syms: np.ndarray, tol_deg: float):
    """Every choice of one candidate per pattern whose orientations agree within tol (pairwise)."""
    n = len(lists)
    pair = {}
    for a in range(n):
        for b in range(a + 1, n):
            for ia, ca in enumerate(lists[a]):
                for ib, cb in enumerate(lists[b]):
                    pair[(a, ia, b, ib)] = misorientation_deg(ca.u0, cb.u0, syms)[0]
    combos = []
    for choice in itertools.product(*[range(len(lst)) for lst in lists]):
        worst = 0.0
        for a in range(n):
            for b in range(a + 1, n):
                worst = max(worst, pair[(a, choice[a], b, choice[b])])
                if worst > tol_deg:
                    break
            if worst > tol_deg:
                break
        if worst <= tol_deg:
            combos.append((worst, [lists[k][choice[k]] for k in range(n)]))
    return combos


def _closest_disagreement(lists: list[list[_Cand]], syms: np.ndarray) -> float:
    """The smallest worst-pair misorientation over all choices (deg): how far from one grain."""
    best = math.inf
    for choice in itertools.product(*[range(len(lst)) for lst in lists]):
        worst = 0.0
        for a in range(len(lists)):
            for b in range(a + 1, len(lists)):
                worst = max(worst, misorientation_deg(lists[a][choice[a]].u0, lists[b][choice[b]].u0, syms)[0])
        best = min(best, worst)
    return best


# ---------------------------------------------------------------------- refinement
def _spots_of(c: _Cand, patterns, holder_to: np.ndarray, phase):
    """(g crystal Cartesian (n,3) with the reading's sign, measured holder-frame xy (n,2) in 1/nm)."""
    gp = patterns[c.pattern]
    m = gp.result.measured
    vec = m.corrected_spot_vectors_px()
    rows = [r for r in c.sol.indexed if r.kind in ("allowed", "double-diffraction") and r.hkl is not None]
    if not rows:
        return np.zeros((0, 3)), np.zeros((0, 2))
    hkl = np.array([r.hkl for r in rows], dtype=np.int64)
    g = phase.lattice.g_cartesian_inv_nm(hkl) * (-1.0 if c.turned else 1.0)
    xy = vec[[r.spot_index for r in rows]] * c.sol.scale_inv_nm_per_px
    xy = xy @ holder_to[:2, :2].T
    return g, xy


def _refine(combo: list[_Cand], patterns, holder: Holder, phase, syms):
    """U0 refined over all spots; per pattern the symmetry-aligned candidate and its misfit."""
    ref = combo[0].u0
    aligned = []
    for c in combo:
        _, j = misorientation_deg(ref, c.u0, syms)
        aligned.append(syms[j])
    hs = [holder_rotation(holder, *patterns[c.pattern].tilt_deg) for c in combo]
    data = []
    for c, s, h in zip(combo, aligned, hs):
        g, xy = _spots_of(c, patterns, in_plane_rotation(-patterns[c.pattern].alpha_axis_deg), phase)
        data.append((h, g @ s, xy))  # g_ref = S^T g: rows g @ S
    # start from the mean of the aligned orientations (chordal mean, projected onto SO(3))
    mean = sum(c.u0 @ s for c, s in zip(combo, aligned)) / len(combo)
    uu, _, vt = np.linalg.svd(mean)
    u_start = uu @ np.diag([1, 1, np.linalg.det(uu @ vt)]) @ vt

    # Spot positions fix each pattern's in-plane turn well but its beam direction only to second
    # order; the zone on the beam (within the pattern's mistilt) fixes that: one term per pattern,
    # BEAM_WEIGHT (1/nm per radian of beam direction) times sqrt(spots) so it counts like the spots.
    beams = [(h, (c.u0 @ s).T @ (h.T @ np.array([0.0, 0.0, 1.0])), math.sqrt(max(len(g), 1)))
             for (h, g, _), c, s in zip(data, combo, aligned)]

    def resid(w):
        u = rotation_from_vector(w) @ u_start
        out = [((h @ u @ g.T).T[:, :2] - xy).ravel() for h, g, xy in data if len(g)]
        out += [BEAM_WEIGHT * wt * (u.T @ (h.T @ np.array([0.0, 0.0, 1.0])) - b) for h, b, wt in beams]
        return np.concatenate(out)

    try:
        sol = optimize.least_squares(resid, np.zeros(3), loss="soft_l1", f_scale=0.05, max_nfev=100)
        u0 = rotation_from_vector(sol.x) @ u_start
    except (ValueError, np.linalg.LinAlgError):
        u0 = u_start
    fits = []
    for (h, g, xy), c, s in zip(data, combo, aligned):
        own = h @ (c.u0 @ s)  # the pattern's own orientation (at its readings)
        mis = misorientation_deg(h @ u0, own, syms)[0]
        rms = float(np.sqrt(np.mean(np.sum(((h @ u0 @ g.T).T[:, :2] - xy) ** 2, axis=1)))) if len(g) else float("nan")
        fits.append((c, s, mis, rms, len(g)))
    return u0, fits


def _zone_at(phase, u_lab: np.ndarray, s: np.ndarray, c: _Cand) -> tuple[int, int, int]:
    """The candidate's zone axis expressed in the reference crystal setting (r_ref = S^T r)."""
    a = phase.lattice.direct_matrix_nm
    r = a @ np.asarray(c.sol.zone_axis, float)
    r_ref = s.T @ r
    ints = np.rint(np.linalg.solve(a, r_ref)).astype(np.int64)  # a lattice symmetry keeps indices integer
    g = np.gcd.reduce(np.abs(ints)) or 1
    return tuple(int(v) for v in ints // g)


# ---------------------------------------------------------------------- main entry
def solve_grain(patterns, tables, *, alpha_sign: int = 1, beta_sign: int = 1,
                tolerance_deg: float = DEFAULT_TOLERANCE_DEG, holder_range_deg=((-30.0, 30.0), (-25.0, 25.0)),
                voltage_kv: float = 200.0) -> GrainResult:
    """Joint phase and orientation of one grain from patterns at recorded holder readings.

    Parameters
    ----------
    patterns : sequence of :class:`GrainPattern` (at least two), each already indexed
    tables : the :class:`saed.index.tables.IndexTables` the patterns were indexed with
    alpha_sign, beta_sign : -1 where the holder turns left-handedly for positive readings
    tolerance_deg : largest disagreement that still counts as one grain
    holder_range_deg : ((alpha min, max), (beta min, max)) for the suggested third pattern
    """
    patterns = tuple(patterns)
    if len(patterns) < 2:
        raise InputError("a grain series needs at least two patterns at different holder readings")
    if not 0 < tolerance_deg <= 15:
        raise InputError(f"tolerance {tolerance_deg:g} deg must lie between 0 and 15 deg")
    holder = Holder(alpha_axis_deg=0.0, alpha_range_deg=(-90.0, 90.0), beta_range_deg=(-90.0, 90.0),
                    alpha_sign=alpha_sign, beta_sign=beta_sign)
    phases = {pt.name: pt.phase for pt in tables.phases}
    cands = _candidates(patterns, holder)
    names = [gp.image for gp in patterns]
    sols: list[GrainSolution] = []
    near: dict[str, float] = {}
    usable = tuple(i for i, gp in enumerate(patterns) if gp.result.solutions)
    subset_used: dict[str, tuple[int, ...]] = {}
    for name, lists in cands.items():
        phase = phases.get(name)
        if phase is None:
            continue
        syms = proper_symmetry_cartesian(phase)
        lists = _trimmed([sorted(lst, key=lambda c: -c.sol.score)[: 2 * MAX_PER_PHASE] for lst in lists])
        present = [i for i, lst in enumerate(lists) if lst]
        found = []
        if len(present) == len(lists):
            found = [(w, combo, tuple(range(len(lists)))) for w, combo in _joint_combos(lists, syms, tolerance_deg)]
            if not found:
                near[name] = _closest_disagreement(lists, syms)
        else:
            near.setdefault(name, math.inf)
        if not found:  # the largest subset that agrees: without patterns that index to nothing, or one off
            if 2 <= len(usable) < len(lists):
                subsets = [usable]
            elif len(usable) == len(lists) >= 3:
                subsets = [tuple(k for k in range(len(lists)) if k != drop) for drop in range(len(lists))]
            else:
                subsets = []
            for keep in subsets:
                if all(lists[k] for k in keep):
                    found += [(w, combo, keep) for w, combo in _joint_combos([lists[k] for k in keep], syms,
                                                                             tolerance_deg)]
        # one refinement per distinct orientation: the best-scoring combination of each
        found.sort(key=lambda t: (-len(t[2]), -float(np.mean([c.sol.score for c in t[1]])), t[0]))
        distinct = []
        for worst, combo, keep in found:
            if any(k2 == keep and misorientation_deg(c2[0].u0, combo[0].u0, syms)[0] <= tolerance_deg
                   for _, c2, k2 in distinct):
                continue
            distinct.append((worst, combo, keep))
        for worst, combo, keep in distinct[:6]:
            u0, fits = _refine(combo, patterns, holder, phase, syms)
            mean_single = float(np.mean([c.sol.score for c in combo]))
            max_mis = max(f[2] for f in fits)
            score = mean_single * (1.0 - 0.5 * min(1.0, max_mis / tolerance_deg) ** 2) * len(keep) / len(patterns)
            # the reported frame: the first pattern's detector at readings (0, 0)
            u_det = in_plane_rotation(patterns[0].alpha_axis_deg) @ u0
            pfits = []
            for (c, s, mis, rms, n_sp) in fits:
                gp = patterns[c.pattern]
                z = _zone_at(phase, u0, s, c)
                pfits.append(PatternFit(gp.image, tuple(gp.tilt_deg), z,
                                        tuple(int(v) for v in direction_to_4(z)) if phase.is_hexagonal else None,
                                        float(mis), float(c.sol.score), bool(c.turned), rms, n_sp))
            sol = GrainSolution(name, float(score), u_det, euler_bunge_deg(u_det), tuple(pfits),
                                tuple(names[k] for k in range(len(patterns)) if k not in keep))
            # one entry per distinct orientation of a phase
            dup = next((k for k, o in enumerate(sols) if o.phase_name == name and
                        misorientation_deg(o.orientation_matrix, u_det, syms)[0] <= tolerance_deg), None)
            if dup is None:
                sols.append(sol)
            elif sol.score > sols[dup].score:
                sols[dup] = sol
            subset_used[name] = keep
    sols.sort(key=lambda s: (len(s.missing), -s.score))
    full = [s for s in sols if not s.missing]
    disagreeing: tuple[str, ...] = ()
    message = ""
    if not full:
        if sols:
            disagreeing = sols[0].missing
            why = []
            for m in disagreeing:
                gp = next(g for g in patterns if g.image == m)
                why.append(f"{m} gives no solution of its own ({gp.result.message})" if not gp.result.solutions else
                           f"{m} fits no orientation that the other patterns share (within {tolerance_deg:g} deg)")
            message = (f"no joint solution for all {len(patterns)} patterns: {'; '.join(why)}; the others agree on "
                       f"{sols[0].phase_name}")
        else:
            closest = min(near.values(), default=math.inf)
            message = (f"no joint solution: no phase has one orientation that explains all {len(patterns)} patterns "
                       f"within {tolerance_deg:g} deg"
                       + (f" (closest: {min(near, key=near.get)}, {closest:.1f} deg apart)" if math.isfinite(closest)
                          else "")
                       + "; the patterns may come from different grains, or the holder readings, their order or the "
                         "alpha-axis direction may be wrong")
            bare = tuple(gp.image for gp in patterns if not gp.result.solutions)
            if bare:
                disagreeing = bare
                message += "; " + "; ".join(f"{gp.image} gives no solution of its own ({gp.result.message})"
                                            for gp in patterns if not gp.result.solutions)
            else:
                disagreeing = tuple(names) if len(patterns) == 2 else _odd_one_out(patterns, cands, phases,
                                                                                   tolerance_deg)
    diffs = {}
    if full:
        for o in full[1:]:
            if o.score < full[0].score - 0.05 or o.phase_name != full[0].phase_name:
                got = [(difference_at(full[0], o, phases, holder, patterns, gp.tilt_deg, voltage_kv), gp.image)
                       for gp in patterns]
                got = [(d, img) for d, img in got if d is not None]
                if got:
                    diffs[id(o)] = max(got, key=lambda t: t[0][0])
    looks = lookalikes_of_series(patterns, sols, near, tolerance_deg, diffs)
    third = None
    if full:
        open_names = {lk.phase_name for lk in looks if lk.relation == "undecided"}
        rivals = [s for s in full[1:] if s.score >= full[0].score - UNDECIDED_SCORE and s.phase_name in open_names]
        if rivals:
            third = third_pattern(full[0], rivals[0], phases, holder, holder_range_deg, patterns, voltage_kv)
    return GrainResult(tuple(sols), tuple(looks), third, message, disagreeing, patterns, float(tolerance_deg))


def _odd_one_out(patterns, cands, phases, tol) -> tuple[str, ...]:
    """With three or more patterns and no agreement at all: the pattern whose removal brings the rest closest."""
    best = None
    for drop in range(len(patterns)):
        for name, lists in cands.items():
            phase = phases.get(name)
            keep = [lists[k] for k in range(len(patterns)) if k != drop]
            if phase is None or not all(keep):
                continue
            d = _closest_disagreement(keep, proper_symmetry_cartesian(phase))
            if best is None or d < best[0]:
                best = (d, drop)
    return (patterns[best[1]].image,) if best is not None else tuple(p.image for p in patterns)

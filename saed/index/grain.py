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

from saed.crystal.miller import direction_to_4, format_indices
from saed.crystal.symmetry import laue_rotations
from saed.errors import InputError
from saed.index.values import IndexResult
from saed.simulate.geometry import in_plane_rotation
from saed.simulate.tilt import Holder, holder_rotation

__all__ = ["GrainPattern", "PatternFit", "GrainSolution", "GrainLookalike", "ThirdPattern", "GrainResult",
           "solve_grain", "euler_bunge_deg", "misorientation_deg", "DEFAULT_TOLERANCE_DEG"]

#: Largest disagreement (deg) between the patterns' orientations at readings (0, 0) that still counts
#: as one grain: holder readings good to 0.3-1 deg (common practice), each pattern's own mistilt and
#: orientation error up to about 1 deg.
DEFAULT_TOLERANCE_DEG = 3.0

#: Single-pattern scores this close to the pattern's best count as "one pattern could not separate".
UNDECIDED_SCORE = 0.1

#: Weight of each pattern's beam direction in the refinement, 1/nm per radian: a 0.5 deg mistilt
#: then weighs like a 0.01 1/nm position error of every spot.
BEAM_WEIGHT = 1.1

#: Candidates per phase and pattern carried into the joint search.
MAX_PER_PHASE = 8

_RZ180 = np.diag([-1.0, -1.0, 1.0])


@dataclass(frozen=True)
class GrainPattern:
    """One pattern of the series: its name, holder readings (alpha, beta) in deg, its single-pattern
    result, and the alpha-axis azimuth on its detector (deg from +x toward +y)."""

    image: str
    tilt_deg: tuple[float, float]
    result: IndexResult
    alpha_axis_deg: float = 0.0


@dataclass(frozen=True)
class PatternFit:
    """How one pattern fits a joint solution: the zone on the beam at its readings, the misfit."""

    image: str
    tilt_deg: tuple[float, float]
    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    misfit_deg: float
    single_score: float
    turned: bool
    rms_inv_nm: float
    n_spots: int


@dataclass(frozen=True)
class GrainSolution:
    """A phase and one orientation explaining the patterns in ``patterns`` (``missing``: those it does not)."""

    phase_name: str
    score: float
    orientation_matrix: np.ndarray
    euler_bunge_deg: tuple[float, float, float]
    patterns: tuple[PatternFit, ...]
    missing: tuple[str, ...] = ()

    @property
    def max_misfit_deg(self) -> float:
        return max((p.misfit_deg for p in self.patterns), default=0.0)


@dataclass(frozen=True)
class GrainLookalike:
    """A solution one pattern could not rule out, and what the series says about it."""

    phase_name: str
    relation: str  # 'decided' (the series rules it out) or 'undecided'
    patterns: tuple[str, ...]  # the patterns that alone could not separate it
    evidence: str


@dataclass(frozen=True)
class ThirdPattern:
    """A zone to record next, with the holder readings, where the remaining solutions differ."""

    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    alpha_deg: float
    beta_deg: float
    text: str


@dataclass(frozen=True)
class GrainResult:
    solutions: tuple[GrainSolution, ...]
    lookalikes: tuple[GrainLookalike, ...]
    third_pattern: ThirdPattern | None
    message: str
    disagreeing: tuple[str, ...]
    patterns: tuple[GrainPattern, ...]
    tolerance_deg: float

    @property
    def best(self) -> GrainSolution | None:
        return self.solutions[0] if self.solutions else None


# ---------------------------------------------------------------------- geometry helpers
def _proper_symmetry_cartesian(phase) -> np.ndarray:
    """Proper rotations of the Laue group in the crystal Cartesian frame, (n, 3, 3)."""
    a = phase.lattice.direct_matrix_nm
    ai = np.linalg.inv(a)
    ops = [r for r in laue_rotations(phase.space_group) if round(np.linalg.det(r)) == 1]
    return np.array([a @ r @ ai for r in ops])


def misorientation_deg(u_a: np.ndarray, u_b: np.ndarray, syms: np.ndarray) -> tuple[float, int]:
    """Smallest rotation angle (deg) between orientations u_a and u_b S over the symmetry S; and that S's index."""
    m = u_a.T @ u_b  # rotation angle of u_b S u_a^T equals that of u_a^T u_b S
    tr = np.einsum("jk,nkj->n", m, syms)
    j = int(np.argmax(tr))
    c = max(-1.0, min(1.0, (float(tr[j]) - 1.0) / 2.0))
    return math.degrees(math.acos(c)), j


def euler_bunge_deg(u: np.ndarray) -> tuple[float, float, float]:
    """Bunge (phi1, Phi, phi2) in degrees of the orientation U (crystal -> sample): g = U^T.

    g = Rz(phi2) Rx(Phi) Rz(phi1) (passive rotations), so g33 = cos Phi, g31 = sin phi1 sin Phi,
    g32 = -cos phi1 sin Phi, g13 = sin phi2 sin Phi, g23 = cos phi2 sin Phi (Bunge 1982).

    >>> [round(v, 6) + 0.0 for v in euler_bunge_deg(np.eye(3))]
    [0.0, 0.0, 0.0]
    """
    g = np.asarray(u, float).T
    big_phi = math.degrees(math.acos(max(-1.0, min(1.0, g[2, 2]))))
    if abs(math.sin(math.radians(big_phi))) > 1e-6:
        phi1 = math.degrees(math.atan2(g[2, 0], -g[2, 1]))
        phi2 = math.degrees(math.atan2(g[0, 2], g[1, 2]))
    else:  # Phi = 0 or 180: only phi1 +- phi2 is defined; put it all in phi1
        phi1 = math.degrees(math.atan2(g[0, 1], g[0, 0]))
        phi2 = 0.0
    return phi1 % 360.0, big_phi, phi2 % 360.0


def _rotvec(w: np.ndarray) -> np.ndarray:
    th = float(np.linalg.norm(w))
    if th < 1e-12:
        return np.eye(3)
    k = w / th
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(th) * kx + (1 - math.cos(th)) * (kx @ kx)


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
        u = _rotvec(w) @ u_start
        out = [((h @ u @ g.T).T[:, :2] - xy).ravel() for h, g, xy in data if len(g)]
        out += [BEAM_WEIGHT * wt * (u.T @ (h.T @ np.array([0.0, 0.0, 1.0])) - b) for h, b, wt in beams]
        return np.concatenate(out)

    try:
        sol = optimize.least_squares(resid, np.zeros(3), loss="soft_l1", f_scale=0.05, max_nfev=100)
        u0 = _rotvec(sol.x) @ u_start
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
        syms = _proper_symmetry_cartesian(phase)
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
                got = [(_difference_at(full[0], o, phases, holder, patterns, gp.tilt_deg, voltage_kv), gp.image)
                       for gp in patterns]
                got = [(d, img) for d, img in got if d is not None]
                if got:
                    diffs[id(o)] = max(got, key=lambda t: t[0][0])
    looks = _lookalikes(patterns, sols, near, tolerance_deg, diffs)
    third = None
    if full:
        open_names = {lk.phase_name for lk in looks if lk.relation == "undecided"}
        rivals = [s for s in full[1:] if s.score >= full[0].score - UNDECIDED_SCORE and s.phase_name in open_names]
        if rivals:
            third = _third_pattern(full[0], rivals[0], phases, holder, holder_range_deg, patterns, voltage_kv)
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
            d = _closest_disagreement(keep, _proper_symmetry_cartesian(phase))
            if best is None or d < best[0]:
                best = (d, drop)
    return (patterns[best[1]].image,) if best is not None else tuple(p.image for p in patterns)


def _lookalikes(patterns, sols, near, tol, diffs) -> list[GrainLookalike]:
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
                                      f"in {img} the two differ ({txt}; {dis * 100:.0f} % of the spots), and {name} "
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


def _difference_at(a: GrainSolution, b: GrainSolution, phases, holder: Holder, patterns, readings, voltage_kv):
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
        v = pat[4][k]
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


def _third_pattern(a: GrainSolution, b: GrainSolution, phases, holder: Holder, ranges, patterns,
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
            f"[{zt(za, pa)}] as solution 1, {other} ({dis * 100:.0f} % of the spots differ)")
    return ThirdPattern(tuple(int(v) for v in za), za4, float(st.alpha_deg), float(st.beta_deg), text)

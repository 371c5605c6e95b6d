"""More than one crystal in one pattern: twins, intergrowths, a matrix with precipitates.

After the best single-crystal solution (crystal 1), the spots it leaves unexplained, or explains
only as forbidden reflections or strong higher-order Laue-zone projections, are the residual. When
they form a lattice, a second crystal is indexed from them; ``max_crystals`` = 3 allows a third.

How saed decides (docs/indexing.md, "Two crystals in one pattern"):

* The search uses only residual spots as seeds, at crystal 1's refined scale (both crystals share
  the pattern's calibration, centre and ellipse) within :data:`SCALE_TOL` and for zone axes up to
  :data:`MAX_SECOND_ZONE_INDEX`. Each hit is refined and scored against *all* spots, so a spot may
  belong to both crystals (shared rows are normal in intergrowths).
* A second crystal is accepted only when it explains at least :data:`MIN_OWN_SPOTS` residual spots
  as allowed reflections, in at least two non-parallel rows, those spots carry at least
  :data:`MIN_RESIDUAL_SHARE` of the residual spot weight and :data:`MIN_INTENSITY_SHARE` of all the
  spot intensity, and no more than :data:`MAX_ABSENT` of
  its own predicted kinematic intensity is missing. A candidate that is crystal 1 again (same phase,
  within 3 deg) is never a second crystal. A false second crystal is worse than none: a residual
  that does not pass becomes a note ("too weak to decide"), never a solution.
* Spots at g1 + g2 (a reflection of one crystal plus one of the other) are double diffraction
  across the crystals: they are recorded as such and never seed a further crystal.
* Ordered and disordered forms of one cell in one orientation (L1_2 Ni3Al on fcc Ni, B2 on bcc):
  the pattern is one ordered crystal unless the fundamental spots are decisively stronger than one
  fully ordered crystal makes them (:func:`saed.index.ordering.order_evidence`: the measured
  superlattice/fundamental ratio against the kinematic one, with the measured scatter as its
  uncertainty); then the disordered matrix is reported as a second crystal sharing the fundamental
  spots, with the ordered precipitate in its orientation owning the superlattice spots. Where the
  intensities do not decide, one ordered crystal is listed and a note names both readings. Either
  way a caution: partial long-range order weakens superlattice spots in the same way, dynamical
  scattering makes intensity ratios unreliable in thick areas, and a dark-field image in a
  superlattice spot decides.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np

from saed.index.candidates import Candidate, SpotSet, find_candidates
from saed.index.orientation_relationships import (OrientationRelationship, describe_relationship, ordered_pair,
                                                  proper_rotations_cart, misorientation)
from saed.index.order_probe import HINT_Z, context_for, probe_order
from saed.index.ordering import DECISIVE_Z, OrderEvidence, order_evidence
from saed.index.superlattice_probe import PRESENT_Z
from saed.index.score import score_candidate
from saed.index.values import Solution
from saed.units import percent, percent_off

__all__ = ["Crystal", "CrossDoubleDiffraction", "MultiCrystalResult", "SharedScale", "find_crystals",
           "settle_shared_scale", "MIN_OWN_SPOTS", "MIN_RESIDUAL_SHARE", "MAX_ABSENT"]

logger = logging.getLogger(__name__)

#: A further crystal must explain at least this many residual spots as allowed reflections.
MIN_OWN_SPOTS = 4
#: ... carrying at least this share of the residual spot weight.
MIN_RESIDUAL_SHARE = 0.5
#: ... and miss at most this share of its own predicted kinematic intensity (a weak crystal's faint
#: reflections go undetected: with :data:`MANY_OWN_SPOTS` or more own spots, :data:`MAX_ABSENT_MANY`).
MAX_ABSENT = 0.45
MANY_OWN_SPOTS = 8
MAX_ABSENT_MANY = 0.7
#: Scale tolerance of a further crystal relative to crystal 1's refined scale (cell parameters of
#: alloyed or strained phases): 1.5 %.
SCALE_TOL = 0.015
#: Zone axes of further crystals are searched up to this index.
MAX_SECOND_ZONE_INDEX = 5
#: ... and its own spots must carry at least this share of the measured spot intensity (weaker:
#: a note, never a crystal).
MIN_INTENSITY_SHARE = 0.03
#: Residual spots nearer the centre than this (1/nm) do not seed a further crystal.
MIN_SEED_G_INV_NM = 2.0
#: Residual spots below this many are not examined at all (a stray spot or two is common).
MIN_RESIDUAL_SPOTS = 3

_EXPLAINED = ("allowed", "double-diffraction")


@dataclass(frozen=True)
class CrossDoubleDiffraction:
    """A spot at g_a + g_b: reflection ``hkl_a`` of crystal ``crystal_a`` plus ``hkl_b`` of ``crystal_b``."""

    spot_index: int
    crystal_a: int
    hkl_a: tuple[int, int, int]
    crystal_b: int
    hkl_b: tuple[int, int, int]


@dataclass(frozen=True)
class Crystal:
    """One crystal of the pattern: its own solution (phase, zone, orientation, every spot assigned).

    ``role``: 'best' (crystals[0]), 'second', 'third', 'matrix' or 'ordered precipitate';
    ``own_spots``: spots only this crystal explains; ``shared_spots``: spots it shares with an
    earlier crystal; ``intensity_share``: share of the measured spot weight it explains;
    ``undecided_with``: other phases whose reading fits this crystal's own spots as well (the pattern
    does not decide its phase; a note says what would).
    """

    solution: Solution
    role: str
    own_spots: tuple[int, ...] = ()
    shared_spots: tuple[int, ...] = ()
    intensity_share: float = 0.0
    note: str = ""
    undecided_with: tuple[str, ...] = ()

    @property
    def phase_name(self) -> str:
        return self.solution.phase_name


@dataclass(frozen=True)
class MultiCrystalResult:
    crystals: tuple[Crystal, ...]
    relationships: tuple[OrientationRelationship, ...]
    cross_double_diffraction: tuple[CrossDoubleDiffraction, ...]
    notes: tuple[str, ...]


def _explained_mask(sol: Solution, spots: SpotSet) -> np.ndarray:
    """Spots `sol` explains: allowed, double diffraction, or a weak higher-order Laue-zone projection."""
    n = len(sol.indexed)
    out = np.zeros(n, bool)
    allowed_int = [s.intensity for s in sol.indexed if s.kind == "allowed"]
    med = float(np.median(allowed_int)) if allowed_int else 0.0
    for s in sol.indexed:
        if s.kind in _EXPLAINED:
            out[s.spot_index] = True
        elif s.kind == "holz-projection" and s.intensity < 0.1 * med:
            out[s.spot_index] = True  # thin foil / faults (fcc <111>: weak 1/3{422}), not a crystal
    return out


def _subset(spots: SpotSet, idx: np.ndarray) -> SpotSet:
    w = spots.weight[idx]
    w = w / w.sum() if w.sum() > 0 else np.full(len(idx), 1.0 / max(len(idx), 1))
    inten = spots.intensity[idx]
    ref = np.percentile(inten, 90) if len(idx) >= 3 else inten.max()
    return SpotSet(spots.v_px[idx], spots.r_px[idx], inten, w, spots.sigma_px[idx], inten >= 0.12 * ref,
                   spots.v_px[idx], np.ones(len(idx), bool))


def _n_rows(v: np.ndarray) -> int:
    """Distinct directions (up to sign, 5 deg) among vectors v."""
    dirs: list[np.ndarray] = []
    for x in v:
        u = x / max(float(np.linalg.norm(x)), 1e-12)
        if not any(abs(float(u @ d)) > math.cos(math.radians(5.0)) for d in dirs):
            dirs.append(u)
    return len(dirs)


def _same_crystal(sol: Solution, others: list[Solution], tables) -> bool:
    for o in others:
        if o.phase_name != sol.phase_name:
            continue
        pt = tables.table(sol.phase_name)
        sym = proper_rotations_cart(pt.phase)
        ang, _ = misorientation(np.asarray(sol.orientation_matrix).T @ np.asarray(o.orientation_matrix), sym, sym)
        if ang < 3.0:
            return True
    return False


def _search(measured, tables, spots: SpotSet, residual: np.ndarray, crystals: list[Solution], *, scale: float,
            angle_tol: float, ratio_tol: float, rel_pos_tol: float, pitch, max_zone_index: int):
    """The best further-crystal candidate for the residual spots: (Solution, own spot indices, share of the residual
    weight, merit, absent share, tied rivals, chosen by relationship) or None."""
    # seeds from residual spots beyond 2 1/nm: nearer ones are mostly double diffraction across the
    # crystals (g1 + g2 of nearly opposite reflections) or debris, and would pair into wrong seeds
    seedable = residual[spots.r_px[residual] * scale >= MIN_SEED_G_INV_NM]
    args = (measured, tables, spots, residual, crystals)
    opts = dict(scale=scale, angle_tol=angle_tol, ratio_tol=ratio_tol, rel_pos_tol=rel_pos_tol, pitch=pitch,
                max_zone_index=max_zone_index)
    found = _search_from(seedable, *args, **opts)
    if found is None or found[2] < MIN_RESIDUAL_SHARE or len(found[1]) < MIN_OWN_SPOTS:
        # nothing convincing: seed again without the spots that look like double diffraction across the crystals
        fewer = _without_likely_cross_dd(spots, seedable, crystals, rel_pos_tol)
        if len(fewer) < len(seedable):
            again = _search_from(fewer, *args, **opts)
            if again is not None and (found is None or again[3] > found[3]):
                found = again
    return found


def _search_from(seedable: np.ndarray, measured, tables, spots: SpotSet, residual: np.ndarray, crystals: list[Solution],
                 *, scale: float, angle_tol: float, ratio_tol: float, rel_pos_tol: float, pitch, max_zone_index: int):
    """:func:`_search` with the residual spots `seedable` as seeds."""
    if len(seedable) < 2:
        return None
    opts = dict(scale_inv_nm_per_px=scale, length_tol=SCALE_TOL, ratio_tol=ratio_tol, angle_tol_deg=angle_tol,
                rel_pos_tol=rel_pos_tol, max_zone_index=min(max_zone_index, MAX_SECOND_ZONE_INDEX))
    cands, _ = find_candidates(tables, _subset(spots, seedable), **opts)
    w_res = float(spots.weight[residual].sum())
    res_set = set(int(i) for i in residual)
    scored = []
    seen_keys = set()
    for c in cands[:16]:
        key = (c.phase_index, c.canonical_zone, round(c.u_matrix[0, 0], 2), round(c.u_matrix[1, 0], 2))
        if key in seen_keys:
            continue
        seen_keys.add(key)
        sol, _fit = score_candidate(c, tables, spots, measured, calibrated_scale=scale, length_tol=SCALE_TOL,
                                    rel_pos_tol=rel_pos_tol, pixel_pitch_um=pitch)
        if _same_crystal(sol, crystals, tables):
            continue
        own = [s.spot_index for s in sol.indexed if s.kind == "allowed" and s.spot_index in res_set]
        share = float(spots.weight[own].sum()) / w_res if w_res > 0 and own else 0.0
        absent = float(sol.term("absent") or 0.0)
        merit = share * (1.0 - absent) * float(sol.term("scale") or 1.0) * float(sol.term("zone_prior") or 1.0)
        scored.append((sol, tuple(sorted(own)), share, merit, absent))
    if not scored:
        return None
    scored.sort(key=lambda t: -t[3])
    best = scored[0]
    # an ordered phase wins over its disordered form in the same orientation only through superlattice
    # spots of its own (spots the disordered form cannot explain)
    for alt in scored[1:]:
        pair = ordered_pair(tables.table(best[0].phase_name).phase, tables.table(alt[0].phase_name).phase)
        if (pair is not None and pair[0] == best[0].phase_name and alt[3] >= 0.5 * best[3]
                and _misorientation_deg(best[0], alt[0], tables) < 3.0):
            extra = set(best[1]) - set(alt[1])
            if len(extra) < 2:
                best = alt
            break
    tied = [best]
    for alt in scored:  # other phases that explain the same residual spots nearly as well
        if (alt[0].phase_name != best[0].phase_name and _tie(alt, best)
                and len(set(alt[1]) & set(best[1])) >= 0.8 * len(best[1]) and alt[0].phase_name not in [t[0].phase_name for t in tied]):
            pair = ordered_pair(tables.table(best[0].phase_name).phase, tables.table(alt[0].phase_name).phase)
            if pair is None:
                tied.append(alt)
    by_relationship = False
    if len(tied) > 1:
        best = _prefer_relationship(tied, crystals[0], tables)
        by_relationship = best is not tied[0]
    rivals = [(t[0].phase_name, f"[{_zone(t[0])}]", t[0].scale_error_pct) for t in tied if t is not best]
    return best + (tuple(rivals), by_relationship)


def _without_likely_cross_dd(spots: SpotSet, seedable: np.ndarray, crystals: list[Solution],
                             rel_pos_tol: float) -> np.ndarray:
    """`seedable` without the spots that lie at g_a + g_j, g_a a spot an earlier crystal explains as allowed
    and g_j a brighter residual spot: double diffraction across the crystals, which seeds wrong pairs
    (a weak fcc [111] beside bcc [011]: the cross spots lie nearer the centre than the fcc {220} and are
    taken first). Kept whole when fewer than three spots would remain."""
    first = np.array([s.spot_index for c in crystals for s in c.indexed if s.kind == "allowed"], int)
    if len(first) == 0 or len(seedable) < 4:
        return seedable
    va = spots.v_px[first]
    keep = []
    for i in seedable:
        tol = 3.0 * math.sqrt(float(spots.sigma_px[i]) ** 2 + (rel_pos_tol * float(spots.r_px[i])) ** 2 + 0.25)
        brighter = [j for j in seedable if j != i and spots.intensity[j] > spots.intensity[i]]
        if brighter:
            d = np.linalg.norm(va[:, None, :] + spots.v_px[brighter][None, :, :] - spots.v_px[i][None, None, :], axis=2)
            if float(d.min()) <= tol:
                continue
        keep.append(int(i))
    return np.array(keep, int) if len(keep) >= 3 else seedable


def _tie(alt, best) -> bool:
    """Does `alt` explain the residual spots as well as `best`, up to a scale difference the pattern cannot resolve?

    The scale of a further crystal is known only through crystal 1's refined scale, which spots of the
    other crystal nearby pull by up to about 1 % (measured on the benchmark frames: 0.4-1 %); phases whose
    spacings differ by less than :data:`SCALE_TOL` (fcc [112] of Fe, Ni or Ni3Al and hcp Co [01-10]) are
    then not decided by the scale term, so it is left out of the comparison.
    """
    def no_scale(t):
        return t[3] / max(float(t[0].term("scale") or 1.0), 1e-9)

    err = alt[0].scale_error_pct
    return (no_scale(alt) >= 0.8 * no_scale(best) and alt[3] >= 0.3 * best[3]
            and (err is None or abs(err) <= percent(SCALE_TOL)))


def _prefer_relationship(tied, first: Solution, tables):
    """Among tied readings of a further crystal, the first (best-scored) one that stands in a standard
    orientation relationship to crystal 1 (within its tolerance), else the best-scored one.

    Two crystals seen along zone axes at once are rarely unrelated: a random pair almost never puts
    both on low-index zones, an intergrowth with a relationship does. The tie itself is still reported
    (the caller's note names every tied reading)."""
    p1 = tables.table(first.phase_name).phase
    for t in tied:
        pk = tables.table(t[0].phase_name).phase
        r = describe_relationship(p1, pk, first.orientation_matrix, t[0].orientation_matrix)
        if r.name != "none":
            return t
    return tied[0]


def _cross_dd(spots: SpotSet, measured, sols: list[Solution], unexplained: np.ndarray, rel_pos_tol: float):
    """Unexplained spots at g_a + g_b of two different crystals."""
    out = []
    cx, cy = measured.center_px
    pred = []
    for s in sols:
        keep = np.array([k == "allowed" for k in s.predicted_kind], bool)
        pred.append(((s.predicted_xy_px - np.array([cx, cy]))[keep], s.predicted_hkl[keep]))
    for i in np.flatnonzero(unexplained):
        v = spots.v_px[i]
        sig = math.sqrt(float(spots.sigma_px[i]) ** 2 + (rel_pos_tol * float(spots.r_px[i])) ** 2 + 0.25)
        hit = None
        for a in range(len(sols)):
            for b in range(a + 1, len(sols)):
                pa, ha = pred[a]
                pb, hb = pred[b]
                if len(pa) == 0 or len(pb) == 0:
                    continue
                d = np.linalg.norm(pa[:, None, :] + pb[None, :, :] - v[None, None, :], axis=2)
                k = np.unravel_index(int(np.argmin(d)), d.shape)
                if d[k] <= 3.0 * sig:
                    hit = CrossDoubleDiffraction(int(i), a, tuple(int(x) for x in ha[k[0]]), b,
                                                 tuple(int(x) for x in hb[k[1]]))
                    break
            if hit:
                break
        if hit:
            out.append(hit)
    return out


def _with_matrix(measured, tables, spots, ordered: Solution, pitch, rel_pos_tol, ctx=None):
    """Disordered partners of an ordered crystal: (OrderEvidence, matrix Solution, name) for the best partner,
    or None; plus the names of partners that fit nearly as well.

    Both crystals share one calibration: the ordered crystal's superlattice spots (its own) fix the scale,
    and the matrix is the partner whose cell puts the fundamental spots at that scale (a matrix and its
    precipitates differ in cell size by a fraction of a per cent to a few per cent, and the fundamental
    spots are their blend). Without two superlattice spots, the partner that fits best at the stated
    calibration.
    """
    pt_o = tables.table(ordered.phase_name)
    found = []
    for pi, pt in enumerate(tables.phases):
        pair = ordered_pair(pt_o.phase, pt.phase)
        if pair is None or pair[0] != ordered.phase_name:
            continue
        ev = _evidence(measured, tables, ordered, pt, ctx, spots)
        if ev is None:
            continue
        uvw = tuple(int(v) for v in ordered.zone_axis)
        f = pt.phase.lattice.a_nm / pt_o.phase.lattice.a_nm
        cand = Candidate(pi, 0, 1, uvw, pt.canonical_zone(uvw), np.asarray(ordered.orientation_matrix),
                         float(ordered.scale_inv_nm_per_px) / f, 1.0)
        stated = measured.calibration.scale_inv_nm_per_px if measured.calibration is not None else None
        sol, _ = score_candidate(cand, tables, spots, measured,
                                 calibrated_scale=float(stated or ordered.scale_inv_nm_per_px),
                                 length_tol=MATRIX_SCALE_TOL, rel_pos_tol=rel_pos_tol, pixel_pitch_um=pitch)
        found.append((ev, sol, pt.phase.name, _scale_gap(ordered, sol, pt, spots)))
    if not found:
        return None
    if all(t[3] is not None for t in found):
        found.sort(key=lambda t: t[3])
        rivals = tuple(t[2] for t in found[1:] if t[3] <= found[0][3] + MATRIX_SCALE_MARGIN)
    else:
        found.sort(key=lambda t: -t[1].score)
        rivals = tuple(t[2] for t in found[1:] if t[1].score >= 0.9 * found[0][1].score)
    return found[0][:3] + (rivals,)


#: Scale tolerance when a disordered matrix is scored beside its ordered precipitate (the calibration a
#: few per cent off, as for crystal 1).
MATRIX_SCALE_TOL = 0.03
#: Matrix readings whose fundamental-spot scale lies within this (fraction) of the best one's are named
#: as possible matrices too.
MATRIX_SCALE_MARGIN = 0.004


def _implied_scale(sol: Solution, spots: SpotSet, keep) -> float | None:
    r = [(1.0 / s.d_nm_calc) / float(spots.r_px[s.spot_index]) for s in sol.indexed
         if s.kind == "allowed" and s.d_nm_calc and s.hkl is not None and spots.r_px[s.spot_index] > 0 and keep(s)]
    return float(np.median(r)) if len(r) >= 2 else None


def _scale_gap(ordered: Solution, matrix: Solution, matrix_table, spots: SpotSet) -> float | None:
    """|s_matrix / s_ordered - 1|: the scale the matrix's (fundamental) spots imply against the one the ordered
    crystal's superlattice spots imply; None with fewer than two of either."""
    def superlattice(s):
        row = matrix_table.rows_of(np.array([s.hkl]))[0]
        return not (row >= 0 and bool(matrix_table.allowed[row]))

    s_o = _implied_scale(ordered, spots, superlattice)
    s_m = _implied_scale(matrix, spots, lambda s: True)
    return None if s_o is None or s_m is None else abs(s_m / s_o - 1.0)


def _evidence(measured, tables, ordered: Solution, disordered_table, ctx=None, spots=None):
    """rho of an ordered solution: from every predicted position in the image when the image is at hand and its
    superlattice family is present there (:mod:`saed.index.order_probe`), else from the detected spots."""
    if ctx is not None and spots is not None:
        p = probe_order(ctx, tables, spots, ordered)
        if p is not None and p.present and p.evidence is not None:
            return p.evidence
    voltage = measured.calibration.voltage_kv if measured.calibration is not None else 200.0
    return order_evidence(ordered, tables.table(ordered.phase_name).phase, disordered_table, voltage_kv=voltage)


def find_crystals(measured, tables, spots: SpotSet, best: Solution, *, max_crystals: int = 2, angle_tol: float = 2.0,
                  ratio_tol: float = 0.025, rel_pos_tol: float = 0.008, pitch=None,
                  max_zone_index: int = 7, image=None) -> MultiCrystalResult:
    """Crystals beyond `best` among the spots it leaves unexplained (see the module docstring).

    `image`: the detector image the spots were measured on (optional). With it, the superlattice positions of
    an ordered reading in crystal 1's orientation are probed in the image (:mod:`saed.index.order_probe`).
    """
    ctx = context_for(image, measured) if image is not None else None
    sols: list[Solution] = [best]
    undecided: dict[int, tuple[str, ...]] = {}  # id(solution) -> phases that fit its own spots as well
    roles = ["best"]
    notes: list[str] = []
    scale = float(best.scale_inv_nm_per_px)
    explained = _explained_mask(best, spots)
    cross: list[CrossDoubleDiffraction] = []
    while len(sols) < max_crystals:
        residual = np.flatnonzero(~explained)
        if len(residual) < MIN_RESIDUAL_SPOTS:
            break
        found = _search(measured, tables, spots, residual, sols, scale=scale, angle_tol=angle_tol, ratio_tol=ratio_tol,
                        rel_pos_tol=rel_pos_tol, pitch=pitch, max_zone_index=max_zone_index)
        res_share = float(spots.weight[residual].sum())
        if found is None:
            if len(residual) >= MIN_OWN_SPOTS and res_share >= 0.1:
                notes.append(f"{len(residual)} spots ({percent(res_share):.0f} % of the spot intensity) are not explained by "
                             f"{'the crystal' if len(sols) == 1 else 'the crystals'} found, and no further crystal among "
                             "the candidate phases fits them (another phase, or a high-index zone?)")
            break
        sol, own, share, _merit, absent, rivals, by_relationship = found
        total = float(spots.intensity.sum())
        own_int = float(spots.intensity[list(own)].sum()) / total if own and total > 0 else 0.0
        # an ordered crystal on a disordered one of the same orientation owns only its superlattice spots,
        # weak by nature: their number and rows decide, not their intensity
        superlattice = any(ordered_pair(tables.table(sol.phase_name).phase, tables.table(o.phase_name).phase)
                           is not None and _misorientation_deg(sol, o, tables) < 3.0 for o in sols)
        max_absent = MAX_ABSENT_MANY if len(own) >= MANY_OWN_SPOTS else MAX_ABSENT
        ok = (len(own) >= MIN_OWN_SPOTS and share >= MIN_RESIDUAL_SHARE and absent <= max_absent
              and (own_int >= MIN_INTENSITY_SHARE or superlattice) and _n_rows(spots.v_px[list(own)]) >= 2)
        if not ok:
            if len(own) >= 3:
                notes.append(f"{len(residual)} spots ({percent(res_share):.0f} % of the spot intensity) are not explained by "
                             f"crystal {len(sols)}; the best further crystal, {sol.phase_name} [{_zone(sol)}], explains "
                             f"{'only ' if share < MIN_RESIDUAL_SHARE or len(own) < MIN_OWN_SPOTS else ''}{len(own)} of "
                             f"them ({percent(share):.0f} % of their weight, {percent(own_int):.1f} % of all spot intensity"
                             f"{f', {percent(absent):.0f} % of its own pattern missing' if absent > max_absent else ''}): too "
                             "weak to decide, not reported as a crystal (a longer exposure, or the aperture on the "
                             "second crystal alone, would decide)")
            elif len(residual) >= MIN_OWN_SPOTS and res_share >= 0.1:
                notes.append(f"{len(residual)} spots ({percent(res_share):.0f} % of the spot intensity) are not explained by "
                             f"{'the crystal' if len(sols) == 1 else 'the crystals'} found, and no further crystal among "
                             "the candidate phases fits them (another phase, a high-index zone, or stray spots)")
            break
        sols.append(sol)
        roles.append("second" if len(sols) == 2 else "third")
        if rivals:
            undecided[id(sol)] = tuple(n for n, _, _ in rivals)
            notes.append(f"crystal {len(sols)} could also be " + ", ".join(
                f"{n} {z}" + (f" (scale {e:+.1f} % from crystal 1's)" if e is not None else "") for n, z, e in rivals)
                + f": its {len(own)} own spots fit these as well as {sol.phase_name} [{_zone(sol)}]"
                + (f" (scale {sol.scale_error_pct:+.1f} %)" if sol.scale_error_pct is not None else "")
                + " within what crystal 1's scale fixes (about 1 %); "
                + ("reported as the reading that stands in a standard orientation relationship to crystal 1, but "
                   if by_relationship else "")
                + "the phase of this crystal is not decided by this pattern (a second zone, or EDS, decides)")
        explained = explained | _explained_mask(sol, spots)
        dd = _cross_dd(spots, measured, sols, ~explained, rel_pos_tol)
        for d in dd:
            explained[d.spot_index] = True
        cross.extend(dd)
    left = np.flatnonzero(~explained)
    left_share = float(spots.weight[left].sum())
    if 1 < len(sols) == max_crystals and len(left) >= MIN_OWN_SPOTS and left_share >= 0.1:
        notes.append(f"{len(left)} spots ({percent(left_share):.0f} % of the spot intensity) are explained by none of the "
                     f"{len(sols)} crystals" + (": --max-crystals 3 looks for a third crystal" if max_crystals < 3 else ""))
    # ordered precipitate / disordered matrix in one orientation
    pair_note = ""
    probed = False
    if len(sols) == 1 and ctx is not None:
        probed, pair_note, sols, roles = _probe_disordered(ctx, tables, spots, best, notes, max_crystals=max_crystals,
                                                           rel_pos_tol=rel_pos_tol, pitch=pitch)
    if len(sols) == 1 and not probed:
        m = _with_matrix(measured, tables, spots, best, pitch, rel_pos_tol, ctx)
        if m is not None:
            ev, msol, mname, rivals = m
            if ev.decisively_weak and max_crystals >= 2:
                sols.append(msol)
                roles[0] = "ordered precipitate"
                roles.append("matrix")
                pair_note = _two_crystals_note(ev, best.phase_name, mname)
                if rivals:
                    pair_note += (f" The matrix could also be {' or '.join(rivals)}: the fundamental spots fit "
                                  "these cells nearly as well.")
            else:
                pair_note = _one_crystal_note(ev, best.phase_name, " or ".join(_partners(tables, best.phase_name)))
        elif _partners(tables, best.phase_name):
            pair_note = _one_crystal_note(None, best.phase_name, " or ".join(_partners(tables, best.phase_name)))
    if pair_note:
        notes.append(pair_note)
    if len(sols) >= 2:
        first = _explained_mask(sols[0], spots)
        rest = np.zeros(len(first), bool)
        for o in sols[1:]:
            rest |= _explained_mask(o, spots)
        pair = ordered_pair(tables.table(sols[0].phase_name).phase, tables.table(sols[1].phase_name).phase)
        if (np.count_nonzero(first & ~rest) < 2 and pair is not None
                and _misorientation_deg(sols[0], sols[1], tables) < 3.0):
            # an ordered crystal on its disordered form in one orientation: the order check decides (below, or
            # already, when the matrix was added beside an ordered crystal 1 whose superlattice spots the
            # image probe measured though the spot search kept fewer than two)
            pass
        elif np.count_nonzero(first & ~rest) < 2:
            # the best solution owns no spots of its own: a further crystal explains all it does (e.g. an
            # ordered crystal and its disordered form turned by a symmetry of the projected pattern)
            notes.append(f"{sols[1].phase_name} [{_zone(sols[1])}] explains every spot the first-ranked solution "
                         f"{sols[0].phase_name} [{_zone(sols[0])}] explains, and more: reported as one crystal")
            sols, roles = sols[1:], ["best"] + roles[2:]
            cross = [CrossDoubleDiffraction(d.spot_index, d.crystal_a - 1, d.hkl_a, d.crystal_b - 1, d.hkl_b)
                     for d in cross if min(d.crystal_a, d.crystal_b) > 0]
    if len(sols) == 2 and roles[1] == "second":
        pair = ordered_pair(tables.table(sols[0].phase_name).phase, tables.table(sols[1].phase_name).phase)
        same_orientation = pair is not None and _misorientation_deg(sols[0], sols[1], tables) < 3.0
        if same_orientation and pair[0] == sols[1].phase_name:
            ev = _evidence(measured, tables, sols[1], tables.table(pair[1]), ctx, spots)
            if ev is None or not ev.decisively_weak:
                # one ordered crystal explains every spot the disordered one does: the superlattice spots
                # are not decisively weaker than one ordered crystal gives
                notes.append(_one_crystal_note(ev, pair[0], pair[1]))
                sols, roles = [sols[1]], ["best"]
                cross = []
            else:
                notes.append(_two_crystals_note(ev, pair[0], pair[1]))
    rels = []
    for k in range(1, len(sols)):
        p0 = tables.table(sols[0].phase_name).phase
        pk = tables.table(sols[k].phase_name).phase
        r = describe_relationship(p0, pk, sols[0].orientation_matrix, sols[k].orientation_matrix, crystals=(0, k))
        if r.name == "cube-on-cube" and ordered_pair(p0, pk) is not None:
            o, d = ordered_pair(p0, pk)
            from dataclasses import replace

            r = replace(r, kind="ordered precipitate",
                        text=f"ordered {o} in the orientation of its disordered matrix {d} (cube-on-cube, "
                             f"{r.deviation_deg:.1f} deg from ideal); the superlattice spots belong to {o}")
            roles[0 if sols[0].phase_name == o else k] = "ordered precipitate"
            roles[k if sols[0].phase_name == o else 0] = "matrix"
        rels.append(r)
    crystals = _crystal_records(sols, roles, spots, undecided)
    return MultiCrystalResult(tuple(crystals), tuple(rels), tuple(cross), tuple(notes))


def _probe_disordered(ctx, tables, spots, best: Solution, notes: list, *, max_crystals: int, rel_pos_tol: float, pitch):
    """A disordered crystal 1 alone (fcc Ni): are the superlattice reflections of its ordered partner there, faint,
    where they must be? Returns (decided, note, crystals, roles).

    Present (:func:`saed.index.order_probe.probe_order`) and the fundamentals decisively too strong for one
    ordered crystal: the matrix (crystal 1) and the ordered precipitate in its orientation. Present otherwise:
    one ordered crystal, with both readings named. Absent: crystal 1 stays; a combined significance from
    :data:`~saed.index.order_probe.HINT_Z` up to the threshold is reported as not significant.
    """
    p = probe_order(ctx, tables, spots, best, rel_pos_tol=rel_pos_tol, pitch=pitch)
    if p is None or p.ordered is best:
        return False, "", [best], ["best"]
    o = p.ordered.phase_name
    if not p.present:
        if p.family_z >= HINT_Z:
            notes.append(p.text() + f": below the threshold (at least {PRESENT_Z:g}, above every turned copy and "
                         f"{PRESENT_Z:g} x their scatter, here {p.required_z:.2f}), so "
                         f"the superlattice reflections of {o} are not counted as seen; a longer exposure, or a dark-field "
                         "image in a superlattice position, decides")
        return False, "", [best], ["best"]
    ev = p.evidence
    if ev is not None and ev.decisively_weak and max_crystals >= 2:
        return True, _two_crystals_note(ev, o, best.phase_name) + " " + p.text() + ".", [best, p.ordered], \
            ["matrix", "ordered precipitate"]
    return True, _one_crystal_note(ev, o, best.phase_name) + " " + p.text() + ".", [p.ordered], ["best"]


def rescue_with_more_crystals(measured, tables, spots: SpotSet, pool: list[Solution], *, min_score: float,
                              max_crystals: int, **options) -> tuple[Solution, MultiCrystalResult] | None:
    """When no single crystal reaches `min_score`: is a near miss crystal 1 of a pattern of several crystals?

    For each near miss in `pool` (best first) the further crystals are looked for as usual; when at
    least one is found, crystal 1 is scored again on the spots the others do not own (its agreement
    counts only the spot weight left to it). The first near miss that then reaches `min_score` is
    the solution; None when none does.
    """
    for sol in pool:
        if sol.score < 0.5 * min_score:
            continue
        multi = find_crystals(measured, tables, spots, sol, max_crystals=max_crystals, **options)
        if len(multi.crystals) < 2:
            continue
        rescored = multi.crystals[0].solution
        if rescored.score >= min_score:
            return rescored, multi
    return None


def _rescored(sol: Solution, others_own: np.ndarray, spots: SpotSet) -> Solution:
    """`sol` with its agreement counted over the spot weight other crystals leave to it."""
    from dataclasses import replace

    w_o = float(spots.weight[others_own].sum()) if len(others_own) else 0.0
    if w_o <= 0 or w_o >= 0.95:
        return sol
    score = min(1.0, sol.score / (1.0 - w_o))
    return replace(sol, score=score, terms=sol.terms + (("other_crystals_weight", w_o),))


def _partners(tables, ordered: str) -> list[str]:
    """Candidate phases that are the disordered form of `ordered` (same cell within the pairing tolerance)."""
    po = tables.table(ordered).phase
    out = []
    for pt in tables.phases:
        pair = ordered_pair(po, pt.phase)
        if pair is not None and pair[0] == ordered:
            out.append(pt.phase.name)
    return out


_DYNAMICAL = ("Intensity ratios are kinematic estimates: dynamical scattering makes them unreliable in thick "
              "areas (a thin area, or several zones, are safer).")


def _measured_ratio(ev: OrderEvidence) -> str:
    what = ("positions measured in the image, faint ones included" if ev.photometric else "spots")
    return (f"the superlattice spots are {ev.ratio:.2f} x as strong, relative to the fundamental spots, as one fully "
            f"ordered crystal gives ({ev.lower_ratio:.2f}-{ev.upper_ratio:.2f} x within {DECISIVE_Z:g} standard "
            f"uncertainties from the scatter of {ev.n_superlattice} superlattice and {ev.n_fundamental} fundamental "
            f"{what})")


def _two_crystals_note(ev: OrderEvidence, ordered: str, disordered: str) -> str:
    """The note of a matrix with ordered precipitates (fundamental spots decisively too strong)."""
    share = percent(min(ev.ratio, 1.0))
    return (f"{ordered} precipitates in a {disordered} matrix of the same orientation (cube-on-cube): "
            f"{_measured_ratio(ev)}, so the fundamental spots are too strong for one ordered crystal; the "
            f"superlattice spots belong to the precipitates (about {share:.0f} % of the area). Caution: a partly "
            f"ordered {ordered} crystal (order parameter about {math.sqrt(min(ev.ratio, 1.0)):.2f}) gives the same "
            "intensities; a dark-field image in a superlattice spot decides (particles lit, or the whole area). "
            + _DYNAMICAL)


def _one_crystal_note(ev: OrderEvidence | None, ordered: str, disordered: str) -> str:
    """Both readings of an ordered pattern whose intensities do not decide (or cannot be compared).

    Kinematically the superlattice/fundamental intensity ratio is S^2 x that of full order for one
    crystal with long-range order parameter S, and about f x that of full order for fully ordered
    precipitates filling an area share f of a matrix of the same orientation (they share every
    fundamental spot).
    """
    if ev is None:
        head = (f"one ordered {ordered} crystal, or {ordered} precipitates in a {disordered} matrix of the same "
                "orientation: too few superlattice and fundamental spots to compare their intensities with one "
                "ordered crystal's")
    else:
        low = min(ev.lower_ratio, 1.0)
        head = (f"one ordered {ordered} crystal, or {ordered} precipitates in a {disordered} matrix of the same "
                f"orientation: {_measured_ratio(ev)}; this fits one fully ordered crystal as well as a partly ordered "
                f"one (order parameter down to about {math.sqrt(low):.2f}) or precipitates filling down to about "
                f"{percent(low):.0f} % of the area")
    return (head + "; they share every fundamental spot, so this pattern cannot decide: a dark-field image in a "
            "superlattice spot decides (particles lit, or the whole area). Listed as one ordered crystal. "
            + _DYNAMICAL)


def _misorientation_deg(a: Solution, b: Solution, tables) -> float:
    pa, pb = tables.table(a.phase_name).phase, tables.table(b.phase_name).phase
    ang, _ = misorientation(np.asarray(b.orientation_matrix).T @ np.asarray(a.orientation_matrix),
                            proper_rotations_cart(pa), proper_rotations_cart(pb))
    return ang


def _crystal_records(sols: list[Solution], roles: list[str], spots: SpotSet,
                     undecided: dict | None = None) -> list[Crystal]:
    """The Crystal of each solution; `undecided`: tied phases by id of the solution."""
    out = []
    masks = [np.array([s.kind in _EXPLAINED for s in sol.indexed], bool) for sol in sols]
    for k, sol in enumerate(sols):
        others = np.zeros(len(spots.r_px), bool)
        for j, m in enumerate(masks):
            if j != k:
                others |= m
        own = tuple(int(i) for i in np.flatnonzero(masks[k] & ~others))
        shared = tuple(int(i) for i in np.flatnonzero(masks[k] & others))
        others_own = np.flatnonzero(others & ~masks[k])
        out.append(Crystal(_rescored(sol, others_own, spots), roles[k], own, shared,
                           float(spots.weight[masks[k]].sum()), undecided_with=(undecided or {}).get(id(sol), ())))
    return out


def _zone(sol: Solution) -> str:
    from saed.crystal.miller import format_indices

    return format_indices(sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis)


#: Crystal 1's refined scale this far (percent) from the stated calibration, or a further crystal's
#: this far from crystal 1's, and the other readings of crystal 1 are tried with their further crystals.
JOINT_TRIGGER_PCT = 0.5
#: A reading of crystal 1 replaces the first-ranked one when its crystals agree on one scale this much
#: (percentage points) better, or find more crystals whose scales agree within :data:`SCALE_AGREE_PCT`
#: (each crystal's scale from its own spots, those no other crystal explains).
JOINT_GAIN_PCT = 0.4
SCALE_AGREE_PCT = 0.5
#: ... and its own score without the calibration term is at least this share of the first-ranked reading's.
JOINT_MIN_SCORE_SHARE = 0.75
#: ... and the scale all crystals then share lies within this multiple of the calibration tolerance of
#: the stated calibration (the one scale is then reported with its offset).
JOINT_MAX_OFF = 1.25


@dataclass(frozen=True)
class SharedScale:
    """Crystal 1 read again so that all crystals share one calibration (see :func:`settle_shared_scale`)."""

    first: Solution
    multi: MultiCrystalResult
    scale_inv_nm_per_px: float
    note: str


def _own_scale(c: Crystal, spots: SpotSet) -> float | None:
    """The scale (1/nm per px) a crystal's own spots (those no other crystal explains) imply: median of
    (1/d_calc) / r over them; over all the spots it explains as allowed where it owns fewer than two (a
    disordered matrix under its ordered precipitate); None with fewer than two."""
    own = set(c.own_spots)
    allowed = [s for s in c.solution.indexed if s.kind == "allowed" and s.d_nm_calc and spots.r_px[s.spot_index] > 0]
    mine = [s for s in allowed if s.spot_index in own]
    use = mine if len(mine) >= 2 else allowed
    r = [(1.0 / s.d_nm_calc) / float(spots.r_px[s.spot_index]) for s in use]
    return float(np.median(r)) if len(r) >= 2 else None


def _scale_spread_pct(multi: MultiCrystalResult, spots: SpotSet) -> float:
    """Largest disagreement (percent) between the scales crystal 1's own spots and a further crystal's own
    spots imply (:func:`_own_scale`; the refined scale where that has too few spots)."""
    def scale(c):
        return _own_scale(c, spots) or float(c.solution.scale_inv_nm_per_px)

    s1 = scale(multi.crystals[0])
    return max((abs(percent_off(scale(c), s1)) for c in multi.crystals[1:]), default=0.0)


def _joint_scale(multi: MultiCrystalResult, spots: SpotSet) -> float:
    """One scale for all crystals: the median of (1/d_calc) / r over every spot a crystal explains as allowed."""
    r = [(1.0 / s.d_nm_calc) / float(spots.r_px[s.spot_index]) for c in multi.crystals for s in c.solution.indexed
         if s.kind == "allowed" and s.d_nm_calc and spots.r_px[s.spot_index] > 0]
    return float(np.median(r)) if r else float(multi.crystals[0].solution.scale_inv_nm_per_px)


def _no_scale_score(sol: Solution) -> float:
    """The score without its calibration term (the term the shared scale is to settle)."""
    return float(sol.score) / max(float(sol.term("scale") or 1.0), 1e-9)


def _other_readings(measured, tables, spots, first: Solution, *, stated_scale: float, length_tol: float,
                    rel_pos_tol: float, pitch) -> list[Solution]:
    """Crystal 1 in the same orientation as another candidate phase of the same crystal system whose cell
    lies within the calibration's tolerance (the look-alikes a calibration a few per cent off confuses)."""
    p1 = tables.table(first.phase_name).phase
    out = []
    for pi, pt in enumerate(tables.phases):
        ph = pt.phase
        if ph.name == first.phase_name or ph.lattice.crystal_system != p1.lattice.crystal_system:
            continue
        if ph.lattice.crystal_system != "cubic":
            continue  # one orientation matrix carries over only between cubic cells
        f = ph.lattice.a_nm / p1.lattice.a_nm
        if abs(f - 1.0) > length_tol:
            continue
        uvw = tuple(int(v) for v in first.zone_axis)
        cand = Candidate(pi, 0, 1, uvw, pt.canonical_zone(uvw), np.asarray(first.orientation_matrix),
                         float(first.scale_inv_nm_per_px) / f, 1.0)
        # its scale free: the calibration is what the further crystals are to settle (checked by the caller)
        sol, _ = score_candidate(cand, tables, spots, measured, calibrated_scale=None, length_tol=length_tol,
                                 rel_pos_tol=rel_pos_tol, pixel_pitch_um=pitch)
        if _no_scale_score(sol) >= JOINT_MIN_SCORE_SHARE * _no_scale_score(first):
            out.append(sol)
    return out


def settle_shared_scale(measured, tables, spots: SpotSet, first: Solution, multi: MultiCrystalResult, *,
                        stated_scale: float | None, length_tol: float, max_crystals: int, **options) -> SharedScale | None:
    """Both crystals share one calibration: let the further crystals settle crystal 1's cell-size look-alikes.

    With a stated calibration a few per cent off, crystal 1 can be read as a phase of the same structure
    and a cell 1-2 % different (Ni for Fe-fcc, Ni3Al for Co-fcc). Each further crystal is indexed at
    crystal 1's refined scale and refines its own; the two must agree, since one camera constant made
    the whole pattern. When crystal 1's scale is :data:`JOINT_TRIGGER_PCT` or more from the stated
    calibration, or a further crystal's from crystal 1's, the other cubic readings of crystal 1 in the
    same orientation (cell within the calibration tolerance) are tried with their own further crystals.
    One replaces the first-ranked reading when it finds at least as many crystals whose scales agree
    :data:`JOINT_GAIN_PCT` better (or more crystals, agreeing within :data:`SCALE_AGREE_PCT`), and its own
    score without the calibration term is at least :data:`JOINT_MIN_SCORE_SHARE` of the first's. Returns
    None when nothing changes.
    """
    if stated_scale is None or max_crystals < 2:
        return None
    own_err = abs(first.scale_error_pct) if first.scale_error_pct is not None else 0.0
    spread = _scale_spread_pct(multi, spots)
    residual = np.count_nonzero(~_explained_mask(first, spots))
    if own_err < JOINT_TRIGGER_PCT and spread < JOINT_TRIGGER_PCT:
        return None
    if len(multi.crystals) < 2 and residual < MIN_OWN_SPOTS:
        return None
    rel_pos_tol = options.get("rel_pos_tol", 0.008)
    best = None
    for alt in _other_readings(measured, tables, spots, first, stated_scale=stated_scale, length_tol=length_tol,
                               rel_pos_tol=rel_pos_tol, pitch=options.get("pitch")):
        off = abs(alt.scale_inv_nm_per_px / stated_scale - 1.0)
        if off > JOINT_MAX_OFF * length_tol:
            continue
        m = find_crystals(measured, tables, spots, alt, max_crystals=max_crystals, **options)
        n, s = len(m.crystals), _scale_spread_pct(m, spots)
        if n < 2 or s > SCALE_AGREE_PCT:
            continue
        better = n > len(multi.crystals) or (n == len(multi.crystals) and s <= spread - JOINT_GAIN_PCT)
        # among readings that pass: more crystals, then one in a standard relationship (two crystals on zone
        # axes at once are rarely unrelated), then the closer agreement of the scales
        key = (n, any(r.name != "none" for r in m.relationships), -s)
        if better and (best is None or key > best[0]):
            best = (key, alt, m)
    if best is None:
        return None
    _, alt, m = best
    joint = _joint_scale(m, spots)
    off = percent_off(joint, stated_scale)
    was = (f"{len(multi.crystals)} crystals whose scales differ by {spread:.1f} %" if len(multi.crystals) > 1
           else "no further crystal at its scale")
    note = (f"crystal 1 read as {alt.phase_name} [{_zone(alt)}], not {first.phase_name} [{_zone(first)}]: all crystals "
            f"share one calibration, and with {alt.phase_name} the {len(m.crystals)} crystals fit one scale within "
            f"{_scale_spread_pct(m, spots):.1f} % ({joint:.5g} 1/nm per px, {off:+.1f} % off the stated calibration), while "
            f"{first.phase_name} leaves {was}; the two cells differ by "
            f"{abs(percent_off(tables.table(alt.phase_name).phase.lattice.a_nm, tables.table(first.phase_name).phase.lattice.a_nm)):.1f} %, "
            "so check the camera length (a calibration standard decides)")
    from dataclasses import replace

    first_c = replace(m.crystals[0], solution=replace(m.crystals[0].solution,
                                                       scale_error_pct=percent_off(alt.scale_inv_nm_per_px, stated_scale)))
    return SharedScale(first_c.solution, MultiCrystalResult((first_c,) + m.crystals[1:], m.relationships, m.cross_double_diffraction,
                                                                  (note,) + m.notes), joint, note)

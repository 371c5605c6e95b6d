"""Index a measured pattern: candidates, scoring with every spot, ranking, look-alikes, mistilt.

The public entry points are :func:`index_pattern` (a :class:`MeasuredPattern` in, an
:class:`IndexResult` out) and :func:`index_image` (measure the image first). Tables come from
:func:`saed.index.prepare_phases`, built once per set of candidate phases.
"""

from __future__ import annotations

import logging
import numpy as np

from saed.errors import InputError
from saed.image.values import MeasuredPattern
from saed.index.candidates import find_candidates, seed_pairs, spot_set
from saed.index.score import score_candidate
from saed.index.tables import IndexTables
from saed.index.values import IndexResult, Solution
from saed.units import fraction, percent
from saed.vectors2d import MIN_SPAN_ANGLE_DEG

__all__ = ["index_pattern", "index_image", "MIN_SCORE", "DEFAULT_LENGTH_TOL_PCT", "DEFAULT_ANGLE_TOL_DEG"]

logger = logging.getLogger(__name__)

#: Solutions below this figure of merit are not listed (the best of them becomes the near miss).
MIN_SCORE = 0.45

#: Default tolerance of the calibrated scale, percent: SAED camera lengths drift by 1-2 % without
#: an internal standard (Williams & Carter, *Transmission Electron Microscopy*, 2009, ch. 18; common practice).
DEFAULT_LENGTH_TOL_PCT = 3.0

#: Default tolerance of the angle between two seed spots, degrees (common practice: 1-2 deg).
DEFAULT_ANGLE_TOL_DEG = 2.0

#: Zone axes above this index (3-index, conventional cell) are not considered (see find_candidates).
MAX_ZONE_INDEX = 7

#: Relative tolerance of spacing ratios (measurement only: the scale cancels).
RATIO_TOL = 0.025

#: Position allowance proportional to |g| (residual distortion, sub-pixel centring), fraction.
REL_POS_TOL = 0.008


def _check_measured(measured) -> None:
    if not isinstance(measured, MeasuredPattern):
        raise InputError(f"index_pattern needs a MeasuredPattern, got {type(measured).__name__}")


def index_pattern(measured: MeasuredPattern, tables: IndexTables, *, top: int = 5, angle_tol_deg: float | None = None,
                  length_tol_pct: float | None = None, holder_alpha_axis_deg: float | None = None,
                  lookalikes: bool = True, max_zone_index: int = MAX_ZONE_INDEX, max_crystals: int = 2,
                  mistilt: bool = True, tilt_advice: bool = True, image=None) -> IndexResult:
    """Rank (phase, zone axis, orientation) solutions for a measured pattern.

    Parameters
    ----------
    measured : MeasuredPattern
        Centre, spots and calibration from the image stage (or built directly).
    tables : IndexTables
        From :func:`saed.index.prepare_phases`.
    top : int
        Number of solutions to return (best first).
    angle_tol_deg : float, optional
        Tolerance on the angle between two seed spots (default 2 deg, or 3 sigma of the measured angle).
    length_tol_pct : float, optional
        Tolerance of the calibrated scale, percent (default 3 %). Ignored when uncalibrated.
    holder_alpha_axis_deg : float, optional
        Direction of the holder's alpha tilt axis on the detector (deg from +x toward +y), to
        express the mistilt correction and the separating tilts as alpha/beta tilts (default: the
        calibration's ``alpha_axis_deg``, when it has one).
    lookalikes : bool
        Analyse look-alikes and suggest separating tilts (a few ms per solution).
    max_zone_index : int
        Largest zone-axis index considered (3-index, conventional cell; default 7).
    max_crystals : int
        Crystals looked for in the pattern, 1 to 3 (default 2): further crystals are indexed from
        the spots the best solution leaves unexplained (:mod:`saed.index.crystals`).
    mistilt : bool
        Fit the mistilt (Laue circle, :func:`saed.index.mistilt.with_mistilt`) of the first three
        solutions (default). False leaves ``Solution.mistilt`` None and adds no mistilt advice, and
        changes nothing else (ranking, scores, look-alikes): for callers that never show it, such as
        the rows of ``saed batch`` (the fit is about two thirds of a search's time on a scan frame).
    tilt_advice : bool
        Work out the tilt that would separate each look-alike of the best solution (default). False
        leaves ``Lookalike.tilt`` None and changes nothing else (look-alike relations and texts,
        ranking, scores): for the rows of ``saed batch``, which show the relation only.
    image : 2-D array, optional
        The detector image the spots were measured on (same pixel frame). With it, the superlattice
        positions of an ordered reading in crystal 1's orientation are probed in the image, fainter than
        the spot search sees (:mod:`saed.index.order_probe`); without it, only the detected spots count.

    Returns
    -------
    IndexResult
        ``solutions`` empty (with ``message`` and ``near_miss``) when nothing fits.

    References
    ----------
    The ratio method: Edington, *Practical Electron Microscopy in Materials Science* vol. 2 (1975);
    Williams & Carter, *Transmission Electron Microscopy* (2009), ch. 18.
    """
    _check_measured(measured)
    if not isinstance(tables, IndexTables):
        raise InputError(f"index_pattern needs IndexTables from prepare_phases, got {type(tables).__name__}")
    top = int(top)
    if top < 1:
        raise InputError(f"top must be at least 1, got {top}")
    if isinstance(max_crystals, bool) or not isinstance(max_crystals, (int, np.integer)) or not 1 <= max_crystals <= 3:
        raise InputError(f"max_crystals must be 1, 2 or 3, got {max_crystals!r}")
    names = tables.names
    n = len(measured.spots)
    if n == 0:
        return IndexResult(measured, (), "no diffraction spots found: nothing to index "
                           "(check exposure, the beam stop mask and the centre)", phases=names)
    if n == 1:
        return IndexResult(measured, (), "only one diffraction spot found: a zone axis needs at least two "
                           "non-parallel spots", phases=names)
    spots = spot_set(measured)
    cal = measured.calibration
    scale = cal.scale_inv_nm_per_px if cal is not None else None
    length_tol = fraction(DEFAULT_LENGTH_TOL_PCT if length_tol_pct is None else float(length_tol_pct))
    if not 0 < length_tol < 0.5:
        raise InputError(f"length tolerance {percent(length_tol):g} % must lie between 0 and 50 %")
    angle_tol = DEFAULT_ANGLE_TOL_DEG if angle_tol_deg is None else float(angle_tol_deg)
    if measured.basis is not None and angle_tol_deg is None:
        angle_tol = max(angle_tol, 3.0 * float(measured.basis.sigma_angle_deg))
    if not 0 < angle_tol < 30:
        raise InputError(f"angle tolerance {angle_tol:g} deg must lie between 0 and 30 deg")
    if not seed_pairs(spots):  # the seeds' own test (saed.vectors2d.spans_plane): passing it, a pair exists
        return IndexResult(measured, (), f"the {n} spots lie on one line (no two directions {MIN_SPAN_ANGLE_DEG:g} deg "
                           "apart): a single systematic row cannot fix a zone axis (tilt to a zone where a second "
                           "row is excited)", phases=names)
    pitch = cal.pixel_pitch_um if cal is not None else None
    if holder_alpha_axis_deg is None and cal is not None:
        holder_alpha_axis_deg = cal.alpha_axis_deg  # measured for this camera length, in the calibration file
    solutions, n_cand = _solve(measured, tables, spots, scale=scale, length_tol=length_tol, angle_tol=angle_tol,
                               pitch=pitch, max_zone_index=max_zone_index)
    notes: list[str] = []
    message = ""
    good = [s for s, _ in solutions if s.score >= MIN_SCORE]
    near = solutions[0][0] if solutions and not good else None
    free: list = []
    near_scale: list = []
    if scale is not None and (not good or good[0].score < 0.6):
        # Is the calibration wildly off? Index by ratios alone and compare the implied scale.
        free, _ = _solve(measured, tables, spots, scale=None, length_tol=length_tol, angle_tol=angle_tol, pitch=pitch,
                         max_zone_index=max_zone_index)
        if free and free[0][0].score >= MIN_SCORE:
            fs = free[0][0]
            f = fs.scale_inv_nm_per_px / scale
            if f > 1.5 or f < 1 / 1.5:
                message = (f"the pattern fits {fs.phase_name} [{_zone_text(fs)}] only at an implied scale of "
                           f"{fs.scale_inv_nm_per_px:.5g} 1/nm per px, {f:.2f} x the given {scale:.5g}: check the "
                           "calibration (camera length, binning, units)")
                if not good:
                    near = fs
    calibrated = scale is not None
    near_scale = [(s, fit) for s, fit in free if 1 / 1.06 <= s.scale_inv_nm_per_px / scale <= 1.06] if free else []
    if not good and near_scale and near_scale[0][0].score >= MIN_SCORE:
        # a stated calibration a few per cent off: index by ratios and angles among the phases that fit
        # within 6 % of it (isostructural phases of another cell size do not), and say so
        f = near_scale[0][0].scale_inv_nm_per_px / scale
        solutions, good, near, calibrated = near_scale, [s for s, _ in near_scale if s.score >= MIN_SCORE], None, False
        notes.append(f"the spots fit only at a scale {percent(f - 1):+.1f} % off the stated calibration (tolerance "
                     f"{percent(length_tol):g} %): indexed by spacing ratios and angles; check the camera length")
    if not good and max_crystals > 1 and (solutions or free):
        from saed.index.crystals import rescue_with_more_crystals

        pool = [sol for sol, _ in solutions[:3]] + [sol for sol, _ in near_scale[:3]]
        rescued = rescue_with_more_crystals(measured, tables, spots, pool, min_score=MIN_SCORE,
                                            max_crystals=int(max_crystals), angle_tol=angle_tol, ratio_tol=RATIO_TOL,
                                            rel_pos_tol=REL_POS_TOL, pitch=pitch, max_zone_index=max_zone_index,
                                            image=image)
        if rescued is not None:
            sol1, multi = rescued
            return IndexResult(measured, (sol1,), "", notes=tuple(notes) + multi.notes, n_candidates=n_cand,
                               phases=names, crystals=multi.crystals, orientation_relationships=multi.relationships,
                               cross_double_diffraction=multi.cross_double_diffraction)
    if not good:
        if not message:
            if near is not None:
                message = (f"no solution within tolerance; closest: {near.phase_name} [{_zone_text(near)}] with score "
                           f"{near.score:.2f}, {near.n_indexed} of {n} spots indexed"
                           + (f", scale {near.scale_error_pct:+.1f} % off the calibration"
                              if near.scale_error_pct is not None else ""))
            else:
                message = ("no solution: no pair of measured spots matches a reflection pair of "
                           f"{', '.join(names[:6])}{' ...' if len(names) > 6 else ''} within tolerance")
        return IndexResult(measured, (), message, near_miss=near, notes=tuple(notes), n_candidates=n_cand, phases=names)
    if lookalikes:
        from saed.index.lookalike import annotate

        ranked = annotate(solutions, measured, tables, spots, holder_alpha_axis_deg=holder_alpha_axis_deg,
                          calibrated=calibrated, min_score=MIN_SCORE, top=top, length_tol=length_tol,
                          rel_pos_tol=REL_POS_TOL, mistilt=mistilt, tilt_advice=tilt_advice)
    elif not mistilt:
        ranked = list(good[:top])
    else:
        from saed.index.mistilt import with_mistilt

        # the mistilt of the first three, as annotate() does (a Laue-circle fit per solution costs time)
        ranked = [with_mistilt(s, measured, tables, holder_alpha_axis_deg=holder_alpha_axis_deg) if k < 3 else s
                  for k, s in enumerate(good[:top])]
    ranked = [_with_sense_flag(s, tables) for s in ranked[:top]]
    from saed.index.crystals import find_crystals, settle_shared_scale

    crystal_opts = dict(angle_tol=angle_tol, ratio_tol=RATIO_TOL, rel_pos_tol=REL_POS_TOL, pitch=pitch,
                        max_zone_index=max_zone_index, image=image)
    multi = find_crystals(measured, tables, spots, ranked[0], max_crystals=int(max_crystals), **crystal_opts)
    shared = settle_shared_scale(measured, tables, spots, ranked[0], multi, stated_scale=scale if calibrated else None,
                                 length_tol=length_tol, max_crystals=int(max_crystals), **crystal_opts)
    if shared is not None:
        # the further crystals fixed the one calibration of the pattern: crystal 1 is the reading they agree with
        first = _with_sense_flag(shared.first, tables)
        ranked = [first] + [s for s in ranked if not (s.phase_name == first.phase_name
                                                      and tuple(s.zone_axis) == tuple(first.zone_axis))]
        multi = shared.multi
    elif multi.crystals and (multi.crystals[0].phase_name != ranked[0].phase_name
                             or tuple(multi.crystals[0].solution.zone_axis) != tuple(ranked[0].zone_axis)):
        # crystal 1 read otherwise by the crystal search (the superlattice probe found a Ni crystal ordered: one
        # Ni3Al crystal): the answer is the reading crystals[0] holds, the first-ranked one follows it
        first = _with_sense_flag(multi.crystals[0].solution, tables)
        ranked = [first] + [s for s in ranked if not (s.phase_name == first.phase_name
                                                      and tuple(s.zone_axis) == tuple(first.zone_axis))]
    return IndexResult(measured, tuple(ranked[:top]), message, notes=tuple(notes) + multi.notes, n_candidates=n_cand,
                       phases=names, crystals=multi.crystals, orientation_relationships=multi.relationships,
                       cross_double_diffraction=multi.cross_double_diffraction)


def _with_sense_flag(sol: Solution, tables) -> Solution:
    """The solution with ``sense_ambiguous_180`` set (and a note when one pattern cannot fix the sense)."""
    from dataclasses import replace

    from saed.index.lookalike import sense_ambiguous

    phase = next((pt.phase for pt in tables.phases if pt.name == sol.phase_name), None)
    if phase is None:
        return sol
    amb = sense_ambiguous(phase, sol.zone_axis)
    notes = sol.notes
    if amb:
        zone = _zone_text(sol)
        notes = notes + (f"[{zone}] is no two-fold axis of {sol.phase_name}: this pattern cannot tell the orientation "
                         "from the same crystal turned 180 deg about the beam, so a tilt plan from it ('saed tilt "
                         "--from-index') holds for one of the two; a second pattern at a recorded tilt decides "
                         "('saed grain')",)
    return replace(sol, sense_ambiguous_180=amb, notes=notes)


def _solve(measured, tables, spots, *, scale, length_tol, angle_tol, pitch, max_zone_index) -> tuple[list, int]:
    """Score every candidate; (Solution, Fit) pairs, best first, one per (phase, Laue-equivalent zone)."""
    cands, n_hits = find_candidates(tables, spots, scale_inv_nm_per_px=scale, length_tol=length_tol,
                                    ratio_tol=RATIO_TOL, angle_tol_deg=angle_tol, rel_pos_tol=REL_POS_TOL,
                                    max_zone_index=int(max_zone_index))
    best: dict[tuple, tuple] = {}
    for c in cands:
        sol, fit = score_candidate(c, tables, spots, measured, calibrated_scale=scale, length_tol=length_tol,
                                   rel_pos_tol=REL_POS_TOL, pixel_pitch_um=pitch)
        key = (c.phase_index, c.canonical_zone)
        if key not in best or _better(sol, best[key][0]):
            best[key] = (sol, fit)
    ranked = sorted(best.values(), key=lambda t: (-t[0].score, t[0].phase_name, t[0].zone_axis))
    return ranked, n_hits


#: Scores of one zone's candidates closer than this are a tie (equivalent descriptions, e.g. an orientation and its
#: 180 deg turn about the beam, score the same up to rounding).
SCORE_TIE = 1e-9


def _better(sol: Solution, current: Solution) -> bool:
    """True when `sol` should replace `current` as its zone's solution: a higher score, or on a tie the smaller
    in-plane rotation, so that which of two equivalent descriptions is reported does not depend on rounding."""
    if abs(sol.score - current.score) > SCORE_TIE:
        return sol.score > current.score
    return sol.in_plane_rotation_deg < current.in_plane_rotation_deg


def _zone_text(sol: Solution) -> str:
    from saed.crystal.miller import format_indices

    return format_indices(sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis)


def index_image(image: np.ndarray, tables: IndexTables, calibration, *, top: int = 5, mask=None, source: str = "",
                **options) -> IndexResult:
    """Measure the pattern in `image` (centre, spots, lattice) and index it.

    Parameters
    ----------
    image : (H, W) array
    tables : IndexTables
    calibration : saed.calibration.Calibration (``scale_inv_nm_per_px`` None when uncalibrated)
    top, mask, source : as in :func:`index_pattern` and :func:`saed.image.measure.measure_pattern`
    **options : passed on to :func:`index_pattern`
    """
    from saed.image.measure import measure_pattern

    measured = measure_pattern(image, calibration, mask=mask, source=source)
    return index_pattern(measured, tables, top=top, image=image, **options)

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

:func:`score_candidate` runs these steps, each a function below: the cached zone facts
(:func:`_zone_facts`), the refinement of the detector map (:func:`_refine`), the spot kinds
(:func:`_classify`), the terms of the figure of merit (:func:`_absent_share`,
:func:`_intensity_terms`, :func:`_scale_term`, :func:`_zone_prior`) and the per-spot records
(:func:`_spot_records`); :func:`score_figure` runs the same steps (one function, :func:`_figure`)
without the per-spot records, for the scan's warm start, which writes only score, rotation and
scale. The refinement stops as soon as a round assigns the spots as the round before did (the fit
would return the same map). Every step works on whole arrays: the scan path calls the scorer about
once per frame, so there is no Python loop over spots or reflections in it. Nearest predicted
reflections come from one broadcast distance matrix: for 10-60 spots and 50-300 reflections that
measured 10-180 us against 130-400 us for building and querying a ``scipy.spatial.cKDTree``
(2 Dec 2026, loaded 2-core machine), so the tree does not pay here.
"""

from __future__ import annotations

import logging
import math
import weakref
from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.crystal.notation import projected_plane
from saed.index.candidates import Candidate, SpotSet
from saed.index.tables import IndexTables, PhaseIndexTable, hkl_keys
from saed.index.values import IndexedSpot, Solution, SpotKind
from saed.simulate.geometry import in_plane_rotation, orientation_matrix
from saed.simulate.zone import zone_pattern
from saed.units import percent, percent_off

__all__ = ["Fit", "Figure", "score_candidate", "score_figure", "KIND_WEIGHT", "HOLZ_LAYER_SPACING_MAX_INV_NM"]

logger = logging.getLogger(__name__)

# --- kind factors of the agreement term M (docs/indexing.md, table of k_i) -------------------------
#: An allowed zero-order reflection: the evidence the figure of merit is built on.
WEIGHT_ALLOWED = 1.0
#: Forbidden but reachable as g1 + g2 inside the zone: real, but a route any phase with those g1, g2 shares.
WEIGHT_DOUBLE_DIFFRACTION = 0.95
#: A faint spot on a projected higher-order Laue-zone position: what thin foils and faults show.
WEIGHT_HOLZ_WEAK = 0.9
#: A bright spot there is more likely a reflection of another zone or phase than a projection.
WEIGHT_HOLZ_STRONG = 0.15
#: Forbidden with no double-diffraction route: the candidate cannot explain it.
WEIGHT_FORBIDDEN = 0.0
#: Nothing predicted near the spot.
WEIGHT_UNINDEXED = 0.0

#: Kind factor of a measured spot in the agreement term M (HOLZ projections split by brightness).
KIND_WEIGHT = {SpotKind.ALLOWED: WEIGHT_ALLOWED, SpotKind.DOUBLE_DIFFRACTION: WEIGHT_DOUBLE_DIFFRACTION,
               "holz-weak": WEIGHT_HOLZ_WEAK, "holz-strong": WEIGHT_HOLZ_STRONG,
               SpotKind.FORBIDDEN: WEIGHT_FORBIDDEN, SpotKind.UNINDEXED: WEIGHT_UNINDEXED}

#: Projections of higher-order Laue-zone reflections are considered only when the reciprocal
#: layers are this close (1/nm): the stacking-direction zones (fcc <111>: 1.6 1/nm for Co) where
#: thin foils, surface steps and faults put weak spots at those positions (common practice).
HOLZ_LAYER_SPACING_MAX_INV_NM = 2.0

#: Measured/kinematic intensity ratios this far below the median ratio count as an intensity misfit.
INTENSITY_MISFIT_FACTOR = 10.0

#: A HOLZ-projection spot counts as weak below this fraction of the median indexed intensity.
HOLZ_WEAK_FRACTION = 0.1

#: HOLZ projections are a net worth scoring only when the first-layer shift is 1/2 or 1/3 of a zero-layer
#: lattice vector (fcc <111>: 1/3{422}); other fractions give a dense, meaningless net.
HOLZ_LATTICE_FRACTIONS = (2, 3)

#: Two reciprocal positions closer than this (1/nm, relative above 1 1/nm) are the same position.
HOLZ_COINCIDENCE_INV_NM = 1e-3

# --- factors of the figure of merit ----------------------------------------------------------------
#: Cost of missing predicted intensity A: a pattern missing all of it keeps half its score (thickness,
#: mistilt and the beam stop dim real reflections, so absence is evidence, not proof).
ABSENT_PENALTY = 0.5
#: The intensity-rank term is INTENSITY_RANK_FLOOR + INTENSITY_RANK_SPAN * T (the two sum to 1): dynamical
#: scattering reorders intensities, so total disagreement costs 15 % at most.
INTENSITY_RANK_FLOOR = 0.85
INTENSITY_RANK_SPAN = 0.15
#: Cost of the intensity misfit D: strong reflections measured all but missing point to another phase.
MISFIT_PENALTY = 0.3
#: T when the kinematic intensities of the indexed spots do not discriminate (too few spots, all equal).
RANK_NEUTRAL = 0.75
#: T when the rank correlation is undefined (a constant side after rounding).
RANK_UNDEFINED = 0.5
#: Fewest allowed indexed spots for the intensity terms T and D: fewer ranks say nothing.
INTENSITY_TERMS_MIN_SPOTS = 5
#: Kinematic intensities are compared as log10 rounded to this many decimals, so reflections of
#: (nearly) equal kinematic intensity tie instead of ranking by rounding noise.
LOG_INTENSITY_DECIMALS = 2
#: Floor of intensities and weights before logarithms and divisions (keeps zeros finite).
TINY = 1e-12
#: The scale term S is a Gaussian of the scale error with sigma = tolerance / SCALE_TOLERANCE_SIGMAS.
SCALE_TOLERANCE_SIGMAS = 1.5
#: Smallest sigma of the scale term (a zero tolerance must not divide by zero).
SCALE_SIGMA_FLOOR = 1e-6
#: Zone prior Z: cost per index step of the largest zone index, and the extra cost per step above
#: ZONE_PRIOR_KNEE_INDEX (faint: it breaks ties of identical geometry only).
ZONE_PRIOR_PER_INDEX = 0.004
ZONE_PRIOR_KNEE_INDEX = 3
ZONE_PRIOR_PER_INDEX_ABOVE_KNEE = 0.01

# --- assignment and refinement ---------------------------------------------------------------------
#: A spot is assigned to a predicted reflection within this many sigma of its position.
MATCH_SIGMAS = 3.0
#: Position uncertainty added to every spot (px): sub-pixel centring and rounding of the detector grid.
POSITION_FLOOR_PX = 0.5
#: Refinement rounds (assign, fit): the assignment settles in two or three.
REFINE_ROUNDS = 4
#: The refinement has converged when the map changes by less than this (relative, absolute).
REFINE_RTOL, REFINE_ATOL = 1e-9, 1e-12
#: The fitted centre shift is at most max(CENTRE_SHIFT_MIN_PX, CENTRE_SHIFT_SIGMAS x the centre's sigma).
CENTRE_SHIFT_MIN_PX = 3.0
CENTRE_SHIFT_SIGMAS = 3.0
#: Largest elliptical distortion (axis ratio - 1) the refinement absorbs when the calibration states none.
MAX_FITTED_DISTORTION = 0.03
#: The general (distorted) map is fitted only from this many assigned spots (4 parameters + margin).
DISTORTION_MIN_SPOTS = 4
#: The centre shift is fitted only from this many assigned spots (two fix rotation and scale alone).
SHIFT_MIN_SPOTS = 3
#: Normal matrices worse conditioned than this (spots nearly on one row) keep the similarity.
DISTORTION_MAX_CONDITION = 1e6
#: A fitted map whose axis ratio is within this of 1 is a similarity (rounding only): no distortion axis.
ISOTROPIC_RTOL = 1e-9

# --- observed region (term A) ----------------------------------------------------------------------
#: Predicted reflections count as observable between these fractions of the shortest and longest
#: measured spot radius: inside, the beam stop and the direct beam's tail hide spots; outside, the
#: spot finder's threshold does.
REGION_INNER_FRACTION = 0.35
REGION_OUTER_FRACTION = 1.02
#: ... and at least this many pixels inside the frame (the spot finder's border).
REGION_EDGE_PX = 3

# --- notes -----------------------------------------------------------------------------------------
#: A fitted centre shift of at least this (px) is worth telling the microscopist.
CENTRE_NOTE_PX = 1.0
#: A fitted distortion of at least this (percent) from at least DISTORTION_NOTE_MIN_SPOTS spots is reported.
DISTORTION_NOTE_PCT = 0.6
DISTORTION_NOTE_MIN_SPOTS = 6

#: Foil thickness of the cached zone patterns (nm): only the kinematic |F| and the geometry are used.
ZONE_THICKNESS_NM = 50.0

_NO_ROW = -1
#: Spot kinds in the order of the integer codes :func:`_classify` computes.
_KIND_BY_CODE = np.array([SpotKind.UNINDEXED, SpotKind.ALLOWED, SpotKind.DOUBLE_DIFFRACTION, SpotKind.FORBIDDEN,
                          SpotKind.HOLZ_PROJECTION], dtype=object)
_UNINDEXED, _ALLOWED, _DOUBLE, _FORBIDDEN, _HOLZ = range(5)


@dataclass(frozen=True, eq=False)
class Fit:
    """Internal detail of a scored candidate that mistilt and look-alike analysis reuse."""

    table: PhaseIndexTable
    zone: object  # ZonePattern
    uvw: tuple[int, int, int]
    phi_deg: float
    scale: float
    assigned: np.ndarray  # (n_spots,) row into zone pattern, -1 none
    kinds: tuple[SpotKind, ...]
    predicted_px: np.ndarray  # (n_zone, 2) vectors from the centre, px
    seen: np.ndarray  # (n_zone,) bool, predicted row has a measured spot (or its Friedel mate does)
    in_region: np.ndarray  # (n_zone,) bool
    holz_hkl: np.ndarray  # (n_spots, 3) for holz-projection spots
    holz_xy_inv_nm: np.ndarray  # (m, 2) projected HOLZ positions in the detector frame, 1/nm


@dataclass(frozen=True, eq=False)
class _ZoneFacts:
    """What scoring needs of one zone, computed once per (phase table, zone, voltage, max g)."""

    zp: object  # ZonePattern
    u0: np.ndarray  # (3, 3) orientation matrix at in-plane rotation 0
    xy_inv_nm: np.ndarray  # (m, 2) zone-frame positions
    allowed: np.ndarray  # (m,) bool, kinematically allowed
    double: np.ndarray  # (m,) bool, forbidden but reachable by double diffraction
    explains: np.ndarray  # (m,) bool, allowed | double: rows the refinement fits to
    f_rel: np.ndarray  # (m,) |F| / strongest allowed |F|
    strength: np.ndarray  # (m,) kinematic intensity f_rel**2, 0 where forbidden
    d_nm: np.ndarray  # (m,) 1/|g|
    mate: np.ndarray  # (m,) row of the Friedel mate, -1 where absent
    holz_xy_inv_nm: np.ndarray  # (k, 2) projected first/second-layer positions
    holz_hkl: np.ndarray  # (k, 3)
    holz_d_nm: np.ndarray  # (k,) 1/|projected g|, nan for a zero projection
    holz_proj_hkl: np.ndarray  # (k, 3) integers of the projected position
    holz_proj_den: np.ndarray  # (k,) their denominator
    zone_axis_4: tuple | None  # [UVTW] of the zone for a hexagonal phase, else None


@dataclass(frozen=True, eq=False)
class _Map:
    """The refined detector map v = lin p + shift (p in 1/nm, v in px) and what derives from it."""

    lin: np.ndarray
    shift: np.ndarray
    scale: float
    phi_rad: float
    pred_px: np.ndarray  # (m, 2)
    assignment: tuple | None = None  # _assign's (j, dmin, sigma) under exactly this map, when the refinement made it

    @cached_property
    def _aniso(self) -> tuple[float, float]:
        # worked out when first asked (a scan row never shows it: one SVD per scoring saved)
        return _anisotropy(self.lin)

    @property
    def aniso_pct(self) -> float:
        """Axis ratio - 1 of the map, percent."""
        return self._aniso[0]

    @property
    def aniso_deg(self) -> float:
        """Azimuth of the map's long axis, deg."""
        return self._aniso[1]


@dataclass(frozen=True, eq=False)
class _Assignment:
    """Every spot's explanation: predicted row, distance, sigma, kind code and weighted kind factor."""

    j: np.ndarray  # (n,) nearest zero-order row (-1 when there are no rows)
    dmin: np.ndarray  # (n,) distance to it, px
    sigma: np.ndarray  # (n,) position sigma, px
    ok: np.ndarray  # (n,) assigned to a zero-order row
    holz_j: np.ndarray  # (n,) row into the HOLZ projections, -1 none
    holz_res: np.ndarray  # (n,) distance to that projection, px (nan where none)
    code: np.ndarray  # (n,) kind code (_UNINDEXED ...)
    kind_w: np.ndarray  # (n,) kind factor times the position likelihood


@dataclass(frozen=True, eq=False)
class _Scored:
    """What :func:`_figure` computes for one candidate: the zone facts, refined map and spot kinds it scored
    with, the observed region and seen Friedel pairs, each term of the figure of merit and the score."""

    pt: PhaseIndexTable
    zf: _ZoneFacts
    fit_distortion: bool
    fmap: _Map
    asg: _Assignment
    region: np.ndarray
    seen_pair: np.ndarray
    agreement: float
    absent: float
    rank: float
    misfit: float
    scale_term: float
    scale_err: float | None
    zone_term: float
    score: float


def _figure(cand: Candidate, tables: IndexTables, spots: SpotSet, measured, *, calibrated_scale: float | None,
            length_tol: float, rel_pos_tol: float, allow_distortion: bool) -> _Scored:
    """The steps every scoring shares: zone facts, refined map, spot kinds and the figure of merit."""
    pt = tables.phases[cand.phase_index]
    uvw = cand.zone_axis
    zf = _zone_facts(pt, tuple(int(v) for v in uvw), tables.voltage_kv, tables.max_g_inv_nm)
    fit_distortion = allow_distortion and measured.calibration.ellipse is None
    spot_sigma = _sigma_px(spots, rel_pos_tol)  # refinement and classification use the same sigmas
    fmap = _refine(cand, zf, spots, measured, calibrated_scale=calibrated_scale, length_tol=length_tol,
                   spot_sigma=spot_sigma, fit_distortion=fit_distortion)
    asg = _classify(zf, spots, fmap, spot_sigma)

    agreement = float(np.sum(spots.weight * asg.kind_w))
    region = _observed_region(measured, spots, fmap.pred_px)
    seen_pair, absent = _absent_share(zf, asg, region)
    rank, misfit = _intensity_terms(zf, spots, asg)
    scale_term, scale_err = _scale_term(fmap.scale, calibrated_scale, length_tol)
    zone_term = _zone_prior(uvw)
    score = (agreement * (1.0 - ABSENT_PENALTY * absent) * (INTENSITY_RANK_FLOOR + INTENSITY_RANK_SPAN * rank)
             * (1.0 - MISFIT_PENALTY * misfit) * scale_term * zone_term)
    return _Scored(pt, zf, fit_distortion, fmap, asg, region, seen_pair, agreement, absent, rank, misfit,
                   scale_term, scale_err, zone_term, score)


@dataclass(frozen=True, eq=False)
class Figure:
    """What a scan row shows of a scored candidate, without the per-spot records (:func:`score_figure`).

    The same numbers as the :class:`~saed.index.values.Solution` of :func:`score_candidate` for the
    same input (the same steps compute them); ``unexplained_weight`` is the share of the spot weight
    left unindexed or explained only as a forbidden reflection (the weights of `spots`).
    """

    phase_name: str
    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    score: float
    in_plane_rotation_deg: float
    scale_inv_nm_per_px: float
    unexplained_weight: float


def score_figure(cand: Candidate, tables: IndexTables, spots: SpotSet, measured, *, calibrated_scale: float | None,
                 length_tol: float, rel_pos_tol: float, allow_distortion: bool = True) -> Figure:
    """Refine and score one candidate like :func:`score_candidate`, keeping only what a scan row shows.

    The scan's warm start (:mod:`saed.batch.scanindex`) scores a grain's earlier solution once per
    frame and writes score, rotation and scale; the per-spot records, notes and overlay arrays of a
    full Solution were a third of that cost.
    """
    f = _figure(cand, tables, spots, measured, calibrated_scale=calibrated_scale, length_tol=length_tol,
                rel_pos_tol=rel_pos_tol, allow_distortion=allow_distortion)
    phi_deg = math.degrees(f.fmap.phi_rad)
    bad = (f.asg.code == _UNINDEXED) | (f.asg.code == _FORBIDDEN)
    return Figure(phase_name=f.pt.phase.name, zone_axis=cand.zone_axis, zone_axis_4=f.zf.zone_axis_4,
                  score=float(f.score), in_plane_rotation_deg=float(phi_deg % 360.0),
                  scale_inv_nm_per_px=float(f.fmap.scale), unexplained_weight=float(np.sum(spots.weight[bad])))


def score_candidate(cand: Candidate, tables: IndexTables, spots: SpotSet, measured, *, calibrated_scale: float | None,
                    length_tol: float, rel_pos_tol: float, pixel_pitch_um: float | None = None,
                    allow_distortion: bool = True) -> tuple[Solution, Fit]:
    """Refine and score one candidate against all spots; returns the Solution and its Fit."""
    f = _figure(cand, tables, spots, measured, calibrated_scale=calibrated_scale, length_tol=length_tol,
                rel_pos_tol=rel_pos_tol, allow_distortion=allow_distortion)
    pt, zf, fmap, asg, score = f.pt, f.zf, f.fmap, f.asg, f.score
    phase = pt.phase
    uvw = cand.zone_axis

    use_scale = calibrated_scale if calibrated_scale is not None else fmap.scale
    recs, d_err, a_err = _spot_records(zf, spots, measured, fmap, asg, use_scale=use_scale, phase=phase)
    kinds = tuple(_KIND_BY_CODE[asg.code])
    notes = _notes(measured, fmap, f.fit_distortion, int(np.count_nonzero(asg.ok)))
    phi_deg = math.degrees(fmap.phi_rad)
    u = in_plane_rotation(phi_deg) @ zf.u0  # orientation_matrix(lattice, uvw, phi_deg), with the cached frame
    cam = None
    if pixel_pitch_um is not None:
        from saed.physics import camera_length_from_scale_mm

        cam = camera_length_from_scale_mm(fmap.scale, pixel_pitch_um, tables.voltage_kv)
    show = (zf.allowed | zf.double) & (zf.zp.g_inv_nm <= tables.max_g_inv_nm)
    cx, cy = measured.center_px
    shift = fmap.shift
    sol = Solution(
        phase_name=phase.name, zone_axis=uvw,
        zone_axis_4=zf.zone_axis_4,
        orientation_matrix=u, in_plane_rotation_deg=float(phi_deg % 360.0), scale_inv_nm_per_px=float(fmap.scale),
        score=float(score), indexed=recs,
        mean_d_error_pct=float(np.mean(d_err)) if len(d_err) else float("nan"),
        mean_angle_error_deg=float(np.mean(a_err)) if len(a_err) else float("nan"),
        structure_type=phase.structure_type, implied_camera_length_mm=cam, notes=notes,
        scale_error_pct=None if f.scale_err is None else percent(f.scale_err),
        terms=(("agreement", f.agreement), ("absent", f.absent), ("intensity_rank", f.rank),
               ("intensity_misfit", f.misfit), ("scale", f.scale_term), ("zone_prior", f.zone_term),
               ("distortion_pct", fmap.aniso_pct),
               ("distortion_axis_deg", fmap.aniso_deg), ("center_shift_x_px", float(shift[0])),
               ("center_shift_y_px", float(shift[1]))),
        predicted_xy_px=fmap.pred_px[show] + np.array([cx, cy])[None, :], predicted_hkl=zf.zp.hkl[show],
        predicted_intensity=zf.strength[show],
        predicted_kind=tuple(_KIND_BY_CODE[np.where(zf.allowed[show], _ALLOWED, _DOUBLE)]),
    )
    holz_rows = np.where(asg.holz_j[:, None] >= 0, zf.holz_hkl[np.maximum(asg.holz_j, 0)], 0) if len(zf.holz_hkl) \
        else np.zeros((len(asg.j), 3))
    fit = Fit(table=pt, zone=zf.zp, uvw=uvw, phi_deg=phi_deg, scale=float(fmap.scale),
              assigned=np.where(asg.ok, asg.j, _NO_ROW), kinds=kinds, predicted_px=fmap.pred_px, seen=f.seen_pair,
              in_region=f.region, holz_hkl=np.asarray(holz_rows, np.int64).reshape(-1, 3),
              holz_xy_inv_nm=(zf.holz_xy_inv_nm @ fmap.lin.T) * fmap.scale)
    return sol, fit


# --- step 1: the refined map -----------------------------------------------------------------------

def _rot2(phi_rad: float) -> np.ndarray:
    c, s = math.cos(phi_rad), math.sin(phi_rad)
    return np.array([[c, -s], [s, c]])


def _nearest(v: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row of the nearest point of `p` (m, 2) for every vector of `v` (n, 2), and the distance.

    One broadcast (n, m) matrix of squared distances, built in place (see the module notes on why not
    a KD-tree). Needs m >= 1.
    """
    d2 = np.subtract.outer(v[:, 0], p[:, 0])
    d2 *= d2
    dy = np.subtract.outer(v[:, 1], p[:, 1])
    dy *= dy
    d2 += dy
    j = np.argmin(d2, axis=1)
    return j, np.sqrt(d2[np.arange(len(j)), j])


def _sigma_px(spots: SpotSet, rel_tol: float) -> np.ndarray:
    """Position sigma of every spot: its own, a share of its radius (residual distortion) and a floor."""
    return np.sqrt(spots.sigma_px ** 2 + (rel_tol * spots.r_px) ** 2 + POSITION_FLOOR_PX ** 2)


def _assign(spots: SpotSet, pred_px: np.ndarray, sigma: np.ndarray):
    """Nearest predicted row for every spot, its distance and the position sigma (`sigma`: from _sigma_px)."""
    n = len(spots.r_px)
    if len(pred_px) == 0:
        return np.full(n, _NO_ROW), np.full(n, np.inf), np.ones(n)
    j, dmin = _nearest(spots.v_px, pred_px)
    return j, dmin, sigma


def _refine(cand: Candidate, zf: _ZoneFacts, spots: SpotSet, measured, *, calibrated_scale, length_tol,
            spot_sigma: np.ndarray, fit_distortion: bool) -> _Map:
    """Refine v = lin p + shift from the candidate's start: assign, fit, repeat (at most REFINE_ROUNDS)."""
    m = cand.u_matrix @ zf.u0.T
    scale = cand.scale_inv_nm_per_px
    xy = zf.xy_inv_nm
    lin = _rot2(math.atan2(m[1, 0], m[0, 0])) / scale  # detector px per 1/nm
    shift = np.zeros(2)
    t_max = max(CENTRE_SHIFT_MIN_PX, CENTRE_SHIFT_SIGMAS * float(measured.center_sigma_px or 0.0))
    explains = zf.explains
    last = None  # the previous round's assignment (spots used, their rows)
    current = None  # (pred_px, assignment) when the map has not changed since they were computed
    for _ in range(REFINE_ROUNDS):
        pred = xy @ lin.T + shift
        j, dmin, sigma = _assign(spots, pred, spot_sigma)
        current = (pred, (j, dmin, sigma))
        ok = (j >= 0) & (dmin <= MATCH_SIGMAS * sigma)
        use = ok & explains[np.maximum(j, 0)] if len(xy) else ok
        if np.count_nonzero(use) < 2:
            break
        rows_used = j[use]
        # the same assignment as the round before: the fit (a function of the assignment, the spots and
        # their fixed sigmas alone) would return the very map it returned then, and the loop would stop
        # on it as converged; stop now with that map (the usual second round of a good start)
        if last is not None and np.array_equal(use, last[0]) and np.array_equal(rows_used, last[1]):
            break
        current = None
        last = (use, rows_used)
        wt = spots.weight[use] / sigma[use] ** 2
        new_lin, shift = _fit_linear(xy[rows_used], spots.v_px[use], wt, distortion=fit_distortion, t_max_px=t_max)
        new_scale = 1.0 / math.sqrt(abs(np.linalg.det(new_lin)))
        if calibrated_scale is not None:
            lo, hi = calibrated_scale * (1 - length_tol), calibrated_scale * (1 + length_tol)
            clamped = min(max(new_scale, lo), hi)
            new_lin = new_lin * (new_scale / clamped)
            new_scale = clamped
        done = bool(np.all(np.abs(new_lin - lin) <= REFINE_ATOL + REFINE_RTOL * np.abs(lin)))  # np.allclose, cheaper
        lin, scale = new_lin, new_scale
        if done:
            break
    phi = math.atan2(lin[1, 0] - lin[0, 1], lin[0, 0] + lin[1, 1])  # rotation part of the polar decomposition
    # stopped on an unchanged map: its predicted positions and the spots' assignment are the last round's
    pred_px, assignment = current if current is not None else (xy @ lin.T + shift, None)
    return _Map(lin=lin, shift=shift, scale=scale, phi_rad=phi,
                pred_px=pred_px, assignment=assignment)


# --- step 2: what every spot is --------------------------------------------------------------------

def _classify(zf: _ZoneFacts, spots: SpotSet, fmap: _Map, spot_sigma: np.ndarray) -> _Assignment:
    """Assign every spot under the refined map: zero-order row and its kind, else a HOLZ projection, else none.

    `spot_sigma`: the spots' position sigmas (:func:`_sigma_px`).
    """
    n = len(spots.r_px)
    j, dmin, sigma = fmap.assignment if fmap.assignment is not None else _assign(spots, fmap.pred_px, spot_sigma)
    ok = (j >= 0) & (dmin <= MATCH_SIGMAS * sigma)
    like = np.exp(-0.5 * (dmin / sigma) ** 2)
    holz_j = np.full(n, _NO_ROW)
    holz_res = np.full(n, np.nan)
    if len(zf.holz_xy_inv_nm) and n:
        jh, dh = _nearest(spots.v_px, zf.holz_xy_inv_nm @ fmap.lin.T + fmap.shift)
        holz_j = np.where((dh <= MATCH_SIGMAS * sigma) & ~ok, jh, _NO_ROW)
        near = holz_j >= 0
        diff = spots.v_px[near] - zf.holz_xy_inv_nm[holz_j[near]] @ fmap.lin.T - fmap.shift
        holz_res[near] = np.sqrt(diff[:, 0] ** 2 + diff[:, 1] ** 2)
    jj = np.maximum(j, 0)
    if len(zf.allowed):
        allowed, double = ok & zf.allowed[jj], ok & ~zf.allowed[jj] & zf.double[jj]
    else:
        allowed = double = np.zeros(n, bool)
    holz = ~ok & (holz_j >= 0)
    code = np.full(n, _UNINDEXED)
    code[ok] = _FORBIDDEN
    code[double] = _DOUBLE
    code[allowed] = _ALLOWED
    code[holz] = _HOLZ
    factor = np.where(allowed, WEIGHT_ALLOWED, np.where(double, WEIGHT_DOUBLE_DIFFRACTION, np.where(
        ok, WEIGHT_FORBIDDEN, WEIGHT_UNINDEXED)))
    kind_w = factor * like
    if np.any(holz):
        med = float(np.median(spots.intensity[allowed])) if np.any(allowed) else float(np.median(spots.intensity))
        weak = spots.intensity[holz] < HOLZ_WEAK_FRACTION * med
        kind_w[holz] = np.where(weak, WEIGHT_HOLZ_WEAK, WEIGHT_HOLZ_STRONG) * np.exp(
            -0.5 * (holz_res[holz] / sigma[holz]) ** 2)
    return _Assignment(j=j, dmin=dmin, sigma=sigma, ok=ok, holz_j=holz_j, holz_res=holz_res, code=code, kind_w=kind_w)


# --- step 3: the terms of the figure of merit ------------------------------------------------------

def _observed_region(measured, spots: SpotSet, pred_px: np.ndarray) -> np.ndarray:
    """Predicted positions a detector could have recorded: inside the image and the spot radius range."""
    if len(spots.r_px) == 0:
        return np.zeros(len(pred_px), bool)
    r = np.linalg.norm(pred_px, axis=1)
    r_lo, r_hi = REGION_INNER_FRACTION * spots.r_px.min(), REGION_OUTER_FRACTION * spots.r_px.max()
    cx, cy = measured.center_px
    h, w = measured.image_shape[:2]
    e = REGION_EDGE_PX

    def inside(x, y):
        return (x >= e) & (x <= w - 1 - e) & (y >= e) & (y <= h - 1 - e)

    return ((r >= r_lo) & (r <= r_hi)
            & (inside(cx + pred_px[:, 0], cy + pred_px[:, 1]) | inside(cx - pred_px[:, 0], cy - pred_px[:, 1])))


def _absent_share(zf: _ZoneFacts, asg: _Assignment, region: np.ndarray) -> tuple[np.ndarray, float]:
    """Rows seen (or their Friedel mate seen) and A, the share of kinematic intensity in the region not seen."""
    seen = np.zeros(len(zf.xy_inv_nm), bool)
    seen[asg.j[asg.ok]] = True
    seen_pair = seen | np.where(zf.mate >= 0, seen[np.maximum(zf.mate, 0)], False)
    strength = zf.strength * region
    total = float(strength.sum())
    return seen_pair, float(strength[~seen_pair].sum() / total) if total > 0 else 0.0


def _intensity_terms(zf: _ZoneFacts, spots: SpotSet, asg: _Assignment) -> tuple[float, float]:
    """T (rank agreement of measured and kinematic intensities) and D (strong reflections all but missing)."""
    idx = np.flatnonzero(asg.code == _ALLOWED)
    if len(idx) < INTENSITY_TERMS_MIN_SPOTS:
        return RANK_NEUTRAL, 0.0
    kin = np.maximum(zf.f_rel[asg.j[idx]] ** 2, TINY)
    meas = spots.intensity[idx]
    rank = RANK_NEUTRAL
    kin_log = np.round(np.log10(kin), LOG_INTENSITY_DECIMALS)
    # at least two distinct values on the kinematic side and a spread on the measured one (no np.unique, np.ptp:
    # their overhead is most of this term on a pattern's few spots)
    if kin_log.max() > kin_log.min() and meas.max() - meas.min() > 0:
        rho = spearman_rho(meas, kin_log)
        rank = float(max(0.0, rho)) if np.isfinite(rho) else RANK_UNDEFINED
    w = spots.weight[idx]
    ratio = np.log(np.maximum(meas, TINY) / kin)
    off = ratio < weighted_median(ratio, w) - math.log(INTENSITY_MISFIT_FACTOR)
    return rank, float(np.sum(w[off]) / max(np.sum(w), TINY))


def _scale_term(scale: float, calibrated_scale: float | None, length_tol: float) -> tuple[float, float | None]:
    """S and the relative scale error (1 and None when uncalibrated)."""
    if calibrated_scale is None:
        return 1.0, None
    err = scale / calibrated_scale - 1.0
    return math.exp(-0.5 * (err / max(length_tol / SCALE_TOLERANCE_SIGMAS, SCALE_SIGMA_FLOOR)) ** 2), err


def _zone_prior(uvw) -> float:
    """Z: a faint preference for the low-index zone among patterns of identical geometry."""
    idx = max(abs(v) for v in uvw)
    above_knee = max(0, idx - ZONE_PRIOR_KNEE_INDEX)
    return 1.0 - ZONE_PRIOR_PER_INDEX * (idx - 1) - ZONE_PRIOR_PER_INDEX_ABOVE_KNEE * above_knee


# --- step 4: what leaves the scorer ----------------------------------------------------------------

def _spot_records(zf: _ZoneFacts, spots: SpotSet, measured, fmap: _Map, asg: _Assignment, *, use_scale: float,
                  phase) -> tuple[tuple[IndexedSpot, ...], np.ndarray, np.ndarray]:
    """One IndexedSpot per measured spot, and the d-spacing (%) and angle (deg) errors of the allowed ones."""
    n = len(asg.j)
    code, jj = asg.code, np.maximum(asg.j, 0)
    vc = spots.v_px - fmap.shift  # from the refined centre
    r = np.hypot(vc[:, 0], vc[:, 1])
    d_meas = np.divide(1.0, use_scale * r, out=np.full(n, np.inf), where=r > 0)
    zolz = asg.ok  # allowed, double diffraction or forbidden
    holz = code == _HOLZ
    hj = np.maximum(asg.holz_j, 0)
    has_holz = len(zf.holz_hkl) > 0
    hkl = np.zeros((n, 3), np.int64)
    hkl[zolz] = zf.zp.hkl[jj[zolz]]
    d_calc = np.full(n, np.nan)
    d_calc[zolz] = zf.d_nm[jj[zolz]]
    res = np.where(zolz, asg.dmin, asg.holz_res)
    ic = np.where(zf.allowed[jj], zf.strength[jj], 0.0) if len(zf.allowed) else np.zeros(n)
    proj = np.zeros((n, 3), np.int64)
    den = np.ones(n, np.int64)
    if has_holz:
        hkl[holz] = zf.holz_hkl[hj[holz]]
        d_calc[holz] = zf.holz_d_nm[hj[holz]]
        proj[holz] = zf.holz_proj_hkl[hj[holz]]
        den[holz] = zf.holz_proj_den[hj[holz]]
    has_hkl = zolz | holz
    hkil = plane_to_4(hkl).tolist() if phase.is_hexagonal else None
    allowed = code == _ALLOWED
    d_err = percent(np.abs(d_meas[allowed] - d_calc[allowed]) / d_calc[allowed])
    pv = fmap.pred_px[jj[allowed]] - fmap.shift
    cosang = np.sum(vc[allowed] * pv, axis=1) / (r[allowed] * np.sqrt(pv[:, 0] ** 2 + pv[:, 1] ** 2))
    a_err = np.degrees(np.arccos(np.clip(cosang, -1.0, 1.0)))
    kinds = _KIND_BY_CODE[code]
    rows = zip(range(n), measured.spots.x_px.tolist(), measured.spots.y_px.tolist(), spots.intensity.tolist(),
               hkl.tolist(), hkil if hkil is not None else [None] * n, kinds, d_meas.tolist(), d_calc.tolist(),
               res.tolist(), ic.tolist(), proj.tolist(), den.tolist(), has_hkl.tolist(), zolz.tolist(), holz.tolist())
    recs = tuple(
        IndexedSpot(i, x, y, inten, tuple(h) if has else None, tuple(h4) if (has and h4 is not None) else None, k, dm,
                    None if (not has or math.isnan(dc)) else dc, rs if has else None, icv if z else None,
                    tuple(p) if hz else None, pd if hz else 1)
        for i, x, y, inten, h, h4, k, dm, dc, rs, icv, p, pd, has, z, hz in rows)
    return recs, d_err, a_err


def _notes(measured, fmap: _Map, fit_distortion: bool, n_assigned: int) -> tuple[str, ...]:
    """Sentences for the microscopist about the refined centre and a fitted projector ellipse."""
    notes = []
    cx0, cy0 = measured.center_px
    shift = fmap.shift
    if float(np.hypot(*shift)) >= CENTRE_NOTE_PX:
        notes.append(f"the spots fit best about a centre {float(np.hypot(*shift)):.1f} px from the measured one "
                     f"(at {cx0 + shift[0]:.1f}, {cy0 + shift[1]:.1f} px)")
    if fit_distortion and fmap.aniso_pct >= DISTORTION_NOTE_PCT and n_assigned >= DISTORTION_NOTE_MIN_SPOTS:
        notes.append(f"the spot lattice is stretched {fmap.aniso_pct:.1f} % along {fmap.aniso_deg:.0f} deg (a "
                     "projector ellipse?): a ring calibration ('saed calibrate') measures and then corrects it")
    return tuple(notes)


# --- cached zone facts -----------------------------------------------------------------------------

@lru_cache(maxsize=4096)
def _zone_facts_cached(pt_ref, uvw: tuple, voltage_kv: float, max_g_inv_nm: float) -> _ZoneFacts:
    pt = pt_ref()
    zp = zone_pattern(pt.phase, uvw, voltage_kv=voltage_kv, max_g_inv_nm=max_g_inv_nm, include_holz=False,
                      thickness_nm=ZONE_THICKNESS_NM)
    u0 = orientation_matrix(pt.phase.lattice, uvw, 0.0)
    holz_xy, holz_hkl = _holz_projections(pt, zp, uvw, u0)
    allowed = ~zp.kinematically_forbidden
    f_rel = zp.f_abs / max(float(zp.f_abs[allowed].max()) if np.any(allowed) else 1.0, 1e-30)
    holz_g = np.linalg.norm(holz_xy, axis=1)
    metric = pt.phase.lattice.metric_tensor_nm2
    proj = [projected_plane(metric, h, uvw) for h in holz_hkl.tolist()]  # once per zone, a few rows
    return _ZoneFacts(
        zp=zp, u0=u0, xy_inv_nm=np.asarray(zp.xy_inv_nm, float), allowed=allowed,
        double=np.asarray(zp.double_diffraction), explains=allowed | np.asarray(zp.double_diffraction),
        f_rel=f_rel, strength=np.where(allowed, f_rel ** 2, 0.0), d_nm=_inverse(np.asarray(zp.g_inv_nm, float)),
        mate=_friedel_rows(zp.hkl), holz_xy_inv_nm=holz_xy, holz_hkl=holz_hkl,
        holz_d_nm=_inverse(holz_g),
        holz_proj_hkl=np.array([p for _, p in proj], np.int64).reshape(-1, 3),
        holz_proj_den=np.array([d for d, _ in proj], np.int64),
        zone_axis_4=tuple(int(v) for v in direction_to_4(np.array(uvw))) if pt.phase.is_hexagonal else None)


def _inverse(g: np.ndarray) -> np.ndarray:
    """1/g, nan where g is 0 (the direct beam has no spacing)."""
    return np.divide(1.0, g, out=np.full(len(g), np.nan), where=g > 0)


def _zone_facts(pt: PhaseIndexTable, uvw: tuple, voltage_kv: float, max_g_inv_nm: float) -> _ZoneFacts:
    """The zone pattern of a candidate zone plus what scoring derives from it (cached per zone)."""
    return _zone_facts_cached(weakref.ref(pt), uvw, voltage_kv, max_g_inv_nm)  # a weak key: tables are not pinned


def _fit_linear(p: np.ndarray, v: np.ndarray, w: np.ndarray, *, distortion: bool,
                t_max_px: float) -> tuple[np.ndarray, np.ndarray]:
    """Map (L, t) with v ~ L p + t (weighted least squares): a similarity, or one with a bounded ellipse.

    t is a small shift of the pattern centre (at most `t_max_px`; Friedel pairs fix it). L is the
    similarity (rotation and scale) or, with `distortion` and at least four spots, the general
    map whose polar decomposition L = R S has the axis ratio of S clipped to
    1 + MAX_FITTED_DISTORTION: a projector ellipse of a few per cent, not the freedom to turn any
    lattice into any other.

    Everything here is 2 x 2, so it is written in closed form (weighted centroids for the
    similarity, the 2 x 2 inverse, the polar decomposition by the rotation angle and the
    eigen-decomposition of a symmetric 2 x 2): numpy's least squares and SVD cost ten times as much on
    a pattern's 5-60 spots, twice per scoring. tests/test_fit_linear.py holds it to numpy's
    ``lstsq`` and ``svd`` on random inputs.
    """
    n = len(p)
    use_shift = n >= SHIFT_MIN_SPOTS and t_max_px > 0
    # every sum the fit needs, from two products: the weighted first and second moments of (px, py, vx, vy)
    z = np.empty((n, 5))
    z[:, :2], z[:, 2:4], z[:, 4] = p, v, 1.0
    (xx, xy_, xvx, xvy, spx), (_, yy, yvx, yvy, spy), (_, _, _, _, svx), (_, _, _, _, svy), (_, _, _, _, w_sum) = \
        ((z * w[:, None]).T @ z).tolist()
    sim = _similarity(xx, xy_, yy, xvx, xvy, yvx, yvy, spx, spy, svx, svy, w_sum, shift=use_shift)
    if sim is None:
        return _similarity_lstsq(p, v, w, t_max_px=t_max_px)
    a, b, tx, ty = sim
    t_norm = math.hypot(tx, ty)
    if t_norm > t_max_px:
        tx, ty = tx * (t_max_px / t_norm), ty * (t_max_px / t_norm)
        # the similarity again without a shift, on v - t: sum w p.(v - t) = sum w p.v - t . sum w p
        a, b, _, _ = _similarity(xx, xy_, yy, xvx - tx * spx, xvy - ty * spx, yvx - tx * spy, yvy - ty * spy,
                                 spx, spy, svx, svy, w_sum, shift=False)
    t = np.array([tx, ty])
    sim_m = np.array([[a, -b], [b, a]])
    if not distortion or n < DISTORTION_MIN_SPOTS:
        return sim_m, t
    m00, m01, m11 = xx, xy_, yy
    if _condition_2x2(np.array([[m00, m01], [m01, m11]])) > DISTORTION_MAX_CONDITION:
        return sim_m, t
    # lin = (Q^T W P) (P^T W P)^-1 with q = v - t, the 2 x 2 inverse written out
    c00, c01, c10, c11 = xvx - tx * spx, yvx - tx * spy, xvy - ty * spx, yvy - ty * spy
    det_m = m00 * m11 - m01 * m01
    i00, i01, i11 = m11 / det_m, -m01 / det_m, m00 / det_m
    l00, l01 = c00 * i00 + c01 * i01, c00 * i01 + c01 * i11
    l10, l11 = c10 * i00 + c11 * i01, c10 * i01 + c11 * i11
    if l00 * l11 - l01 * l10 <= 0:
        return sim_m, t
    # polar decomposition L = R S (det L > 0): R turns by the angle of (l00 + l11, l10 - l01), S = R^T L
    th = math.atan2(l10 - l01, l00 + l11)
    c, s_ = math.cos(th), math.sin(th)
    s00, s01, s11 = c * l00 + s_ * l10, c * l01 + s_ * l11, -s_ * l01 + c * l11
    # eigenvalues of the symmetric S, clipped to the allowed axis ratio about their geometric mean
    half_tr, root = 0.5 * (s00 + s11), math.hypot(0.5 * (s00 - s11), s01)
    e_hi, e_lo = half_tr + root, half_tr - root
    lim = math.sqrt(1.0 + MAX_FITTED_DISTORTION)
    if e_lo > 0 and e_hi <= lim * lim * e_lo:
        return np.array([[l00, l01], [l10, l11]]), t           # within the bound: the fitted map itself
    mean = math.sqrt(e_hi * e_lo) if e_lo > 0 else 0.0
    hi, lo = min(max(e_hi, mean / lim), mean * lim), min(max(e_lo, mean / lim), mean * lim)
    ang = 0.5 * math.atan2(2.0 * s01, s00 - s11)                # the eigenvector of e_hi
    ca, sa = math.cos(ang), math.sin(ang)
    t00, t01, t11 = lo + (hi - lo) * ca * ca, (hi - lo) * ca * sa, lo + (hi - lo) * sa * sa
    return np.array([[c * t00 - s_ * t01, c * t01 - s_ * t11], [s_ * t00 + c * t01, s_ * t01 + c * t11]]), t


def _similarity(xx, xy, yy, xvx, xvy, yvx, yvy, spx, spy, svx, svy, w_sum: float, *, shift: bool):
    """(a, b, tx, ty) of the weighted least-squares similarity v ~ [[a, -b], [b, a]] p + t from the weighted
    sums (xx = sum w px px, xvy = sum w px vy, spx = sum w px, ...); t is zero without `shift`. None when the
    points lie too close together for it to be determined (numpy's lstsq decides then)."""
    if shift:
        if not w_sum > 0:
            return None
        mpx, mpy, mvx, mvy = spx / w_sum, spy / w_sum, svx / w_sum, svy / w_sum
        # moments about the weighted centroids
        pp = (xx - spx * mpx) + (yy - spy * mpy)
        dot = (xvx - spx * mvx) + (yvy - spy * mvy)
        crs = (xvy - spx * mvy) - (yvx - spy * mvx)
    else:
        pp, dot, crs = xx + yy, xvx + yvy, xvy - yvx
    if not pp > 1e-9 * (xx + yy):
        return None
    a, b = dot / pp, crs / pp
    if not shift:
        return a, b, 0.0, 0.0
    return a, b, mvx - (a * mpx - b * mpy), mvy - (b * mpx + a * mpy)


def _similarity_lstsq(p: np.ndarray, v: np.ndarray, w: np.ndarray, *, t_max_px: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_fit_linear`'s similarity and shift by numpy's least squares, for spots too close together for
    the closed form (lstsq's minimum-norm answer where the similarity is not determined). No distortion
    step follows: points that close together make the normal matrix fail the condition test anyway."""
    sw = np.sqrt(w)
    n = len(p)
    use_shift = n >= SHIFT_MIN_SPOTS and t_max_px > 0
    rows = np.zeros((2 * n, 4 if use_shift else 2))
    np.multiply(p[:, 0], sw, out=rows[:n, 0])
    np.multiply(-p[:, 1], sw, out=rows[:n, 1])
    np.multiply(p[:, 1], sw, out=rows[n:, 0])
    np.multiply(p[:, 0], sw, out=rows[n:, 1])
    if use_shift:
        rows[:n, 2] = sw
        rows[n:, 3] = sw
    rhs = np.concatenate([v[:, 0], v[:, 1]])
    ww = np.concatenate([sw, sw])
    sol, *_ = np.linalg.lstsq(rows, rhs * ww, rcond=None)
    a, b = sol[0], sol[1]
    t = np.array([sol[2], sol[3]]) if use_shift else np.zeros(2)
    t_norm = np.linalg.norm(t)
    if t_norm > t_max_px:
        t = t * (t_max_px / t_norm)
        sol, *_ = np.linalg.lstsq(rows[:, :2], (rhs - np.repeat(t, n)) * ww, rcond=None)
        a, b = sol
    return np.array([[a, -b], [b, a]]), t


def _condition_2x2(m: np.ndarray) -> float:
    """Condition number of a symmetric positive semi-definite 2x2 matrix (ratio of its eigenvalues).

    np.linalg.cond in closed form (an SVD per refinement round is a tenth of the scorer's time).
    """
    half_trace = 0.5 * (m[0, 0] + m[1, 1])
    root = math.hypot(0.5 * (m[0, 0] - m[1, 1]), m[0, 1])
    lo = half_trace - root
    return (half_trace + root) / lo if lo > 0 else math.inf


def _anisotropy(lin: np.ndarray) -> tuple[float, float]:
    """Axis ratio - 1 (percent) of the fitted map and the azimuth of its long axis (deg).

    A map with no anisotropy beyond rounding (axis ratio within 1e-9 of 1: a similarity) has no long
    axis: (0, 0), not the direction rounding happens to pick.
    """
    uu, sv, vt = np.linalg.svd(lin)
    if not sv[0] - sv[1] > ISOTROPIC_RTOL * sv[0]:
        return 0.0, 0.0
    major = uu[:, 0]
    return float(percent_off(sv[0], sv[1])), float(math.degrees(math.atan2(major[1], major[0])) % 180.0)


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
    for m in HOLZ_LATTICE_FRACTIONS:
        d = np.min(np.linalg.norm(zolz - m * shift[None, :], axis=1))
        reach = float(np.linalg.norm(m * shift))
        if d < HOLZ_COINCIDENCE_INV_NM * max(1.0, reach) or reach < 1e-9:  # 1e-9: a zero shift
            lattice_like = True
            break
    if not lattice_like:
        return empty
    # drop projections that coincide with zero-layer reflections
    _, dz = _nearest(q, zolz)
    keep = dz > HOLZ_COINCIDENCE_INV_NM
    return q[keep], pt.hkl[sel][keep]


def _average_ranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n of `x`, ties given the mean of the ranks they span (as Spearman's rho needs)."""
    x = np.asarray(x, dtype=float)
    order = np.argsort(x, kind="mergesort")
    xs = x[order]
    ranks = np.empty(len(x))
    new_value = xs[1:] != xs[:-1]
    if new_value.all():                   # no ties (the usual case for measured intensities): ranks 1..n
        ranks[order] = np.arange(1.0, len(x) + 1.0)
        return ranks
    starts = np.flatnonzero(np.concatenate(([True], new_value)))
    ends = np.append(starts[1:], len(xs))
    mean_rank = (starts + ends + 1) / 2.0  # ranks start+1 .. end, averaged
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


def weighted_median(x: np.ndarray, w: np.ndarray) -> float:
    """The weighted median: the smallest x whose cumulative weight reaches half the total.

    This is numpy's ``np.quantile(x, 0.5, weights=w, method="inverted_cdf")`` (the inverted
    empirical CDF, Hyndman & Fan 1996, definition 1), which tests/test_score_steps.py checks it
    against; written out because the library call costs about ten times as much on the 5-60 values
    of a pattern, once per scored candidate. With no weight at all it returns the smallest x.

    >>> weighted_median(np.array([1.0, 2.0, 10.0]), np.array([0.2, 0.2, 0.6]))
    10.0
    """
    x, w = np.asarray(x, float), np.asarray(w, float)
    order = np.argsort(x)
    c = np.cumsum(w[order])
    if not c[-1] > 0:
        return float(x[order][0])
    # the CDF itself, as numpy forms it: half of a subnormal total would round to 0 and pick a
    # zero-weight value
    return float(x[order][np.searchsorted(c / c[-1], 0.5)])


def _friedel_rows(hkl: np.ndarray) -> np.ndarray:
    """Row of -hkl for every row (-1 where absent), by a sorted-key lookup."""
    h = np.asarray(hkl, np.int64).reshape(-1, 3)
    if len(h) == 0:
        return np.zeros(0, np.int64)
    span = int(np.abs(h).max())
    keys = hkl_keys(h, span)
    order = np.argsort(keys, kind="stable")
    mate_keys = hkl_keys(-h, span)
    at = np.minimum(np.searchsorted(keys[order], mate_keys), len(h) - 1)
    return np.where(keys[order][at] == mate_keys, order[at], _NO_ROW).astype(np.int64)

"""From a recorded pattern to a :class:`~saed.image.values.MeasuredPattern`: the image stage in one call.

Order of work (each step in its own module):

1. checks and masks (:mod:`saed.image.masks`): detector border, saturated pixels, a mask image;
2. block-averaged copy (:mod:`saed.image.binning`) and a rough centre from point symmetry
   (:func:`saed.image.centre.symmetric_center`), or from the saturated direct beam, or the hint
   in the calibration;
3. the beam-stop shadow (:func:`saed.image.masks.find_beam_stop`), masked;
4. background and noise model (:mod:`saed.image.background`);
5. spot width, detection and sub-pixel fits (:mod:`saed.image.spots`, :mod:`saed.image.spotfit`);
6. the direct beam: the bright spot at the rough centre, used as the centre when it is not saturated;
7. Friedel pairs refine the centre (:func:`saed.image.centre.friedel_center`);
8. the 2-D lattice, refined together with the centre over all spots (:mod:`saed.image.lattice2d`).

Nothing here rescales intensities; every threshold is a signal-to-noise ratio.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage as ndi

from saed.calibration import Calibration
from saed.errors import ImageError, InputError
from saed.image.background import Background, estimate_background
from saed.image.binning import Binned, bin_image, median_of, radius_map
from saed.image.centre import DirectBeam, find_direct_beam, friedel_center, point_symmetry
from saed.image.io import check_image, read_image, read_image_calibration, read_mask_image
from saed.image.lattice2d import fit_spot_lattice
from saed.image.masks import BeamStopShadow, border_mask, find_beam_stop, saturation_mask
from saed.image.nearby import nearest_other_distance
from saed.image.spots import SpotSearch, _adaptive_width, estimate_spot_sigma, find_spots
from saed.image.values import LatticeBasis, MeasuredPattern, Spots
from saed.units import percent

__all__ = ["measure_pattern", "measure_file", "inspect_pattern", "inspect_file", "Inspection", "DEFAULT_SNR_MIN",
           "DEFAULT_DETECT_SNR"]

logger = logging.getLogger(__name__)

#: Smallest peak signal-to-noise ratio of a reported spot: 3 sigma is the usual detection limit
#: for a single peak (common practice).
DEFAULT_SNR_MIN = 3.0
#: Detection threshold, in noise sigmas of the matched-filtered image: over the ~1e5 independent
#: positions of a frame, 5 sigma keeps Gaussian noise below one false candidate (common practice).
DEFAULT_DETECT_SNR = 5.0
#: Above this fraction of saturated pixels the exposure is unusable: half the frame clipped leaves no
#: haze to model and no spot profile to fit.
MAX_SATURATED_FRACTION = 0.5

#: Fewest pixels left after masking for a measurement: the larger of this count (a 16 x 16 patch)
#: and this fraction of the frame; below that, the haze and noise model rests on too few blocks
#: (set by hand).
MIN_VALID_PX = 256
MIN_VALID_FRACTION = 0.05

#: How far a --center hint may be off and still be replaced by the saturated direct beam or the
#: centre of symmetry found near it: the larger of this many pixels and this fraction of the frame.
HINT_REACH_PX = 30.0
HINT_REACH_FRACTION = 0.08

#: The rough centre and the beam stop are found on blocks of about 256 per side: a block image
#: whose short side is at least this long is coarsened 2 x 2 more (the block image is ~512 px).
COARSEN_ABOVE_PX = 400
#: A saturated region counts as the direct beam when within this fraction of the frame's short
#: side of the centre of symmetry; farther out it is taken for a saturated spot (set by hand).
DIRECT_BEAM_REACH_FRACTION = 0.15
#: A rough centre more than this fraction of the frame outside the image is refused: so far out
#: the frame holds no Friedel pairs and no radial haze to model (set by hand).
CENTRE_OUTSIDE_FRACTION = 0.25

#: Spot width (Gaussian sigma, px) used when none can be measured: a focused spot on a 1-4k
#: camera (set by hand on the bench patterns).
DEFAULT_SPOT_SIGMA_PX = 1.5
#: The spot width is held in this range (px): below 0.7 a spot is a single pixel (hot pixels are
#: refused as that); above 12 px the "spots" are discs of convergent-beam size and the search
#: window would swallow neighbours.
SPOT_SIGMA_MIN_PX, SPOT_SIGMA_MAX_PX = 0.7, 12.0
#: RMS radius of a 2-D Gaussian spot per sigma: sqrt(<x^2 + y^2>) = sqrt(2) sigma (exact).
RMS_RADIUS_PER_SIGMA = math.sqrt(2.0)

#: Half-size (px) of the window in which the direct beam's width is measured: room for a beam
#: several times wider than a spot (set by hand).
DIRECT_BEAM_WINDOW_HALF_PX = 24
#: The direct beam's width is held between one spot width and the larger of this many spot widths
#: and this many pixels; when it cannot be measured it is taken as DIRECT_BEAM_FALLBACK_SIGMAS spot
#: widths (the beam is broader than the diffracted spots; set by hand on the bench patterns).
DIRECT_BEAM_MAX_SIGMAS, DIRECT_BEAM_MAX_WIDTH_PX = 3.0, 6.0
DIRECT_BEAM_FALLBACK_SIGMAS = 2.0
#: How far (px) the fitted direct beam may move from its start: the larger of this many pixels and
#: this many spot widths (the rough centre is good to a few pixels).
DIRECT_BEAM_MAX_SHIFT_PX, DIRECT_BEAM_MAX_SHIFT_SIGMAS = 5.0, 1.5
#: An unsaturated blob at the centre is the direct beam only when at least this fraction of the
#: brightest spot: the transmitted beam outshines every diffracted one in SAED (weaker: a haze peak).
DIRECT_BEAM_MIN_RELATIVE_INTENSITY = 0.5
#: Spots within the larger of this many pixels, this many direct-beam widths and the saturated
#: core's side are parts of the direct beam (its tail and ring), not reflections.
DIRECT_BEAM_EXCLUSION_PX, DIRECT_BEAM_EXCLUSION_WIDTHS = 3.0, 2.0
#: Floor (px) of the direct beam's position uncertainty: at high signal the fit's formal error
#: becomes smaller than anything the pixel grid can support (set by hand).
CENTRE_SIGMA_FLOOR_PX = 0.02

#: Spots used for the Friedel-pair centre: peak SNR at least this (and at least snr_min), where the
#: positions are good to about 0.2 px (saed bench --only image: RMS 0.18 px at SNR 5-20); at least
#: FRIEDEL_MIN_SPOTS of them (two pairs).
FRIEDEL_MIN_SNR = 5.0
FRIEDEL_MIN_SPOTS = 4
#: Without a direct beam the rough centre may be off by up to this fraction of the smallest spot
#: spacing (under half, so no pair is mistaken for another), held within this range of pixels.
FRIEDEL_SEARCH_FRACTION_OF_SPACING = 0.4
FRIEDEL_SEARCH_MIN_PX, FRIEDEL_SEARCH_MAX_PX = 8.0, 30.0
#: First pairing tolerance (px) of |p_i + p_j - 2 c|: tighter when a fitted direct beam gives the start.
FRIEDEL_TOL_WITH_BEAM_PX, FRIEDEL_TOL_PX = 4.0, 8.0
#: Spots nearer the start than this many spot widths plus this many pixels are not paired (the
#: direct beam's tail).
FRIEDEL_MIN_RADIUS_SIGMAS, FRIEDEL_MIN_RADIUS_PX = 2.0, 2.0

#: Lattice tolerance (px): the largest of this floor, this many median position uncertainties and
#: this fraction of the spot width (set by hand on the bench patterns).
LATTICE_TOL_MIN_PX, LATTICE_TOL_POSITION_SIGMAS, LATTICE_TOL_SPOT_WIDTHS = 1.5, 3.0, 0.6
#: Extra centre tolerance (px) when the centre is still the rough one (no direct beam, no pairs).
ROUGH_CENTRE_EXTRA_TOL_PX = 2.0


def _check_enough_left(name: str, valid: np.ndarray) -> None:
    n = int(np.count_nonzero(valid))
    if n < max(MIN_VALID_PX, MIN_VALID_FRACTION * valid.size):
        raise ImageError(f"{name}: only {n} of {valid.size} pixels are left after masking (border, blank frame, "
                         "saturation, beam stop, mask image); nothing to measure")


def _direct_beam_region(sat_mask: np.ndarray, near_px, max_dist_px: float):
    """Centroid (x, y) and area of the largest saturated region within `max_dist_px` of `near_px`, or None.

    The centroids are bincount sums over the labels: equal to ``scipy.ndimage.center_of_mass`` and
    ``sum_labels`` (tests/test_image_library_twins.py), which were timed as their replacement
    (issue 16) and kept out: 102 ms against 10 ms on the 600 px box of a 2048 px frame.
    """
    rows, cols = sat_mask.shape
    r0, r1 = max(int(near_px[1] - max_dist_px), 0), min(int(near_px[1] + max_dist_px) + 1, rows)
    c0, c1 = max(int(near_px[0] - max_dist_px), 0), min(int(near_px[0] + max_dist_px) + 1, cols)
    if r0 >= r1 or c0 >= c1:
        return None
    box = sat_mask[r0:r1, c0:c1]
    if not box.any():
        return None
    lab, n = ndi.label(box)
    rr, cc = np.nonzero(lab)
    labs = lab[rr, cc]
    area = np.bincount(labs, minlength=n + 1)[1:].astype(float)
    cx = np.bincount(labs, weights=cc, minlength=n + 1)[1:] / np.maximum(area, 1) + c0
    cy = np.bincount(labs, weights=rr, minlength=n + 1)[1:] / np.maximum(area, 1) + r0
    d = np.hypot(cx - near_px[0], cy - near_px[1])
    ok = d <= max_dist_px
    if not ok.any():
        return None
    k = int(np.argmax(np.where(ok, area, -1)))
    return (float(cx[k]), float(cy[k])), float(area[k])


@dataclass(frozen=True, eq=False)
class Inspection:
    """A measured pattern with what went into it, for overlays and diagnostics (not for the matcher).

    ignored : (rows, cols) bool, every pixel left out (border, mask image, beam stop, saturation);
    saturated : (rows, cols) bool; beam_stop : the shadow found, or None; background : the haze and
    noise model; spot_sigma_px : the Gaussian-equivalent spot width used; direct_beam_px : the
    direct beam's fitted position (None when not seen); direct_beam_saturated : bool; image : the
    float32 pattern as measured.
    """

    measured: MeasuredPattern
    ignored: np.ndarray
    saturated: np.ndarray
    beam_stop: BeamStopShadow | None
    background: Background | None
    spot_sigma_px: float
    direct_beam_px: tuple[float, float] | None = None
    direct_beam_saturated: bool = False
    image: np.ndarray | None = None


# ----------------------------------------------------------------------------- steps
# Values between the steps of inspect_pattern (frozen; the arrays are not written after construction).

@dataclass(frozen=True, eq=False)
class _Masked:
    """Step 1: the checked float32 image and what is left out of it.

    masked: border, mask image and (after step 3) the beam stop; saturated: clipped pixels;
    fit_valid: neither; binned: the block-averaged copy of the valid pixels.
    """

    image: np.ndarray
    masked: np.ndarray
    saturated: np.ndarray
    saturation_level: float
    fit_valid: np.ndarray
    binned: Binned


@dataclass(frozen=True)
class _RoughCentre:
    """Step 2: the rough centre (x, y) px, how it was found, and the saturated direct-beam region near it."""

    xy_px: tuple[float, float]
    how: str
    beam_region: tuple[tuple[float, float], float] | None  # ((x, y) px, area px) or None


@dataclass(frozen=True, eq=False)
class _DirectBeamCut:
    """Step 5: the direct beam fitted at the rough centre (or None) and the spots that are not part of it."""

    beam: DirectBeam | None
    spots: Spots


@dataclass(frozen=True)
class _Centre:
    """Step 6: the centre before the lattice fit, its sigma, how it was found, and the direct-beam observation."""

    xy_px: np.ndarray
    sigma_px: float
    how: str
    observed_px: np.ndarray | None  # the unsaturated direct beam, a datum of the lattice fit
    observed_sigma_px: float


def _mask_image(image, mask, *, name: str, saturation_level: float | None) -> _Masked:
    """Step 1: check the image, combine the border, the mask image and saturation; refuse what cannot be measured."""
    img = check_image(image, name=name)
    rows, cols = img.shape
    user_mask = None
    if mask is not None:
        user_mask = np.asarray(mask, bool)
        if user_mask.shape != img.shape:
            raise ImageError(f"{name}: the mask is {user_mask.shape[0]}x{user_mask.shape[1]} pixels but the pattern is "
                             f"{rows}x{cols}")
    masked = border_mask(img)
    if user_mask is not None:
        masked |= user_mask
    sat_mask, sat_level = saturation_mask(img, level=saturation_level)
    sat_frac = float(sat_mask.mean())
    if sat_frac > MAX_SATURATED_FRACTION:
        raise ImageError(f"{name}: {percent(sat_frac):.0f}% of the pixels are saturated at {sat_level:g}; "
                         "record a shorter exposure")
    if masked.all():
        raise ImageError(f"{name}: every pixel is masked")
    fit_valid = ~masked & ~sat_mask
    _check_enough_left(name, fit_valid)
    return _Masked(img, masked, sat_mask, sat_level, fit_valid, bin_image(img, fit_valid))


def _coarse(binned: Binned) -> Binned:
    """The block image for the rough centre and the beam stop (about 256 blocks per side)."""
    return binned.coarsened(2) if min(binned.image.shape) >= COARSEN_ABOVE_PX else binned


def _rough_centre(m: _Masked, coarse: Binned, calibration: Calibration, *, name: str) -> _RoughCentre:
    """Step 2: the hint, or the saturated direct beam, or point symmetry; refused far outside the image."""
    rows, cols = m.image.shape
    sat_free = m.saturated & ~m.masked
    sym = point_symmetry(coarse)  # the point-symmetry map, computed once for both questions below
    c_sym = sym.centre()
    db_region = _direct_beam_region(sat_free, c_sym, DIRECT_BEAM_REACH_FRACTION * min(rows, cols))
    if calibration.center_px is not None:
        # A hint is a rough guess: a saturated direct beam or the centre of symmetry near it is
        # better (the radial background and the spot width are measured about this centre, and 20 px
        # off on a 256 px frame spoils both); far from both, the hint stands (e.g. an asymmetric pattern).
        hint = tuple(float(v) for v in calibration.center_px)
        reach = max(HINT_REACH_PX, HINT_REACH_FRACTION * min(rows, cols))
        db_hint = _direct_beam_region(sat_free, hint, reach)
        if db_hint is not None:
            db_region, c0, how = db_hint, db_hint[0], "the saturated direct beam near the given centre"
        elif (math.hypot(c_sym[0] - hint[0], c_sym[1] - hint[1]) <= reach
              and not sym.has_peak_near(hint)):  # a hint on a centre of symmetry of its own stands
            c0, how = tuple(c_sym), "point symmetry near the given centre"
        else:
            c0, how = hint, "the given centre"
    elif db_region is not None:
        c0, how = db_region[0], "the saturated direct beam"
    else:
        c0, how = c_sym, "point symmetry"
    logger.debug("rough centre (%.1f, %.1f) from %s", c0[0], c0[1], how)
    out = CENTRE_OUTSIDE_FRACTION
    if not (-out * cols <= c0[0] <= (1 + out) * cols and -out * rows <= c0[1] <= (1 + out) * rows):
        raise InputError(f"{name}: the centre ({c0[0]:.0f}, {c0[1]:.0f}) is far outside the image")
    return _RoughCentre(c0, how, db_region)


def _mask_beam_stop(m: _Masked, stop: BeamStopShadow, *, name: str) -> _Masked:
    """Step 3: the beam-stop shadow left out, and the block image made again without it."""
    fit_valid = m.fit_valid & ~stop.mask
    _check_enough_left(name, fit_valid)
    return replace(m, masked=m.masked | stop.mask, fit_valid=fit_valid, binned=bin_image(m.image, fit_valid))


def _spot_width(m: _Masked, bg: Background, c0, spot_sigma_px: float | None) -> float:
    """Step 4: the Gaussian-equivalent spot width (px): given, or measured from the strongest blobs."""
    sigma = spot_sigma_px if spot_sigma_px is not None else estimate_spot_sigma(m.image, m.fit_valid, bg, m.binned, c0)
    if sigma is None:
        sigma = DEFAULT_SPOT_SIGMA_PX
    return float(np.clip(sigma, SPOT_SIGMA_MIN_PX, SPOT_SIGMA_MAX_PX))


def _cut_direct_beam(m: _Masked, bg: Background, search: SpotSearch, rough: _RoughCentre,
                     stop: BeamStopShadow | None, sigma: float) -> _DirectBeamCut:
    """Step 5: fit the direct beam on its own at the rough centre and drop the spots on top of it.

    The radial background hides the direct beam from the spot search, so it is fitted here; an
    unsaturated blob weaker than the spots is haze, not the beam.
    """
    rows, cols = m.image.shape
    fits = search.fits
    db = None
    core_area = rough.beam_region[1] if rough.beam_region is not None else 0.0
    start_db = rough.beam_region[0] if rough.beam_region is not None else rough.xy_px
    ix, iy = int(round(start_db[0])), int(round(start_db[1]))
    if 0 <= ix < cols and 0 <= iy < rows and not (stop is not None and stop.mask[iy, ix]):
        w_db = _adaptive_width(m.image, m.fit_valid | m.saturated, np.array([float(start_db[0])]),
                               np.array([float(start_db[1])]), half=DIRECT_BEAM_WINDOW_HALF_PX)[0]
        w_db = (float(np.clip(w_db, sigma, max(DIRECT_BEAM_MAX_SIGMAS * sigma, DIRECT_BEAM_MAX_WIDTH_PX)))
                if np.isfinite(w_db) else DIRECT_BEAM_FALLBACK_SIGMAS * sigma)
        db = find_direct_beam(m.image, m.fit_valid, bg, start_db, width_px=w_db, saturated_area_px=core_area,
                              max_shift_px=max(DIRECT_BEAM_MAX_SHIFT_PX, DIRECT_BEAM_MAX_SHIFT_SIGMAS * sigma))
        if (db is not None and len(fits) and core_area <= 0
                and db.intensity < DIRECT_BEAM_MIN_RELATIVE_INTENSITY * float(np.max(fits.intensity))):
            logger.debug("bright blob at the centre is weaker than the spots: not taken as the direct beam")
            db = None
    keep = np.ones(len(fits), bool)
    if db is not None and len(fits):
        d = np.hypot(fits.x_px - db.xy_px[0], fits.y_px - db.xy_px[1])
        keep &= d > max(DIRECT_BEAM_EXCLUSION_PX, DIRECT_BEAM_EXCLUSION_WIDTHS * db.width_px, core_area ** 0.5)
    spots = Spots(fits.x_px[keep], fits.y_px[keep], fits.intensity[keep], fits.intensity_sigma[keep],
                  fits.sigma_xy_px[keep], search.snr[keep], RMS_RADIUS_PER_SIGMA * fits.width_px[keep],
                  search.saturated[keep])
    return _DirectBeamCut(db, spots)


def _centre_before_lattice(spots: Spots, beam: DirectBeam | None, rough: _RoughCentre, *, sigma: float,
                           snr_min: float) -> _Centre:
    """Step 6: the unsaturated direct beam is the centre; else Friedel pairs of the strong spots refine the rough one."""
    db_xy = None if beam is None else np.asarray(beam.xy_px, float)
    start = db_xy if db_xy is not None else np.asarray(rough.xy_px, float)
    centre = _Centre(np.asarray(start, float), float("nan"), rough.how, None, 1.0)
    if db_xy is not None and not beam.saturated:
        c_sigma = float(max(beam.sigma_px, CENTRE_SIGMA_FLOOR_PX))
        centre = _Centre(db_xy.copy(), c_sigma, "the direct beam", db_xy.copy(), c_sigma)
    sxy = spots.xy_px
    strong = spots.snr >= max(FRIEDEL_MIN_SNR, snr_min)
    search_px = None
    if db_xy is None and strong.sum() >= FRIEDEL_MIN_SPOTS:
        # how far off the rough centre may be: under half the smallest spot spacing, within a range
        nn = nearest_other_distance(sxy[strong])
        search_px = float(np.clip(FRIEDEL_SEARCH_FRACTION_OF_SPACING * median_of(nn), FRIEDEL_SEARCH_MIN_PX,
                                  FRIEDEL_SEARCH_MAX_PX))
    fr = friedel_center(sxy[strong], start, sigma_px=spots.sigma_xy_px[strong], intensity=spots.intensity[strong],
                        tol_px=FRIEDEL_TOL_WITH_BEAM_PX if db_xy is not None else FRIEDEL_TOL_PX,
                        min_radius_px=FRIEDEL_MIN_RADIUS_SIGMAS * sigma + FRIEDEL_MIN_RADIUS_PX, search_px=search_px)
    if fr is not None and centre.observed_px is None:
        centre = replace(centre, xy_px=np.asarray(fr.center_px), sigma_px=fr.sigma_px,
                         how=f"{fr.n_pairs} Friedel pairs")
    return centre


@dataclass(frozen=True, eq=False)
class _LatticeStep:
    """Step 7: the lattice (None when not found), the final centre (x, y) px with its sigma and how it was found."""

    basis: LatticeBasis | None
    centre_px: np.ndarray
    centre_sigma_px: float
    how: str
    notes: tuple[str, ...]


def _lattice_notes(fit) -> list[str]:
    """Notes on a lattice fit: spots off it, and a basis vector with no spot of its own."""
    notes = []
    off = int((~fit.on_lattice).sum())
    if off:
        notes.append(f"{off} spot(s) off the lattice (another grain, double diffraction or noise)")
    idx_on = fit.indices[fit.on_lattice]
    for label, unit in (("g1", (1, 0)), ("g2", (0, 1))):
        if not any(tuple(v) in (unit, (-unit[0], -unit[1])) for v in idx_on.tolist()):
            notes.append(f"no spot at +-{label}: the net's basis vector is itself a missing (absent or "
                         "forbidden) reflection")
    return notes


def _fit_lattice(spots: Spots, centre: _Centre, rough: _RoughCentre, *, sigma: float) -> _LatticeStep:
    """Step 7: the 2-D lattice refined together with the centre over all spots."""
    order = np.argsort(-spots.snr)
    tol = float(max(LATTICE_TOL_MIN_PX, LATTICE_TOL_POSITION_SIGMAS * median_of(spots.sigma_xy_px),
                    LATTICE_TOL_SPOT_WIDTHS * sigma))
    fit = fit_spot_lattice(spots.xy_px, spots.sigma_xy_px, centre.xy_px, tol_px=tol, order=order,
                           center_tol_px=tol + (0.0 if centre.how != rough.how else ROUGH_CENTRE_EXTRA_TOL_PX),
                           center_obs=centre.observed_px, center_sigma_px=centre.observed_sigma_px)
    if fit is None:
        return _LatticeStep(None, centre.xy_px, centre.sigma_px, centre.how,
                            ("no 2-D lattice found (needs three or more spots not all on one line)",))
    sc, s1, s2, sa = fit.sigmas()
    basis = LatticeBasis(g1_px=fit.g1_px, g2_px=fit.g2_px, indices=fit.indices, on_lattice=fit.on_lattice,
                         sigma_g1_px=s1, sigma_g2_px=s2, sigma_angle_deg=sa, rms_residual_px=fit.rms_residual_px)
    how = f"the lattice fit over {int(fit.on_lattice.sum())} spots" + (
        " and the direct beam" if centre.observed_px is not None else "")
    return _LatticeStep(basis, fit.center_px, sc, how, tuple(_lattice_notes(fit)))


def measure_pattern(image: np.ndarray, calibration: Calibration, *, mask=None, source: str = "",
                    **options) -> MeasuredPattern:
    """Measure the centre, the spots and the 2-D lattice of one recorded pattern.

    See :func:`inspect_pattern` for the parameters; this returns only its ``measured`` value.

    Examples
    --------
    >>> from saed.synth import Detector, Scene, render_lattice
    >>> pat, _ = render_lattice([40.0, 5.0], [-12.0, 50.0], center_px=(255.3, 250.8),
    ...                         detector=Detector(shape=(512, 512)), scene=Scene(), rng=3)
    >>> mp = measure_pattern(pat.image, Calibration())
    >>> [round(v, 1) for v in mp.center_px], len(mp.spots) > 60, round(mp.basis.angle_deg, 1)
    ([255.3, 250.8], True, 83.6)
    """
    return inspect_pattern(image, calibration, mask=mask, source=source, **options).measured


def inspect_pattern(image: np.ndarray, calibration: Calibration, *, mask=None, source: str = "",
                    spot_sigma_px: float | None = None, snr_min: float = DEFAULT_SNR_MIN,
                    detect_snr: float = DEFAULT_DETECT_SNR, find_stop: bool = True,
                    saturation_level: float | None = None) -> Inspection:
    """Measure the centre, the spots and the 2-D lattice of one recorded pattern, keeping the masks.

    Parameters
    ----------
    image : (rows, cols) array
        The pattern as recorded (counts; not rescaled). x = column, y = row.
    calibration : Calibration
        Detector scale (may be uncalibrated), voltage, an optional centre hint (``center_px``) and
        an optional elliptical distortion (applied by the MeasuredPattern's corrected views).
    mask : (rows, cols) bool, optional
        True where pixels are to be ignored (e.g. from ``--mask``); combined with the masks found.
    source : str
        The file name, carried into the result.
    spot_sigma_px : float, optional
        Gaussian-equivalent spot width; default measured from the strongest spots.
    snr_min, detect_snr : float
        Peak signal-to-noise ratio a spot must reach, and the detection threshold of the matched
        filter (both in noise sigmas).
    find_stop : bool
        Look for a beam-stop shadow and mask it.
    saturation_level : float, optional
        The clipping level in counts; default: found from a flat top at the image maximum.

    Returns
    -------
    Inspection
        ``measured`` is the MeasuredPattern: with an empty ``spots`` and a reason in ``notes`` when no
        spot is found (not an error).

    Raises
    ------
    ImageError
        A NaN, constant, too small or mostly saturated image, or a mask of the wrong shape.

    Notes
    -----
    The steps, in order: masks (:func:`_mask_image`), rough centre (:func:`_rough_centre`), beam
    stop (:func:`_mask_beam_stop`), background and spot width (:func:`_spot_width`), spot search,
    the direct beam (:func:`_cut_direct_beam`), the centre before the lattice
    (:func:`_centre_before_lattice`) and the lattice with the centre (:func:`_fit_lattice`). The
    thresholds are the module constants, each with its reason.
    """
    name = source or "image"
    m = _mask_image(image, mask, name=name, saturation_level=saturation_level)
    rows, cols = m.image.shape
    notes: list[str] = []
    coarse = _coarse(m.binned)
    rough = _rough_centre(m, coarse, calibration, name=name)
    c0 = rough.xy_px

    # Block distances from the rough centre: the beam-stop search and the background share them
    # when they share their blocks (frames under 400 px a side, whose block image is not coarsened).
    radius_b = radius_map(coarse, c0)
    stop = find_beam_stop(coarse, c0, radius=radius_b) if find_stop else None
    if stop is not None:
        m = _mask_beam_stop(m, stop, name=name)
        notes.append(f"beam stop masked (towards {stop.angle_deg:.0f} deg, {stop.width_px:.0f} px wide)")
    if m.saturated.any():
        notes.append(f"{int(m.saturated.sum())} saturated pixels (at {m.saturation_level:g}) ignored in the fits")

    same_blocks = coarse.factor == m.binned.factor and coarse.image.shape == m.binned.image.shape
    bg = estimate_background(m.image, m.binned, c0, valid=m.fit_valid, radius=radius_b if same_blocks else None)
    sigma = _spot_width(m, bg, c0, spot_sigma_px)
    search = find_spots(m.image, m.fit_valid, bg, sigma_px=sigma, snr_min=snr_min, detect_snr=detect_snr,
                        saturated_mask=m.saturated & ~m.masked)
    if search.n_hot:
        notes.append(f"{search.n_hot} single-pixel peaks (hot pixels, X-ray hits) ignored")
    cut = _cut_direct_beam(m, bg, search, rough, stop, sigma)
    db, spots = cut.beam, cut.spots
    ignored = m.masked | m.saturated
    if len(spots) == 0:
        notes.append("no spots above the noise" + (f" (peak signal-to-noise >= {snr_min:g})"
                                                    if search.n_candidates else ""))
        mp = MeasuredPattern(image_shape=(rows, cols), center_px=(float(c0[0]), float(c0[1])), spots=spots,
                             basis=None, calibration=calibration, center_sigma_px=float("nan"), source=source,
                             notes=tuple(notes))
        return Inspection(mp, ignored, m.saturated, stop, bg, sigma, None, False, m.image)

    centre = _centre_before_lattice(spots, db, rough, sigma=sigma, snr_min=snr_min)
    lat = _fit_lattice(spots, centre, rough, sigma=sigma)
    notes = [f"centre from {lat.how}", *notes, *lat.notes]
    if db is None and stop is None and not m.saturated.any():
        notes.append("no direct beam seen at the centre")
    mp = MeasuredPattern(image_shape=(rows, cols), center_px=(float(lat.centre_px[0]), float(lat.centre_px[1])),
                         spots=spots, basis=lat.basis, calibration=calibration,
                         center_sigma_px=float(lat.centre_sigma_px), source=source, notes=tuple(notes))
    db_px = None if db is None else (float(db.xy_px[0]), float(db.xy_px[1]))
    return Inspection(mp, ignored, m.saturated, stop, bg, sigma, db_px, bool(db is not None and db.saturated), m.image)


def inspect_file(path, calibration: Calibration | None = None, *, frame: int | None = None, mask_path=None,
                 image=None, **options) -> Inspection:
    """Read `path` (frame `frame`) and inspect it; the calibration falls back to the TIFF's reciprocal-scale tags.

    `mask_path`: an image of the same size whose non-zero pixels are ignored. `image`: the frame
    already read (:func:`saed.image.io.read_pattern`), so the file is not read twice. Other keyword
    options go to :func:`inspect_pattern`.
    """
    img = read_image(path, frame=frame) if image is None else image
    cal = calibration if calibration is not None else Calibration()
    if not cal.is_calibrated:
        scale = read_image_calibration(path)
        if scale is not None:
            cal = replace(cal, scale_inv_nm_per_px=scale, source=f"{path} (TIFF resolution tags)")
    mask = read_mask_image(mask_path, shape=img.shape) if mask_path is not None else None
    return inspect_pattern(img, cal, mask=mask, source=str(path), **options)


def measure_file(path, calibration: Calibration | None = None, *, frame: int | None = None, mask_path=None,
                 **options) -> MeasuredPattern:
    """Read `path` (frame `frame`) and measure it: :func:`inspect_file` without the masks."""
    return inspect_file(path, calibration, frame=frame, mask_path=mask_path, **options).measured

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
from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi
from scipy.spatial import cKDTree

from saed.calibration import Calibration
from saed.errors import ImageError, InputError
from saed.image.background import Background, estimate_background
from saed.image.binning import bin_image
from saed.image.centre import find_direct_beam, friedel_center, near_symmetry_peak, symmetric_center
from saed.image.io import check_image, read_image, read_image_calibration, read_mask_image
from saed.image.lattice2d import fit_spot_lattice
from saed.image.masks import BeamStopShadow, border_mask, find_beam_stop, saturation_mask
from saed.image.spots import _adaptive_width, estimate_spot_sigma, find_spots
from saed.image.values import LatticeBasis, MeasuredPattern, Spots

__all__ = ["measure_pattern", "measure_file", "inspect_pattern", "inspect_file", "Inspection", "DEFAULT_SNR_MIN",
           "DEFAULT_DETECT_SNR"]

logger = logging.getLogger(__name__)

#: Smallest peak signal-to-noise ratio of a reported spot.
DEFAULT_SNR_MIN = 3.0
#: Detection threshold, in noise sigmas of the matched-filtered image.
DEFAULT_DETECT_SNR = 5.0
#: Above this fraction of saturated pixels the exposure is unusable.
MAX_SATURATED_FRACTION = 0.5


#: How far a --center hint may be off and still be replaced by the saturated direct beam or the
#: centre of symmetry found near it: the larger of this many pixels and this fraction of the frame.
HINT_REACH_PX = 30.0
HINT_REACH_FRACTION = 0.08


def _check_enough_left(name: str, valid: np.ndarray) -> None:
    n = int(np.count_nonzero(valid))
    if n < max(256, 0.05 * valid.size):
        raise ImageError(f"{name}: only {n} of {valid.size} pixels are left after masking (border, blank frame, "
                         "saturation, beam stop, mask image); nothing to measure")


def _direct_beam_region(sat_mask: np.ndarray, near_px, max_dist_px: float):
    """Centroid (x, y) and area of the largest saturated region within `max_dist_px` of `near_px`, or None."""
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
    """
    name = source or "image"
    img = check_image(image, name=name)
    rows, cols = img.shape
    notes: list[str] = []
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
        raise ImageError(f"{name}: {100 * sat_frac:.0f}% of the pixels are saturated at {sat_level:g}; "
                         "record a shorter exposure")
    if masked.all():
        raise ImageError(f"{name}: every pixel is masked")
    fit_valid = ~masked & ~sat_mask
    _check_enough_left(name, fit_valid)
    binned = bin_image(img, fit_valid)

    # Rough centre: the hint, or the saturated direct beam, or point symmetry.
    # Coarse work (rough centre, beam stop) on blocks of about 256 per side.
    coarse = binned.coarsened(2) if min(binned.image.shape) >= 400 else binned
    c_sym = symmetric_center(coarse)
    db_region = _direct_beam_region(sat_mask & ~masked, c_sym, 0.15 * min(rows, cols))
    if calibration.center_px is not None:
        # A hint is a rough guess: a saturated direct beam or the centre of symmetry near it is
        # better (the radial background and the spot width are measured about this centre, and 20 px
        # off on a 256 px frame spoils both); far from both, the hint stands (e.g. an asymmetric pattern).
        hint = tuple(float(v) for v in calibration.center_px)
        reach = max(HINT_REACH_PX, HINT_REACH_FRACTION * min(rows, cols))
        db_hint = _direct_beam_region(sat_mask & ~masked, hint, reach)
        if db_hint is not None:
            db_region, c0, how = db_hint, db_hint[0], "the saturated direct beam near the given centre"
        elif (math.hypot(c_sym[0] - hint[0], c_sym[1] - hint[1]) <= reach
              and not near_symmetry_peak(coarse, hint)):  # a hint on a centre of symmetry of its own stands
            c0, how = tuple(c_sym), "point symmetry near the given centre"
        else:
            c0, how = hint, "the given centre"
    elif db_region is not None:
        c0 = db_region[0]
        how = "the saturated direct beam"
    else:
        c0 = c_sym
        how = "point symmetry"
    logger.debug("rough centre (%.1f, %.1f) from %s", c0[0], c0[1], how)
    if not (-0.25 * cols <= c0[0] <= 1.25 * cols and -0.25 * rows <= c0[1] <= 1.25 * rows):
        raise InputError(f"{name}: the centre ({c0[0]:.0f}, {c0[1]:.0f}) is far outside the image")

    stop = find_beam_stop(coarse, c0) if find_stop else None
    if stop is not None:
        masked |= stop.mask
        fit_valid &= ~stop.mask
        _check_enough_left(name, fit_valid)
        binned = bin_image(img, fit_valid)
        notes.append(f"beam stop masked (towards {stop.angle_deg:.0f} deg, {stop.width_px:.0f} px wide)")
    if sat_mask.any():
        notes.append(f"{int(sat_mask.sum())} saturated pixels (at {sat_level:g}) ignored in the fits")

    bg = estimate_background(img, binned, c0, valid=fit_valid)
    sigma = spot_sigma_px if spot_sigma_px is not None else estimate_spot_sigma(img, fit_valid, bg, binned, c0)
    if sigma is None:
        sigma = 1.5
    sigma = float(np.clip(sigma, 0.7, 12.0))
    search = find_spots(img, fit_valid, bg, sigma_px=sigma, snr_min=snr_min, detect_snr=detect_snr,
                        saturated_mask=sat_mask & ~masked)
    fits = search.fits
    xy = np.stack([fits.x_px, fits.y_px], axis=1) if len(fits) else np.zeros((0, 2))
    if search.n_hot:
        notes.append(f"{search.n_hot} single-pixel peaks (hot pixels, X-ray hits) ignored")

    # The direct beam: fitted on its own at the rough centre (the radial background hides it from the
    # spot search); spots on top of it are dropped.
    db = None
    core_area = db_region[1] if db_region is not None else 0.0
    start_db = db_region[0] if db_region is not None else c0
    ix, iy = int(round(start_db[0])), int(round(start_db[1]))
    if 0 <= ix < cols and 0 <= iy < rows and not (stop is not None and stop.mask[iy, ix]):
        w_db = _adaptive_width(img, fit_valid | sat_mask, np.array([float(start_db[0])]), np.array([float(start_db[1])]),
                               half=24)[0]
        w_db = float(np.clip(w_db, sigma, max(3.0 * sigma, 6.0))) if np.isfinite(w_db) else 2.0 * sigma
        db = find_direct_beam(img, fit_valid, bg, start_db, width_px=w_db, saturated_area_px=core_area,
                              max_shift_px=max(5.0, 1.5 * sigma))
        if db is not None and len(fits) and core_area <= 0 and db.intensity < 0.5 * float(np.max(fits.intensity)):
            logger.debug("bright blob at the centre is weaker than the spots: not taken as the direct beam")
            db = None
    keep = np.ones(len(fits), bool)
    if db is not None and len(fits):
        d = np.hypot(xy[:, 0] - db.xy_px[0], xy[:, 1] - db.xy_px[1])
        keep &= d > max(3.0, 2.0 * db.width_px, core_area ** 0.5)
    db_xy = None if db is None else np.asarray(db.xy_px, float)
    db_saturated = bool(db is not None and db.saturated)
    spots = Spots(fits.x_px[keep], fits.y_px[keep], fits.intensity[keep], fits.intensity_sigma[keep],
                  fits.sigma_xy_px[keep], search.snr[keep], np.sqrt(2.0) * fits.width_px[keep], search.saturated[keep])
    if len(spots) == 0:
        reason = "no spots above the noise" + (f" (peak signal-to-noise >= {snr_min:g})" if search.n_candidates else "")
        notes.append(reason)
        mp = MeasuredPattern(image_shape=(rows, cols), center_px=(float(c0[0]), float(c0[1])), spots=spots,
                             basis=None, calibration=calibration, center_sigma_px=float("nan"), source=source,
                             notes=tuple(notes))
        return Inspection(mp, masked | sat_mask, sat_mask, stop, bg, sigma, None, False, img)

    # Centre: unsaturated direct beam, else Friedel pairs; then the lattice fit over all spots.
    sxy = spots.xy_px
    start = db_xy if db_xy is not None else np.asarray(c0, float)
    center = np.asarray(start, float)
    center_sigma = float("nan")
    center_how = how
    center_obs, center_obs_sigma = None, 1.0
    if db_xy is not None and not db_saturated:
        center, center_sigma = db_xy.copy(), float(max(db.sigma_px, 0.02))
        center_obs, center_obs_sigma = center.copy(), center_sigma
        center_how = "the direct beam"
    strong = spots.snr >= max(5.0, snr_min)
    search = None
    if db_xy is None and strong.sum() >= 4:
        # how far off the rough centre may be: under half the smallest spot spacing, at most 30 px
        nn = cKDTree(sxy[strong]).query(sxy[strong], k=2)[0][:, 1]
        search = float(np.clip(0.4 * np.median(nn), 8.0, 30.0))
    fr = friedel_center(sxy[strong], start, sigma_px=spots.sigma_xy_px[strong], intensity=spots.intensity[strong],
                        tol_px=4.0 if db_xy is not None else 8.0, min_radius_px=2.0 * sigma + 2.0, search_px=search)
    if fr is not None and center_obs is None:
        center, center_sigma = np.asarray(fr.center_px), fr.sigma_px
        center_how = f"{fr.n_pairs} Friedel pairs"

    basis = None
    order = np.argsort(-spots.snr)
    tol = float(max(1.5, 3.0 * np.median(spots.sigma_xy_px), 0.6 * sigma))
    fit = fit_spot_lattice(sxy, spots.sigma_xy_px, center, tol_px=tol, order=order,
                           center_tol_px=tol + (0.0 if center_how != how else 2.0),
                           center_obs=center_obs, center_sigma_px=center_obs_sigma)
    if fit is not None:
        sc, s1, s2, sa = fit.sigmas()
        basis = LatticeBasis(g1_px=fit.g1_px, g2_px=fit.g2_px, indices=fit.indices, on_lattice=fit.on_lattice,
                             sigma_g1_px=s1, sigma_g2_px=s2, sigma_angle_deg=sa, rms_residual_px=fit.rms_residual_px)
        center, center_sigma = fit.center_px, sc
        center_how = f"the lattice fit over {int(fit.on_lattice.sum())} spots" + (
            " and the direct beam" if center_obs is not None else "")
        off = int((~fit.on_lattice).sum())
        if off:
            notes.append(f"{off} spot(s) off the lattice (another grain, double diffraction or noise)")
        idx_on = fit.indices[fit.on_lattice]
        for name, unit in (("g1", (1, 0)), ("g2", (0, 1))):
            if not any(tuple(v) in (unit, (-unit[0], -unit[1])) for v in idx_on.tolist()):
                notes.append(f"no spot at +-{name}: the net's basis vector is itself a missing (absent or "
                             "forbidden) reflection")
    if basis is None:
        notes.append("no 2-D lattice found (needs three or more spots not all on one line)")
    notes.insert(0, f"centre from {center_how}")
    if db is None and stop is None and not sat_mask.any():
        notes.append("no direct beam seen at the centre")
    mp = MeasuredPattern(image_shape=(rows, cols), center_px=(float(center[0]), float(center[1])), spots=spots,
                         basis=basis, calibration=calibration, center_sigma_px=float(center_sigma), source=source,
                         notes=tuple(notes))
    return Inspection(mp, masked | sat_mask, sat_mask, stop, bg, sigma,
                      None if db_xy is None else (float(db_xy[0]), float(db_xy[1])), db_saturated, img)


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
            cal = Calibration(scale, cal.voltage_kv, cal.center_px, cal.ellipse, cal.camera_length_mm,
                              cal.pixel_pitch_um, cal.standard, cal.date, source=f"{path} (TIFF resolution tags)")
    mask = read_mask_image(mask_path, shape=img.shape) if mask_path is not None else None
    return inspect_pattern(img, cal, mask=mask, source=str(path), **options)


def measure_file(path, calibration: Calibration | None = None, *, frame: int | None = None, mask_path=None,
                 **options) -> MeasuredPattern:
    """Read `path` (frame `frame`) and measure it: :func:`inspect_file` without the masks."""
    return inspect_file(path, calibration, frame=frame, mask_path=mask_path, **options).measured

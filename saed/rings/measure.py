"""From a recorded ring pattern to rings: mask, centre, ellipse, radial profile, ring radii.

:func:`measure_rings` runs, coarse to fine:

1. mask: the caller's mask plus pixels far darker than their ring neighbourhood (beam stop and its
   rod, dead areas) and saturated pixels;
2. centre from inversion symmetry (or the caller's hint);
3. a radial profile and its rings (:mod:`saed.rings.peaks`); the strongest rings traced around the
   azimuth give centre and ellipse (:mod:`saed.rings.geometry`);
4. the profile again with the fitted geometry, all rings, a final geometry fit over all strong rings,
   and the final profile and rings.

A pattern whose "rings" are made of a few spots (a single crystal) is recognised by the azimuthal
coverage of its rings and reported as such.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from saed.calibration import Ellipse
from saed.errors import ImageError, InputError
from saed.readonly import frozen_array
from saed.rings.profile import RadialProfile, radial_profile
from saed.rings.peaks import ProfileRings, find_profile_rings
from saed.rings.geometry import MAX_AXIS_RATIO, RingGeometry, fit_ring_geometry, inversion_centre, trace_rings
from saed.simulate.rings import polar_coordinates
from saed.units import percent

__all__ = ["RingMeasurement", "ring_mask", "measure_rings", "SINGLE_CRYSTAL_COVERAGE"]

logger = logging.getLogger(__name__)

#: Median azimuthal coverage of the strong rings below which a pattern is a spot pattern, not rings.
SINGLE_CRYSTAL_COVERAGE = 0.3
#: Most rings traced for the geometry fit (the strongest).
MAX_TRACED_RINGS = 12


@dataclass(frozen=True, eq=False)
class RingMeasurement:
    """Everything measured on a ring pattern, in detector pixels.

    ``rings`` are in corrected radius (ellipse undone); ``geometry`` holds centre, ellipse and the
    azimuthal coverage of the traced rings; ``coverage`` is per ring of ``rings`` (NaN: not traced).
    """

    image_shape: tuple[int, int]
    geometry: RingGeometry
    profile: RadialProfile
    rings: ProfileRings
    coverage: np.ndarray
    mask: np.ndarray
    notes: tuple[str, ...] = field(default=())

    @property
    def center_px(self) -> tuple[float, float]:
        return self.geometry.center_px

    @property
    def ellipse(self) -> Ellipse:
        return self.geometry.ellipse


def ring_mask(image, *, mask=None) -> np.ndarray:
    """Pixels to ignore: `mask` | not finite | saturated | much darker than their ring neighbourhood.

    "Much darker": below 35 % of the median of pixels at the same distance from the image's
    brightness-weighted centre, after a Gaussian smoothing of 1.5 px (the beam stop and its rod
    transmit a few percent), dilated by 3 px.
    """
    img = np.asarray(image, dtype=np.float32)
    out = ~np.isfinite(img)
    if mask is not None:
        m = np.asarray(mask, bool)
        if m.shape != img.shape:
            raise InputError(f"mask shape {m.shape} differs from the image shape {img.shape}")
        out |= m
    finite = img[np.isfinite(img)]
    top = float(finite.max())
    sat = img >= top
    if sat.sum() > 4:  # a handful of pixels at the maximum value: saturated (or clipped) detector
        out |= ndimage.binary_dilation(sat, iterations=2)
    smooth = ndimage.gaussian_filter(np.where(np.isfinite(img), img, 0.0), 1.5)
    floor = float(np.percentile(finite, 0.5))
    ny, nx = img.shape
    yy, xx = np.mgrid[:ny, :nx]
    w = np.clip(smooth - floor, 0, None)
    tot = w.sum()
    cx, cy = (float((w * xx).sum() / tot), float((w * yy).sum() / tot)) if tot > 0 else ((nx - 1) / 2, (ny - 1) / 2)
    rr = np.hypot(xx - cx, yy - cy).astype(np.int64) // 4
    vals = smooth - floor
    ok = ~out
    med = np.zeros(int(rr.max()) + 1)
    # Median per ring of 4-px width (vectorised through sorting).
    order = np.argsort(rr[ok], kind="stable")
    r_sorted = rr[ok][order]
    v_sorted = vals[ok][order]
    bounds = np.searchsorted(r_sorted, np.arange(len(med) + 1))
    for k in range(len(med)):
        a, b = bounds[k], bounds[k + 1]
        med[k] = np.median(v_sorted[a:b]) if b > a else 0.0
    dark = vals < 0.35 * med[rr]
    dark = ndimage.binary_opening(dark, iterations=2)
    out |= ndimage.binary_dilation(dark, iterations=3)
    return out


def _spots_message(coverage: float, advice: str) -> str:
    return (f"the rings are made of isolated spots (the strongest cover {percent(coverage):.0f} % of the circle): "
            f"this looks like a single-crystal pattern; {advice}")


def _search_range(shape, center, mask, coords, img_for_range=None) -> tuple[float, float]:
    """Radii worth searching: beyond the beam stop and direct beam, inside the largest usable circle."""
    r, _ = coords
    valid = ~mask
    rb = r.astype(np.int64)
    n = int(rb.max()) + 1
    tot = np.bincount(rb.ravel(), minlength=n).astype(float)
    good = np.bincount(rb.ravel(), weights=valid.ravel().astype(float), minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(tot > 0, good / tot, 0.0)
    expected = 2 * np.pi * (np.arange(n) + 0.5)
    full = tot / np.maximum(expected, 1) > 0.25  # radius still (mostly) on the detector
    usable = (frac > 0.5) & full
    ny, nx = shape
    r_min = max(0.03 * min(nx, ny), 8.0)
    # beyond the last unusable radius in the inner third
    inner = np.nonzero(~usable[: max(int(n / 3), 1)])[0]
    if len(inner):
        r_min = max(r_min, float(inner[-1]) + 4.0)
    # beyond the brightest radius of the inner third (the beam-stop edge or the direct beam)
    ones = np.bincount(rb[valid], weights=img_for_range[valid], minlength=n) if img_for_range is not None else None
    if ones is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            prof = np.where(good > 0, ones / np.maximum(good, 1), 0.0)
        third = max(int(n / 3), 8)
        lp = np.log(np.clip(ndimage.gaussian_filter1d(prof[:third], 1.0), 1e-3, None))
        # A beam-stop edge is a step up of the profile (by more than 1.5x over 6 px).
        rise = lp[6:] - lp[:-6]
        start = 0
        if len(rise) and rise.max() > math.log(1.5):
            start = int(np.argmax(rise)) + 6
            r_min = max(r_min, start + max(6.0, 0.01 * min(nx, ny)))
        # The direct-beam tail: from there on, out to where the profile first falls slower than 5 % per px.
        fall = -(ndimage.gaussian_filter1d(lp, 2.0)[1:] - ndimage.gaussian_filter1d(lp, 2.0)[:-1])
        gentle = np.nonzero(fall[start:] < 0.05)[0]
        if len(gentle):
            r_min = max(r_min, float(start + gentle[0]) + 4.0)
    outer = np.nonzero(usable)[0]
    r_max = float(outer[-1]) if len(outer) else float(n)
    return r_min, r_max


def measure_rings(image, *, mask=None, center_px=None, ellipse: Ellipse | None = None, fit_ellipse: bool = True,
                  fit_center: bool = True, snr_min: float = 5.0, bin_px: float = 0.5,
                  allow_spots: bool = False, spots_advice: str = "use 'saed index'") -> RingMeasurement:
    """Centre, ellipse and rings of a polycrystalline ring pattern.

    Parameters
    ----------
    image : (ny, nx) array of counts
    mask : (ny, nx) bool, True = ignore (added to the automatic mask)
    center_px : centre hint (x, y): the symmetry centre is searched within 8 % of the image size of it,
        then refined (unless ``fit_center`` is False: then it is used as given)
    ellipse : known distortion (e.g. from a calibration file); fitted from the rings when None and
        ``fit_ellipse``
    snr_min : detection threshold of a ring in the radial profile (local-noise sigmas)
    allow_spots : accept a pattern whose rings are spotty (coarse-grained film) or even single spots
    spots_advice : what the message for a single-crystal pattern tells the operator to do

    Raises
    ------
    ImageError
        no rings; a single-crystal spot pattern (unless ``allow_spots``); rings too weak to trace.
    """
    img = np.asarray(image, dtype=np.float32)
    if img.ndim != 2:
        raise ImageError(f"expected a 2-D image, got shape {img.shape}")
    finite = img[np.isfinite(img)]
    if finite.size == 0 or float(finite.max()) == float(finite.min()):
        raise ImageError("the image is empty or uniform: no rings to measure")
    m = ring_mask(img, mask=mask)
    notes = []
    given_ellipse = ellipse
    ell = ellipse or Ellipse()
    if center_px is None:
        cen = inversion_centre(img, mask=m)
    else:
        cen = (float(center_px[0]), float(center_px[1]))
        if not (-0.5 * img.shape[1] <= cen[0] <= 1.5 * img.shape[1] and -0.5 * img.shape[0] <= cen[1] <= 1.5 * img.shape[0]):
            raise InputError(f"centre hint ({cen[0]:g}, {cen[1]:g}) px lies far outside the {img.shape[1]}x{img.shape[0]} image")
        if fit_center:
            # A hint (from --centre or a calibration file of another exposure) only narrows the search.
            cen = inversion_centre(img, mask=m, hint_px=cen, search_px=max(0.08 * min(img.shape), 16.0))
    do_ellipse = fit_ellipse and given_ellipse is None

    def profile_and_rings(c, e, width=None):
        coords = polar_coordinates(img.shape, c, e)
        r_lo, r_hi = _search_range(img.shape, c, m, coords, img)
        prof = radial_profile(img, center_px=c, ellipse=e, mask=m, bin_px=bin_px, r_max_px=r_hi + 1, _coords=coords)
        rings = find_profile_rings(prof, r_min_px=r_lo, r_max_px=r_hi, snr_min=snr_min, width_guess_px=width)
        return prof, rings

    prof, rings = profile_and_rings(cen, ell)
    if len(rings) == 0:
        raise ImageError("no rings found in the radial profile (nothing stands 5 sigma above the background)")
    # A quick look first: rings made of a few spots are a single crystal, not worth fitting.
    first = np.argsort(-rings.snr)[:6]
    _, _, cov0 = trace_rings(img, center_px=cen, ellipse=ell, radii_px=rings.radius_px[first],
                             widths_px=rings.width_px[first], mask=m)
    if not allow_spots and len(cov0) and float(np.median(cov0)) < SINGLE_CRYSTAL_COVERAGE:
        raise ImageError(_spots_message(float(np.median(cov0)), spots_advice) + " (or --spotty for a coarse-grained film)")
    geom = None
    for stage in ("coarse", "fine"):
        strong = np.argsort(-rings.snr)
        if stage == "coarse":
            # Inner strong rings first: an unknown ellipse smears outer rings the most.
            k = strong[: min(6, len(strong))]
        else:
            k = strong[rings.snr[strong] >= max(2 * snr_min, 10.0)][:MAX_TRACED_RINGS]
            if len(k) < 2:
                k = strong[: min(MAX_TRACED_RINGS, len(strong))]
        geom = fit_ring_geometry(img, center_px=cen, radii_px=rings.radius_px[k], widths_px=rings.width_px[k],
                                 ellipse=ell, mask=m, fit_ellipse=do_ellipse, fit_center=fit_center,
                                 n_iter=4 if stage == "coarse" else 3)
        cen, ell = geom.center_px, geom.ellipse
        if ell.axis_ratio > MAX_AXIS_RATIO - 1e-3:
            raise ImageError(f"the rings could not be traced reliably (the fitted distortion ran to the "
                             f"{percent(MAX_AXIS_RATIO - 1):.0f} % limit); give --centre X Y, or --no-ellipse")
        width = float(np.median(rings.width_px[k]))
        prof, rings = profile_and_rings(cen, ell, width)
        if len(rings) == 0:
            raise ImageError("the rings vanished after refining the centre: the pattern has no clear rings")
    coverage = np.full(len(rings), np.nan)
    for j, r in enumerate(geom.radius_px):
        if len(rings):
            i = int(np.argmin(np.abs(rings.radius_px - r)))
            if abs(rings.radius_px[i] - r) < 2 * rings.width_px[i] + 1:
                coverage[i] = geom.coverage[j]
    traced = np.isfinite(coverage)
    med_cov = float(np.median(coverage[traced])) if traced.any() else float("nan")
    if traced.any() and med_cov < SINGLE_CRYSTAL_COVERAGE:
        msg = _spots_message(med_cov, spots_advice)
        if not allow_spots:
            raise ImageError(msg + " (or --spotty for a coarse-grained film)")
        notes.append(msg)
    elif traced.any() and med_cov < 0.7:
        notes.append(f"spotty rings (the strongest cover {percent(med_cov):.0f} % of the circle): coarse grains or texture; "
                     "intensities are less reliable")
    if math.hypot(cen[0] - (img.shape[1] - 1) / 2, cen[1] - (img.shape[0] - 1) / 2) > 0.3 * min(img.shape):
        notes.append(f"the pattern centre ({cen[0]:.1f}, {cen[1]:.1f}) px is far from the image centre")
    return RingMeasurement(img.shape, geom, prof, rings, coverage, frozen_array(m), tuple(notes))

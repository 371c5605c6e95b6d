"""Pixels not to trust: saturated pixels, the beam-stop shadow, the detector border, a mask image.

Every mask here is a boolean array of the image's shape with True = ignore this pixel.

The beam-stop shadow is found automatically as a dark region that (1) is much darker than the haze
at the same distance from the centre, (2) comes close to the centre, (3) is long and narrow (a rod
or a wedge), and (4) is then extended along its straight edges to the border of the detector, where
the haze is too faint to show it. See :func:`find_beam_stop`.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi

from saed.image.binning import (Binned, median_in_place, percentile_in_place, radial_quantile_profile, radius_map,
                                without_nan)

__all__ = ["BeamStopShadow", "saturation_mask", "border_mask", "find_beam_stop", "NOMINAL_FULL_SCALES"]

logger = logging.getLogger(__name__)

#: Full-scale values of common detector and file types (8 to 32-bit integers).
NOMINAL_FULL_SCALES = (255.0, 1023.0, 4095.0, 16383.0, 65535.0, 4294967295.0)


def saturation_mask(image: np.ndarray, *, level: float | None = None, min_plateau_px: int = 3) -> tuple[np.ndarray, float | None]:
    """Pixels at the clipping level, grown by one pixel; returns (mask, level or None).

    Without `level`, the image maximum counts as a clipping level when at least `min_plateau_px`
    pixels touching one another share it exactly (a flat top no real spot profile has), or when it
    is a nominal full scale (:data:`NOMINAL_FULL_SCALES`) reached by any pixel.
    """
    hi = float(image.max()) if level is None else float(level)
    rr, cc = np.nonzero(image >= hi)
    n = len(rr)
    if n == 0:
        return np.zeros(image.shape, bool), None
    if level is None and hi not in NOMINAL_FULL_SCALES:
        if n < min_plateau_px:
            return np.zeros(image.shape, bool), None
        # Largest 8-connected group of the maximum pixels (few pixels: label a small bounding box).
        r0, c0 = rr.min(), cc.min()
        box = np.zeros((rr.max() - r0 + 1, cc.max() - c0 + 1), bool)
        box[rr - r0, cc - c0] = True
        if box.size > 4_000_000:
            return np.zeros(image.shape, bool), None
        lab, nlab = ndi.label(box, structure=np.ones((3, 3)))
        if np.bincount(lab.ravel())[1:].max() < min_plateau_px:
            return np.zeros(image.shape, bool), None
    mask = np.zeros(image.shape, bool)
    rows, cols = image.shape
    for dr in (-1, 0, 1):
        for dc in (-1, 0, 1):
            mask[np.clip(rr + dr, 0, rows - 1), np.clip(cc + dc, 0, cols - 1)] = True
    return mask, hi


def border_mask(image: np.ndarray, *, border_px: int = 2) -> np.ndarray:
    """The outer `border_px` pixels, plus whole edge rows/columns that hold one constant value (a blank frame)."""
    rows, cols = image.shape
    mask = np.zeros((rows, cols), bool)
    b = int(border_px)
    if b > 0:
        mask[:b, :] = mask[-b:, :] = True
        mask[:, :b] = mask[:, -b:] = True
    # Blank frame: edge rows/columns holding one value, examined from each edge inward.
    def _count(get, n):
        k = 0
        while k < n // 4:
            line = get(k)
            if line.max() != line.min():
                break
            k += 1
        return k

    top = _count(lambda k: image[k, :], rows)
    bottom = _count(lambda k: image[rows - 1 - k, :], rows)
    left = _count(lambda k: image[:, k], cols)
    right = _count(lambda k: image[:, cols - 1 - k], cols)
    if top:
        mask[:top, :] = True
    if bottom:
        mask[rows - bottom:, :] = True
    if left:
        mask[:, :left] = True
    if right:
        mask[:, cols - right:] = True
    return mask


@dataclass(frozen=True)
class BeamStopShadow:
    """A found beam-stop shadow: its mask (full resolution) and its straight-band description.

    angle_deg: direction from the centre toward the border along the rod (from +x toward +y);
    width_px: mean width of the band; reach_px: how close to the centre the shadow comes.
    """

    mask: np.ndarray
    angle_deg: float
    width_px: float
    reach_px: float


def _nan_smooth(img: np.ndarray, sigma: float) -> np.ndarray:
    fin = np.isfinite(img)
    w = fin.astype(np.float32)
    v = np.where(fin, img, 0.0).astype(np.float32, copy=False)
    num = ndi.gaussian_filter(v, sigma, mode="nearest")
    den = ndi.gaussian_filter(w, sigma, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[den < 1e-3] = np.nan
    return out


def find_beam_stop(binned: Binned, center_px, *, max_contrast: float = 0.4, margin_px: float = 3.0,
                   radius: np.ndarray | None = None) -> BeamStopShadow | None:
    """Find a beam-stop shadow on the block-averaged image; None when there is none.

    Parameters
    ----------
    binned : Binned
        Block means of the image (saturated pixels excluded).
    center_px : (2,) float
        Rough pattern centre, full-resolution pixels.
    max_contrast : float
        A block belongs to the shadow when its level above the darkest level is below this fraction
        of the haze level above the darkest level at the same radius.
    margin_px : float
        Extra width added on each side of the band (penumbra), full-resolution pixels.
    radius : (nr, nc) array, optional
        ``radius_map(binned, center_px)`` when the caller has it already (it is the same for the
        background's block image when the two share their blocks).

    Notes
    -----
    The haze level at each radius is the upper quartile of the smoothed block image in that ring (the
    shadow takes at most half of a ring outside its tip), held at least as high as any ring further
    out (rings inside the rounded tip are wholly dark). Blocks where the haze is not clearly above the darkest level (five times
    the block noise) cannot show a shadow and are not considered. Of the dark connected regions, the
    one that comes within 6 % of the image size of the centre, is at least three times longer than
    wide (principal axes) and reaches outward at least 12 % of the image size is taken. Its two edges
    are fitted with straight lines (least squares on the edge position per slice along the rod), and
    the band between them (plus `margin_px`) is extended to the border.
    """
    img = binned.image
    f = binned.factor
    nr, nc = img.shape
    if min(nr, nc) < 24:
        return None
    cxb, cyb = binned.to_binned_px(center_px[0], center_px[1])
    sm = _nan_smooth(img, 1.0)
    finite = np.isfinite(sm)
    if finite.sum() < 100:
        return None
    r = radius_map(binned, center_px) if radius is None else radius
    # Haze reference per radius: the upper quartile of each ring (the shadow may cover half of a small
    # ring), made non-increasing outward from the inside (rings wholly inside the rod's tip take the
    # level just outside it).
    rc, prof = radial_quantile_profile(sm[finite], r[finite], q=0.75, bin_width=1.0, min_count=8)
    if len(rc) < 8:
        return None
    prof = np.maximum.accumulate(prof[::-1])[::-1]
    haze = np.interp(r, rc, prof)
    # np.nanpercentile(sm, 0.5) and the nanmedians: the same partitions of the non-NaN values, in the
    # order numpy leaves them (without_nan: copies of this function's own, partitioned in place)
    dark = float(percentile_in_place(without_nan(sm), 0.5))
    resid = without_nan(img - sm)
    med = median_in_place(resid)
    np.subtract(resid, med, out=resid)
    np.abs(resid, out=resid)
    noise = 1.4826 * float(median_in_place(resid)) + 1e-12
    contrast = haze
    contrast -= dark  # haze - dark (haze is not used again)
    cand = finite & (contrast > 5.0 * noise) & ((sm - dark) < max_contrast * contrast)
    if not cand.any():
        return None
    cand = ndi.binary_opening(cand, iterations=1)
    lab, nlab = ndi.label(cand)
    if nlab == 0:
        return None
    size_b = float(min(nr, nc))
    best = None
    idx = np.arange(1, nlab + 1)
    rmin = ndi.minimum(r, lab, idx)
    rmax = ndi.maximum(r, lab, idx)
    area = ndi.sum_labels(np.ones_like(r), lab, idx)
    for k, rmn, rmx, a in zip(idx, rmin, rmax, area):
        if rmn > max(4.0, 0.06 * size_b) or rmx < 0.12 * size_b or a < 20:
            continue
        if best is None or a > best[1]:
            best = (k, a)
    if best is None:
        return None
    comp = ndi.binary_fill_holes(ndi.binary_closing(lab == best[0], iterations=2))
    py, px = np.nonzero(comp)
    dx, dy = px - cxb, py - cyb
    cov = np.cov(np.stack([dx, dy]))
    evals, evecs = np.linalg.eigh(cov)
    if evals[0] <= 0 or math.sqrt(evals[1] / max(evals[0], 1e-9)) < 3.0:
        logger.debug("dark region near the centre is not rod-like (axes %s); not taken as a beam stop", evals)
        return None
    u = evecs[:, 1]
    if float(np.mean(dx * u[0] + dy * u[1])) < 0:
        u = -u
    v = np.array([-u[1], u[0]])
    t = dx * u[0] + dy * u[1]
    w = dx * v[0] + dy * v[1]
    # Edge positions per slice along the rod, away from the rounded tip.
    width_guess = float(np.percentile(w, 95) - np.percentile(w, 5))
    tb = np.floor(t / 2.0).astype(int)
    ts, lo, hi = [], [], []
    for b in np.unique(tb):
        sel = tb == b
        tc = float(t[sel].mean())
        if sel.sum() < 2 or tc < t.min() + width_guess:
            continue
        ts.append(tc)
        lo.append(float(w[sel].min()))
        hi.append(float(w[sel].max()))
    if len(ts) >= 3:
        pl = np.polyfit(ts, lo, 1)
        ph = np.polyfit(ts, hi, 1)
    else:
        pl = np.array([0.0, float(np.min(w))])
        ph = np.array([0.0, float(np.max(w))])
    m = margin_px / f + 0.5
    yy, xx = np.mgrid[0:nr, 0:nc].astype(np.float32)
    tt = (xx - cxb) * u[0] + (yy - cyb) * u[1]
    ww = (xx - cxb) * v[0] + (yy - cyb) * v[1]
    band = (tt >= float(t.min())) & (ww >= np.polyval(pl, tt) - m) & (ww <= np.polyval(ph, tt) + m)
    shadow = ndi.binary_dilation(comp | band, iterations=max(1, int(math.ceil(margin_px / f))))
    full = np.repeat(np.repeat(shadow, f, axis=0), f, axis=1)[: binned.full_shape[0], : binned.full_shape[1]]
    width = float(np.mean(np.polyval(ph, ts) - np.polyval(pl, ts))) * f if len(ts) >= 3 else width_guess * f
    angle = math.degrees(math.atan2(u[1], u[0])) % 360.0
    reach = float(max(r[comp].min(), 0.0)) * f
    logger.info("beam stop found: towards %.0f deg, %.0f px wide, reaching %.0f px from the centre", angle, width, reach)
    return BeamStopShadow(mask=full, angle_deg=angle, width_px=width, reach_px=reach)

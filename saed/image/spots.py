"""Spot detection with a noise-aware threshold, then sub-pixel measurement of every candidate.

Detection
---------
The image (masked pixels replaced by the background, so mask edges make no spots) is smoothed with a
Gaussian of the spot's own width, which is the matched filter for a Gaussian spot in white noise, and
the background is subtracted. A pixel is a candidate where this exceeds ``detect_snr`` times the noise
of the smoothed image; that noise is the pixel noise of the detector's noise model times a factor
measured on the smoothed image itself (robust scatter on a sparse grid), so correlated detector noise
is accounted for. Candidates are the local maxima (8 neighbours) among them, strongest first, with
weaker maxima closer than 1.5 spot widths dropped.

The spot width is estimated first from the 30 strongest blobs of the block-averaged image by
adaptive Gaussian-weighted second moments (the weight width follows the measured width; for a
Gaussian spot of width s and weight width w the weighted moment is s^2 w^2 / (s^2 + w^2), which
is inverted) [1]_.

Measurement
-----------
Every candidate is fitted (:func:`saed.image.spotfit.fit_spots`); kept are fits that converged near
their start, with a peak signal-to-noise ratio ``snr = A / sigma_pixel(b0)`` of at least
``snr_min``, and not narrower than half the typical width and 0.45 px (single hot pixels and X-ray
hits). Fits closer than one spot width to a stronger one are merged into it.

References
----------
.. [1] G. M. Bernstein and M. Jarvis, "Shapes and shears, stars and smears: optimal measurements
   for weak lensing", Astron. J. 123, 583-618 (2002), :doi:`10.1086/338085` (adaptive moments).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi

from saed.image.background import Background, robust_sigma
from saed.image.binning import Binned, _block_sum, median_of, upsample_bilinear
from saed.image.nearby import close_pairs, self_pairs
from saed.image.spotfit import SpotFits, fit_spots, window_stack

__all__ = ["SpotSearch", "estimate_spot_sigma", "detect_candidates", "find_spots"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True, eq=False)
class SpotSearch:
    """Everything :func:`find_spots` found: kept fits, the width used, candidate and rejection counts."""

    fits: SpotFits
    snr: np.ndarray
    saturated: np.ndarray
    sigma_px: float
    n_candidates: int
    n_hot: int
    n_weak: int


def _adaptive_width(image, valid, x, y, *, half: int = 16, iterations: int = 8) -> np.ndarray:
    """Gaussian-equivalent width s (px) of blobs at (x, y) by adaptive weighted second moments; NaN if it fails."""
    ix, iy = np.rint(x).astype(np.int64), np.rint(y).astype(np.int64)
    data, mask = window_stack(image, valid, ix, iy, half)
    off = np.arange(-half, half + 1, dtype=np.float64)
    X, Y = np.meshgrid(off, off)
    r = np.hypot(X, Y)
    ring = (r > 0.8 * half) & (r <= half)
    out = np.full(len(ix), np.nan)
    for k in range(len(ix)):
        m = mask[k]
        if (m & ring).sum() < 8:
            continue
        b = float(median_of(data[k][m & ring]))
        v = np.where(m, data[k] - b, 0.0)
        cx, cy, w, s = 0.0, 0.0, 2.0, float("nan")
        for _ in range(iterations):
            wt = np.exp(-((X - cx) ** 2 + (Y - cy) ** 2) / (2.0 * w * w)) * np.clip(v, 0.0, None)
            tot = wt.sum()
            if tot <= 0:
                break
            cx, cy = float((wt * X).sum() / tot), float((wt * Y).sum() / tot)
            if abs(cx) > half / 2 or abs(cy) > half / 2:
                break
            m2 = float((wt * ((X - cx) ** 2 + (Y - cy) ** 2)).sum() / tot) / 2.0
            if m2 >= 0.95 * w * w:
                w *= 1.6
                if w > half / 1.5:
                    break
                continue
            s = math.sqrt(m2 * w * w / (w * w - m2))
            w_new = max(1.2, 1.5 * s)
            if abs(w_new - w) < 0.02 * w:
                break
            w = w_new
        out[k] = s
    return out


def estimate_spot_sigma(image, valid, background: Background, binned: Binned, center_px, *, n: int = 30) -> float | None:
    """Typical Gaussian-equivalent spot width (px) from the strongest blobs; None when there are none.

    Seeds are the strongest local maxima of the block image (more than 8 noise sigmas above the
    background, away from the centre where the haze is steepest); each is measured by adaptive
    moments, and a Gaussian-on-a-plane fit started from that width confirms it (the plane absorbs a
    haze gradient that the moments would take for width). The median of the confirmed widths is
    returned.
    """
    lev = background.level_binned
    f = binned.factor
    sig = background.sigma_binned / f
    z = (binned.image - lev) / sig
    z = np.where(np.isfinite(z) & (binned.valid_fraction >= 0.99), z, -np.inf)
    ii, jj = np.nonzero(z > 8.0)
    # local maxima among those (8 neighbours; edges held)
    nr, nc = z.shape
    is_max = np.ones(len(ii), bool)
    for di in (-1, 0, 1):
        for dj in (-1, 0, 1):
            if di or dj:
                nb = z[np.clip(ii + di, 0, nr - 1), np.clip(jj + dj, 0, nc - 1)]
                is_max &= z[ii, jj] >= nb
    ii, jj = ii[is_max], jj[is_max]
    if len(ii) == 0:
        return None
    xs, ys = binned.to_full_px(jj, ii)
    rows, cols = image.shape
    far = np.hypot(xs - center_px[0], ys - center_px[1]) > max(4.0 * f + 6.0, 0.05 * min(rows, cols))
    ii, jj = ii[far], jj[far]
    if len(ii) == 0:
        return None
    order = np.argsort(-z[ii, jj])[:n]
    # Refine each seed to the brightest full-resolution pixel of its block.
    sx, sy = [], []
    for k in order:
        r0, c0 = ii[k] * f, jj[k] * f
        blk = image[r0:r0 + f, c0:c0 + f]
        if blk.size == 0:
            continue
        a, b = np.unravel_index(int(np.argmax(blk)), blk.shape)
        sx.append(c0 + b)
        sy.append(r0 + a)
    sx, sy = np.array(sx, float), np.array(sy, float)
    widths = _adaptive_width(image, valid, sx, sy)
    good = np.isfinite(widths) & (widths > 0.3)
    if not good.any():
        return None
    w0 = float(median_of(widths[good]))
    half = int(np.clip(math.ceil(3.0 * w0 + 3.0), 5, 24))
    fits = fit_spots(image, valid, sx, sy, sigma0_px=w0, half_px=half, gain=background.gain,
                     offset_var=background.offset_var, var_floor=background.var_floor)
    ok = fits.ok & (fits.width_px > 0.45) & (fits.width_px < half / 2.0)
    if ok.any():
        # Confirmed widths only: with few lattice spots the unconfirmed moments of haze blobs can
        # outnumber them (two 1.5 px spots and four 8 px blobs gave a median of 7.6 px and then no
        # spots at all).
        return float(median_of(fits.width_px[ok]))
    return w0


def detect_candidates(image, valid, background: Background, *, sigma_px: float, detect_snr: float = 5.0,
                      max_candidates: int = 6000):
    """Local maxima of the matched-filtered image above `detect_snr` noise sigmas: (x, y, detection snr, rho).

    `rho` is the measured noise of the smoothed image relative to the pixel noise. Spots wider than
    1.4 px on images of 1024 pixels or more are searched on 2 x 2 block means (a quarter of the
    work; the matched filter then has width sqrt((s^2 + 1/4) / 4) blocks); positions are refined at
    full resolution by the fits anyway.
    """
    f = background.factor
    lev_b = background.level_binned
    rows, cols = image.shape
    filled = np.array(image, dtype=np.float32, copy=True)
    bad_r, bad_c = np.nonzero(~valid)
    if len(bad_r):
        # masked pixels take the background of their block, so mask edges make no spots
        filled[bad_r, bad_c] = lev_b[np.minimum(bad_r // f, lev_b.shape[0] - 1), np.minimum(bad_c // f, lev_b.shape[1] - 1)]
    k = 2 if (sigma_px >= 1.4 and min(rows, cols) >= 1024 and f % 2 == 0) else 1
    if k == 2:
        r2, c2 = rows // 2, cols // 2
        work = _block_sum(filled[: 2 * r2, : 2 * c2], r2, c2, 2) * 0.25
        vwork = _block_sum(valid[: 2 * r2, : 2 * c2].astype(np.float32), r2, c2, 2) > 3.5
        s_work = math.sqrt((float(sigma_px) ** 2 + 0.25) / 4.0)
    else:
        work, vwork, s_work = filled, valid, float(sigma_px)
    wr, wc = work.shape
    fw = f // k  # blocks of the background in units of the working grid
    g = ndi.gaussian_filter(work, s_work, truncate=3.0, mode="nearest")
    # Noise of the smoothed image relative to the pixel noise, measured on a sparse grid of calm pixels.
    step = 7
    gr, gc = np.mgrid[step // 2:wr:step, step // 2:wc:step]
    lv = lev_b[np.minimum(gr // fw, lev_b.shape[0] - 1), np.minimum(gc // fw, lev_b.shape[1] - 1)]
    zs = ((g[gr, gc] - lv) / background.sigma(lv))[vwork[gr, gc]]
    rho_white = 1.0 / (2.0 * math.sqrt(math.pi) * max(float(sigma_px), 0.5))
    rho = robust_sigma(zs) if zs.size > 100 else rho_white
    rho = max(rho, 0.5 * rho_white)
    # Threshold map on the blocks, interpolated: background + detect_snr * rho * pixel noise.
    thr_b = (lev_b + detect_snr * rho * background.sigma_binned).astype(np.float32)
    thr = upsample_bilinear(thr_b, fw, (wr, wc))
    cand = (g > thr) & vwork
    cand[0, :] = cand[-1, :] = cand[:, 0] = cand[:, -1] = False
    flat = np.flatnonzero(cand)
    if flat.size == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0), rho
    gf = g.ravel()
    v = gf[flat]
    is_max = np.ones(flat.size, bool)
    for d in (-wc - 1, -wc, -wc + 1, -1, 1, wc - 1, wc, wc + 1):
        nb = gf[flat + d]
        is_max &= (v > nb) | ((v == nb) & (d > 0))
    flat = flat[is_max]
    yy, xx = np.divmod(flat, wc)
    y = yy * k + (k - 1) / 2.0
    x = xx * k + (k - 1) / 2.0
    lv = background.at(x, y)
    zz = (gf[flat] - lv) / (rho * background.sigma(lv))
    order = np.argsort(-zz)[:max_candidates]
    x, y, zz = x[order], y[order], zz[order]
    # Non-maximum suppression within 1.5 spot widths (greedy, strongest first).
    r_nms = max(2.0, 1.5 * float(sigma_px))
    pts = np.stack([x, y], axis=1)
    keep = np.ones(len(x), bool)
    pi, pj, _ = self_pairs(pts, r_nms)  # i < j: j is the weaker of the two
    starts = np.searchsorted(pi, np.arange(len(x) + 1))
    for i in np.unique(pi):
        if keep[i]:
            keep[pj[starts[i]:starts[i + 1]]] = False
    return x[keep].astype(float), y[keep].astype(float), zz[keep], rho


def _replace_rows(fits: SpotFits, rows: np.ndarray, new: SpotFits) -> SpotFits:
    """`fits` with `rows` replaced by the rows of `new` where those converged."""
    take = rows[new.ok]
    src = np.flatnonzero(new.ok)
    cols = {}
    for name in ("x_px", "y_px", "sigma_xy_px", "amplitude", "width_px", "background", "intensity",
                 "intensity_sigma", "chi2_red", "n_masked", "ok"):
        a = np.array(getattr(fits, name), copy=True)
        a[take] = getattr(new, name)[src]
        cols[name] = a
    return SpotFits(**cols)


def find_spots(image, valid, background: Background, *, sigma_px: float, snr_min: float = 3.0,
               detect_snr: float = 5.0, saturated_mask: np.ndarray | None = None) -> SpotSearch:
    """Detect and measure spots (see the module notes).

    `valid` excludes masked and saturated pixels from the fits; saturated pixels still take part in
    the detection (a clipped spot is a bright blob, not a hole).
    """
    detect_valid = valid if saturated_mask is None else valid | saturated_mask
    x, y, zdet, rho = detect_candidates(image, detect_valid, background, sigma_px=sigma_px, detect_snr=detect_snr)
    half = int(np.clip(math.ceil(3.0 * sigma_px + 1.0), 3, 24))
    fits = fit_spots(image, valid, x, y, sigma0_px=sigma_px, half_px=half, gain=background.gain,
                     offset_var=background.offset_var, var_floor=background.var_floor)
    # Spots wider than the window holds (spots of different sizes): fit again in windows sized to them.
    # (A flat disc filling the window drives the width up and the fit off: those are refitted too,
    # from their candidate positions.)
    big = np.isfinite(fits.width_px) & (fits.width_px > 0.4 * half) & (fits.amplitude > 0)
    if big.any():
        w_big = np.minimum(fits.width_px[big], 13.0)
        s_big = float(median_of(w_big))
        half2 = int(np.clip(math.ceil(3.0 * float(np.percentile(w_big, 90)) + 1.0), half + 1, 40))
        sx = np.where(fits.ok[big], fits.x_px[big], x[big])
        sy = np.where(fits.ok[big], fits.y_px[big], y[big])
        refit = fit_spots(image, valid, sx, sy, sigma0_px=s_big, half_px=half2,
                          gain=background.gain, offset_var=background.offset_var, var_floor=background.var_floor)
        fits = _replace_rows(fits, np.flatnonzero(big), refit)
    n_cand = len(x)
    noise = background.sigma(np.maximum(fits.background, 0.0) if len(fits) else np.zeros(0))
    snr = fits.amplitude / np.maximum(noise, 1e-12)
    moved = np.hypot(fits.x_px - x, fits.y_px - y) if n_cand else np.zeros(0)
    ok = fits.ok & (moved <= max(2.0, 1.5 * sigma_px))
    hot = ok & (fits.width_px < max(0.45, 0.5 * sigma_px))
    weak = ok & ~hot & (snr < snr_min)
    keep = ok & ~hot & ~weak
    # Merge fits that landed on the same spot (keep the stronger).
    idx = np.flatnonzero(keep)
    if len(idx) > 1:
        pts = np.stack([fits.x_px[idx], fits.y_px[idx]], axis=1)
        order = idx[np.argsort(-snr[idx])]
        pos = {int(k): i for i, k in enumerate(idx)}
        alive = np.ones(len(idx), bool)
        r_merge = max(1.0, float(sigma_px))
        ci, cj, _ = close_pairs(pts, pts, r_merge)
        starts = np.searchsorted(ci, np.arange(len(idx) + 1))
        for k in order:
            i = pos[int(k)]
            if not alive[i]:
                continue
            nbrs = cj[starts[i]:starts[i + 1]]
            alive[nbrs[nbrs != i]] = False
        keep[idx[~alive]] = False
    sat = np.zeros(n_cand, bool)
    if saturated_mask is not None and n_cand and saturated_mask.any():
        ixs, iys = np.rint(fits.x_px).astype(np.int64), np.rint(fits.y_px).astype(np.int64)
        win, _ = window_stack(saturated_mask, None, ixs, iys, half)
        off = np.arange(-half, half + 1)
        r2 = off[None, :] ** 2 + off[:, None] ** 2
        r_ap = np.minimum(3.0 * fits.width_px, half)
        sat = ((win > 0) & (r2[None] <= (r_ap**2)[:, None, None])).any(axis=(1, 2))
    sel = np.flatnonzero(keep)
    sub = SpotFits(*(getattr(fits, f)[sel] for f in ("x_px", "y_px", "sigma_xy_px", "amplitude", "width_px",
                                                       "background", "intensity", "intensity_sigma", "chi2_red",
                                                       "n_masked", "ok")))
    logger.debug("spots: %d candidates, %d kept, %d hot pixels, %d below snr %.1f", n_cand, len(sel),
                 int(hot.sum()), int(weak.sum()), snr_min)
    return SpotSearch(fits=sub, snr=snr[sel], saturated=sat[sel], sigma_px=float(sigma_px), n_candidates=n_cand,
                      n_hot=int(hot.sum()), n_weak=int(weak.sum()))

"""The diffuse background (inelastic haze) and the noise model of a recorded pattern.

Background
----------
The haze falls off with distance from the centre and varies slowly around it (an elliptical
projector, a thickness gradient), while the spots are small. So the background is built in two
layers on the block-averaged image (:mod:`saed.image.binning`):

1. a radial median profile about the centre: the median of each one-block-wide ring, which the
   spots (a minority of every ring) cannot pull up;
2. a smooth residual: the block image minus that profile, with blocks that stand out (spots,
   more than 3 robust sigmas above the ring's residual) given zero weight, smoothed by a normalised
   Gaussian of 6 blocks.

The full-resolution background is their sum, interpolated bilinearly. Spot intensities do not use it:
each spot gets its own local background plane from its fit (:mod:`saed.image.spotfit`).

Noise
-----
Counting detectors follow variance = gain x level + offset (Poisson electrons times a gain plus read
noise; the offset also absorbs the dark level). The robust standard deviation (1.4826 x the median
absolute deviation) of pixel residuals is measured in 16 bins of background level and the line is
fitted by weighted least squares, so the noise is known everywhere from the background alone.

References
----------
.. [1] P. J. Rousseeuw and C. Croux, "Alternatives to the median absolute deviation",
   J. Am. Stat. Assoc. 88, 1273-1283 (1993), :doi:`10.1080/01621459.1993.10476408`.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import ndimage as ndi

from saed.image.binning import (Binned, _block_sum, _pad_to_blocks, median_in_place, median_of, radial_quantile_profile,
                                radius_map, upsample_bilinear)

__all__ = ["Background", "estimate_background", "robust_sigma", "MAD_TO_SIGMA"]

logger = logging.getLogger(__name__)

#: Median absolute deviation -> standard deviation for Gaussian noise [1]_.
MAD_TO_SIGMA = 1.4826


def robust_sigma(values) -> float:
    """1.4826 x median absolute deviation of the finite `values` (0 for none)."""
    v = np.asarray(values, np.float64).ravel()
    fin = np.isfinite(v)
    if not fin.all():
        v = v[fin]
    if v.size == 0:
        return 0.0
    return _mad_sigma(v)


def _mad_sigma(v: np.ndarray) -> float:
    """robust_sigma of a non-empty 1-D float64 array known to be finite."""
    return MAD_TO_SIGMA * float(median_of(np.abs(v - median_of(v))))


@dataclass(frozen=True, eq=False)
class Background:
    """Background per block, the radial profile it started from, and the noise model var = gain*level + offset.

    level_binned : (nr, nc) background counts per pixel, per block; factor, full_shape : of the binning;
    radius_px, radial_level : the radial median profile (full-resolution pixels, counts per pixel);
    gain : variance per count of level; offset_var : variance at level 0 (counts^2).
    """

    level_binned: np.ndarray
    factor: int
    full_shape: tuple[int, int]
    radius_px: np.ndarray
    radial_level: np.ndarray
    gain: float
    offset_var: float
    center_px: tuple[float, float]
    var_floor: float = 1e-6

    def full(self) -> np.ndarray:
        """(rows, cols) float32 background at full resolution."""
        return upsample_bilinear(self.level_binned, self.factor, self.full_shape)

    def sigma(self, level) -> np.ndarray:
        """Pixel noise (1 sigma, counts) where the expected value is `level`."""
        lv = np.asarray(level, np.float64)
        return np.sqrt(np.maximum(self.gain * lv + self.offset_var, self.var_floor))

    @cached_property
    def sigma_binned(self) -> np.ndarray:
        """``sigma(level_binned)``, computed once (the spot width and the detection both need it); read-only."""
        out = self.sigma(self.level_binned)
        out.setflags(write=False)
        return out

    def at(self, x_px, y_px) -> np.ndarray:
        """Background at points (nearest block)."""
        f = self.factor
        nr, nc = self.level_binned.shape
        j = np.clip(np.floor(np.asarray(x_px) / f).astype(np.int64), 0, nc - 1)
        i = np.clip(np.floor(np.asarray(y_px) / f).astype(np.int64), 0, nr - 1)
        return self.level_binned[i, j]


def _fill_nan(a: np.ndarray) -> np.ndarray:
    bad = ~np.isfinite(a)
    if not bad.any():
        return a
    if bad.all():
        return np.zeros_like(a)
    idx = ndi.distance_transform_edt(bad, return_distances=False, return_indices=True)
    return a[tuple(idx)]


def estimate_background(image: np.ndarray, binned: Binned, center_px, *, valid: np.ndarray | None = None,
                        smooth_blocks: float = 6.0, radius: np.ndarray | None = None) -> Background:
    """Background of `image` about `center_px` from its block means `binned` (see the module notes).

    Parameters
    ----------
    image : (rows, cols) float32, the full-resolution pattern (for the noise model)
    binned : Binned, block means of the valid pixels
    center_px : (2,) rough centre, pixels
    valid : (rows, cols) bool, pixels to use (None: all)
    smooth_blocks : float, Gaussian width of the residual smoothing, in blocks
    radius : (nr, nc) array, optional: ``radius_map(binned, center_px)`` when the caller has it already
    """
    img_b = binned.image
    f = binned.factor
    nr, nc = img_b.shape
    rb = radius_map(binned, center_px) if radius is None else radius
    ok = np.isfinite(img_b) & (binned.valid_fraction >= 0.5)
    # Every block near the centre, where the haze is steep; every other one (each way) further out,
    # where a ring holds thousands of blocks anyway.
    prof_sel = ok.copy()
    if ok.sum() > 40000:
        far = rb > 64.0
        prof_sel[1::2, :] &= ~far[1::2, :]
        prof_sel[:, 1::2] &= ~far[:, 1::2]
    rc, prof = radial_quantile_profile(img_b[prof_sel], rb[prof_sel], q=0.5, bin_width=1.0, min_count=3)
    if len(rc) == 0:
        rc, prof = np.array([0.0]), np.array([float(np.nanmedian(img_b))])
    radial = np.interp(rb, rc, prof).astype(np.float32)
    resid = img_b - radial
    # (the temporaries below are made in place where the same operation gives the same values:
    # on a 256 x 256 frame each fresh array costs its memory pages again, frame after frame)
    # Robust spread of the residual per ring, to tell spot blocks from haze blocks.
    sub = ok.copy()
    if ok.sum() > 40000:  # the spread varies slowly: every other block in each direction is enough
        sub[1::2, :] = False
        sub[:, 1::2] = False
    rr2, spread = radial_quantile_profile(np.abs(resid[sub]), rb[sub], q=0.5, bin_width=4.0, min_count=8)
    if len(rr2):
        ring_sigma = np.interp(rb, rr2, spread)
        ring_sigma *= MAD_TO_SIGMA
    else:
        ring_sigma = np.full(rb.shape, robust_sigma(resid[ok]))
    np.maximum(ring_sigma, 1e-6, out=ring_sigma)
    ring_sigma *= 3.0  # the spot threshold: 3 ring sigmas
    calm = np.abs(resid) < ring_sigma
    calm &= ok
    smooth = _smooth_weighted(np.where(calm, resid, 0.0).astype(np.float32, copy=False), calm.astype(np.float32),
                              smooth_blocks)
    level = radial + smooth
    level = level.astype(np.float32, copy=False)

    gain, offset, floor = _noise_model(image, level, calm, f, valid)
    return Background(level_binned=level, factor=f, full_shape=tuple(image.shape),
                      radius_px=np.asarray(rc) * f, radial_level=np.asarray(prof, float), gain=gain, offset_var=offset,
                      center_px=(float(center_px[0]), float(center_px[1])), var_floor=floor)


def _smooth_weighted(values: np.ndarray, weights: np.ndarray, sigma: float) -> np.ndarray:
    """Normalised Gaussian smoothing (sum w v * G / sum w * G); NaN-free (gaps take the nearest value).

    A wide kernel (sigma >= 4 blocks) is applied on 2 x 2 coarser blocks and interpolated back, which
    changes nothing a smooth background could show and costs an eighth.
    """
    nr, nc = values.shape
    if sigma >= 4.0 and min(nr, nc) >= 64:
        mr, mc = -(-nr // 2), -(-nc // 2)
        vw = _pad_to_blocks(values * weights, mr, mc, 2)  # zero padding, when the size is odd
        ww = _pad_to_blocks(weights, mr, mc, 2)
        num = ndi.gaussian_filter(_block_sum(vw, mr, mc, 2), sigma / 2.0, mode="nearest")
        den = ndi.gaussian_filter(_block_sum(ww, mr, mc, 2), sigma / 2.0, mode="nearest")
        with np.errstate(invalid="ignore", divide="ignore"):
            sm = np.where(den > 0.2, num / np.maximum(den, 1e-6), np.nan).astype(np.float32)
        return upsample_bilinear(_fill_nan(sm), 2, (nr, nc))
    num = ndi.gaussian_filter(values * weights, sigma, mode="nearest")
    den = ndi.gaussian_filter(weights, sigma, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = np.where(den > 0.05, num / np.maximum(den, 1e-6), np.nan).astype(np.float32)
    return _fill_nan(sm)


def _level_bins(lv: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """(n,) int16 bin of each level between sorted `edges` (at most 32767 of them):
    ``np.clip(np.searchsorted(edges, lv, side="right") - 1, 0, len(edges) - 2)``.

    Without NaN that is the number of inner edges at or below the level, counted with one comparison
    pass per edge (a third less CPU than the binary search on 60000 levels and 17 edges); with NaN,
    the binary search itself. Held to it by tests/test_image_same_bits.py.
    """
    if len(edges) > 2 and np.isfinite(edges).all() and np.isfinite(lv).all():
        which = np.zeros(lv.shape, np.int16)
        for e in edges[1:-1]:
            which += lv >= e
        return which
    return np.clip(np.searchsorted(edges, lv, side="right") - 1, 0, max(len(edges) - 2, 0)).astype(np.int16)


def _level_groups(lv: np.ndarray, res: np.ndarray, nb: int):
    """The noise model's level bins from one counting sort; None where that cannot promise numpy's values.

    Returns ``(edges, res_g, lv_g, counts)``: ``edges`` is ``np.unique(np.quantile(lv, np.linspace(0,
    1, nb + 1)))`` bit for bit, and bin b of the grouped copies (``counts[b]`` values after those of
    the bins before it) holds the same values as ``res[which == b]``, ``lv[which == b]`` with
    ``which`` from :func:`_level_bins` (in another order: the medians taken of them do not depend on
    it, and without -0.0 no tie can tell).

    How: the float32 levels are put in value buckets by a counting sort of their leading bits (the
    bit pattern of a float, sign-adjusted, orders like its value; ~1000 buckets per octave); the
    order statistics np.quantile interpolates are found by partitioning only the buckets they fall
    in and interpolated with np.quantile's own formula (its ``_lerp``), and only the buckets an edge
    falls in are sorted, so that every bin is one run of the grouping. Held to np.quantile and
    np.searchsorted by tests/test_image_same_bits.py. On 60000 levels: a third of the CPU of
    np.quantile, the bin search and a grouping by bin.
    """
    n = lv.size
    if n < 4096 or lv.dtype != np.float32 or not np.isfinite(lv).all() or not np.isfinite(res).all():
        return None
    if np.any(np.signbit(lv) & (lv == 0)) or np.any(np.signbit(res) & (res == 0)):
        return None  # 0.0 and -0.0 tie: a regrouping could change which of them a median returns
    bits = lv.view(np.uint32)
    neg = bits >= np.uint32(0x80000000)
    ordered = np.where(neg, ~bits, bits | np.uint32(0x80000000))  # orders like the values
    shift = 13  # keep 10 mantissa bits
    while True:
        key = ordered >> np.uint32(shift)
        kmin = key.min()
        if int(key.max()) - int(kmin) < 32767:
            break
        shift += 1
    key = (key - kmin).astype(np.int16)
    order = np.argsort(key, kind="stable")
    lv_g, res_g = lv[order], res[order]
    counts_b = np.bincount(key)
    ends_b = np.cumsum(counts_b)
    starts_b = ends_b - counts_b
    # np.quantile(lv, q), q = linspace(0, 1, nb + 1): its virtual indexes, neighbours and weights
    # (numpy's _get_indexes and _get_gamma for method 'linear')
    qv = np.linspace(0, 1, nb + 1)
    virtual = (n - 1) * qv
    prev = np.floor(virtual)
    nxt = prev + 1
    above = virtual >= n - 1
    prev[above] = -1
    nxt[above] = -1
    prev_i, next_i = prev.astype(np.intp), nxt.astype(np.intp)
    gamma = np.asanyarray(virtual - prev_i, dtype=virtual.dtype)
    ranks = np.unique(np.concatenate([prev_i % n, next_i % n]))
    value = {}
    bucket = np.searchsorted(ends_b, ranks, side="right")
    for b in np.unique(bucket).tolist():
        at = ranks[bucket == b] - starts_b[b]
        part = np.partition(lv_g[starts_b[b]:ends_b[b]], at)
        for k in at.tolist():
            value[int(starts_b[b]) + k] = part[k]
    a = np.array([value[k] for k in (prev_i % n).tolist()], dtype=lv.dtype)
    b_ = np.array([value[k] for k in (next_i % n).tolist()], dtype=lv.dtype)
    # numpy's _lerp(previous, next, gamma)
    diff_b_a = b_ - a
    lerp = np.add(a, diff_b_a * gamma)
    np.subtract(b_, diff_b_a * (1 - gamma), out=lerp, where=gamma >= 0.5, casting="unsafe", dtype=type(lerp.dtype))
    edges = np.unique(lerp)
    if len(edges) < 3:
        return edges, res_g, lv_g, None
    # The bucket an edge falls in: the first whose largest level reaches it (all levels of a later
    # bucket are larger); sorted, it splits at the edge, and every bin is one run.
    filled = counts_b > 0
    top = np.full(len(counts_b), -np.inf)
    top[filled] = np.maximum.reduceat(lv_g, starts_b[filled])
    np.maximum.accumulate(top, out=top)  # empty buckets take the top before them: sorted for the search
    pos = []
    for e in edges[1:-1]:  # np.float64: compared as float64, like `lv >= e`
        k = int(np.searchsorted(top, e, side="left"))
        s0, s1 = int(starts_b[k]), int(ends_b[k])
        seg = lv_g[s0:s1]
        o = np.argsort(seg, kind="stable")
        lv_g[s0:s1] = seg[o]
        res_g[s0:s1] = res_g[s0:s1][o]
        pos.append(s0 + int(np.searchsorted(lv_g[s0:s1].astype(np.float64), e, side="left")))
    counts = np.diff(np.array([0, *pos, n]))
    return edges, res_g, lv_g, counts


def _noise_model(image, level_b, calm_b, f: int, valid) -> tuple[float, float, float]:
    """Fit variance = gain * level + offset to the robust pixel scatter in bins of background level.

    Returns (gain, offset, floor): floor is a quarter of the smallest binned variance, the least
    variance any pixel is given (the dark level makes the offset negative for counting detectors).
    """
    nr, nc = level_b.shape
    rows, cols = image.shape
    # One pixel per calm block (block centre), at most about 60000 of them.
    flat = np.flatnonzero(calm_b)
    if len(flat) > 60000:
        flat = flat[np.linspace(0, len(flat) - 1, 60000).astype(np.int64)]
    lv = level_b.ravel()[flat]
    if f == 1:  # the block is the pixel
        px = image.ravel()[flat] if image.flags.c_contiguous else image[flat // nc, flat % nc]
        good = None if valid is None else valid.ravel()[flat]
    else:
        ii, jj = np.divmod(flat, nc)
        r1, c1 = np.minimum(ii * f + f // 2, rows - 1), np.minimum(jj * f + f // 2, cols - 1)
        px = image[r1, c1]
        good = None if valid is None else valid[r1, c1]
    if good is not None and not good.all():
        px, lv = px[good], lv[good]
    res = px.astype(np.float64) - lv
    if res.size < 50:
        s = robust_sigma(res) if res.size else 1.0
        return 0.0, max(s * s, 1e-6), max(s * s, 1e-6)
    nb = 16
    grouped = _level_groups(lv, res, nb)
    if grouped is not None:
        edges, res_g, lv_g, counts = grouped
        finite = True
    else:
        edges = np.unique(np.quantile(lv, np.linspace(0, 1, nb + 1)))
    if len(edges) < 3:
        s = robust_sigma(res)
        return 0.0, max(s * s, 1e-6), max(s * s, 1e-6)
    if grouped is None:
        finite = bool(np.isfinite(lv).all() and np.isfinite(res).all())
        which = _level_bins(lv, edges)
        # Each level bin's pixels, in their original order (a stable counting sort of the bin numbers):
        # the same values as res[which == b], lv[which == b], without a pass over all pixels per bin.
        order = np.argsort(which, kind="stable")
        counts = np.bincount(which, minlength=len(edges) - 1)
        res_g, lv_g = res[order], lv[order]  # copies: partitioned in place below
    ends = np.cumsum(counts)
    xs, vs, ns = [], [], []
    for b in range(len(edges) - 1):
        n_b = int(counts[b])
        if n_b < 20:
            continue
        r_b = res_g[ends[b] - n_b:ends[b]]
        if finite:  # robust_sigma(r_b), partitioning r_b in place
            med = median_in_place(r_b)
            np.subtract(r_b, med, out=r_b)
            np.abs(r_b, out=r_b)
            s = MAD_TO_SIGMA * float(median_in_place(r_b))
        else:
            s = robust_sigma(r_b)
        xs.append(float(median_in_place(lv_g[ends[b] - n_b:ends[b]])))
        vs.append(s * s)
        ns.append(n_b)
    xs, vs, ns = np.array(xs), np.array(vs), np.array(ns, float)
    if len(xs) < 2 or np.ptp(xs) <= 1e-6 * max(abs(xs).max(), 1.0):
        v = float(max(np.median(vs), 1e-6)) if len(vs) else 1.0
        return 0.0, v, v
    # Weighted least squares: the variance of a sample variance ~ 2 v^2 / n.
    wts = ns / np.maximum(vs, 1e-12) ** 2
    a = np.stack([xs, np.ones_like(xs)], axis=1)
    aw = a * wts[:, None]
    gain, offset = np.linalg.lstsq(aw.T @ a, aw.T @ vs, rcond=None)[0]
    if gain < 0:
        gain, offset = 0.0, float(np.average(vs, weights=ns))
    if gain * xs.min() + offset <= 0:
        # keep the variance positive over the observed range
        offset = max(offset, 0.25 * float(vs.min()) - gain * float(xs.min()))
    logger.debug("noise model: variance = %.4g * level + %.4g", gain, offset)
    return float(gain), float(offset), max(0.25 * float(vs.min()), 1e-6)

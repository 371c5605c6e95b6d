"""A block-averaged copy of the image and robust radial statistics: the cheap view the slow-varying stages use.

The haze, the noise level, the beam-stop shadow and the rough centre vary over tens of pixels, so
they are found on the image averaged over f x f blocks (f chosen so the copy is about 512 pixels
on its short side) and evaluated back at full resolution by bilinear interpolation. A binned pixel
(i, j) covers full-resolution rows f i ... f i + f - 1, so its centre is at full-resolution
coordinate f i + (f - 1) / 2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.units import fraction

__all__ = ["Binned", "bin_image", "radial_quantile_profile", "upsample_bilinear", "median_of", "median_in_place",
           "percentile_of", "percentile_in_place", "median_and_percentile", "without_nan", "radius_map"]


@dataclass(frozen=True, eq=False)
class Binned:
    """Block means ``image`` (valid pixels only, NaN where a block has none) and the block's valid fraction."""

    image: np.ndarray
    valid_fraction: np.ndarray
    factor: int
    full_shape: tuple[int, int]

    def to_full_px(self, xb, yb):
        """Binned coordinates -> full-resolution (x, y) in pixels."""
        f = self.factor
        return np.asarray(xb) * f + (f - 1) / 2.0, np.asarray(yb) * f + (f - 1) / 2.0

    def coarsened(self, k: int = 2) -> "Binned":
        """The same image in k x k times larger blocks (means weighted by the valid fractions)."""
        if k <= 1:
            return self
        nr, nc = self.image.shape
        mr, mc = -(-nr // k), -(-nc // k)
        w = np.where(np.isfinite(self.image), self.valid_fraction, 0.0).astype(np.float32)
        v = np.where(w > 0, self.image, 0.0).astype(np.float32) * w
        mean, sw = _weighted_block_mean(v, w, mr, mc, k)
        return Binned(mean, (sw / (k * k)).astype(np.float32), self.factor * k, self.full_shape)

    def to_binned_px(self, x, y):
        f = self.factor
        return (np.asarray(x) - (f - 1) / 2.0) / f, (np.asarray(y) - (f - 1) / 2.0) / f


def bin_factor(shape, *, target_px: int = 512) -> int:
    return max(1, int(min(shape) // target_px))


def _block_sum(a: np.ndarray, nr: int, nc: int, f: int) -> np.ndarray:
    """Sums over f x f blocks (float32; at most a few hundred values per block), contiguous axis first.

    Equal to ``skimage.measure.block_reduce(a, (f, f), np.sum)`` (tests/test_image_library_twins.py),
    which was timed as its replacement (issue 16) and kept out: on a 2048 x 2048 float32 frame
    (f = 4) it took 71 ms against 27 ms here, 29 ms against 0.9 ms at 1024 x 1024 (f = 2).
    """
    t = a[:, 0::f].astype(np.float32, copy=True)
    for k in range(1, f):
        t += a[:, k::f]
    out = t[0::f].copy()
    for k in range(1, f):
        out += t[k::f]
    return out


def _pad_to_blocks(a: np.ndarray, nr: int, nc: int, f: int) -> np.ndarray:
    """`a` padded with zeros to nr x nc whole f x f blocks."""
    pr, pc = nr * f - a.shape[0], nc * f - a.shape[1]
    return np.pad(a, ((0, pr), (0, pc))) if pr or pc else a


def _weighted_block_mean(values: np.ndarray, weights: np.ndarray, nr: int, nc: int, f: int):
    """(mean of `values` weighted by `weights` over f x f blocks, NaN where the weights sum to 0; weight sums).

    `values` must already carry the weights (values * weights).
    """
    s = _block_sum(_pad_to_blocks(values, nr, nc, f), nr, nc, f)
    n = _block_sum(_pad_to_blocks(weights, nr, nc, f), nr, nc, f)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, s / np.maximum(n, 1e-12), np.nan).astype(np.float32)
    return mean, n


def bin_image(image: np.ndarray, valid: np.ndarray | None = None, *, factor: int | None = None) -> Binned:
    """Mean over f x f blocks of the valid pixels (the ragged last row/column of blocks is averaged too)."""
    rows, cols = image.shape
    f = bin_factor(image.shape) if factor is None else int(factor)
    nr, nc = -(-rows // f), -(-cols // f)
    if f == 1:
        img = image.astype(np.float32, copy=True)
        vf = np.ones(image.shape, np.float32) if valid is None else valid.astype(np.float32)
        if valid is not None:
            img[~valid] = np.nan
        return Binned(img, vf, 1, (rows, cols))
    w = np.ones((rows, cols), np.float32) if valid is None else valid.astype(np.float32)
    img = image * w if valid is not None else image
    mean, n = _weighted_block_mean(img, w, nr, nc, f)
    # Each block's valid fraction relative to the pixels that exist in it (ragged edge blocks): a block
    # holds min(f, rows - i f) x min(f, cols - j f) pixels.
    e = np.outer(np.minimum(f, rows - f * np.arange(nr)), np.minimum(f, cols - f * np.arange(nc))).astype(np.float32)
    return Binned(mean, (n / e).astype(np.float32), f, (rows, cols))


def _partitioned_median(part: np.ndarray, n: int):
    """np.median's own last step on `part`, already partitioned at its middle element(s) and at n - 1."""
    h = n // 2
    mid = part[h:h + 1] if n % 2 else part[h - 1:h + 1]
    m = np.mean(mid)
    if part.dtype.kind in "fc" and np.isnan(part[n - 1]):
        return part[n - 1]  # a NaN sorts last: np.median gives NaN then
    return m


def without_nan(a: np.ndarray) -> np.ndarray:
    """A 1-D copy of `a` without its NaNs, in the order np.nanmedian / np.nanpercentile leave them.

    Those fill each NaN's place with a value from the end (numpy's ``_remove_nan_1d``), and a
    partition's result depends on the order (0.0 and -0.0 tie); so the same order, for the same bits.
    """
    a = np.array(a, copy=True).ravel()
    c = np.isnan(a)
    s = np.flatnonzero(c)
    if s.size == 0:
        return a
    enonan = a[-s.size:][~c[-s.size:]]
    a[s[:enonan.size]] = enonan
    return a[:-s.size]


def median_of(values):
    """``np.median(values)`` of a 1-D float array, without the wrapper: the same partition and mean, bit for bit.

    np.median partitions at the middle element(s) (and at the end, to see a NaN) and takes the mean
    of the middle one or two values; this does exactly that, so the result (value and numpy scalar
    type) is the library's (held to it by tests/test_image_same_bits.py). On the image stage's
    many small arrays (ring medians, per-bin noise) np.median's dispatch costs as much as the work.
    Anything that is not a non-empty 1-D float array goes to np.median itself.
    """
    return median_in_place(np.array(values, copy=True))


def median_in_place(a: np.ndarray):
    """:func:`median_of` of a 1-D float array that may be reordered (partitioned in place: no copy)."""
    n = a.size
    if a.ndim != 1 or n == 0 or a.dtype.kind != "f":
        return np.median(a)
    h = n // 2
    a.partition([h - 1, h, n - 1] if n % 2 == 0 else [h, n - 1])
    return _partitioned_median(a, n)


def percentile_of(values, p: float):
    """``np.percentile(values, p)`` (method 'linear', `p` a Python float in [0, 100]) of a 1-D float array, bit for bit.

    The two order statistics around the virtual index (n - 1) q, q = p percent, are found by one partition;
    the interpolation between them is left to np.quantile on those two values at the same weight
    (a two-value quantile at q interpolates with weight q exactly), so numpy's own rounding of the
    interpolation is kept. Held to np.percentile by tests/test_image_same_bits.py.
    """
    return percentile_in_place(np.array(values, copy=True), p)


def percentile_in_place(a: np.ndarray, p: float):
    """:func:`percentile_of` of a 1-D float array that may be reordered (partitioned in place: no copy)."""
    n = a.size
    q = fraction(p)  # np.percentile divides by 100 the same way
    vi = (n - 1) * q
    if a.ndim != 1 or n < 2 or a.dtype.kind != "f" or type(p) is not float or not (0.0 <= vi < n - 1):
        return np.percentile(a, p)
    lo = math.floor(vi)
    a.partition(sorted({0, lo, lo + 1, n - 1}))
    if np.isnan(a[n - 1]):
        return np.percentile(a, p)
    return np.quantile(a[lo:lo + 2], vi - lo)


def median_and_percentile(values, p: float):
    """(``np.median(values)``, ``np.percentile(values, p)``) of a 1-D float array from one partition, bit for bit."""
    a = np.asarray(values)
    n = a.size
    q = fraction(p)  # np.percentile divides by 100 the same way
    vi = (n - 1) * q
    if a.ndim != 1 or n < 2 or a.dtype.kind != "f" or type(p) is not float or not (0.0 <= vi < n - 1):
        return median_of(a), percentile_of(a, p)
    if np.any(np.signbit(a) & (a == 0)):
        # -0.0 and 0.0 tie: only numpy's own partition points put the same one of them in place
        return median_of(a), percentile_of(a, p)
    lo = math.floor(vi)
    h = n // 2
    kth = sorted({0, lo, lo + 1, h - 1 if n % 2 == 0 else h, h, n - 1})
    part = np.partition(a, kth)
    if np.isnan(part[n - 1]):
        return np.median(a), np.percentile(a, p)
    return _partitioned_median(part, n), np.quantile(part[lo:lo + 2], vi - lo)


def radius_map(binned: "Binned", center_px) -> np.ndarray:
    """(nr, nc) distance of every block centre from `center_px`, in blocks (float64 for a float centre).

    The same values as ``np.hypot(xx - cxb, yy - cyb)`` over ``np.mgrid(...).astype(np.float32)``
    grids, computed from one row and one column (broadcast) instead of two full grids.
    """
    nr, nc = binned.image.shape
    cxb, cyb = binned.to_binned_px(center_px[0], center_px[1])
    dx = np.arange(nc, dtype=np.float32) - cxb
    dy = np.arange(nr, dtype=np.float32) - cyb
    return np.hypot(dx[None, :], dy[:, None])


def radial_quantile_profile(values: np.ndarray, radius: np.ndarray, *, q: float = 0.5, bin_width: float = 1.0,
                            min_count: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """The `q` quantile of `values` in radius bins of `bin_width`; returns (bin centres, quantiles), NaN-free.

    Bins with fewer than `min_count` values are dropped. The quantile of a bin holding c values is
    its value of rank min(int(q c), c - 1), read back through the float key ``bin + 0.999 (v - lo) /
    span`` (float64 keeps ~1e-12 of the span for a few thousand bins) -- the key a single sort of
    all values used to order (bin, value) by, until issue 14.

    Now the values are grouped by bin (a stable counting sort of the small bin numbers) and each
    bin's one needed rank is found by a partition of that bin alone: the key is monotone in the
    value within a bin and the bins' keys do not overlap, so the key of that rank is the key the
    global sort put at the same place, bit for bit (tests/test_image_same_bits.py holds it to
    the sort). 2-3x less CPU than the sort on the 65k-260k block values of a frame. (Issue 16:
    ``np.lexsort((value, bin))`` took 2.3-2.9x as long as the sort.)
    """
    v = np.asarray(values)
    if v.dtype not in (np.float32, np.float64):
        v = v.astype(np.float64)
    v = v.ravel()
    r = np.asarray(radius, np.float64).ravel()
    ok = np.isfinite(v) & np.isfinite(r)
    if not ok.all():
        v, r = v[ok], r[ok]
    if v.size == 0:
        return np.zeros(0), np.zeros(0)
    fb = np.floor(r / bin_width if bin_width != 1.0 else r)  # r / 1.0 is r
    # bin numbers as int16 when they fit (the counting sort below needs 16-bit keys)
    b = fb.astype(np.int16 if 0.0 <= fb.min() and fb.max() <= np.iinfo(np.int16).max else np.int64)
    lo, hi = float(v.min()), float(v.max())
    span = hi - lo if hi > lo else 1.0
    counts = np.bincount(b)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    good = counts >= min_count
    gbin = np.flatnonzero(good)
    rank = np.minimum((q * counts[good]).astype(np.int64), counts[good] - 1)
    # Group by bin, keeping each bin's values (a copy: partitioned in place below).
    grouped = v[np.argsort(b if b.dtype == np.int16 else b.astype(np.int32), kind="stable")]
    at = starts[good] + rank
    for s0, c, k in zip(starts[good].tolist(), counts[good].tolist(), rank.tolist()):
        if c > 1:
            grouped[s0:s0 + c].partition(k)
    picked = grouped[at].astype(np.float64)
    key = gbin + 0.999 * (picked - lo) / span
    vals = lo + (key - gbin) * span / 0.999
    centres = (gbin + 0.5) * bin_width
    return centres, vals


def upsample_bilinear(small: np.ndarray, factor: int, full_shape: tuple[int, int]) -> np.ndarray:
    """Bilinear interpolation of a binned map back to full resolution (float32), edges held constant.

    Separable: interpolate along rows, then along columns, so it costs a few passes over the output.
    Equal (to float32 rounding) to ``scipy.ndimage.zoom(small, f, order=1, mode="nearest",
    grid_mode=True)`` (tests/test_image_library_twins.py), which was timed as its replacement
    (issue 16) and kept out: 403 ms against 117 ms for 512 -> 2048 px, 92 ms against 1 ms for 342 -> 1025.
    """
    rows, cols = full_shape
    f = factor
    if f == 1:
        return np.ascontiguousarray(small[:rows, :cols], dtype=np.float32)
    nr, nc = small.shape
    # Output row f i + a lies at binned position i + t_a, t_a = (a - (f - 1) / 2) / f: a fixed blend of
    # block i with its neighbour, so each of the f phases is one vectorised blend (edges held).
    s = small.astype(np.float32)
    tmp = np.empty((nr * f, nc), np.float32)
    _blend_phases(s, tmp.reshape(nr, f, nc), f, axis=0)
    out = np.empty((nr * f, nc * f), np.float32)
    _blend_phases(tmp, out.reshape(nr * f, nc, f), f, axis=1)
    return out[:rows, :cols]


def _blend_phases(src: np.ndarray, dst: np.ndarray, f: int, *, axis: int) -> None:
    if axis == 0:
        prev = np.concatenate([src[:1], src[:-1]], axis=0)
        nxt = np.concatenate([src[1:], src[-1:]], axis=0)
    else:
        prev = np.concatenate([src[:, :1], src[:, :-1]], axis=1)
        nxt = np.concatenate([src[:, 1:], src[:, -1:]], axis=1)
    for a in range(f):
        t = (a - (f - 1) / 2.0) / f
        other, wt = (prev, -t) if t < 0 else (nxt, t)
        val = src * (1.0 - wt) + other * wt if wt else src
        if axis == 0:
            dst[:, a, :] = val
        else:
            dst[:, :, a] = val

"""The lean scan-frame stage against its numpy implementation from before its loops were compiled (numba).

The scan's rows must not change with the compiled loops: their spots, centre and notes must be the
numpy stage's to the last bit. The reference below is that numpy code as it was (commit fd16c63 of
saed/image/smallframe.py, unchanged but for names), run here on frames of the bench scan's coating
(saed.synth.scan) and on frames written here: 8- and 16-bit counts, float32, int32, a mask, an empty
frame, a hint too far from the beam. The 4096 frames of the bench scan itself were compared once, outside
the test suite (docs/batch.md, "Lean stage compiled with numba").
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pytest
from scipy import ndimage as ndi

from saed.calibration import Calibration
from saed.errors import ImageError
from saed.image.smallframe import measure_small_frame
from saed.image.values import MeasuredPattern, Spots

CAL = Calibration(0.08, 200.0)

# ---- the reference: saed/image/smallframe.py at commit fd16c63, from here to the tests ----

MAX_CENTRE_SHIFT_PX = 6.0
_WIN = 2  # half-width of the spot window (5 x 5)
#: A spot's 5 x 5 sum above background must reach this many of its noise sigmas.
MIN_SUM_SNR = 4.0


_D = np.arange(-_WIN, _WIN + 1)
_OY, _OX = (a.ravel() for a in np.meshgrid(_D, _D, indexing="ij"))   # the 5 x 5 window's offsets, raster order
_BEFORE = (_OY < 0) | ((_OY == 0) & (_OX < 0))                      # offsets before the centre in raster order
_NEAR = (np.abs(_OY) <= 1) & (np.abs(_OX) <= 1) & ~((_OY == 0) & (_OX == 0))
_OY3, _OX3 = _OY[_NEAR], _OX[_NEAR]                                 # the 8 neighbours
_NO_SPOTS = Spots(np.zeros(0), np.zeros(0), np.zeros(0))


class _Geometry:
    """Integer radius of every pixel about a centre rounded to a pixel (kept while the centre stays)."""

    def __init__(self, shape, centre_px):
        rows, cols = shape
        self.key = (shape, int(round(centre_px[0])), int(round(centre_px[1])))
        y, x = np.ogrid[:rows, :cols]
        r = np.hypot(x - self.key[1], y - self.key[2])
        self.r_bin = r.astype(np.intp).ravel()   # intp: np.take without a conversion
        self.n_bins = int(self.r_bin.max()) + 1
        # the background statistics use every second pixel in each direction (a quarter of the work)
        self.r_sub = np.ascontiguousarray(r[::2, ::2]).astype(np.int32).ravel()
        self.count_sub = np.bincount(self.r_sub, minlength=self.n_bins).astype(np.float64)


_GEOMETRY_CACHE: dict = {}


def _median(v: np.ndarray) -> float:
    """The median of a short 1-D array (numpy's, by a sort: without its overhead, which dominates here)."""
    v = np.sort(v)
    m = len(v) // 2
    return float(v[m]) if len(v) % 2 else 0.5 * float(v[m - 1] + v[m])


@lru_cache(maxsize=8)
def _gaussian_weights(sigma_px: float, truncate: float) -> np.ndarray:
    """The weights ``scipy.ndimage.gaussian_filter`` correlates each axis with (taken from it: its response to
    a unit impulse, exact), so that the two passes can be run by ``correlate1d`` without rebuilding them."""
    radius = int(truncate * float(sigma_px) + 0.5)          # gaussian_filter1d's radius
    impulse = np.zeros(2 * radius + 1)
    impulse[radius] = 1.0
    return np.ascontiguousarray(ndi.gaussian_filter1d(impulse, sigma_px, mode="constant", truncate=truncate)[::-1])


def _smooth(resid: np.ndarray, sigma_px: float) -> np.ndarray:
    """``ndi.gaussian_filter(resid, sigma_px, mode="constant", truncate=3.0)``, the same two passes
    (axis 0, then axis 1 in place), without its per-call set-up (a tenth of it on a 256 x 256 frame)."""
    w = _gaussian_weights(float(sigma_px), 3.0)
    out = np.zeros(resid.shape, resid.dtype)
    ndi.correlate1d(resid, w, 0, out, mode="constant", cval=0.0)
    ndi.correlate1d(out, w, 1, out, mode="constant", cval=0.0)
    return out


def _geometry(shape, centre_px) -> _Geometry:
    key = (tuple(shape), int(round(centre_px[0])), int(round(centre_px[1])))
    g = _GEOMETRY_CACHE.get(key)
    if g is None:
        if len(_GEOMETRY_CACHE) > 16:
            _GEOMETRY_CACHE.clear()
        g = _GEOMETRY_CACHE[key] = _Geometry(shape, centre_px)
    return g


def _direct_beam(img: np.ndarray, hint_px, top_of_frame: float, half: int = 8):
    """Centroid (x, y) of the bright core near `hint_px` (pixels above half of the local maximum), or None.

    The core must be the direct beam: at least half as bright as the brightest pixel of the frame
    (`top_of_frame`), and far above the counting noise of its surroundings.
    """
    rows, cols = img.shape
    x0, y0 = int(round(hint_px[0])), int(round(hint_px[1]))
    r0, r1, c0, c1 = max(y0 - half, 0), min(y0 + half + 1, rows), max(x0 - half, 0), min(x0 + half + 1, cols)
    if r1 - r0 < 3 or c1 - c0 < 3:
        return None
    box = img[r0:r1, c0:c1].astype(np.float64)
    edge = _median(np.concatenate([box[0], box[-1], box[:, 0], box[:, -1]]))
    top = float(box.max())
    if top < 0.5 * top_of_frame or top - edge < 10.0 * math.sqrt(max(edge, 1.0)):
        return None
    w = np.clip(box - (edge + 0.5 * (top - edge)), 0.0, None)
    s = float(w.sum())
    if s <= 0:
        return None
    # the centroid from the row and column sums (one pass over the box each)
    return (float(w.sum(axis=0) @ np.arange(c0, c1)) / s, float(w.sum(axis=1) @ np.arange(r0, r1)) / s)


def numpy_measure_small_frame(image: np.ndarray, calibration: Calibration, *, centre_hint_px, mask=None, source: str = "",
                        detect_snr: float = 5.0, snr_min: float = 3.0, direct_beam_radius_px: float = 6.0,
                        smooth_sigma_px: float = 1.0) -> MeasuredPattern | None:
    """The stage as it was in numpy (commit fd16c63), same arguments and result."""
    img = np.asarray(image)
    name = source or "frame"
    if img.dtype.kind == "f" and not np.isfinite(img.sum(dtype=np.float64)):
        raise ImageError(f"{name}: some pixels are NaN or infinite; replace them (e.g. by 0) or mask them")
    # small integer counts (8 and 16 bit) and float32 hold the same numbers as their float32 copy: they are
    # used as recorded, without a float32 copy of the frame (other types are converted once)
    if not (img.dtype == np.float32 or (img.dtype.kind in "ui" and img.dtype.itemsize <= 2)):
        img = img.astype(np.float32)
    rows, cols = img.shape
    db = _direct_beam(img, centre_hint_px, float(img.max()))
    if db is None or math.hypot(db[0] - centre_hint_px[0], db[1] - centre_hint_px[1]) > MAX_CENTRE_SHIFT_PX:
        return None
    geo = _geometry(img.shape, db)
    sub = img[::2, ::2].astype(np.float64).ravel()
    rb = geo.r_sub
    valid = None if mask is None else ~np.asarray(mask, bool)[::2, ::2].ravel()
    if valid is None:
        n_r = np.maximum(geo.count_sub, 1.0)
        s1 = np.bincount(rb, weights=sub, minlength=geo.n_bins)
        s2 = np.bincount(rb, weights=sub * sub, minlength=geo.n_bins)
    else:
        wv = valid.astype(np.float64)
        n_r = np.maximum(np.bincount(rb, weights=wv, minlength=geo.n_bins), 1.0)
        s1 = np.bincount(rb, weights=sub * wv, minlength=geo.n_bins)
        s2 = np.bincount(rb, weights=sub * sub * wv, minlength=geo.n_bins)
    mean = s1 / n_r
    sd = np.sqrt(np.maximum(s2 / n_r - mean * mean, 0.0))
    keep = sub <= (mean + 3.0 * sd)[rb]
    if valid is None and img.dtype.kind in "ui":
        # 8/16-bit counts: every sum here is of integers below 2**53 (at most 512**2 / 4 pixels of at most
        # 65535**2), so float64 holds it exactly in any order, and the sums over the kept pixels are the
        # sums over all of them less those over the few left out (the spots): 3 bincounts over a few
        # hundred pixels instead of over the whole subsample, the same numbers to the last bit
        out = ~keep
        rb_o, f_o = rb[out], sub[out]
        n_k = geo.count_sub - np.bincount(rb_o, minlength=geo.n_bins)
        s1_k = s1 - np.bincount(rb_o, weights=f_o, minlength=geo.n_bins)
        s2_k = s2 - np.bincount(rb_o, weights=f_o * f_o, minlength=geo.n_bins)
    else:
        if valid is not None:
            keep &= valid
        kw = keep.astype(np.float64)
        n_k = np.bincount(rb, weights=kw, minlength=geo.n_bins)
        fk = sub * kw
        s1_k = np.bincount(rb, weights=fk, minlength=geo.n_bins)
        s2_k = np.bincount(rb, weights=fk * sub, minlength=geo.n_bins)
    mean_k = np.where(n_k > 0, s1_k / np.maximum(n_k, 1), mean)
    var_k = s2_k / np.maximum(n_k, 1) - mean_k ** 2
    # radii the subsample misses (a few at the very centre) take their neighbours' values
    hole = n_k <= 0
    if hole.any() and not hole.all():
        idx = np.flatnonzero(~hole)
        pos = np.clip(np.searchsorted(idx, np.arange(geo.n_bins)), 0, len(idx) - 1)
        mean_k = np.where(hole, mean_k[idx[pos]], mean_k)
        var_k = np.where(hole, var_k[idx[pos]], var_k)
    resid = np.subtract(img, np.take(mean_k.astype(np.float32), geo.r_bin).reshape(rows, cols), dtype=np.float32)
    if mask is not None:
        resid[np.asarray(mask, bool)] = 0.0
    sm = _smooth(resid, smooth_sigma_px)
    # noise per radius (shot noise grows toward the centre); over 3 neighbouring radii for a steadier estimate,
    # and never below the median over radii: white noise of sigma s smoothed by a Gaussian of width w
    # has sigma s / (2 sqrt(pi) w)
    sd_r = np.sqrt(np.maximum(ndi.uniform_filter1d(var_k, 3, mode="nearest"), 0.0))
    sd_r = np.maximum(sd_r, 0.5 * _median(sd_r[n_k > 0]) if np.any(n_k > 0) else 0.0)
    sd_r = np.where(sd_r > 0, sd_r, 1.0)
    smooth_gain = 1.0 / (2.0 * math.sqrt(math.pi) * smooth_sigma_px)
    noise_sm_r = sd_r * smooth_gain
    thr_r = detect_snr * noise_sm_r
    sm_flat = sm.ravel()
    # pixels above the lowest threshold of any radius first (a comparison with one number), then each
    # of those against the threshold of its own radius: no full-frame map of thresholds
    cand = np.flatnonzero(sm_flat > thr_r.min())
    cand = cand[sm_flat[cand] > thr_r[geo.r_bin[cand]]]
    cx, cy = db
    centre = (float(cx), float(cy))
    if len(cand):
        cy_i, cx_i = np.divmod(cand, cols)
        inner = (cy_i >= _WIN) & (cy_i < rows - _WIN) & (cx_i >= _WIN) & (cx_i < cols - _WIN)
        far = np.hypot(cx_i - cx, cy_i - cy) > direct_beam_radius_px
        use = inner & far
        cy_i, cx_i, flat = cy_i[use], cx_i[use], cand[use]
    else:
        cy_i = cx_i = flat = np.zeros(0, np.intp)
    if len(cy_i) == 0:
        return MeasuredPattern((rows, cols), centre, _NO_SPOTS, None, calibration, center_sigma_px=0.3, source=source,
                               notes=("centre from the direct beam near the previous frame's", "no spots above the noise"))
    oy, ox = _OY, _OX
    # windows by flat index into the raveled frames (one index array, not a row and a column array)
    off5 = oy * cols + ox
    peak = sm_flat[flat]
    # the maximum of its 5 x 5 window: its 3 x 3 neighbours first (most candidates are the flanks of a
    # spot, which fail there), then the whole window for the rest
    near = sm_flat[flat[:, None] + (_OY3 * cols + _OX3)[None, :]]
    first = peak >= near.max(axis=1)
    cy_i, cx_i, flat, peak = cy_i[first], cx_i[first], flat[first], peak[first]
    nb = sm_flat[flat[:, None] + off5[None, :]]
    # ties (flat tops) go to the first pixel in raster order
    is_max = (peak >= nb.max(axis=1)) & ~np.any((nb == peak[:, None]) & _BEFORE[None, :], axis=1)
    cy_i, cx_i, flat, peak = cy_i[is_max], cx_i[is_max], flat[is_max], peak[is_max]
    win = resid.ravel()[flat[:, None] + off5[None, :]].astype(np.float64)
    w = np.clip(win, 0.0, None)
    tot = w.sum(axis=1)
    ok = tot > 0
    cy_i, cx_i, flat, peak, win, w, tot = cy_i[ok], cx_i[ok], flat[ok], peak[ok], win[ok], w[ok], tot[ok]
    x = cx_i + (w * ox).sum(axis=1) / tot
    y = cy_i + (w * oy).sum(axis=1) / tot
    # sub-pixel peak: a parabola through the logarithm of the smoothed frame at the peak and its two
    # neighbours, exact for a Gaussian spot (the window centroid is the fallback where it is not defined)
    centre_v = np.log(np.maximum(peak, 1e-6))
    for axis, (dy, dx) in enumerate(((0, 1), (1, 0))):
        step = dy * cols + dx
        lo = np.log(np.maximum(sm_flat[flat - step], 1e-6))
        hi = np.log(np.maximum(sm_flat[flat + step], 1e-6))
        den = lo - 2.0 * centre_v + hi
        with np.errstate(divide="ignore", invalid="ignore"):
            off = 0.5 * (lo - hi) / den
        fine = (den < 0) & (np.abs(off) <= 0.75)
        if axis == 0:
            x = np.where(fine, cx_i + off, x)
        else:
            y = np.where(fine, cy_i + off, y)
    inten = win.sum(axis=1)
    r_at = geo.r_bin[flat]
    noise_at = noise_sm_r[r_at]
    snr = peak / noise_at
    size = np.sqrt(np.maximum((w * ((ox - (x - cx_i)[:, None]) ** 2 + (oy - (y - cy_i)[:, None]) ** 2)).sum(axis=1)
                              / tot, 0.25))
    inten_sigma = sd_r[r_at] * (2 * _WIN + 1) + np.sqrt(np.maximum(inten, 0.0))
    # a spot is bright at its peak (smoothed) and in its window sum (a second, independent-ish look that
    # turns away the odd noise peak of an empty frame)
    good = (snr >= snr_min) & (inten >= MIN_SUM_SNR * inten_sigma)
    sig_xy = np.clip(size / np.maximum(snr, 1.0), 0.03, 2.0)
    spots = Spots(x[good], y[good], inten[good], inten_sigma[good], sig_xy[good], snr[good], size[good])
    return MeasuredPattern((rows, cols), centre, spots, None, calibration, center_sigma_px=0.3, source=source,
                           notes=("centre from the direct beam near the previous frame's",))


# ---- the tests ----

_FIELDS = ("x_px", "y_px", "intensity", "intensity_sigma", "sigma_xy_px", "snr", "size_px", "saturated")


def _assert_same(a, b):
    assert (a is None) == (b is None)
    if a is None:
        return
    assert np.array(a.center_px).tobytes() == np.array(b.center_px).tobytes()
    assert (a.notes, a.image_shape, a.center_sigma_px, a.source, a.basis) == (b.notes, b.image_shape,
                                                                           b.center_sigma_px, b.source, b.basis)
    for f in _FIELDS:
        x, y = getattr(a.spots, f), getattr(b.spots, f)
        assert x.dtype == y.dtype and x.tobytes() == y.tobytes(), f


def _both(img, hint, mask=None):
    ref = numpy_measure_small_frame(img, CAL, centre_hint_px=hint, mask=mask, source="s")
    got = measure_small_frame(img, CAL, centre_hint_px=hint, mask=mask, source="s")
    _assert_same(got, ref)
    return ref


@pytest.fixture(scope="module")
def coating_frames():
    from saed.synth.scan import coating_scan

    patterns, _, _ = coating_scan((2, 2), variants=2, seed=5)
    return [p for grain in patterns for p in grain]


def _hint(img):
    iy, ix = np.unravel_index(np.argmax(img), img.shape)
    return (float(ix) + 0.3, float(iy) - 0.4)


def test_coating_frames_same_spots_as_numpy_stage(coating_frames):
    n_spots = 0
    for img in coating_frames:
        ref = _both(img, _hint(img))
        n_spots += len(ref.spots) if ref is not None else 0
        _both(img.astype(np.float32), _hint(img))
        _both(img.astype(np.int32), _hint(img))
    assert n_spots > 20                   # the frames do have spots


def test_coating_frames_with_a_mask_same_as_numpy_stage(coating_frames):
    mask = np.zeros(coating_frames[0].shape, bool)
    mask[120:136, 130:] = True            # a beam-stop arm right of the centre
    mask[:, :3] = True                    # a dead edge
    for img in coating_frames:
        _both(img, _hint(img), mask)


def test_written_frames_same_as_numpy_stage():
    rng = np.random.default_rng(11)
    rows, cols, cx, cy = 120, 136, 70.2, 57.6
    y, x = np.mgrid[:rows, :cols].astype(float)
    lam = 15.0 + 3000.0 * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / 6.0)
    flat = rng.poisson(lam).astype(np.uint16)
    spots = lam.copy()
    for sx, sy in rng.uniform(5, 115, (12, 2)):
        spots += rng.uniform(40, 400) * np.exp(-((x - sx) ** 2 + (y - sy) ** 2) / 3.0)
    spotty = rng.poisson(spots)
    _both(flat, (cx + 1, cy - 1))                                       # an empty frame
    _both(np.round(lam).astype(np.uint16), (cx, cy))                     # no noise at all
    _both(spotty.astype(np.uint16), (cx + 0.5, cy))
    _both(np.minimum(spotty, 255).astype(np.uint8), (cx, cy))            # 8-bit, the beam clipped
    _both((spotty - 20).astype(np.int16), (cx, cy))                      # signed, some negative
    _both((spotty * 0.37).astype(np.float32), (cx, cy))
    _both(spotty.astype(">u2"), (cx, cy))                                # big-endian 16-bit, as some files are
    _both((spotty * 0.37).astype(">f4"), (cx, cy))
    ro = spotty.astype(np.uint16)
    ro.flags.writeable = False                                           # a read-only frame (a memory map)
    _both(ro, (cx, cy))
    _both(np.asfortranarray(spotty.astype(np.uint16)), (cx, cy))         # column-major
    assert _both(spotty.astype(np.uint16), (cx + 20, cy)) is None        # hint too far from the beam

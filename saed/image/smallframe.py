"""A lean image stage for the small frames of a scan (256 x 256 and the like), when the centre is known.

In a scan the direct beam stays where it was on the previous frame (or moves by a pixel), the
spots are sharp and few, and there are tens of thousands of frames. :func:`measure_small_frame`
measures such a frame in about 0.3 ms of CPU (256 x 256) from a centre hint (the previous frame's centre,
or at the start a centre measured by the full stage :func:`saed.image.measure.inspect_pattern`):

1. the centre: the intensity-weighted centroid of the direct beam near the hint;
2. the background: the mean at each integer radius about the centre, after one pass that leaves
   out pixels 3 sigma above it (spots), from every second pixel in each direction;
3. spots: pixels of the background-subtracted, lightly smoothed frame above `detect_snr` noise
   sigmas (the noise at each radius from the background's variance there) that are the maximum of their 5 x 5
   neighbourhood, checked for the few pixels above the threshold only (no full-frame maximum filter);
4. each spot's position from a parabola through the logarithm of the smoothed frame at its peak
   (exact for a Gaussian spot), and its intensity from its 5 x 5 window (sum above background), all
   spots at once;
5. a frame with no pixel above the threshold (vacuum, amorphous film) stops after step 3.

Steps 2 to 4 run as loops compiled by numba (:mod:`saed.image.smallframe_kernels`, imported on the first
frame), the same float operations in the same order as the numpy and scipy calls they replaced: the same
spots to the last bit. The direct beam's centroid and the parabola's logarithms stay in numpy.

No beam-stop search, no saturated-beam analysis and no 2-D lattice fit: the frame's MeasuredPattern
has ``basis`` None. Use the full stage where there is no centre to start from, and whenever this one
reports that it cannot see the direct beam near the hint.
"""

from __future__ import annotations

import math
import threading
from functools import lru_cache

import numpy as np
from scipy import ndimage as ndi

from saed.calibration import Calibration
from saed.errors import ImageError
from saed.image.binning import median_in_place
from saed.image.values import MeasuredPattern, Spots

__all__ = ["measure_small_frame", "SMALL_FRAME_MAX_PIXELS"]

#: Frames up to this many pixels are measured by this stage in a scan (larger ones: the full stage).
SMALL_FRAME_MAX_PIXELS = 512 * 512

#: How far the direct beam may move from the hint between frames before the full stage is needed, px.
MAX_CENTRE_SHIFT_PX = 6.0

#: A spot's 5 x 5 sum above background must reach this many of its noise sigmas.
MIN_SUM_SNR = 4.0


_NO_SPOTS = Spots(np.zeros(0), np.zeros(0), np.zeros(0))


class _Geometry:
    """Integer radius of every pixel about a centre rounded to a pixel (kept while the centre stays)."""

    def __init__(self, shape, centre_px):
        rows, cols = shape
        self.key = (shape, int(round(centre_px[0])), int(round(centre_px[1])))
        y, x = np.ogrid[:rows, :cols]
        r = np.hypot(x - self.key[1], y - self.key[2])
        self.r_bin = r.astype(np.int32)   # (rows, cols)
        self.n_bins = int(self.r_bin.max()) + 1
        # the background statistics use every second pixel in each direction (a quarter of the work)
        self.r_sub = np.ascontiguousarray(r[::2, ::2]).astype(np.int32)
        self.all_sub = np.ones(self.r_sub.shape, bool)   # every subsampled pixel used (no mask)


_GEOMETRY_CACHE: dict = {}
_NO_MASK = np.zeros((0, 0), bool)
_SCRATCH = threading.local()


def _kernels():
    """The compiled loops (:mod:`saed.image.smallframe_kernels`), imported on the first frame: numba is only
    loaded by a process that measures scan frames."""
    from saed.image import smallframe_kernels

    return smallframe_kernels


def _scratch(shape, radius_px: int):
    """This thread's frame-sized work arrays, kept from frame to frame (a scan's frames all have one shape):
    the residual (float32) inside `radius_px` rows of zeros above and below (the smoothing's input), and
    the smoothed frame (float32). Returns ``(resid, padded, smoothed)``; `resid` is a view into `padded`."""
    key = (tuple(shape), radius_px)
    if getattr(_SCRATCH, "key", None) != key:
        rows, cols = shape
        padded = np.zeros((rows + 2 * radius_px, cols), np.float32)
        _SCRATCH.key = key
        _SCRATCH.arrays = (padded[radius_px:radius_px + rows], padded, np.empty((rows, cols), np.float32))
    return _SCRATCH.arrays


@lru_cache(maxsize=8)
def _gaussian_weights(sigma_px: float, truncate: float) -> np.ndarray:
    """The weights ``scipy.ndimage.gaussian_filter`` correlates each axis with (taken from it: its response to
    a unit impulse, exact), for :func:`~saed.image.smallframe_kernels.gaussian_smooth_padded`.

    That kernel, like scipy's ``correlate1d`` for a kernel symmetric to within float64 epsilon, uses the
    left half of the weights for both sides (a Gaussian's weights are symmetric; checked here)."""
    radius = int(truncate * float(sigma_px) + 0.5)          # gaussian_filter1d's radius
    impulse = np.zeros(2 * radius + 1)
    impulse[radius] = 1.0
    w = np.ascontiguousarray(ndi.gaussian_filter1d(impulse, sigma_px, mode="constant", truncate=truncate)[::-1])
    if np.any(np.abs(w - w[::-1]) > np.finfo(np.float64).eps):
        raise ValueError(f"Gaussian weights of sigma {sigma_px} px are not symmetric")
    return w


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
    edge = float(median_in_place(np.concatenate([box[0], box[-1], box[:, 0], box[:, -1]])))
    top = float(box.max())
    if top < 0.5 * top_of_frame or top - edge < 10.0 * math.sqrt(max(edge, 1.0)):
        return None
    w = np.clip(box - (edge + 0.5 * (top - edge)), 0.0, None)
    s = float(w.sum())
    if s <= 0:
        return None
    # the centroid from the row and column sums (one pass over the box each)
    return (float(w.sum(axis=0) @ np.arange(c0, c1)) / s, float(w.sum(axis=1) @ np.arange(r0, r1)) / s)


def measure_small_frame(image: np.ndarray, calibration: Calibration, *, centre_hint_px, mask=None, source: str = "",
                        detect_snr: float = 5.0, snr_min: float = 3.0, direct_beam_radius_px: float = 6.0,
                        smooth_sigma_px: float = 1.0) -> MeasuredPattern | None:
    """Measure a small frame of a scan whose centre is near `centre_hint_px`; None when the hint does not hold.

    Parameters
    ----------
    image : (rows, cols) array
        The frame as recorded (counts).
    calibration : Calibration
        Scale, voltage and ellipse, as for the full stage.
    centre_hint_px : (x, y)
        Where the direct beam was (the previous frame's centre).
    mask : (rows, cols) bool, optional
        True where pixels are ignored (a beam stop that stays put); the frame's shape.
    detect_snr, snr_min : float
        Detection threshold of the smoothed frame and the smallest peak signal-to-noise ratio kept
        (in noise sigmas; the full stage's defaults).
    direct_beam_radius_px : float
        Peaks closer than this to the centre belong to the direct beam.

    Returns
    -------
    MeasuredPattern or None
        None when no direct beam is seen within :data:`MAX_CENTRE_SHIFT_PX` of the hint (the
        caller then runs the full stage). An empty frame gives a pattern with no spots.

    Raises
    ------
    ImageError
        NaN or infinite pixels; a mask of another shape than the frame.
    """
    img = np.asarray(image)
    name = source or "frame"
    if img.dtype.kind == "f" and not np.isfinite(img.sum(dtype=np.float64)):
        raise ImageError(f"{name}: some pixels are NaN or infinite; replace them (e.g. by 0) or mask them")
    # small integer counts (8 and 16 bit) and float32 hold the same numbers as their float32 copy: they are
    # used as recorded, without a float32 copy of the frame (other types are converted once)
    if not (img.dtype == np.float32 or (img.dtype.kind in "ui" and img.dtype.itemsize <= 2)):
        img = img.astype(np.float32)
    elif not img.dtype.isnative:                      # the compiled loops read native byte order only
        img = img.astype(img.dtype.newbyteorder("="))
    if mask is not None and np.shape(mask) != img.shape:
        raise ImageError(f"{name}: the mask is {'x'.join(map(str, np.shape(mask)))} pixels, the frame "
                         f"{img.shape[0]}x{img.shape[1]}")
    rows, cols = img.shape
    db = _direct_beam(img, centre_hint_px, float(img.max()))
    if db is None or math.hypot(db[0] - centre_hint_px[0], db[1] - centre_hint_px[1]) > MAX_CENTRE_SHIFT_PX:
        return None
    k = _kernels()
    geo = _geometry(img.shape, db)
    use_mask = mask is not None
    mask_b = np.asarray(mask, bool) if use_mask else _NO_MASK
    valid_sub = ~mask_b[::2, ::2] if use_mask else geo.all_sub
    mean_k, var_k, n_k = k.background_by_radius(img, geo.r_sub, geo.n_bins, valid_sub)
    w = _gaussian_weights(float(smooth_sigma_px), 3.0)
    resid, padded, sm = _scratch(img.shape, len(w) // 2)
    k.residual(img, mean_k, geo.r_bin, mask_b, use_mask, resid)
    k.gaussian_smooth_padded(padded, w, sm)
    # noise per radius (shot noise grows toward the centre); over 3 neighbouring radii for a steadier estimate,
    # and never below half the median over radii: white noise of sigma s smoothed by a Gaussian of width w
    # has sigma s / (2 sqrt(pi) w)
    smooth_gain = 1.0 / (2.0 * math.sqrt(math.pi) * smooth_sigma_px)
    sd_r, noise_sm_r, thr_r = k.noise_by_radius(var_k, n_k, smooth_gain, float(detect_snr))
    cx, cy = db
    centre = (float(cx), float(cy))
    any_cand, flat, logs_in = k.local_maxima(sm, thr_r, geo.r_bin, float(cx), float(cy), float(direct_beam_radius_px))
    if not any_cand:
        return MeasuredPattern((rows, cols), centre, _NO_SPOTS, None, calibration, center_sigma_px=0.3, source=source,
                               notes=("centre from the direct beam near the previous frame's", "no spots above the noise"))
    if len(flat):
        # sub-pixel peak: a parabola through the logarithm of the smoothed frame at the peak and its two
        # neighbours along each axis, exact for a Gaussian spot (numpy's float32 log, see smallframe_kernels)
        t = k.spot_table(resid, sm, flat, np.log(logs_in), geo.r_bin, sd_r, noise_sm_r, float(snr_min), MIN_SUM_SNR)
        spots = Spots(t[0], t[1], t[2], t[3], t[4], t[5], t[6])
    else:
        spots = _NO_SPOTS
    return MeasuredPattern((rows, cols), centre, spots, None, calibration, center_sigma_px=0.3, source=source,
                           notes=("centre from the direct beam near the previous frame's",))

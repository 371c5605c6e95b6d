"""Compiled loops of the lean scan-frame stage (:mod:`saed.image.smallframe`), with numba.

Each kernel does, in one pass of plain loops, what the stage did before with a few dozen numpy calls on
small arrays, in **the same floating-point operations in the same order**, so that its results are the
same to the last bit (the stage's spots and centre, and so the scan's rows, do not change):

* :func:`background_by_radius` -- the sums of ``numpy.bincount`` are sequential in pixel order: so are these;
* :func:`residual` -- float32 frame less the float32 background of each pixel's radius;
* :func:`gaussian_smooth_padded` -- ``scipy.ndimage.gaussian_filter(x, s, mode="constant", truncate=3.0)``
  on float32: scipy's ``correlate1d`` with a symmetric kernel computes, per output pixel in float64,
  ``in[0] * w[0]``, then adds ``(in[-j] + in[+j]) * w[j]`` from the outermost ``j`` in; it stores the
  result as float32 between the two passes (axis 0, then axis 1);
* :func:`noise_by_radius` -- ``scipy.ndimage.uniform_filter1d(v, 3, mode="nearest")`` as scipy runs it
  (a running sum of three, ``s += in[l + 1] - in[l - 2]``, divided by 3 at each place), then the floor;
* :func:`local_maxima` -- the candidates above the threshold of their radius and the 5 x 5 maximum test;
* :func:`spot_table` -- window sums as ``ndarray.sum`` over 25 values adds them (numpy's pairwise sum:
  eight running sums, combined as ((0+1)+(2+3))+((4+5)+(6+7)), then the 25th value), the sub-pixel
  parabola in float32 and the spot's numbers.

The logarithms of the parabola stay in numpy (its float32 ``log`` is its own vectorised code, not the C
library's, and differs from it in the last bit now and then). Every kernel is ``numba.njit(cache=True)``
without ``fastmath`` (so no re-association and no fused multiply-add) and without ``parallel``.
The module is imported by :mod:`saed.image.smallframe` on its first frame only: ``import numba`` costs
about 0.2 s, and compiling the kernels for 16-bit frames about 7 s of CPU the first time (each further
frame type, about 1 to 1.5 s more); later processes load them from numba's cache (``__pycache__`` beside
this file) in about 0.3 s. Measured numbers: docs/batch.md, "Lean stage compiled with numba".
"""

from __future__ import annotations

import math

import numba
import numpy as np

_WIN = 2                       # half-width of the spot window (5 x 5)
_F32_TINY = np.float32(1e-6)   # the floor of the smoothed frame before its logarithm, float32 as numpy makes it


@numba.njit(cache=True)
def _sums_by_radius(img, r_sub, valid_sub, limit):
    """Number, sum and sum of squares by radius of the subsampled pixels at most `limit` of their radius.

    Each radius's sums are added in pixel order, as ``numpy.bincount`` adds them (kept in registers while
    the radius stays the same along a row, the same additions in the same order).
    """
    n_bins = len(limit)
    n, s1, s2 = np.zeros(n_bins), np.zeros(n_bins), np.zeros(n_bins)
    for i in range(r_sub.shape[0]):
        row, rb, ok = img[2 * i], r_sub[i], valid_sub[i]
        b_now, a0, a1, a2 = -1, 0.0, 0.0, 0.0
        for j in range(len(rb)):
            if not ok[j]:
                continue
            v = np.float64(row[2 * j])
            b = rb[j]
            if not v <= limit[b]:
                continue
            if b != b_now:
                if b_now >= 0:
                    n[b_now], s1[b_now], s2[b_now] = a0, a1, a2
                b_now, a0, a1, a2 = b, n[b], s1[b], s2[b]
            a0 += 1.0
            a1 += v
            a2 += v * v
        if b_now >= 0:
            n[b_now], s1[b_now], s2[b_now] = a0, a1, a2
    return n, s1, s2


@numba.njit(cache=True)
def background_by_radius(img, r_sub, n_bins, valid_sub):
    """Mean and variance of the frame at each integer radius, after one pass leaving out pixels 3 sigma above it.

    Parameters: `img` (rows, cols) frame; `r_sub` (ceil(rows/2), ceil(cols/2)) int32, the integer radius of
    every second pixel in each direction (the pixels used); `n_bins` the number of radii of the whole frame
    (more than `r_sub` reaches); `valid_sub` bool like `r_sub` (False: masked).
    Returns ``(mean_k, var_k, n_k)`` float64 arrays by radius: mean and variance of
    the kept pixels and their number; radii with no kept pixel take those of the next radius that has some.
    """
    n, s1, s2 = _sums_by_radius(img, r_sub, valid_sub, np.full(n_bins, np.inf))
    limit = np.empty(n_bins)
    mean = np.empty(n_bins)
    for b in range(n_bins):
        nb = max(n[b], 1.0)
        mean[b] = s1[b] / nb
        limit[b] = mean[b] + 3.0 * math.sqrt(max(s2[b] / nb - mean[b] * mean[b], 0.0))
    n_k, s1_k, s2_k = _sums_by_radius(img, r_sub, valid_sub, limit)
    mean_k = np.empty(n_bins)
    var_k = np.empty(n_bins)
    n_holes = 0
    for b in range(n_bins):
        nb = max(n_k[b], 1.0)
        mean_k[b] = s1_k[b] / nb if n_k[b] > 0 else mean[b]
        var_k[b] = s2_k[b] / nb - mean_k[b] * mean_k[b]
        n_holes += n_k[b] <= 0
    if 0 < n_holes < n_bins:
        # a radius the subsample misses takes the values of the next radius that has pixels (the last such
        # radius where none follows)
        nxt = -1
        for b in range(n_bins - 1, -1, -1):
            if n_k[b] > 0:
                nxt = b
                break
        for b in range(n_bins - 1, -1, -1):
            if n_k[b] > 0:
                nxt = b
            else:
                mean_k[b] = mean_k[nxt]
                var_k[b] = var_k[nxt]
    return mean_k, var_k, n_k


@numba.njit(cache=True)
def residual(img, mean_k, r_bin, mask, use_mask, resid):
    """Into `resid` (rows, cols) float32: the frame as float32 less the float32 background of each pixel's
    radius `r_bin`; 0 where `mask` (if `use_mask`)."""
    rows, cols = img.shape
    bg = mean_k.astype(np.float32)
    bg_row = np.empty(cols, np.float32)
    for i in range(rows):              # whole rows as 1-D arrays: numba vectorises these loops, not 2-D indexing
        src, rb, out = img[i], r_bin[i], resid[i]
        for j in range(cols):
            bg_row[j] = bg[rb[j]]      # the look-up apart: the subtraction below is then vectorised
        for j in range(cols):
            out[j] = np.float32(src[j]) - bg_row[j]
        if use_mask:
            m = mask[i]
            for j in range(cols):
                if m[j]:
                    out[j] = np.float32(0.0)


@numba.njit(cache=True)
def gaussian_smooth_padded(padded, w, out):
    """Correlate a float32 frame with the symmetric odd kernel `w` (radius r) along axis 0, then axis 1.

    `padded` (rows + 2 r, cols) float32: the frame with r rows of zeros above and below; `out` (rows, cols)
    float32, the result. Bit for bit ``scipy.ndimage.gaussian_filter(frame, sigma, mode="constant",
    truncate=...)`` when `w` is that filter's kernel: each output a float64 sum in scipy's order (the centre
    first, then the pairs from the outermost in), stored as float32 after each pass. Row by row: a row of
    the first pass is made (in float64, stored as float32 between r zeros each side) and at once smoothed
    along itself; the loops run along rows, which numba vectorises.
    """
    rows, cols = out.shape
    r = len(w) // 2
    acc = np.empty(cols)
    line = np.zeros(cols + 2 * r, np.float32)
    mid = line[r:r + cols]
    for i in range(rows):
        centre = padded[r + i]                             # axis 0: row i of the frame is padded row r + i
        for k in range(cols):
            acc[k] = np.float64(centre[k]) * w[r]
        for j in range(r, 0, -1):
            up, down, wj = padded[r + i - j], padded[r + i + j], w[r - j]
            for k in range(cols):
                acc[k] += (np.float64(up[k]) + np.float64(down[k])) * wj
        for k in range(cols):
            mid[k] = np.float32(acc[k])
        for k in range(cols):                              # axis 1, along the row just made
            acc[k] = np.float64(mid[k]) * w[r]
        for j in range(r, 0, -1):
            left, right, wj = line[r - j:r - j + cols], line[r + j:r + j + cols], w[r - j]
            for k in range(cols):
                acc[k] += (np.float64(left[k]) + np.float64(right[k])) * wj
        row_out = out[i]
        for k in range(cols):
            row_out[k] = np.float32(acc[k])


@numba.njit(cache=True)
def gaussian_smooth(x, w):
    """:func:`gaussian_smooth_padded` of a float32 frame `x`, allocating its buffers (for tests and one-offs)."""
    rows, cols = x.shape
    r = len(w) // 2
    padded = np.zeros((rows + 2 * r, cols), np.float32)
    for i in range(rows):
        for k in range(cols):
            padded[r + i, k] = x[i, k]
    out = np.empty((rows, cols), np.float32)
    gaussian_smooth_padded(padded, w, out)
    return out


@numba.njit(cache=True)
def running_mean3_nearest(v):
    """``scipy.ndimage.uniform_filter1d(v, 3, mode="nearest")`` for 1-D float64 `v`, in scipy's order."""
    n = len(v)
    ext = np.empty(n + 2)               # v with its end values repeated once (mode "nearest")
    for k in range(n):
        ext[k + 1] = v[k]
    ext[0], ext[n + 1] = v[0], v[n - 1]
    out = np.empty(n)
    s = 0.0
    for k in range(3):
        s += ext[k]
    out[0] = s / 3.0
    for k in range(1, n):
        s += ext[k + 2] - ext[k - 1]
        out[k] = s / 3.0
    return out


@numba.njit(cache=True)
def shell_sort(v):
    """Sort the 1-D array `v` in place, ascending (Shell's method with Ciura's gaps: a few hundred values in
    microseconds; numba's ``np.sort`` takes seconds more to compile). Sorted values are the same whichever
    correct method sorts them."""
    for gap in (701, 301, 132, 57, 23, 10, 4, 1):
        for i in range(gap, len(v)):
            x = v[i]
            j = i
            while j >= gap and v[j - gap] > x:
                v[j] = v[j - gap]
                j -= gap
            v[j] = x


@numba.njit(cache=True)
def noise_by_radius(var_k, n_k, smooth_gain, detect_snr):
    """Noise sigma of the frame by radius, that of the smoothed frame and the detection threshold.

    The frame's: the root of the variance over three neighbouring radii, never below half the median over the
    radii that have pixels, 1 where that leaves 0. Returns ``(sd_r, noise_sm_r, thr_r)``; ``noise_sm_r =
    sd_r * smooth_gain`` and ``thr_r = detect_snr * noise_sm_r``.
    """
    n = len(var_k)
    sm = running_mean3_nearest(var_k)
    sd_r = np.empty(n)
    for b in range(n):
        sd_r[b] = math.sqrt(max(sm[b], 0.0))
    n_with = 0
    for b in range(n):
        n_with += n_k[b] > 0
    floor = 0.0
    if n_with > 0:
        vals = np.empty(n_with)
        m = 0
        for b in range(n):
            if n_k[b] > 0:
                vals[m] = sd_r[b]
                m += 1
        shell_sort(vals)
        h = n_with // 2
        med = vals[h] if n_with % 2 else 0.5 * (vals[h - 1] + vals[h])
        floor = 0.5 * med
    noise_sm_r = np.empty(n)
    thr_r = np.empty(n)
    for b in range(n):
        s = max(sd_r[b], floor)
        sd_r[b] = s if s > 0 else 1.0
        noise_sm_r[b] = sd_r[b] * smooth_gain
        thr_r[b] = detect_snr * noise_sm_r[b]
    return sd_r, noise_sm_r, thr_r


@numba.njit(cache=True)
def _is_peak(sm, i, j):
    """Whether no pixel of the 5 x 5 window about (i, j) is above it, nor equal to it and before it in raster
    order (a flat top goes to its first pixel). The 3 x 3 neighbours first: most candidates are the flanks of
    a spot and fail there."""
    v = sm[i, j]
    for half in range(1, _WIN + 1):
        for di in range(-half, half + 1):
            for dj in range(-half, half + 1):
                if half > 1 and abs(di) < half and abs(dj) < half:
                    continue                                   # seen in the 3 x 3 pass
                u = sm[i + di, j + dj]
                if u > v or (u == v and (di < 0 or (di == 0 and dj < 0))):
                    return False
    return True


@numba.njit(cache=True)
def local_maxima(sm, thr_r, r_bin, cx_px, cy_px, direct_beam_radius_px):
    """Pixels of the smoothed frame `sm` above the threshold of their radius that are spot peaks.

    A candidate lies at least 2 px inside the frame, above ``thr_r`` of its radius `r_bin` and farther than
    `direct_beam_radius_px` from the centre (`cx_px`, `cy_px`); a peak is a candidate that passes
    :func:`_is_peak`. Returns ``(any_candidate, flat, logs_in)``: flat indices of the peaks in raster order,
    and the (5, n) float32 values whose logarithms the sub-pixel parabola needs: the peak, its left, right,
    upper and lower neighbours, each at least 1e-6.
    """
    rows, cols = sm.shape
    thr_min = thr_r.min()
    # each row is first compared with the lowest threshold (a vectorised loop writing one byte per pixel),
    # then looked at 8 pixels at a time as 64-bit words: a word of zeros has no candidate
    above = np.zeros(8 * ((cols + 7) // 8), np.uint8)
    words = above.view(np.uint64)
    any_cand = False
    found = np.empty(64, np.int64)
    n_found = 0
    for i in range(_WIN, rows - _WIN):
        row, rb = sm[i], r_bin[i]
        for j in range(cols):
            above[j] = row[j] > thr_min
        for q in range(len(words)):
            if words[q] == 0:
                continue
            for j in range(max(8 * q, _WIN), min(8 * q + 8, cols - _WIN)):
                if not (above[j] and row[j] > thr_r[rb[j]]):
                    continue
                peak = _is_peak(sm, i, j)
                # the distance to the centre only for peaks, and for the others until one candidate is known
                if (peak or not any_cand) and math.hypot(j - cx_px, i - cy_px) > direct_beam_radius_px:
                    any_cand = True
                    if peak:
                        if n_found == len(found):
                            grown = np.empty(2 * len(found), np.int64)
                            for m in range(n_found):
                                grown[m] = found[m]
                            found = grown
                        found[n_found] = i * cols + j
                        n_found += 1
    flat = np.empty(n_found, np.int64)
    for m in range(n_found):
        flat[m] = found[m]
    logs_in = np.empty((5, n_found), np.float32)
    for m in range(n_found):
        i, j = flat[m] // cols, flat[m] % cols
        logs_in[0, m] = max(sm[i, j], _F32_TINY)
        logs_in[1, m] = max(sm[i, j - 1], _F32_TINY)
        logs_in[2, m] = max(sm[i, j + 1], _F32_TINY)
        logs_in[3, m] = max(sm[i - 1, j], _F32_TINY)
        logs_in[4, m] = max(sm[i + 1, j], _F32_TINY)
    return any_cand, flat, logs_in


@numba.njit(cache=True)
def _sum25(a):
    """``a.sum()`` of 25 float64 values as numpy adds them (pairwise: eight running sums, then the 25th)."""
    r0, r1, r2, r3, r4, r5, r6, r7 = a[0], a[1], a[2], a[3], a[4], a[5], a[6], a[7]
    for k in range(8, 24, 8):
        r0 += a[k]
        r1 += a[k + 1]
        r2 += a[k + 2]
        r3 += a[k + 3]
        r4 += a[k + 4]
        r5 += a[k + 5]
        r6 += a[k + 6]
        r7 += a[k + 7]
    return (((r0 + r1) + (r2 + r3)) + ((r4 + r5) + (r6 + r7))) + a[24]


@numba.njit(cache=True)
def _window_moment(w, tmp, along_columns):
    """Sum of the 5 x 5 window's weights `w` times their column offset (`along_columns`) or row offset, added
    as numpy adds ``(w * offsets).sum()`` (:func:`_sum25`); `tmp` is 25 values of scratch."""
    k = 0
    for di in range(-_WIN, _WIN + 1):
        for dj in range(-_WIN, _WIN + 1):
            tmp[k] = w[k] * (dj if along_columns else di)
            k += 1
    return _sum25(tmp)


@numba.njit(cache=True)
def _parabola_offset(lo, centre, hi):
    """Peak offset of a parabola through float32 logarithms `lo`, `centre`, `hi`; (False, 0) where not a peak."""
    den = (lo - np.float32(2.0) * centre) + hi
    if not den < 0:
        return False, np.float32(0.0)
    off = (np.float32(0.5) * (lo - hi)) / den
    return abs(off) <= np.float32(0.75), off


@numba.njit(cache=True)
def spot_table(resid, sm, flat, logs, r_bin, sd_r, noise_sm_r, snr_min, min_sum_snr):
    """The spots at peaks `flat`: position, intensity and its sigma, position sigma, peak SNR and size.

    `logs` (5, n) float32: the logarithms of :func:`local_maxima`'s ``logs_in``. Window of 5 x 5 pixels of
    `resid` about the peak: intensity its sum, centroid and size from its positive part. The position is the
    parabola's peak along each axis where it has one within 0.75 px, else the window centroid. A spot is kept
    when its window has positive sum, its peak SNR reaches `snr_min` and its intensity `min_sum_snr` of its
    sigma. Returns a (7, n_kept) float64 array: x, y, intensity, intensity sigma, position sigma, snr, size.
    """
    rows, cols = resid.shape
    n = len(flat)
    out = np.empty((7, n))
    win = np.empty(25)
    w = np.empty(25)
    tmp = np.empty(25)
    kept = 0
    for m in range(n):
        ci, cj = flat[m] // cols, flat[m] % cols
        k = 0
        for di in range(-_WIN, _WIN + 1):
            for dj in range(-_WIN, _WIN + 1):
                win[k] = np.float64(resid[ci + di, cj + dj])
                w[k] = max(win[k], 0.0)
                k += 1
        tot = _sum25(w)
        if not tot > 0:
            continue
        x = np.float64(cj) + _window_moment(w, tmp, True) / tot
        y = np.float64(ci) + _window_moment(w, tmp, False) / tot
        fine, off = _parabola_offset(logs[1, m], logs[0, m], logs[2, m])
        if fine:
            x = np.float64(cj) + np.float64(off)
        fine, off = _parabola_offset(logs[3, m], logs[0, m], logs[4, m])
        if fine:
            y = np.float64(ci) + np.float64(off)
        inten = _sum25(win)
        b = r_bin[ci, cj]
        snr = np.float64(sm[ci, cj]) / noise_sm_r[b]
        dx, dy = x - cj, y - ci
        k = 0
        for di in range(-_WIN, _WIN + 1):
            for dj in range(-_WIN, _WIN + 1):
                ex, ey = dj - dx, di - dy
                tmp[k] = w[k] * (ex * ex + ey * ey)
                k += 1
        size = math.sqrt(max(_sum25(tmp) / tot, 0.25))
        inten_sigma = sd_r[b] * (2 * _WIN + 1) + math.sqrt(max(inten, 0.0))
        if not (snr >= snr_min and inten >= min_sum_snr * inten_sigma):
            continue
        out[0, kept] = x
        out[1, kept] = y
        out[2, kept] = inten
        out[3, kept] = inten_sigma
        out[4, kept] = min(max(size / max(snr, 1.0), 0.03), 2.0)
        out[5, kept] = snr
        out[6, kept] = size
        kept += 1
    table = np.empty((7, kept))
    for q in range(7):
        for m in range(kept):
            table[q, m] = out[q, m]
    return table

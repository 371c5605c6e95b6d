"""The pattern centre: a rough one from point symmetry, then Friedel pairs refined by least squares.

Rough centre
------------
A diffraction pattern is point-symmetric about its centre (Friedel's law for the spot positions; the
haze is radially symmetric), so the self-convolution ``(I * I)(s) = sum_x I(x) I(s - x)`` of the image
peaks at ``s = 2 c``. It is computed with FFTs on the block-averaged image, on the logarithm of the
counts above the median (the haze and the direct beam dominate, the dark beam-stop shadow counts for
nothing), zero-padded to avoid wrap-around; the peak is located to a fraction of a block with a
parabola through its neighbours. It does not need the direct beam, so it works behind a beam stop.

Friedel pairs
-------------
Spots g and -g sit symmetrically about the centre: ``p_i + p_j = 2 c``. When the start may be a few
pixels off, it is first moved to the densest point of the pair midpoints near it, each vote weighted
by how alike the two intensities are (Friedel mates are alike; the pairs g, h - g that meet at half
a lattice vector are not). Then every spot's mirror
``2 c - p_i`` is matched to the nearest spot (mutual matches only, of intensities within a factor
`max_ratio`); the centre is the weighted mean of the pair midpoints, iterated with a shrinking
tolerance, and its uncertainty is the weighted scatter of the midpoints over sqrt(pairs).
"""

from __future__ import annotations

import logging
import math
import threading
from dataclasses import dataclass

import numpy as np

from saed.image.background import Background
from saed.image.binning import Binned, median_and_percentile, median_of
from saed.image.nearby import close_pairs, nearest_within
from saed.image.spotfit import fit_spots

__all__ = ["near_symmetry_peak", "symmetric_center", "point_symmetry", "PointSymmetry", "FriedelCentre", "friedel_center",
           "DirectBeam", "find_direct_beam"]

logger = logging.getLogger(__name__)


def _parabolic_peak(c: np.ndarray, i: int, j: int) -> tuple[float, float]:
    """Sub-pixel peak of array `c` at (row i, col j) from a parabola through the neighbours on each axis."""
    rows, cols = c.shape

    def one(vm, v0, vp):
        den = vm - 2.0 * v0 + vp
        return 0.0 if den >= 0 else float(np.clip(0.5 * (vm - vp) / den, -0.5, 0.5))

    di = one(c[i - 1, j], c[i, j], c[i + 1, j]) if 0 < i < rows - 1 else 0.0
    dj = one(c[i, j - 1], c[i, j], c[i, j + 1]) if 0 < j < cols - 1 else 0.0
    return i + di, j + dj


#: Largest self-convolution (complex values of its half spectrum) whose work arrays are kept for the
#: next frame of the same thread: 512 x 512 (a block image of 256 x 256) needs 512 x 257; kept up to
#: four times that (~8 MB with the output).
_KEEP_WORKSPACE_MAX = 4 * 512 * 257
_workspace = threading.local()


def _conv_workspace(shape: tuple[int, int]):
    """(spectrum, output) arrays for a self-convolution of `shape`, reused by the next call of this thread.

    A fresh 2 MB array costs its pages again on every frame (the freed memory goes back to the
    system): on a 256 x 256 frame, more CPU than the transforms.
    """
    half = (shape[0], shape[1] // 2 + 1)
    ws = getattr(_workspace, "arrays", None)
    if ws is not None and ws[1].shape == shape:
        return ws
    ws = (np.empty(half, np.complex128), np.empty(shape, np.float64))
    if half[0] * half[1] <= _KEEP_WORKSPACE_MAX:
        _workspace.arrays = ws
    return ws


def _self_convolution(binned: Binned):
    """Self-convolution of the log block image (peaks at twice a centre of symmetry), or None if all NaN.

    The result lives in this thread's work array: use it before the next call (a copy if kept).
    The transforms are numpy's ``irfft2(rfft2(a, s) ** 2, s)`` done axis by axis into the work
    arrays, in the order rfft2 and irfft2 take (rows, then columns; columns, then rows), so the
    values are theirs bit for bit.
    """
    img = binned.image
    ok = np.isfinite(img)
    if not ok.any():
        return None
    med, lo = median_and_percentile(img[ok], 1.0)
    med, lo = float(med), float(lo)
    span = max(med - lo, 1e-6)
    # np.where(ok, np.log1p(np.clip(img - med, 0.0, None) / span), 0.0), in place
    t = img - med
    np.clip(t, 0.0, None, out=t)
    t /= span
    np.log1p(t, out=t)
    t[~ok] = 0.0
    nr, nc = t.shape
    shape = (2 * nr, 2 * nc)
    spec, out = _conv_workspace(shape)
    np.fft.rfft(t.astype(np.float64), n=shape[1], axis=1, out=spec[:nr])
    spec[nr:] = 0.0
    np.fft.fft(spec, axis=0, out=spec)
    np.multiply(spec, spec, out=spec)
    np.fft.ifft(spec, axis=0, out=spec)
    return np.fft.irfft(spec, n=shape[1], axis=1, out=out)


def symmetric_center(binned: Binned) -> tuple[float, float]:
    """Rough centre (x, y) in full-resolution pixels from the point symmetry of the block image."""
    return point_symmetry(binned).centre()


def _argmax_2d(a: np.ndarray) -> tuple[int, int]:
    """``np.unravel_index(np.argmax(a), a.shape)`` of a 2-D float array, without np.argmax's contiguous copy.

    The row maxima (a reduction, no copy) give the first row holding the maximum (or a NaN, which
    np.argmax takes as the maximum); np.argmax of that row gives the column: the first occurrence in
    C order, as np.argmax. Held to it by tests/test_image_same_bits.py.
    """
    rowmax = a.max(axis=1)
    nan_rows = np.isnan(rowmax)
    i = int(np.argmax(nan_rows)) if nan_rows.any() else int(np.argmax(rowmax == rowmax.max()))
    return i, int(np.argmax(a[i]))


@dataclass(frozen=True, eq=False)
class PointSymmetry:
    """The point-symmetry map of a block image (its self-convolution of the log image: peaks at twice a
    centre of symmetry; None when the image is all NaN), for the two questions asked of it.

    ``conv`` lives in this thread's work array (:func:`_self_convolution`): ask before the next
    :func:`point_symmetry` of the same thread.
    """

    binned: Binned
    conv: np.ndarray | None

    def centre(self) -> tuple[float, float]:
        """:func:`symmetric_center`."""
        if self.conv is None:
            rows, cols = self.binned.full_shape
            return (cols - 1) / 2.0, (rows - 1) / 2.0
        nr, nc = self.binned.image.shape
        # The self-convolution of the central region: limit the search to shifts that keep the centre inside.
        search = self.conv[: 2 * nr - 1, : 2 * nc - 1]
        i, j = _argmax_2d(search)
        si, sj = _parabolic_peak(self.conv, i, j)
        x, y = self.binned.to_full_px(sj / 2.0, si / 2.0)
        return float(x), float(y)

    def has_peak_near(self, center_px, radius_px: float = 3.0) -> bool:
        """:func:`near_symmetry_peak`."""
        if self.conv is None:
            return False
        nr, nc = self.binned.image.shape
        xb, yb = self.binned.to_binned_px(float(center_px[0]), float(center_px[1]))
        ci, cj = 2 * float(yb), 2 * float(xb)
        r = max(2, int(np.ceil(4.0 * radius_px / self.binned.factor)))  # window half-width: 2 radii, in shift units
        i0, i1 = int(round(ci)) - r, int(round(ci)) + r + 1
        j0, j1 = int(round(cj)) - r, int(round(cj)) + r + 1
        if i0 < 0 or j0 < 0 or i1 > 2 * nr - 1 or j1 > 2 * nc - 1:
            return False
        win = self.conv[i0:i1, j0:j1]
        pi, pj = np.unravel_index(int(np.argmax(win)), win.shape)
        inside = 0 < pi < win.shape[0] - 1 and 0 < pj < win.shape[1] - 1
        close = np.hypot(pi + i0 - ci, pj + j0 - cj) * self.binned.factor / 2.0 <= radius_px
        return bool(inside and close and win[pi, pj] > np.median(win))


def point_symmetry(binned: Binned) -> PointSymmetry:
    """The point-symmetry map of `binned`, computed once for :meth:`~PointSymmetry.centre` and
    :meth:`~PointSymmetry.has_peak_near` (the image stage asks both of one map)."""
    return PointSymmetry(binned, _self_convolution(binned))


def near_symmetry_peak(binned: Binned, center_px, radius_px: float = 3.0) -> bool:
    """True when a local maximum of the pattern's point symmetry lies within `radius_px` of `center_px`.

    The self-convolution (as in :func:`symmetric_center`) is searched in a window twice that radius
    about the point; a maximum inside the window (not on its edge, where the surface only slopes up
    toward some other centre) that stands above the median of the window marks a centre of symmetry
    there, even when it is not the highest one of the image.
    """
    return point_symmetry(binned).has_peak_near(center_px, radius_px)


@dataclass(frozen=True)
class FriedelCentre:
    """Centre from Friedel pairs: (x, y) px, its 1-sigma uncertainty, and the pairs (i, j) used."""

    center_px: tuple[float, float]
    sigma_px: float
    pairs: np.ndarray

    @property
    def n_pairs(self) -> int:
        return len(self.pairs)


def _pairs(xy: np.ndarray, c: np.ndarray, tol: float, intensity: np.ndarray | None, max_ratio: float,
           min_radius: float) -> np.ndarray:
    mirror = 2.0 * c[None, :] - xy
    j, _ = nearest_within(mirror, xy, tol)
    i = np.arange(len(xy))
    hit = (j >= 0) & (j != i)
    jj = np.where(hit, j, -1)
    mutual = hit & (jj[np.clip(jj, 0, None)] == i) & (i < jj)
    r = np.hypot(*(xy - c[None, :]).T)
    mutual &= r > min_radius
    if intensity is not None:
        ii = np.flatnonzero(mutual)
        a, b = intensity[ii], intensity[jj[ii]]
        good = (a > 0) & (b > 0) & (np.maximum(a, b) <= max_ratio * np.minimum(a, b))
        mutual[ii[~good]] = False
    ii = np.flatnonzero(mutual)
    return np.stack([ii, jj[ii]], axis=1) if len(ii) else np.zeros((0, 2), int)


def _vote_center(xy: np.ndarray, start: np.ndarray, search_px: float, intensity: np.ndarray | None,
                 min_radius: float) -> np.ndarray | None:
    """The densest point of the pair midpoints within `search_px` of `start`, votes weighted by how
    alike the two intensities are (Friedel mates are alike; pairs g, h - g that also meet at a half
    lattice vector h/2 are not)."""
    r = np.hypot(*(xy - start[None, :]).T)
    use = np.flatnonzero(r > min_radius)
    if len(use) < 2:
        return None
    p = xy[use]
    # pairs (i, j), i < j, whose midpoint may lie within search_px of the start: p_j near 2 start - p_i
    qi, pj, _ = close_pairs(2.0 * start[None, :] - p, p, 2.0 * search_px)
    keep = pj > qi
    qi, pj = qi[keep], pj[keep]
    mids = 0.5 * (p[qi] + p[pj])
    near_start = np.hypot(mids[:, 0] - start[0], mids[:, 1] - start[1]) <= search_px
    qi, pj, mids = qi[near_start], pj[near_start], mids[near_start]
    if len(mids) < 2:
        return None
    if intensity is None:
        wts = np.ones(len(mids))
    else:
        a, b = intensity[use[qi]], intensity[use[pj]]
        both = (a > 0) & (b > 0)
        ratio = np.log(np.maximum(a, 1e-12) / np.maximum(b, 1e-12))
        wts = np.where(both, np.exp(-np.abs(ratio)), 0.1)
    # each midpoint's votes: the weights of the midpoints within 1.5 px of it (itself included)
    ci, cj, _ = close_pairs(mids, mids, 1.5)
    score = np.bincount(ci, weights=wts[cj], minlength=len(mids))
    k = int(np.argmax(score))
    near = cj[ci == k]
    return np.average(mids[near], axis=0, weights=wts[near])


def friedel_center(xy_px, start_px, *, sigma_px=None, intensity=None, tol_px: float = 6.0,
                   max_ratio: float = 6.0, min_radius_px: float = 3.0, search_px: float | None = None) -> FriedelCentre | None:
    """Refine the centre from Friedel pairs of spots; None when fewer than two pairs are found.

    Parameters
    ----------
    xy_px : (n, 2) spot positions, pixels
    start_px : (2,) starting centre
    sigma_px : (n,) position uncertainties (weights); default equal
    intensity : (n,) spot intensities; pairs differing by more than `max_ratio` are refused (mistilt
        can make Friedel mates differ, so the limit is loose); None: not used
    tol_px : first matching tolerance for |p_i + p_j - 2 c|, pixels; halved twice
    min_radius_px : spots this close to the centre (the direct beam) are not paired
    search_px : how far from `start_px` the centre may be. When given, the start is first moved to
        the densest point of the pair midpoints within that distance (votes weighted by intensity
        likeness), so a start a few pixels off (a rough hint) still finds the pairs.
    """
    xy = np.asarray(xy_px, np.float64).reshape(-1, 2)
    if len(xy) < 4:
        return None
    sig = np.full(len(xy), 0.3) if sigma_px is None else np.maximum(np.asarray(sigma_px, float), 0.02)
    inten = None if intensity is None else np.asarray(intensity, float)
    c = np.asarray(start_px, np.float64).copy()
    if search_px is not None and search_px > 0:
        voted = _vote_center(xy, c, float(search_px), inten, min_radius_px)
        if voted is not None:
            c = voted
    pairs = np.zeros((0, 2), int)
    sigma = float("nan")
    for tol in (tol_px, tol_px / 2.0, max(tol_px / 4.0, 1.0), max(tol_px / 4.0, 1.0)):
        pr = _pairs(xy, c, tol, inten, max_ratio, min_radius_px)
        if len(pr) < 2:
            if len(pairs) >= 2:
                break
            return None
        mid = 0.5 * (xy[pr[:, 0]] + xy[pr[:, 1]])
        w = 1.0 / (sig[pr[:, 0]] ** 2 + sig[pr[:, 1]] ** 2)
        # One robust pass: drop midpoints far from their (unweighted, per-axis) median.
        med = np.array([median_of(mid[:, 0]), median_of(mid[:, 1])])  # np.median(mid, axis=0)
        dev = np.hypot(*(mid - med).T)
        keep = dev <= max(3.0 * 1.4826 * float(median_of(dev)), 0.5)
        if keep.sum() >= 2:
            pr, mid, w = pr[keep], mid[keep], w[keep]
        c = (w[:, None] * mid).sum(axis=0) / w.sum()
        pairs = pr
        # Uncertainty: each midpoint has variance (s_i^2 + s_j^2)/4 per axis, or the observed scatter if larger.
        scatter = float(np.sqrt(np.sum(w * np.sum((mid - c) ** 2, axis=1)) / (2.0 * w.sum()) * len(mid) / max(len(mid) - 1, 1)))
        formal = float(np.sqrt(1.0 / (4.0 * w.sum())) * 1.0)
        sigma = max(scatter / math.sqrt(len(mid)), formal)
    logger.debug("Friedel centre (%.2f, %.2f) +- %.2f px from %d pairs", c[0], c[1], sigma, len(pairs))
    return FriedelCentre(center_px=(float(c[0]), float(c[1])), sigma_px=sigma, pairs=pairs)


@dataclass(frozen=True)
class DirectBeam:
    """The direct (transmitted) beam: fitted centre (x, y) px and its 1 sigma, Gaussian width, integrated
    intensity (a lower bound when saturated), peak SNR and whether its core is saturated."""

    xy_px: tuple[float, float]
    sigma_px: float
    width_px: float
    intensity: float
    snr: float
    saturated: bool


def find_direct_beam(image, valid, background: Background, start_px, *, width_px: float,
                     saturated_area_px: float = 0.0, min_snr: float = 10.0, max_shift_px: float = 5.0) -> DirectBeam | None:
    """Fit the direct beam near `start_px`; None when nothing bright and significant is there.

    The direct beam is wider than the spots and lies on the steepest haze, so the radial background
    hides it from the spot search; it is fitted on its own (Gaussian on a plane,
    :func:`saed.image.spotfit.fit_spots`) in a window sized from `width_px` (a first width measured at
    the start) and the saturated area, whose pixels (False in `valid`) are left out so the fit uses the
    unsaturated flanks. A fit that wanders more than `max_shift_px` (or 1.5 saturated radii) from the
    start has found something else and is refused.
    """
    x0, y0 = float(start_px[0]), float(start_px[1])
    rows, cols = image.shape
    if not (0 <= x0 < cols and 0 <= y0 < rows):
        return None
    core = math.sqrt(max(saturated_area_px, 0.0) / math.pi)
    s0 = float(np.clip(width_px, 1.0, 20.0))
    half = int(np.clip(math.ceil(3.0 * s0 + core + 3.0), 6, 48))
    fit = fit_spots(image, valid, [x0], [y0], sigma0_px=max(s0, core / 2.0, 1.0), half_px=half,
                    gain=background.gain, offset_var=background.offset_var, var_floor=background.var_floor)
    if not fit.ok[0]:
        return None
    x, y = float(fit.x_px[0]), float(fit.y_px[0])
    if math.hypot(x - x0, y - y0) > max(max_shift_px, 1.5 * core):
        return None
    snr = float(fit.amplitude[0] / max(float(background.sigma(max(fit.background[0], 0.0))), 1e-12))
    if snr < min_snr and saturated_area_px <= 0:
        return None
    return DirectBeam(xy_px=(x, y), sigma_px=float(max(fit.sigma_xy_px[0], 0.01)), width_px=float(fit.width_px[0]),
                      intensity=float(fit.intensity[0]), snr=snr, saturated=saturated_area_px > 0)

"""Look for faint superlattice spots where they must be, the way a microscopist does.

An ordered phase in the orientation of its disordered form (L1_2 Ni3Al on fcc Ni) puts its
superlattice reflections at positions the fundamental spots fix exactly. Kinematically they carry
1-2 % of the neighbouring fundamental intensity times the ordered area share, so the general spot
search (a threshold over the whole image) often misses them. Knowing where to look lowers the
threshold honestly: :func:`probe_reflections` measures every predicted position with a matched
filter, and compares it with the same filter at *null* positions of the same image.

Photometry at a position p (x = column, y = row):

* the spot model is a circular Gaussian of the pattern's own spot width s (the median RMS size of the
  detected spots); the amplitude estimate is A = sum w (I - b) / sum w^2 over r <= 2.5 s, w the
  Gaussian centred at p (sub-pixel), b the median of the annulus 3.5 s <= r <= 6 s (robust against a
  neighbouring spot, a Kikuchi band edge or the halo's slope); the integrated intensity is
  2 pi s^2 A, the measure of the spot stage (integrated counts above background);
* null positions: :data:`N_NULL` points at the same distance from the centre as p, spread over the
  azimuth, none nearer than :func:`exclusion_radius_px` to a detected spot or to any predicted
  reflection. Their median and robust scatter (1.4826 MAD) give the background level and the noise
  of A at that radius, measured on this image (halo, Kikuchi bands, detector noise and everything
  else that is not a spot included); z = (A - median) / scatter.

A superlattice family is counted as present only when the combined significance of all its
predicted positions, Z = sum z_i / sqrt(n), reaches :data:`PRESENT_Z`: one-sided about 3e-5 for a
normal null; the rate it actually gives is measured on single-crystal frames by
:func:`decoy_family_z` (the same predicted set turned about the centre by an angle that puts it
off every reflection) and recorded in docs/indexing.md section 8. All positions count, the faint
and the negative ones too, so the estimate is not biased towards the bright spots that a threshold
would keep.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.image.nearby import nearest_within

__all__ = ["ProbeResult", "amplitude_map", "family_z", "probe_reflections", "decoy_family_z", "exclusion_radius_px", "PRESENT_Z", "N_NULL"]

#: A reflection family is present when sum z / sqrt(n) over its predicted positions reaches this
#: (one-sided 3e-5 for a normal null; the measured decoy rate is in docs/indexing.md section 8).
PRESENT_Z = 4.0
#: Null positions per probed position (same radius, spread over the azimuth).
N_NULL = 32
#: Core and annulus radii of the photometry, in spot widths.
CORE_SIGMAS = 2.5
ANNULUS_SIGMAS = (3.5, 6.0)


def exclusion_radius_px(sigma_px: float) -> float:
    """Null positions stay this far (px) from every spot and predicted reflection: the annulus's outer edge
    plus one core radius, so that no spot light enters a null measurement."""
    return (ANNULUS_SIGMAS[1] + CORE_SIGMAS) * sigma_px + 1.0


@dataclass(frozen=True)
class ProbeResult:
    """Matched-filter photometry at predicted positions.

    ``intensity`` integrated counts above the local background (may be negative for an empty position);
    ``intensity_sigma`` its noise (from the null positions); ``z`` the significance of each position;
    ``family_z`` sum z / sqrt(n) over the positions; ``n_null`` null measurements used per position.
    """

    xy_px: np.ndarray
    intensity: np.ndarray
    intensity_sigma: np.ndarray
    z: np.ndarray
    family_z: float
    n_null: int

    @property
    def present(self) -> bool:
        return bool(self.family_z >= PRESENT_Z)


def amplitude_map(image: np.ndarray, sigma_px: float) -> np.ndarray:
    """The matched-filter amplitude of a Gaussian spot of width `sigma_px` centred on every pixel, above the mean
    of its annulus (one FFT correlation; sampled at sub-pixel positions by :func:`_sample`).

    A = sum w (I - b) / sum w^2 over r <= 2.5 s, b the annulus mean: linear in I, so one kernel does it. A
    bright neighbour inside the annulus raises b and lowers A (never a false spot); null positions keep
    clear of every spot (:func:`exclusion_radius_px`). Pixels whose window leaves the image are NaN.
    """
    s = float(sigma_px)
    half = int(math.ceil(ANNULUS_SIGMAS[1] * s)) + 1
    off = np.arange(-half, half + 1, dtype=np.float64)
    r = np.hypot(off[None, :], off[:, None])
    core = r <= CORE_SIGMAS * s
    ring = (r >= ANNULUS_SIGMAS[0] * s) & (r <= ANNULUS_SIGMAS[1] * s)
    w = np.where(core, np.exp(-0.5 * (r / s) ** 2), 0.0)
    sw2 = float(np.sum(w * w))
    k = w / sw2 - (float(np.sum(w)) / sw2) * ring / float(ring.sum())
    img = np.asarray(image, np.float64)
    # the kernel is symmetric, so correlation is convolution: one real FFT product, zero-padded (numpy's FFT;
    # scipy.signal would cost a second of import time on a command's first probe)
    h, w = img.shape
    n = k.shape[0]
    shape = (h + n - 1, w + n - 1)
    full = np.fft.irfft2(np.fft.rfft2(img, shape) * np.fft.rfft2(k, shape), shape)
    out = full[half:half + h, half:half + w]
    out[:half, :] = np.nan
    out[-half:, :] = np.nan
    out[:, :half] = np.nan
    out[:, -half:] = np.nan
    return out


def _sample(amap: np.ndarray, xy) -> np.ndarray:
    """`amap` at sub-pixel points (x = column, y = row), bilinear; NaN outside the image or near its edge."""
    from scipy.ndimage import map_coordinates

    xy = np.asarray(xy, float).reshape(-1, 2)
    if len(xy) == 0:
        return np.zeros(0)
    return map_coordinates(amap, [xy[:, 1], xy[:, 0]], order=1, mode="constant", cval=np.nan)


def _null_points(center, radii: np.ndarray, phase0: np.ndarray, exclude_xy: np.ndarray, excl_px: float, n: int):
    """For each radius, 2 n points evenly spread in azimuth from `phase0`: (points (k, 2n, 2), usable (k, 2n)),
    the points within `excl_px` of `exclude_xy` unusable."""
    m = 2 * n
    ang = phase0[:, None] + 2.0 * math.pi * np.arange(m)[None, :] / m
    pts = np.stack([center[0] + radii[:, None] * np.cos(ang), center[1] + radii[:, None] * np.sin(ang)], axis=2)
    ok = np.ones(ang.shape, bool)
    if len(exclude_xy):
        ok = (_near_excluded(pts.reshape(-1, 2), exclude_xy, excl_px) < 0).reshape(ang.shape)
    return pts, ok


def _near_excluded(points: np.ndarray, exclude_xy: np.ndarray, excl_px: float) -> np.ndarray:
    """Index of an excluded point within `excl_px` of each point, -1 where none is (the image stage's cell-grid
    neighbour search; scipy.spatial would add its import to the first probe of a command)."""
    return nearest_within(points, exclude_xy, excl_px)[0]


def family_z(z: np.ndarray, noise: np.ndarray, expected=None) -> float:
    """The matched filter across the reflections: sum e_i z_i / sqrt(sum e_i^2), e_i = expected_i / noise_i the
    signal-to-noise each position is expected to have (all 1 without `expected`); NaN positions do not count."""
    z = np.asarray(z, float)
    ok = np.isfinite(z)
    e = np.ones(len(z)) if expected is None else np.asarray(expected, float) / np.where(ok, np.asarray(noise, float), 1.0)
    ok &= np.isfinite(e)
    den = float(np.sum(e[ok] ** 2))
    return float(np.sum(e[ok] * z[ok]) / math.sqrt(den)) if den > 0 else float("nan")


def probe_reflections(amap: np.ndarray, xy_px, *, center_px, sigma_px: float, exclude_xy_px, expected=None) -> ProbeResult:
    """Photometry at the predicted positions `xy_px` against null positions at the same radii (module docstring).

    `amap`: :func:`amplitude_map` of the image. `exclude_xy_px`: every detected spot and every predicted
    reflection (the probed ones included): null positions keep away from them. `expected`: the intensity each
    position is expected to have under the hypothesis (any common factor); the family significance then
    weights each z by its expected signal-to-noise (the matched filter across the reflections), else all
    alike. Positions whose window leaves the image, or with fewer than 8 usable null positions, get NaN and
    do not count.
    """
    xy = np.asarray(xy_px, float).reshape(-1, 2)
    ex = np.asarray(exclude_xy_px, float).reshape(-1, 2)
    c = np.asarray(center_px, float)
    s = float(sigma_px)
    n = len(xy)
    area = 2.0 * math.pi * s * s
    if n == 0:
        return ProbeResult(xy, np.zeros(0), np.zeros(0), np.zeros(0), float("nan"), 0)
    amp = _sample(amap, xy)
    d = xy - c[None, :]
    radii = np.hypot(d[:, 0], d[:, 1])
    pts, ok = _null_points(c, radii, np.arctan2(d[:, 1], d[:, 0]) + math.pi / (2 * N_NULL), ex, exclusion_radius_px(s),
                           N_NULL)
    vals = _sample(amap, pts.reshape(-1, 2)).reshape(ok.shape)
    vals = np.where(ok, vals, np.nan)
    fin = np.isfinite(vals)
    cnt = fin.sum(axis=1)
    # N_NULL of the usable points, spread over the azimuth: usable ones first (azimuth order kept), then every
    # (cnt - 1) / (N_NULL - 1)-th
    order = np.argsort(~fin, axis=1, kind="stable")
    packed = np.take_along_axis(vals, order, axis=1)
    j = np.arange(N_NULL)[None, :]
    take = np.where(cnt[:, None] >= N_NULL, (j * (np.maximum(cnt, 1)[:, None] - 1)) // (N_NULL - 1), j)
    sub = np.take_along_axis(packed, np.minimum(take, packed.shape[1] - 1), axis=1)
    sub = np.where(j < cnt[:, None], sub, np.nan)
    enough = cnt >= 8
    med = np.full(n, np.nan)
    sd = np.full(n, np.nan)
    full = cnt >= N_NULL  # no gap: the plain median (nanmedian is slow)
    for rows, fn in ((full, np.median), (enough & ~full, np.nanmedian)):
        if rows.any():
            med[rows] = fn(sub[rows], axis=1)
            sd[rows] = 1.4826 * fn(np.abs(sub[rows] - med[rows][:, None]), axis=1)
    sd = np.where(sd > 0, sd, np.nan)
    z = (amp - med) / sd
    fam = family_z(z, sd, expected)
    used = np.minimum(cnt, N_NULL)[np.isfinite(z)]
    return ProbeResult(xy, (amp - med) * area, sd * area, z, fam, int(np.median(used)) if len(used) else 0)


def decoy_family_z(amap: np.ndarray, xy_px, *, center_px, sigma_px: float, exclude_xy_px, expected=None,
                   n_decoys: int = 12) -> np.ndarray:
    """family_z of the predicted set `xy_px` turned about the centre (1 deg steps from 1 deg), the turned
    positions near an excluded point dropped (at least half kept), up to `n_decoys` turns: the false-alarm
    distribution of :func:`probe_reflections` on this image."""
    c = np.asarray(center_px, float)
    xy = np.asarray(xy_px, float).reshape(-1, 2) - c
    ex = np.asarray(exclude_xy_px, float).reshape(-1, 2)
    excl = exclusion_radius_px(sigma_px)
    out = []
    for t in range(1, 360):
        a = math.radians(float(t))
        rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
        p = xy @ rot.T + c
        keep = np.ones(len(p), bool) if not len(ex) else _near_excluded(p, ex, excl) < 0
        if keep.sum() < max(2, len(xy) // 2):
            continue
        e = None if expected is None else np.asarray(expected, float)[keep]
        out.append(probe_reflections(amap, p[keep], center_px=c, sigma_px=sigma_px,
                                     exclude_xy_px=np.vstack([ex, p[keep]]), expected=e).family_z)
        if len(out) >= n_decoys:
            break
    return np.array(out)

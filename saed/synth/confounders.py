"""What real selected-area patterns show besides the spots: Kikuchi bands, a diffuse halo, streaks.

Each function returns expected electrons per pixel (float64, shape of the detector) to be added to
a rendered pattern (:func:`add_confounders` draws them with Poisson statistics):

* Kikuchi bands: pairs of straight lines from inelastically then elastically scattered electrons
  in thicker regions; each band is a slightly bright strip whose edges are a bright and a dark line
  (Williams & Carter, *Transmission Electron Microscopy*, 2009, ch. 19), here with a width of
  about a low-order |g| and a strength of a few per cent of the local haze and spots.
* A diffuse halo: a broad ring from an amorphous surface layer (oxide, contamination) at
  ``halo_radius_px`` (about 4-5 1/nm for oxides).
* Streaks: thin plates and stacking faults stretch every spot of a crystal into a rod along the
  plate normal (relrod), seen as streaks through the spots.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Confounders", "kikuchi_bands", "diffuse_halo", "streaks", "add_confounders"]


@dataclass(frozen=True)
class Confounders:
    """Which confounders to add and how strong (electrons per pixel at their peak)."""

    kikuchi_bands: int = 0
    kikuchi_electrons: float = 8.0
    kikuchi_width_px: float = 40.0
    halo_electrons: float = 0.0
    halo_radius_px: float = 90.0
    halo_width_px: float = 12.0
    streak_electrons_fraction: float = 0.0
    streak_length_px: float = 30.0
    streak_azimuth_deg: float = 30.0


def kikuchi_bands(shape, center_px, *, n: int, electrons: float, width_px: float, rng) -> np.ndarray:
    """`n` bands at random azimuths passing within a quarter-frame of the centre.

    Their strength follows the diffuse background they come from (inelastic scattering falls off
    like the haze, ~ (1 + (r / 25 px)^2)^-0.8); `electrons` is the edge-line excess 100 px from the centre.
    """
    rows, cols = shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    r = np.hypot(xx - center_px[0], yy - center_px[1])
    envelope = ((1.0 + (r / 25.0) ** 2) / (1.0 + 16.0)) ** -0.8
    out = np.zeros(shape)
    for _ in range(int(n)):
        a = rng.uniform(0, math.pi)
        nx, ny = math.cos(a), math.sin(a)
        c = float(center_px[0]) * nx + float(center_px[1]) * ny + rng.uniform(-0.25, 0.25) * min(rows, cols)
        t = xx * nx + yy * ny - c
        half = 0.5 * width_px
        band = 0.35 * (np.abs(t) < half)
        edge = 2.5
        band = band + np.exp(-0.5 * ((t - half) / edge) ** 2) - 0.7 * np.exp(-0.5 * ((t + half) / edge) ** 2)
        out += electrons * band * envelope
    return out


def diffuse_halo(shape, center_px, *, electrons: float, radius_px: float, width_px: float) -> np.ndarray:
    rows, cols = shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    r = np.hypot(xx - center_px[0], yy - center_px[1])
    return electrons * np.exp(-0.5 * ((r - radius_px) / width_px) ** 2)


def streaks(shape, spot_xy_px, spot_electrons, *, fraction: float, length_px: float, azimuth_deg: float) -> np.ndarray:
    """A rod of `length_px` through every spot along `azimuth_deg`, holding `fraction` of its electrons."""
    rows, cols = shape
    out = np.zeros(shape)
    a = math.radians(azimuth_deg)
    d = np.array([math.cos(a), math.sin(a)])
    steps = np.linspace(-0.5 * length_px, 0.5 * length_px, max(int(length_px), 2))
    for (x, y), e in zip(np.asarray(spot_xy_px, float), np.asarray(spot_electrons, float)):
        per = fraction * e / len(steps)
        px = np.rint(x + steps * d[0]).astype(int)
        py = np.rint(y + steps * d[1]).astype(int)
        ok = (px >= 0) & (px < cols) & (py >= 0) & (py < rows)
        w = per * np.exp(-2.0 * np.abs(steps) / length_px)
        np.add.at(out, (py[ok], px[ok]), w[ok])
    from scipy import ndimage

    return ndimage.gaussian_filter(out, 1.0)


def add_confounders(image: np.ndarray, center_px, conf: Confounders, *, spot_xy_px=None, spot_electrons=None,
                    gain: float = 1.0, rng=None) -> np.ndarray:
    """`image` (integer counts) with the confounders of `conf` added (Poisson), clipped to its dtype."""
    rng = np.random.default_rng(rng)
    shape = image.shape
    extra = np.zeros(shape)
    if conf.kikuchi_bands:
        extra += kikuchi_bands(shape, center_px, n=conf.kikuchi_bands, electrons=conf.kikuchi_electrons,
                               width_px=conf.kikuchi_width_px, rng=rng)
    if conf.halo_electrons > 0:
        extra += diffuse_halo(shape, center_px, electrons=conf.halo_electrons, radius_px=conf.halo_radius_px,
                              width_px=conf.halo_width_px)
    if conf.streak_electrons_fraction > 0 and spot_xy_px is not None and len(spot_xy_px):
        extra += streaks(shape, spot_xy_px, spot_electrons, fraction=conf.streak_electrons_fraction,
                         length_px=conf.streak_length_px, azimuth_deg=conf.streak_azimuth_deg)
    # excess as Poisson counts; deficit (the dark Kikuchi lines) taken off the background
    counts = image.astype(np.float64) + gain * (rng.poisson(np.clip(extra, 0.0, None)) + np.minimum(extra, 0.0))
    dt = image.dtype
    hi = float(np.iinfo(dt).max) if dt.kind in "ui" else np.inf
    return np.clip(np.rint(counts), 0, hi).astype(dt)

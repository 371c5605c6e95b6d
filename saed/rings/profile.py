"""Azimuthal integration about a centre, with masks and the projector's elliptical distortion undone.

Every pixel gets a *corrected radius*: its offset from the centre with the ellipse removed
(:meth:`saed.calibration.Ellipse.corrected_px`, area-preserving: the corrected radius of a ring is the
geometric mean of its two semi-axes). Pixels are binned by that radius (pixel centres, no sub-pixel
splitting: a ring covers thousands of pixels at all sub-pixel offsets, so the binned mean is
unbiased). Masked pixels (True = ignore) take no part.

Pixel convention (CONTRACT.md): x = column, y = row, origin at the centre of the top-left pixel.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.calibration import Ellipse
from saed.errors import ImageError, InputError
from saed.readonly import frozen_array
from saed.simulate.rings import check_center_px, polar_coordinates

__all__ = ["RadialProfile", "SectorProfiles", "radial_profile", "sector_profiles"]


@dataclass(frozen=True, eq=False)
class RadialProfile:
    """Mean intensity per corrected-radius bin.

    radius_px : (n,) bin centres; mean : (n,) mean counts per pixel; sem : (n,) standard error of the
    mean (NaN where fewer than 2 pixels); count : (n,) pixels per bin. Empty bins have mean NaN.
    """

    radius_px: np.ndarray
    mean: np.ndarray
    sem: np.ndarray
    count: np.ndarray
    bin_px: float
    center_px: tuple[float, float]
    ellipse: Ellipse | None

    def __post_init__(self):
        for name in ("radius_px", "mean", "sem"):
            object.__setattr__(self, name, frozen_array(getattr(self, name), np.float64))
        object.__setattr__(self, "count", frozen_array(self.count, np.int64))


@dataclass(frozen=True, eq=False)
class SectorProfiles:
    """Mean intensity per (azimuth sector, corrected-radius bin).

    mean, count : (n_sectors, n_bins); sector_deg : (n_sectors,) centre angle of each sector, from +x
    toward +y (raw, undistorted-frame independent: the angle of the pixel offset on the detector);
    radius_px : (n_bins,) bin centres.
    """

    mean: np.ndarray
    count: np.ndarray
    sector_deg: np.ndarray
    radius_px: np.ndarray
    bin_px: float

    def __post_init__(self):
        object.__setattr__(self, "mean", frozen_array(self.mean, np.float64))
        object.__setattr__(self, "count", frozen_array(self.count, np.int64))
        object.__setattr__(self, "sector_deg", frozen_array(self.sector_deg, np.float64))
        object.__setattr__(self, "radius_px", frozen_array(self.radius_px, np.float64))


def _check_image(image) -> np.ndarray:
    img = np.asarray(image)
    if img.ndim != 2:
        raise ImageError(f"expected a 2-D image, got an array of shape {img.shape}")
    return img


def _valid(img: np.ndarray, mask) -> np.ndarray:
    ok = np.isfinite(img)
    if mask is not None:
        m = np.asarray(mask, dtype=bool)
        if m.shape != img.shape:
            raise InputError(f"mask shape {m.shape} differs from the image shape {img.shape}")
        ok &= ~m
    return ok


def radial_profile(image, *, center_px, ellipse: Ellipse | None = None, mask=None, bin_px: float = 0.5,
                   r_max_px: float | None = None, _coords=None) -> RadialProfile:
    """Azimuthal average of `image` about `center_px`, in bins of corrected radius.

    Parameters
    ----------
    image : (ny, nx) array
    center_px : (x, y) pattern centre, pixels
    ellipse : distortion to undo (None: circular rings)
    mask : (ny, nx) bool, True = pixel ignored (beam stop, saturated, dead), or None
    bin_px : bin width in corrected pixels
    r_max_px : outermost radius kept (default: the farthest valid pixel)

    Examples
    --------
    >>> img = np.ones((21, 21), np.float32)
    >>> p = radial_profile(img, center_px=(10, 10), bin_px=1.0, r_max_px=5)
    >>> p.mean[:3].tolist(), p.count[:2].tolist()
    ([1.0, 1.0, 1.0], [1, 8])
    """
    img = _check_image(image)
    if not bin_px > 0:
        raise InputError(f"radial bin width must be positive, got {bin_px!r} px")
    r, _phi = _coords if _coords is not None else polar_coordinates(img.shape, center_px, ellipse)
    ok = _valid(img, mask)
    if r_max_px is not None:
        ok &= r < r_max_px
    rv = r[ok]
    if rv.size == 0:
        raise ImageError("no valid pixels to integrate (all masked or not finite)")
    v = img[ok].astype(np.float64)
    idx = (rv / bin_px).astype(np.int64)
    n_bins = int(idx.max()) + 1
    count = np.bincount(idx, minlength=n_bins)
    s1 = np.bincount(idx, weights=v, minlength=n_bins)
    s2 = np.bincount(idx, weights=v * v, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count > 0, s1 / np.maximum(count, 1), np.nan)
        var = np.where(count > 1, (s2 - count * mean**2) / np.maximum(count - 1, 1), np.nan)
        sem = np.sqrt(np.maximum(var, 0.0) / np.maximum(count, 1))
    sem = np.where(count > 1, sem, np.nan)
    centres = (np.arange(n_bins) + 0.5) * bin_px
    return RadialProfile(centres, mean, sem, count, float(bin_px), check_center_px(center_px), ellipse)


def sector_profiles(image, *, center_px, ellipse: Ellipse | None = None, mask=None, n_sectors: int = 72,
                    r_min_px: float, r_max_px: float, bin_px: float = 0.5, _coords=None) -> SectorProfiles:
    """Mean intensity in (azimuth sector x corrected-radius bin) cells over the annulus r_min..r_max.

    Sectors are equal slices of the raw detector azimuth, the first centred on +x.

    Examples
    --------
    >>> img = np.ones((41, 41))
    >>> sp = sector_profiles(img, center_px=(20, 20), n_sectors=4, r_min_px=5, r_max_px=15, bin_px=5)
    >>> sp.mean.shape, sp.sector_deg.tolist()
    ((4, 2), [0.0, 90.0, 180.0, 270.0])
    """
    img = _check_image(image)
    n_sectors = int(n_sectors)
    if n_sectors < 4:
        raise InputError(f"need at least 4 azimuth sectors, got {n_sectors}")
    if not 0 <= r_min_px < r_max_px:
        raise InputError(f"annulus {r_min_px!r}..{r_max_px!r} px is empty")
    r, phi = _coords if _coords is not None else polar_coordinates(img.shape, center_px, ellipse)
    ok = _valid(img, mask) & (r >= r_min_px) & (r < r_max_px)
    n_bins = int(math.ceil((r_max_px - r_min_px) / bin_px))
    rb = ((r[ok] - r_min_px) / bin_px).astype(np.int64)
    rb = np.minimum(rb, n_bins - 1)
    width = 360.0 / n_sectors
    sb = (((phi[ok] + width / 2) % 360.0) / width).astype(np.int64) % n_sectors
    flat = sb * n_bins + rb
    v = img[ok].astype(np.float64)
    count = np.bincount(flat, minlength=n_sectors * n_bins).reshape(n_sectors, n_bins)
    s1 = np.bincount(flat, weights=v, minlength=n_sectors * n_bins).reshape(n_sectors, n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count > 0, s1 / np.maximum(count, 1), np.nan)
    radii = r_min_px + (np.arange(n_bins) + 0.5) * bin_px
    return SectorProfiles(mean, count, np.arange(n_sectors) * width, radii, float(bin_px))

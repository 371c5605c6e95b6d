"""A zone pattern as a detector would record it: counts on a pixel grid (numpy only, no file I/O).

The picture is built from the kinematic pattern and a few plain instrument facts:

* spot positions: centre + R(phi) (x, y)_g / scale, detector frame of :mod:`saed.simulate.geometry`
  (x = column, y = row), for the in-plane rotation phi and the scale in 1/nm per pixel;
* each spot a 2-D Gaussian of width ``spot_sigma_px`` (beam size at the detector), its peak
  proportional to the kinematic intensity;
* the central beam far brighter than any spot, clipped at the detector's full well, and a smooth
  diffuse halo around it (inelastic and thermal diffuse scattering), plus a flat dark level;
* optional Poisson noise (``rng`` seeds it).

Forbidden reflections reached by double diffraction carry no kinematic intensity; give
``double_diffraction_strength`` > 0 to show them at that fraction of sqrt(I_g1 I_g2) of their route.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.errors import InputError
from saed.simulate.zone import ZonePattern

__all__ = ["DetectorImage", "detector_image", "default_scale_inv_nm_per_px"]

#: Full well of a 16-bit detector, counts.
FULL_WELL_COUNTS = 65535.0


@dataclass(frozen=True, eq=False)
class DetectorImage:
    """Synthetic detector frame (float32 counts, rows x columns) and where the reflections fell.

    ``spot_xy_px`` (N, 2) holds (x = column, y = row) of each row of the pattern, NaN where it
    falls off the detector.
    """

    image: np.ndarray
    center_px: tuple[float, float]
    scale_inv_nm_per_px: float
    in_plane_rotation_deg: float
    spot_xy_px: np.ndarray
    spot_peak_counts: np.ndarray

    def __post_init__(self):
        for name in ("image", "spot_xy_px", "spot_peak_counts"):
            a = np.asarray(getattr(self, name))
            a.flags.writeable = False
            object.__setattr__(self, name, a)


def default_scale_inv_nm_per_px(zp: ZonePattern, size_px: int) -> float:
    """A scale that puts max_g at 46 % of the frame width from the centre."""
    return zp.max_g_inv_nm / (0.46 * size_px)


def detector_image(zp: ZonePattern, *, shape_px: tuple[int, int] = (1024, 1024),
                   scale_inv_nm_per_px: float | None = None, center_px: tuple[float, float] | None = None,
                   in_plane_rotation_deg: float = 0.0, spot_sigma_px: float = 2.0,
                   peak_counts: float = 20000.0, central_beam_ratio: float = 50.0,
                   halo_counts: float = 150.0, halo_width_inv_nm: float = 1.0, dark_counts: float = 20.0,
                   double_diffraction_strength: float = 0.0, noise: bool = False, rng=None) -> DetectorImage:
    """Render `zp` to counts.

    Parameters
    ----------
    shape_px : (rows, columns)
    scale_inv_nm_per_px : 1/nm per pixel (default: :func:`default_scale_inv_nm_per_px`)
    center_px : (x, y) of 000 (default: the frame centre)
    in_plane_rotation_deg : turn of the pattern from +x toward +y
    spot_sigma_px : Gaussian width of a spot, pixels
    peak_counts : peak of the strongest reflection (intensity 1), counts
    central_beam_ratio : central-beam peak / `peak_counts` (clipped at the 16-bit full well)
    halo_counts, halo_width_inv_nm : diffuse halo I = halo / (1 + (g / width)^2) around 000
    dark_counts : flat offset
    double_diffraction_strength : fraction of sqrt(I_g1 I_g2) given to double-diffraction spots (0: none)
    noise : add Poisson noise; rng seeds it
    """
    rows, cols = (int(v) for v in shape_px)
    if rows < 16 or cols < 16 or rows > 8192 or cols > 8192:
        raise InputError(f"image size {rows}x{cols} px must lie between 16 and 8192 pixels a side")
    scale = default_scale_inv_nm_per_px(zp, min(rows, cols)) if scale_inv_nm_per_px is None else float(scale_inv_nm_per_px)
    if not math.isfinite(scale) or scale <= 0:
        raise InputError(f"image scale {scale_inv_nm_per_px!r} 1/nm per pixel must be a positive number")
    sigma = float(spot_sigma_px)
    if not math.isfinite(sigma) or not 0.3 <= sigma <= 50:
        raise InputError(f"spot size {spot_sigma_px!r} px must lie between 0.3 and 50 pixels")
    if not 0.0 <= float(double_diffraction_strength) <= 1.0:
        raise InputError("double-diffraction strength must lie between 0 and 1")
    cx, cy = ((cols - 1) / 2.0, (rows - 1) / 2.0) if center_px is None else (float(center_px[0]), float(center_px[1]))
    if not (math.isfinite(cx) and math.isfinite(cy) and -cols <= cx <= 2 * cols and -rows <= cy <= 2 * rows):
        # Farther out than one frame, nothing of a pattern scaled to the frame reaches it: a blank image.
        raise InputError(f"centre ({cx:g}, {cy:g}) px lies far outside the {cols}x{rows} px image: give a centre "
                         f"within x {-cols} to {2 * cols}, y {-rows} to {2 * rows} (the frame centre is "
                         f"{(cols - 1) / 2:g}, {(rows - 1) / 2:g})")

    xy = zp.xy_rotated_inv_nm(in_plane_rotation_deg) / scale + np.array([cx, cy])
    peaks = zp.intensity * float(peak_counts)
    if double_diffraction_strength > 0:
        r = zp.dd_route
        dd = zp.double_diffraction
        peaks = peaks.copy()
        peaks[dd] = double_diffraction_strength * np.sqrt(peaks[r[dd, 0]] * peaks[r[dd, 1]])

    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float32)
    g_px = np.hypot(xx - cx, yy - cy)
    img = np.full((rows, cols), float(dark_counts), dtype=np.float32)
    img += float(halo_counts) / (1.0 + (g_px * scale / float(halo_width_inv_nm)) ** 2)
    central = min(central_beam_ratio * peak_counts, 4.0 * FULL_WELL_COUNTS)
    _add_spot(img, cx, cy, 2.5 * sigma, central)
    _add_spot(img, cx, cy, 8.0 * sigma, 0.02 * central)  # flare of the unscattered beam
    half = int(math.ceil(4.5 * sigma))
    on = (xy[:, 0] > -half) & (xy[:, 0] < cols + half) & (xy[:, 1] > -half) & (xy[:, 1] < rows + half)
    for (x, y), p in zip(xy[on], peaks[on]):
        if p > 0:
            _add_spot(img, x, y, sigma, p)
    if noise:
        gen = np.random.default_rng(rng)
        img = gen.poisson(np.maximum(img, 0)).astype(np.float32)
    np.minimum(img, FULL_WELL_COUNTS, out=img)
    spot_xy = np.where(on[:, None], xy, np.nan)
    return DetectorImage(img, (cx, cy), scale, float(in_plane_rotation_deg), spot_xy, peaks)


def _add_spot(img: np.ndarray, x: float, y: float, sigma: float, peak: float) -> None:
    rows, cols = img.shape
    half = int(math.ceil(6.0 * sigma))  # exp(-18): no visible truncation edge
    x0, x1 = max(int(math.floor(x)) - half, 0), min(int(math.floor(x)) + half + 2, cols)
    y0, y1 = max(int(math.floor(y)) - half, 0), min(int(math.floor(y)) + half + 2, rows)
    if x0 >= x1 or y0 >= y1:
        return
    gx = np.exp(-0.5 * ((np.arange(x0, x1) - x) / sigma) ** 2)
    gy = np.exp(-0.5 * ((np.arange(y0, y1) - y) / sigma) ** 2)
    img[y0:y1, x0:x1] += (peak * np.outer(gy, gx)).astype(np.float32)

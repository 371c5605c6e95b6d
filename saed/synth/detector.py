"""A detector model that turns spot positions and intensities into a realistic recorded pattern.

What a recorded SAED pattern carries besides its spots, and how it is modelled here:

* spot profiles: pixel-integrated 2-D Gaussians (points), or uniform discs with a soft edge (a larger
  beam convergence), all of one size per pattern;
* the direct beam: a bright Gaussian at the centre, usually far above the detector's full well,
  so it is clipped flat (saturated);
* inelastic (diffuse) haze: a Lorentzian-like fall-off ``H / (1 + (r / r0)^2)^(p/2)`` about the
  centre plus a flat floor, in electrons per pixel;
* a beam stop: a straight rod from the border to the centre with a rounded tip, transmitting a
  small fraction, with a soft (penumbra) edge;
* elliptical distortion of the projector lens (:class:`saed.calibration.Ellipse`, area-preserving
  convention of :meth:`~saed.calibration.Ellipse.corrected_px`), applied to spots and haze;
* a small mistilt: spot intensities scaled by ``1 + k (v . u) / r_max`` so one side is brighter;
* counting statistics: Poisson electrons, a gain in counts per electron, Gaussian read noise, a dark
  offset, rounding to the detector's integer type and clipping at its saturation level;
* a few hot pixels (single bright pixels, as from X-ray hits), if asked.

Everything random comes from ``rng`` (``np.random.default_rng(rng)``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import erf

from saed.calibration import Ellipse
from saed.errors import InputError

__all__ = ["Detector", "BeamStop", "Scene", "SynthPattern", "render_pattern", "distortion_matrix",
           "spot_peak_counts"]


@dataclass(frozen=True)
class Detector:
    """Camera: size, counting statistics and the integer type of the file.

    gain_counts_per_electron: mean counts one electron gives; read_noise_counts: Gaussian 1-sigma;
    dark_offset_counts: the level of an unexposed pixel; saturation_counts: the clipping level
    (the largest value of ``dtype`` by default); counting_noise: False records the expected counts
    (no Poisson or read noise), as for a picture of a simulation.
    """

    shape: tuple[int, int] = (1024, 1024)
    gain_counts_per_electron: float = 1.0
    read_noise_counts: float = 2.0
    dark_offset_counts: float = 50.0
    saturation_counts: float | None = None
    dtype: str = "uint16"
    counting_noise: bool = True

    @property
    def full_scale_counts(self) -> float:
        if self.saturation_counts is not None:
            return float(self.saturation_counts)
        dt = np.dtype(self.dtype)
        return float(np.iinfo(dt).max) if dt.kind in "ui" else float("inf")


@dataclass(frozen=True)
class BeamStop:
    """A rod from the border to the pattern centre (rounded tip of radius width/2 at ``tip_offset_px``).

    angle_deg: direction from the centre toward the border along which the rod runs, from +x toward
    +y; tip_offset_px: (dx, dy) of the tip centre from the pattern centre; transmission: fraction of
    electrons passing the rod; edge_px: width of the soft edge.
    """

    angle_deg: float = 225.0
    width_px: float = 40.0
    tip_offset_px: tuple[float, float] = (0.0, 0.0)
    transmission: float = 0.01
    edge_px: float = 1.5

    def distance_px(self, x, y, center_px) -> np.ndarray:
        """Signed distance (px) of points from the rod's edge: negative inside, positive outside."""
        x, y = np.asarray(x, np.float64), np.asarray(y, np.float64)
        tx = center_px[0] + self.tip_offset_px[0]
        ty = center_px[1] + self.tip_offset_px[1]
        a = math.radians(self.angle_deg)
        ux, uy = math.cos(a), math.sin(a)
        t = np.clip((x - tx) * ux + (y - ty) * uy, 0.0, None)
        return np.hypot(x - (tx + t * ux), y - (ty + t * uy)) - self.width_px / 2.0

    def transmission_map(self, shape, center_px) -> np.ndarray:
        """(rows, cols) fraction of electrons passing (1 outside the rod)."""
        rows, cols = shape
        y, x = np.mgrid[0:rows, 0:cols].astype(np.float64)
        d = self.distance_px(x, y, center_px)
        inside = 0.5 * (1.0 - erf(d / (math.sqrt(2.0) * max(self.edge_px, 1e-3))))
        return 1.0 - (1.0 - self.transmission) * inside


@dataclass(frozen=True)
class Scene:
    """What the optics and the specimen add: spot shape, direct beam, haze, distortion, mistilt, defects.

    Spot shape: Gaussian of ``spot_sigma_px`` when ``disc_radius_px`` is 0, else a disc of that
    radius with an edge of ``spot_sigma_px``; ``size_spread`` > 0 gives every spot its own size,
    ``exp(size_spread * N(0, 1))`` times the nominal one (spots of different sizes). Haze in electrons
    per pixel:
    ``haze_electrons / (1 + (r / haze_core_px)^2)^(haze_power / 2) + floor_electrons``.
    """

    spot_sigma_px: float = 1.5
    disc_radius_px: float = 0.0
    size_spread: float = 0.0
    direct_beam_electrons: float = 2e6
    direct_beam_sigma_px: float = 3.0
    haze_electrons: float = 400.0
    haze_core_px: float = 25.0
    haze_power: float = 1.6
    floor_electrons: float = 2.0
    beam_stop: BeamStop | None = None
    ellipse: Ellipse | None = None
    mistilt_strength: float = 0.0
    mistilt_angle_deg: float = 0.0
    hot_pixels: int = 0
    hot_pixel_counts: float = 3000.0


@dataclass(frozen=True)
class SynthPattern:
    """A rendered pattern and its ground truth (positions after distortion, detector pixels, x = column).

    spot_xy_px (N, 2): true centres of the input spots on the detector; spot_electrons (N,): their
    electrons after the mistilt; peak_snr (N,): peak height over the background noise (counts/counts);
    visible (N,): inside the frame (3 sigma from the border) and clear of the beam stop;
    beam_stop_mask: True where the rod transmits under half; distortion: the 2x2 matrix D with
    detector offset = D @ undistorted offset.
    """

    image: np.ndarray
    center_px: tuple[float, float]
    spot_xy_px: np.ndarray
    spot_electrons: np.ndarray
    peak_snr: np.ndarray
    visible: np.ndarray
    direct_beam_saturated: bool
    beam_stop_mask: np.ndarray | None
    distortion: np.ndarray
    detector: Detector
    scene: Scene
    extra: dict = field(default_factory=dict, compare=False)


def distortion_matrix(ellipse: Ellipse | None) -> np.ndarray:
    """2x2 D that maps an undistorted offset to the detector, the inverse of ``Ellipse.corrected_px``."""
    if ellipse is None:
        return np.eye(2)
    q = math.sqrt(ellipse.axis_ratio)
    t = math.radians(ellipse.major_axis_angle_deg)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    return rot @ np.diag([q, 1.0 / q]) @ rot.T


def spot_peak_counts(electrons, scene: Scene, detector: Detector, *, size_factor=1.0) -> np.ndarray:
    """Peak height (counts above background) of spots of `electrons` in `scene` (sampled profile)."""
    e = np.asarray(electrons, float) * detector.gain_counts_per_electron
    if scene.disc_radius_px > 0:
        return e / (math.pi * (scene.disc_radius_px * np.asarray(size_factor, float)) ** 2)
    s = scene.spot_sigma_px * np.asarray(size_factor, float)
    # Pixel-integrated Gaussian: the central pixel holds erf(1/(2 sqrt2 s))^2 of the spot.
    return e * erf(0.5 / (math.sqrt(2.0) * s)) ** 2


def _haze(shape, center_px, scene: Scene, dinv: np.ndarray) -> np.ndarray:
    rows, cols = shape
    y, x = np.mgrid[0:rows, 0:cols].astype(np.float64)
    dx, dy = x - center_px[0], y - center_px[1]
    ux = dinv[0, 0] * dx + dinv[0, 1] * dy
    uy = dinv[1, 0] * dx + dinv[1, 1] * dy
    r2 = (ux * ux + uy * uy) / scene.haze_core_px**2
    return scene.haze_electrons / (1.0 + r2) ** (scene.haze_power / 2.0) + scene.floor_electrons


def _add_spot(out: np.ndarray, x0: float, y0: float, electrons: float, sigma: float, disc_r: float) -> None:
    rows, cols = out.shape
    half = int(math.ceil(5.0 * sigma + disc_r + 2))
    c0, c1 = max(int(math.floor(x0)) - half, 0), min(int(math.floor(x0)) + half + 2, cols)
    r0, r1 = max(int(math.floor(y0)) - half, 0), min(int(math.floor(y0)) + half + 2, rows)
    if c0 >= c1 or r0 >= r1:
        return
    xs = np.arange(c0, c1, dtype=np.float64)
    ys = np.arange(r0, r1, dtype=np.float64)
    if disc_r <= 0:
        k = 1.0 / (math.sqrt(2.0) * sigma)
        fx = 0.5 * (erf((xs + 0.5 - x0) * k) - erf((xs - 0.5 - x0) * k))
        fy = 0.5 * (erf((ys + 0.5 - y0) * k) - erf((ys - 0.5 - y0) * k))
        out[r0:r1, c0:c1] += electrons * fy[:, None] * fx[None, :]
        return
    # Disc with a soft edge, sampled on a 4x4 sub-grid of each pixel, normalised to `electrons`.
    sub = (np.arange(4) + 0.5) / 4.0 - 0.5
    xx = (xs[:, None] + sub[None, :]).ravel()
    yy = (ys[:, None] + sub[None, :]).ravel()
    d = np.hypot(xx[None, :] - x0, yy[:, None] - y0) - disc_r
    prof = 0.5 * (1.0 - erf(d / (math.sqrt(2.0) * max(sigma, 1e-3))))
    prof = prof.reshape(len(ys), 4, len(xs), 4).mean(axis=(1, 3))
    total = math.pi * disc_r**2 + math.pi * sigma**2  # area of a soft-edged disc, to first order
    out[r0:r1, c0:c1] += electrons * prof / total


def render_pattern(spot_xy_px, spot_electrons, *, center_px, detector: Detector = Detector(),
                   scene: Scene = Scene(), rng=None) -> SynthPattern:
    """Render spots at undistorted positions `spot_xy_px` (N, 2) with `spot_electrons` (N,) onto a detector.

    Parameters
    ----------
    spot_xy_px : (N, 2) float
        Undistorted spot centres, detector pixels (x = column, y = row); the ellipse of `scene`
        moves them about `center_px`.
    spot_electrons : (N,) float
        Electrons in each spot before the mistilt factor.
    center_px : (2,) float
        Pattern centre (direct beam), pixels.
    detector, scene : the camera and the conditions (see :class:`Detector`, :class:`Scene`).
    rng : None, int or numpy Generator

    Returns
    -------
    SynthPattern
        The image in ``detector.dtype`` and the ground truth.
    """
    rng = np.random.default_rng(rng)
    xy = np.asarray(spot_xy_px, float).reshape(-1, 2)
    el = np.asarray(spot_electrons, float).ravel()
    if len(el) != len(xy):
        raise InputError(f"render_pattern: {len(xy)} positions but {len(el)} intensities")
    rows, cols = (int(v) for v in detector.shape)
    cx, cy = float(center_px[0]), float(center_px[1])
    dmat = distortion_matrix(scene.ellipse)
    dinv = np.linalg.inv(dmat)
    offs = xy - [cx, cy]
    true_xy = offs @ dmat.T + [cx, cy]
    if scene.mistilt_strength:
        a = math.radians(scene.mistilt_angle_deg)
        rmax = max(float(np.max(np.hypot(offs[:, 0], offs[:, 1]), initial=0.0)), 1.0)
        factor = 1.0 + scene.mistilt_strength * (offs @ [math.cos(a), math.sin(a)]) / rmax
        el = el * np.clip(factor, 0.05, None)

    expected = _haze((rows, cols), (cx, cy), scene, dinv)
    haze = expected.copy()
    size = np.exp(scene.size_spread * rng.standard_normal(len(el))) if scene.size_spread > 0 else np.ones(len(el))
    for (x0, y0), e, k in zip(true_xy, el, size):
        _add_spot(expected, x0, y0, e, scene.spot_sigma_px * k, scene.disc_radius_px * k)
    if scene.direct_beam_electrons > 0:
        _add_spot(expected, cx, cy, scene.direct_beam_electrons, scene.direct_beam_sigma_px, 0.0)
    stop_mask = None
    if scene.beam_stop is not None:
        trans = scene.beam_stop.transmission_map((rows, cols), (cx, cy))
        expected *= trans
        haze *= trans
        stop_mask = trans < 0.5

    g = detector.gain_counts_per_electron
    if detector.counting_noise:
        counts = rng.poisson(expected).astype(np.float64) * g
        counts += detector.dark_offset_counts + rng.normal(0.0, detector.read_noise_counts, size=counts.shape)
    else:
        counts = expected * g + detector.dark_offset_counts
    if scene.hot_pixels:
        hr = rng.integers(0, rows, scene.hot_pixels)
        hc = rng.integers(0, cols, scene.hot_pixels)
        counts[hr, hc] += scene.hot_pixel_counts * rng.uniform(0.5, 1.5, scene.hot_pixels)
    full = detector.full_scale_counts
    dt = np.dtype(detector.dtype)
    if dt.kind in "ui":
        counts = np.rint(counts)
    counts = np.clip(counts, 0.0, full)
    image = counts.astype(dt)

    # Ground truth per spot: peak SNR against the background noise where it sits, visibility.
    peak = spot_peak_counts(el, scene, detector, size_factor=size)
    ix = np.clip(np.rint(true_xy[:, 0]).astype(int), 0, cols - 1)
    iy = np.clip(np.rint(true_xy[:, 1]).astype(int), 0, rows - 1)
    bg_e = haze[iy, ix]
    noise = np.sqrt(g * g * bg_e + detector.read_noise_counts**2)
    trans_at = 1.0 if stop_mask is None else trans[iy, ix]
    peak = peak * trans_at
    margin = (3.0 * scene.spot_sigma_px + scene.disc_radius_px) * size
    inside = ((true_xy[:, 0] >= margin) & (true_xy[:, 0] <= cols - 1 - margin)
              & (true_xy[:, 1] >= margin) & (true_xy[:, 1] <= rows - 1 - margin))
    if stop_mask is None:
        visible = inside
    else:
        # a spot is visible when its whole profile (3 sigma + disc radius) is clear of the rod's edge
        clear = scene.beam_stop.distance_px(true_xy[:, 0], true_xy[:, 1], (cx, cy)) > margin + 2.0 * scene.beam_stop.edge_px
        visible = inside & clear
    db_peak = float(spot_peak_counts([scene.direct_beam_electrons], Scene(spot_sigma_px=scene.direct_beam_sigma_px),
                                     detector)[0]) + g * float(haze[int(round(cy)) % rows, int(round(cx)) % cols])
    if stop_mask is not None:
        db_peak *= float(trans[int(round(cy)) % rows, int(round(cx)) % cols])
    saturated = db_peak + detector.dark_offset_counts >= full
    return SynthPattern(image=image, center_px=(cx, cy), spot_xy_px=true_xy, spot_electrons=el,
                        peak_snr=np.divide(peak, noise, out=np.full(len(peak), np.inf), where=noise > 0), visible=np.asarray(visible, bool), direct_beam_saturated=bool(saturated),
                        beam_stop_mask=stop_mask, distortion=dmat, detector=detector, scene=scene)

"""Measured patterns built straight from the kinematic simulation, with known truth.

For tests and the accuracy benchmark at the matcher's own level (no image): spot positions from
:func:`saed.simulate.zone.zone_pattern` on the detector, with position noise, log-normal
"dynamical-like" intensity noise, optional double-diffraction spots, a beam-stop half-plane,
an elliptical projector distortion and a mistilt. Intensities are |F|^2 exp(-(s/w)^2), s the
exact excitation error and w = ``excitation_width_inv_nm`` (a stand-in for a thin bent foil and a
convergent beam). The full image route (render, detect, index)
is exercised by the demo and the benchmark through :mod:`saed.synth`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.calibration import Calibration, Ellipse
from saed.image.values import MeasuredPattern, Spots
from saed.simulate.geometry import in_plane_rotation
from saed.simulate.zone import zone_pattern

__all__ = ["SyntheticTruth", "synthetic_measured"]


@dataclass(frozen=True)
class SyntheticTruth:
    """What the synthetic pattern was made from."""

    phase_name: str
    zone_axis: tuple[int, int, int]
    in_plane_rotation_deg: float
    scale_inv_nm_per_px: float
    orientation_matrix: np.ndarray
    tilt_deg: float
    hkl: np.ndarray  # (n_spots, 3) reflection behind every spot


def synthetic_measured(phase, zone_axis, *, voltage_kv: float = 200.0, scale_inv_nm_per_px: float = 0.05,
                       in_plane_rotation_deg: float = 0.0, tilt_deg: float = 0.0, tilt_toward_hkl=None,
                       thickness_nm: float = 8.0, excitation_width_inv_nm: float = 0.1, image_shape=(512, 512), center_px=None, max_g_inv_nm: float = 12.0,
                       position_noise_px: float = 0.15, intensity_noise: float = 0.3, min_intensity: float = 2e-3,
                       double_diffraction: float = 0.0, ellipse: Ellipse | None = None, calibrated: bool = True,
                       beam_stop_azimuth_deg: float | None = None, extra_spots_xy_px=None, pixel_pitch_um=None,
                       rng=None) -> tuple[MeasuredPattern, SyntheticTruth]:
    """A MeasuredPattern of `phase` along `zone_axis` with known truth (see the module notes).

    ``beam_stop_azimuth_deg``: spots in the half-plane centred on that azimuth are removed (a beam
    stop or its shadow covering half the pattern). ``double_diffraction``: intensity (relative to
    the strongest) given to forbidden spots with a double-diffraction route; 0 leaves them out.
    ``ellipse``: the distortion applied to the positions; the calibration carries it too, as a
    calibrated microscope would (only when ``calibrated``).
    """
    rng = np.random.default_rng(rng)
    zp = zone_pattern(phase, zone_axis, voltage_kv=voltage_kv, max_g_inv_nm=max_g_inv_nm, tilt_deg=tilt_deg,
                      tilt_toward_hkl=tilt_toward_hkl, thickness_nm=thickness_nm, include_holz=False)
    h, w = image_shape
    cx, cy = ((w - 1) / 2.0 + 0.3, (h - 1) / 2.0 - 0.2) if center_px is None else center_px
    # |F|^2 times a broad excitation envelope: a thin, slightly bent foil and a convergent beam
    # keep reflections visible well off the Bragg condition, as in recorded SAED patterns
    f2 = np.where(zp.kinematically_forbidden, 0.0, np.asarray(zp.f_abs, float) ** 2)
    inten = f2 * np.exp(-(np.asarray(zp.excitation_error_inv_nm) / excitation_width_inv_nm) ** 2)
    inten = inten / max(float(inten.max()), 1e-30)
    if double_diffraction > 0:
        inten = np.where(zp.double_diffraction, double_diffraction, inten)
    keep = (zp.laue_zone == 0) & (inten >= min_intensity)
    xy = np.asarray(zp.xy_rotated_inv_nm(in_plane_rotation_deg))[keep]
    hkl = np.asarray(zp.hkl)[keep]
    inten = inten[keep]
    v = xy / scale_inv_nm_per_px
    if ellipse is not None and ellipse.axis_ratio > 1:
        q = math.sqrt(ellipse.axis_ratio)
        t = math.radians(ellipse.major_axis_angle_deg)
        c, s = math.cos(t), math.sin(t)
        uu = (c * v[:, 0] + s * v[:, 1]) * q
        vv = (-s * v[:, 0] + c * v[:, 1]) / q
        v = np.stack([c * uu - s * vv, s * uu + c * vv], axis=1)
    if beam_stop_azimuth_deg is not None:
        b = math.radians(beam_stop_azimuth_deg)
        side = v @ np.array([math.cos(b), math.sin(b)])
        perp = np.abs(v @ np.array([-math.sin(b), math.cos(b)]))
        blocked = (side > 0) & (perp < 0.5 * max(h, w))
        v, hkl, inten = v[~blocked], hkl[~blocked], inten[~blocked]
    x = cx + v[:, 0] + rng.normal(0, position_noise_px, len(v))
    y = cy + v[:, 1] + rng.normal(0, position_noise_px, len(v))
    inside = (x > 4) & (x < w - 5) & (y > 4) & (y < h - 5)
    x, y, hkl, inten = x[inside], y[inside], hkl[inside], inten[inside]
    meas_i = 1e4 * inten * np.exp(rng.normal(0, intensity_noise, len(inten)))
    if extra_spots_xy_px is not None and len(extra_spots_xy_px):
        e = np.asarray(extra_spots_xy_px, float).reshape(-1, 3)
        x = np.concatenate([x, e[:, 0]])
        y = np.concatenate([y, e[:, 1]])
        meas_i = np.concatenate([meas_i, e[:, 2]])
        hkl = np.concatenate([hkl, np.zeros((len(e), 3), np.int64)])
    spots = Spots(x, y, meas_i, intensity_sigma=np.sqrt(meas_i), sigma_xy_px=np.full(len(x), max(position_noise_px, 0.05)),
                  snr=np.sqrt(meas_i))
    cal = Calibration(scale_inv_nm_per_px if calibrated else None, voltage_kv, ellipse=ellipse if calibrated else None,
                      pixel_pitch_um=pixel_pitch_um)
    measured = MeasuredPattern(image_shape=(h, w), center_px=(cx, cy), spots=spots, basis=None, calibration=cal,
                               source=f"synthetic {phase.name} {list(zone_axis)}")
    u = in_plane_rotation(in_plane_rotation_deg) @ zp.orientation_matrix
    truth = SyntheticTruth(phase.name, tuple(int(v) for v in zp.zone_axis), float(in_plane_rotation_deg),
                           float(scale_inv_nm_per_px), u, float(tilt_deg), hkl)
    return measured, truth

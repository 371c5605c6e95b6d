"""Measured patterns built straight from the kinematic simulation, with known truth.

For tests and the accuracy benchmark at the matcher's own level (no image): spot positions from
:func:`saed.simulate.zone.zone_pattern` on the detector, with position noise, log-normal
"dynamical-like" intensity noise, optional double-diffraction spots, a beam-stop half-plane,
an elliptical projector distortion and a mistilt. Intensities are |F|^2 exp(-(s/w)^2), s the
exact excitation error and w = ``excitation_width_inv_nm`` (a stand-in for a thin bent foil and a
convergent beam). The full image route (render, detect, index)
is exercised by the demo and the benchmark through :mod:`saed.synth`.

Positions come from :func:`saed.synth.zone.zone_offsets_px` and images from
:func:`saed.synth.detector.render_pattern`: the one detector model of saed; only the intensity rule
(|F|^2 with the excitation-error weight above, log-normal disorder) is this module's own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.calibration import Calibration, Ellipse
from saed.image.values import MeasuredPattern, Spots
from saed.simulate.geometry import in_plane_rotation
from saed.simulate.zone import zone_pattern
from saed.synth.zone import zone_offsets_px

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


def zone_spots(phase, zone_axis, *, voltage_kv: float = 200.0, scale_inv_nm_per_px: float = 0.05,
               in_plane_rotation_deg: float = 0.0, tilt_deg: float = 0.0, tilt_toward_hkl=None,
               max_g_inv_nm: float = 12.0, excitation_width_inv_nm: float = 0.1, min_intensity: float = 2e-3,
               double_diffraction: float = 0.0, holz_projection_intensity: float = 0.0):
    """Undistorted spot offsets (px, from the centre), relative intensities, hkl and U of a zone pattern.

    Intensities are |F|^2 exp(-(s/w)^2) with s the exact excitation error of the (tilted) beam and
    w = `excitation_width_inv_nm`, strongest = 1; forbidden reflections with a double-diffraction
    route get `double_diffraction` (0 leaves them out). Only zero-order reflections are kept, plus,
    when `holz_projection_intensity` > 0, weak spots at the projections of the first two
    higher-order layers (intensity that fraction of their |F|^2), as thin or faulted foils show.
    """
    zp = zone_pattern(phase, zone_axis, voltage_kv=voltage_kv, max_g_inv_nm=max_g_inv_nm, tilt_deg=tilt_deg,
                      tilt_toward_hkl=tilt_toward_hkl, thickness_nm=20.0, include_holz=False)
    f2 = np.where(zp.kinematically_forbidden, 0.0, np.asarray(zp.f_abs, float) ** 2)
    inten = f2 * np.exp(-(np.asarray(zp.excitation_error_inv_nm) / excitation_width_inv_nm) ** 2)
    inten = inten / max(float(inten.max()), 1e-30)
    if double_diffraction > 0:
        inten = np.where(zp.double_diffraction, double_diffraction, inten)
    keep = (zp.laue_zone == 0) & (inten >= min_intensity)
    u = in_plane_rotation(in_plane_rotation_deg) @ zp.orientation_matrix
    v = zone_offsets_px(zp, scale_inv_nm_per_px=scale_inv_nm_per_px, rotation_deg=in_plane_rotation_deg)[keep]
    inten, hkl = inten[keep], np.asarray(zp.hkl)[keep]
    if holz_projection_intensity > 0:
        # thin foils, surface steps and faults: weak spots where the first layers project (fcc <111>: 1/3{422})
        from saed.crystal.reflections import reflection_table

        tbl = reflection_table(phase, max_g_inv_nm)
        n = tbl.hkl @ np.asarray(zp.zone_axis)
        p = zp.layer_multiplicity
        sel = tbl.allowed & ((np.abs(n) == p) | (np.abs(n) == 2 * p))
        q = (tbl.g_cart_inv_nm[sel] @ u.T)[:, :2]
        f2 = np.abs(tbl.f_nm[sel]) ** 2 / max(float(np.max(np.abs(tbl.f_nm) ** 2)), 1e-30)
        xy_keys = np.round(q, 3)
        _, first = np.unique(xy_keys, axis=0, return_index=True)
        ok = np.linalg.norm(q[first], axis=1) <= max_g_inv_nm
        first = first[ok]
        v = np.concatenate([v, q[first] / scale_inv_nm_per_px])
        inten = np.concatenate([inten, holz_projection_intensity * f2[first]])
        hkl = np.concatenate([hkl, tbl.hkl[sel][first]])
    return v, inten, hkl, u, tuple(int(x) for x in zp.zone_axis)


_SPOT_OPTIONS = ("voltage_kv", "scale_inv_nm_per_px", "in_plane_rotation_deg", "tilt_deg", "tilt_toward_hkl",
                 "max_g_inv_nm", "excitation_width_inv_nm", "min_intensity", "double_diffraction",
                 "holz_projection_intensity")


def _spot_options(options: dict) -> dict:
    """The keyword options of :func:`zone_spots` picked from a caller's arguments."""
    return {k: options[k] for k in _SPOT_OPTIONS}


def _distort(v: np.ndarray, ellipse: Ellipse | None) -> np.ndarray:
    if ellipse is None or ellipse.axis_ratio <= 1:
        return v
    from saed.synth.detector import distortion_matrix

    return v @ distortion_matrix(ellipse).T


def _beam_stop_blocked(v: np.ndarray, azimuth_deg: float | None, size: float) -> np.ndarray:
    if azimuth_deg is None:
        return np.zeros(len(v), bool)
    b = math.radians(azimuth_deg)
    side = v @ np.array([math.cos(b), math.sin(b)])
    perp = np.abs(v @ np.array([-math.sin(b), math.cos(b)]))
    return (side > 0) & (perp < 0.5 * size)


#: Default pattern centres: a fraction of a pixel off the frame centre, so that no spot sits on the pixel grid
#: by construction (spot lists and rendered images use different offsets, as they always have).
SPOT_LIST_CENTRE_OFFSET_PX = (0.3, -0.2)
IMAGE_CENTRE_OFFSET_PX = (0.37, -0.41)
#: Spots closer than this to the frame edge are not in a measured spot list (a detector finds no peak there).
_EDGE_PX = 4


def default_centre_px(image_shape, offset_px) -> tuple[float, float]:
    """(x, y) of the frame centre of `image_shape` (rows, cols) moved by `offset_px`."""
    h, w = image_shape
    return (w - 1) / 2.0 + offset_px[0], (h - 1) / 2.0 + offset_px[1]


def measured_spot_list(v, inten, *, center_px, image_shape, position_noise_px: float, intensity_noise: float, rng):
    """Spot offsets `v` (px) and relative intensities as a detector would report them.

    Gaussian position noise, log-normal intensity disorder (1e4 counts for intensity 1), spots near the
    frame edge dropped. Returns x, y, intensities and the mask of the kept input rows.
    """
    h, w = image_shape
    cx, cy = center_px
    x = cx + v[:, 0] + rng.normal(0, position_noise_px, len(v))
    y = cy + v[:, 1] + rng.normal(0, position_noise_px, len(v))
    inside = (x > _EDGE_PX) & (x < w - 1 - _EDGE_PX) & (y > _EDGE_PX) & (y < h - 1 - _EDGE_PX)
    x, y, inten = x[inside], y[inside], inten[inside]
    return x, y, 1e4 * inten * np.exp(rng.normal(0, intensity_noise, len(inten))), inside


def spots_of(x, y, counts, position_noise_px: float) -> Spots:
    """A :class:`Spots` with Poisson-like intensity sigmas and the position noise as position sigma."""
    return Spots(x, y, counts, intensity_sigma=np.sqrt(counts), sigma_xy_px=np.full(len(x), max(position_noise_px, 0.05)),
                 snr=np.sqrt(counts))


def image_scene():
    """The scene of the generated zone-pattern images: defaults with a direct beam of 3e7 electrons."""
    from saed.synth.detector import Scene

    return Scene(direct_beam_electrons=3e7)


def render_spot_image(v, inten, *, center_px, image_shape, electrons_max: float, intensity_noise: float, scene, rng):
    """Spots at offsets `v` (px) with log-normal intensity disorder through the detector model.

    Returns the :class:`~saed.synth.detector.SynthPattern` and the electrons given to each spot.
    """
    from saed.synth.detector import Detector, render_pattern

    el = electrons_max * inten * np.exp(rng.normal(0, intensity_noise, len(inten)))
    c = np.array([float(center_px[0]), float(center_px[1])])
    pat = render_pattern(v + c, el, center_px=(c[0], c[1]), detector=Detector(shape=tuple(image_shape)), scene=scene,
                         rng=rng)
    return pat, el


def synthetic_measured(phase, zone_axis, *, voltage_kv: float = 200.0, scale_inv_nm_per_px: float = 0.05,
                       in_plane_rotation_deg: float = 0.0, tilt_deg: float = 0.0, tilt_toward_hkl=None,
                       image_shape=(512, 512), center_px=None, max_g_inv_nm: float = 12.0,
                       excitation_width_inv_nm: float = 0.1, position_noise_px: float = 0.15,
                       intensity_noise: float = 0.3, min_intensity: float = 2e-3, double_diffraction: float = 0.0,
                       holz_projection_intensity: float = 0.0, ellipse: Ellipse | None = None, calibrated: bool = True, beam_stop_azimuth_deg: float | None = None,
                       extra_spots_xy_px=None, pixel_pitch_um=None, rng=None) -> tuple[MeasuredPattern, SyntheticTruth]:
    """A MeasuredPattern of `phase` along `zone_axis` with known truth (see :func:`zone_spots`).

    ``beam_stop_azimuth_deg``: spots in the half-plane centred on that azimuth are removed (a beam
    stop or its shadow covering half the pattern). ``ellipse``: the distortion applied to the
    positions; the calibration carries it too, as a calibrated microscope would (only when
    ``calibrated``). ``intensity_noise``: sigma of the log-normal factor on every intensity
    ("dynamical-like" disorder). ``extra_spots_xy_px``: (k, 3) x, y, intensity of stray spots.
    """
    rng = np.random.default_rng(rng)
    h, w = image_shape
    cx, cy = default_centre_px(image_shape, SPOT_LIST_CENTRE_OFFSET_PX) if center_px is None else center_px
    v, inten, hkl, u, zone = zone_spots(phase, zone_axis, **_spot_options(locals()))
    v = _distort(v, ellipse)
    blocked = _beam_stop_blocked(v, beam_stop_azimuth_deg, max(h, w))
    v, hkl, inten = v[~blocked], hkl[~blocked], inten[~blocked]
    x, y, meas_i, inside = measured_spot_list(v, inten, center_px=(cx, cy), image_shape=image_shape,
                                              position_noise_px=position_noise_px, intensity_noise=intensity_noise,
                                              rng=rng)
    hkl = hkl[inside]
    if extra_spots_xy_px is not None and len(extra_spots_xy_px):
        e = np.asarray(extra_spots_xy_px, float).reshape(-1, 3)
        x = np.concatenate([x, e[:, 0]])
        y = np.concatenate([y, e[:, 1]])
        meas_i = np.concatenate([meas_i, e[:, 2]])
        hkl = np.concatenate([hkl, np.zeros((len(e), 3), np.int64)])
    spots = spots_of(x, y, meas_i, position_noise_px)
    cal = Calibration(scale_inv_nm_per_px if calibrated else None, voltage_kv, ellipse=ellipse if calibrated else None,
                      pixel_pitch_um=pixel_pitch_um)
    measured = MeasuredPattern(image_shape=(h, w), center_px=(cx, cy), spots=spots, basis=None, calibration=cal,
                               source=f"synthetic {phase.name} {list(zone_axis)}")
    truth = SyntheticTruth(phase.name, zone, float(in_plane_rotation_deg), float(scale_inv_nm_per_px), u,
                           float(tilt_deg), hkl)
    return measured, truth


def synthetic_image(phase, zone_axis, *, voltage_kv: float = 200.0, scale_inv_nm_per_px: float = 0.05,
                    in_plane_rotation_deg: float = 0.0, tilt_deg: float = 0.0, tilt_toward_hkl=None,
                    image_shape=(512, 512), center_px=None, max_g_inv_nm: float = 14.0,
                    excitation_width_inv_nm: float = 0.1, intensity_noise: float = 0.3, min_intensity: float = 2e-3,
                    double_diffraction: float = 0.0, holz_projection_intensity: float = 0.0,
                    ellipse: Ellipse | None = None, beam_stop=None, electrons_max: float = 4e4, scene=None, rng=None):
    """A detector image (uint16) of a zone pattern through :mod:`saed.synth`, and its truth.

    The spots of :func:`zone_spots` (with log-normal intensity disorder) are drawn by
    :func:`saed.synth.detector.render_pattern`: Gaussian spots, a bright direct beam, radial haze,
    Poisson and read noise, an optional beam stop (:class:`saed.synth.detector.BeamStop`) and the
    elliptical distortion of `ellipse`.
    """
    from dataclasses import replace as _replace

    rng = np.random.default_rng(rng)
    centre = default_centre_px(image_shape, IMAGE_CENTRE_OFFSET_PX) if center_px is None else center_px
    v, inten, hkl, u, zone = zone_spots(phase, zone_axis, **_spot_options(locals()))
    sc = _replace(scene if scene is not None else image_scene(), ellipse=ellipse, beam_stop=beam_stop)
    pat, _ = render_spot_image(v, inten, center_px=centre, image_shape=image_shape, electrons_max=electrons_max,
                               intensity_noise=intensity_noise, scene=sc, rng=rng)
    truth = SyntheticTruth(phase.name, zone, float(in_plane_rotation_deg), float(scale_inv_nm_per_px), u,
                           float(tilt_deg), hkl)
    return pat, truth

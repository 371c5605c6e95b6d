"""Patterns of two (or more) crystals in one selected area, with known truth, for the benchmark.

Crystal 1 is put along `zone_axis` with in-plane rotation `phi`; every further crystal is
placed by a rotation R (crystal-1 Cartesian -> its Cartesian, e.g. a standard orientation
relationship from :mod:`saed.index.orientation_relationships`), U_k = U_1 R^T, and must then
also lie along a zone axis (the pairs that occur in practice: twin [1-10] / [-110], fcc [111] ||
bcc [011] ...). Spot intensities are each crystal's kinematic pattern (:func:`saed.synth.kinematic.zone_spots`)
times its area share; double diffraction across the crystals adds weak spots at g1 + g2; spots
closer than the spot size merge, as on a detector. The image version renders through
:func:`saed.synth.detector.render_pattern` and can add Kikuchi bands, a diffuse halo and streaks
(:mod:`saed.synth.confounders`), and state a calibration a few per cent off.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.calibration import Calibration
from saed.errors import InputError
from saed.image.values import MeasuredPattern
from saed.synth.kinematic import (IMAGE_CENTRE_OFFSET_PX, SPOT_LIST_CENTRE_OFFSET_PX, default_centre_px,
                                  image_scene, measured_spot_list, render_spot_image, spots_of, zone_spots)
from saed.simulate.geometry import orientation_matrix

__all__ = ["OverlapTruth", "zone_after_rotation", "overlap_spots", "overlap_measured", "overlap_image"]


@dataclass(frozen=True)
class OverlapTruth:
    phases: tuple[str, ...]
    zones: tuple[tuple[int, int, int], ...]
    orientation_matrices: tuple[np.ndarray, ...]
    shares: tuple[float, ...]
    scale_inv_nm_per_px: float
    stated_scale_inv_nm_per_px: float | None = None
    relationship: str = ""


def zone_after_rotation(phase, u_matrix: np.ndarray, *, max_index: int = 6) -> tuple[tuple[int, int, int], float]:
    """The zone axis [uvw] of a crystal with orientation U (beam along +z) and its in-plane rotation.

    Raises InputError when the beam is not along a zone of index <= `max_index` (within 0.05 deg).
    """
    b = np.asarray(u_matrix, float).T @ np.array([0.0, 0.0, 1.0])
    f = np.linalg.solve(phase.lattice.direct_matrix_nm, b)
    f = f / np.max(np.abs(f))
    for m in range(1, max_index + 1):
        uvw = np.rint(f * m)
        if np.max(np.abs(uvw)) > max_index or not np.any(uvw):
            continue
        r = phase.lattice.direct_matrix_nm @ uvw
        if float(r @ b) / np.linalg.norm(r) > math.cos(math.radians(0.05)):
            g = math.gcd(*(int(abs(v)) for v in uvw))
            uvw_t = tuple(int(v) // g for v in uvw)
            rz = np.asarray(u_matrix) @ orientation_matrix(phase.lattice, uvw_t, 0.0).T
            return uvw_t, math.degrees(math.atan2(rz[1, 0], rz[0, 0]))
    raise InputError(f"{phase.name}: the beam lies along no zone axis of index <= {max_index}")


def overlap_spots(phase1, zone_axis, crystals, *, in_plane_rotation_deg: float = 0.0, scale_inv_nm_per_px: float = 0.05,
                  voltage_kv: float = 200.0, max_g_inv_nm: float = 12.0, cross_dd: int = 6, rng=None):
    """Spot vectors (px from the centre), intensities (strongest crystal spot = 1), owner (crystal index,
    -1 for double diffraction across crystals), and per-crystal (phase name, zone, U).

    `crystals`: sequence of (phase, R, share) for the further crystals, R crystal-1 Cartesian -> its
    Cartesian; crystal 1's share is 1 minus the others'.
    """
    rng = np.random.default_rng(rng)
    shares = [float(s) for _, _, s in crystals]
    share1 = 1.0 - sum(shares)
    if not 0 < share1 < 1:
        raise InputError("overlap_spots: the shares of the further crystals must add up to less than 1")
    opts = dict(voltage_kv=voltage_kv, scale_inv_nm_per_px=scale_inv_nm_per_px, max_g_inv_nm=max_g_inv_nm)
    v1, i1, _h1, u1, z1 = zone_spots(phase1, zone_axis, in_plane_rotation_deg=in_plane_rotation_deg, **opts)
    vs, ints, owner = [v1], [share1 * i1], [np.zeros(len(v1), int)]
    info = [(phase1.name, z1, u1)]
    for k, (ph, rot, share) in enumerate(crystals, start=1):
        uk = u1 @ np.asarray(rot, float).T
        zk, phik = zone_after_rotation(ph, uk)
        vk, ik, _hk, uk2, zk2 = zone_spots(ph, zk, in_plane_rotation_deg=phik, **opts)
        vs.append(vk)
        ints.append(share * ik)
        owner.append(np.full(len(vk), k))
        info.append((ph.name, zk2, uk2))
    v, inten, own = np.concatenate(vs), np.concatenate(ints), np.concatenate(owner)
    if cross_dd and len(vs) >= 2:
        r_max = float(np.max(np.linalg.norm(v, axis=1)))
        a = np.argsort(-ints[0])[:8]
        b = np.argsort(-ints[1])[:8]
        combos = []
        for p in a:
            for q in b:
                w = vs[0][p] + vs[1][q]
                if np.linalg.norm(w) > r_max or np.linalg.norm(w) < 5:
                    continue
                if np.min(np.linalg.norm(v - w[None, :], axis=1)) < 4.0:
                    continue
                combos.append((w, 0.15 * math.sqrt(ints[0][p] * ints[1][q])))
        rng.shuffle(combos)
        extra = combos[:cross_dd]
        if extra:
            v = np.concatenate([v, np.array([e[0] for e in extra])])
            inten = np.concatenate([inten, np.array([e[1] for e in extra])])
            own = np.concatenate([own, np.full(len(extra), -1)])
    return v, inten, own, info


def _merge(v: np.ndarray, inten: np.ndarray, own: np.ndarray, dist_px: float):
    """Spots closer than `dist_px` become one (intensity-weighted position, summed intensity)."""
    order = np.argsort(-inten)
    used = np.zeros(len(v), bool)
    out_v, out_i, out_o = [], [], []
    for i in order:
        if used[i]:
            continue
        near = np.flatnonzero(~used & (np.linalg.norm(v - v[i][None, :], axis=1) < dist_px))
        used[near] = True
        w = inten[near]
        out_v.append((v[near] * w[:, None]).sum(axis=0) / max(w.sum(), 1e-30))
        out_i.append(w.sum())
        out_o.append(own[i])
    return np.array(out_v).reshape(-1, 2), np.array(out_i), np.array(out_o)


def overlap_measured(phase1, zone_axis, crystals, *, in_plane_rotation_deg: float = 0.0,
                     scale_inv_nm_per_px: float = 0.05, stated_scale_error: float = 0.0, voltage_kv: float = 200.0,
                     image_shape=(512, 512), max_g_inv_nm: float = 12.0, position_noise_px: float = 0.15,
                     intensity_noise: float = 0.3, min_intensity: float = 4e-3, cross_dd: int = 6,
                     merge_px: float = 2.5, rng=None, relationship: str = "") -> tuple[MeasuredPattern, OverlapTruth]:
    """A MeasuredPattern (spot list) of overlapping crystals (see :func:`overlap_spots`)."""
    rng = np.random.default_rng(rng)
    h, w = image_shape
    cx, cy = default_centre_px(image_shape, SPOT_LIST_CENTRE_OFFSET_PX)
    v, inten, own, info = overlap_spots(phase1, zone_axis, crystals, in_plane_rotation_deg=in_plane_rotation_deg,
                                        scale_inv_nm_per_px=scale_inv_nm_per_px, voltage_kv=voltage_kv,
                                        max_g_inv_nm=max_g_inv_nm, cross_dd=cross_dd, rng=rng)
    v, inten, own = _merge(v, inten, own, merge_px)
    keep = inten >= min_intensity
    v, inten = v[keep], inten[keep]
    x, y, meas, _ = measured_spot_list(v, inten, center_px=(cx, cy), image_shape=image_shape,
                                       position_noise_px=position_noise_px, intensity_noise=intensity_noise, rng=rng)
    spots = spots_of(x, y, meas, position_noise_px)
    stated = scale_inv_nm_per_px * (1.0 + stated_scale_error)
    cal = Calibration(stated, voltage_kv)
    measured = MeasuredPattern(image_shape=(h, w), center_px=(cx, cy), spots=spots, basis=None, calibration=cal,
                               source=f"synthetic overlap {relationship}")
    return measured, _truth(info, crystals, scale_inv_nm_per_px, stated, relationship)


def overlap_image(phase1, zone_axis, crystals, *, in_plane_rotation_deg: float = 0.0, scale_inv_nm_per_px: float = 0.05,
                  voltage_kv: float = 200.0, image_shape=(512, 512), max_g_inv_nm: float = 12.0,
                  intensity_noise: float = 0.3, electrons_max: float = 4e4, cross_dd: int = 6, confounders=None,
                  rng=None, relationship: str = ""):
    """A uint16 detector image of overlapping crystals, optionally with confounders; returns (image, truth).

    Streaks (when `confounders` asks for them) run through the spots of the last crystal only: the
    thin plate or the faulted lamella.
    """
    from saed.synth.confounders import add_confounders

    rng = np.random.default_rng(rng)
    cx, cy = default_centre_px(image_shape, IMAGE_CENTRE_OFFSET_PX)
    v, inten, own, info = overlap_spots(phase1, zone_axis, crystals, in_plane_rotation_deg=in_plane_rotation_deg,
                                        scale_inv_nm_per_px=scale_inv_nm_per_px, voltage_kv=voltage_kv,
                                        max_g_inv_nm=max_g_inv_nm, cross_dd=cross_dd, rng=rng)
    pat, el = render_spot_image(v, inten, center_px=(cx, cy), image_shape=image_shape, electrons_max=electrons_max,
                                intensity_noise=intensity_noise, scene=image_scene(), rng=rng)
    img = pat.image
    if confounders is not None:
        last = own == len(info) - 1
        img = add_confounders(img, (cx, cy), confounders, spot_xy_px=v[last] + np.array([cx, cy]), spot_electrons=el[last],
                              gain=pat.detector.gain_counts_per_electron, rng=rng)
    return img, _truth(info, crystals, scale_inv_nm_per_px, None, relationship)


def _truth(info, crystals, scale, stated, relationship) -> OverlapTruth:
    shares = (1.0 - sum(float(s) for _, _, s in crystals),) + tuple(float(s) for _, _, s in crystals)
    return OverlapTruth(tuple(i[0] for i in info), tuple(i[1] for i in info), tuple(i[2] for i in info), shares,
                        float(scale), None if stated is None else float(stated), relationship)

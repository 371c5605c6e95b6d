"""Plain 2-D spot lattices (and a neighbouring grain) for tests and benchmarks of the image stage."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.errors import InputError
from saed.synth.detector import Detector, Scene, SynthPattern, render_pattern

__all__ = ["LatticeSpots", "lattice_spots", "neighbour_grain_spots", "render_lattice"]


@dataclass(frozen=True)
class LatticeSpots:
    """Spots of a 2-D lattice: undistorted positions (N, 2) px, electrons (N,), integer indices (N, 2)."""

    xy_px: np.ndarray
    electrons: np.ndarray
    indices: np.ndarray
    g1_px: np.ndarray
    g2_px: np.ndarray


def lattice_spots(g1_px, g2_px, *, center_px, max_radius_px: float, electrons_max: float = 2e4,
                  falloff_px: float | None = None, spread: float = 1.0, rng=None) -> LatticeSpots:
    """All lattice points centre + m g1 + n g2 with 0 < |m g1 + n g2| <= `max_radius_px`.

    Intensities: ``electrons_max * exp(-|g| / falloff_px) * 10**(-spread * u)`` with u uniform in
    [0, 1) per Friedel pair (g and -g get the same electrons, as kinematic theory gives).
    """
    rng = np.random.default_rng(rng)
    g1, g2 = np.asarray(g1_px, float), np.asarray(g2_px, float)
    area = abs(g1[0] * g2[1] - g1[1] * g2[0])
    if area < 1e-6 * (g1 @ g1 + g2 @ g2):
        raise InputError("lattice_spots: g1 and g2 are parallel")
    reach = int(math.ceil(max_radius_px * max(np.linalg.norm(g1), np.linalg.norm(g2)) / area)) + 1
    m, n = np.meshgrid(np.arange(-reach, reach + 1), np.arange(-reach, reach + 1), indexing="ij")
    idx = np.stack([m.ravel(), n.ravel()], axis=1)
    vec = idx @ np.stack([g1, g2])
    r = np.hypot(vec[:, 0], vec[:, 1])
    keep = (r > 0) & (r <= max_radius_px)
    idx, vec, r = idx[keep], vec[keep], r[keep]
    falloff = falloff_px if falloff_px is not None else max_radius_px / 2.0
    # One random factor per Friedel pair: key each spot by its index with a canonical sign.
    canon = np.where((idx[:, 0] > 0) | ((idx[:, 0] == 0) & (idx[:, 1] > 0)), 1, -1)[:, None] * idx
    _, inverse = np.unique(canon, axis=0, return_inverse=True)
    u = rng.uniform(0.0, 1.0, inverse.max() + 1)[inverse.ravel()]
    el = electrons_max * np.exp(-r / falloff) * 10.0 ** (-spread * u)
    return LatticeSpots(xy_px=vec + np.asarray(center_px, float), electrons=el, indices=idx, g1_px=g1, g2_px=g2)


def neighbour_grain_spots(n: int, *, center_px, min_radius_px: float, max_radius_px: float,
                          electrons: float, rng=None) -> tuple[np.ndarray, np.ndarray]:
    """`n` spots of a second, differently oriented grain: positions (n, 2) px and electrons (n,).

    A few spots of a neighbouring grain show when the selected-area aperture clips another grain; they
    lie at random directions and radii (not on the main lattice) in Friedel-less single spots.
    """
    rng = np.random.default_rng(rng)
    ang = rng.uniform(0.0, 2.0 * math.pi, n)
    rad = rng.uniform(min_radius_px, max_radius_px, n)
    xy = np.stack([np.cos(ang) * rad, np.sin(ang) * rad], axis=1) + np.asarray(center_px, float)
    return xy, np.full(n, float(electrons)) * rng.uniform(0.5, 1.5, n)


def render_lattice(g1_px, g2_px, *, center_px, detector: Detector = Detector(), scene: Scene = Scene(),
                   max_radius_px: float | None = None, electrons_max: float = 2e4, spread: float = 1.0,
                   neighbour_spots: int = 0, rng=None) -> tuple[SynthPattern, LatticeSpots]:
    """Render a 2-D lattice pattern (plus `neighbour_spots` from another grain) and return it with its lattice.

    The truth in ``SynthPattern.extra``: ``"lattice_n"`` (how many of the spots are lattice spots; the
    neighbour-grain spots follow them), ``"g1_px"``, ``"g2_px"`` (undistorted) and ``"g1_detector_px"``,
    ``"g2_detector_px"`` (after the ellipse of `scene`).
    """
    rng = np.random.default_rng(rng)
    rows, cols = detector.shape
    if max_radius_px is None:
        max_radius_px = 0.47 * min(rows, cols)
    lat = lattice_spots(g1_px, g2_px, center_px=center_px, max_radius_px=max_radius_px,
                        electrons_max=electrons_max, spread=spread, rng=rng)
    xy, el = lat.xy_px, lat.electrons
    if neighbour_spots:
        nxy, nel = neighbour_grain_spots(neighbour_spots, center_px=center_px, min_radius_px=0.15 * max_radius_px,
                                         max_radius_px=max_radius_px, electrons=float(np.median(el)), rng=rng)
        # Keep neighbour spots apart from lattice spots so the truth stays unambiguous.
        d = np.min(np.hypot(*(nxy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1)), axis=1)
        sep = 4.0 * scene.spot_sigma_px + 2.0 * scene.disc_radius_px + 4.0
        nxy, nel = nxy[d > sep], nel[d > sep]
        xy, el = np.vstack([xy, nxy]), np.concatenate([el, nel])
    pat = render_pattern(xy, el, center_px=center_px, detector=detector, scene=scene, rng=rng)
    d = pat.distortion
    pat.extra.update({"lattice_n": len(lat.electrons), "g1_px": lat.g1_px, "g2_px": lat.g2_px,
                      "g1_detector_px": d @ lat.g1_px, "g2_detector_px": d @ lat.g2_px,
                      "indices": lat.indices})
    return pat, lat

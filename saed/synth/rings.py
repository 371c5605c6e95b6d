"""Synthetic polycrystalline ring patterns with known centre, ellipse, scale and phases.

What a recorded ring pattern of an evaporated standard or a nanocrystalline film looks like, so the
ring pipeline can be tested and benchmarked against a known truth:

* rings at |g| of every allowed ring of each phase (:func:`saed.simulate.rings.ring_lines`), Gaussian
  profile, intensity m |F|^2 d^2 times a random texture factor per ring (log-normal, so measured
  intensities never match the model exactly);
* optional graininess: a film with few grains per ring gives spotty rings (azimuthal modulation);
* elliptical distortion of the projector (area-preserving, :meth:`Ellipse.corrected_px`);
* a diffuse background falling from the centre (inelastic and thermal diffuse scattering) with a
  broad amorphous-carbon halo near 4.6 1/nm (support film), a detector offset;
* a beam stop (disc and holder rod, 2 % transmission) over the direct beam;
* Poisson counting noise and Gaussian read noise, in detector counts.

Invented data for tests and the demo only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from saed.calibration import Ellipse
from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.readonly import frozen_array
from saed.simulate.rings import polar_coordinates, ring_lines

__all__ = ["RingPatternTruth", "SyntheticRings", "ring_pattern"]

#: Detector offset added to every pixel (counts).
DARK_OFFSET_COUNTS = 100.0
#: Where the amorphous-carbon halo of the support film peaks, 1/nm (broad; first maximum ~ 1/0.22 nm).
CARBON_HALO_INV_NM = 4.6


@dataclass(frozen=True)
class RingPatternTruth:
    """What went into a synthetic ring pattern."""

    phases: tuple[str, ...]
    fractions: tuple[float, ...]
    scale_inv_nm_per_px: float
    center_px: tuple[float, float]
    ellipse: Ellipse
    ring_sigma_px: float
    beam_stop_angle_deg: float | None
    ring_g_inv_nm: tuple[tuple[float, ...], ...]
    ring_peak_counts: tuple[tuple[float, ...], ...]


@dataclass(frozen=True, eq=False)
class SyntheticRings:
    """A synthetic ring pattern: ``image`` (ny, nx) float32 counts (read-only) and its ``truth``."""

    image: np.ndarray
    truth: RingPatternTruth


def _azimuth_field(rng, n_spots: int, width_rad: float, n_samples: int = 2048) -> np.ndarray:
    """Mean-1 azimuthal intensity of a ring made of `n_spots` grains of angular width `width_rad`."""
    phi = np.linspace(0.0, 2 * np.pi, n_samples, endpoint=False)
    field = np.zeros(n_samples)
    centres = rng.uniform(0, 2 * np.pi, n_spots)
    weights = rng.exponential(1.0, n_spots)
    for c, w in zip(centres, weights):
        d = (phi - c + np.pi) % (2 * np.pi) - np.pi
        field += w * np.exp(-0.5 * (d / width_rad) ** 2)
    return field / max(field.mean(), 1e-12)


def ring_pattern(phases: Sequence[Phase], *, fractions: Sequence[float] | None = None,
                 shape_px: tuple[int, int] = (1024, 1024), scale_inv_nm_per_px: float = 0.02,
                 center_px: tuple[float, float] | None = None, ellipse: Ellipse | None = None,
                 ring_sigma_px: float = 1.5, peak_counts: float = 400.0, background_counts: float = 2000.0,
                 texture_sigma: float = 0.25, graininess: float = 0.0, grains_per_reflection: float = 6.0,
                 beam_stop: bool = True, read_noise_counts: float = 3.0, rng=None) -> SyntheticRings:
    """Render a ring pattern of one or more phases.

    Parameters
    ----------
    phases : the phases present
    fractions : relative amount of each phase (default equal); scales its rings
    shape_px : (ny, nx)
    scale_inv_nm_per_px : detector scale, 1/nm per (corrected) pixel
    center_px : (x, y) pattern centre (default: image centre plus a random offset of up to 4 %)
    ellipse : projector distortion (default none)
    ring_sigma_px : Gaussian sigma of every ring across its circumference, px
    peak_counts : peak height of the strongest ring above background, counts per pixel
    background_counts : diffuse background at the centre, counts per pixel
    texture_sigma : log-normal sigma of the random intensity factor of each ring (0: model intensities)
    graininess : 0 smooth rings .. 1 rings made only of grain spots
    grains_per_reflection : spots per reflection of a ring when grainy
    beam_stop : cover the centre with a beam-stop disc and rod (2 % transmission)
    read_noise_counts : Gaussian read noise, counts (Poisson noise is always applied)
    rng : numpy Generator or seed

    Returns
    -------
    SyntheticRings

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> pat = ring_pattern([builtin_phase("Au")], shape_px=(128, 128), scale_inv_nm_per_px=0.15, rng=1)
    >>> pat.image.shape, pat.image.dtype.name, pat.truth.phases
    ((128, 128), 'float32', ('Au',))
    """
    rng = np.random.default_rng(rng)
    phases = list(phases)
    if not phases:
        raise InputError("ring_pattern needs at least one phase")
    frac = np.ones(len(phases)) if fractions is None else np.asarray(fractions, float)
    if frac.shape != (len(phases),) or np.any(frac < 0) or not np.any(frac > 0):
        raise InputError(f"fractions {fractions!r} must be one non-negative number per phase")
    ny, nx = (int(v) for v in shape_px)
    if center_px is None:
        center_px = ((nx - 1) / 2 + rng.uniform(-0.04, 0.04) * nx, (ny - 1) / 2 + rng.uniform(-0.04, 0.04) * ny)
    cx, cy = (float(v) for v in center_px)
    ellipse = ellipse or Ellipse()
    s = float(scale_inv_nm_per_px)
    rho, phi_deg = polar_coordinates((ny, nx), (cx, cy), ellipse)
    g = rho * s
    g_max = float(rho.max()) * s * 1.02 + 4 * ring_sigma_px * s

    signal = np.zeros((ny, nx))
    ring_g, ring_peaks = [], []
    sigma_g = ring_sigma_px * s
    for ph, f in zip(phases, frac):
        lines = ring_lines(ph, g_max)
        texture = np.exp(rng.normal(0.0, texture_sigma, len(lines))) if texture_sigma > 0 else np.ones(len(lines))
        amp = f * lines.intensity * texture
        ring_g.append(tuple(float(v) for v in lines.g_inv_nm))
        ring_peaks.append(amp)
        for j, gj in enumerate(lines.g_inv_nm):
            if amp[j] <= 0:
                continue
            near = np.abs(g - gj) < 5 * sigma_g
            if not near.any():
                continue
            prof = amp[j] * np.exp(-0.5 * ((g[near] - gj) / sigma_g) ** 2)
            if graininess > 0:
                r_px = gj / s
                n_spots = max(3, int(round(grains_per_reflection * lines.multiplicity[j])))
                field = _azimuth_field(rng, n_spots, max(ring_sigma_px / r_px, 1e-3))
                k = (np.radians(phi_deg[near]) / (2 * np.pi) * len(field)).astype(np.int64) % len(field)
                prof = prof * ((1 - graininess) + graininess * field[k])
            signal[near] += prof
    top = max(float(max(p.max() for p in ring_peaks if len(p))), 1e-12)
    scale_counts = peak_counts / top
    signal *= scale_counts
    ring_peaks = [tuple(float(v) * scale_counts for v in p) for p in ring_peaks]

    r_edge = 0.5 * min(nx, ny)
    bg = background_counts * (0.75 * np.exp(-rho / (0.3 * r_edge)) + 0.25 * (0.05 * r_edge / (rho + 0.05 * r_edge)) ** 2)
    bg += 0.12 * background_counts * np.exp(-0.5 * ((g - CARBON_HALO_INV_NM) / 1.3) ** 2)
    beam = 50.0 * background_counts * np.exp(-0.5 * (rho / (0.01 * r_edge + 1.0)) ** 2)
    total = signal + bg + beam
    stop_angle = None
    if beam_stop:
        stop_angle = float(rng.uniform(0, 360))
        t = math.radians(stop_angle)
        xx = np.arange(nx)[None, :] - cx
        yy = np.arange(ny)[:, None] - cy
        along = xx * math.cos(t) + yy * math.sin(t)
        across = -xx * math.sin(t) + yy * math.cos(t)
        covered = (np.hypot(xx, yy) < 0.06 * r_edge) | ((along > 0) & (np.abs(across) < 0.025 * r_edge))
        total = np.where(covered, 0.02 * total, total)
    counts = rng.poisson(np.clip(total, 0, None)).astype(np.float64)
    counts += DARK_OFFSET_COUNTS + rng.normal(0.0, read_noise_counts, counts.shape)
    image = frozen_array(np.clip(counts, 0, 65535), np.float32)
    truth = RingPatternTruth(tuple(p.name for p in phases), tuple(float(v) for v in frac), s, (cx, cy), ellipse,
                             float(ring_sigma_px), stop_angle, tuple(ring_g), tuple(ring_peaks))
    return SyntheticRings(image, truth)

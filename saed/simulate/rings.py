"""The rings a phase gives in a polycrystalline pattern: |g|, d, the families on each ring, intensities;
and where a ring of corrected radius R lies on the detector (:func:`polar_coordinates`,
:func:`ring_outline_px`; the ellipse convention is :meth:`saed.calibration.Ellipse.corrected_px`).

This is the one copy of ring geometry: the generator (:mod:`saed.synth.rings`), the measurement and
identification (:mod:`saed.rings`) and the picture (:mod:`saed.report.rings_plot`) all use it.

A ring collects every allowed reflection of one |g| (one or more families: 333 and 511 of a cubic
phase share a ring). Its relative intensity, as measured in an azimuthally averaged radial profile
(mean counts per pixel along the ring), follows the kinematic two-beam powder expression

    I_ring  ~  m |F|^2 d^2

(multiplicity x structure factor squared x the d^2 geometric factor of a ring pattern recorded on a
flat detector at small angles, Vainshtein 1964, chap. 3; the integrated counts of a whole ring
carry one power of d less, because its circumference grows as 1/d).

References
----------
B. K. Vainshtein, *Structure Analysis by Electron Diffraction*, Pergamon, Oxford (1964), chap. 3
(ring intensities of polycrystalline specimens; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from saed.calibration import Ellipse
from saed.crystal.phase import Phase
from saed.crystal.reflections import reflection_table
from saed.crystal.symmetry import laue_rotations
from saed.errors import InputError
from saed.readonly import frozen_array

__all__ = ["RingLines", "ring_lines", "DEFAULT_MAX_G_INV_NM", "polar_coordinates", "check_center_px",
           "ring_outline_px"]

#: Default outer limit of ring lists (1/nm): d = 0.067 nm, past the last ring of most recorded patterns.
DEFAULT_MAX_G_INV_NM = 15.0

#: Relative |g| difference below which reflections are on the same ring (exact coincidences only).
SAME_RING_REL = 1e-6


@dataclass(frozen=True, eq=False)
class RingLines:
    """The rings of one phase, sorted by |g| (arrays read-only, one row per ring).

    Attributes
    ----------
    phase : Phase
    g_inv_nm, d_nm : (n,) float
    hkl : (n, 3) int, representative of the strongest family on the ring (3-index)
    families : tuple of n tuples of (h, k, l), every family on the ring, strongest first
    multiplicity : (n,) int, number of reflections on the ring (all families)
    f2_nm2 : (n,) float, sum of |F|^2 over the ring's reflections (nm^2)
    intensity : (n,) float, m |F|^2 d^2 normalised to the strongest ring = 1
    """

    phase: Phase
    max_g_inv_nm: float
    g_inv_nm: np.ndarray
    d_nm: np.ndarray
    hkl: np.ndarray
    families: tuple
    multiplicity: np.ndarray
    f2_nm2: np.ndarray
    intensity: np.ndarray

    def __len__(self) -> int:
        return len(self.g_inv_nm)

    def hkl_label(self, i: int, style: str = "plain") -> str:
        """'111' or '333/511': the families of ring i as a person reads them (4-index '10-11' on
        hexagonal axes; `style` as in :func:`saed.crystal.notation.indices_text`)."""
        from saed.crystal.notation import plane_text

        return "/".join(plane_text(fam, self.phase.is_hexagonal, style) for fam in self.families[i])


def _family_keys(hkl: np.ndarray, space_group: str) -> tuple[np.ndarray, np.ndarray]:
    """For every reflection, its family's representative and an integer key of it.

    The representative is the member (under the Laue group) with most non-negative indices, then the
    lexicographically largest; members of one family share it. Vectorised over the whole table.
    """
    if len(hkl) == 0:
        return np.zeros((0, 3), np.int64), np.zeros(0, np.int64)
    orbit = np.einsum("ni,rij->nrj", hkl, laue_rotations(space_group))  # plane indices transform as rows
    span = int(np.abs(orbit).max()) + 1
    base = 2 * span + 1
    lex = ((orbit[..., 0] + span) * base + (orbit[..., 1] + span)) * base + (orbit[..., 2] + span)
    key = (orbit >= 0).sum(-1) * base**3 + lex
    best = np.argmax(key, axis=1)
    rows = np.arange(len(hkl))
    return orbit[rows, best], key[rows, best]


@lru_cache(maxsize=256)
def ring_lines(phase: Phase, max_g_inv_nm: float = DEFAULT_MAX_G_INV_NM) -> RingLines:
    """Rings of `phase` up to `max_g_inv_nm` (1/nm), from the cached reflection table.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> au = ring_lines(builtin_phase("Au"), 9.0)
    >>> [au.hkl_label(i) for i in range(4)], [int(m) for m in au.multiplicity[:4]]
    (['111', '200', '220', '311'], [8, 6, 12, 24])
    >>> round(float(au.d_nm[0]), 4)
    0.2355
    """
    g_max = float(max_g_inv_nm)
    if not np.isfinite(g_max) or g_max <= 0:
        raise InputError(f"ring list limit must be a positive number of 1/nm, got {max_g_inv_nm!r}")
    table = reflection_table(phase, g_max)
    keep = table.allowed
    hkl, g, f2 = table.hkl[keep], table.g_inv_nm[keep], table.intensity[keep]
    rep, fam_key = _family_keys(hkl, phase.space_group)
    # Rings: runs of equal |g| (the table is sorted by |g|).
    new_ring = np.ones(len(g), bool)
    if len(g) > 1:
        new_ring[1:] = np.diff(g) > SAME_RING_REL * g[:-1]
    ring_id = np.cumsum(new_ring) - 1
    n_rings = int(ring_id[-1]) + 1 if len(g) else 0
    count = np.bincount(ring_id, minlength=n_rings)
    g_arr = np.bincount(ring_id, weights=g, minlength=n_rings) / np.maximum(count, 1)
    f2_arr = np.bincount(ring_id, weights=f2, minlength=n_rings)
    # Families within each ring, strongest first.
    pair, first, inverse = np.unique(np.stack([ring_id, fam_key], axis=1), axis=0, return_index=True,
                                     return_inverse=True)
    fam_f2 = np.bincount(inverse.ravel(), weights=f2, minlength=len(pair))
    rings_fams = [[] for _ in range(n_rings)]
    for k in np.lexsort((pair[:, 1], -fam_f2, pair[:, 0])):
        rings_fams[int(pair[k, 0])].append(tuple(int(v) for v in rep[first[k]]))
    rings_fams = [tuple(f) for f in rings_fams]
    d_arr = 1.0 / g_arr if len(g_arr) else np.zeros(0)
    w = f2_arr * d_arr**2
    if len(w) and w.max() > 0:
        w = w / w.max()
    arrays = dict(g_inv_nm=g_arr, d_nm=d_arr, hkl=np.array([f[0] for f in rings_fams], np.int64).reshape(-1, 3),
                  multiplicity=count.astype(np.int64), f2_nm2=f2_arr, intensity=w)
    arrays = {k: frozen_array(v) for k, v in arrays.items()}
    return RingLines(phase=phase, max_g_inv_nm=g_max, families=tuple(rings_fams), **arrays)


def check_center_px(center_px) -> tuple[float, float]:
    """(x, y) of a pattern centre as floats, or InputError when it is not two finite numbers."""
    try:
        cx, cy = (float(v) for v in center_px)
    except (TypeError, ValueError):
        raise InputError(f"centre {center_px!r} must be two pixel coordinates x y") from None
    if not (math.isfinite(cx) and math.isfinite(cy)):
        raise InputError(f"centre {center_px!r} must be finite")
    return cx, cy


def polar_coordinates(shape, center_px, ellipse: Ellipse | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Corrected radius (px) and raw azimuth (deg, 0..360 from +x toward +y) of every pixel.

    Examples
    --------
    >>> r, phi = polar_coordinates((3, 5), (2.0, 1.0))
    >>> float(r[1, 4]), float(phi[2, 2])
    (2.0, 90.0)
    """
    cx, cy = check_center_px(center_px)
    ny, nx = int(shape[0]), int(shape[1])
    dx = np.arange(nx, dtype=np.float64)[None, :] - cx
    dy = np.arange(ny, dtype=np.float64)[:, None] - cy
    dx, dy = np.broadcast_arrays(dx, dy)
    phi = np.degrees(np.arctan2(dy, dx)) % 360.0
    if ellipse is not None and ellipse.axis_ratio != 1.0:
        dx, dy = ellipse.corrected_px(dx, dy)
    return np.hypot(dx, dy), phi


def ring_outline_px(radius_px, ellipse: Ellipse | None = None) -> tuple[float, float, float]:
    """The ellipse a ring of corrected radius `radius_px` draws on the detector: (width_px, height_px,
    angle_deg), full axes along and across the long axis and the long axis from +x toward +y.

    The inverse of :func:`polar_coordinates`: every point of this outline has corrected radius
    `radius_px` (area-preserving convention of :meth:`saed.calibration.Ellipse.corrected_px`).

    >>> w, h, a = ring_outline_px(100.0, Ellipse(1.04, 30.0))
    >>> round(w / 2, 4), round(h / 2, 4), a
    (101.9804, 98.0581, 30.0)
    >>> t = math.radians(a)
    >>> round(float(math.hypot(*Ellipse(1.04, 30.0).corrected_px(w / 2 * math.cos(t), w / 2 * math.sin(t)))), 9)
    100.0
    """
    ell = ellipse or Ellipse()
    q = math.sqrt(ell.axis_ratio)
    r = float(radius_px)
    return 2.0 * r * q, 2.0 * r / q, ell.major_axis_angle_deg

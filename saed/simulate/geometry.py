"""Zone-axis frames and orientation matrices: the one place the pattern geometry is defined.

Conventions (docs/contract.md):

* Crystal Cartesian frame: x || a, z || c* (:class:`saed.crystal.Lattice`).
* Detector frame: x || increasing column, y || increasing row, z = x cross y, along the beam
  (from the specimen toward the detector).
* The zone axis [uvw] of a pattern is the direct-lattice direction that the orientation matrix
  U maps onto **+z**: it points along the beam, from the specimen toward the detector.
* U = Rz(phi) . R0(uvw), where R0 is the reference frame of the zone (rows: its x, y, z axes in
  crystal Cartesian coordinates) and Rz(phi) turns the detector-plane components by the in-plane
  rotation phi from +x toward +y (clockwise on a screen whose rows run downward).
* A reflection g (1/nm, no 2 pi) lands at detector position centre + (U g)_xy / scale, small-angle
  projection onto the plane perpendicular to the beam.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from saed.crystal.lattice import Lattice
from saed.errors import InputError
from saed.readonly import freeze_in_place

__all__ = ["unit", "zone_reference_frame", "in_plane_rotation", "orientation_matrix", "check_zone_axis",
           "project_to_detector_inv_nm", "rotation_about_axis"]


def unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    n = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(n == 0):
        raise InputError("cannot normalise a zero vector")
    return v / n


def check_zone_axis(uvw) -> np.ndarray:
    """Integer zone axis of shape (3,), or InputError for [000], non-integers or NaN."""
    a = np.asarray(uvw, dtype=float)
    if a.shape != (3,):
        raise InputError(f"a zone axis needs 3 indices (or 4 for hexagonal phases), got {np.asarray(uvw).tolist()}")
    if not np.all(np.isfinite(a)):
        raise InputError(f"zone axis {a.tolist()} has a non-finite index")
    if not np.allclose(a, np.rint(a), atol=1e-9):
        raise InputError(f"zone axis indices must be integers, got {a.tolist()}")
    z = np.rint(a).astype(np.int64)
    if not np.any(z):
        raise InputError("zone axis [000] is not a direction: give at least one non-zero index")
    return z


def zone_reference_frame(lattice: Lattice, uvw) -> np.ndarray:
    """R0: rows are the reference x, y, z axes of the zone pattern in crystal Cartesian coordinates.

    z = unit(r_uvw); x = the part of the crystal's Cartesian x axis (|| a) perpendicular to z, or
    of its y axis when a is within 8 deg of the zone; y = z cross x. det(R0) = +1.
    """
    z = check_zone_axis(uvw)
    return _reference_frame(lattice, tuple(int(v) for v in z)).copy()


@lru_cache(maxsize=4096)
def _reference_frame(lattice: Lattice, uvw: tuple[int, int, int]) -> np.ndarray:
    """zone_reference_frame for a checked integer zone, cached (a scan asks for the same few zones each frame)."""
    z = unit(lattice.r_cartesian_nm(np.array(uvw)))
    ref = np.array([1.0, 0.0, 0.0])
    if abs(float(ref @ z)) > math.cos(math.radians(8.0)):
        ref = np.array([0.0, 1.0, 0.0])
    x = unit(ref - (ref @ z) * z)
    y = np.cross(z, x)
    out = np.array([x, y, z])
    freeze_in_place(out)
    return out


def in_plane_rotation(phi_deg: float) -> np.ndarray:
    """Rz(phi): turns detector-plane components by phi from +x toward +y."""
    p = math.radians(float(phi_deg))
    c, s = math.cos(p), math.sin(p)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def orientation_matrix(lattice: Lattice, uvw, in_plane_rotation_deg: float = 0.0) -> np.ndarray:
    """U mapping crystal Cartesian vectors to the detector frame, zone axis along +z."""
    return in_plane_rotation(in_plane_rotation_deg) @ zone_reference_frame(lattice, uvw)


def rotation_about_axis(axis, angle_deg: float) -> np.ndarray:
    """Right-handed rotation matrix by `angle_deg` about `axis` (Rodrigues' formula)."""
    k = unit(axis)
    a = math.radians(float(angle_deg))
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(a) * kx + (1 - math.cos(a)) * (kx @ kx)


def project_to_detector_inv_nm(u_matrix: np.ndarray, g_cart_inv_nm: np.ndarray) -> np.ndarray:
    """(N, 2) detector-plane components (1/nm) of reflections g given in crystal Cartesian coordinates."""
    return (np.asarray(g_cart_inv_nm, float) @ np.asarray(u_matrix, float).T)[..., :2]

"""Orientation matrices: crystal symmetry in Cartesian form, misorientation, Bunge Euler angles.

U maps crystal Cartesian vectors to the detector (sample) frame (docs/conventions.md); U and U S
describe the same crystal for every proper rotation S of the Laue group (kinematic diffraction does
not see the inversion).
"""

from __future__ import annotations

import math

import numpy as np

from saed.crystal.symmetry import laue_rotations

__all__ = ["proper_symmetry_cartesian", "misorientation_deg", "euler_bunge_deg", "rotation_from_vector"]


def proper_symmetry_cartesian(phase) -> np.ndarray:
    """Proper rotations of the Laue group in the crystal Cartesian frame, (n, 3, 3)."""
    a = phase.lattice.direct_matrix_nm
    ai = np.linalg.inv(a)
    ops = [r for r in laue_rotations(phase.space_group) if round(np.linalg.det(r)) == 1]
    return np.array([a @ r @ ai for r in ops])


def misorientation_deg(u_a: np.ndarray, u_b: np.ndarray, syms: np.ndarray) -> tuple[float, int]:
    """Smallest rotation angle (deg) between orientations u_a and u_b S over the symmetry S; and that S's index."""
    m = u_a.T @ u_b  # rotation angle of u_b S u_a^T equals that of u_a^T u_b S
    tr = np.einsum("jk,nkj->n", m, syms)
    j = int(np.argmax(tr))
    c = max(-1.0, min(1.0, (float(tr[j]) - 1.0) / 2.0))
    return math.degrees(math.acos(c)), j


def euler_bunge_deg(u: np.ndarray) -> tuple[float, float, float]:
    """Bunge (phi1, Phi, phi2) in degrees of the orientation U (crystal -> sample): g = U^T.

    g = Rz(phi2) Rx(Phi) Rz(phi1) (passive rotations), so g33 = cos Phi, g31 = sin phi1 sin Phi,
    g32 = -cos phi1 sin Phi, g13 = sin phi2 sin Phi, g23 = cos phi2 sin Phi (Bunge 1982).

    >>> [round(v, 6) + 0.0 for v in euler_bunge_deg(np.eye(3))]
    [0.0, 0.0, 0.0]
    """
    g = np.asarray(u, float).T
    big_phi = math.degrees(math.acos(max(-1.0, min(1.0, g[2, 2]))))
    if abs(math.sin(math.radians(big_phi))) > 1e-6:
        phi1 = math.degrees(math.atan2(g[2, 0], -g[2, 1]))
        phi2 = math.degrees(math.atan2(g[0, 2], g[1, 2]))
    else:  # Phi = 0 or 180: only phi1 +- phi2 is defined; put it all in phi1
        phi1 = math.degrees(math.atan2(g[0, 1], g[0, 0]))
        phi2 = 0.0
    return phi1 % 360.0, big_phi, phi2 % 360.0


def rotation_from_vector(w: np.ndarray) -> np.ndarray:
    th = float(np.linalg.norm(w))
    if th < 1e-12:
        return np.eye(3)
    k = w / th
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(th) * kx + (1 - math.cos(th)) * (kx @ kx)

"""Zone maps: a stereographic projection of the low-index zone axes and the tilt paths between them.

Two zones [u1] and [u2] share the row of reflections g normal to both, g = u1 x u2 (the Weiss zone
law); tilting from one to the other about that row keeps it excited, and the path is the great
circle of g on the projection (the trace of the plane (g), which contains both zones). A joint is
drawn between neighbours on such a great circle (no other mapped zone between them) when g, or
its shortest allowed multiple, is a low-order allowed reflection; the joint carries the angle
between the two zones.

Projection: stereographic from the crystal Cartesian frame (x || a, z || c*) with the pole at +z,
(x, y) = (d_x, d_y) / (1 + d_z) for unit d with d_z >= 0 (e.g. Cullity & Stock, *Elements of
X-Ray Diffraction* (2001), ch. 2). Region "triangle": one member of each family, the one in the
fundamental region of the Laue group around :data:`saed.simulate.families.REFERENCE_DIRECTION`
(the 001-011-111 triangle for cubic m-3m). Region "hemisphere": every member with d_z >= 0; those
on the primitive circle (d_z = 0) at both ends of their diameter.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.crystal.lattice import reduce_indices
from saed.crystal.phase import Phase
from saed.crystal.structure_factor import ZERO_F_RELATIVE, scattering_sum_nm, structure_factors_nm
from saed.errors import InputError
from saed.readonly import frozen_array
from saed.simulate.families import family_angles_deg, interzone_angle_deg, shortest_allowed_g_inv_nm, zone_families

__all__ = ["ZoneMap", "zone_map", "stereographic_xy", "great_circle_arc_xy"]

#: A joint's common reflection must be at most this many times the phase's shortest allowed |g|.
JOINT_G_FACTOR = 2.5


@dataclass(frozen=True, eq=False)
class ZoneMap:
    """Zones on a stereographic projection and the joints between neighbours.

    Attributes
    ----------
    phase : Phase
    region : "triangle" or "hemisphere"
    zones : (n, 3) int, 3-index zone axes
    directions : (n, 3) unit vectors (crystal Cartesian), d_z >= 0
    xy : (n, 2) stereographic coordinates (unit circle = 90 deg from the pole)
    joints : (m, 2) int, pairs of rows of `zones`
    joint_hkl : (m, 3) int, the shortest allowed reflection common to both zones of a joint
    joint_angle_deg : (m,) angle between the two zones
    """

    phase: Phase
    region: str
    zones: np.ndarray
    directions: np.ndarray
    xy: np.ndarray
    joints: np.ndarray
    joint_hkl: np.ndarray
    joint_angle_deg: np.ndarray

    def __post_init__(self):
        for name in ("zones", "directions", "xy", "joints", "joint_hkl", "joint_angle_deg"):
            object.__setattr__(self, name, frozen_array(getattr(self, name)))


def stereographic_xy(d: np.ndarray) -> np.ndarray:
    """(n, 2) stereographic coordinates of unit vectors d (n, 3) with d_z >= 0, pole +z."""
    d = np.atleast_2d(np.asarray(d, float))
    return d[:, :2] / (1.0 + d[:, 2:3])


def great_circle_arc_xy(d1, d2, *, n: int = 48) -> np.ndarray:
    """(n, 2) projected points along the shorter great-circle arc from unit vector d1 to d2 (slerp)."""
    d1 = np.asarray(d1, float)
    d2 = np.asarray(d2, float)
    om = math.acos(max(-1.0, min(1.0, float(d1 @ d2))))
    if om < 1e-12:
        return stereographic_xy(np.array([d1, d2]))
    t = np.linspace(0.0, 1.0, n)[:, None]
    pts = (np.sin((1 - t) * om) * d1 + np.sin(t * om) * d2) / math.sin(om)
    return stereographic_xy(pts)


def _upper(lat, uvw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sign each zone so its direction has d_z >= 0 (ties on the equator: first non-zero x, y > 0)."""
    d = lat.r_cartesian_nm(uvw)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    flip = (d[:, 2] < -1e-9) | ((np.abs(d[:, 2]) <= 1e-9) & ((d[:, 0] < -1e-9) | ((np.abs(d[:, 0]) <= 1e-9) & (d[:, 1] < 0))))
    uvw = np.where(flip[:, None], -uvw, uvw)
    d = np.where(flip[:, None], -d, d)
    return uvw, d


def zone_map(phase: Phase, *, max_index: int = 3, region: str = "triangle") -> ZoneMap:
    """Zones up to `max_index` on the stereographic projection, with joints between neighbours.

    >>> from saed.crystal import builtin_phase
    >>> zm = zone_map(builtin_phase("Cu"), max_index=1)
    >>> sorted(round(float(a), 2) for a in zm.joint_angle_deg)
    [35.26, 45.0, 54.74]
    """
    if region not in ("triangle", "hemisphere"):
        raise InputError(f"zone-map region must be 'triangle' or 'hemisphere', got {region!r}")
    lat = phase.lattice
    fams = zone_families(phase, max_index=max_index)
    if region == "triangle":
        uvw = np.array([f.representative for f in fams])
    else:
        uvw = np.unique(np.concatenate([f.members for f in fams]), axis=0)
    uvw, d = _upper(lat, uvw)
    if region == "hemisphere":
        # zones on the primitive circle appear at both ends of their diameter, as on a printed stereogram
        rim = np.abs(d[:, 2]) <= 1e-9
        uvw = np.concatenate([uvw, -uvw[rim]])
        d = np.concatenate([d, -d[rim]])
        _, keep = np.unique(uvw, axis=0, return_index=True)
        keep = np.sort(keep)
        uvw, d = uvw[keep], d[keep]
    joints, hkls, angles = _joints(phase, uvw, d)
    return ZoneMap(phase, region, uvw, d, stereographic_xy(d), joints.reshape(-1, 2), hkls.reshape(-1, 3), angles)


def _joints(phase: Phase, uvw: np.ndarray, d: np.ndarray):
    lat = phase.lattice
    g_lim = JOINT_G_FACTOR * shortest_allowed_g_inv_nm(phase)
    n = len(uvw)
    by_plane: dict[tuple, list[int]] = {}
    for i in range(n):
        for j in range(i + 1, n):
            g = reduce_indices(np.cross(uvw[i], uvw[j]))
            if not np.any(g):
                continue
            key = tuple(g.tolist()) if tuple(g.tolist()) > tuple((-g).tolist()) else tuple((-g).tolist())
            by_plane.setdefault(key, [])
            for k in (i, j):
                if k not in by_plane[key]:
                    by_plane[key].append(k)
    joints, hkls, angles = [], [], []
    for key, members in by_plane.items():
        g = np.array(key)
        row = _shortest_allowed_multiple(phase, g, g_lim)
        if row is None:
            continue
        order, closed = _along_circle(lat.g_cartesian_inv_nm(g), d, members)
        pairs = list(zip(order[:-1], order[1:])) + ([(order[-1], order[0])] if closed and len(order) > 2 else [])
        for a, b in pairs:
            joints.append((a, b))
            hkls.append(row)
            angles.append(interzone_angle_deg(lat, uvw[a], uvw[b]))
    return (np.array(joints, dtype=np.int64), np.array(hkls, dtype=np.int64), np.array(angles, dtype=float))


def _along_circle(g_cart: np.ndarray, d: np.ndarray, members: list[int]) -> tuple[list[int], bool]:
    """Members in order along the upper half of the great circle normal to g; closed for the equator."""
    nrm = g_cart / np.linalg.norm(g_cart)
    e_s = np.cross(nrm, [0.0, 0.0, 1.0])
    if np.linalg.norm(e_s) < 1e-9:  # the primitive circle itself: a full circle of rim zones
        e_s = d[members[0]]
        closed = True
    else:
        e_s = e_s / np.linalg.norm(e_s)
        closed = False
    e2 = np.cross(nrm, e_s)
    if e2[2] < 0:
        e2 = -e2
    ang = np.arctan2(d[members] @ e2, d[members] @ e_s)
    ang = np.where(ang < -1e-9, ang + 2 * math.pi, ang)
    return [members[k] for k in np.argsort(ang, kind="stable")], closed


def _shortest_allowed_multiple(phase: Phase, g: np.ndarray, g_lim: float) -> np.ndarray | None:
    for m in range(1, 7):
        h = m * g
        if float(phase.lattice.g_inv_nm(h)) > g_lim:
            return None
        f = structure_factors_nm(phase, h[None, :])
        if abs(f[0]) > ZERO_F_RELATIVE * scattering_sum_nm(phase, h[None, :])[0]:
            return h
    return None


def map_angle_table(phase: Phase, *, max_index: int = 2):
    """(families, angles): the families up to `max_index` and their smallest mutual angles (deg)."""
    fams = zone_families(phase, max_index=max_index)
    return fams, family_angles_deg(phase, fams)

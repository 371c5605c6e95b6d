"""Orientations on a scan grid: inverse-pole-figure colours, and grain boundaries by misorientation.

From each indexed row (phase, zone axis, in-plane rotation) the orientation matrix U (crystal
Cartesian -> detector frame, :func:`saed.simulate.geometry.orientation_matrix`) is rebuilt.

* **Inverse-pole-figure colour**: the beam direction in the crystal (U^T z, i.e. the zone axis),
  brought by the Laue group's rotations into the standard triangle of its crystal system, and
  coloured by its barycentric weights on the triangle's corners (red at the first corner, green
  at the second, blue at the third, each scaled so the largest is 1). This is the usual
  colouring of orientation maps (common practice; e.g. Nolze & Hielscher, *J. Appl. Cryst.* 49
  (2016) 1786, discuss its limits). Triangles: cubic m-3m [001]-[101]-[111]; hexagonal 6/mmm
  [0001]-[2-1-10]-[10-10]; tetragonal 4/mmm [001]-[100]-[110]; orthorhombic mmm
  [001]-[100]-[010]. Other Laue classes get no colour (grey) rather than a misleading one.
* **Misorientation** between two neighbours of one phase: the smallest rotation angle of
  U1^T U2 S over the proper rotations S of the Laue group (the disorientation angle;
  e.g. Randle & Engler, *Introduction to Texture Analysis*, 2000, ch. 2). Neighbours of different
  phases are always separated by a (phase) boundary. For boundaries, an orientation and its turn
  by 180 deg about the beam count as one: a kinematic zone-axis pattern is centrosymmetric
  (Friedel's law), so one pattern cannot tell them apart (where the zone axis is not a two-fold
  axis they are different orientations; tilting to a second zone decides), and the indexer may
  report either on neighbouring frames of one grain.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

__all__ = ["ipf_triangle", "ipf_colours", "orientations", "proper_rotations_cartesian", "misorientation_deg",
           "boundaries"]


def _system(phase) -> str:
    """'cubic', 'hexagonal', 'tetragonal', 'orthorhombic' for the four Laue classes coloured here, else ''."""
    from saed.crystal.symmetry import laue_rotations

    n = len(laue_rotations(phase.space_group))
    if n == 48:
        return "cubic"
    if n == 24 and phase.is_hexagonal:
        return "hexagonal"
    if n == 16:
        return "tetragonal"
    if n == 8:
        return "orthorhombic"
    return ""


_CORNERS = {
    "cubic": ((0, 0, 1), (1, 0, 1), (1, 1, 1)),
    "hexagonal": ((0, 0, 1), (1, 0, 0), (2, 1, 0)),        # [0001], [2-1-10], [10-10] in 3 indices
    "tetragonal": ((0, 0, 1), (1, 0, 0), (1, 1, 0)),
    "orthorhombic": ((0, 0, 1), (1, 0, 0), (0, 1, 0)),
}
#: Corner labels as people read them (4-index for hexagonal).
CORNER_LABELS = {
    "cubic": ("001", "101", "111"),
    "hexagonal": ("0001", "2-1-10", "10-10"),
    "tetragonal": ("001", "100", "110"),
    "orthorhombic": ("001", "100", "010"),
}


def ipf_triangle(phase):
    """(system, corners as unit Cartesian vectors (3, 3) in rows, corner labels), or (``''``, None, None)."""
    system = _system(phase)
    if not system:
        return "", None, None
    c = phase.lattice.r_cartesian_nm(np.array(_CORNERS[system], float))
    return system, c / np.linalg.norm(c, axis=1, keepdims=True), CORNER_LABELS[system]


@lru_cache(maxsize=64)
def _laue_cart(phase) -> np.ndarray:
    """All Laue-group operations (with improper ones) acting on Cartesian directions, (n, 3, 3)."""
    from saed.crystal.symmetry import laue_rotations

    d = np.asarray(phase.lattice.direct_matrix_nm, float)
    r = laue_rotations(phase.space_group).astype(float)
    return np.einsum("ij,njk,kl->nil", d, r, np.linalg.inv(d))


def proper_rotations_cartesian(phase) -> np.ndarray:
    """The proper rotations (det +1) of the phase's Laue group in Cartesian crystal coordinates, (n, 3, 3)."""
    ops = _laue_cart(phase)
    return ops[np.linalg.det(ops) > 0]


def ipf_colours(phase, directions: np.ndarray) -> np.ndarray:
    """RGB (n, 3) in 0..1 of Cartesian crystal `directions` (n, 3); grey for a Laue class without a triangle.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> al = builtin_phase("Al")
    >>> np.round(ipf_colours(al, np.array([[0, 0, 1.0], [0, 1, 1.0], [1, 1, 1.0], [0, 0, -1.0]])), 2).tolist()
    [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0]]
    """
    v = np.asarray(directions, float).reshape(-1, 3)
    system, corners, _ = ipf_triangle(phase)
    if not system or len(v) == 0:
        return np.full((len(v), 3), 0.6)
    v = v / np.linalg.norm(v, axis=1, keepdims=True)
    inv = np.linalg.inv(corners.T)                            # barycentric weights: w = inv @ d
    eq = np.einsum("nij,mj->mni", _laue_cart(phase), v)       # (m, n_ops, 3)
    w = np.einsum("ij,mnj->mni", inv, eq)
    best = np.argmax(w.min(axis=2), axis=1)                   # the member inside the triangle (min weight >= 0)
    wb = np.clip(w[np.arange(len(v)), best], 0.0, None)
    return wb / np.maximum(wb.max(axis=1, keepdims=True), 1e-12)


@lru_cache(maxsize=4096)
def _frame0(phase, uvw: tuple) -> np.ndarray:
    from saed.simulate.geometry import zone_reference_frame

    return zone_reference_frame(phase.lattice, uvw)


def orientations(phase, zone_axes: np.ndarray, phi_deg: np.ndarray) -> np.ndarray:
    """U (n, 3, 3) for rows of one phase: Rz(phi) R0(uvw), as :func:`saed.simulate.geometry.orientation_matrix`."""
    zone_axes = np.asarray(zone_axes, int).reshape(-1, 3)
    p = np.radians(np.asarray(phi_deg, float).ravel())
    c, s = np.cos(p), np.sin(p)
    rz = np.zeros((len(p), 3, 3))
    rz[:, 0, 0], rz[:, 0, 1], rz[:, 1, 0], rz[:, 1, 1], rz[:, 2, 2] = c, -s, s, c, 1.0
    r0 = np.array([_frame0(phase, tuple(int(x) for x in z)) for z in zone_axes]).reshape(-1, 3, 3)
    return rz @ r0


def misorientation_deg(phase, u1: np.ndarray, u2: np.ndarray, *, friedel: bool = False) -> np.ndarray:
    """Disorientation angles (n,) in degrees between orientation matrices u1[i] and u2[i] of `phase`.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> from saed.simulate.geometry import rotation_about_axis
    >>> al = builtin_phase("Al"); u = np.eye(3)[None]
    >>> r = rotation_about_axis([0, 0, 1], 95.0)[None]     # 95 deg about <001> is 5 deg from a symmetry copy
    >>> round(float(misorientation_deg(al, u, r)[0]), 6)
    5.0
    """
    u1 = np.asarray(u1, float)
    ops = proper_rotations_cartesian(phase)
    best = None
    for flip in ((False, True) if friedel else (False,)):
        a = np.einsum("ij,njk->nik", np.diag([-1.0, -1.0, 1.0]), u1) if flip else u1    # 180 deg about the beam
        m = np.einsum("nji,njk->nik", a, np.asarray(u2, float))      # U1^T U2
        tr = np.einsum("nij,oji->no", m, ops).max(axis=1)
        best = tr if best is None else np.maximum(best, tr)
    cos = np.clip((best - 1.0) / 2.0, -1.0, 1.0)
    return np.degrees(np.arccos(cos))


def boundaries(phase_index: np.ndarray, u: np.ndarray, phases: list, *, threshold_deg: float):
    """Boundaries between neighbouring indexed positions: (right (ny, nx-1), down (ny-1, nx)) booleans.

    `phase_index` (ny, nx): index into `phases` or negative (not indexed: no boundary drawn);
    `u` (ny, nx, 3, 3) orientation matrices. A boundary separates two indexed neighbours of
    different phases, or of one phase misoriented by more than `threshold_deg` (an orientation and
    its 180 deg turn about the beam counted as one, see the module notes).
    """
    pi = np.asarray(phase_index)

    def side(a_p, b_p, a_u, b_u):
        out = np.zeros(a_p.shape, bool)
        both = (a_p >= 0) & (b_p >= 0)
        out |= both & (a_p != b_p)
        for k, ph in enumerate(phases):
            same = both & (a_p == k) & (b_p == k)
            if same.any():
                out[same] = misorientation_deg(ph, a_u[same], b_u[same], friedel=True) > threshold_deg
        return out

    right = side(pi[:, :-1], pi[:, 1:], u[:, :-1], u[:, 1:])
    down = side(pi[:-1, :], pi[1:, :], u[:-1, :], u[1:, :])
    return right, down


def _stereo(v: np.ndarray) -> np.ndarray:
    """Stereographic projection of unit vectors (upper hemisphere) to the plane: x, y / (1 + z)."""
    return v[..., :2] / (1.0 + v[..., 2:3])


def triangle_key(phase, n: int = 160):
    """The standard triangle in stereographic projection as a picture, for the orientation map's colour key.

    Returns (rgba (n, n, 4), extent (x0, x1, y0, y1), projected corners (3, 2), corner labels), or None
    for a Laue class without a triangle. Each pixel of an n x n grid over the projected triangle is
    projected back onto the sphere and coloured by :func:`ipf_colours`; pixels outside the triangle
    are transparent. (Filling pixels, rather than placing dots at even steps of the corners' weights,
    leaves no gaps where the projection stretches the triangle toward the equator.)
    """
    system, corners, labels = ipf_triangle(phase)
    if not system:
        return None
    # the triangle's outline in projection (its edges are great-circle arcs), for the grid's extent
    t = np.linspace(0.0, 1.0, 64)[:, None]
    edges = np.concatenate([(1 - t) * corners[i] + t * corners[(i + 1) % 3] for i in range(3)])
    edges = _stereo(edges / np.linalg.norm(edges, axis=1, keepdims=True))
    (x0, y0), (x1, y1) = edges.min(axis=0), edges.max(axis=0)
    xs = x0 + (np.arange(n) + 0.5) * (x1 - x0) / n            # pixel centres
    ys = y0 + (np.arange(n) + 0.5) * (y1 - y0) / n
    px, py = np.meshgrid(xs, ys)                              # row k of the picture: y = ys[k] (origin lower)
    r2 = px * px + py * py
    d = np.stack([2 * px, 2 * py, 1.0 - r2], axis=-1).reshape(-1, 3) / (1.0 + r2.reshape(-1, 1))
    w = d @ np.linalg.inv(corners)                           # weights on the corners: d = w @ corners
    inside = w.min(axis=1) >= -1e-9
    rgba = np.zeros((n * n, 4))
    rgba[inside, :3] = ipf_colours(phase, d[inside])
    rgba[inside, 3] = 1.0
    return rgba.reshape(n, n, 4), (float(x0), float(x1), float(y0), float(y1)), _stereo(corners), labels


def angle_text(deg: float) -> str:
    return f"{deg:g}" if math.isfinite(deg) else "?"

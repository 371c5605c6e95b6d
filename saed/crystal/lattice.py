"""Crystal lattices of all seven systems through one pair of metric tensors.

Conventions (CONTRACT.md): lengths in nm, reciprocal lengths in 1/nm *without*
the factor 2 pi (|g| = 1/d), angles in degrees. The Cartesian crystal frame has
x parallel to **a**, **b** in the x-y plane and z parallel to **c***.

Every function takes Miller indices ``hkl`` or direction indices ``uvw`` as an
array of shape (3,) or (N, 3) and returns one value per row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from saed.errors import PhaseError
from saed.readonly import freeze_in_place

__all__ = ["Lattice", "reduce_indices"]


def _cos_deg(angle_deg: float) -> float:
    """cos of an angle in degrees, exact for the angles crystallographers use most (90, 120, 60)."""
    exact = {90.0: 0.0, 120.0: -0.5, 60.0: 0.5}
    if angle_deg in exact:
        return exact[angle_deg]
    return math.cos(math.radians(angle_deg))


@dataclass(frozen=True)
class Lattice:
    """A crystal lattice given by its six cell parameters (nm and degrees).

    Examples
    --------
    >>> cu = Lattice.cubic(0.36149)
    >>> round(float(cu.d_nm([1, 1, 1])), 5)
    0.20871
    >>> round(float(cu.plane_angle_deg([1, 0, 0], [1, 1, 1])), 2)
    54.74
    """

    a_nm: float
    b_nm: float
    c_nm: float
    alpha_deg: float = 90.0
    beta_deg: float = 90.0
    gamma_deg: float = 90.0

    def __post_init__(self):
        vals = [self.a_nm, self.b_nm, self.c_nm, self.alpha_deg, self.beta_deg, self.gamma_deg]
        try:
            vals = [float(v) for v in vals]
        except (TypeError, ValueError):
            raise PhaseError(f"cell parameters must be numbers, got {vals!r}") from None
        for name, v in zip(("a_nm", "b_nm", "c_nm", "alpha_deg", "beta_deg", "gamma_deg"), vals):
            object.__setattr__(self, name, v)
            if not math.isfinite(v) or v <= 0:
                raise PhaseError(f"cell parameter {name} = {v!r} must be a positive finite number")
        for name in ("alpha_deg", "beta_deg", "gamma_deg"):
            if getattr(self, name) >= 180.0:
                raise PhaseError(f"cell angle {name} = {getattr(self, name)} must be below 180 degrees")
        ca, cb, cg = (_cos_deg(x) for x in (self.alpha_deg, self.beta_deg, self.gamma_deg))
        det = 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg
        if det <= 1e-12:
            raise PhaseError(
                f"cell angles alpha={self.alpha_deg}, beta={self.beta_deg}, gamma={self.gamma_deg} "
                "do not form a cell (metric tensor not positive-definite)"
            )

    # ------------------------------------------------------------------ builders
    @classmethod
    def cubic(cls, a_nm: float) -> "Lattice":
        return cls(a_nm, a_nm, a_nm, 90.0, 90.0, 90.0)

    @classmethod
    def tetragonal(cls, a_nm: float, c_nm: float) -> "Lattice":
        return cls(a_nm, a_nm, c_nm, 90.0, 90.0, 90.0)

    @classmethod
    def hexagonal(cls, a_nm: float, c_nm: float) -> "Lattice":
        return cls(a_nm, a_nm, c_nm, 90.0, 90.0, 120.0)

    # ------------------------------------------------------------------ tensors
    @cached_property
    def direct_matrix_nm(self) -> np.ndarray:
        """3x3 matrix whose *columns* are a, b, c in the Cartesian crystal frame (nm)."""
        a, b, c = self.a_nm, self.b_nm, self.c_nm
        ca, cb, cg = (_cos_deg(x) for x in (self.alpha_deg, self.beta_deg, self.gamma_deg))
        sg = math.sqrt(1.0 - cg * cg)
        cy = (ca - cb * cg) / sg
        cz = math.sqrt(max(1.0 - cb * cb - cy * cy, 0.0))
        m = np.array([[a, b * cg, c * cb], [0.0, b * sg, c * cy], [0.0, 0.0, c * cz]])
        freeze_in_place(m)
        return m

    @cached_property
    def reciprocal_matrix_inv_nm(self) -> np.ndarray:
        """3x3 matrix whose *columns* are a*, b*, c* in the Cartesian frame (1/nm, no 2 pi)."""
        m = np.linalg.inv(self.direct_matrix_nm).T
        freeze_in_place(m)
        return m

    @cached_property
    def metric_tensor_nm2(self) -> np.ndarray:
        """Direct metric tensor G_ij = a_i . a_j (nm^2)."""
        a = self.direct_matrix_nm
        g = a.T @ a
        freeze_in_place(g)
        return g

    @cached_property
    def reciprocal_metric_tensor_inv_nm2(self) -> np.ndarray:
        """Reciprocal metric tensor G* = G^-1 (1/nm^2)."""
        g = np.linalg.inv(self.metric_tensor_nm2)
        freeze_in_place(g)
        return g

    @cached_property
    def volume_nm3(self) -> float:
        return float(abs(np.linalg.det(self.direct_matrix_nm)))

    @cached_property
    def crystal_system(self) -> str:
        """The crystal system the cell parameters are compatible with (most symmetric first)."""
        eq = lambda x, y: abs(x - y) <= 1e-6 * max(abs(x), abs(y))  # noqa: E731
        a, b, c = self.a_nm, self.b_nm, self.c_nm
        al, be, ga = self.alpha_deg, self.beta_deg, self.gamma_deg
        right = [eq(x, 90.0) for x in (al, be, ga)]
        if all(right):
            if eq(a, b) and eq(b, c):
                return "cubic"
            if eq(a, b):
                return "tetragonal"
            return "orthorhombic"
        if right[0] and right[1] and eq(ga, 120.0) and eq(a, b):
            return "hexagonal"
        if eq(a, b) and eq(b, c) and eq(al, be) and eq(be, ga):
            return "trigonal"
        if sum(right) == 2:
            return "monoclinic"
        return "triclinic"

    @property
    def is_hexagonal_axes(self) -> bool:
        """True for hexagonal axes (a = b, gamma = 120 deg): Miller-Bravais indices apply."""
        return self.crystal_system == "hexagonal"

    # ------------------------------------------------------------------ vectors
    def g_cartesian_inv_nm(self, hkl) -> np.ndarray:
        """Reciprocal-lattice vectors of `hkl` in the Cartesian crystal frame, shape (..., 3), 1/nm."""
        return np.asarray(hkl, dtype=float) @ self.reciprocal_matrix_inv_nm.T

    def r_cartesian_nm(self, uvw) -> np.ndarray:
        """Direct-lattice vectors of `uvw` in the Cartesian crystal frame, shape (..., 3), nm."""
        return np.asarray(uvw, dtype=float) @ self.direct_matrix_nm.T

    def g_inv_nm(self, hkl) -> np.ndarray:
        """|g| = 1/d in 1/nm."""
        h = np.asarray(hkl, dtype=float)
        return np.sqrt(np.einsum("...i,ij,...j->...", h, self.reciprocal_metric_tensor_inv_nm2, h))

    def d_nm(self, hkl) -> np.ndarray:
        """Interplanar spacing d_hkl in nm (inf for 000)."""
        g = self.g_inv_nm(hkl)
        with np.errstate(divide="ignore"):
            return 1.0 / g

    def length_nm(self, uvw) -> np.ndarray:
        """Length of the lattice vector [uvw] in nm."""
        u = np.asarray(uvw, dtype=float)
        return np.sqrt(np.einsum("...i,ij,...j->...", u, self.metric_tensor_nm2, u))

    def plane_angle_deg(self, hkl1, hkl2) -> np.ndarray:
        """Angle between the normals of planes (hkl1) and (hkl2), degrees, 0..180."""
        return _angle(self.g_cartesian_inv_nm(hkl1), self.g_cartesian_inv_nm(hkl2))

    def direction_angle_deg(self, uvw1, uvw2) -> np.ndarray:
        """Angle between directions [uvw1] and [uvw2], degrees, 0..180."""
        return _angle(self.r_cartesian_nm(uvw1), self.r_cartesian_nm(uvw2))

    def plane_direction_angle_deg(self, hkl, uvw) -> np.ndarray:
        """Angle between the normal of plane (hkl) and direction [uvw], degrees (h.u needs no metric)."""
        return _angle(self.g_cartesian_inv_nm(hkl), self.r_cartesian_nm(uvw))

    @staticmethod
    def zone_of_planes(hkl1, hkl2) -> np.ndarray:
        """Zone axis [uvw] common to planes (hkl1) and (hkl2): their index cross product, reduced.

        The Weiss zone law h.u = 0 holds in any lattice, so no metric enters.

        >>> Lattice.zone_of_planes([2, 0, 0], [1, 1, -1]).tolist()
        [0, 1, 1]
        """
        return reduce_indices(np.cross(np.asarray(hkl1, dtype=np.int64), np.asarray(hkl2, dtype=np.int64)))

    @staticmethod
    def plane_of_directions(uvw1, uvw2) -> np.ndarray:
        """Plane (hkl) containing directions [uvw1] and [uvw2], reduced to smallest integers."""
        return reduce_indices(np.cross(np.asarray(uvw1, dtype=np.int64), np.asarray(uvw2, dtype=np.int64)))


def _angle(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Angle between Cartesian vectors in degrees, atan2(|x cross y|, x . y).

    atan2 keeps full precision near 0 and 180 deg, where arccos of the cosine loses half the
    digits (parallel planes came out 1e-6 deg apart). A zero vector gives nan.
    """
    dot = np.sum(x * y, axis=-1)
    cross = np.linalg.norm(np.cross(x, y), axis=-1)
    zero = (np.linalg.norm(x, axis=-1) == 0) | (np.linalg.norm(y, axis=-1) == 0)
    return np.where(zero, np.nan, np.degrees(np.arctan2(cross, dot)))[()]  # 0-d -> numpy scalar, as before


def reduce_indices(idx) -> np.ndarray:
    """Divide integer index rows by their greatest common divisor; zero rows stay zero.

    >>> reduce_indices([2, -4, 6]).tolist()
    [1, -2, 3]
    """
    a = np.asarray(idx)
    if a.dtype.kind == "f":
        r = np.rint(a)
        if not np.allclose(a, r, atol=1e-6):
            raise PhaseError(f"indices {a.tolist()} are not integers")
        a = r
    a = a.astype(np.int64)
    g = np.gcd.reduce(np.abs(a), axis=-1, keepdims=True)
    g[g == 0] = 1
    return a // g

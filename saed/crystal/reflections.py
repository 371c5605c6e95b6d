"""The table of all reflections of a phase up to a reciprocal radius, built once and cached.

Every later stage (zone patterns, candidate pairs, ring lists) selects from this
table instead of recomputing structure factors.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from saed.crystal.phase import Phase, cell_atoms
from saed.crystal.structure_factor import ZERO_F_RELATIVE, scattering_sum_nm, structure_factors_nm
from saed.errors import InputError, PhaseError
from saed.readonly import freeze_in_place

__all__ = ["ReflectionTable", "reflection_table"]

#: Upper bound on reflections in one table, so a huge cell cannot exhaust memory.
MAX_REFLECTIONS = 2_000_000

#: Upper bound on atoms-in-the-cell x reflections (structure-factor terms) of one table: computed in
#: blocks (bounded memory), at a few million terms per second on one core, so 2e8 is about a minute.
MAX_STRUCTURE_FACTOR_TERMS = 200_000_000


@dataclass(frozen=True, eq=False)
class ReflectionTable:
    """All hkl (000 excluded) with |g| <= max_g_inv_nm, sorted by |g|.

    Attributes
    ----------
    hkl : (N, 3) int array
    g_cart_inv_nm : (N, 3) float, Cartesian crystal frame (x || a, z || c*)
    g_inv_nm : (N,) |g| = 1/d
    f_nm : (N,) complex structure factor, nm (non-relativistic f_e, Debye-Waller included)
    intensity : (N,) |F|^2, nm^2
    allowed : (N,) bool, |F| above ZERO_F_RELATIVE * sum |f_j|
    """

    phase: Phase
    max_g_inv_nm: float
    hkl: np.ndarray
    g_cart_inv_nm: np.ndarray
    g_inv_nm: np.ndarray
    f_nm: np.ndarray
    intensity: np.ndarray
    allowed: np.ndarray

    def __len__(self) -> int:
        return len(self.hkl)

    def index_of(self, hkl) -> np.ndarray:
        """Row numbers of the given hkl rows (-1 where absent)."""
        q = np.atleast_2d(np.asarray(hkl, dtype=np.int64))
        lookup = self._lookup
        return np.array([lookup.get(tuple(r), -1) for r in q.tolist()], dtype=np.int64)

    @property
    def _lookup(self) -> dict:
        d = self.__dict__.get("_lookup_cache")
        if d is None:
            d = {tuple(r): i for i, r in enumerate(self.hkl.tolist())}
            object.__setattr__(self, "_lookup_cache", d)
        return d


@lru_cache(maxsize=64)
def reflection_table(phase: Phase, max_g_inv_nm: float) -> ReflectionTable:
    """Build (once per phase and radius) the reflection table up to `max_g_inv_nm` (1/nm)."""
    g_max = float(max_g_inv_nm)
    if not math.isfinite(g_max) or g_max <= 0:
        raise InputError(f"max_g must be a positive number of 1/nm, got {max_g_inv_nm!r}")
    lat = phase.lattice
    # h = g . a: |h| <= g_max |a| (and likewise k, l).
    hmax, kmax, lmax = (int(math.floor(g_max * x)) for x in (lat.a_nm, lat.b_nm, lat.c_nm))
    n_box = (2 * hmax + 1) * (2 * kmax + 1) * (2 * lmax + 1)
    if n_box > 8 * MAX_REFLECTIONS:
        raise InputError(
            f"max_g = {g_max:g} 1/nm asks for about {n_box:,} reflections of {phase.name}; lower --max-g"
        )
    grid = np.mgrid[-hmax:hmax + 1, -kmax:kmax + 1, -lmax:lmax + 1].reshape(3, -1).T
    grid = grid[np.any(grid != 0, axis=1)]
    g = lat.g_inv_nm(grid)
    keep = g <= g_max * (1 + 1e-12)
    hkl = grid[keep].astype(np.int64)
    g = g[keep]
    order = np.lexsort((-hkl[:, 2], -hkl[:, 1], -hkl[:, 0], np.round(g, 9)))
    hkl, g = hkl[order], g[order]
    n_atoms = len(cell_atoms(phase).elements)
    if len(hkl) * n_atoms > MAX_STRUCTURE_FACTOR_TERMS:
        raise PhaseError(
            f"{phase.source or phase.name}: {n_atoms:,} atoms in the cell x {len(hkl):,} reflections up to "
            f"{g_max:g} 1/nm = {len(hkl) * n_atoms:.2g} structure-factor terms, more than the "
            f"{MAX_STRUCTURE_FACTOR_TERMS:.0e} saed computes (minutes of work); lower --max-g, or give the CIF of "
            "a smaller (e.g. primitive or averaged) cell"
        )
    f = structure_factors_nm(phase, hkl) if len(hkl) else np.zeros(0, complex)
    fsum = scattering_sum_nm(phase, hkl) if len(hkl) else np.zeros(0)
    allowed = np.abs(f) > ZERO_F_RELATIVE * fsum
    arrays = dict(hkl=hkl, g_cart_inv_nm=lat.g_cartesian_inv_nm(hkl), g_inv_nm=g, f_nm=f,
                  intensity=np.abs(f) ** 2, allowed=allowed)
    freeze_in_place(*arrays.values())
    return ReflectionTable(phase=phase, max_g_inv_nm=g_max, **arrays)

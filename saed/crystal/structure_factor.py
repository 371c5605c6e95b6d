"""Kinematic structure factors F(hkl), vectorised over many reflections.

F(h) = sum_j occ_j f_j(s) exp(-B_j s^2) exp(2 pi i h . r_j), summed over every
atom of the conventional cell (:func:`saed.crystal.phase.cell_atoms`), with the
non-relativistic electron scattering factors of ITC Vol. C Table 4.3.2.2 and
s = 1/(2d). F is in nm. Absences (lattice centring, glides, screws and
site-specific ones such as diamond 222) come out of the sum, never from a rule table.
"""

from __future__ import annotations

import numpy as np

from saed.crystal.phase import Phase, cell_atoms
from saed.crystal.scattering import electron_form_factor_nm

__all__ = ["structure_factors_nm", "scattering_sum_nm", "ZERO_F_RELATIVE"]

#: |F| below this fraction of sum_j |occ_j f_j| counts as zero (kinematically forbidden).
ZERO_F_RELATIVE = 1e-6


def _s_inv_nm(phase: Phase, hkl: np.ndarray) -> np.ndarray:
    return 0.5 * phase.lattice.g_inv_nm(hkl)


def structure_factors_nm(phase: Phase, hkl, *, debye_waller: bool = True) -> np.ndarray:
    """Complex structure factors in nm for `hkl` of shape (N, 3) (or (3,)).

    Examples
    --------
    >>> from saed.crystal.phase import builtin_phase
    >>> si = builtin_phase("Si")
    >>> f = structure_factors_nm(si, [[1, 1, 1], [2, 0, 0], [2, 2, 2]])
    >>> [bool(abs(x) > 1e-8) for x in f]   # 200 (glide) and 222 (site 8a) vanish
    [True, False, False]
    """
    h = np.atleast_2d(np.asarray(hkl, dtype=float))
    atoms = cell_atoms(phase)
    n_atoms = len(atoms.elements)
    # In blocks of reflections, so that the (reflections x atoms) arrays stay near CHUNK_TERMS
    # elements whatever the cell holds (a 5000-atom CIF would otherwise need gigabytes).
    step = max(1, CHUNK_TERMS // max(n_atoms, 1))
    f = np.empty(len(h), dtype=complex)
    for i in range(0, len(h), step):
        f[i:i + step] = _structure_factor_block(atoms, h[i:i + step], _s_inv_nm(phase, h[i:i + step]), debye_waller)
    return f if np.ndim(hkl) > 1 else f[0]


#: Reflection x atom terms computed at once by :func:`structure_factors_nm` (about 16 bytes each,
#: a few arrays: some 100 MB at most).
CHUNK_TERMS = 2**21


def _structure_factor_block(atoms, h, s, debye_waller: bool) -> np.ndarray:
    phases = np.exp(2j * np.pi * (h @ atoms.frac.T))  # (N, n_atoms)
    weights = np.empty((len(h), len(atoms.elements)))
    for el in set(atoms.elements):
        cols = [i for i, e in enumerate(atoms.elements) if e == el]
        weights[:, cols] = electron_form_factor_nm(el, s)[:, None]
    weights *= atoms.occupancy[None, :]
    if debye_waller:
        weights *= np.exp(-np.outer(s * s, atoms.b_iso_nm2))
    return np.sum(weights * phases, axis=1)


def scattering_sum_nm(phase: Phase, hkl, *, debye_waller: bool = True) -> np.ndarray:
    """sum_j |occ_j f_j(s)| (nm): the largest |F| could be; the scale for calling a reflection zero."""
    h = np.atleast_2d(np.asarray(hkl, dtype=float))
    atoms = cell_atoms(phase)
    s = _s_inv_nm(phase, h)
    total = np.zeros(len(h))
    groups: dict[tuple[str, float], float] = {}  # atoms of one element and B: one form factor (big cells)
    for el, occ, b in zip(atoms.elements, atoms.occupancy, atoms.b_iso_nm2):
        key = (el, float(b) if debye_waller else 0.0)
        groups[key] = groups.get(key, 0.0) + abs(float(occ))
    for (el, b), occ in groups.items():
        f = np.abs(electron_form_factor_nm(el, s))
        if debye_waller:
            f = f * np.exp(-b * s * s)
        total += occ * f
    return total if np.ndim(hkl) > 1 else total[0]

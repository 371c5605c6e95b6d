"""Crystal model: lattices, phases, symmetry, scattering factors and structure factors.

The lowest stage that knows crystallography (above :mod:`saed.physics`); everything is checked against
gemmi and published tables. How indices and units are written for people: :mod:`~saed.crystal.notation`.
"""

from saed.crystal.lattice import Lattice, reduce_indices
from saed.crystal.phase import Phase, Site, builtin_names, builtin_phase, cell_atoms, load_phase, phase_from_cif
from saed.crystal.reflections import ReflectionTable, reflection_table
from saed.crystal.structure_factor import structure_factors_nm

__all__ = ["Lattice", "reduce_indices", "Phase", "Site", "builtin_names", "builtin_phase", "cell_atoms",
           "load_phase", "phase_from_cif", "ReflectionTable", "reflection_table", "structure_factors_nm"]

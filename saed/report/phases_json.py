"""The JSON document of ``saed phases``: a list with one object per built-in phase (docs/contract.md)."""

from __future__ import annotations

from saed.crystal.phase import cell_atoms, space_group_in_cell

__all__ = ["phase_json"]


def phase_json(ph) -> dict:
    """One phase of the list: name, structure type, space group, cell (nm, deg), atoms and source."""
    lat = ph.lattice
    return {
        "name": ph.name,
        "structure_type": ph.structure_type,
        "space_group": ph.space_group_short,
        "space_group_number": ph.space_group_number,
        "space_group_setting": ph.space_group,
        "space_group_in_cell": space_group_in_cell(ph),
        "a_nm": lat.a_nm, "b_nm": lat.b_nm, "c_nm": lat.c_nm,
        "alpha_deg": lat.alpha_deg, "beta_deg": lat.beta_deg, "gamma_deg": lat.gamma_deg,
        "crystal_system": lat.crystal_system,
        "n_atoms_cell": len(cell_atoms(ph).elements),
        "elements": sorted({s.element for s in ph.sites}),
        "source": ph.source,
        "note": ph.note,
    }

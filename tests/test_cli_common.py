"""Phase lists from the command line: duplicates dropped, same-named different phases both kept."""

import argparse

from saed.cli.common import phases_from_args


def test_same_phase_twice_is_kept_once():
    args = argparse.Namespace(phase=["Co-hcp", "co-hcp", "Co-fcc"])
    assert [p.name for p in phases_from_args(args)] == ["Co-hcp", "Co-fcc"]


def test_same_name_different_crystal_keeps_both(tmp_path):
    # A CIF whose data block is named like a built-in phase but holds another cell must not be dropped.
    cif = tmp_path / "co.cif"
    cif.write_text(
        "data_Co-hcp\n_cell_length_a 2.60\n_cell_length_b 2.60\n_cell_length_c 4.10\n"
        "_cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 120\n"
        "_symmetry_space_group_name_H-M 'P 63/m m c'\n"
        "loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n"
        "_atom_site_fract_z\nCo1 Co 0.33333 0.66667 0.25\n"
    )
    names = [p.name for p in phases_from_args(argparse.Namespace(phase=["Co-hcp", str(cif)]))]
    assert len(names) == 2 and names[0] == "Co-hcp" and str(cif) in names[1]

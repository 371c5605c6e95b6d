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


# ---------------------------------------------------------------------- issue 15.12: option spellings
def _subparsers():
    from saed.cli import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices


def test_every_centre_option_takes_both_spellings():
    # Outputs spell it "centre"; users type either. Every command with one spelling has the other, same dest.
    seen = 0
    for name, p in _subparsers().items():
        opts = {o: a for a in p._actions for o in a.option_strings}
        if "--center" in opts or "--centre" in opts:
            seen += 1
            assert opts.get("--center") is opts.get("--centre") is not None, name
            args = p.parse_args(_minimal_argv(name) + ["--centre", "12", "34"])
            assert list(args.center) == [12.0, 34.0], name
    assert seen >= 5  # index, spots, calibrate, rings, batch, simulate at least take a centre


def _minimal_argv(name):
    return {"batch": ["x.npy", "--out", "o.csv"], "simulate": ["Cu", "--zone", "0", "0", "1"]}.get(name, ["x.tif"])


def test_bare_element_phase_means_every_phase_of_it(capsys):
    names = [p.name for p in phases_from_args(argparse.Namespace(phase=["Co"]))]
    assert names == ["Co-fcc", "Co-hcp"]
    err = capsys.readouterr().err
    assert "Co-fcc, Co-hcp" in err and err.count("\n") == 1
    # an exact built-in name is not expanded, and an unknown one is still refused by name
    assert [p.name for p in phases_from_args(argparse.Namespace(phase=["Cu", "co"]))] == ["Cu", "Co-fcc", "Co-hcp"]
    import pytest

    from saed.errors import PhaseError

    with pytest.raises(PhaseError, match="Qq"):
        phases_from_args(argparse.Namespace(phase=["Qq"]))

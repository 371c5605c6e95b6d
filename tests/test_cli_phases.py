"""`saed phases` through saed.cli.main(argv): the table, the JSON contract, filtering and bad input."""

import io
import json
import os

import pytest

from saed.cli import main
from saed.cli import cmd_phases
from saed.crystal import builtin_names, builtin_phase
from saed.report.phases_json import phase_json

# The names the issue requires (also checked in test_phases.py) and the JSON fields of CONTRACT.md.
REQUIRED = ["Al", "Cu", "Ni", "Ag", "Au", "Pt", "Pb", "Fe-fcc", "Co-fcc", "Fe-bcc", "Cr", "Mo", "W", "Nb", "Ta", "V",
            "Mg", "Ti-hcp", "Zr-hcp", "Zn", "Co-hcp", "Si", "Ge", "C-diamond", "GaAs", "NaCl", "MgO", "TiN", "CsCl",
            "NiAl", "CaF2", "SrTiO3", "ReO3", "Ni3Al", "TiO2-rutile", "Al2O3"]
FIELDS = ["name", "space_group", "a_nm", "b_nm", "c_nm", "alpha_deg", "beta_deg", "gamma_deg"]


def test_json_to_stdout(capsys):
    assert main(["phases", "--json", "-"]) == 0
    out = capsys.readouterr().out
    rows = json.loads(out)
    assert len(rows) == 45
    assert [r["name"] for r in rows] == builtin_names()
    assert set(REQUIRED) <= {r["name"] for r in rows}
    for r in rows:
        assert all(k in r for k in FIELDS), r["name"]
        lat = builtin_phase(r["name"]).lattice
        assert (r["a_nm"], r["b_nm"], r["c_nm"]) == (lat.a_nm, lat.b_nm, lat.c_nm)
        assert (r["alpha_deg"], r["beta_deg"], r["gamma_deg"]) == (lat.alpha_deg, lat.beta_deg, lat.gamma_deg)
        assert r["source"] and r["structure_type"] and r["n_atoms_cell"] >= 1
    co = {r["name"]: r for r in rows}["Co-hcp"]
    assert co["space_group"] == "P63/mmc" and co["space_group_number"] == 194 and co["gamma_deg"] == 120.0


def test_json_to_file(tmp_path, capsys):
    path = tmp_path / "phases.json"
    assert main(["phases", "--json", str(path)]) == 0
    rows = json.loads(path.read_text())
    assert len(rows) == 45
    assert "Co-hcp" in capsys.readouterr().out  # the table is printed as well


def test_table(capsys):
    assert main(["phases"]) == 0
    out = capsys.readouterr().out
    lines = [l for l in out.splitlines() if l.strip()]
    assert lines[0].split()[:2] == ["name", "structure"]
    end = next(i for i, l in enumerate(lines) if l.startswith("45 phases"))
    body = {l.split()[0]: l for l in lines[1:end]}
    assert set(body) == set(builtin_names())
    # Si shows the CODATA digits, not 0.54310; hcp shows c; cubic leaves c empty
    assert "0.5431021" in body["Si"]
    assert "0.25071" in body["Co-hcp"] and "0.40695" in body["Co-hcp"] and "P63/mmc (194)" in body["Co-hcp"]
    assert "Fm-3m (225)" in body["Co-fcc"]
    # columns line up: every row's space group starts in the same column as the header's; TiAl's 4-atom cell
    # is C-centred, so its group is named as written in that cell (P4/mmm = C4/mmm, International Tables A)
    col = lines[0].index("space group")
    for name, line in body.items():
        shown = "C4/mmm (123 = P4/mmm)" if name == "TiAl" else builtin_phase(name).space_group_short
        assert line[col:].startswith(shown), name
    assert any(l.startswith("TiAl: 4-atom C-centred tetragonal cell") for l in lines[end:])


def test_structure_types_show_no_raw_underscore(capsys):
    # Strukturbericht symbols carry subscripts (L1₂, L1₀); a raw "L1_2" is a typesetting leftover
    assert main(["phases"]) == 0
    out = capsys.readouterr().out
    assert "_" not in "".join(l.split("  ")[1] for l in out.splitlines()[1:] if l.strip() and "  " in l)
    assert "L1\u2082 (Cu3Au type)" in out and "L1\u2080 (CuAu type)" in out
    assert main(["phases", "L12", "--json", "-"]) == 0  # the plain-digit spelling still finds it
    assert [r["name"] for r in json.loads(capsys.readouterr().out)] == ["Ni3Al"]


def test_tial_cell_repeats_under_c_centring_only():
    # TiAl (L1_0) in the 4-atom cell: Ti at 0,0,0 and 1/2,1/2,0, Al at 1/2,0,1/2 and 0,1/2,1/2 (the CuAu
    # structure, common practice). (1/2,1/2,0) maps every atom onto a like atom; (1/2,0,1/2) maps Ti onto Al.
    from saed.crystal.phase import cell_centring

    assert cell_centring(builtin_phase("TiAl")) == "C"
    assert cell_centring(builtin_phase("NiAl")) == "P" and cell_centring(builtin_phase("Ni3Al")) == "P"
    assert cell_centring(builtin_phase("Cu")) == "F"


def test_phases_json_names_the_group_in_the_cell_and_keeps_the_standard_one(capsys):
    assert main(["phases", "TiAl", "--json", "-"]) == 0
    (row,) = json.loads(capsys.readouterr().out)
    assert (row["space_group"], row["space_group_in_cell"], row["space_group_number"]) == ("P4/mmm", "C4/mmm", 123)
    assert row["n_atoms_cell"] == 4


def test_sources_cite_nothing_that_cannot_be_checked_here():
    # Powder-card numbers recalled from memory cannot be confirmed here: sources name a paper, CODATA, or the
    # library cross-check that tests/test_phases.py makes; unchecked values say so.
    from tests.test_phases import XRAYLIB, _ase_pairs

    ase_names = {n for n, _ in _ase_pairs()}
    for name in builtin_names():
        src = builtin_phase(name).source
        assert "ICDD" not in src and "card number" not in src, name
        assert ("xraylib" in src) == (name in XRAYLIB), name
        assert ("ASE reference_states" in src) == (name in ase_names), name
        assert "checked here" in src or "nothing here" in src or "CODATA" in src or "(19" in src, name


@pytest.mark.parametrize("query,names", [
    (["Co"], ["Co-fcc", "Co-hcp"]),
    (["hcp"], ["Mg", "Ti-hcp", "Zr-hcp", "Zn", "Co-hcp", "Be", "Cd"]),
    (["rock", "salt"], ["NaCl", "MgO", "TiN", "NiO"]),
    (["Fm-3m", "Co"], ["Co-fcc"]),
    (["194"], ["Mg", "Ti-hcp", "Zr-hcp", "Zn", "Co-hcp", "Be", "Cd"]),
    (["Ti"], ["Ti-hcp", "TiN", "SrTiO3", "TiO2-rutile", "TiAl"]),
])
def test_filter(query, names, capsys):
    assert main(["phases", *query, "--json", "-"]) == 0
    assert [r["name"] for r in json.loads(capsys.readouterr().out)] == names


def test_filter_without_match_is_exit_2_with_a_suggestion(capsys):
    assert main(["phases", "cobalt"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Co-fcc" in err and "Traceback" not in err


def test_bad_option_is_exit_2(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["phases", "--jsn", "-"])
    assert stop.value.code == 2
    assert capsys.readouterr().err.count("\n") == 1


class _Terminal(io.StringIO):
    def isatty(self):
        return True


@pytest.mark.parametrize("columns", [80, 100, 132])
def test_terminal_table_fits_the_window(columns, monkeypatch):
    # On a terminal no line may run past the window (as long as the fixed columns fit at all).
    monkeypatch.setattr(cmd_phases.shutil, "get_terminal_size", lambda fallback=None: os.terminal_size((columns, 40)))
    rows = [phase_json(builtin_phase(n)) for n in builtin_names()]
    out = _Terminal()
    cmd_phases._print_table(rows, out)
    lines = out.getvalue().splitlines()
    assert max(len(l) for l in lines) <= columns
    assert {l.split()[0] for l in lines[1:] if l and not l.startswith(" ")} >= set(builtin_names())
    # a short list wraps the source instead of cutting it
    out = _Terminal()
    cmd_phases._print_table(rows[-2:], out)  # Al2O3 and TiAl
    assert "…" not in out.getvalue()
    assert "Lewis" in out.getvalue() and "memory" in out.getvalue()

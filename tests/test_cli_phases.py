"""`saed phases` through saed.cli.main(argv): the table, the JSON contract, filtering and bad input."""

import io
import json
import os

import pytest

from saed.cli import main
from saed.cli import cmd_phases
from saed.crystal import builtin_names, builtin_phase

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
    body = {l.split()[0]: l for l in lines[1:-1]}
    assert set(body) == set(builtin_names())
    # Si shows the CODATA digits, not 0.54310; hcp shows c; cubic leaves c empty
    assert "0.5431021" in body["Si"]
    assert "0.25071" in body["Co-hcp"] and "0.40695" in body["Co-hcp"] and "P63/mmc (194)" in body["Co-hcp"]
    assert "Fm-3m (225)" in body["Co-fcc"]
    assert lines[-1].startswith("45 phases")
    # columns line up: every row's space group starts in the same column as the header's
    col = lines[0].index("space group")
    for name, line in body.items():
        assert line[col:].startswith(builtin_phase(name).space_group_short), name


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
    rows = [cmd_phases._row(builtin_phase(n)) for n in builtin_names()]
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

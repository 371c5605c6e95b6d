"""``saed phases``: list the built-in phase library."""

from __future__ import annotations

from saed.cli.common import write_json
from saed.crystal.phase import builtin_names, builtin_phase

NAME = "phases"
HELP = "list the built-in phases (name, structure type, space group, lattice parameters, source)"
ORDER = 90


def add_arguments(p):
    p.add_argument("--json", metavar="PATH", help="write the list as JSON ('-' for stdout)")


def _row(ph):
    lat = ph.lattice
    return {
        "name": ph.name,
        "structure_type": ph.structure_type,
        "space_group": ph.space_group_short,
        "space_group_number": ph.space_group_number,
        "a_nm": lat.a_nm, "b_nm": lat.b_nm, "c_nm": lat.c_nm,
        "alpha_deg": lat.alpha_deg, "beta_deg": lat.beta_deg, "gamma_deg": lat.gamma_deg,
        "crystal_system": lat.crystal_system,
        "n_atoms_cell": None,
        "source": ph.source,
        "note": ph.note,
    }


def run(args) -> int:
    from saed.crystal.phase import cell_atoms

    rows = []
    for name in builtin_names():
        ph = builtin_phase(name)
        r = _row(ph)
        r["n_atoms_cell"] = len(cell_atoms(ph).elements)
        rows.append(r)
    if args.json:
        write_json(args.json, rows)
        if args.json == "-":
            return 0
    print(f"{'name':<12} {'structure':<26} {'space group':<12} {'a nm':>9} {'c nm':>9}  source")
    for r in rows:
        c = f"{r['c_nm']:.5f}" if abs(r["c_nm"] - r["a_nm"]) > 1e-9 else ""
        print(f"{r['name']:<12} {r['structure_type']:<26} {r['space_group'] + ' (' + str(r['space_group_number']) + ')':<12} "
              f"{r['a_nm']:>9.5f} {c:>9}  {r['source']}")
    print(f"{len(rows)} phases. A CIF file path works wherever a phase name does.")
    return 0

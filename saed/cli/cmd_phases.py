"""``saed phases``: list the built-in phase library."""

from __future__ import annotations

import shutil
import sys
import textwrap

from saed.cli.common import write_json
from saed.crystal.phase import builtin_names, builtin_phase, suggest_builtin
from saed.cli.display import add_units_argument, units_from_args
from saed.errors import InputError
from saed.report.phases_json import phase_json

NAME = "phases"
HELP = "list the built-in phases (name, structure type, space group, lattice parameters, source)"
DESCRIPTION = ("List the built-in phases: name, structure type, space group, lattice parameters (nm, room "
               "temperature) and where the numbers come from. Any name here, or a CIF path, works with --phase.")
ORDER = 90
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = ((), ("json",))


def add_arguments(p):
    p.add_argument("match", nargs="*", metavar="TEXT",
                   help="show only phases whose name, structure type or space group contains TEXT "
                        "(e.g. 'Co', 'hcp', 'rock salt', '225')")
    p.add_argument("--json", metavar="PATH", help="write the list as JSON ('-' for stdout)")
    add_units_argument(p)


def _words(row) -> set[str]:
    """What a phase can be looked up by: name parts, structure-type words, space group, system, elements."""
    text = " ".join([row["name"], row["structure_type"], row["space_group"],
                     str(row["space_group_number"]), row["crystal_system"], " ".join(row["elements"])])
    text += " " + text.replace("-", " ")  # 'Co-fcc' answers to 'Co', 'fcc' and 'Co-fcc'
    text += " " + _ascii(text)  # 'L1₂' answers to 'L12'
    return {w.strip("(),").lower() for w in text.split() if w.strip("(),")}


def _matches(row, query) -> bool:
    """Every query word names the phase: equal to one of its words ('Co' is the element, not 'corundum'),
    or, from three letters on, the start of one ('cub', 'rut')."""
    words = _words(row)
    return all(any(q == w or (len(q) >= 3 and w.startswith(q)) for w in words)
               for q in (t.lower() for t in " ".join(query).split()))


_SUBSCRIPTS = str.maketrans("₀₁₂₃₄₅₆₇₈₉", "0123456789")


def _ascii(text: str) -> str:
    """Subscript digits as plain digits (Strukturbericht 'L1₂' -> 'L12') for terminals that cannot show them."""
    return text.translate(_SUBSCRIPTS)


def _nm(x: float, per_nm: float = 1.0) -> str:
    """A length with the digits the source gives: in nm at least 5 decimals, at most 7 (Si: 0.5431021);
    in Å (per_nm 10) one decimal fewer, the same significant figures."""
    shift = 1 if per_nm == 10.0 else 0
    text = f"{x * per_nm:.{7 - shift}f}".rstrip("0")
    decimals = len(text.split(".")[1])
    return text + "0" * max(0, 5 - shift - decimals)


def _cell_text(r, per_nm: float = 1.0) -> tuple[str, str]:
    """(a, other parameters) for the table; cubic shows a only, uniaxial shows c, others everything."""
    a = _nm(r["a_nm"], per_nm)
    system = r["crystal_system"]
    if system == "cubic":
        return a, ""
    if system in ("hexagonal", "tetragonal"):
        return a, _nm(r["c_nm"], per_nm)
    extra = f"b {_nm(r['b_nm'], per_nm)} c {_nm(r['c_nm'], per_nm)}"
    angles = [(k, r[k + "_deg"]) for k in ("alpha", "beta", "gamma") if abs(r[k + "_deg"] - 90.0) > 1e-9]
    return a, extra + "".join(f" {k} {v:g}" for k, v in angles)


def run(args) -> int:
    rows = [phase_json(builtin_phase(name)) for name in builtin_names()]
    if args.match:
        rows = [r for r in rows if _matches(r, args.match)]
        if not rows:
            text = " ".join(args.match)
            close = suggest_builtin(text)
            hint = f"; did you mean {' or '.join(close)}?" if close else ""
            raise InputError(f"no built-in phase matches {text!r}{hint} ('saed phases' lists all)")
    if args.json:
        write_json(args.json, rows)
        if args.json == "-":
            return 0
    _print_table(rows, sys.stdout, units_from_args(args))
    return 0


def _sg_text(r) -> str:
    """'Fm-3m (225)'; a cell with extra centring names the group as written in that cell: 'C4/mmm (123 = P4/mmm)'."""
    if r["space_group_in_cell"] != r["space_group"]:
        return f"{r['space_group_in_cell']} ({r['space_group_number']} = {r['space_group']})"
    return f"{r['space_group']} ({r['space_group_number']})"


def _print_table(rows, out, units=None) -> None:
    """The table, one phase per line.

    On a terminal nothing runs past the window edge: the whole list cuts the source to fit (or leaves it
    out below 24 free columns); a short list (a few matches) wraps it instead. Piped output is never cut,
    so grep sees whole lines.
    """
    from saed.crystal.notation import terminal_style

    if terminal_style(out) == "plain":
        rows = [{**r, "structure_type": _ascii(r["structure_type"])} for r in rows]
    from saed.crystal.notation import UNITS

    units = units or UNITS["nm"]
    ulab = units.label(terminal_style(out))
    cells = [_cell_text(r, units.per_nm) for r in rows]
    sg = [_sg_text(r) for r in rows]
    w_name = max(4, *(len(r["name"]) for r in rows))
    w_type = max(9, *(len(r["structure_type"]) for r in rows))
    w_sg = max(11, *(len(s) for s in sg))
    w_a = max(4, *(len(c[0]) for c in cells))
    w_other = max(7, *(len(c[1]) for c in cells))
    head = (f"{'name':<{w_name}}  {'structure':<{w_type}}  {'space group':<{w_sg}}  {'a ' + ulab:<{w_a}}  "
            f"{'c ' + ulab:<{w_other}}")
    width = shutil.get_terminal_size((200, 24)).columns if out.isatty() else 0
    room = width - len(head) - 3 if width else 10**6
    wrap = len(rows) <= 5
    cut = False
    out.write((head + "  source" if room >= 24 else head.rstrip()) + "\n")
    previous = None
    for r, (a, other), s in zip(rows, cells, sg):
        if previous is not None and r["structure_type"] != previous:
            out.write("\n")  # a blank line between structure types
        previous = r["structure_type"]
        line = f"{r['name']:<{w_name}}  {r['structure_type']:<{w_type}}  {s:<{w_sg}}  {a:<{w_a}}  {other:<{w_other}}"
        source = r["source"]
        if room >= 24:
            if len(source) <= room:
                out.write(f"{line}  {source}\n")
            elif wrap:
                first, *more = textwrap.wrap(source, room)
                out.write(f"{line}  {first}\n" + "".join(" " * (len(head) + 2) + m + "\n" for m in more))
            else:
                out.write(f"{line}  {source[: room - 1].rstrip()}…\n")
                cut = True
        else:
            out.write(line.rstrip() + "\n")
            if wrap:
                out.write("".join("    " + m + "\n" for m in textwrap.wrap("source: " + source, max(width - 5, 20))))
            else:
                cut = True
    n = len(rows)
    notes = [f"{n} phase{'s' if n != 1 else ''} (room temperature, {ulab}). Use a name or a CIF path with --phase."]
    for r in rows:
        if r["space_group_in_cell"] != r["space_group"]:
            notes.append(f"{r['name']}: {r['note']}.")
    if cut:
        how = "shortened" if room >= 24 else "left out"
        notes.append(f"Sources {how} to fit: 'saed phases NAME' shows one whole, --json - all.")
    fill = (lambda t: textwrap.fill(t, width, break_on_hyphens=False)) if width else (lambda t: t)
    out.write("\n" + "".join(fill(t) + "\n" for t in notes))

"""``saed atlas``: reference sheets (one PDF page per phase) for a microscope session."""

from __future__ import annotations

from saed.cli.common import positive_float
from saed.cli.display import add_units_argument, units_from_args
from saed.cli.progress import Progress

NAME = "atlas"
HELP = "reference sheets: standard zone patterns and the zone map of each phase, one PDF page per phase"
DESCRIPTION = (
    "One page per phase: its standard zone-axis patterns side by side at one common scale, each with its two "
    "shortest reflections, their d-spacings, ratio and angle, and the zone map with the tilt angles between "
    "neighbouring zones. Print it before the session."
)
ORDER = 32
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("phases",), ("out",))


def add_arguments(p):
    p.add_argument("phases", nargs="+", metavar="PHASE", help="built-in phase names (see 'saed phases') or CIF paths")
    p.add_argument("--out", required=True, metavar="FILE.pdf", help="the PDF to write")
    p.add_argument("--max-index", type=int, default=2, metavar="N",
                   help="zone axes up to this index (4-index for hexagonal phases; default 2)")
    p.add_argument("--voltage", type=positive_float, default=200.0, metavar="KV", help="accelerating voltage, kV (default 200)")
    p.add_argument("--thickness", type=positive_float, default=50.0, metavar="NM",
                   help="foil thickness for the intensities, nm (default 50)")
    add_units_argument(p)


def run(args) -> int:
    from saed.crystal.phase import load_phase
    from saed.errors import InputError
    from saed.files import check_writable
    from saed.report.render_atlas import write_atlas
    from saed.simulate.families import MAX_INDEX

    if not str(args.out).lower().endswith(".pdf"):
        raise InputError(f"--out {args.out}: the atlas is a PDF, give a name ending in .pdf")
    check_writable(args.out)
    if not 1 <= args.max_index <= min(MAX_INDEX, 6):
        raise InputError(f"--max-index {args.max_index} must lie between 1 and 6")
    phases, seen = [], set()
    for spec in args.phases:
        ph = load_phase(spec)
        if ph.name not in seen:
            seen.add(ph.name)
            phases.append(ph)
    with Progress(100 * len(phases), "atlas") as bar:
        n = write_atlas(phases, args.out, max_index=args.max_index, voltage_kv=args.voltage,
                        thickness_nm=args.thickness, progress=bar, units=units_from_args(args))
    print(f"{n} page{'s' if n != 1 else ''} written to {args.out}")
    return 0

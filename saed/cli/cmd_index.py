"""``saed index``: rank (phase, zone axis, orientation) solutions for a recorded pattern."""

from __future__ import annotations

import sys

from saed.cli.common import (add_image_arguments, check_frame_and_outputs, add_calibration_options, add_matching_options, add_phase_option,
                             matching_options_from_args, phases_from_args, print_calibration, read_and_calibrate,
                             write_json)
from saed.cli.display import add_units_argument, display_options, units_from_args
from saed.errors import InputError

NAME = "index"
HELP = "index a recorded pattern: phase, zone axis and orientation, with every spot labelled"
DESCRIPTION = (
    "Find the centre and the spots of a recorded single-crystal pattern and rank the (phase, zone axis, "
    "in-plane orientation) solutions among the candidate phases (--phase, repeatable; default: the whole "
    "built-in library). Every spot is indexed; look-alike solutions are named with what separates them and "
    "the tilt that decides; the beam tilt off the zone is estimated from the spot intensities. Without a "
    "calibration the pattern is indexed by spacing ratios and angles and the implied scale is reported "
    "(and the camera length, given --pixel-pitch). Exit status 0 also when nothing fits (the message says "
    "what came closest); 2 on bad input."
)
ORDER = 10
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("image", "mask", "calibration", "phase"), ("json", "overlay", "report/index.html"))


def add_arguments(p):
    add_image_arguments(p)
    add_phase_option(p)
    add_calibration_options(p)
    add_matching_options(p)
    p.add_argument("--max-crystals", type=int, default=2, metavar="N",
                   help="crystals looked for in the pattern, 1 to 3 (default 2): a twin, a second phase or a "
                        "precipitate is indexed from the spots the best crystal leaves unexplained")
    out = p.add_argument_group("output")
    out.add_argument("--json", metavar="PATH", help="write the solutions as JSON ('-' for stdout)")
    out.add_argument("--overlay", metavar="FILE", help="draw spots, labels and the best solution's pattern on the image: "
                     ".png, or .pdf / .svg (vector, for print); an ambiguous answer also shows the runner-up")
    out.add_argument("--dpi", type=int, default=150, metavar="N", help="resolution of a PNG overlay, dots per inch (default 150)")
    out.add_argument("--report", metavar="DIR", help="write a self-contained HTML report (index.html) into DIR")
    add_units_argument(out)


def check_outputs(args) -> None:
    """Fail before any work when an output cannot be written (nothing is lost later)."""
    matching_options_from_args(args)  # range checks before any work
    _max_crystals(args)
    check_frame_and_outputs(args)
    if not 30 <= args.dpi <= 1200:
        raise InputError(f"--dpi {args.dpi}: give 30 to 1200")
    if args.report:
        check_report_folder(args.report)


def check_report_folder(report: str) -> None:
    """--report DIR: a folder (or a new name in one) where index.html can be written; InputError if not."""
    from pathlib import Path

    from saed.files import check_writable

    d = Path(report)
    if d.exists() and not d.is_dir():
        raise InputError(f"--report {report}: exists and is not a folder")
    if not d.exists() and not d.parent.is_dir():
        raise InputError(f"--report {report}: folder {d.parent} does not exist")
    check_writable(d / "index.html" if d.exists() else d)  # tried, not guessed


def _max_crystals(args) -> int:
    n = args.max_crystals
    if not 1 <= n <= 3:
        raise InputError(f"--max-crystals {n}: give 1, 2 or 3 (1 = a single crystal only)")
    return n


def _max_g(args, measured) -> float | None:
    """--max-g when given, else the reach the measured spots need (saed.index.reach)."""
    from saed.index.reach import reach_for_pattern

    return args.max_g if args.max_g is not None else reach_for_pattern(measured)


def run(args) -> int:
    from saed.image.measure import inspect_file
    from saed.index import index_pattern, prepare_phases
    from saed.report.index_json import result_json
    from saed.report.index_summary import format_summary

    check_outputs(args)
    image, resolved = read_and_calibrate(args)
    phases = phases_from_args(args)
    insp = inspect_file(args.image, resolved.calibration, frame=args.frame, mask_path=args.mask, image=image)
    measured = insp.measured
    tables = prepare_phases(phases, voltage_kv=measured.calibration.voltage_kv, max_g_inv_nm=_max_g(args, measured))
    result = index_pattern(measured, tables, top=args.top, max_crystals=_max_crystals(args), image=insp.image,
                           **matching_options_from_args(args))
    out = sys.stderr if args.json == "-" else sys.stdout
    print_calibration(resolved, file=out, units=units_from_args(args))
    print(format_summary(result, image=args.image, frame=args.frame, top=args.top, **display_options(args, out)), file=out)
    if args.json:
        doc = result_json(result, image=args.image, frame=args.frame)
        doc.update(resolved.to_json())
        write_json(args.json, doc)
    if args.overlay:
        from saed.report.index_overlay import write_index_overlay

        write_index_overlay(insp.image, result, args.overlay, title=args.image, ignored=insp.ignored,
                            units=units_from_args(args), dpi=args.dpi)
        print(f"overlay written to {args.overlay}", file=out)
    if args.report:
        from saed.report.index_html import ReportEntry, write_report

        path = write_report(args.report, [ReportEntry(args.image, insp.image, result, ignored=insp.ignored)],
                            title=f"saed index: {args.image}", units=units_from_args(args))
        print(f"report written to {path}", file=out)
    if not result.solutions:
        print(f"saed index: {result.message}", file=sys.stderr)
    return 0

"""``saed ratio``: index two reflections measured by hand (the ratio method) against the candidate phases."""

from __future__ import annotations

import sys

from saed.cli.common import add_phase_option, finite_float, phases_from_args, positive_float, write_json
from saed.cli.display import add_units_argument, display_options
from saed.errors import InputError

NAME = "ratio"
HELP = "index two spots measured by hand: d1 d2 (nm) and their angle -> phase, zone axis, hkl pair"
DESCRIPTION = (
    "The ratio method by hand. Give two d-spacings measured on the screen or a print and the angle between the "
    "two reflections (saed ratio D1 D2 ANGLE, d in nm, angle in degrees), or the two distances from the pattern "
    "centre (saed ratio --radii R1 R2 ANGLE, in mm) with the camera constant lambda*L (--camera-constant, nm mm) "
    "or without it (then only the ratio R2/R1 and the angle are used). Every candidate phase is searched for "
    "reflection pairs that fit; the zone axis is g1 x g2. Two spots fit many solutions: the look-alikes are named, "
    "and the spot g1+g2 that each solution predicts helps decide on the pattern itself."
)
USAGE = "saed ratio D1 D2 ANGLE [options]\n       saed ratio --radii R1 R2 ANGLE [--camera-constant NM_MM] [options]"
ORDER = 25
#: Inputs and outputs (argument names), checked before any work (saed.files.all_or_nothing).
FILES = (("phase",), ("json",))

#: Look-alike lines printed per solution (the JSON has them all).
SHOWN_LOOKALIKES = 3


def add_arguments(p):
    p.usage = USAGE
    p.add_argument("values", nargs="*", type=finite_float, metavar="D1 D2 ANGLE",
                   help="two d-spacings in nm (also with --units angstrom, which sets the output) and the angle between the "
                        "reflections in deg (with --radii: ANGLE only)")
    p.add_argument("--radii", nargs=2, type=finite_float, metavar=("R1", "R2"),
                   help="distances of the two spots from the centre, mm on the print or screen")
    p.add_argument("--camera-constant", type=finite_float, metavar="NM_MM",
                   help="camera constant lambda*L in nm mm, with --radii (d = lambda L / R); without it, ratio only")
    add_phase_option(p)
    p.add_argument("--length-tol", type=positive_float, default=2.0, metavar="PCT",
                   help="tolerance of each d (or of the ratio), percent (default 2)")
    p.add_argument("--angle-tol", type=positive_float, default=2.0, metavar="DEG",
                   help="tolerance of the angle, degrees (default 2)")
    p.add_argument("--max-zone-index", type=int, default=7, metavar="N",
                   help="largest zone-axis index considered, 3-index conventional cell (default 7)")
    p.add_argument("--top", type=int, default=10, metavar="N", help="solutions to show (default 10)")
    p.add_argument("--json", metavar="OUT", help="write the ranked solutions as JSON ('-' for stdout)")
    add_units_argument(p)


def measurement_from_args(args):
    from saed.index.ratio_method import measurement_from_d, measurement_from_radii

    vals = list(args.values or [])
    if args.radii is not None:
        if len(vals) != 1:
            raise InputError(f"with --radii R1 R2 give the ANGLE alone (got {len(vals)} numbers): "
                             "saed ratio --radii 12.3 14.2 54.7")
        return measurement_from_radii(args.radii[0], args.radii[1], vals[0], camera_constant_nm_mm=args.camera_constant)
    if args.camera_constant is not None:
        raise InputError("--camera-constant goes with --radii R1 R2 (d-spacings need no camera constant)")
    if len(vals) != 3:
        raise InputError(f"give D1 D2 ANGLE (three numbers, d in nm, angle in deg), got {len(vals)}: "
                         "saed ratio 0.2047 0.1772 54.7")
    return measurement_from_d(*vals)


def run(args) -> int:
    from saed.index.ratio_method import solve_ratio
    from saed.report.ratio_json import ratio_json

    if args.json and args.json != "-":
        from saed.files import check_writable

        check_writable(args.json)
    if args.top < 1:
        raise InputError(f"--top {args.top}: give at least 1")
    meas = measurement_from_args(args)
    phases = phases_from_args(args)
    sols = solve_ratio(meas, phases, length_tol_pct=args.length_tol, angle_tol_deg=args.angle_tol, top=args.top,
                       max_zone_index=args.max_zone_index)
    doc = ratio_json(meas, phases, sols, camera_constant_nm_mm=args.camera_constant, length_tol_pct=args.length_tol,
                     angle_tol_deg=args.angle_tol)
    if args.json:
        write_json(args.json, doc)
        if args.json == "-":
            if not sols:
                print("saed ratio: no solution within the tolerances", file=sys.stderr)
            return 0
    _print(meas, sols, phases, args)
    if args.json:
        print(f"JSON: {args.json}")
    return 0


def _print(meas, sols, phases, args) -> None:
    """The terminal answer: lengths in --units, indices with overbars where stdout can show them."""
    from saed.crystal.notation import plane_text, signed_text, table_lines, zone_text
    from saed.index.ratio_method import lookalike_text

    opts = display_options(args)
    style, units = opts["style"], opts["units"]
    u = units.label(style)

    def length(x_nm) -> str:
        return units.length_text(x_nm)

    def hkl(s, h) -> str:
        return plane_text(h, s.phase.is_hexagonal, style)

    if meas.calibrated:
        src = ""
        if meas.radii_mm:
            k = units.length(args.camera_constant)
            src = (f"R1 {meas.radii_mm[0]:g} mm, R2 {meas.radii_mm[1]:g} mm with lambda L {k:g} {u} mm: ")
        print(f"measured: {src}d1 {length(meas.d1_nm)} {u}, d2 {length(meas.d2_nm)} {u}, "
              f"angle {meas.angle_deg:.1f} deg (ratio d1/d2 = {meas.ratio:.3f})")
    else:
        print(f"measured: R1 {meas.radii_mm[0]:g}, R2 {meas.radii_mm[1]:g} mm (ratio R2/R1 = {meas.ratio:.3f}), "
              f"angle {meas.angle_deg:.1f} deg; no camera constant, so the ratio and angle alone decide")
    print(f"searched {len(phases)} phase{'s' if len(phases) != 1 else ''}; tolerances {args.length_tol:g} % "
          f"and {args.angle_tol:g} deg")
    if not sols:
        print("no solution within the tolerances: check the measurement (d in nm, the angle between the two "
              "reflections, not to the x axis) and the candidate phases, or widen --length-tol / --angle-tol")
        return
    rows = []
    for s in sols:
        z = zone_text(s.zone_axis, s.phase.is_hexagonal, style)
        hs = hkl(s, s.hkl_sum) + ("" if s.sum_allowed else "*")
        if meas.calibrated:
            vals = [length(s.d1_nm_calc), signed_text(s.d1_diff_pct, 1),
                    length(s.d2_nm_calc), signed_text(s.d2_diff_pct, 1)]
            sum_at = length(s.d_sum_nm)
        else:
            vals = [f"{s.ratio_calc:.3f}", signed_text(s.ratio_diff_pct, 1)]
            sum_at = f"{s.d1_nm_calc / s.d_sum_nm:.3f}"
        rows.append([str(s.rank), s.phase.name, z, hkl(s, s.hkl1), hkl(s, s.hkl2), *vals, f"{s.angle_deg_calc:.1f}",
                     signed_text(s.angle_diff_deg, 1), hs, sum_at, f"{s.misfit:.2f}"])
    if meas.calibrated:
        head = ["rank", "phase", "zone", "g1", "g2", f"d1 {u}", "diff %", f"d2 {u}", "diff %", "angle", "diff",
                "g1+g2", f"d {u}", "misfit"]
    else:
        head = ["rank", "phase", "zone", "g1", "g2", "R2/R1", "diff %", "angle", "diff", "g1+g2", "R/R1", "misfit"]
    left = {1, 2, 3, 4}
    for line in table_lines([(h, "<" if k in left else ">") for k, h in enumerate(head)], rows):
        print(line)
    print("angles in degrees; diff = calculated - measured; misfit = RMS of the differences in units of the "
          "tolerances (0 exact, 1 at the tolerance); g1+g2 = the third spot the solution predicts"
          + (" (* kinematically forbidden: it may still appear by double diffraction)"
             if any(not s.sum_allowed for s in sols) else ""))
    for s in sols:
        if s.same_geometry:
            names = ", ".join(s.same_geometry[:8]) + (" ..." if len(s.same_geometry) > 8 else "")
            print(f"rank {s.rank}: {names} give the same ratio and angle (same lattice geometry); only the absolute "
                  "scale (a camera constant) tells them apart")
        if s.other_pairs:
            pairs = ", ".join(f"{hkl(s, a)}/{hkl(s, b)}" for a, b in s.other_pairs[:4])
            print(f"rank {s.rank}: other spot pairs of the same pattern fit as well: {pairs}"
                  + (" ..." if len(s.other_pairs) > 4 else ""))
    best = sols[0]
    looks = [lookalike_text(best, sols[r - 1], meas.calibrated, style=style, units=units) for r in best.lookalike_ranks]
    for text in looks[:SHOWN_LOOKALIKES]:
        print(f"rank 1 {text}")
    if len(looks) > SHOWN_LOOKALIKES:
        print(f"rank 1 is ambiguous with {len(looks) - SHOWN_LOOKALIKES} more solutions (see --json)")
    print("two spots are weak evidence: confirm on a third spot of the same pattern (g1+g2), with 'saed index' on the "
          "recorded pattern, or on a second zone axis")

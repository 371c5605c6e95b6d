"""``saed tilt``: double-tilt holder readings to reach a zone axis, and the zones within the holder's range."""

from __future__ import annotations

import math
import sys

from saed.cli.common import finite_float, write_json
from saed.errors import InputError

NAME = "tilt"
HELP = "holder tilts (alpha, beta) that bring a zone axis onto the beam, and the zones within reach"
DESCRIPTION = (
    "From the present orientation (a zone axis and in-plane rotation, an orientation matrix, or a result of "
    "'saed index') and a double-tilt holder whose alpha axis runs at a given angle on the detector, work out the "
    "alpha and beta readings that put a target zone axis on the beam, and list every zone axis within the "
    "holder's range, nearest first. Positive alpha and beta turn the specimen right-handedly about their axes "
    "(alpha axis drawn from the pattern centre at --alpha-axis degrees from +x toward +y, beta axis 90 degrees "
    "further on); check the signs once on your holder and use --flip-alpha / --flip-beta if they differ."
)
ORDER = 40
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("phase", "from_index"), ("json",))


def add_arguments(p):
    p.add_argument("phase", nargs="?", metavar="PHASE",
                   help="built-in phase name or CIF path (taken from --from-index when omitted)")
    o = p.add_argument_group("present orientation (one of)")
    o.add_argument("--zone", nargs="+", metavar="U", help="zone axis on the beam now (3 or 4 indices)")
    o.add_argument("--rotation", type=finite_float, default=0.0, metavar="DEG",
                   help="in-plane rotation of that pattern, as 'saed index' reports it (default 0)")
    o.add_argument("--orientation-matrix", nargs=9, type=finite_float, metavar="M",
                   help="orientation matrix U, 9 numbers row by row (crystal Cartesian -> detector)")
    o.add_argument("--from-index", metavar="RESULT.json", help="take phase and orientation from a 'saed index' JSON")
    o.add_argument("--solution", type=int, default=1, metavar="RANK", help="which solution of --from-index (default 1)")
    h = p.add_argument_group("holder")
    h.add_argument("--recorded-at", nargs=2, type=finite_float, default=(0.0, 0.0), metavar=("ALPHA", "BETA"),
                   help="holder readings when the pattern was recorded, deg (default 0 0)")
    h.add_argument("--alpha-axis", type=finite_float, default=0.0, metavar="DEG",
                   help="direction of the alpha tilt axis on the detector, deg from +x toward +y (default 0)")
    h.add_argument("--alpha-range", nargs="+", type=finite_float, default=[30.0], metavar="DEG",
                   help="alpha limits: one number for +/-, or MIN MAX (default 30)")
    h.add_argument("--beta-range", nargs="+", type=finite_float, default=[25.0], metavar="DEG",
                   help="beta limits: one number for +/-, or MIN MAX (default 25)")
    h.add_argument("--flip-alpha", action="store_true", help="positive alpha turns the specimen left-handedly")
    h.add_argument("--flip-beta", action="store_true", help="positive beta turns the specimen left-handedly")
    p.add_argument("--target", nargs="+", metavar="U", help="zone axis to reach (3 or 4 indices)")
    p.add_argument("--max-index", type=int, default=3, metavar="N",
                   help="list reachable zones up to this index (4-index for hexagonal phases; default 3)")
    p.add_argument("--rows", type=int, default=30, metavar="N", help="rows of the reachable-zone table (default 30)")
    p.add_argument("--json", metavar="PATH", help="write the plan as JSON ('-' for stdout)")


def _from_index(path: str, rank: int):
    from saed.files import read_json_file

    doc = read_json_file(path, what="a 'saed index' JSON")
    sols = doc.get("solutions") if isinstance(doc, dict) else None
    if not sols or not isinstance(sols, list):
        raise InputError(f"{path}: no solutions in the file (nothing to tilt from)")
    if not 1 <= rank <= len(sols):
        raise InputError(f"--solution {rank}: the file has solutions 1 to {len(sols)}")
    s = sols[rank - 1]
    if not isinstance(s, dict) or "orientation_matrix" not in s or "phase" not in s:
        raise InputError(f"{path}: solution {rank} has no phase or orientation_matrix")
    m = s["orientation_matrix"]
    if not (isinstance(s["phase"], str) and isinstance(m, list) and len(m) == 3
            and all(isinstance(r, list) and len(r) == 3 for r in m)
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for r in m for v in r)):
        raise InputError(f"{path}: solution {rank}: phase must be a name and orientation_matrix 3 rows of 3 finite numbers")
    return s["phase"], s["orientation_matrix"]


def _setup(args):
    from saed.cli.cmd_simulate import parse_indices
    from saed.crystal.phase import load_phase
    from saed.simulate.geometry import orientation_matrix
    from saed.simulate.tilt import Holder, check_orientation_matrix
    from saed.simulate.zone import zone_axis_3

    given = [x is not None for x in (args.zone, args.orientation_matrix, args.from_index)]
    if sum(given) != 1:
        raise InputError("give the present orientation once: --zone U V W [--rotation DEG], "
                         "--orientation-matrix (9 numbers) or --from-index RESULT.json")
    phase_spec = args.phase
    if args.from_index:
        name, m = _from_index(args.from_index, args.solution)
        if phase_spec is None:
            phase_spec = name
        u = check_orientation_matrix(m)
    if phase_spec is None:
        raise InputError("name the phase (e.g. saed tilt Co-fcc --zone 0 1 1)")
    phase = load_phase(phase_spec)
    if args.zone is not None:
        u = orientation_matrix(phase.lattice, zone_axis_3(phase, parse_indices(args.zone, "--zone")), args.rotation)
    elif args.orientation_matrix is not None:
        u = check_orientation_matrix(args.orientation_matrix)
    holder = Holder(alpha_axis_deg=args.alpha_axis, alpha_range_deg=tuple(args.alpha_range),
                    beta_range_deg=tuple(args.beta_range), alpha_sign=-1 if args.flip_alpha else 1,
                    beta_sign=-1 if args.flip_beta else 1)
    if not holder.reachable(*args.recorded_at, tol_deg=1e-6):
        raise InputError(f"--recorded-at {args.recorded_at[0]:g} {args.recorded_at[1]:g} lies outside the holder "
                         f"range ({holder.range_text()})")
    return phase, u, holder


def run(args) -> int:
    from saed.cli.cmd_simulate import parse_indices
    from saed.report.tilt_json import tilt_json
    from saed.simulate.tilt import plan_tilt, reachable_zones
    from saed.simulate.zone import zone_axis_3

    if args.json and args.json != "-":
        from saed.files import check_writable

        check_writable(args.json)
    if args.rows < 1:
        raise InputError("--rows must be at least 1")
    phase, u, holder = _setup(args)
    rec = tuple(args.recorded_at)
    reach = reachable_zones(phase, u, holder, max_index=args.max_index, recorded_at_deg=rec)
    plan = None
    if args.target is not None:
        uvw = zone_axis_3(phase, parse_indices(args.target, "--target"))
        plan = plan_tilt(phase, u, uvw, holder, reach, recorded_at_deg=rec)
    doc = tilt_json(phase, u, holder, rec, reach, plan)
    problem = None if plan is None or plan.target.reachable else _out_of_range_text(phase, holder, plan, uvw)
    if args.json:
        write_json(args.json, doc)
    if args.json != "-":
        _print(phase, holder, rec, doc, reach, args.rows)
        if problem:  # an answer, not bad input: say it plainly and exit 0
            print(f"Not reachable: {problem}")
    elif problem:  # JSON on stdout: the note goes to stderr so the JSON stays parseable
        print(f"saed tilt: not reachable: {problem}", file=sys.stderr)
    return 0


def _out_of_range_text(phase, holder, plan, uvw) -> str:
    """One line: what the target needs, how close the holder gets, and the zone within reach instead."""
    from saed.simulate.families import interzone_angle_deg, zone_label

    t, c, s = plan.target, plan.closest, plan.nearest_reachable
    if s is None:
        hint = "no zone up to the index bound is within reach"
    elif plan.same_family:
        hint = (f"nearest reachable of the same family: {zone_label(phase, s.zone_axis)} at alpha "
                f"{s.alpha_deg:+.1f}, beta {s.beta_deg:+.1f}")
    else:
        hint = (f"nearest reachable zone: {zone_label(phase, s.zone_axis)} "
                f"({interzone_angle_deg(phase.lattice, s.zone_axis, uvw):.1f} deg from it) at alpha "
                f"{s.alpha_deg:+.1f}, beta {s.beta_deg:+.1f}")
    return (f"target {zone_label(phase, t.zone_axis)} needs alpha {t.alpha_deg:+.1f}, beta {t.beta_deg:+.1f} "
            f"deg, outside the holder range ({holder.range_text()}); the holder gets within {c.angle_left_deg:.1f} "
            f"deg at alpha {c.alpha_deg:+.1f}, beta {c.beta_deg:+.1f}; {hint}")


def _print(phase, holder, rec, doc, reach, rows) -> None:
    from saed.cli.display import say
    from saed.simulate.families import zone_label

    print(f"{phase.name}: holder alpha axis at {holder.alpha_axis_deg:g} deg on the detector, {holder.range_text()}; "
          f"pattern recorded at alpha {rec[0]:+g}, beta {rec[1]:+g}")
    t = doc["target"]
    if t is not None:
        z = zone_label(phase, t["zone_axis"])
        state = "within range" if t["reachable"] else "OUT OF RANGE"
        say(f"target {z}: alpha {t['alpha_deg']:+.2f} deg, beta {t['beta_deg']:+.2f} deg  ({state}; "
              f"{t['angle_from_beam_deg']:.1f} deg from the present beam; the pattern then lies at in-plane rotation "
              f"{t['in_plane_rotation_deg']:.1f} deg)")
    print(f"{len(reach)} zone axes within reach, nearest first:")
    zw = max([12] + [len(zone_label(phase, s.zone_axis)) for s in reach[:rows]])  # long zones stay aligned
    fw = max([12] + [len(js["family"]) for js in doc["reachable_zones"][:rows]])
    print(f"{'zone':>{zw}} {'family':>{fw}} {'from beam deg':>13} {'alpha deg':>9} {'beta deg':>9}")
    for s, js in zip(reach[:rows], doc["reachable_zones"]):
        fam = js["family"]
        say(f"{zone_label(phase, s.zone_axis):>{zw}} {fam:>{fw}} {s.angle_from_beam_deg:13.1f} "
              f"{round(s.alpha_deg, 2) + 0.0:+9.2f} {round(s.beta_deg, 2) + 0.0:+9.2f}")
    if len(reach) > rows:
        print(f"... {len(reach) - rows} more (--rows N, or --json)")

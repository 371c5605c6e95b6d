"""``saed rings``: ring radii, d-spacings and phase identification of a polycrystalline ring pattern."""

from __future__ import annotations

from saed.cli.common import add_image_arguments, add_calibration_options, add_phase_option, phases_from_args, \
    positive_float, print_calibration, read_and_calibrate, write_json
from saed.cli.display import add_units_argument, units_from_args
from saed.errors import InputError
from saed.units import fraction, percent, percent_off

NAME = "rings"
HELP = "ring pattern: centre, ellipse, ring radii and d-spacings, phase identification (mixtures of two included)"
DESCRIPTION = (
    "Azimuthal integration of a polycrystalline ring pattern about its refined centre with the elliptical distortion "
    "undone; ring radii to a fraction of a pixel over a SNIP background; d-spacings once calibrated; candidate "
    "phases (and mixtures of two) ranked by ring positions and relative intensities (multiplicity x |F|^2 x d^2). "
    "Without a calibration, phases are matched by radius ratios alone."
)
ORDER = 35
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("image", "mask", "calibration", "phase"), ("json", "plot"))

#: Default width of the scale prior, %: a calibration from a standard, or a scale from options.
DEFAULT_SCALE_TOLERANCE_PCT = {"file": 0.5, "options": 2.0}


def add_arguments(p):
    add_image_arguments(p, what="ring pattern")
    add_phase_option(p)
    add_calibration_options(p, center=True)
    p.add_argument("--scale-tolerance", type=positive_float, metavar="PCT",
                   help="how far the true scale may lie from the calibration, %% (default 0.5 with a calibration "
                        "file, 2 with --scale or --camera-length: a nominal camera length is rarely better)")
    p.add_argument("--tolerance", type=positive_float, default=1.0, metavar="PCT",
                   help="largest misfit of a ring to a phase's line, %% (default 1)")
    p.add_argument("--top", type=int, default=5, metavar="N", help="solutions listed (default 5)")
    p.add_argument("--no-mixtures", action="store_true", help="do not try mixtures of two phases")
    p.add_argument("--spotty", action="store_true", help="accept spotty rings (coarse-grained film)")
    p.add_argument("--json", metavar="PATH", help="write the result as JSON ('-' for stdout)")
    add_units_argument(p)
    p.add_argument("--plot", metavar="PNG", help="radial profile with each candidate's lines indexed, and the fitted rings")


def _check_args(args):
    from saed.files import check_writable

    for path in (args.json if args.json not in (None, "-") else None, args.plot):
        if path:
            check_writable(path)
    if args.plot and not args.plot.lower().endswith(".png"):
        raise InputError(f"--plot {args.plot}: must end in .png")
    if args.top < 1:
        raise InputError(f"--top {args.top}: must be at least 1")
    if args.frame is not None and args.frame < 0:
        raise InputError(f"--frame {args.frame}: frames are numbered from 0")


def run(args) -> int:
    _check_args(args)
    from saed.cli.progress import Progress
    from saed.image.io import read_mask_image
    from saed.rings.identify import identify_phases
    from saed.rings.match import ObservedRings
    from saed.rings.measure import measure_rings
    from saed.report.rings_json import rings_json

    image, resolved = read_and_calibrate(args)
    cal = resolved.calibration
    phases = phases_from_args(args)
    mask = read_mask_image(args.mask, shape=image.shape) if args.mask else None
    center = cal.center_px
    measured = measure_rings(image, mask=mask, center_px=center, ellipse=cal.ellipse, allow_spots=args.spotty)
    rings = measured.rings
    if len(rings) == 1:
        r = rings.radius_px[0]
        d = f", d = {1 / (r * cal.scale_inv_nm_per_px):.4f} nm" if cal.is_calibrated else ""
        raise InputError(f"only one ring found (r = {r:.1f} px{d}): phase identification needs at least two rings")
    obs = ObservedRings.from_measurement(measured)
    tolerance_pct = args.scale_tolerance
    if tolerance_pct is None:
        measured_cal = resolved.source in ("calibration file", "sidecar", "calibration history")
        tolerance_pct = DEFAULT_SCALE_TOLERANCE_PCT["file" if measured_cal else "options"]
    with Progress(len(phases), "rings") as bar:
        ident = identify_phases(obs, phases, scale_inv_nm_per_px=cal.scale_inv_nm_per_px,
                                scale_sigma_rel=fraction(tolerance_pct), tol_rel=fraction(args.tolerance), top=args.top,
                                mixtures=not args.no_mixtures, progress=bar)
    s = cal.scale_inv_nm_per_px
    doc = rings_json(args.image, measured, obs, ident, resolved, scale_tolerance_pct=tolerance_pct)
    if args.plot:
        from saed.report.rings_plot import plot_rings

        plot_rings(measured, ident, image, args.plot, scale_inv_nm_per_px=s, title=args.image,
                   units=units_from_args(args))
    if args.json:
        write_json(args.json, doc)
        if args.json == "-":
            return 0
    print_calibration(resolved, units=units_from_args(args))
    _print(doc, ident, units_from_args(args))
    if args.plot:
        print(f"plot: {args.plot}")
    if args.json:
        print(f"JSON: {args.json}")
    return 0


RING_SCORE_MEANING = ("score: how well the phase's ring list explains the measured rings, 0 to 1 (intensity "
                      "agreement x position agreement x scale prior); it ranks solutions, it is not a probability")


def _print_ring_table(sol, units, un) -> None:
    """The best solution ring by ring: measured and calculated d, their difference, phase, and the hkl of
    the lines on that ring (4-index on hexagonal axes); unexplained rings marked."""
    from saed.cli.display import say
    from saed.crystal.notation import label_text, terminal_style

    style = terminal_style()
    rows = []
    for m in sol["rings_matched"]:
        err = percent_off(m["d_nm"], m["d_nm_calc"])
        # each family is indices (label_text: a leading minus is an overbar, not a signed number)
        hkl = label_text("/".join(m["families"]), style)
        rows.append((m["ring"], units.length_text(m["d_nm"], 5), units.length_text(m["d_nm_calc"], 5), f"{err:+.2f}",
                     m["phase"], hkl))
    rows += [(u["ring"], units.length_text(u["d_nm"], 5), "-", "-", "-", "not explained") for u in sol["rings_unexplained"]]
    rows.sort(key=lambda r: r[0])
    w_phase = max([len("phase")] + [len(r[4]) for r in rows])
    dm, dc = f"d meas {un}", f"d calc {un}"
    w_d = max(9, len(dm))
    print(f"    {'ring':>4}  {dm:>{w_d}}  {dc:>{w_d}}  {'diff %':>6}  {'phase':<{w_phase}}  hkl")
    for ring, d_meas, d_calc, err, ph, hkl in rows:
        say(f"    {ring:>4}  {d_meas:>{w_d}}  {d_calc:>{w_d}}  {err:>6}  {ph:<{w_phase}}  {hkl}")


def _print(doc, ident, units=None):
    import sys

    from saed.cli.display import say
    from saed.crystal.notation import UNITS, indices_text, terminal_style

    units = units or UNITS["nm"]
    un, inv = units.label(terminal_style()), units.inverse_label(terminal_style())

    c = doc["center_px"]
    e = doc["ellipse"]
    s = doc["scale_inv_nm_per_px"]
    print(f"centre ({c[0]:.2f}, {c[1]:.2f}) px, ellipse {e['axis_ratio']:.4f} at {e['major_axis_angle_deg']:.1f} deg "
          f"({e['source']}), scale {f'{units.reciprocal(s):.5g} {inv} per px' if s else 'unknown'}")
    print(f"{'ring':>4} {'r px':>9} {'d ' + un:>9} {'g ' + inv:>8} {'I rel':>6} {'cover':>5}")
    for k, r in enumerate(doc["rings"], 1):
        d = units.length_text(r["d_nm"], 5)
        g = units.reciprocal_text(r["g_inv_nm"], 4)
        cov = "-" if r["coverage"] is None else f"{r['coverage']:.2f}"
        print(f"{k:>4} {r['radius_px']:>9.2f} {d:>9} {g:>8} {r['intensity']:>6.3f} {cov:>5}")
    if not doc["solutions"]:
        print("saed rings: no candidate phase explains these rings", file=sys.stderr)
    for sol in doc["solutions"]:
        frac = "" if len(sol["phases"]) == 1 else " (" + ", ".join(
            f"{p} {percent(f):.0f} %" for p, f in zip(sol["phases"], sol["fractions"])) + ")"
        extra = "" if s else f", implied scale {units.reciprocal(sol['scale_inv_nm_per_px']):.5g} {inv} per px"
        unexpl = sol["rings_unexplained"]
        print(f"#{sol['rank']} {sol['phase']}{frac}: score {sol['score']:.3f}, {len(sol['rings_matched'])} of "
              f"{len(doc['rings'])} rings{extra}" + ("" if sol["rank"] == 1 or not unexpl else
                                                      "; not explained: rings " + ", ".join(str(u["ring"]) for u in unexpl)))
        if sol["rank"] == 1:
            _print_ring_table(sol, units, un)
        if sol["lines_missing"]:
            say("    expected but not seen: " + ", ".join(
                f"{m['phase']} {indices_text(m['hkil'] or m['hkl'])} ({units.length_text(m['d_nm'])} {un})" for m in sol["lines_missing"][:6]))
    if len(doc["solutions"]) > 1:
        print("(every ring of every solution: --json)")
    for note in doc["notes"]:
        print(f"note: {note}")
    if doc["solutions"]:
        print(RING_SCORE_MEANING)

"""``saed calibrate``: the detector scale, centre and ellipse from a pattern of a known standard; the history."""

from __future__ import annotations

import math
import sys

from saed.cli.common import add_image_arguments, finite_float, positive_float, write_json
from saed.cli.display import add_units_argument, units_from_args
from saed.crystal.notation import terminal_style
from saed.errors import InputError
from saed.units import fraction, percent_off

NAME = "calibrate"
HELP = "calibrate the detector from a standard (Au/Al ring pattern, or a single crystal with --zone); --list the history"
DESCRIPTION = (
    "Find the detector scale (1/nm per pixel), the pattern centre and the projector's elliptical distortion from a "
    "recorded pattern of a known standard: the ring pattern of a polycrystalline film (Au, Al, or any built-in or "
    "CIF phase), or a single-crystal zone-axis pattern with --zone (e.g. Si --zone 0 1 1). With --pixel-pitch the "
    "camera length and camera constant are given too. Every calibration is also filed in the calibration history "
    "(see --history); 'saed calibrate --list' shows it per camera length."
)
ORDER = 30
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("image", "mask", "standard"), ("json", "out", "plot"))


def add_arguments(p):
    p.add_argument("image", nargs="?", metavar="IMAGE",
                   help="pattern of the standard (TIFF, PNG, JPEG, .npy, DM3/DM4, EMD, SER/EMI, MRC)")
    p.add_argument("--standard", metavar="PHASE", help="the standard: built-in phase name (Au, Al, Si, ...) or CIF path")
    p.add_argument("--zone", nargs="+", metavar="U",
                   help="the pattern is a single crystal on this zone axis [uvw] (default: a ring pattern)")
    p.add_argument("--voltage", type=positive_float, metavar="KV", help="accelerating voltage in kV (default 200)")
    p.add_argument("--pixel-pitch", type=positive_float, metavar="UM",
                   help="detector pixel pitch in um: then the camera length and camera constant are reported")
    p.add_argument("--camera-length", type=positive_float, metavar="MM",
                   help="the microscope's nominal camera-length setting, mm: files the calibration under it and "
                        "reports the measured value beside it")
    p.add_argument("--centre", "--center", dest="center", type=finite_float, nargs=2, metavar=("X", "Y"),
                   help="pattern centre hint, pixels (either spelling)")
    p.add_argument("--alpha-axis", type=finite_float, metavar="DEG",
                   help="direction of the holder's alpha tilt axis on the detector at this camera length (deg from +x "
                        "toward +y), stored with the calibration so tilt advice comes as alpha/beta readings")
    add_image_arguments(p, positional=False)
    p.add_argument("--no-ellipse", action="store_true", help="assume circular rings (do not fit the ellipse)")
    p.add_argument("--spotty", action="store_true", help="accept spotty rings (coarse-grained film)")
    p.add_argument("--tolerance", type=positive_float, default=1.0, metavar="PCT",
                   help="largest misfit of a ring to a line of the standard, %% (default 1)")
    out = p.add_argument_group("output")
    out.add_argument("--json", metavar="PATH", help="write the result as JSON ('-' for stdout)")
    add_units_argument(out)
    out.add_argument("--out", metavar="CAL.json", help="write the calibration file (for --calibration of index, rings, batch)")
    out.add_argument("--plot", metavar="PNG", help="draw the radial profile with the standard's lines and the fitted rings")
    hist = p.add_argument_group("history")
    hist.add_argument("--history", metavar="FOLDER",
                      help="calibration-history folder (default $SAED_CALIBRATION_DIR, else ~/.local/share/saed/calibrations)")
    hist.add_argument("--no-history", action="store_true", help="do not file this calibration in the history")
    hist.add_argument("--list", nargs="?", const="", default=None, metavar="FOLDER",
                      help="list the stored calibrations per camera length (of FOLDER, default the history folder)")


def _check_args(args):
    from saed.files import check_writable

    if args.list is not None:
        if args.image or args.standard:
            raise InputError("--list shows the history: give it without IMAGE and --standard")
        return
    if not args.image:
        raise InputError("give the IMAGE of a standard with --standard PHASE (or --list to see the history)")
    if not args.standard:
        raise InputError("--standard PHASE is needed: the phase of the calibration specimen (e.g. Au, Al, Si)")
    if args.history and args.no_history:
        raise InputError("give either --history FOLDER or --no-history, not both")
    if args.zone is not None and args.no_ellipse:
        raise InputError("--no-ellipse applies to ring patterns; a --zone calibration fits no ellipse")
    for path in (args.json if args.json not in (None, "-") else None, args.out, args.plot):
        if path:
            check_writable(path)
    if not args.no_history:
        from saed.calibrate.history import check_history_folder, history_folder

        check_history_folder(history_folder(args.history))
    if args.plot and not args.plot.lower().endswith(".png"):
        raise InputError(f"--plot {args.plot}: must end in .png")
    if args.frame is not None and args.frame < 0:
        raise InputError(f"--frame {args.frame}: frames are numbered from 0")


def _fmt(v, spec):
    return "-" if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def run_list(args) -> int:
    from saed.calibrate.history import history_folder, list_calibrations

    folder = history_folder(args.list or args.history)
    entries, problems = list_calibrations(folder)
    if args.json:
        from saed.report.calibrate_json import history_list_json

        write_json(args.json, history_list_json(folder, entries, problems))
        if args.json == "-":
            return 0
    if not entries:
        print(f"no calibrations stored in {folder}" + ("" if folder.exists() else " (folder does not exist yet)"))
    else:
        print(f"calibrations in {folder}, newest first per camera length:")
        units = units_from_args(args)
        inv = units.inverse_label(terminal_style())
        print(f"{'L mm':>7}  {'date (this clock)':<22} {'standard':<10} {'scale ' + inv + '/px':>13} {'L meas mm':>9} {'lambda L nm mm':>14} "
              f"{'ellipse':>14} {'resid %':>7}  file")
        last = object()
        for e in entries:
            c = e.calibration
            lab = None if e.label_mm is None else round(e.label_mm)
            head = _fmt(e.label_mm, ".0f") if lab != last else ""
            mark = "*" if lab != last else " "
            last = lab
            ell = f"{c.ellipse.axis_ratio:.4f}@{c.ellipse.major_axis_angle_deg:.0f}" if c.ellipse else "-"
            # One time zone for every row (files may carry different UTC offsets): the order reads true.
            when = e.when.astimezone().strftime("%Y-%m-%d %H:%M%z") if e.when is not None else "-"
            print(f"{head:>7}{mark} {when:<22} {(c.standard or '-'):<10} {units.reciprocal(c.scale_inv_nm_per_px):>13.5g} "
                  f"{_fmt(c.implied_camera_length_mm, '9.2f'):>9} {_fmt(c.camera_constant_nm_mm, '.5f'):>14} "
                  f"{ell:>14} {_fmt(e.residual_pct, '7.3f'):>7}  {e.path.name}"
                  + (f"  (alpha axis {c.alpha_axis_deg:.1f} deg)" if c.alpha_axis_deg is not None else ""))
        print("* = the newest calibration of that camera length; lambda L = camera constant (wavelength x camera "
              "length), nm mm")
    for msg in problems:  # "unreadable: FILE: reason"; such a file is never chosen
        print(msg)
    return 0


def run(args) -> int:
    _check_args(args)
    if args.list is not None:
        return run_list(args)
    from saed.calibrate.history import history_folder, store_calibration
    from saed.crystal.phase import load_phase
    from saed.calibrate.resolve import resolve_calibration
    from saed.report.calibrate_json import calibrate_json, calibration_file_extras
    from saed.image.io import read_mask_image, read_pattern

    standard = load_phase(args.standard)
    image, meta = read_pattern(args.image, frame=args.frame)
    # What the file records fills what was not typed (voltage, binned pixel pitch, nominal camera length);
    # the calibration the other commands would have used is the one the measured scale is compared with.
    try:
        prior = resolve_calibration(args.image, meta, voltage_kv=args.voltage, history_folder=args.history)
    except InputError as exc:  # an image-mode file: the fix differs here (calibrate has no --scale)
        raise InputError(str(exc).replace("if it is a pattern, give --scale or --calibration",
                                          "record the standard's diffraction pattern")) from None
    voltage = prior.calibration.voltage_kv
    if args.pixel_pitch is None and meta.effective_pixel_pitch_um is not None:
        args.pixel_pitch = meta.effective_pixel_pitch_um
    if args.camera_length is None and meta.camera_length_mm is not None:
        args.camera_length = meta.camera_length_mm
    mask = read_mask_image(args.mask, shape=image.shape) if args.mask else None
    zone = None
    if args.zone is not None:
        from saed.calibrate.zone import calibrate_from_zone
        from saed.cli.cmd_simulate import parse_indices

        zone = parse_indices(args.zone, "--zone")
        res = calibrate_from_zone(image, standard, zone, voltage_kv=voltage, pixel_pitch_um=args.pixel_pitch,
                                  mask=mask, center_px=args.center, tol_rel=fraction(args.tolerance))
    else:
        from saed.calibrate.rings import calibrate_from_rings

        res = calibrate_from_rings(image, standard, voltage_kv=voltage, pixel_pitch_um=args.pixel_pitch, mask=mask,
                                   center_px=args.center, fit_ellipse=not args.no_ellipse,
                                   tol_rel=fraction(args.tolerance), allow_spots=args.spotty)
    if args.alpha_axis is not None:
        from dataclasses import replace as _replace

        res = _replace(res, calibration=_replace(res.calibration, alpha_axis_deg=args.alpha_axis))
    cal = res.calibration
    warnings = _warnings(cal, args)
    extra = calibration_file_extras(res, image=args.image, zone=zone)
    written, history_file = [], None
    if args.plot:
        from saed.report.rings_plot import plot_calibration

        plot_calibration(res, image, args.plot, title=f"{args.image}: {standard.name} standard",
                         units=units_from_args(args))
        written.append(("plot", args.plot))
    if args.out:
        from saed.calibration import write_calibration_file

        write_calibration_file(cal, args.out, nominal_camera_length_mm=args.camera_length, **extra)
        written.append(("calibration file", args.out))
    if not args.no_history:
        history_file = store_calibration(cal, history_folder(args.history), nominal_camera_length_mm=args.camera_length,
                                         **extra)
        written.append(("history", str(history_file)))
    doc = calibrate_json(res, image=args.image, zone=zone, prior=prior, warnings=warnings, history_file=history_file)
    if args.json:
        write_json(args.json, doc)
        if args.json == "-":
            for w in doc["warnings"]:
                print(f"saed calibrate: warning: {w}", file=sys.stderr)
            return 0
        written.append(("JSON", args.json))
    from saed.cli.common import print_calibration

    print_calibration(prior, units=units_from_args(args))
    _print(res, doc, args)
    for w in doc["warnings"]:
        print(f"WARNING: {w}")
    for label, path in written:
        print(f"{label}: {path}")
    return 0


def _warnings(cal, args) -> list[str]:
    """Warnings against the nominal camera length and the history (read before this calibration is filed)."""
    from saed.calibrate.checks import history_warning, nominal_warning
    from saed.calibrate.history import history_folder, list_calibrations

    out = [nominal_warning(cal, args.camera_length)]
    folder = history_folder(args.history)
    if folder.is_dir():
        entries, _ = list_calibrations(folder)
        out.append(history_warning(cal, entries, nominal_camera_length_mm=args.camera_length))
    return [w for w in out if w]


def _print(res, doc, args):
    from saed.crystal.notation import indices_text, label_text, table_lines, terminal_style, wavelength_text

    cal = res.calibration
    units = units_from_args(args)
    un, inv = units.label(terminal_style()), units.inverse_label(terminal_style())
    st = terminal_style()
    kind = f"[{indices_text(doc['zone_axis'], st)}] zone pattern" if doc["zone_axis"] else "ring pattern"
    print(f"{cal.standard} {kind}, {cal.voltage_kv:g} kV (lambda = {wavelength_text(cal.wavelength_nm)})")
    print(f"  scale          {units.reciprocal(cal.scale_inv_nm_per_px):.5g} {inv} per px  (+-{doc['scale_sigma_pct']:.4f} %)")
    if cal.alpha_axis_deg is not None:
        print(f"  alpha axis     {cal.alpha_axis_deg:.1f} deg on the detector (stored for this camera length)")
    if cal.center_px:
        print(f"  centre         ({cal.center_px[0]:.2f}, {cal.center_px[1]:.2f}) px")
    if cal.ellipse:
        print(f"  ellipse        axis ratio {cal.ellipse.axis_ratio:.4f}, long axis at {cal.ellipse.major_axis_angle_deg:.1f} deg")
    length = cal.implied_camera_length_mm
    if length is not None:
        nominal = f" (nominal {args.camera_length:g} mm: {percent_off(length, args.camera_length):+.2f} %)" if args.camera_length else ""
        print(f"  camera length  {length:.2f} mm{nominal}, camera constant lambda L = {cal.camera_constant_nm_mm:.5f} nm mm")
    else:
        print("  camera length  - (give --pixel-pitch UM for camera length and camera constant)")
    print(f"  residual       {res.residual_pct:.3f} % (RMS misfit of the {'spots' if doc['zone_axis'] else 'rings'} used)")
    rows = [[f"{r[0]:.2f}", label_text(r[1], st) if r[1] else "(none)", units.length_text(r[2], 5), units.length_text(r[3], 5), _fmt(r[4], "+.3f")]
            for r in res.ring_rows]
    for line in table_lines([("r px", ">"), ("hkl", ">"), (f"d std {un}", ">"), (f"d meas {un}", ">"),
                             ("misfit %", ">")], rows, indent="  "):
        print(line)
    for note in res.notes:
        print(f"note: {note}")

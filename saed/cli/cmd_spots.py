"""``saed spots``: the image stage alone (centre, spots, 2-D lattice) with a summary, JSON and an overlay."""

from __future__ import annotations

import math
import sys

from saed.cli.common import (add_image_arguments, check_frame_and_outputs, add_calibration_options, positive_float,
                             print_calibration, read_and_calibrate, write_json)
from saed.cli.display import add_units_argument, display_options, units_from_args
from saed.crystal.notation import UNITS, table_lines
from saed.errors import InputError
from saed.report.spots_json import basis_angle_deg, spots_json

NAME = "spots"
HELP = "find the centre, the spots and the 2-D lattice (g1, g2) of a recorded pattern"
DESCRIPTION = (
    "Measure a recorded single-crystal pattern without indexing it: the centre (direct beam, or Friedel pairs "
    "when the direct beam is saturated or behind a beam stop), every spot with its sub-pixel position, "
    "intensity and signal-to-noise ratio, and the shortest 2-D lattice basis g1, g2 with uncertainties. "
    "A beam stop, saturated pixels and the detector border are masked automatically; --mask adds a mask image. "
    "With a calibration, lengths are given in 1/nm and as d-spacings."
)
ORDER = 20
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("image", "mask", "calibration"), ("json", "overlay"))

#: Spots listed in the terminal summary (all of them go to --json).
SHOWN_SPOTS = 12


def add_arguments(p):
    add_image_arguments(p)
    add_calibration_options(p)
    g = p.add_argument_group("detection")
    g.add_argument("--snr-min", type=positive_float, default=None, metavar="SNR",
                   help="smallest peak signal-to-noise ratio of a spot (default 3)")
    g.add_argument("--spot-width", type=positive_float, default=None, metavar="PX",
                   help="Gaussian width (sigma) of the spots in pixels (default: measured)")
    g.add_argument("--no-beam-stop", action="store_true", help="do not look for a beam-stop shadow")
    out = p.add_argument_group("output")
    out.add_argument("--json", metavar="PATH", help="write centre, spots and basis as JSON ('-' for stdout)")
    out.add_argument("--overlay", metavar="FILE", help="draw the spots, centre, g1/g2 and masked regions on the pattern: "
                     ".png, or .pdf / .svg (vector, for print)")
    out.add_argument("--dpi", type=int, default=150, metavar="N", help="resolution of a PNG overlay, dots per inch (default 150)")
    out.add_argument("--all", action="store_true", help="list every spot in the summary, not only the strongest")
    add_units_argument(out)


def _check_args(args):
    check_frame_and_outputs(args)
    if not 30 <= args.dpi <= 1200:
        raise InputError(f"--dpi {args.dpi}: give 30 to 1200")
    if args.json == "-" and args.overlay == "-":
        raise InputError("--overlay needs a file name")


def _summary(measured, *, image: str, frame, show_all: bool, units=UNITS["nm"], style: str = "plain") -> str:
    cal = measured.calibration
    scale = cal.scale_inv_nm_per_px
    sp = measured.spots
    b = measured.basis
    rows, cols = measured.image_shape
    lines = [f"{image}  ({cols} x {rows} px" + (f", frame {frame}" if frame is not None else "") + ")"]
    cs = measured.center_sigma_px
    lines.append(f"  centre   x {measured.center_px[0]:.2f}  y {measured.center_px[1]:.2f} px"
                 + (f"  (+- {cs:.2f} px)" if math.isfinite(cs) else ""))
    if cal.is_calibrated:
        lines.append(f"  scale    {units.reciprocal(scale):.5g} {units.inverse_label(style)} per px at {cal.voltage_kv:g} kV"
                     + ("  (ellipse corrected)" if cal.ellipse is not None else ""))
    else:
        lines.append("  scale    uncalibrated (lengths in px; give --scale, --camera-length with --pixel-pitch, "
                     "or --calibration for reciprocal lengths and d)")
    if len(sp):
        lines.append(f"  spots    {len(sp)}  (peak SNR {sp.snr.min():.1f} to {sp.snr.max():.0f}, median {float(_median(sp.snr)):.0f})")
    else:
        lines.append("  spots    none")
    if b is not None:
        g1c, g2c = measured.corrected_basis_px()
        for name, g, sig in (("g1", g1c, b.sigma_g1_px), ("g2", g2c, b.sigma_g2_px)):
            length = math.hypot(*g)
            text = f"  {name}       {length:8.2f} px  +- {sig:.2f}"
            if scale is not None:
                text += (f"   {units.reciprocal_text(length * scale, 4)} {units.inverse_label(style)}   "
                         f"d = {units.length_text(1.0 / (length * scale))} {units.label(style)}")
            lines.append(text)
        l1, l2 = math.hypot(*g1c), math.hypot(*g2c)
        lines.append(f"  angle    {basis_angle_deg(g1c, g2c):.2f} deg +- {b.sigma_angle_deg:.2f}    |g2|/|g1| = {l2 / l1:.4f}")
        lines.append(f"  lattice  {int(b.on_lattice.sum())} of {len(sp)} spots indexed, rms residual "
                     f"{b.rms_residual_px:.2f} px")
    for n in measured.notes:
        lines.append(f"  note     {n}")
    if len(sp):
        order = sorted(range(len(sp)), key=lambda k: -float(sp.snr[k]))
        shown = order if show_all else order[:SHOWN_SPOTS]
        vec = measured.corrected_spot_vectors_px()
        # m and n (the spot = m g1 + n g2) in columns of their own, so signs and widths line up
        header = [("m", ">"), ("n", ">"), ("x px", ">"), ("y px", ">"), ("|g| px", ">")]
        header += [(f"d {units.label(style)}", ">")] if scale is not None else []
        header += [("SNR", ">"), ("intensity", ">"), ("", "<")]
        cells = []
        for k in shown:
            on = b is not None and b.on_lattice[k]
            m, n = (f"{b.indices[k][0]:d}", f"{b.indices[k][1]:d}") if on else ("-", "-")
            length = math.hypot(*vec[k])
            row = [m, n, f"{sp.x_px[k]:.2f}", f"{sp.y_px[k]:.2f}", f"{length:.2f}"]
            if scale is not None:
                row.append(units.length_text(1.0 / (length * scale)) if length > 0 else "-")
            row += [f"{sp.snr[k]:.1f}", f"{sp.intensity[k]:.0f}", "saturated" if sp.saturated[k] else ""]
            cells.append(row)
        lines.append("")
        lines.append(("strongest spots" if not show_all else "spots") + " (at m g1 + n g2):")
        lines += table_lines(header, cells, indent="  ")
        if len(shown) < len(sp):
            lines.append(f"  ... {len(sp) - len(shown)} more (--all, or --json for every spot)")
    return "\n".join(lines)


def _median(a):
    import numpy as np

    return np.median(a)


def run(args) -> int:
    from saed.image.measure import DEFAULT_SNR_MIN, inspect_file

    _check_args(args)
    image, resolved = read_and_calibrate(args)
    insp = inspect_file(args.image, resolved.calibration, frame=args.frame, mask_path=args.mask, image=image,
                        snr_min=args.snr_min if args.snr_min is not None else DEFAULT_SNR_MIN,
                        spot_sigma_px=args.spot_width, find_stop=not args.no_beam_stop)
    mp = insp.measured
    doc = spots_json(mp, image=args.image, frame=args.frame)
    doc.update(resolved.to_json())
    out = sys.stderr if args.json == "-" else sys.stdout
    # Files first: a closed terminal pipe (e.g. '| head') must not lose them.
    if args.json:
        write_json(args.json, doc)
    if args.overlay:
        from saed.report.spots_overlay import write_spots_overlay

        write_spots_overlay(insp.image, mp, args.overlay, ignored=insp.ignored, dpi=args.dpi,
                            title=args.image + (f" (frame {args.frame})" if args.frame is not None else ""),
                            units=units_from_args(args))
    print_calibration(resolved, file=out, units=units_from_args(args))
    print(_summary(mp, image=args.image, frame=args.frame, show_all=args.all,
                   **display_options(args, out)), file=out)
    if args.overlay:
        print(f"overlay written to {args.overlay}", file=out)
    if len(mp.spots) == 0:
        print(f"saed spots: no spots found in {args.image}", file=sys.stderr)
    return 0

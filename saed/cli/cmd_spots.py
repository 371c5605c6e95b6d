"""``saed spots``: the image stage alone (centre, spots, 2-D lattice) with a summary, JSON and an overlay."""

from __future__ import annotations

import math
import sys

from saed.cli.common import (add_image_arguments, check_frame_and_outputs, add_calibration_options, positive_float,
                             print_calibration, read_and_calibrate, write_json)
from saed.cli.display import add_units_argument, display_options, units_from_args
from saed.crystal.notation import UNITS, table_lines
from saed.errors import InputError

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


def _num(v, nd=6):
    """A JSON-safe float (None for NaN/inf)."""
    if v is None:
        return None
    v = float(v)
    return round(v, nd) if math.isfinite(v) else None


def spots_json(measured, *, image: str, frame: int | None) -> dict:
    """The JSON document of ``saed spots`` for a MeasuredPattern."""
    cal = measured.calibration
    scale = cal.scale_inv_nm_per_px
    sp = measured.spots
    b = measured.basis
    vec = measured.corrected_spot_vectors_px()
    spots = []
    for k in range(len(sp)):
        length = float(math.hypot(*vec[k]))
        d = {"x": _num(sp.x_px[k], 3), "y": _num(sp.y_px[k], 3), "intensity": _num(sp.intensity[k], 1),
             "intensity_sigma": _num(sp.intensity_sigma[k], 1), "snr": _num(sp.snr[k], 2),
             "sigma_xy_px": _num(sp.sigma_xy_px[k], 4), "size_px": _num(sp.size_px[k], 3),
             "saturated": bool(sp.saturated[k]), "g_px": _num(length, 3)}
        if b is not None:
            d["on_lattice"] = bool(b.on_lattice[k])
            d["index"] = [int(v) for v in b.indices[k]] if b.on_lattice[k] else None
        if scale is not None and length > 0:
            d["g_inv_nm"] = _num(length * scale, 5)
            d["d_nm"] = _num(1.0 / (length * scale), 5)
        spots.append(d)
    basis = None
    if b is not None:
        g1c, g2c = measured.corrected_basis_px()
        l1, l2 = float(math.hypot(*g1c)), float(math.hypot(*g2c))
        basis = {"g1_px": [_num(v, 4) for v in b.g1_px], "g2_px": [_num(v, 4) for v in b.g2_px],
                 "g1_length_px": _num(l1, 4), "g2_length_px": _num(l2, 4),
                 "sigma_g1_px": _num(b.sigma_g1_px, 5), "sigma_g2_px": _num(b.sigma_g2_px, 5),
                 "angle_deg": _num(_angle(g1c, g2c), 4), "sigma_angle_deg": _num(b.sigma_angle_deg, 4),
                 "ratio_g2_g1": _num(l2 / l1, 5), "rms_residual_px": _num(b.rms_residual_px, 4),
                 "n_on_lattice": int(b.on_lattice.sum()), "ellipse_corrected": cal.ellipse is not None}
        if scale is not None:
            basis.update({"g1_inv_nm": _num(l1 * scale, 5), "g2_inv_nm": _num(l2 * scale, 5),
                          "d1_nm": _num(1.0 / (l1 * scale), 5), "d2_nm": _num(1.0 / (l2 * scale), 5)})
    return {
        "image": image,
        "frame": frame,
        "image_shape": list(measured.image_shape),
        "center_px": [_num(measured.center_px[0], 3), _num(measured.center_px[1], 3)],
        "center_sigma_px": _num(measured.center_sigma_px, 4),
        "scale_inv_nm_per_px": scale,
        "voltage_kv": cal.voltage_kv,
        "ellipse": None if cal.ellipse is None else {"axis_ratio": cal.ellipse.axis_ratio,
                                                     "major_axis_angle_deg": cal.ellipse.major_axis_angle_deg},
        "n_spots": len(sp),
        "spots": spots,
        "basis": basis,
        "notes": list(measured.notes),
    }


def _angle(a, b) -> float:
    c = float((a @ b) / (math.hypot(*a) * math.hypot(*b)))
    return math.degrees(math.acos(max(-1.0, min(1.0, c))))


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
        lines.append(f"  angle    {_angle(g1c, g2c):.2f} deg +- {b.sigma_angle_deg:.2f}    |g2|/|g1| = {l2 / l1:.4f}")
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

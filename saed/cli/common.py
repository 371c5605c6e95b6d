"""Option groups and helpers shared by several subcommands."""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import sys

from saed.calibration import Calibration, calibration_from_options
from saed.crystal.phase import Phase, builtin_names, load_phase
from saed.errors import InputError
from saed.files import atomic_write_text

__all__ = ["add_image_arguments", "check_frame_and_outputs", "check_outputs_not_inputs", "add_calibration_options", "calibration_from_args", "add_phase_option", "phases_from_args",
           "write_json", "int_at_least", "positive_float", "finite_float", "add_matching_options", "matching_options_from_args",
           "read_and_calibrate", "resolve_args_calibration", "print_calibration", "scale_value"]


def finite_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return v


def int_at_least(minimum: int):
    """An argparse type: a whole number of at least `minimum` (e.g. a seed from 0)."""
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if v < minimum:
            raise argparse.ArgumentTypeError(f"{text!r}: give a whole number from {minimum}")
        return v

    return parse


def positive_float(text: str) -> float:
    v = finite_float(text)
    if v <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be positive")
    return v


def add_image_arguments(p: argparse.ArgumentParser, *, what: str = "recorded pattern",
                        positional: bool = True) -> None:
    """The IMAGE argument with --frame and --mask, as every single-pattern command takes them."""
    if positional:
        p.add_argument("image", metavar="IMAGE", help=f"{what} (TIFF, PNG, JPEG, .npy, DM3/DM4, EMD, SER/EMI, MRC)")
    p.add_argument("--frame", type=int, metavar="N",
                   help="frame of a multi-frame file (TIFF pages, .npy or DM/EMD/SER/MRC stack or scan, flat index; "
                        "from 0; default 0)")
    p.add_argument("--mask", metavar="IMAGE", help="mask image of the same size: non-zero pixels are ignored")


def check_frame_and_outputs(args) -> None:
    """Before any work: a valid --frame, and --json / --overlay files that can be written (nothing is lost later)."""
    from saed.files import check_writable

    if args.frame is not None and args.frame < 0:
        raise InputError(f"--frame {args.frame}: frames are numbered from 0")
    if args.json and args.json != "-":
        check_writable(args.json)
    if args.overlay:
        if not args.overlay.lower().endswith((".png", ".pdf", ".svg")):
            raise InputError(f"--overlay {args.overlay}: must end in .png (or .pdf, .svg)")
        check_writable(args.overlay)


def check_outputs_not_inputs(args, inputs, outputs) -> None:
    """Before any work: no output of this run names one of its inputs (or another output).

    `inputs` and `outputs` are attribute names of `args` (a value may be a list, e.g. --phase);
    "report/index.html" stands for the file index.html in the folder of --report. Labels are the
    option as typed (``--json``) or the positional's metavar (``IMAGE``), from ``args._labels``.
    """
    from saed.files import refuse_overwriting_inputs

    labels = getattr(args, "_labels", {})

    def pairs(names):
        for name in names:
            attr, _, inner = name.partition("/")
            value = getattr(args, attr, None)
            label = labels.get(attr, "--" + attr.replace("_", "-"))
            for v in value if isinstance(value, (list, tuple)) else [value]:
                if isinstance(v, str) and v:
                    yield label, (f"{v.rstrip('/')}/{inner}" if inner else v)

    refuse_overwriting_inputs(list(pairs(inputs)), list(pairs(outputs)))


def add_calibration_options(p: argparse.ArgumentParser, *, center: bool = True) -> None:
    g = p.add_argument_group("calibration")
    g.add_argument("--scale", type=scale_value, metavar="S",
                   help="detector scale per pixel: 1/nm by default, or with a unit ('0.005 1/Å', '5e7 1/m', "
                        "'0.05 nm^-1'); overrides the image's sidecar, metadata and the calibration history")
    g.add_argument("--camera-length", type=positive_float, metavar="MM", help="camera length in mm (needs --pixel-pitch, or a pixel size in the image file)")
    g.add_argument("--pixel-pitch", type=positive_float, metavar="UM", help="detector pixel pitch in um")
    g.add_argument("--voltage", type=positive_float, metavar="KV", help="accelerating voltage in kV (default: the image file's, else 200)")
    g.add_argument("--calibration", metavar="CAL.json", help="calibration file written by 'saed calibrate'")
    g.add_argument("--uncalibrated", action="store_true",
                   help="use no calibration: ignore the image's sidecar NAME.json, its metadata and the calibration "
                        "history (index by spacing ratios and angles)")
    if center:
        g.add_argument("--centre", "--center", dest="center", type=finite_float, nargs=2, metavar=("X", "Y"),
                       help="pattern centre hint, pixels (either spelling)")


def scale_value(text: str) -> float:
    """--scale: a positive number of 1/nm per pixel, or a number with a reciprocal-length unit."""
    from saed.units import parse_scale_text

    try:
        v, _unit = parse_scale_text(text)
    except InputError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    if not math.isfinite(v) or v <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be positive")
    return v


def resolve_args_calibration(args, image, metadata, *, use_history: bool = True):
    """The calibration of `image` by the resolution order (saed.calibrate.resolve) from the command's options."""
    from saed.calibrate.resolve import resolve_calibration

    if getattr(args, "uncalibrated", False):
        given = [f for f, v in (("--scale", "scale"), ("--camera-length", "camera_length"), ("--calibration", "calibration"))
                 if getattr(args, v, None) is not None]
        if given:
            raise InputError(f"--uncalibrated contradicts {given[0]}")
        return resolve_calibration(image, None, voltage_kv=getattr(args, "voltage", None),
                                   pixel_pitch_um=getattr(args, "pixel_pitch", None),
                                   center_px=getattr(args, "center", None), use_sidecar=False, use_history=False)
    return resolve_calibration(image, metadata, **_calibration_option_values(args),
                               history_folder=getattr(args, "history", None), use_history=use_history)


def read_and_calibrate(args):
    """Read IMAGE (--frame) with what the file says about itself and resolve its calibration.

    Returns (image float32 array, ResolvedCalibration).
    """
    from saed.image.io import read_pattern

    if not (getattr(args, "camera_length", None) is not None and getattr(args, "pixel_pitch", None) is None):
        calibration_from_args(args)  # contradicting options and a bad calibration file fail before any reading
    # (--camera-length alone may take the pixel pitch from the file's metadata: checked after reading)
    image, meta = read_pattern(args.image, frame=args.frame)
    return image, resolve_args_calibration(args, args.image, meta)


def print_calibration(resolved, *, file=None, units=None) -> None:
    """The calibration line, with its source (in `units`, a saed.crystal.notation.Units; default nm),
    then its warnings and notes."""
    out = file if file is not None else sys.stdout
    if units is None:
        print(resolved.line(), file=out)
    else:
        print(resolved.line(per_nm=units.per_nm, inverse_label=units.inverse_label()), file=out)
    for w in resolved.warnings:
        print(f"  warning: {w}", file=out)
    for n in resolved.notes:
        print(f"  note: {n}", file=out)


def _calibration_option_values(args) -> dict:
    """The calibration options of a command line, as keyword arguments (None: not given)."""
    return {"scale_inv_nm_per_px": getattr(args, "scale", None), "camera_length_mm": getattr(args, "camera_length", None),
            "pixel_pitch_um": getattr(args, "pixel_pitch", None), "voltage_kv": getattr(args, "voltage", None),
            "calibration_file": getattr(args, "calibration", None), "center_px": getattr(args, "center", None)}


def calibration_from_args(args) -> Calibration:
    return calibration_from_options(**_calibration_option_values(args))


def add_phase_option(p: argparse.ArgumentParser, *, required: bool = False) -> None:
    p.add_argument("--phase", action="append", metavar="P", required=required,
                   help="candidate phase: built-in name (see 'saed phases'), CIF path, or a bare element "
                        "for all its built-in phases (Co = Co-fcc and Co-hcp); repeatable "
                        "(default: the whole built-in library)")


def phases_from_args(args, *, default_all: bool = True) -> list[Phase]:
    specs = getattr(args, "phase", None) or (builtin_names() if default_all else [])
    if getattr(args, "phase", None):
        specs = _expand_groups(specs)
    phases: list[Phase] = []
    for spec in specs:
        ph = load_phase(spec)
        if ph in phases:  # the same phase given twice
            continue
        if any(p.name == ph.name for p in phases):  # same name, different crystal (e.g. a CIF's data block)
            ph = dataclasses.replace(ph, name=f"{ph.name} ({spec})")
        phases.append(ph)
    if not phases:
        raise InputError("no candidate phases given (use --phase)")
    return phases


def _expand_groups(specs: list[str]) -> list[str]:
    """'--phase Co' -> Co-fcc, Co-hcp, with a note on stderr saying what it was taken as."""
    from saed.crystal.phase_groups import expand_phase_spec

    out: list[str] = []
    for spec in specs:
        group = expand_phase_spec(spec, builtin_names())
        if group is None:
            out.append(spec)
            continue
        print(f"saed: --phase {spec} taken as every built-in {spec} phase: {', '.join(group)}", file=sys.stderr)
        out.extend(group)
    return out


def add_matching_options(p: argparse.ArgumentParser) -> None:
    """The matcher's options (as ``saed index`` has them), for commands that index many patterns."""
    g = p.add_argument_group("matching")
    g.add_argument("--top", type=int, default=5, metavar="N", help="solutions to rank per pattern (default 5)")
    g.add_argument("--length-tol", type=positive_float, metavar="PCT",
                   help="tolerance of the calibrated scale, percent (default 3)")
    g.add_argument("--angle-tol", type=positive_float, metavar="DEG",
                   help="tolerance of the angle between two spots, degrees (default 2)")
    g.add_argument("--max-g", type=positive_float, metavar="INV_NM",
                   help="largest |g| considered, 1/nm (default: as far as the measured spots reach)")
    g.add_argument("--max-zone-index", type=int, default=7, metavar="N",
                   help="largest zone-axis index considered, 3-index conventional cell (default 7)")
    g.add_argument("--alpha-axis", type=finite_float, metavar="DEG",
                   help="direction of the holder's alpha tilt axis on the detector (deg from +x toward +y), "
                        "to give the mistilt correction as alpha/beta")


def matching_options_from_args(args) -> dict:
    """Keyword options of :func:`saed.index.index_pattern` from :func:`add_matching_options` arguments."""
    if args.top < 1:
        raise InputError(f"--top {args.top}: give at least 1")
    if not 1 <= args.max_zone_index <= 20:
        raise InputError(f"--max-zone-index {args.max_zone_index}: give 1 to 20")
    return {"angle_tol_deg": args.angle_tol, "length_tol_pct": args.length_tol,
            "holder_alpha_axis_deg": args.alpha_axis, "max_zone_index": args.max_zone_index}


def write_json(path: str, obj) -> None:
    """Write `obj` as JSON to `path` ('-' for stdout), atomically for files."""
    text = json.dumps(obj, indent=2, allow_nan=False) + "\n"
    if path == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
    else:
        atomic_write_text(path, text)

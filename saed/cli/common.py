"""Option groups and helpers shared by several subcommands."""

from __future__ import annotations

import argparse
import json
import math
import sys

from saed.calibration import Calibration, calibration_from_options
from saed.crystal.phase import Phase, builtin_names, load_phase
from saed.errors import InputError
from saed.report.files import atomic_write_text

__all__ = ["add_calibration_options", "calibration_from_args", "add_phase_option", "phases_from_args",
           "write_json", "positive_float", "finite_float"]


def finite_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return v


def positive_float(text: str) -> float:
    v = finite_float(text)
    if v <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be positive")
    return v


def add_calibration_options(p: argparse.ArgumentParser, *, center: bool = True) -> None:
    g = p.add_argument_group("calibration")
    g.add_argument("--scale", type=positive_float, metavar="S", help="detector scale, 1/nm per pixel")
    g.add_argument("--camera-length", type=positive_float, metavar="MM", help="camera length in mm (needs --pixel-pitch)")
    g.add_argument("--pixel-pitch", type=positive_float, metavar="UM", help="detector pixel pitch in um")
    g.add_argument("--voltage", type=positive_float, metavar="KV", help="accelerating voltage in kV (default 200)")
    g.add_argument("--calibration", metavar="CAL.json", help="calibration file written by 'saed calibrate'")
    if center:
        g.add_argument("--center", type=finite_float, nargs=2, metavar=("X", "Y"), help="pattern centre hint, pixels")


def calibration_from_args(args) -> Calibration:
    return calibration_from_options(
        scale_inv_nm_per_px=getattr(args, "scale", None),
        camera_length_mm=getattr(args, "camera_length", None),
        pixel_pitch_um=getattr(args, "pixel_pitch", None),
        voltage_kv=getattr(args, "voltage", None),
        calibration_file=getattr(args, "calibration", None),
        center_px=getattr(args, "center", None),
    )


def add_phase_option(p: argparse.ArgumentParser, *, required: bool = False) -> None:
    p.add_argument("--phase", action="append", metavar="P", required=required,
                   help="candidate phase: built-in name (see 'saed phases') or CIF path; repeatable "
                        "(default: the whole built-in library)")


def phases_from_args(args, *, default_all: bool = True) -> list[Phase]:
    specs = getattr(args, "phase", None) or (builtin_names() if default_all else [])
    phases, seen = [], set()
    for spec in specs:
        ph = load_phase(spec)
        if ph.name in seen:
            continue
        seen.add(ph.name)
        phases.append(ph)
    if not phases:
        raise InputError("no candidate phases given (use --phase)")
    return phases


def write_json(path: str, obj) -> None:
    """Write `obj` as JSON to `path` ('-' for stdout), atomically for files."""
    text = json.dumps(obj, indent=2, allow_nan=False) + "\n"
    if path == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
    else:
        atomic_write_text(path, text)

"""``saed grain``: several patterns of one grain at recorded holder tilts, indexed to one orientation."""

from __future__ import annotations

import argparse
import math
import sys

from saed.cli.common import (add_image_arguments, print_calibration, add_matching_options, add_phase_option, finite_float,
                             matching_options_from_args, phases_from_args, positive_float, write_json)
from saed.cli.display import add_units_argument, units_from_args
from saed.errors import InputError

NAME = "grain"
HELP = "index several patterns of one grain, recorded at known holder tilts, to one phase and orientation"
DESCRIPTION = (
    "Index each pattern as 'saed index' does, carry every candidate back to holder readings 0, 0 with the "
    "double-tilt geometry of 'saed tilt', and find the phase and the one orientation that all patterns agree on "
    "within the holder's accuracy. Look-alikes that one pattern could not separate (fcc [112] / hcp [10-10], "
    "the 180-degree sense, ordered / disordered) are decided by the series, with the evidence; when doubt "
    "remains, the zone and holder readings of a third pattern that settles it are given. Give one --tilt "
    "ALPHA,BETA per image, in image order. The alpha-axis direction on the detector comes from --alpha-axis or "
    "from the calibration file (stored per camera length by 'saed calibrate --alpha-axis'). Exit status 0 also "
    "when the patterns cannot come from one grain (the message names the one that disagrees); 2 on bad input."
)
ORDER = 15

#: Inputs and outputs, checked against each other before any work (an output never names an input);
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("images", "mask", "calibration", "phase"), ("json", "report/index.html"))


def add_arguments(p):
    import re

    # "--tilt -12.5,3" must read as a value, not an option: let this parser take "-A,B" for a number
    # (argparse does so for plain negative numbers only)
    p._negative_number_matcher = re.compile(r"^-\d+$|^-\d*\.\d+$|^-\d*\.?\d*\s*[,;]\s*-?\d*\.?\d*$")
    p.add_argument("images", nargs="+", metavar="IMAGE", help="the patterns of the series (TIFF, PNG, JPEG or .npy)")
    add_image_arguments(p, positional=False)
    p.add_argument("--tilt", action="append", metavar="ALPHA,BETA", required=True,
                   help="holder readings of one image in degrees, e.g. --tilt 0,0 --tilt 12.5,-3; one per image, in order")
    add_phase_option(p)
    g = p.add_argument_group("calibration")
    g.add_argument("--scale", type=positive_float, metavar="S", help="detector scale of every image, 1/nm per pixel")
    g.add_argument("--camera-length", type=positive_float, metavar="MM", help="camera length in mm (needs --pixel-pitch)")
    g.add_argument("--pixel-pitch", type=positive_float, metavar="UM", help="detector pixel pitch in um")
    g.add_argument("--voltage", type=positive_float, metavar="KV", help="accelerating voltage in kV (default 200)")
    g.add_argument("--calibration", action="append", metavar="CAL.json",
                   help="calibration file from 'saed calibrate': once for all images, or once per image in image order "
                        "(images at different camera lengths)")
    add_matching_options(p)
    h = p.add_argument_group("holder")
    h.add_argument("--flip-alpha", action="store_true", help="positive alpha turns the specimen left-handedly")
    h.add_argument("--flip-beta", action="store_true", help="positive beta turns the specimen left-handedly")
    h.add_argument("--alpha-range", nargs="+", type=finite_float, default=[30.0], metavar="DEG",
                   help="alpha limits for the suggested third pattern: one number for +/-, or MIN MAX (default 30)")
    h.add_argument("--beta-range", nargs="+", type=finite_float, default=[25.0], metavar="DEG",
                   help="beta limits for the suggested third pattern (default 25)")
    h.add_argument("--holder-tol", type=positive_float, default=3.0, metavar="DEG",
                   help="largest disagreement between the patterns that still counts as one grain (default 3 deg: "
                        "readings good to 0.3-1 deg plus each pattern's mistilt)")
    out = p.add_argument_group("output")
    out.add_argument("--json", metavar="PATH", help="write the joint result as JSON ('-' for stdout)")
    out.add_argument("--report", metavar="DIR", help="write a self-contained HTML report (index.html) into DIR")
    add_units_argument(out)


def parse_tilt(text: str) -> tuple[float, float]:
    """'ALPHA,BETA' in degrees -> (alpha, beta); InputError naming the problem.

    >>> parse_tilt("12.5,-3")
    (12.5, -3.0)
    """
    parts = [t.strip() for t in str(text).replace(";", ",").split(",")]
    if len(parts) != 2:
        raise InputError(f"--tilt {text!r}: give ALPHA,BETA in degrees, e.g. --tilt 12.5,-3")
    try:
        a, b = float(parts[0]), float(parts[1])
    except ValueError:
        raise InputError(f"--tilt {text!r}: ALPHA and BETA must be numbers of degrees") from None
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(f"--tilt {text!r}: ALPHA and BETA must be finite")
    if abs(a) > 90 or abs(b) > 90:
        raise InputError(f"--tilt {text!r}: holder readings must lie within -90..90 deg")
    return a, b


def _range(v, what):
    from saed.simulate.tilt import _pair

    return _pair(v, what)


def _check(args):
    from saed.files import check_writable

    n = len(args.images)
    if n < 2:
        raise InputError("saed grain needs at least two images of the same grain at different holder readings")
    if len(args.tilt) != n:
        raise InputError(f"{n} images but {len(args.tilt)} --tilt readings: give one --tilt ALPHA,BETA per image, "
                         "in image order")
    tilts = [parse_tilt(t) for t in args.tilt]
    if len({t for t in tilts}) == 1:
        raise InputError("every image has the same holder readings: a grain series needs patterns at different tilts")
    cals = args.calibration or []
    if len(cals) not in (0, 1, n):
        raise InputError(f"{len(cals)} --calibration files for {n} images: give one for all, or one per image")
    if cals and (args.scale is not None or args.camera_length is not None):
        raise InputError("give either --calibration or --scale / --camera-length, not both")
    if args.frame is not None and args.frame < 0:
        raise InputError(f"--frame {args.frame}: frames are numbered from 0")
    matching_options_from_args(args)
    ranges = (_range(args.alpha_range, "alpha"), _range(args.beta_range, "beta"))
    if args.json and args.json != "-":
        check_writable(args.json)
    if args.report:
        from saed.cli.cmd_index import check_report_folder

        check_report_folder(args.report)
    return tilts, ranges


def _calibrations(args) -> list:
    """Each image read and calibrated by saed's resolution order (saed.calibrate.resolve): an option, then
    --calibration (one for all images, or one per image in order), then the image's sidecar, its metadata,
    the calibration history. Returns [(image array, ResolvedCalibration)] in image order.

    One calibration shared by all images is refused when the files themselves say they were recorded at
    different detector scales (different camera lengths)."""
    from saed.cli.common import resolve_args_calibration
    from saed.image.io import read_metadata, read_pattern

    n = len(args.images)
    files = args.calibration or []
    if len(files) < 2 and (files or args.scale is not None or args.camera_length is not None):
        # one calibration for every image: the files must not say they were recorded at different scales
        known = [(p, m.scale_inv_nm_per_px) for p, m in ((p, read_metadata(p)) for p in args.images)
                 if m.scale_inv_nm_per_px is not None]
        for p, s in known[1:]:
            p0, s0 = known[0]
            if abs(s / s0 - 1.0) > 0.01:
                raise InputError(f"{p0} and {p} carry different detector scales ({s0:.5g} and {s:.5g} 1/nm per px): "
                                 "they were recorded at different camera lengths; give one --calibration per image, "
                                 "in order")
    out = []
    for k, path in enumerate(args.images):
        image, meta = read_pattern(path, frame=args.frame)
        own = files[k] if len(files) == n and n > 1 else (files[0] if files else None)
        per_image = argparse.Namespace(**{**vars(args), "calibration": own})
        out.append((image, resolve_args_calibration(per_image, path, meta)))
    return out


def run(args) -> int:
    from saed.cli.cmd_index import _max_g
    from saed.crystal.notation import terminal_style
    from saed.image.measure import inspect_file
    from saed.index import index_pattern, prepare_phases
    from saed.index.grain import GrainPattern, solve_grain
    from saed.index.grain_inputs import series_alpha_axes
    from saed.report.grain_json import grain_json
    from saed.report.grain_summary import format_grain_summary

    tilts, ranges = _check(args)
    read = _calibrations(args)
    phases = phases_from_args(args)
    opts = matching_options_from_args(args)
    given_axis = opts.pop("holder_alpha_axis_deg")
    insps = [inspect_file(path, r.calibration, frame=args.frame, mask_path=args.mask, image=image)
             for path, (image, r) in zip(args.images, read)]
    axes, note = series_alpha_axes(args.images, [i.measured for i in insps], given_axis,
                                   "Give --alpha-axis DEG or store it with 'saed calibrate --alpha-axis'")
    tables = prepare_phases(phases, voltage_kv=insps[0].measured.calibration.voltage_kv,
                            max_g_inv_nm=max((_max_g(args, i.measured) or 0.0) for i in insps) or None)
    pats = []
    for path, t, insp, ax in zip(args.images, tilts, insps, axes):
        res = index_pattern(insp.measured, tables, top=max(args.top, 10), lookalikes=False,
                            holder_alpha_axis_deg=ax, **opts)
        pats.append(GrainPattern(path, t, res, ax))
    result = solve_grain(pats, tables, alpha_sign=-1 if args.flip_alpha else 1, beta_sign=-1 if args.flip_beta else 1,
                         tolerance_deg=args.holder_tol, holder_range_deg=ranges,
                         voltage_kv=insps[0].measured.calibration.voltage_kv)
    out = sys.stderr if args.json == "-" else sys.stdout
    for path, (_, r) in zip(args.images, read):
        print(f"{path}:", file=out)
        print_calibration(r, file=out, units=units_from_args(args))
    print(format_grain_summary(result, alpha_axis_note=note, style=terminal_style(out)), file=out)
    if args.json:
        write_json(args.json, grain_json(result, calibrations=[(path, r) for path, (_, r) in zip(args.images, read)],
                                         note=note))
    if args.report:
        from saed.report.grain_html import write_grain_report

        path = write_grain_report(args.report, result, [i.image for i in insps], ignored=[i.ignored for i in insps],
                                  title="saed grain: " + ", ".join(args.images), units=units_from_args(args))
        print(f"report written to {path}", file=out)
    if not [s for s in result.solutions if not s.missing]:
        print(f"saed grain: {result.message}", file=sys.stderr)
    return 0

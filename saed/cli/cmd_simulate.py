"""``saed simulate``: the kinematic pattern of one zone axis, as a table, JSON, a detector image and a diagram."""

from __future__ import annotations

import math
import re

import numpy as np

from saed.cli.common import add_calibration_options, calibration_from_args, int_at_least, positive_float, write_json
from saed.cli.display import add_units_argument, display_options, units_from_args
from saed.errors import InputError

NAME = "simulate"
HELP = "simulate the kinematic diffraction pattern of a zone axis (table, JSON, detector image, labelled diagram)"
DESCRIPTION = (
    "Kinematic zone-axis pattern of a phase: zero-order Laue-zone reflections and higher-order ones near the "
    "Ewald sphere, exact excitation errors, |F|^2 times the sinc^2 shape factor of the foil, forbidden "
    "reflections that double diffraction can excite. Hexagonal phases take 3- or 4-index zones "
    "(--zone 2 -1 -1 0, or written together: --zone 2-1-10)."
)
ORDER = 20
#: Inputs and outputs (argument names): checked before any work that no output replaces an input;
#: the outputs are written all or nothing (saed.files.all_or_nothing).
FILES = (("phase", "calibration"), ("json", "image", "diagram"))

#: Rows printed in the terminal table before pointing at --json.
TABLE_ROWS = 40


def parse_indices(tokens, what: str) -> list[float]:
    """Indices from the command line: separate numbers ('0 1 -1') or one compact token ('01-1', '2-1-10')."""
    if tokens is None:
        return None
    toks = [str(t) for t in tokens]
    if len(toks) == 1 and re.fullmatch(r"(-?\d)+", toks[0]) and len(re.findall(r"-?\d", toks[0])) in (3, 4):
        return [float(v) for v in re.findall(r"-?\d", toks[0])]
    vals = []
    for t in toks:
        try:
            vals.append(float(t))
        except ValueError:
            raise InputError(f"{what}: {t!r} is not an index (give e.g. 0 1 1, or 2 -1 -1 0 for hexagonal phases)") from None
    if len(vals) not in (3, 4):
        raise InputError(f"{what} needs 3 indices (or 4 for hexagonal phases), got {len(vals)}: {' '.join(toks)}")
    return vals


def add_arguments(p):
    p.add_argument("phase", metavar="PHASE", help="built-in phase name (see 'saed phases') or CIF path")
    p.add_argument("--zone", nargs="+", required=True, metavar="U",
                   help="zone axis [uvw] (3 indices, or 4 [UVTW] for hexagonal phases)")
    p.add_argument("--max-g", type=positive_float, default=10.0, metavar="INV_NM",
                   help="largest reciprocal length listed, 1/nm (default 10)")
    p.add_argument("--thickness", type=positive_float, default=50.0, metavar="NM",
                   help="foil thickness for the sinc^2 shape factor, nm (default 50)")
    p.add_argument("--thickness-spread", type=float, default=0.5, metavar="W",
                   help="average the shape factor over thicknesses t(1-W)..t(1+W), as in a real wedge-shaped "
                        "or bent foil (default 0.5; 0 = one exact parallel-sided foil)")
    p.add_argument("--tilt", type=float, default=0.0, metavar="DEG",
                   help="tilt the beam off the zone axis by DEG degrees (needs --tilt-toward)")
    p.add_argument("--tilt-toward", nargs="+", metavar="H",
                   help="reflection hkl (or hkil) toward which the Laue-circle centre moves under --tilt")
    p.add_argument("--zolz-only", action="store_true", help="leave out higher-order Laue-zone reflections")
    p.add_argument("--rotation", type=float, default=0.0, metavar="DEG",
                   help="in-plane rotation of the pattern on the detector, from +x toward +y (default 0)")
    p.add_argument("--json", metavar="PATH", help="write the pattern as JSON ('-' for stdout)")
    add_units_argument(p)
    img = p.add_argument_group("pictures")
    img.add_argument("--image", metavar="PATH", help="detector-like image: .png (8-bit log display) or .tif (16-bit counts)")
    img.add_argument("--diagram", metavar="PATH", help="labelled diagram: .png, .pdf or .svg")
    img.add_argument("--image-size", type=int, default=1024, metavar="PX", help="image width and height, pixels (default 1024)")
    img.add_argument("--spot-size", type=positive_float, default=2.0, metavar="PX",
                     help="spot width (Gaussian sigma) in the image, pixels (default 2)")
    img.add_argument("--show-double-diffraction", type=float, default=0.0, metavar="F",
                     help="draw double-diffraction spots in the image at F x sqrt(I1 I2) of their route (0-1, default 0)")
    img.add_argument("--noise", action="store_true", help="add Poisson counting noise to the image")
    img.add_argument("--seed", type=int_at_least(0), default=None, metavar="N", help="seed for --noise (a whole number from 0)")
    add_calibration_options(p, center=True)


def build_pattern(args):
    """The ZonePattern asked for by `args` (shared with the atlas and tilt commands' checks)."""
    from saed.crystal.phase import load_phase
    from saed.simulate.zone import zone_pattern

    phase = load_phase(args.phase)
    zone = parse_indices(args.zone, "--zone")
    toward = parse_indices(args.tilt_toward, "--tilt-toward")
    if toward is None and args.tilt:
        raise InputError(f"--tilt {args.tilt:g} needs --tilt-toward H K L (the side of the pattern to excite)")
    if toward is not None and not args.tilt:
        raise InputError("--tilt-toward needs --tilt DEG (the beam tilt in degrees)")
    voltage = args.voltage if args.voltage is not None else 200.0
    return phase, zone_pattern(phase, zone, voltage_kv=voltage, max_g_inv_nm=args.max_g, tilt_deg=args.tilt,
                               tilt_toward_hkl=toward, thickness_nm=args.thickness, include_holz=not args.zolz_only,
                               thickness_spread=args.thickness_spread)


def _print_table(zp, doc: dict, *, style: str = "plain", units=None) -> None:
    from saed.crystal.notation import UNITS, plane_text, table_lines, wavelength_text, zone_text

    units = units or UNITS["nm"]
    ph = zp.phase
    hexa = ph.is_hexagonal
    u, inv = units.label(style), units.inverse_label(style)

    def refl(h):
        return plane_text(h, hexa, style)

    print(f"{ph.name} {zone_text(zp.zone_axis, hexa, style)}  {zp.voltage_kv:g} kV (lambda {wavelength_text(zp.wavelength_nm)})"
          f"  thickness {units.length(zp.thickness_nm):g} {u}"
          + (f"  beam tilted {zp.tilt_deg:g} deg" if zp.tilted else ""))
    s = doc["pattern"]
    if s:
        print(f"g1 {refl(s['g1_hkl'])} d {units.length_text(s['d1_nm'])} {u}, g2 {refl(s['g2_hkl'])} d "
              f"{units.length_text(s['d2_nm'])} {u}, R2/R1 {s['ratio']:.4f}, angle {s['angle_deg']:.2f} deg")
    print(f"FOLZ ring radius {units.reciprocal_text(zp.folz_ring_radius_inv_nm, 2)} {inv} "
          f"(layer spacing {units.reciprocal_text(zp.layer_spacing_inv_nm, 4)} {inv})")
    rows = [i for i in range(len(zp)) if zp.zolz[i] and (zp.allowed[i] or zp.double_diffraction[i])]
    header = [("hkl", ">"), (f"d {u}", ">"), (f"g {inv}", ">"), (f"x {inv}", ">"), (f"y {inv}", ">"),
              (f"s {inv}", ">"), ("I", ">"), ("note", "<")]
    cells = []
    for i in rows[:TABLE_ROWS]:
        note = ""
        if zp.double_diffraction[i]:
            a, b = zp.dd_route[i]
            note = f"forbidden; double diffraction {refl(zp.hkl[a])} + {refl(zp.hkl[b])}"
        r = doc["reflections"][i]
        cells.append([refl(zp.hkl[i]), units.length_text(zp.d_nm[i]), units.reciprocal_text(zp.g_inv_nm[i]),
                      units.reciprocal_text(r["x_inv_nm"]), units.reciprocal_text(r["y_inv_nm"]),
                      units.reciprocal_text(zp.excitation_error_inv_nm[i], 4), f"{zp.intensity[i]:.3g}", note])
    for line in table_lines(header, cells):
        print(line)
    if len(rows) > TABLE_ROWS:
        print(f"... {len(rows) - TABLE_ROWS} more zero-order reflections (all are in --json)")
    n_holz = int(np.sum(~zp.zolz))
    n_forb = int(np.sum(zp.zolz & zp.kinematically_forbidden & ~zp.double_diffraction))
    print(f"{len(rows)} zero-order reflections, {n_holz} higher-order near the Ewald sphere, "
          f"{n_forb} forbidden with no double-diffraction route (in --json)")


def run(args) -> int:
    from saed.files import check_writable
    from saed.report.simulate_json import pattern_json

    for path in (args.json if args.json not in (None, "-") else None, args.image, args.diagram):
        if path:
            check_writable(path)
    if args.image and not args.image.lower().endswith((".png", ".tif", ".tiff")):
        raise InputError(f"--image {args.image}: must end in .png, .tif or .tiff")
    if args.diagram and not args.diagram.lower().endswith((".png", ".pdf", ".svg")):
        raise InputError(f"--diagram {args.diagram}: must end in .png, .pdf or .svg")
    if not 0.0 <= args.show_double_diffraction <= 1.0:
        raise InputError(f"--show-double-diffraction {args.show_double_diffraction:g} must lie between 0 and 1")
    if not math.isfinite(args.rotation):
        raise InputError("--rotation must be a finite number of degrees")
    cal = calibration_from_args(args)
    args.voltage = cal.voltage_kv
    _, zp = build_pattern(args)
    doc = pattern_json(zp, in_plane_rotation_deg=args.rotation)
    if args.json:
        write_json(args.json, doc)
    if args.image:
        from saed.report.render_pattern import write_detector_image
        from saed.synth.zone import detector_image

        det = detector_image(zp, shape_px=(args.image_size, args.image_size),
                             scale_inv_nm_per_px=cal.scale_inv_nm_per_px, center_px=cal.center_px,
                             in_plane_rotation_deg=args.rotation, spot_sigma_px=args.spot_size,
                             double_diffraction_strength=args.show_double_diffraction, noise=args.noise, rng=args.seed)
        write_detector_image(det, args.image)
    if args.diagram:
        from saed.report.render_pattern import render_diagram

        render_diagram(zp, args.diagram, in_plane_rotation_deg=args.rotation, units=units_from_args(args))
    if args.json != "-":
        _print_table(zp, doc, **display_options(args))
        for label, path in (("JSON", args.json), ("image", args.image), ("diagram", args.diagram)):
            if path:
                print(f"{label} written to {path}")
    return 0

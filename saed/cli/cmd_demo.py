"""``saed demo``: index the bundled Co-Cr coating patterns and write the report."""

from __future__ import annotations

import json
import sys
from importlib import resources
from pathlib import Path

from saed.cli.display import add_units_argument, display_options
from saed.errors import InputError

NAME = "demo"
HELP = "index the bundled example patterns (fcc and hcp cobalt grains of a Co-Cr coating) and write a report"
DESCRIPTION = (
    "Index the example patterns that come with saed (synthetic: a Co-Cr wear-resistant coating whose cobalt "
    "grains are fcc or hcp, 200 kV, each with a calibration sidecar) against Co-fcc, Co-hcp and Cr, print a "
    "summary of each and write an HTML report with overlays and the JSON documents into --out. "
    "--make DIR writes the example images and sidecars themselves (they are made reproducibly)."
)
ORDER = 5


def add_arguments(p):
    p.add_argument("--out", metavar="DIR", default="saed-demo",
                   help="folder for the report, overlays and JSON (default ./saed-demo)")
    p.add_argument("--make", metavar="DIR", help="write the example images (TIFF) and their sidecars into DIR and stop")
    add_units_argument(p)


def example_files() -> list[tuple[str, object, object]]:
    """(name, image resource, sidecar resource) of the bundled examples, in order."""
    from saed.synth.demo_set import DEMO_PATTERNS

    root = resources.files("saed").joinpath("data/examples")
    out = []
    for spec in DEMO_PATTERNS:
        img = root.joinpath(spec.name + ".tif")
        side = root.joinpath(spec.name + ".json")
        if not img.is_file() or not side.is_file():
            raise InputError(f"the bundled example {spec.name}.tif (or its .json) is missing from the installed "
                             "package; reinstall saed, or make them with 'saed demo --make DIR'")
        out.append((spec.name, img, side))
    return out


def make_examples(folder) -> list[Path]:
    import tifffile

    from saed.synth.demo_set import DEMO_PATTERNS, make_demo_pattern
    from saed.files import atomic_write_bytes, atomic_write_text

    d = Path(folder)
    if not d.is_dir():
        raise InputError(f"--make {folder}: no such folder")
    written = []
    for spec in DEMO_PATTERNS:
        image, sidecar = make_demo_pattern(spec)
        import io

        buf = io.BytesIO()
        tifffile.imwrite(buf, image, compression="zlib", description=sidecar["description"])
        atomic_write_bytes(d / f"{spec.name}.tif", buf.getvalue())
        atomic_write_text(d / f"{spec.name}.json", json.dumps(sidecar, indent=2) + "\n")
        written += [d / f"{spec.name}.tif", d / f"{spec.name}.json"]
    return written


def run(args) -> int:
    if args.make:
        for p in make_examples(args.make):
            print(p)
        return 0
    import tempfile

    from saed.calibration import read_calibration_file
    from saed.cli.progress import Progress
    from saed.crystal import builtin_phase
    from saed.image.measure import inspect_file
    from saed.index import index_pattern, prepare_phases
    from saed.synth.demo_set import DEMO_PATTERNS, DEMO_PHASES, DEMO_VOLTAGE_KV
    from saed.files import atomic_write_bytes, atomic_write_text
    from saed.report.index_html import ReportEntry, write_report
    from saed.report.index_json import result_json
    from saed.report.index_overlay import overlay_figure_bytes
    from saed.report.index_summary import format_summary

    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {args.out}: exists and is not a folder")
    if not out.exists() and not out.parent.is_dir():
        raise InputError(f"--out {args.out}: folder {out.parent} does not exist")
    out.mkdir(exist_ok=True)
    shown = display_options(args)
    tables = prepare_phases([builtin_phase(n) for n in DEMO_PHASES], voltage_kv=DEMO_VOLTAGE_KV)
    files = example_files()
    entries = []
    desc = {s.name: s.description for s in DEMO_PATTERNS}
    with Progress(len(files), "demo") as bar, tempfile.TemporaryDirectory() as tmp:
        for name, img_res, side_res in files:
            img_path = Path(tmp) / f"{name}.tif"
            side_path = Path(tmp) / f"{name}.json"
            img_path.write_bytes(img_res.read_bytes())
            side_path.write_bytes(side_res.read_bytes())
            cal = read_calibration_file(side_path)
            insp = inspect_file(img_path, cal)
            result = index_pattern(insp.measured, tables, image=insp.image)
            label = f"{name}.tif"
            print(format_summary(result, image=label, top=3, **shown))
            print()
            atomic_write_text(out / f"{name}.json", json.dumps(result_json(result, image=label), indent=2) + "\n")
            png = overlay_figure_bytes(insp.image, result, title=label, ignored=insp.ignored, dpi=90, size_in=7.5,
                                       units=shown["units"])
            atomic_write_bytes(out / f"{name}_overlay.png", png)
            entries.append(ReportEntry(label, insp.image, result, ignored=insp.ignored,
                                       caption=f"Synthetic demo pattern: {desc[name]}.", overlay_png=png))
            bar.update(1, text=name)
    path = write_report(out, entries, title="saed demo: cobalt grains of a Co-Cr wear coating (200 kV)",
                        intro="Synthetic example patterns (invented data) indexed against Co-fcc, Co-hcp and Cr, "
                              "each with its calibration sidecar (camera length 120 mm, 15 \u00b5m pixels).",
                        units=shown["units"])
    print(f"report written to {path}", file=sys.stdout)
    return 0

"""``saed batch``: index many patterns (files, folders, stacks) locally or on a Dask cluster, resumably."""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import signal
import sys
from collections import Counter
from pathlib import Path

from saed.cli.common import (add_calibration_options, add_matching_options, add_phase_option, calibration_from_args,
                             matching_options_from_args, phases_from_args, positive_float)
from saed.cli.progress import Progress, _fmt_s
from saed.errors import InputError
from saed.units import percent

NAME = "batch"
HELP = "index many patterns (files, folders, stacks) on this machine or a Dask cluster; resumable CSV"
DESCRIPTION = (
    "Index every frame of the inputs -- image files, folders of them, multi-page TIFF stacks and 3-D/4-D stacks "
    "in .npy, HDF5 or Zarr (read a slice at a time, never whole) -- and write one CSV row per frame as soon as it "
    "is done. On a scan, frames are solved from their neighbours' solutions where those score as well as a full "
    "search would (the 'search' column says how each frame was solved). "
    "Run the same command again to resume: frames already in --out are skipped. "
    "For a scan, --scan-shape NY NX (or a 4-D stack) also draws phase, zone-family, orientation and "
    "figure-of-merit maps with grain boundaries."
)
ORDER = 30


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be at least 1")
    return v


def add_arguments(p):
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="image files, stacks (.npy, multi-page TIFF) or folders")
    p.add_argument("--out", required=True, metavar="PATH.csv", help="the results CSV (appended to, and resumed from)")
    add_phase_option(p)
    add_calibration_options(p)
    add_matching_options(p)
    p.add_argument("--mask", metavar="PNG", help="mask image of the frames' size: non-zero pixels are ignored in "
                                                 "every frame (a beam stop that stays put)")
    r = p.add_argument_group("where to run")
    r.add_argument("--workers", type=_positive_int, metavar="N",
                   help="local worker processes (default: one per CPU core)")
    r.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running Dask scheduler, e.g. tcp://head-node:8786 (inputs must be on a "
                        "filesystem the workers see)")
    r.add_argument("--connect-timeout", type=positive_float, default=5.0, metavar="S",
                   help="give up on --scheduler after S seconds (default 5)")
    r.add_argument("--worker-timeout", type=positive_float, default=60.0, metavar="S",
                   help="end the run (rows written stay) when the cluster has had no worker for S seconds "
                        "(default 60)")
    i = p.add_argument_group("inputs and outputs")
    i.add_argument("--recursive", action="store_true", help="also search subfolders of input folders")
    i.add_argument("--retry-errors", action="store_true", help="redo the frames whose row in --out is an error")
    i.add_argument("--scan-shape", type=_positive_int, nargs=2, metavar=("NY", "NX"),
                   help="the frames (in input order) form a scan of NY rows by NX columns: draw a map")
    i.add_argument("--map", metavar="PNG", help="where to draw the scan map (default: next to --out, *_map.png)")
    i.add_argument("--summary", metavar="CSV", help="also write the phase / zone-family summary as CSV")
    i.add_argument("--arrays", metavar="PATH.zarr|PATH.h5",
                   help="also write the per-frame table as a Zarr store or HDF5 file of arrays (for notebooks)")
    i.add_argument("--scan-step", type=positive_float, metavar="NM",
                   help="distance between neighbouring probe positions, nm (the maps' scale bar; default: in steps)")
    i.add_argument("--boundary-deg", type=positive_float, default=5.0, metavar="DEG",
                   help="draw a grain boundary where neighbouring orientations differ by more than DEG (default 5)")
    s = p.add_argument_group("search")
    s.add_argument("--full-search", action="store_true",
                   help="solve every frame by the full image stage and full search, as 'saed index' does (no warm "
                        "start from the previous frames; several times slower on a scan)")
    s.add_argument("--check-every", type=int, default=128, metavar="N",
                   help="with the warm start, also solve every N-th frame by the full search and report how often "
                        "the two agree (default 128; 0: never)")


def _say(text: str) -> None:
    print(f"saed batch: {text}", file=sys.stderr)


@contextlib.contextmanager
def _terminate_as_interrupt():
    """SIGTERM (a cluster's time limit, a plain `kill`) ends the run like Ctrl-C: cleanly, rows kept."""
    def handler(signum, frame):
        raise KeyboardInterrupt

    try:
        old = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def _frame_geometry(args, sources, scale_inv_nm_per_px):
    """The mask (read once) and the tables' max |g|, from the frames' size and the (first) scale."""
    from saed.batch.indexing import max_g_for
    from saed.batch.inputs import first_frame_shape
    from saed.image.io import read_mask_image

    shape = first_frame_shape(sources)
    mask = None
    if args.mask:
        if shape is None:
            raise InputError(f"--mask {args.mask}: no frame of the inputs could be read to check its size against")
        mask = read_mask_image(args.mask, shape=shape)
    if args.max_g is not None or shape is None:
        return mask, args.max_g
    return mask, max_g_for(shape, scale_inv_nm_per_px)


def _per_file_calibrations(args, sources, base):
    """Each file's calibration by the resolution order (sidecar, file metadata, calibration history);
    says where each came from. Returns (context_of for the runner, the first scale found or None)."""
    from saed.cli.common import resolve_args_calibration
    from saed.errors import ImageError
    from saed.image.io import read_metadata

    found, counts, lines = {}, Counter(), []
    for src in sources:
        try:
            meta = read_metadata(src.path)
        except ImageError:  # its frames report the problem
            meta = None
        try:
            res = resolve_args_calibration(args, src.path, meta)
        except InputError as exc:
            _say(f"{src.name}: {exc}; indexed uncalibrated")
            counts["none (uncalibrated)"] += 1
            continue
        counts[res.source] += 1
        lines.append(f"  {src.name}: {res.line()}")
        lines.extend(f"    warning: {w}" for w in res.warnings)
        if res.calibration.is_calibrated:
            if abs(res.calibration.voltage_kv - base.voltage_kv) > 0.5:
                _say(f"{src.name}: its calibration is at {res.calibration.voltage_kv:g} kV but the batch runs at "
                     f"{base.voltage_kv:g} kV (give --voltage)")
            found[src.path] = res.calibration
    if len(lines) <= 20:
        for line in lines:
            _say(line)
    _say("calibration per file: " + ", ".join(f"{n} from {k}" for k, n in counts.most_common()))
    first = next(iter(found.values())).scale_inv_nm_per_px if found else None

    def context_of(source):
        return found.get(source.path)

    return context_of, first


def _check_outputs(args, inputs_raw) -> tuple[Path, Path | None, Path | None]:
    from saed.files import check_writable

    out = check_writable(args.out)
    map_path = Path(args.map) if args.map else None
    if map_path is not None and map_path.suffix.lower() != ".png":
        raise InputError(f"--map {args.map}: the map is a PNG; give a name ending in .png")
    summary = Path(args.summary) if args.summary else None
    arrays = Path(args.arrays) if args.arrays else None
    if arrays is not None and arrays.suffix.lower() not in (".zarr", ".h5", ".hdf5"):
        raise InputError(f"--arrays {args.arrays}: give a name ending in .zarr (a Zarr store) or .h5 (an HDF5 file)")
    given = {os.path.abspath(p.partition("::")[0]) for p in inputs_raw}
    for flag, p in (("--out", out), ("--map", map_path), ("--summary", summary), ("--arrays", arrays)):
        if p is None:
            continue
        check_writable(p)
        if os.path.abspath(p) in given:
            raise InputError(f"{flag} {p} is also an input; give another file name")
    names = [os.path.abspath(p) for p in (out, map_path, summary, arrays) if p is not None]
    if len(set(names)) < len(names):
        raise InputError("--out, --map, --summary and --arrays must be different files")
    return out, map_path, summary


def run(args) -> int:
    from saed.batch import discover_inputs, run_batch
    from saed.batch.cluster import dask_client, default_workers
    from saed.batch.indexing import index_frame, make_index_job
    from saed.batch.inputs import check_frame_sizes
    from saed.batch.record import check_run_record
    from saed.batch.results import ResultsFile
    from saed.batch.scanindex import index_scan_frame
    from saed.batch.runner import NoWorkersError, count_todo
    from saed.batch.scan import check_scan_shape

    # Dask's own messages (worker start-up, restarts) only with -v / -vv; saed says what matters.
    # (Importing distributed sets its logger's level, so import it first.)
    import distributed  # noqa: F401

    logging.getLogger("distributed").setLevel({0: logging.CRITICAL, 1: logging.WARNING}.get(args.verbose, logging.INFO))
    if args.workers is not None and args.scheduler is not None:
        raise InputError("give either --workers (a local cluster) or --scheduler (an existing one), not both")
    out, map_path, summary_path = _check_outputs(args, args.inputs)
    matching = matching_options_from_args(args)
    calibration = calibration_from_args(args)
    phases = phases_from_args(args)

    from saed.batch.record import record_path

    arrays_path = Path(args.arrays) if args.arrays else None
    default_map = out.with_name(out.stem + "_map.png")
    inputs = discover_inputs(args.inputs, recursive=args.recursive,
                             exclude=[p for p in (out, map_path, summary_path, default_map, record_path(out),
                                                  arrays_path) if p is not None])
    for s in inputs.skipped:
        _say(str(s))
    if not inputs.sources:
        raise InputError(f"nothing to index: every input was skipped ({len(inputs.skipped)} listed above)")
    scan_shape = None
    lone_scan = len(inputs.sources) == 1 and inputs.sources[0].scan_shape is not None
    if args.scan_shape is not None or map_path is not None or lone_scan:
        scan_shape = check_scan_shape(args.scan_shape, inputs.sources)
        map_path = map_path or default_map

    if args.check_every < 0:
        raise InputError(f"--check-every {args.check_every}: give 0 (never) or a positive number of frames")
    frame_shape = check_frame_sizes(inputs.sources)
    # before the CSV is opened (--retry-errors rewrites it): a resume against other phases is refused untouched
    check_run_record(out, phases, has_rows=_has_rows(out))
    context_of, table_scale = None, calibration.scale_inv_nm_per_px
    if not calibration.is_calibrated and args.calibration is None:
        context_of, table_scale = _per_file_calibrations(args, inputs.sources, calibration)
    else:
        _say(f"calibration: {calibration.scale_inv_nm_per_px:.5g} 1/nm per px for every file "
             f"({'calibration file: ' + args.calibration if args.calibration else 'option'})")
    mask, max_g = _frame_geometry(args, inputs.sources, table_scale)
    with ResultsFile(out, retry_errors=args.retry_errors) as results:
        n_todo = count_todo(inputs.sources, results.done)
        n_files = len(inputs.sources)
        n_local = args.workers or default_workers()
        where = (f"the Dask scheduler at {args.scheduler}" if args.scheduler
                 else f"{n_local} local worker{'s' * (n_local != 1)}")
        _say(f"{inputs.n_frames} frames in {n_files} file{'s' * (n_files != 1)}; "
             f"{inputs.n_frames - n_todo} already in {out}; {n_todo} to index"
             + (f" on {where}" if n_todo else ""))
        outcome = None
        hint = None
        scan = next((s for s in inputs.sources if s.n_frames > 1), None)   # the hint is for files of many frames
        if n_todo and not args.full_search and scan is not None:
            from saed.batch.scanindex import scan_centre_hint

            hint = scan_centre_hint(scan, calibration, mask=mask)
        if n_todo:
            try:
                with _terminate_as_interrupt(), \
                        dask_client(workers=args.workers, scheduler=args.scheduler,
                                    connect_timeout_s=args.connect_timeout) as client:
                    job = make_index_job(phases, calibration, top=args.top, max_g_inv_nm=max_g, mask=mask,
                                         frame_shape=frame_shape, check_every=args.check_every,
                                         centre_hint_px=hint, **matching)
                    frame_fn = index_frame if args.full_search else index_scan_frame
                    with Progress(n_todo, "batch") as bar:
                        outcome = run_batch(inputs, results, frame_fn, job, client=client, progress=bar,
                                            context_of=context_of, no_workers_timeout_s=args.worker_timeout)
            except NoWorkersError as exc:
                raise NoWorkersError(f"{exc}; {results.n_rows} rows are safe in {out}: start workers (or check the "
                                     "cluster) and run the same command again to go on") from None
            except KeyboardInterrupt:
                _say(f"interrupted; {results.n_rows} rows are safe in {out}: run the same command again to go on")
                return 130

    _report(out, inputs, outcome, phases)
    if scan_shape is not None or summary_path is not None:
        _scan_outputs(out, inputs, scan_shape, map_path, summary_path, phases, args)
    if arrays_path is not None:
        from saed.batch.arrays import write_array_set
        from saed.batch.results import iter_rows

        n = write_array_set(iter_rows(out), inputs.sources, arrays_path, phases={p.name: p for p in phases},
                            phase_order=[p.name for p in phases], scan_shape=scan_shape)
        print(f"arrays: {arrays_path} ({n} frames)")
    return 0


def _has_rows(path) -> bool:
    """True when `path` exists and holds more than a header line."""
    try:
        with open(path, "rb") as fh:
            fh.readline()
            return bool(fh.readline().strip())
    except FileNotFoundError:
        return False
    except OSError as exc:
        raise InputError(f"{path}: cannot read the file ({exc.strerror})") from None


def _report(out, inputs, outcome, phases) -> None:
    from saed.batch.results import iter_rows
    from saed.batch.scan import rows_for_sources, summarize
    from saed.crystal.notation import terminal_style
    from saed.report.scan_map import format_summary

    from saed.batch.scanindex import CHECK_DIFFER, CHECK_SAME

    errors: Counter = Counter()
    searches: Counter = Counter()

    def mine():
        for r in rows_for_sources(iter_rows(out), inputs.sources):
            if r.is_error:
                errors[r.status] += 1
            searches[r.search] += 1
            yield r

    summary = summarize(mine(), phases={p.name: p for p in phases})
    line = (f"{out}: {summary.n_frames} rows for these inputs; {summary.n_ok} ok, {summary.n_no_solution} no solution, "
            f"{summary.n_error} errors")
    if outcome is not None and outcome.n_written:
        rate = outcome.n_written / outcome.elapsed_s if outcome.elapsed_s > 0 else float("nan")
        line += f"; {outcome.n_written} new in {_fmt_s(outcome.elapsed_s)} ({rate:.1f} frames/s)"
    print(line)
    if summary.n_ok or summary.n_no_solution:
        print(format_summary(summary, terminal_style()))
    checked = searches[CHECK_SAME] + searches[CHECK_DIFFER]
    if searches["warm"] or checked:
        print(f"warm start: {searches['warm']} frames solved from earlier frames' solutions; "
              + (f"of {checked} checked against the full search, {searches[CHECK_SAME]} agree "
                 f"({percent(searches[CHECK_SAME] / checked):.1f} %)" if checked
                 else "none checked against the full search (see --check-every)")
              + (f"; {searches[CHECK_DIFFER]} differ (search column '{CHECK_DIFFER}')" if searches[CHECK_DIFFER] else ""))
    for status, n in errors.most_common(3):
        print(f"  {n} x {status}")
    if len(errors) > 3:
        print(f"  ... and {len(errors) - 3} other error messages (see the status column of {out})")


def _scan_outputs(out, inputs, scan_shape, map_path, summary_path, phases, args) -> None:
    from saed.batch.results import iter_rows
    from saed.batch.scan import build_scan_map, rows_for_sources, summarize
    from saed.files import atomic_write_text
    from saed.report.scan_map import render_scan_map, summary_csv

    lookup = {p.name: p for p in phases}
    if scan_shape is not None:
        scan = build_scan_map(iter_rows(out), inputs.sources, scan_shape, phases=lookup,
                              phase_order=[p.name for p in phases], boundary_deg=args.boundary_deg)
        title = inputs.sources[0].name if len(inputs.sources) == 1 else f"{len(inputs.sources)} files"
        render_scan_map(scan, map_path, title=title, step_nm=args.scan_step)
        print(f"map: {map_path}")
        summary = scan.summary
    else:
        summary = summarize(rows_for_sources(iter_rows(out), inputs.sources), phases=lookup)
    if summary_path is not None:
        atomic_write_text(summary_path, summary_csv(summary))
        print(f"summary: {summary_path}")

"""Warm tables and the indexing of one file for the page.

The per-phase tables (:func:`saed.index.prepare_phases`) are built once per (phases, voltage,
largest |g|) and kept; the first set is built when the server starts, phase by phase, so the page
can show the progress. Indexing a file is then the image stage and the matcher only, as in
``saed index`` (the same readers, the same :func:`saed.report.index_json.result_json` document).

The page draws the overlay itself (zoom, pan, hover), from :func:`view_of`: per solution the
measured spots with their labels and errors and the simulated zero-order pattern, in the colours
of :data:`saed.report.index_overlay.KIND_STYLE`; the picture underneath is the pattern on the
display stretch of :func:`saed.report.spots_overlay.display_stretch`, reduced to at most
:data:`DISPLAY_MAX_SIDE` pixels per side and sent as raw 8-bit grey bytes.
"""

from __future__ import annotations

import logging
import math
import threading
import time
from dataclasses import dataclass

import numpy as np

from saed.errors import InputError
from saed.index.reach import reach_for_pattern
from saed.index.tables import DEFAULT_MAX_G_INV_NM, IndexTables, prepare_phases
from saed.serve.settings import PhaseBook, Settings

__all__ = ["TableCache", "Indexed", "index_file", "measure_file", "view_of", "display_grey", "max_g_for_pattern",
           "DISPLAY_MAX_SIDE"]

logger = logging.getLogger(__name__)

#: The page's picture of a pattern has at most this many pixels per side (block means beyond).
DISPLAY_MAX_SIDE = 1024


def max_g_for_pattern(measured) -> float:
    """Table reach for a measured pattern, as ``saed index`` sizes it (:mod:`saed.index.reach`).

    Rounded up to a whole 1/nm so that patterns of one session share tables.
    """
    reach = reach_for_pattern(measured, whole_inv_nm=True)
    return DEFAULT_MAX_G_INV_NM if reach is None else reach


class TableCache:
    """Prepared tables per (phases, voltage, max_g), built once; progress of the build in :meth:`status`."""

    def __init__(self, book: PhaseBook, keep: int = 4):
        self.book = book
        self.keep = keep
        self._tables: dict[tuple, IndexTables] = {}
        self._lock = threading.Lock()  # one build at a time
        self._status = {"state": "idle", "done": 0, "total": 0, "phase": "", "message": "", "seconds": None}

    def status(self) -> dict:
        return dict(self._status)

    def get(self, names: tuple[str, ...], voltage_kv: float, max_g_inv_nm: float = DEFAULT_MAX_G_INV_NM) -> IndexTables:
        key = (tuple(names), round(float(voltage_kv), 6), float(max_g_inv_nm))
        t = self._tables.get(key)
        if t is not None:
            return t
        with self._lock:
            t = self._tables.get(key)
            if t is None:
                t = self._build(key)
                self._tables[key] = t
                while len(self._tables) > self.keep:
                    self._tables.pop(next(iter(self._tables)))
            return t

    def _build(self, key) -> IndexTables:
        names, voltage, max_g = key
        t0 = time.perf_counter()
        self._status.update(state="building", done=0, total=len(names), phase="", message="", seconds=None)
        parts = []
        try:
            for i, name in enumerate(names):
                self._status.update(phase=name, done=i)
                parts.extend(prepare_phases([self.book.phase(name)], voltage_kv=voltage, max_g_inv_nm=max_g).phases)
        except InputError as exc:
            self._status.update(state="error", message=str(exc))
            raise
        self._status.update(state="ready", done=len(names), phase="", seconds=round(time.perf_counter() - t0, 2))
        logger.info("tables for %d phases at %g kV up to %g 1/nm in %.1f s", len(names), voltage, max_g,
                    time.perf_counter() - t0)
        return IndexTables(phases=tuple(parts), voltage_kv=float(voltage), max_g_inv_nm=float(max_g))


@dataclass(frozen=True, eq=False)
class Indexed:
    """One indexed file: the JSON document, what the page draws, the grey picture, the result object."""

    doc: dict
    view: dict
    display: bytes
    result: object


def display_grey(image: np.ndarray) -> tuple[bytes, tuple[int, int], int]:
    """The pattern on the display stretch as 8-bit grey bytes (row-major), reduced by an integer factor.

    Returns (bytes, (rows, cols) of the reduced picture, factor). Sent raw: on the loopback a
    megabyte costs less than any image encoding (a PNG of 1024 x 1024 takes ~0.1-0.2 s to write).
    """
    from saed.report.spots_overlay import display_stretch

    img = np.asarray(image, np.float32)
    f = max(1, math.ceil(max(img.shape) / DISPLAY_MAX_SIDE))
    if f > 1:
        r, c = (img.shape[0] // f) * f, (img.shape[1] // f) * f
        acc = np.zeros((r // f, c // f), np.float32)
        for i in range(f):
            for j in range(f):
                acc += img[i:r:f, j:c:f]
        img = acc / (f * f)
    u8 = (display_stretch(img) * 255.0 + 0.5).astype(np.uint8)
    return u8.tobytes(), (int(u8.shape[0]), int(u8.shape[1])), f


def _num(v, nd=3):
    return None if v is None or not math.isfinite(float(v)) else round(float(v), nd)


def _idx(v):
    return None if v is None else [int(x) for x in v]


def _spot_view(s, x: float, y: float) -> dict:
    from saed.crystal.notation import shown_plane
    from saed.report.index_summary import spot_label

    out = {"x": _num(x, 2), "y": _num(y, 2), "kind": s.kind, "hkl": _idx(s.hkil if s.hkil is not None else s.hkl),
           "label_html": spot_label(s, "html"), "d_nm": _num(s.d_nm_measured, 5), "d_calc_nm": _num(s.d_nm_calc, 5),
           "d_error_pct": _num(s.d_error_pct, 2), "residual_px": _num(s.residual_px, 2)}
    if s.kind == "holz-projection" and getattr(s, "projected_hkl", None) is not None:
        # labelled by the zero-layer position it sits on, e.g. 1/3(-422), as in the reports
        out["projected"] = [int(s.projected_denominator),
                            _idx(shown_plane(s.projected_hkl, s.hkil is not None))]
    return out


def _solution_view(sol, measured, word: str) -> dict:
    """Per solution: spots with labels, the simulated pattern, and the notes as HTML (escaped, overbars)."""
    from saed.crystal.notation import UNITS, person_text
    from saed.report.index_summary import other_lookalikes, plain_notes, zone_text

    by_spot = {s.spot_index: s for s in sol.indexed}
    spots = []
    for k in range(len(measured.spots)):
        s = by_spot.get(k)
        x, y = float(measured.spots.x_px[k]), float(measured.spots.y_px[k])
        spots.append({"x": _num(x, 2), "y": _num(y, 2), "kind": "unindexed", "hkl": None} if s is None
                     else _spot_view(s, x, y))
    pred = [[_num(x, 1), _num(y, 1), _num(i, 3), 1 if k == "double-diffraction" else 0]
            for (x, y), i, k in zip(np.asarray(sol.predicted_xy_px), np.asarray(sol.predicted_intensity),
                                     sol.predicted_kind)]
    def notes_in(units) -> list[str]:
        notes = []
        if sol.mistilt is not None:
            notes.append(f"<b>Mistilt.</b> {person_text(sol.mistilt.advice, 'html')}")
        notes += [person_text(n, "html") for n in plain_notes(sol, units, "unicode")]
        for head, sep, tilt in other_lookalikes(sol, "html", units):
            notes.append(f"<b>{head[0].upper() + head[1:]}.</b> {person_text(sep, 'html')}"
                         + (f" <i>{person_text(tilt, 'html')}</i>" if tilt else ""))
        return notes

    m = sol.mistilt
    # the notes quote reciprocal lengths: written once per unit the page offers, so switching is instant
    by_units = {name: notes_in(u) for name, u in UNITS.items()}
    return {"spots": spots, "predicted": pred, "notes_html": by_units["nm"], "notes_html_by_units": by_units,
            "confidence": word,
            "zone_html": zone_text(sol, "html"), "zone_plain": zone_text(sol, "plain"),
            "laue_center_px": ([_num(m.laue_center_px[0], 1), _num(m.laue_center_px[1], 1)]
                               if m is not None and m.reliable and m.tilt_deg >= 0.15 else None),
            "scale_inv_nm_per_px": _num(sol.scale_inv_nm_per_px, 7)}


def view_of(result, *, factor: int) -> dict:
    """What the page draws for a result: per solution (and the near miss) spots, labels, predictions, notes."""
    from saed.crystal.notation import person_text
    from saed.report.index_overlay import KIND_STYLE, PRED_COLOUR
    from saed.report.crystals_report import crystals_html, crystals_view, further_crystals_text
    from saed.report.index_summary import CONFIDENCE_MEANING, SCORE_MEANING, confidence_word

    m = result.measured
    sols = [_solution_view(s, m, confidence_word(result) if i == 0 else "") for i, s in enumerate(result.solutions)]
    near = None if result.near_miss is None else _solution_view(result.near_miss, m, "near miss")
    bare = [{"x": _num(float(x), 2), "y": _num(float(y), 2), "kind": "unindexed", "hkl": None}
            for x, y in zip(m.spots.x_px, m.spots.y_px)]
    cal = m.calibration
    return {
        "display_factor": factor, "image_shape": [int(v) for v in m.image_shape],
        "center_px": [_num(m.center_px[0], 2), _num(m.center_px[1], 2)],
        "solutions": sols, "near_miss": near, "spots": bare,
        "calibrated": bool(cal is not None and cal.is_calibrated),
        "calibration_source": describe_source(cal),
        "kind_style": {k: {"colour": c, "dash": d, "label": lab} for k, (c, d, lab) in KIND_STYLE.items()},
        "predicted_colour": PRED_COLOUR,
        "notes_html": [person_text(n, "html") for n in list(m.notes) + list(result.notes)],
        "message_html": person_text(result.message, "html") if result.message else "",
        "score_meaning": SCORE_MEANING, "confidence_meaning": CONFIDENCE_MEANING,
        # several crystals in one pattern: what the answer line adds, and the crystals and their
        # relationship as the HTML report shows them ('' for one crystal)
        "crystals_more_html": further_crystals_text(result, "html"),
        "crystals_html": crystals_html(result, with_result_notes=False),
        # crystals 2 and 3 drawn over solution 1 in their own colours, as the overlay draws them (None for one)
        "crystals_view": crystals_view(result),
    }


def describe_source(cal) -> str:
    """Where the calibration came from, in words for the page."""
    if cal is None or not cal.is_calibrated:
        return "none: indexed by spacing ratios and angles; the scale shown is implied by the solution"
    src = str(cal.source or "")
    if src.endswith("(TIFF resolution tags)"):
        return "the file's own TIFF resolution tags"
    if src.lower().endswith(".json"):
        return f"calibration file {src}"
    return src or "options"


def measure_file(path, settings: Settings):
    """Read one file and measure its pattern with the page's calibration: (inspection, resolved calibration).

    Raises SaedError (one line) on bad input.
    """
    from saed.calibrate.resolve import resolve_calibration
    from saed.image.io import read_pattern
    from saed.image.measure import inspect_file

    settings.calibration()  # contradicting settings fail first
    image, meta = read_pattern(path)
    # the resolution order of every image command (docs/calibration.md): the page's settings, else the
    # file's sidecar, its own metadata (a DM4 from the acquisition folder), the calibration history
    resolved = resolve_calibration(path, meta, scale_inv_nm_per_px=settings.scale_inv_nm_per_px,
                                   camera_length_mm=settings.camera_length_mm, pixel_pitch_um=settings.pixel_pitch_um,
                                   voltage_kv=None if settings.calibration_file else settings.voltage_kv,
                                   calibration_file=settings.calibration_file)
    return inspect_file(path, resolved.calibration, image=image), resolved


def index_file(path, settings: Settings, cache: TableCache, *, top: int = 5, name: str = "",
               options: dict | None = None, max_g_inv_nm: float | None = None) -> Indexed:
    """Read and index one file with warm tables; raises SaedError (one line) on bad input.

    `options`: further keyword options of :func:`saed.index.index_pattern` (tolerances, largest zone
    index); the holder's alpha-axis direction comes from `settings`. `max_g_inv_nm` fixes the tables'
    reach (``--max-g``); default :func:`max_g_for_pattern`.
    """
    from saed.index import index_pattern
    from saed.report.index_json import result_json

    insp, resolved = measure_file(path, settings)
    measured = insp.measured
    reach = float(max_g_inv_nm) if max_g_inv_nm is not None else max_g_for_pattern(measured)
    tables = cache.get(settings.phases, measured.calibration.voltage_kv, reach)
    opts = {k: v for k, v in (options or {}).items() if v is not None}
    result = index_pattern(measured, tables, top=top, holder_alpha_axis_deg=settings.alpha_axis_deg, image=insp.image,
                           **opts)
    doc = result_json(result, image=name or str(path))
    doc.update(resolved.to_json())  # calibration_source: one of the contract's values
    if resolved.source == "option":
        doc["calibration_source_detail"] = describe_source(settings.calibration())
    grey, shape, factor = display_grey(insp.image)
    view = view_of(result, factor=factor)
    view["display_shape"] = list(shape)
    return Indexed(doc, view, grey, result)

"""The per-frame function of ``saed batch``: index one frame with the real indexer, return its CSV row.

The per-phase tables (:func:`saed.index.prepare_phases`: reflections, structure factors,
reflection-pair tables) are built once in the client, bundled with the calibration into
an :class:`IndexJob`, and sent to each worker once; :func:`index_frame` then only runs
:func:`saed.index.index_image` on a frame.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from saed.batch.results import Row
from saed.calibration import Calibration
from saed.readonly import frozen_array

__all__ = ["IndexJob", "make_index_job", "index_frame", "max_g_for", "row_from_result",
           "row_from_solutions", "lookalike_note"]


@dataclass(frozen=True)
class IndexJob:
    """What every frame of a batch shares: the prepared phases, the calibration and the matching options.

    ``mask``: (rows, cols) bool, True where pixels are ignored (a beam stop that stays put), or
    None; ``options``: keyword options of :func:`saed.index.index_pattern` as (name, value) pairs;
    ``frame_shape``: (rows, cols) every frame must have (None: not checked); ``check_every``: on a
    scan (:func:`saed.batch.scanindex.index_scan_frame`), every N-th frame is also solved by the
    full image stage and full search, to measure how often the warm start agrees (0: never);
    ``centre_hint_px``: (x, y) where the direct beam of a scan's frames is expected (the full image
    stage's centre on the first frame of the run's first file of many frames,
    :func:`saed.batch.scanindex.scan_centre_hint`), from which a scan task that starts inside a file starts
    the lean image stage; None, and always for a file's frame 0: the full image stage.
    """

    tables: object
    calibration: Calibration
    top: int = 5
    mask: np.ndarray | None = None
    options: tuple[tuple[str, object], ...] = ()
    frame_shape: tuple[int, int] | None = None
    check_every: int = 128
    centre_hint_px: tuple[float, float] | None = None

    def __post_init__(self):
        if self.mask is not None:
            object.__setattr__(self, "mask", frozen_array(self.mask, bool))
        if self.centre_hint_px is not None:
            object.__setattr__(self, "centre_hint_px", (float(self.centre_hint_px[0]), float(self.centre_hint_px[1])))
        object.__setattr__(self, "options", tuple((k, v) for k, v in dict(self.options).items() if v is not None))


def max_g_for(frame_shape, scale_inv_nm_per_px: float | None) -> float | None:
    """The largest |g| a spot on a detector of `frame_shape` can have, 16 to 30 1/nm (None: uncalibrated).

    ``saed index`` sizes its tables by the farthest measured spot (at least 16, at most 30 1/nm);
    a batch sizes them once, by the farthest point a spot can reach: 1.05 x the half-diagonal.

    >>> max_g_for((256, 256), 0.08), max_g_for((2048, 2048), 0.0558)
    (16.0, 30.0)
    """
    from saed.index.reach import reach_for_frame

    return reach_for_frame(frame_shape, scale_inv_nm_per_px)


def make_index_job(phases, calibration: Calibration, *, top: int = 5, max_g_inv_nm: float | None = None,
                   mask=None, frame_shape=None, check_every: int = 128, centre_hint_px=None, **options) -> IndexJob:
    """Prepare `phases` once (at the calibration's voltage) for a batch; `options` go to index_pattern."""
    from saed.index import prepare_phases

    tables = prepare_phases(phases, voltage_kv=calibration.voltage_kv, max_g_inv_nm=max_g_inv_nm)
    shape = None if frame_shape is None else (int(frame_shape[0]), int(frame_shape[1]))
    return IndexJob(tables, calibration, int(top), mask, tuple(options.items()), shape, int(check_every), centre_hint_px)



def _one_line(parts) -> str:
    return " | ".join(" ".join(str(p).split()) for p in parts if p)


def _zone_of(zone_axis, zone_axis_4) -> tuple[int, ...]:
    """The zone a person reads: 4-index for hexagonal axes, else 3-index."""
    return tuple(zone_axis_4) if zone_axis_4 is not None else tuple(zone_axis)


def lookalike_note(best) -> str:
    """The look-alike cautions of `best` (ambiguous or close), hexagonal zones in 4-index form."""
    close = [lk for lk in best.lookalikes if lk.relation in ("ambiguous", "close")]
    return _one_line(f"{lk.relation}: {lk.phase_name} [{' '.join(map(str, _zone_of(lk.zone_axis, lk.zone_axis_4)))}]"
                     for lk in close[:2])


def row_from_result(result, *, name: str, frame: int, note: str | None = None, search: str = "") -> Row:
    """The CSV row of an IndexResult: best solution, runner-up and message (`note` replaces the look-alike part)."""
    measured = result.measured
    n_spots = len(measured.spots) if measured is not None else None
    if not result.solutions:
        return Row(name, frame, status="no-solution", n_spots=n_spots, note=_one_line([result.message]), search=search)
    best = result.solutions[0]
    second = result.solutions[1] if len(result.solutions) > 1 else None
    return row_from_solutions(best, second, name=name, frame=frame, n_spots=n_spots, search=search,
                              note=_one_line([result.message, lookalike_note(best) if note is None else note]))


def row_from_solutions(best, second, *, name: str, frame: int, n_spots, note: str, search: str) -> Row:
    """A row for an indexed frame from its best and second-ranked Solution (or None)."""
    return Row(
        name, frame, status="ok", phase=best.phase_name, zone_axis=best.zone_axis, score=best.score,
        in_plane_rotation_deg=best.in_plane_rotation_deg, scale_inv_nm_per_px=best.scale_inv_nm_per_px,
        n_spots=n_spots, zone_axis_4=best.zone_axis_4,
        runner_up_phase=second.phase_name if second else "",
        runner_up_zone_axis=_zone_of(second.zone_axis, second.zone_axis_4) if second else None,
        runner_up_score=second.score if second else None, note=note, search=search,
    )


def index_frame(image: np.ndarray, job: IndexJob, *, name: str, frame: int, context=None) -> Row:
    """Index one frame by a full search; the row carries the best solution, the runner-up and the indexer's message.

    `context` may be a :class:`~saed.calibration.Calibration` for this file (its sidecar, metadata
    or history calibration: saed.calibrate.resolve), used instead of the job's. No solution is status ``no-solution`` (not an
    error); errors raised by the indexer propagate to the runner, which records them.
    """
    from saed.index import index_image

    cal = context if isinstance(context, Calibration) else job.calibration
    # no mistilt fit (index_pattern's mistilt=False): the CSV has no column for it, and the answer is the same
    result = index_image(image, job.tables, cal, top=job.top, mask=job.mask, source=f"{name} frame {frame}",
                         mistilt=False, tilt_advice=False, **dict(job.options))
    return row_from_result(result, name=name, frame=frame, search="full")

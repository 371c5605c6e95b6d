"""The per-frame function for scans: a lean image stage and a warm start from the last few solutions.

Neighbouring probe positions of a scan usually see the same grain, and the direct beam stays
put. :func:`index_scan_frame` uses both, without changing what a frame is indexed as:

1. **Image stage.** Each frame is measured by
   :func:`saed.image.smallframe.measure_small_frame`, starting from the previous frame's centre; the
   first frame of a task that starts inside a file starts from the run's centre hint
   (``job.centre_hint_px``: the full image stage's centre on the first frame of the run's first file of
   many frames, :func:`scan_centre_hint`); a file's frame 0 (the only frame of a single pattern), and a
   task's first frame without a hint, are measured by the full stage
   (:func:`saed.image.measure.measure_pattern`)
   (frames above :data:`~saed.image.smallframe.SMALL_FRAME_MAX_PIXELS`, and frames where the
   direct beam is not found near that centre, go through the full stage). A frame with no spots
   (vacuum, amorphous film) is decided there, in about 0.45 ms of CPU on a 256 x 256 frame.
2. **Warm start.** The solutions of the last :data:`WARM_ENTRIES` distinct grains solved by full
   search in this task (a task is up to 256 consecutive frames; each starts afresh, so the rows do not
   depend on which worker ran which task) (the best and the runner-up of each) are refined against the frame's
   spots with the full search's own scoring (:func:`saed.index.score.score_figure`, the steps of
   :func:`~saed.index.score.score_candidate` without the per-spot records). The grains are
   tried most recent first, and a grain's solution is accepted only when it scores as well as a full
   search would:

   * it leaves no more of the spot weight unexplained (unindexed, or only a forbidden reflection)
     than the full search it came from did, plus :data:`UNEXPLAINED_MARGIN`;
   * it is the best solution of the full search it came from, and still scores above that search's
     runner-up (a look-alike that overtakes it is left for a full search to decide), and
   * its score is at most :data:`WARM_SCORE_TOLERANCE` below that full search's score, and
     above :data:`saed.index.match.MIN_SCORE`.

   Otherwise the frame gets the full search (:func:`saed.index.index_pattern`) on the lean
   stage's spots (``search`` = ``search``), which then becomes a warm-start entry. Frames measured
   by the full stage and solved by the full search -- exactly what ``saed index`` does -- are
   ``search`` = ``full``.
   A frame in which the lean stage finds no spot is ``search`` = ``empty`` (status ``no-solution``).
3. **Checked frames.** Every ``job.check_every``-th frame (flat index ``k`` with ``k % N == N // 2``) is
   also measured by the
   full image stage and solved by the full search, the answer of ``saed index``; the row holds
   that answer and says whether the warm start agreed (``search`` = ``full+warm same`` or
   ``full+warm differ``: same phase and same Laue-equivalent zone axis), so the agreement rate
   of a run can be read from its CSV.

Warm rows carry the best and the runner-up among the warm candidates and the look-alike note of
the full search they came from (the look-alike relation of two solutions does not change from
frame to frame of one grain). No row computes the mistilt (``index_pattern(mistilt=False)``; the CSV has
no column for it, and it changes nothing else).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from saed.batch.indexing import IndexJob, lookalike_note, row_from_result, row_from_solutions
from saed.batch.results import Row
from saed.calibration import Calibration
from saed.errors import ImageError
from saed.units import fraction

__all__ = ["index_scan_frame", "scan_centre_hint", "WARM_ENTRIES", "WARM_SCORE_TOLERANCE", "CHECK_SAME", "CHECK_DIFFER", "EMPTY", "FULL",
           "LEAN_SEARCH"]

#: How many distinct earlier solutions (grains) a worker thread keeps for the warm start.
WARM_ENTRIES = 8
#: A warm solution may score this much below the full search it came from (frame-to-frame noise).
WARM_SCORE_TOLERANCE = 0.05
#: A warm solution may leave this much more of the spot weight unexplained than its full search did.
UNEXPLAINED_MARGIN = 0.03
#: Grains whose lattice catches less than (1 - unexplained - this) of the spot weight are not refined.
QUICK_MARGIN = 0.25
#: ``search`` values of checked frames.
CHECK_SAME, CHECK_DIFFER = "full+warm same", "full+warm differ"
#: ``search`` of a frame measured by the full image stage and solved by the full search (as ``saed index``).
FULL = "full"
#: ``search`` of a frame solved by the full search on the spots of the lean image stage.
LEAN_SEARCH = "search"
#: ``search`` of a frame where the lean stage found no spot (vacuum, amorphous film): nothing to search.
EMPTY = "empty"


@dataclass
class _Entry:
    """One grain: candidates rebuilt from a full search's best and runner-up, its score and note."""

    cands: tuple
    key: tuple
    ref_score: float
    note: str
    unexplained: float = 0.0


class _State(threading.local):
    def __init__(self):
        self.job_id = None
        self.centre = None
        self.entries: list[_Entry] = []


_STATE = _State()


def _state_for(job) -> _State:
    st = _STATE
    if st.job_id != id(job):
        st.job_id, st.centre, st.entries = id(job), None, []
    return st


def _new_task(job) -> None:
    """Forget the previous task's centre and grains: a task's rows depend on its own frames only, so a
    run gives the same rows whichever worker takes which task, and a resumed run the same as an
    uninterrupted one wherever a task was not cut short."""
    st = _STATE
    st.job_id, st.centre, st.entries = id(job), None, []


def _candidate(tables, sol):
    """A Candidate at `sol`'s zone, orientation and scale (what the full search's scoring refines)."""
    from saed.index.candidates import Candidate

    pi = tables.names.index(sol.phase_name)
    pt = tables.phases[pi]
    return Candidate(pi, -1, -1, tuple(int(v) for v in sol.zone_axis), pt.canonical_zone(sol.zone_axis),
                     np.asarray(sol.orientation_matrix, float), float(sol.scale_inv_nm_per_px), 1.0)


def _unexplained(sol, weight: np.ndarray) -> float:
    """Fraction of the spot weight `sol` leaves unindexed or explains only as forbidden reflections."""
    bad = np.array([s.kind in ("unindexed", "forbidden") for s in sol.indexed], bool)
    return float(np.sum(weight[bad])) if len(bad) == len(weight) else 1.0


def _remember(st: _State, tables, result) -> None:
    from saed.index.candidates import spot_set

    if not result.solutions:
        return
    sols = result.solutions[:2]
    cands = tuple(_candidate(tables, s) for s in sols)
    key = (cands[0].phase_index, cands[0].canonical_zone)
    st.entries = [e for e in st.entries if e.key != key]
    left = _unexplained(sols[0], spot_set(result.measured).weight)
    st.entries.insert(0, _Entry(cands, key, float(sols[0].score), lookalike_note(sols[0]), left))
    del st.entries[WARM_ENTRIES:]


def _options(job: IndexJob, measured):
    from saed.index.match import DEFAULT_LENGTH_TOL_PCT

    opts = dict(job.options)
    cal = measured.calibration
    scale = cal.scale_inv_nm_per_px if cal is not None else None
    lt = opts.get("length_tol_pct")
    return scale, fraction(DEFAULT_LENGTH_TOL_PCT if lt is None else float(lt)), cal.pixel_pitch_um if cal else None


def _warm(measured, job: IndexJob, st: _State):
    """(best, second or None, entry) when a warm solution is accepted, else None."""
    from saed.index.candidates import quick_scores, spot_set
    from saed.index.match import MIN_SCORE, REL_POS_TOL
    from saed.index.score import score_figure

    if not st.entries or len(measured.spots) < 2:
        return None
    spots = spot_set(measured)
    scale, length_tol, _ = _options(job, measured)

    def score(c):
        # the full search's scoring, keeping what the row shows (no per-spot records: same numbers)
        return score_figure(c, job.tables, spots, measured, calibrated_scale=scale, length_tol=length_tol,
                            rel_pos_tol=REL_POS_TOL)

    # the most recent grain first; the first whose best explains the frame is the answer, unless its own
    # runner-up (a look-alike) now scores higher: that is left to a full search
    for k, e in enumerate(st.entries):
        c = e.cands[0]
        # a vectorised look first (the full search's own first filter): does this grain's lattice
        # land on the frame's spots at all?
        quick = quick_scores(job.tables.phases[c.phase_index], c.u_matrix[None], np.array([c.scale_inv_nm_per_px]),
                             spots, rel_tol=REL_POS_TOL)[0]
        if quick < 1.0 - e.unexplained - QUICK_MARGIN:
            continue
        best = score(c)
        if best.unexplained_weight > e.unexplained + UNEXPLAINED_MARGIN:
            continue
        if best.score < max(MIN_SCORE, e.ref_score - WARM_SCORE_TOLERANCE):
            continue
        second = score(e.cands[1]) if len(e.cands) > 1 else None
        if second is not None and (second.score, second.phase_name) > (best.score, best.phase_name):
            return None
        if k:
            st.entries.insert(0, st.entries.pop(k))
        return best, (second if second is not None and second.score >= MIN_SCORE else None), e
    return None


def _full(measured, job: IndexJob):
    from saed.index import index_pattern

    # no mistilt fit: the CSV never shows it, and it is about two thirds of a search on a scan frame
    # nor the look-alikes' separating tilts: a row names the look-alike, not the tilt that tells it apart
    return index_pattern(measured, job.tables, top=job.top, mistilt=False, tilt_advice=False, **dict(job.options))


def _same(row: Row, best, tables) -> bool:
    if row.status != "ok" or row.phase != best.phase_name:
        return False
    pt = tables.table(row.phase)
    return pt.canonical_zone(row.zone_axis) == pt.canonical_zone(best.zone_axis)


def index_scan_frame(image: np.ndarray, job: IndexJob, *, name: str, frame: int, context=None) -> Row:
    """Index one frame of a scan: lean image stage and warm start, full search where they cannot vouch.

    Same signature and row as :func:`saed.batch.indexing.index_frame`; ``search`` says which way
    the frame was solved (see the module notes).
    """
    from saed.image.measure import measure_pattern
    from saed.image.smallframe import SMALL_FRAME_MAX_PIXELS, measure_small_frame

    cal = context if isinstance(context, Calibration) else job.calibration
    source = f"{name} frame {frame}"
    if job.frame_shape is not None and tuple(image.shape) != tuple(job.frame_shape):
        raise ImageError(f"{source}: the frame is {image.shape[0]}x{image.shape[1]} pixels, the run's frames are "
                         f"{job.frame_shape[0]}x{job.frame_shape[1]}")
    st = _state_for(job)
    floats = None                                 # the frame as float32, made only for the full stage

    def as_float32():
        nonlocal floats
        if floats is None:
            floats = np.ascontiguousarray(image, dtype=np.float32)      # as saed.image.io.check_image makes it
        return floats

    # the run's hint serves tasks that start inside a file of many frames (a scan): frame 0 of a file -- the
    # only frame of a single pattern -- is measured by the full stage, as `saed index` measures it
    hint = st.centre if st.centre is not None else (cal.center_px or (job.centre_hint_px if frame > 0 else None))
    measured = None
    if hint is not None and image.size <= SMALL_FRAME_MAX_PIXELS:
        measured = measure_small_frame(image, cal, centre_hint_px=hint, mask=job.mask, source=source)
    full_stage = measured is None
    if full_stage:
        measured = measure_pattern(as_float32(), cal, mask=job.mask, source=source)
    st.centre = measured.center_px
    # checked frames sit mid-way between multiples of N, away from the task starts (tasks start at
    # multiples of their size, where the full stage runs anyway)
    check = job.check_every > 0 and frame % job.check_every == job.check_every // 2
    if not full_stage and len(measured.spots) == 0 and not check:
        return row_from_result(_full(measured, job), name=name, frame=frame, search=EMPTY)
    warm = None if full_stage else _warm(measured, job, st)
    if warm is not None and not check:
        best, second, entry = warm
        return row_from_solutions(best, second, name=name, frame=frame, n_spots=len(measured.spots),
                                  note=entry.note, search="warm")
    if check and not full_stage:
        measured = measure_pattern(as_float32(), cal, mask=job.mask, source=source)
    result = _full(measured, job)
    _remember(st, job.tables, result)
    search = FULL if (full_stage or check) else LEAN_SEARCH
    if warm is not None:
        row = row_from_result(result, name=name, frame=frame)
        search = CHECK_SAME if _same(row, warm[0], job.tables) else CHECK_DIFFER
    return row_from_result(result, name=name, frame=frame, search=search)


def scan_centre_hint(source, calibration: Calibration, *, mask=None) -> tuple[float, float] | None:
    """Where the direct beam is on the first frame of `source` (a :class:`~saed.batch.inputs.FrameSource`),
    by the full image stage; None when the frame cannot be read or measured, or is too large for the lean stage.

    Measured once per run in the client and handed to every task (``IndexJob.centre_hint_px``), so a
    task's first frame starts the lean image stage from it instead of running the full stage: the
    rows do not depend on which worker runs which task, and a resumed run uses the same hint. A task
    whose first frame shows no direct beam near the hint falls back to the full stage, as before.
    """
    from saed.errors import SaedError
    from saed.image.io import check_image, read_image
    from saed.image.measure import measure_pattern
    from saed.image.smallframe import SMALL_FRAME_MAX_PIXELS

    try:
        if source.stack:
            from saed.batch.stacks import read_frames

            got = read_frames(source.path, (0,))[0]
            if isinstance(got, BaseException):
                return None
        else:
            got = read_image(source.path, frame=0)
        image = check_image(got, name=source.name)
        if image.size > SMALL_FRAME_MAX_PIXELS:
            return None
        measured = measure_pattern(image, calibration, mask=mask, source=f"{source.name} frame 0")
    except SaedError:
        return None
    cx, cy = measured.center_px
    return (float(cx), float(cy))


index_scan_frame.new_task = _new_task
#: the runner may hand this function an 8- or 16-bit frame as recorded (no float32 copy; see runner._checked)
index_scan_frame.takes_counts = True

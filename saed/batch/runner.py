"""Running a per-frame function over many frames on a Dask cluster, rows back as they finish.

The client side (:func:`run_frames`) keeps a bounded window of tasks in flight
(``distributed.wait``, first completed), so a stack of a million frames costs the client no more
memory than one of a thousand, and hands each finished task's rows to a callback (the
CSV writer) at once. The worker side (:func:`process_chunk`) reads each frame of its
chunk from disk itself (``saed.image.io.read_image``: a ``.npy`` stack through a memory
map, a TIFF page by page) and turns every failure of one frame into an error row, so
one bad frame never stops the run.

The data every frame needs (per-phase tables, calibration) is sent to the workers once
(:func:`share`: a worker plugin, which workers that restart or join later receive too) and
passed to tasks by reference.

On a cluster, workers open the files by absolute path: the inputs must be on a
filesystem the workers see (as on any shared-filesystem cluster).

A watchdog ends a run whose cluster has lost every worker (:class:`NoWorkersError` after
:data:`NO_WORKERS_TIMEOUT_S`), instead of waiting for a worker that never comes back.
"""

from __future__ import annotations

import asyncio
import logging
import os
import time
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator

import numpy as np

from saed.batch.inputs import FrameSource
from saed.batch.results import Row, error_status
from saed.errors import SaedError

__all__ = ["Chunk", "plan_chunks", "count_todo", "chunk_size_for", "process_chunk", "run_frames", "share", "unshare",
           "SharedRef", "NoWorkersError", "NO_WORKERS_TIMEOUT_S"]

logger = logging.getLogger(__name__)

#: The most frames one task holds (a task's rows are written together when it ends; a scan's warm
#: start carries from frame to frame within a task).
MAX_CHUNK_FRAMES = 256
#: The most pixels one task reads at once (256 frames of 256 x 256, 32 MB of uint16; 16 of 1024 x 1024).
MAX_CHUNK_PIXELS = 256 * 256 * 256
#: How often a single frame whose worker died is run alone before it gets an error row.
_SINGLE_FRAME_ATTEMPTS = 1
#: A run with tasks left but no worker on the cluster for this long ends with :class:`NoWorkersError`
#: (seconds): a local cluster restarts a killed worker within seconds, a cluster whose workers are all
#: gone (killed with their nannies, stopped by a batch system) would otherwise be waited for forever.
NO_WORKERS_TIMEOUT_S = 60.0
#: How long the client waits for a task to end before it looks whether any worker is left (seconds).
_POLL_S = 1.0
#: How long fetching a finished task's rows may take before the task is taken as lost with its worker
#: (seconds; milliseconds normally, more than a second on a machine loaded 8 times over).
_FETCH_S = 30.0


class NoWorkersError(SaedError):
    """The cluster has had no worker for the watchdog's time while tasks were left (rows written stay)."""


@dataclass(frozen=True)
class Chunk:
    """Consecutive frames of one source for one task.

    ``context`` is an optional per-source value handed to the frame function (e.g. a
    calibration read from that file's tags); it must be picklable.
    """

    name: str
    path: str
    frames: tuple[int, ...]
    context: object = None
    file_id: str = ""
    stack: bool = False
    retried: bool = False

    def single(self, k: int, *, retried: bool = False) -> "Chunk":
        """The same source, frame `k` alone (`retried`: after a worker died on a task holding it)."""
        return Chunk(self.name, self.path, (k,), self.context, self.file_id, self.stack, retried)


def count_todo(sources: Iterable[FrameSource], done) -> int:
    """Frames of `sources` whose (path, file_id, frame) key is not in `done`."""
    if not done:
        return sum(s.n_frames for s in sources)
    return sum(1 for s in sources for k in range(s.n_frames) if (s.path, s.file_id, k) not in done)


#: A run is cut into at least this many tasks where frames allow (work for 2 workers x 4 tasks).
MIN_TASKS = 8


def chunk_size_for(n_frames: int, frame_pixels: int | None = None) -> int:
    """Frames per task: 1 to :data:`MAX_CHUNK_FRAMES` (and :data:`MAX_CHUNK_PIXELS` when the frame size is
    known), at least :data:`MIN_TASKS` tasks where there are frames enough.

    It depends on the input alone, not on the cluster or on what is already done, so the same input
    is always cut into the same tasks (the scan's warm start works within a task: same tasks, same rows).

    >>> chunk_size_for(65536), chunk_size_for(4096), chunk_size_for(40), chunk_size_for(3), chunk_size_for(4096, 1024 * 1024)
    (256, 256, 5, 1, 16)
    """
    top = MAX_CHUNK_FRAMES if not frame_pixels else max(1, min(MAX_CHUNK_FRAMES, MAX_CHUNK_PIXELS // frame_pixels))
    return max(1, min(top, n_frames // MIN_TASKS))


def plan_chunks(sources: Iterable[FrameSource], done, *, chunk_frames: int,
                context_of: Callable[[FrameSource], object] | None = None) -> Iterator[Chunk]:
    """Chunks of up to `chunk_frames` consecutive frames not in `done`, source by source (lazy).

    Chunks never cross a multiple of `chunk_frames` (frames 0-63, 64-127, ... for 64), so a run
    cuts a file into the same tasks whichever frames are already done: a frame function that
    carries work from frame to frame within a task (the scan's warm start) gives the same rows.

    >>> from saed.batch.inputs import FrameSource
    >>> [c.frames for c in plan_chunks([FrameSource("a", "/a", 10)], {("/a", "", 1)}, chunk_frames=4)]
    [(0,), (2, 3), (4, 5, 6, 7), (8, 9)]
    """
    for src in sources:
        ctx = context_of(src) if context_of else None
        run: list[int] = []

        def chunk():
            return Chunk(src.name, src.path, tuple(run), ctx, src.file_id, src.stack)

        for k in range(src.n_frames):
            if run and k % chunk_frames == 0:
                yield chunk()
                run = []
            if (src.path, src.file_id, k) in done:
                if run:
                    yield chunk()
                    run = []
                continue
            run.append(k)
        if run:
            yield chunk()


def _frame_error(name: str, path: str, frame: int, exc: BaseException) -> str:
    """The message of `exc` without the file (and frame) it names: the row already says which, and
    the summary groups equal messages.

    >>> _frame_error("a.npy", "/d/a.npy", 3, ValueError("/d/a.npy frame 3: 12 pixels are NaN"))
    '12 pixels are NaN'
    """
    text = " ".join(str(exc).split())
    base = path.partition("::")[0]
    for who in (path, name, base, os.path.basename(base)):
        for prefix in (f"{who} frame {frame}: ", f"{who}: "):
            if text.startswith(prefix):
                return text[len(prefix):] or exc.__class__.__name__
    for who in (path, base, name):
        text = text.replace(who, os.path.basename(base))
    return text or exc.__class__.__name__


def process_chunk(chunk: Chunk, frame_fn, shared) -> list[Row]:
    """Worker side: read and process each frame of `chunk`; one Row per frame, never raises for a frame.

    `frame_fn(image, shared, *, name, frame, context) -> Row` does the work for one frame.
    A :class:`~saed.errors.SaedError` (unreadable frame, NaN pixels, ...) becomes
    ``error: <message>``; any other exception from one frame becomes ``error: internal
    error (<class>: <message>)`` (its traceback is logged at debug level on the worker), so
    that a fault on one frame in ten thousand does not end the run.
    """
    from dataclasses import replace

    from saed.image.io import check_image, read_image

    shared = _resolve(shared)
    new_task = getattr(frame_fn, "new_task", None)
    if new_task is not None:
        new_task(shared)                      # a frame function's per-task state starts afresh
    images = None
    if chunk.stack:
        from saed.batch.stacks import read_frames

        try:
            images = read_frames(chunk.path, chunk.frames)
        except SaedError as exc:
            images = {k: exc for k in chunk.frames}
    rows = []
    for k in chunk.frames:
        try:
            if images is None:
                image = read_image(chunk.path, frame=k)
            else:
                got = images.pop(k)
                if isinstance(got, BaseException):
                    raise got
                image = _checked(got, frame_fn, name=f"{chunk.name} frame {k}")
            row = frame_fn(image, shared, name=chunk.name, frame=k, context=chunk.context)
        except SaedError as exc:
            row = Row(chunk.name, k, status=error_status(_frame_error(chunk.name, chunk.path, k, exc)))
        except Exception as exc:  # noqa: BLE001 - the frame boundary of a long run: record, log, go on
            logger.debug("%s frame %d: internal error", chunk.name, k, exc_info=True)
            row = Row(chunk.name, k, status=error_status(f"internal error ({exc.__class__.__name__}: "
                                                         f"{_frame_error(chunk.name, chunk.path, k, exc)})"))
        rows.append(replace(row, file=chunk.path, file_id=chunk.file_id))
    return rows


def _checked(data, frame_fn, *, name: str):
    """A frame of a stack, checked as :func:`saed.image.io.check_image` checks it.

    A frame function with ``takes_counts = True`` (the scan path, whose lean image stage works on the
    counts as recorded) gets an 8- or 16-bit integer frame as it is, without a float32 copy: its
    counts are the same numbers in float32, and the checks that apply to it (2-D, size, not constant)
    are made here. Everything else, and any frame that fails a check, goes through ``check_image``
    (the same float32 array and the same messages as before).
    """
    from saed.image.io import MIN_SIDE_PX, check_image

    if getattr(frame_fn, "takes_counts", False):
        a = np.asarray(data)
        if a.ndim == 2 and a.dtype.kind in "ui" and a.dtype.itemsize <= 2 and min(a.shape) >= MIN_SIDE_PX \
                and a.min() < a.max():
            return a
    return check_image(data, name=name)


@dataclass(frozen=True)
class SharedRef:
    """Stands in a task for the value :func:`share` installed on every worker under `name`."""

    name: str


def _shared_plugin(value, name: str):
    from distributed.diagnostics.plugin import WorkerPlugin

    class SharedValue(WorkerPlugin):
        """Holds one batch's shared value on a worker (also on workers that join or restart later)."""

        def __init__(self):
            self.value = value
            self.name = name

    return SharedValue()


def share(client, value) -> SharedRef:
    """Install `value` on every worker once, as a worker plugin; returns the reference tasks take.

    A worker plugin (rather than ``scatter``) is kept by the scheduler and given to every worker
    that joins or is restarted later, so a worker that dies takes nothing with it. The value is
    pickled once here. Remove it with :func:`unshare` when the run ends.
    """
    import uuid

    name = f"saed-batch-shared-{uuid.uuid4().hex[:12]}"
    client.register_plugin(_shared_plugin(value, name), name=name)
    return SharedRef(name)


def unshare(client, ref: SharedRef) -> None:
    """Remove a value installed by :func:`share` from the cluster."""
    client.unregister_worker_plugin(ref.name)


def _resolve(shared):
    if isinstance(shared, SharedRef):
        from distributed import get_worker

        return get_worker().plugins[shared.name].value
    return shared


def _window(client) -> int:
    threads = sum(client.nthreads().values()) or 1
    return 2 * threads + 2


def run_frames(client, chunks: Iterable[Chunk], frame_fn, shared, *, on_rows: Callable[[list[Row]], None],
               window: int | None = None, no_workers_timeout_s: float | None = None) -> None:
    """Run `frame_fn` over every frame of `chunks` on `client`'s cluster; `on_rows(rows)` as each task ends.

    Parameters
    ----------
    client : distributed.Client
    chunks : iterable of Chunk
        Consumed lazily: at most `window` tasks are in flight (default twice the worker
        threads plus two).
    frame_fn : callable
        ``frame_fn(image, shared, *, name, frame, context) -> Row``; must be importable by
        the workers (a module-level function).
    shared : object or SharedRef
        Passed to every call of `frame_fn`; install large values once with :func:`share`.
    on_rows : callable
        Called in the client with each finished task's rows (in completion order).
    no_workers_timeout_s : float, optional
        End the run with :class:`NoWorkersError` when the cluster has had no worker this long while
        tasks were left (default :data:`NO_WORKERS_TIMEOUT_S`). The tasks in flight are cancelled;
        rows already handed to `on_rows` stay.

    Notes
    -----
    A task whose worker process dies (Dask retries it elsewhere first, then gives up with
    ``KilledWorker``) is split into single frames, each tried alone twice, so only the frame
    that kills workers gets an error row.
    """
    from distributed import wait
    from distributed.scheduler import KilledWorker

    it = iter(chunks)
    n = window or _window(client)
    pending: dict = {}                      # future key -> (future, chunk, attempt)
    retry: list[tuple[Chunk, int]] = []
    retries_out = [0]                       # single-frame retries in flight (at most one at a time)

    def top_up() -> None:
        while len(pending) < n:
            if retry and retries_out[0] == 0:
                # one suspect frame at a time: a frame that kills its worker must not take a frame
                # queued on the same worker down with it (and get that one blamed)
                item = retry.pop()
                retries_out[0] += 1
            else:
                item = next(((c, 0) for c in it), None)
            if item is None:
                return                        # (a waiting retry goes out when the one in flight ends)
            fut = client.submit(process_chunk, item[0], frame_fn, shared, pure=False)
            pending[fut.key] = (fut, *item)

    def take(fut) -> bool:
        """Hand a finished task's rows on (or plan its retries); False when its rows cannot be fetched now."""
        _, chunk, attempt = pending[fut.key]
        if fut.status == "finished" and not _held(client, fut):
            return False                      # its rows left with its worker: Dask runs it again
        try:
            rows = fut.result(timeout=_FETCH_S)
        except (TimeoutError, asyncio.CancelledError, UnboundLocalError):
            # finished, but its worker left before the rows were fetched: Dask runs it again (or the
            # watchdog ends the run when no worker is left). (distributed 2026.8's sync() can end a
            # timed-out wait with UnboundLocalError instead of TimeoutError: the same case.)
            return False
        except KilledWorker:
            rows = []
            if len(chunk.frames) > 1 or attempt < _SINGLE_FRAME_ATTEMPTS:
                # Dask also blames tasks that were merely queued on a dying worker: try the frames
                # one by one (and each alone once more) before blaming one.
                logger.warning("%s frames %d-%d: a worker died; trying them one by one", chunk.name,
                               chunk.frames[0], chunk.frames[-1])
                retry.extend((chunk.single(k, retried=True), attempt + (len(chunk.frames) == 1))
                             for k in reversed(chunk.frames))
            else:
                rows = [Row(chunk.name, chunk.frames[0],
                            status=error_status("the worker process died on this frame (out of memory?)"),
                            file=chunk.path, file_id=chunk.file_id)]
        del pending[fut.key]
        if chunk.retried:
            retries_out[0] -= 1
        fut.release()
        if rows:
            on_rows(rows)
        return True

    watchdog = _Watchdog(client, NO_WORKERS_TIMEOUT_S if no_workers_timeout_s is None else no_workers_timeout_s)
    top_up()
    while pending:
        try:
            done = wait([f for f, _, _ in pending.values()], timeout=_POLL_S, return_when="FIRST_COMPLETED").done
        except TimeoutError:
            done = ()
        # 'lost' (its worker left before the result was fetched) counts as done for wait() but waits for a
        # recomputation in result(): only finished and failed tasks are taken
        taken = [take(f) for f in sorted(done, key=lambda f: str(f.key)) if f.status in ("finished", "error")]
        if any(taken):
            watchdog.seen_work()
            top_up()
            continue
        if taken:
            time.sleep(_POLL_S)               # finished tasks whose rows are out of reach: not a busy loop
        try:
            watchdog.check()
        except NoWorkersError:
            for fut, _, _ in pending.values():
                fut.cancel()
            raise


def _held(client, fut) -> bool:
    """True when a worker still holds the result of the finished task `fut` (so fetching it cannot hang)."""
    try:
        return bool(client.who_has(fut).get(fut.key))
    except Exception:  # noqa: BLE001 - a scheduler that does not answer: let the fetch (with its timeout) try
        return True


class _Watchdog:
    """Ends a run whose cluster has had no worker for `timeout_s` seconds while tasks wait."""

    def __init__(self, client, timeout_s: float):
        self.client = client
        self.timeout_s = float(timeout_s)
        self.gone_since = None

    def seen_work(self) -> None:
        self.gone_since = None

    def _n_workers(self) -> int:
        try:
            return len(self.client.nthreads())
        except Exception:  # noqa: BLE001 - a scheduler that does not answer has no workers for us either
            return 0

    def check(self) -> None:
        if self._n_workers() > 0:
            self.gone_since = None
            return
        now = time.monotonic()
        if self.gone_since is None:
            self.gone_since = now
            logger.warning("no Dask worker is left; waiting up to %g s for one", self.timeout_s)
        elif now - self.gone_since >= self.timeout_s:
            raise NoWorkersError(f"no Dask worker for {self.timeout_s:g} s while frames were left (every worker "
                                 "was killed, ran out of memory, or the cluster was stopped)")

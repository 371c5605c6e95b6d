"""Many patterns: index files, folders and stacks on this machine or a Dask cluster, resumably.

The pieces, each in its own module:

* :mod:`saed.batch.inputs` -- find the frames (files, folders, ``.npy`` and TIFF stacks);
* :mod:`saed.batch.results` -- the CSV, appended row by row and resumed;
* :mod:`saed.batch.cluster` -- a local Dask cluster or an existing scheduler;
* :mod:`saed.batch.runner` -- tasks of consecutive frames, rows back as they finish;
* :mod:`saed.batch.indexing` -- the per-frame function that calls the indexer;
* :mod:`saed.batch.scanindex` -- the per-frame function for scans (lean image stage, warm start);
* :mod:`saed.batch.stacks` -- ``.npy``, HDF5 and Zarr stacks as lazy Dask arrays;
* :mod:`saed.batch.arrays` -- the per-frame table as a Zarr or HDF5 array set;
* :mod:`saed.batch.scan` -- scan grids, zone families and the summary.

:func:`run_batch` ties them together for any per-frame function.
"""

from __future__ import annotations

import logging
import os
import time
from dataclasses import dataclass

from saed.batch.inputs import FrameSource, Inputs, Skipped, discover_inputs
from saed.batch.results import COLUMNS, CONTRACT_COLUMNS, ResultsFile, Row, iter_rows, read_rows
from saed.batch.runner import chunk_size_for, count_todo, plan_chunks, run_frames, share, unshare

__all__ = ["run_batch", "BatchOutcome", "discover_inputs", "Inputs", "FrameSource", "Skipped", "ResultsFile",
           "Row", "read_rows", "iter_rows", "COLUMNS", "CONTRACT_COLUMNS"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class BatchOutcome:
    """What a run did: frames in the inputs, already in the CSV before, written now, and the time taken."""

    n_frames: int
    n_before: int
    n_written: int
    elapsed_s: float


def run_batch(inputs: Inputs, results: ResultsFile, frame_fn, shared, *, client, progress=None,
              context_of=None, chunk_frames: int | None = None,
              no_workers_timeout_s: float | None = None) -> BatchOutcome:
    """Run `frame_fn` over every frame of `inputs` not yet in `results`, appending rows as tasks end.

    Parameters
    ----------
    inputs : Inputs
        From :func:`discover_inputs`.
    results : ResultsFile
        The open CSV; frames already in it are skipped.
    frame_fn : callable
        ``frame_fn(image, shared, *, name, frame, context) -> Row`` (module-level, so workers
        can import it).
    shared : object
        Sent once to every worker (:func:`saed.batch.runner.share`) and passed to each call.
    client : distributed.Client
    progress : callable, optional
        ``progress(done, total, text)`` after each task.
    context_of : callable, optional
        ``context_of(source) -> value`` passed as ``context`` for that source's frames.
    chunk_frames : int, optional
        Frames per task (default: :func:`saed.batch.runner.chunk_size_for`).
    no_workers_timeout_s : float, optional
        End the run with :class:`saed.batch.runner.NoWorkersError` when the cluster has had no
        worker this long (default :data:`saed.batch.runner.NO_WORKERS_TIMEOUT_S`); rows written stay.
    """
    t0 = time.monotonic()
    # planning reads `results.done` lazily while rows arrive; only frames already planned are added
    # to it, so it can serve as the set of frames done before (no copy of a set that may be large)
    done_before = results.done
    n_todo = count_todo(inputs.sources, done_before)
    n_before = inputs.n_frames - n_todo
    shapes = [src.frame_shape for src in inputs.sources[:1] if src.frame_shape is not None]
    # sized by the whole input, not by what is left, so a resumed run cuts the same tasks
    size = chunk_frames or chunk_size_for(inputs.n_frames, shapes[0][0] * shapes[0][1] if shapes else None)
    written = 0
    if progress:
        progress(0, n_todo, "")
    if n_todo:
        shared_ref = share(client, shared)

        n_errors = 0

        def on_rows(rows):
            nonlocal written, n_errors
            written += results.append(rows)
            n_errors += sum(r.is_error for r in rows)
            if progress:
                last = rows[-1]
                progress(written, n_todo, f"{os.path.basename(last.image)} frame {last.frame}"
                         + (f", {n_errors} errors" if n_errors else ""))

        try:
            run_frames(client, plan_chunks(inputs.sources, done_before, chunk_frames=size, context_of=context_of),
                       frame_fn, shared_ref, on_rows=on_rows, no_workers_timeout_s=no_workers_timeout_s)
        finally:
            unshare(client, shared_ref)
    return BatchOutcome(inputs.n_frames, n_before, written, time.monotonic() - t0)

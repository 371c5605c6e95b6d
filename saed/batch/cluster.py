"""Getting a Dask client: a local cluster of worker processes, or an existing scheduler.

Dask (dask.distributed) is the engine: it places tasks on workers, moves data, balances
load and survives a worker that dies. saed only starts or joins a cluster here and
submits tasks in :mod:`saed.batch.runner`.
"""

from __future__ import annotations

import contextlib
import logging
import os

from saed.errors import InputError

__all__ = ["default_workers", "dask_client", "DEFAULT_CONNECT_TIMEOUT_S"]

logger = logging.getLogger(__name__)

#: How long to wait for an existing scheduler before giving up (seconds).
DEFAULT_CONNECT_TIMEOUT_S = 5.0


#: Dask settings for the workers of saed's own local cluster (see :func:`dask_client`).
#:
#: * the statistical profiler off (its history grew a worker by ~100 MB over 4096 patterns);
#: * ``MALLOC_TRIM_THRESHOLD_`` not set in the workers' environment. Dask's nanny sets it to 64 KiB by
#:   default (``distributed.nanny.pre-spawn-environ``) to hand freed memory back to the system at once;
#:   setting it also turns off glibc's sliding mmap threshold, so every array above 128 KiB (a 256 x 256
#:   float32 frame is 256 KiB, and the image stage makes a dozen such per frame) is a fresh ``mmap``,
#:   page-faulted in and unmapped again. Measured in one process over 1024 frames of the bench scan: 9.5 ms
#:   of CPU per frame with it, 6.3 ms without (docs/batch.md, *Speed*). The native thread pools stay at
#:   one thread per worker (Dask's own default, kept: ``OMP/MKL/OPENBLAS_NUM_THREADS=1``).
#: * the workers' housekeeping less often: the event loop's responsiveness tick every 1 s (default 20 ms;
#:   it only feeds "event loop unresponsive" warnings), the dashboard's system monitor every 2 s (500 ms),
#:   the memory monitor every 500 ms (100 ms; it still pauses or restarts a worker near its memory
#:   limit). An idle worker used 23 ms of CPU per second with the defaults, 3.5 ms with these.
_LOCAL_WORKER_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
    "distributed.admin.tick.interval": "1s",
    "distributed.admin.system-monitor.interval": "2s",
    "distributed.worker.memory.monitor-interval": "500ms",
}


def default_workers() -> int:
    """The number of CPU cores this process may use (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


@contextlib.contextmanager
def dask_client(*, workers: int | None = None, scheduler: str | None = None,
                connect_timeout_s: float = DEFAULT_CONNECT_TIMEOUT_S, memory_limit="auto"):
    """A ``distributed.Client``: to `scheduler` if given, else to a new local cluster.

    The local cluster has `workers` processes (default: :func:`default_workers`) with one
    thread each, listening on the loopback interface only, with no dashboard. It is shut
    down when the block ends, also on an interrupt.

    Raises
    ------
    InputError
        `workers` is below 1, both options are given, or the scheduler cannot be reached
        within `connect_timeout_s` (the message names the address).
    """
    import dask
    from distributed import Client, LocalCluster

    if scheduler is not None and workers is not None:
        raise InputError("give either --workers (a local cluster) or --scheduler (an existing one), not both")
    if scheduler is not None:
        client = _connect(scheduler, connect_timeout_s)
        try:
            yield client
        finally:
            client.close()
        return
    n = default_workers() if workers is None else int(workers)
    if n < 1:
        raise InputError(f"--workers {n}: need at least 1 worker")
    # The scheduler always serves HTTP (health checks); a free loopback port keeps it from taking
    # (or warning about) the usual dashboard port, and no dashboard is started. The workers'
    # statistical profiler (for the dashboard) is off: its history (1000 one-second profiles) grew
    # a worker by ~0.2 MB per second of work, ~100 MB over a 4096-pattern run.
    with dask.config.set(_LOCAL_WORKER_CONFIG):
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address="127.0.0.1:0", scheduler_kwargs={"dashboard": False},
                               silence_logs=logging.CRITICAL, memory_limit=memory_limit)
    with cluster, Client(cluster) as client:
        logger.info("local Dask cluster with %d worker processes at %s", n, cluster.scheduler_address)
        yield client


def _connect(address: str, timeout_s: float):
    from distributed import Client

    text = str(address).strip()
    if not text:
        raise InputError("--scheduler: empty address (give e.g. tcp://head-node:8786)")
    _check_address(text)
    try:
        client = Client(text, timeout=f"{float(timeout_s)}s", set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {text} within {timeout_s:g} s ({_short(exc)}); "
                         "is it running, and are the address and port right?") from None
    except ValueError as exc:
        raise InputError(f"--scheduler {text!r} is not a scheduler address ({_short(exc)}); "
                         "give e.g. tcp://head-node:8786") from None
    except Exception as exc:  # noqa: BLE001 - whatever answered is not a Dask scheduler; never a traceback
        raise InputError(f"the Dask scheduler at {text} did not answer like a Dask scheduler "
                         f"({exc.__class__.__name__}); check the address and port") from None
    logger.info("connected to the Dask scheduler at %s", text)
    return client


def _check_address(text: str) -> None:
    """InputError for an address Dask cannot parse, checked before a Client exists.

    A Client that fails inside its constructor on such an address is left half made, and its
    ``__del__`` later prints a traceback (after a 10 s close timeout) below our one-line message.
    """
    from distributed.comm.addressing import get_address_host_port, normalize_address

    try:
        address = normalize_address(text)
        if address.split("://", 1)[0] in ("tcp", "tls"):
            get_address_host_port(address)
    except ValueError as exc:
        raise InputError(f"--scheduler {text!r} is not a scheduler address ({_short(exc)}); "
                         "give e.g. tcp://head-node:8786") from None


def _short(exc: BaseException) -> str:
    t = " ".join(str(exc).split())
    return t[:100] if t else exc.__class__.__name__

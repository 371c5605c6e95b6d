"""Memory estimates before a frame is decoded: refuse what will not fit, with the numbers.

A pattern is analysed as float32 with a handful of working copies (background, smoothed image,
masks): measured at about 22 bytes per pixel for a 16000 x 16000 frame (5.6 GB, issue 17.10), so
:data:`WORK_BYTES_PER_PX` = 24 is used. The memory available is the smaller of the system's
``MemAvailable`` (Linux ``/proc/meminfo``) and what an address-space limit (``ulimit -v``,
``RLIMIT_AS``) still allows this process. Where neither can be read, nothing is refused.
"""

from __future__ import annotations

import contextlib
import logging
import math
import threading

from saed.errors import ImageError

__all__ = ["WORK_BYTES_PER_PX", "available_memory_bytes", "check_frame_memory", "format_bytes", "address_space_guard"]

logger = logging.getLogger(__name__)

#: Bytes of memory per pixel that reading and analysing one frame needs (module notes).
WORK_BYTES_PER_PX = 24


def format_bytes(n: float) -> str:
    """'1.5 GB' style (powers of 1000).

    >>> format_bytes(5.6e9), format_bytes(512e3), format_bytes(12)
    ('5.6 GB', '512 KB', '12 bytes')
    """
    for unit, size in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("KB", 1e3)):
        if n >= size:
            v = n / size
            return f"{v:.1f} {unit}" if v < 10 else f"{v:.0f} {unit}"
    return f"{int(n)} bytes"


def _proc_kb(path: str, key: str) -> int | None:
    """A 'Key:  N kB' line of a Linux /proc file, in bytes (None where there is none)."""
    try:
        with open(path, encoding="ascii") as fh:
            for line in fh:
                if line.startswith(key):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def _meminfo_available() -> int | None:
    return _proc_kb("/proc/meminfo", "MemAvailable:")


def _vm_size() -> int | None:
    return _proc_kb("/proc/self/status", "VmSize:")


def _address_space_left() -> int | None:
    try:
        import resource
    except ImportError:  # not on this platform
        return None
    soft, _hard = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY or soft < 0:
        return None
    used = _vm_size()
    return None if used is None else max(0, soft - used)


def available_memory_bytes() -> int | None:
    """Bytes this process can still allocate (module notes), or None when it cannot be told."""
    values = [v for v in (_meminfo_available(), _address_space_left()) if v is not None]
    return min(values) if values else None


def check_frame_memory(path, shape, itemsize: int) -> None:
    """Raise ImageError when reading and analysing a frame of `shape` would not fit in memory.

    The message names the file, the frame size, the estimate and the memory available.
    """
    pixels = math.prod(int(s) for s in shape)
    need = pixels * (WORK_BYTES_PER_PX + int(itemsize))
    avail = available_memory_bytes()
    if avail is None or need <= avail:
        return
    size = "x".join(str(int(s)) for s in shape)
    raise ImageError(f"{path}: a {size} frame needs about {format_bytes(need)} of memory to analyse, but only "
                     f"{format_bytes(avail)} is available; bin the pattern (e.g. 2x2 or 4x4) or crop it first")


@contextlib.contextmanager
def address_space_guard(budget_bytes: int):
    """While decoding a file's header, cap this process's address space at its current size + `budget_bytes`.

    A corrupt header that declares billions of pixels then fails with MemoryError inside the decoder
    instead of taking the machine's memory. Only the soft limit is lowered (and restored after), only
    on platforms with ``resource`` and ``/proc/self/status``, and only while a single thread runs
    (a process-wide limit must not surprise other threads).
    """
    try:
        import resource
    except ImportError:  # not on this platform
        yield
        return
    used = _vm_size()
    if used is None or threading.active_count() != 1:
        yield
        return
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    cap = used + int(budget_bytes)
    if hard != resource.RLIM_INFINITY:
        cap = min(cap, hard)
    if soft != resource.RLIM_INFINITY and soft <= cap:
        yield
        return
    try:
        resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    except (ValueError, OSError):
        yield
        return
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))

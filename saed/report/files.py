"""Writing files so that a crash or a bad option never leaves a half-written or lost result."""

from __future__ import annotations

import os
from pathlib import Path

from saed.errors import InputError

__all__ = ["atomic_write_text", "atomic_write_bytes", "check_writable"]


def check_writable(path) -> Path:
    """Raise InputError unless `path` can be written (its folder exists and is writable)."""
    p = Path(path)
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(f"{path}: folder {parent} does not exist")
    if p.is_dir():
        raise InputError(f"{path}: is a folder, not a file name")
    if not os.access(parent, os.W_OK):
        raise InputError(f"{path}: folder {parent} is not writable")
    return p


def atomic_write_bytes(path, data: bytes) -> None:
    p = check_writable(path)
    tmp = p.with_name(f".{p.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    finally:
        if tmp.exists():
            tmp.unlink()


def atomic_write_text(path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))

"""Writing files so that a crash or a bad option never leaves a half-written or lost result.

The writers live in the bottom-layer :mod:`saed.files` (so the calibration history and the
calibration files use the same ones); this module keeps the names the report layer imports.
"""

from __future__ import annotations

from saed.files import atomic_write_bytes, atomic_write_text, check_writable

__all__ = ["atomic_write_text", "atomic_write_bytes", "check_writable"]

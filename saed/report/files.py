"""Former home of the file writers: they live in the bottom-layer :mod:`saed.files` now.

New code imports :mod:`saed.files` directly (every layer may). This module only re-exports the
writers for the modules not yet switched (owned by other work of issue 16 at the time); it goes
when nothing imports it.
"""

from __future__ import annotations

from saed.files import atomic_write_bytes, atomic_write_text, check_writable

__all__ = ["atomic_write_text", "atomic_write_bytes", "check_writable"]

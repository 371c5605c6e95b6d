"""A small progress bar on stderr, shown only when stderr is a terminal."""

from __future__ import annotations

import sys
import time

__all__ = ["Progress"]


class Progress:
    """``with Progress(total, "indexing") as bar: bar.update(k)`` -- rate and time left, TTY only."""

    def __init__(self, total: int, label: str = "", *, stream=None, force: bool = False):
        self.total = max(int(total), 0)
        self.label = label
        self.stream = stream or sys.stderr
        self.enabled = force or (hasattr(self.stream, "isatty") and self.stream.isatty())
        self.done = 0
        self._t0 = time.monotonic()
        self._last = 0.0

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.enabled:
            self._draw(final=True)
            self.stream.write("\n")
            self.stream.flush()

    def update(self, n: int = 1, *, text: str = "") -> None:
        self.done += n
        if self.enabled and (time.monotonic() - self._last > 0.1 or self.done >= self.total):
            self._draw(text=text)

    def __call__(self, done: int, total: int, text: str = "") -> None:
        """Callback form for library functions: ``progress(done, total, text)``."""
        self.total = total
        self.done = done
        if self.enabled:
            self._draw(text=text)

    def _draw(self, *, text: str = "", final: bool = False) -> None:
        self._last = time.monotonic()
        elapsed = self._last - self._t0
        rate = self.done / elapsed if elapsed > 0 else 0.0
        frac = self.done / self.total if self.total else 1.0
        left = (self.total - self.done) / rate if rate > 0 else float("nan")
        width = 24
        bar = "#" * int(round(frac * width))
        eta = "" if final or left != left else f", {_fmt_s(left)} left"
        msg = f"\r{self.label} [{bar:<{width}}] {self.done}/{self.total} ({rate:.1f}/s{eta}) {text[:40]:<40}"
        self.stream.write(msg)
        self.stream.flush()


def _fmt_s(s: float) -> str:
    if s < 60:
        return f"{s:.0f} s"
    if s < 3600:
        return f"{s / 60:.1f} min"
    return f"{s / 3600:.1f} h"

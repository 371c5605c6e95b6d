"""Following the acquisition folder: each new file is indexed once it is completely written.

The folder is listed every :data:`POLL_S` seconds (no platform file-event API needed, works on
network shares). A file is tried as soon as it appears; a complete file (or one renamed into place)
reads at once. A file still being written usually fails to read (the readers report truncation) or
changes size while it is read: it is then shown as "waiting" and tried again when its size or time
stamp changes. Only when it has stayed unchanged for :data:`SETTLE_S` seconds (counted from its time
stamp, or from when it was last seen changing) and still fails is its one-line error shown; a later
change tries it again.

Only the folder itself is followed (not sub-folders). Hidden files, temporary files and saed's own
reports (``.html``, ``.json`` ...) are skipped. Files already there when the server starts are left
alone unless asked (``include_existing``). Nothing in the folder is ever written, moved or deleted
here.
"""

from __future__ import annotations

import logging
import os
import threading
import time
from dataclasses import dataclass
from pathlib import Path

__all__ = ["FolderWatcher", "POLL_S", "SETTLE_S", "SKIPPED_SUFFIXES"]

logger = logging.getLogger(__name__)

#: Seconds between two listings of the folder.
POLL_S = 0.1
#: Seconds a file must stay unchanged before a read failure counts as an error (not as "still writing").
SETTLE_S = 2.0
#: Suffixes never tried as patterns: reports, notes, temporary and partial files of acquisition programs.
SKIPPED_SUFFIXES = frozenset({".html", ".htm", ".json", ".txt", ".csv", ".log", ".md", ".xml", ".ini", ".tmp",
                              ".part", ".partial", ".crdownload", ".lock", ".swp", ".bak", ".db", ".pdf", ".svg"})


@dataclass
class _Seen:
    sig: tuple[int, int]  # (size, mtime_ns) at the last attempt
    rid: str | None = None
    final: bool = False  # indexed, or failed after the file settled
    changed_s: float = 0.0  # when the signature last changed


def _signature(entry: os.DirEntry) -> tuple[int, int] | None:
    try:
        st = entry.stat()
    except OSError:
        return None
    return st.st_size, st.st_mtime_ns


def skipped(name: str) -> bool:
    """Whether a file name is never tried (hidden, temporary, report).

    >>> skipped("p1.tif"), skipped(".p1.tif.tmp"), skipped("p1_saed.html"), skipped("~p1.tif")
    (False, True, True, True)
    """
    return name.startswith((".", "~")) or Path(name).suffix.lower() in SKIPPED_SUFFIXES


class FolderWatcher:
    """A thread listing `folder`; for each file ready to try it calls ``attempt(path, rid)``.

    ``attempt`` returns ``(rid, ok)``: the record id used, and whether the file was read (``ok`` False:
    it could not be read, which the watcher decides is "waiting" or an error). ``on_state(rid, path,
    status, error)`` is called for "waiting" and final errors decided here.
    """

    def __init__(self, folder, attempt, on_waiting, on_error, *, include_existing: bool = False,
                 poll_s: float = POLL_S, settle_s: float = SETTLE_S):
        self.folder = Path(folder)
        self.attempt = attempt
        self.on_waiting = on_waiting
        self.on_error = on_error
        self.poll_s = poll_s
        self.settle_s = settle_s
        self._seen: dict[str, _Seen] = {}
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        if not include_existing:
            for e in self._entries():
                sig = _signature(e)
                if sig is not None:
                    self._seen[e.name] = _Seen(sig, final=True, changed_s=time.time())
        self.error = ""

    def _entries(self):
        try:
            with os.scandir(self.folder) as it:
                return [e for e in it if not skipped(e.name) and e.is_file(follow_symlinks=False)]
        except OSError as exc:
            if not self.error:
                logger.warning("cannot list %s: %s", self.folder, exc)
            self.error = f"cannot list the watched folder {self.folder} ({exc.__class__.__name__})"
            return []

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="saed-watch", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=30)

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                self.poll_once()
            except Exception:  # noqa: BLE001 - the watcher must outlive any one file; logged in full
                logger.exception("watcher: unexpected failure; going on")
            self._stop.wait(self.poll_s)

    def poll_once(self) -> None:
        """One pass over the folder (also called directly by tests)."""
        now = time.time()
        entries = sorted(self._entries(), key=lambda e: (_signature(e) or (0, 0))[1])
        if entries or not self.error.startswith("cannot list"):
            self.error = ""
        for e in entries:
            if self._stop.is_set():
                return
            sig = _signature(e)
            if sig is None:
                continue
            seen = self._seen.get(e.name)
            if seen is not None and seen.sig == sig:
                if seen.final:
                    continue
                if now - seen.changed_s < self.settle_s:
                    continue  # failed while recent: wait for a change or for the file to settle
            if seen is None or seen.sig != sig:
                # a file seen changing is in flux from now; a new one since its time stamp (a finished file
                # renamed into place keeps its old stamp, so a read failure there is an error at once)
                changed = now if seen is not None else min(now, sig[1] / 1e9)
                seen = _Seen(sig, rid=seen.rid if seen else None, changed_s=changed)
                self._seen[e.name] = seen
            if sig[0] == 0:
                seen.rid = self.on_waiting(seen.rid, Path(e.path), "empty so far")
                continue
            path = Path(e.path)
            rid, ok, error = self.attempt(path, seen.rid)
            seen.rid = rid
            try:
                after = (os.stat(e.path).st_size, os.stat(e.path).st_mtime_ns)
            except OSError:
                after = None
            if after is None:
                continue  # gone again (moved away): its row keeps what was found
            if after != sig:  # still being written while it was read: try again
                seen.sig, seen.changed_s, seen.final = after, time.time(), False
                seen.rid = self.on_waiting(rid, path, "still being written")
                continue
            if ok:
                seen.final = True
            elif time.time() - seen.changed_s < self.settle_s:
                seen.rid = self.on_waiting(rid, path, error)
            else:
                seen.final = True
                self.on_error(rid, path, error)

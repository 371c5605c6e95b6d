"""The results the page shows, newest first, and the grain marks; safe to use from several threads.

Every change bumps ``version``, so the page can ask "anything newer than version N?" and wait.
"""

from __future__ import annotations

import dataclasses
import itertools
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["Record", "RecordStore", "STATUSES"]

#: What a row can say: queued or being indexed, waiting for the file to be complete, indexed with a
#: solution, indexed without one (not an error), or failed with a one-line error.
STATUSES = ("indexing", "waiting", "ok", "no-solution", "error")


@dataclass(frozen=True)
class Record:
    """One pattern on the page. ``path`` stays on the server (never sent); ``image`` is its display name."""

    id: str
    image: str
    origin: str  # 'watch' or 'upload'
    path: Path
    status: str = "indexing"
    error: str = ""
    added_s: float = field(default_factory=time.time)
    seen_s: float = field(default_factory=time.time)  # when the file was first seen (watched files)
    done_s: float | None = None
    elapsed_s: float | None = None
    doc: dict | None = None  # the `saed index` JSON
    view: dict | None = None  # what the page draws: spots, labels, predictions per solution
    display: bytes | None = None  # the picture: 8-bit grey, row-major (shape in view)
    result: object = None  # the IndexResult (for the report)
    grain: dict | None = None  # {"grain": name, "alpha_deg": a, "beta_deg": b}
    saved: tuple[str, ...] = ()

    def summary(self) -> dict:
        """The row of ``GET /api/results`` (docs/contract.md)."""
        best = (self.doc or {}).get("solutions") or [None]
        b = best[0]
        return {
            "id": self.id, "image": self.image, "origin": self.origin, "status": self.status, "error": self.error,
            "phase": b["phase"] if b else None, "zone_axis": b["zone_axis"] if b else None,
            "zone_axis_4": b["zone_axis_4"] if b else None, "score": b["score"] if b else None,
            "message": (self.doc or {}).get("message", ""), "added_s": round(self.added_s, 3),
            "done_s": None if self.done_s is None else round(self.done_s, 3),
            "elapsed_s": None if self.elapsed_s is None else round(self.elapsed_s, 3),
            "grain": self.grain, "saved": list(self.saved),
        }


class RecordStore:
    """Records by id, with a version number that changes on every update."""

    def __init__(self, max_records: int = 500, keep_heavy: int = 12):
        self._lock = threading.Condition()
        self._records: dict[str, Record] = {}
        self._ids = itertools.count(1)
        self.version = 0
        self.max_records = max_records
        self.keep_heavy = keep_heavy

    def new_id(self) -> str:
        with self._lock:
            return f"r{next(self._ids)}"

    def put(self, rec: Record) -> Record:
        with self._lock:
            self._records[rec.id] = rec
            self._records = dict(sorted(self._records.items(), key=lambda kv: kv[1].added_s))
            self._trim()
            self.version += 1
            self._lock.notify_all()
        return rec

    def update(self, rid: str, **changes) -> Record | None:
        with self._lock:
            rec = self._records.get(rid)
            if rec is None:
                return None
            rec = dataclasses.replace(rec, **changes)
            self._records[rid] = rec
            self._trim()
            self.version += 1
            self._lock.notify_all()
            return rec

    def _trim(self) -> None:
        while len(self._records) > self.max_records:
            self._records.pop(next(iter(self._records)))
        # only the newest few keep their picture and result objects in memory
        done = [r for r in self._records.values() if r.display is not None]
        for r in done[:-self.keep_heavy]:
            self._records[r.id] = dataclasses.replace(r, display=None, result=None)

    def get(self, rid: str) -> Record | None:
        with self._lock:
            return self._records.get(rid)

    def newest_first(self) -> list[Record]:
        with self._lock:
            return list(reversed(list(self._records.values())))

    def wait_newer(self, version: int, timeout_s: float) -> int:
        """Block until the version differs from `version` or the timeout passes; returns the version."""
        with self._lock:
            self._lock.wait_for(lambda: self.version != version, timeout=timeout_s)
            return self.version

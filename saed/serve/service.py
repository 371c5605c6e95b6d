"""What the page's routes act on: settings, warm tables, results, the watched folder, uploads, saving.

:class:`Service` holds the state of one ``saed serve`` and does the work (in threads: the watcher's,
and the request thread pool); :mod:`saed.serve.app` only turns HTTP requests into calls on it.
A pattern that fails becomes an error row with its one-line message; the service goes on.
"""

from __future__ import annotations

import json
import logging
import re
import shutil
import tempfile
import threading
import time
from pathlib import Path

from saed.errors import InputError, SaedError
from saed.serve.engine import TableCache, index_file
from saed.serve.records import Record, RecordStore
from saed.serve.settings import PhaseBook, Settings, save_settings, settings_from_fields
from saed.serve.watch import FolderWatcher

__all__ = ["Service", "one_line"]

logger = logging.getLogger(__name__)

_SAFE_NAME = re.compile(r"[^A-Za-z0-9._+-]+")


def one_line(text: str, limit: int = 400) -> str:
    t = " ".join(str(text).split())
    """`text` on one line, at most `limit` characters.

    >>> one_line("a\n  b")
    'a b'
    """
    t = " ".join(str(text).split())
    return t if len(t) <= limit else t[: limit - 3] + "..."


class Service:
    """Everything behind the routes: settings, warm tables, results, the watcher, the uploads folder."""

    def __init__(self, *, book: PhaseBook, settings: Settings, watch_dir: Path | None = None, top: int = 5,
                 options: dict | None = None, include_existing: bool = False, remember: bool = True,
                 uploads_dir: Path | None = None, max_g_inv_nm: float | None = None):
        self.book = book
        self.max_g_inv_nm = max_g_inv_nm
        self.settings = settings
        self.watch_dir = None if watch_dir is None else Path(watch_dir).resolve()
        self.top = top
        self.options = dict(options or {})
        self.remember = remember
        self.cache = TableCache(book)
        self.store = RecordStore()
        self.work_lock = threading.Lock()  # one pattern at a time: 2 cores, bounded memory
        self._own_uploads = uploads_dir is None
        self.uploads_dir = Path(uploads_dir or tempfile.mkdtemp(prefix="saed-serve-uploads-")).resolve()
        self.watcher = None
        if self.watch_dir is not None:
            self.watcher = FolderWatcher(self.watch_dir, self._attempt, self._waiting, self._failed,
                                         include_existing=include_existing)
        self._warm_thread: threading.Thread | None = None

    # ---------------------------------------------------------------- life
    def start(self) -> None:
        self._warm_thread = threading.Thread(target=self.warm, name="saed-warm", daemon=True)
        self._warm_thread.start()
        if self.watcher is not None:
            self.watcher.start()

    def stop(self) -> None:
        if self.watcher is not None:
            self.watcher.stop()
        if self._own_uploads:
            shutil.rmtree(self.uploads_dir, ignore_errors=True)

    def warm(self) -> None:
        """Build the tables of the current settings (progress in ``cache.status()``)."""
        s = self.settings
        try:
            if self.max_g_inv_nm is not None:
                self.cache.get(s.phases, s.calibration().voltage_kv, self.max_g_inv_nm)
            else:
                self.cache.get(s.phases, s.calibration().voltage_kv)
        except SaedError as exc:
            logger.warning("tables not built: %s", exc)

    # ---------------------------------------------------------------- work
    def _index_into(self, rid: str, path: Path, name: str, settings: Settings, *,
                    fail_status: str = "error") -> tuple[bool, str]:
        """Index `path` into record `rid`; on failure the record gets `fail_status` and the one-line message."""
        t0 = time.perf_counter()
        self.store.update(rid, status="indexing", error="")
        try:
            with self.work_lock:
                out = index_file(path, settings, self.cache, top=self.top, name=name, options=self.options,
                                 max_g_inv_nm=self.max_g_inv_nm)
        except SaedError as exc:  # the message names the file by its full path: the page knows it by name
            msg = one_line(str(exc).replace(str(path), name))
        except MemoryError:
            msg = "out of memory while indexing this pattern (fewer phases or a smaller frame)"
        except Exception as exc:  # noqa: BLE001 - the server outlives any one pattern; the row says what broke
            logger.exception("indexing %s failed", path)
            msg = one_line(f"internal error while indexing ({exc.__class__.__name__}: {exc}); please report it "
                            "with this file")
        else:
            status = "ok" if out.doc["solutions"] else "no-solution"
            self.store.update(rid, status=status, error="", doc=out.doc, view=out.view, display=out.display,
                              result=out.result, done_s=time.time(), elapsed_s=time.perf_counter() - t0)
            return True, ""
        if fail_status == "waiting":
            msg_shown = f"waiting for the file to be complete ({msg})"
        else:
            msg_shown = msg
        self.store.update(rid, status=fail_status, error=one_line(msg_shown), done_s=time.time(), doc=None,
                          view=None, display=None, result=None)
        return False, msg

    def _display_name(self, path: Path) -> str:
        return path.name

    def _attempt(self, path: Path, rid: str | None):
        if rid is None:
            rid = self.store.put(Record(self.store.new_id(), self._display_name(path), "watch", path)).id
        # on failure the watcher decides whether this is "still being written" or a final error
        ok, msg = self._index_into(rid, path, self._display_name(path), self.settings, fail_status="waiting")
        return rid, ok, msg

    def _waiting(self, rid: str | None, path: Path, why: str) -> str:
        if rid is None:
            rid = self.store.put(Record(self.store.new_id(), self._display_name(path), "watch", path)).id
        self.store.update(rid, status="waiting", error=one_line(f"waiting for the file to be complete ({why})"))
        return rid

    def _failed(self, rid: str, path: Path, error: str) -> None:
        self.store.update(rid, status="error", error=one_line(error))

    def index_upload(self, data: bytes, filename: str, settings: Settings) -> Record:
        rid = self.store.new_id()
        safe = _SAFE_NAME.sub("_", Path(filename or "upload").name).strip("._")[:120] or "upload"
        folder = self.uploads_dir / rid
        folder.mkdir(parents=True, exist_ok=False)
        path = folder / safe
        path.write_bytes(data)
        self.store.put(Record(rid, safe, "upload", path))
        self._index_into(rid, path, safe, settings)
        return self.store.get(rid)

    # ---------------------------------------------------------------- settings, grains, saving
    def set_settings(self, fields: dict) -> Settings:
        new = settings_from_fields(fields, self.settings, self.book)
        changed_tables = (new.phases != self.settings.phases
                          or new.calibration().voltage_kv != self.settings.calibration().voltage_kv)
        self.settings = new
        if self.remember:
            try:
                save_settings(new)
            except OSError as exc:
                logger.warning("settings not remembered: %s", exc)
        if changed_tables:
            threading.Thread(target=self.warm, name="saed-warm", daemon=True).start()
        return new

    def status(self) -> dict:
        s = self.settings
        try:
            cal = s.calibration()
            from saed.serve.engine import describe_source

            cal_text = describe_source(cal)
            scale = cal.scale_inv_nm_per_px
            voltage = cal.voltage_kv
        except SaedError as exc:
            cal_text, scale, voltage = f"unusable: {exc}", None, s.voltage_kv
        return {
            "tables": self.cache.status(), "version": self.store.version,
            "watch": None if self.watch_dir is None else str(self.watch_dir),
            "watch_error": "" if self.watcher is None else self.watcher.error,
            "settings": {**s.to_json(), "calibration_text": cal_text, "effective_scale_inv_nm_per_px": scale,
                         "effective_voltage_kv": voltage},
            "phases_available": self.book.names(),
        }

    def grains(self) -> list[dict]:
        out = []
        for r in self.store.newest_first():
            if r.grain:
                out.append({**r.grain, "image": r.image, "path": str(r.path), "id": r.id,
                            "phase": r.summary()["phase"], "zone_axis": r.summary()["zone_axis"]})
        return out

    def mark_grain(self, rid: str, fields: dict) -> Record:
        from saed.serve.settings import _opt_float

        rec = self.store.get(rid)
        if rec is None:
            raise LookupError(rid)
        unknown = sorted(set(fields) - {"grain", "alpha", "beta"})
        if unknown:
            raise InputError(f"unknown field {unknown[0]!r} (known: grain, alpha, beta)")
        name = one_line(fields.get("grain", ""), 60).strip()
        if not name:
            rec = self.store.update(rid, grain=None)
        else:
            alpha = _opt_float("alpha", fields.get("alpha"), positive=False)
            beta = _opt_float("beta", fields.get("beta"), positive=False)
            for label, v in (("alpha", alpha), ("beta", beta)):
                if v is not None and abs(v) > 90:
                    raise InputError(f"{label} {v:g} deg: a holder tilt lies within +-90 deg")
            rec = self.store.update(rid, grain={"grain": name, "alpha_deg": alpha, "beta_deg": beta})
        self._write_grains()
        return rec

    def _write_grains(self) -> None:
        from saed.files import atomic_write_text
        from saed.serve.settings import settings_folder

        if not self.remember:
            return
        try:
            folder = settings_folder()
            folder.mkdir(parents=True, exist_ok=True)
            doc = {"format": "saed-grain-marks-1", "marks": self.grains()}
            atomic_write_text(folder / "serve-grains.json", json.dumps(doc, indent=2) + "\n")
        except OSError as exc:
            logger.warning("grain marks not written: %s", exc)

    def save_report(self, rid: str) -> list[Path]:
        from saed.image.io import read_image
        from saed.report.index_html import ReportEntry, report_html
        from saed.serve.saving import save_beside

        rec = self.store.get(rid)
        if rec is None:
            raise LookupError(rid)
        if rec.doc is None:
            raise InputError(f"{rec.image}: nothing indexed to save ({rec.status})")
        result = rec.result
        if result is None:  # an older row: its objects were dropped; index the file again
            out = index_file(rec.path, self.settings, self.cache, top=self.top, name=rec.image, options=self.options,
                             max_g_inv_nm=self.max_g_inv_nm)
            result = out.result
        doc = dict(rec.doc)
        doc["image"] = str(rec.path) if rec.origin == "watch" else rec.image
        if rec.grain:
            doc["grain"] = rec.grain
        with self.work_lock:
            image = read_image(rec.path)
            html_text = report_html([ReportEntry(rec.image, image, result)], title=f"saed: {rec.image}",
                                    intro=f"calibration: {doc.get('calibration_source', '')}")
        paths = save_beside(rec.path, doc, html_text)
        self.store.update(rid, saved=tuple(self.file_link(p) for p in paths))
        return paths

    def file_link(self, path: Path) -> str:
        root = self.watch_dir if self.watch_dir is not None and path.is_relative_to(self.watch_dir) else self.uploads_dir
        return "/files/" + ("w/" if root == self.watch_dir else "u/") + path.relative_to(root).as_posix()

    def servable(self, kind: str, rel: str) -> Path | None:
        """The saved report `rel` under the watched folder ('w') or the uploads ('u'), or None."""
        root = {"w": self.watch_dir, "u": self.uploads_dir}.get(kind)
        if root is None or not rel or "\x00" in rel:
            return None
        p = Path(rel)
        if p.is_absolute() or any(part in ("..", "") for part in p.parts):
            return None
        full = (root / p)
        try:
            real = full.resolve(strict=True)
        except (OSError, RuntimeError):
            return None
        if not real.is_relative_to(root) or not real.is_file():
            return None
        if not re.search(r"_saed(-\d+)?\.(html|json)$", real.name):
            return None  # only reports this server writes; never a pattern or anything else
        return real

"""The Starlette application of ``saed serve``: the page, the contract routes, the watched folder.

Routes (docs/contract.md, section ``saed serve``):

* ``GET /`` the page; ``GET /static/...`` its CSS and JS (shipped in the package);
* ``POST /api/index`` index one uploaded file (multipart ``file``; optional ``phase`` repeatable,
  ``scale``, ``voltage``) and return the ``saed index`` JSON;
* ``GET /api/results`` the watched folder's results, newest first (``?all=1`` with the uploads;
  ``?after=V&wait=S`` waits up to S seconds for a version newer than V, the version is in the
  ``X-Saed-Version`` header);
* ``GET /api/result/{id}``, ``GET /api/image/{id}`` one result in full, and its picture (8-bit grey
  bytes, shape in ``X-Saed-Shape``, rows x cols);
* ``GET /api/status``, ``POST /api/settings`` tables, settings (remembered), watch folder;
* ``POST /api/grain/{id}`` mark a pattern as one grain with its holder readings; ``GET /api/grains``;
* ``POST /api/save/{id}`` save the HTML report and JSON beside the pattern;
* ``GET /files/{name}`` a report saved by this server (only those, only inside the watched folder
  or the uploads).

A pattern that fails becomes an error row with its one-line message; the server goes on.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import re
import shutil
import tempfile
import threading
import time
from importlib import resources
from pathlib import Path

from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import FileResponse, HTMLResponse, JSONResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from saed.errors import InputError, SaedError
from saed.serve.engine import TableCache, index_file
from saed.serve.guard import TOKEN_COOKIE, GuardMiddleware
from saed.serve.records import Record, RecordStore
from saed.serve.settings import PhaseBook, Settings, save_settings, settings_from_fields
from saed.serve.watch import FolderWatcher

__all__ = ["Service", "create_app", "DEFAULT_MAX_UPLOAD_MB"]

logger = logging.getLogger(__name__)

#: Default cap of one upload, MB (a 4096 x 4096 float32 frame is 64 MB).
DEFAULT_MAX_UPLOAD_MB = 256
#: Longest wait of one ``GET /api/results?wait=`` call, seconds.
MAX_WAIT_S = 20.0
_SAFE_NAME = re.compile(r"[^A-Za-z0-9._+-]+")


def _one_line(text: str, limit: int = 400) -> str:
    t = " ".join(str(text).split())
    return t if len(t) <= limit else t[: limit - 3] + "..."


def _bad(message: str, status: int = 400) -> JSONResponse:
    return JSONResponse({"error": _one_line(message)}, status_code=status, headers={"cache-control": "no-store"})


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
            msg = _one_line(str(exc).replace(str(path), name))
        except MemoryError:
            msg = "out of memory while indexing this pattern (fewer phases or a smaller frame)"
        except Exception as exc:  # noqa: BLE001 - the server outlives any one pattern; the row says what broke
            logger.exception("indexing %s failed", path)
            msg = _one_line(f"internal error while indexing ({exc.__class__.__name__}: {exc}); please report it "
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
        self.store.update(rid, status=fail_status, error=_one_line(msg_shown), done_s=time.time(), doc=None,
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
        self.store.update(rid, status="waiting", error=_one_line(f"waiting for the file to be complete ({why})"))
        return rid

    def _failed(self, rid: str, path: Path, error: str) -> None:
        self.store.update(rid, status="error", error=_one_line(error))

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
        name = _one_line(fields.get("grain", ""), 60).strip()
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
        from saed.report.files import atomic_write_text
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


def _static_text(name: str) -> str:
    return resources.files("saed.serve").joinpath("static", name).read_text(encoding="utf-8")


def create_app(service: Service, *, hosts, token: str | None, max_upload_mb: float = DEFAULT_MAX_UPLOAD_MB,
               start: bool = True) -> Starlette:
    """The ASGI application around `service` (guards in front; `start` runs its threads in the lifespan)."""

    async def page(request: Request):
        resp = HTMLResponse(_static_text("index.html"), headers={"cache-control": "no-store"})
        if token is not None and request.query_params.get("token") == token:
            resp.set_cookie(TOKEN_COOKIE, token, httponly=True, samesite="strict")
        return resp

    async def status(request: Request):
        return JSONResponse(service.status(), headers={"cache-control": "no-store"})

    async def results(request: Request):
        q = request.query_params
        extra = set(q) - {"after", "wait", "all", "token"}
        if extra:
            return _bad(f"unknown query field {sorted(extra)[0]!r} (known: after, wait, all)")
        try:
            after = int(q["after"]) if "after" in q else None
            wait = float(q.get("wait", "0"))
        except ValueError:
            return _bad("after must be a whole number and wait a number of seconds")
        if not 0 <= wait <= MAX_WAIT_S:
            return _bad(f"wait must lie between 0 and {MAX_WAIT_S:g} seconds")
        if after is not None and wait > 0:
            deadline = time.monotonic() + wait
            server = getattr(request.app.state, "server", None)  # set by saed.serve.runner
            while (service.store.version == after and time.monotonic() < deadline
                   and not (server is not None and server.should_exit)):
                await asyncio.sleep(0.02)
        every = q.get("all", "0") not in ("0", "", "false")
        rows = [r.summary() for r in service.store.newest_first() if every or r.origin == "watch"]
        return JSONResponse(rows, headers={"x-saed-version": str(service.store.version), "cache-control": "no-store"})

    def _record(request: Request) -> Record | None:
        return service.store.get(request.path_params["rid"])

    async def result(request: Request):
        rec = _record(request)
        if rec is None:
            return _bad("no such result", 404)
        return JSONResponse({**rec.summary(), "doc": rec.doc, "view": rec.view}, headers={"cache-control": "no-store"})

    async def image(request: Request):
        rec = _record(request)
        if rec is None or rec.display is None:
            return _bad("no picture for this result", 404)
        rows, cols = rec.view["display_shape"]
        return Response(rec.display, media_type="application/octet-stream",
                        headers={"cache-control": "no-store", "x-saed-shape": f"{rows}x{cols}"})

    async def form_fields(request: Request, *, files: bool) -> tuple[dict, tuple[str, bytes] | None]:
        """The request's fields (``phase`` a list) and the uploaded (file name, bytes), or None."""
        ctype = request.headers.get("content-type", "")
        if not ctype.startswith(("multipart/form-data", "application/x-www-form-urlencoded")):
            raise InputError("send the fields as multipart/form-data or a urlencoded form")
        fields: dict = {}
        upload = None
        async with request.form(max_files=1 if files else 0, max_fields=200) as form:
            for key, value in form.multi_items():
                if hasattr(value, "read"):
                    if key != "file" or upload is not None:
                        raise InputError(f"unexpected file field {key!r}: send one pattern as 'file'")
                    upload = (value.filename or "upload", await value.read())
                elif key == "phase":
                    fields.setdefault("phase", []).extend(p for p in re.split(r"[,\s]+", value) if p)
                elif key in fields:
                    raise InputError(f"field {key!r} given twice")
                else:
                    fields[key] = value
        return fields, upload

    async def api_index(request: Request):
        try:
            fields, upload = await form_fields(request, files=True)
            if upload is None:
                raise InputError("no 'file' field: send the pattern as multipart field 'file'")
            unknown = sorted(set(fields) - {"phase", "scale", "voltage"})
            if unknown:
                raise InputError(f"unknown field {unknown[0]!r} (known: file, phase, scale, voltage)")
            settings = settings_from_fields(fields, service.settings, service.book, origin="given with the request")
            if not upload[1]:
                raise InputError(f"{upload[0]}: the uploaded file is empty")
        except (SaedError, ValueError) as exc:  # starlette's multipart limits raise ValueError subclasses
            return _bad(str(exc))
        rec = await run_in_threadpool(service.index_upload, upload[1], upload[0], settings)
        if rec.status == "error":
            return JSONResponse({"error": rec.error, "id": rec.id}, status_code=400)
        return JSONResponse({**rec.doc, "id": rec.id}, headers={"cache-control": "no-store"})

    async def api_settings(request: Request):
        try:
            fields, _ = await form_fields(request, files=False)
            await run_in_threadpool(service.set_settings, fields)
        except (SaedError, ValueError) as exc:
            return _bad(str(exc))
        return JSONResponse(service.status())

    async def api_grain(request: Request):
        try:
            fields, _ = await form_fields(request, files=False)
            rec = service.mark_grain(request.path_params["rid"], fields)
        except LookupError:
            return _bad("no such result", 404)
        except (SaedError, ValueError) as exc:
            return _bad(str(exc))
        return JSONResponse(rec.summary())

    async def api_grains(request: Request):
        return JSONResponse(service.grains(), headers={"cache-control": "no-store"})

    async def api_save(request: Request):
        try:
            paths = await run_in_threadpool(service.save_report, request.path_params["rid"])
        except LookupError:
            return _bad("no such result", 404)
        except SaedError as exc:
            return _bad(str(exc))
        return JSONResponse({"saved": [str(p) for p in paths], "links": [service.file_link(p) for p in paths]})

    async def files(request: Request):
        p = service.servable(request.path_params["kind"], request.path_params["rel"])
        if p is None:
            return _bad("not found", 404)
        media = "text/html; charset=utf-8" if p.suffix == ".html" else "application/json"
        csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"  # a saved report runs no script
        return FileResponse(p, media_type=media, headers={"cache-control": "no-store", "content-security-policy": csp})

    async def http_error(request: Request, exc):
        code = getattr(exc, "status_code", 500)
        detail = getattr(exc, "detail", "") or ""
        return _bad("not found" if code == 404 else detail or "bad request", code)

    @contextlib.asynccontextmanager
    async def lifespan(app):
        if start:
            service.start()
        try:
            yield
        finally:
            if start:
                await run_in_threadpool(service.stop)

    routes = [
        Route("/", page),
        Route("/api/status", status),
        Route("/api/results", results),
        Route("/api/result/{rid:str}", result),
        Route("/api/image/{rid:str}", image),
        Route("/api/index", api_index, methods=["POST"]),
        Route("/api/settings", api_settings, methods=["POST"]),
        Route("/api/grain/{rid:str}", api_grain, methods=["POST"]),
        Route("/api/grains", api_grains),
        Route("/api/save/{rid:str}", api_save, methods=["POST"]),
        Route("/files/{kind:str}/{rel:path}", files),
        Mount("/static", StaticFiles(packages=[("saed.serve", "static")]), name="static"),
    ]
    return Starlette(routes=routes, lifespan=lifespan, exception_handlers={HTTPException: http_error},
                     middleware=[Middleware(GuardMiddleware, hosts=hosts, token=token,
                                            max_body_bytes=int(max_upload_mb * 1e6))])

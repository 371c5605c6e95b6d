"""The Starlette application of ``saed serve``: the page and the routes, over a :class:`~saed.serve.service.Service`.

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
* ``POST /api/grain-index/{grain}`` index the patterns marked as one grain jointly (the solver of
  ``saed grain``); returns the ``saed grain`` JSON with its summary text;
* ``POST /api/save/{id}`` save the HTML report and JSON beside the pattern;
* ``GET /files/{name}`` a report saved by this server (only those, only inside the watched folder
  or the uploads).

A pattern that fails becomes an error row with its one-line message; the server goes on.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import re
import time
from importlib import resources

from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import FileResponse, HTMLResponse, JSONResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from saed.errors import InputError, SaedError
from saed.serve.guard import TOKEN_COOKIE, GuardMiddleware
from saed.serve.records import Record
from saed.serve.service import Service, one_line
from saed.serve.settings import settings_from_fields

__all__ = ["create_app", "DEFAULT_MAX_UPLOAD_MB"]

logger = logging.getLogger(__name__)

#: Default cap of one upload, MB (a 4096 x 4096 float32 frame is 64 MB).
DEFAULT_MAX_UPLOAD_MB = 256
#: Longest wait of one ``GET /api/results?wait=`` call, seconds.
MAX_WAIT_S = 20.0


def _bad(message: str, status: int = 400) -> JSONResponse:
    return JSONResponse({"error": one_line(message)}, status_code=status, headers={"cache-control": "no-store"})


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

    async def api_grain_index(request: Request):
        from saed.serve.grain_index import grain_index

        try:
            doc = await run_in_threadpool(grain_index, service, request.path_params["grain"])
        except SaedError as exc:
            return _bad(str(exc))
        except Exception as exc:  # noqa: BLE001 - the server outlives any one request; the page says what broke
            logger.exception("joint indexing of grain %r failed", request.path_params["grain"])
            return _bad(f"internal error while indexing the grain jointly ({exc.__class__.__name__}: {exc}); "
                        "please report it with these patterns", 500)
        return JSONResponse(doc, headers={"cache-control": "no-store"})

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
        Route("/api/grain-index/{grain:str}", api_grain_index, methods=["POST"]),
        Route("/api/save/{rid:str}", api_save, methods=["POST"]),
        Route("/files/{kind:str}/{rel:path}", files),
        Mount("/static", StaticFiles(packages=[("saed.serve", "static")]), name="static"),
    ]
    app = Starlette(routes=routes, lifespan=lifespan, exception_handlers={HTTPException: http_error},
                    middleware=[Middleware(GuardMiddleware, hosts=hosts, token=token,
                                           max_body_bytes=int(max_upload_mb * 1e6))])
    # A name ending in '/' (a decoded %2F) is not a route: answer 404 in one line rather than a 307
    # redirect that a script posting to the API would follow blindly.
    app.router.redirect_slashes = False
    return app

"""Request guards in front of the page: Host header, access token, upload size.

* **Host header** (a DNS-rebinding guard): a web page on another site cannot make the browser talk
  to this server under a name it controls, because every request must name the bound address (or,
  on the loopback address, ``localhost``) with the bound port; anything else gets 421.
* **Token**: when the server listens beyond this computer (``--allow-remote``), every request must
  carry the token given in the printed URL (``?token=...``, the header ``X-Saed-Token``, or the
  cookie the page receives when opened with the token); otherwise 403.
* **Same origin for changes**: a POST that a browser sends from another site's page (its ``Origin``
  header names another host, or ``Sec-Fetch-Site`` says cross-site) gets 403, so a web page elsewhere
  cannot change the settings, upload or save reports through the operator's browser. Scripts send no
  ``Origin`` and are not affected.
* **Size cap**: a request body larger than the cap is refused with 413, by its declared length
  before it is read, and by counting while it is read.

Each refusal is a one-line JSON ``{"error": ...}``.
"""

from __future__ import annotations

import hmac
import json
import re
from http.cookies import SimpleCookie
from urllib.parse import parse_qs

__all__ = ["GuardMiddleware", "allowed_hosts", "TOKEN_COOKIE"]

TOKEN_COOKIE = "saed_token"
LOOPBACK = ("127.0.0.1", "localhost", "::1")


def allowed_hosts(host: str, port: int) -> frozenset[str] | None:
    """The Host header values accepted for a server bound to `host`:`port` (None: any name, token-guarded).

    >>> sorted(allowed_hosts("127.0.0.1", 8750))
    ['127.0.0.1:8750', '[::1]:8750', 'localhost:8750']
    >>> allowed_hosts("0.0.0.0", 8750) is None
    True
    """
    if host in ("0.0.0.0", "::", ""):
        return None
    if host in LOOPBACK:
        return frozenset({f"127.0.0.1:{port}", f"localhost:{port}", f"[::1]:{port}"})
    shown = f"[{host}]" if ":" in host else host
    return frozenset({f"{shown}:{port}"})


class _TooLarge(Exception):
    pass


async def _refuse(send, status: int, message: str) -> None:
    body = json.dumps({"error": message}).encode()
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode()),
                            (b"cache-control", b"no-store")]})
    await send({"type": "http.response.body", "body": body})


class GuardMiddleware:
    """ASGI middleware applying the three guards (module notes) to every HTTP request."""

    def __init__(self, app, *, hosts: frozenset[str] | None, token: str | None, max_body_bytes: int):
        self.app = app
        self.hosts = hosts
        self.token = token
        self.max_body_bytes = int(max_body_bytes)

    def _same_origin(self, headers: dict) -> bool:
        """A browser names the page a request comes from (Origin); only this server's own page may change
        anything. Scripts send no Origin and are judged by the other guards."""
        origin = headers.get("origin")
        if origin is None:
            return headers.get("sec-fetch-site", "same-origin") in ("same-origin", "none")
        m = re.fullmatch(r"https?://([^/]+)", origin.strip().lower())
        if m is None:
            return False
        allowed = self.hosts if self.hosts is not None else {headers.get("host", "").lower()}
        return m.group(1) in allowed

    def _token_ok(self, scope, headers: dict) -> bool:
        if self.token is None:
            return True
        given = []
        q = parse_qs(scope.get("query_string", b"").decode("latin-1"))
        given += q.get("token", [])
        if "x-saed-token" in headers:
            given.append(headers["x-saed-token"])
        if "cookie" in headers:
            c = SimpleCookie()
            try:
                c.load(headers["cookie"])
            except Exception:  # noqa: BLE001 - a malformed cookie header is simply no token
                c = SimpleCookie()
            if TOKEN_COOKIE in c:
                given.append(c[TOKEN_COOKIE].value)
        return any(hmac.compare_digest(g.encode(), self.token.encode()) for g in given)

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope.get("headers", [])}
        if self.hosts is not None and headers.get("host", "").lower() not in self.hosts:
            return await _refuse(send, 421, "wrong Host header: this server answers only to "
                                 + " or ".join(sorted(self.hosts)))
        if scope.get("method", "GET") not in ("GET", "HEAD") and not self._same_origin(headers):
            return await _refuse(send, 403, "cross-site request refused: send it from the page itself or "
                                 "without an Origin header (scripts)")
        if not self._token_ok(scope, headers):
            return await _refuse(send, 403, "missing or wrong token: open the URL that 'saed serve' printed")
        length = headers.get("content-length")
        if length is not None:
            try:
                n = int(length)
            except ValueError:
                return await _refuse(send, 400, "bad Content-Length header")
            if n > self.max_body_bytes:
                return await _refuse(send, 413, f"upload of {n / 1e6:.1f} MB is larger than the cap of "
                                     f"{self.max_body_bytes / 1e6:.0f} MB (saed serve --max-upload-mb)")
        received = 0
        started = False

        async def counting_receive():
            nonlocal received
            msg = await receive()
            if msg["type"] == "http.request":
                received += len(msg.get("body", b""))
                if received > self.max_body_bytes:
                    raise _TooLarge()
            return msg

        async def watching_send(msg):
            nonlocal started
            if msg["type"] == "http.response.start":
                started = True
            await send(msg)

        try:
            await self.app(scope, counting_receive, watching_send)
        except _TooLarge:
            if not started:
                await _refuse(send, 413, f"upload larger than the cap of {self.max_body_bytes / 1e6:.0f} MB "
                              "(saed serve --max-upload-mb)")

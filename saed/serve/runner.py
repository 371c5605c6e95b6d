"""Running the page's server: in the foreground (``saed serve``) or in a thread (tests, ``saed bench``).

:func:`bind_socket` listens before anything else starts, so a port in use is a one-line error
and ``--port 0`` learns its port (the Host-header guard needs it).
"""

from __future__ import annotations

import errno
import socket
import sys
import threading
import time

from saed.errors import InputError

__all__ = ["bind_socket", "ServerThread"]


def bind_socket(host: str, port: int) -> socket.socket:
    """A listening TCP socket on host:port; InputError (one line) when the port is taken or the address wrong."""
    if host == "localhost":  # browsers try 127.0.0.1 first; do not end up on ::1 alone
        host = "127.0.0.1"
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except socket.gaierror:
        raise InputError(f"--host {host}: not an address of this computer") from None
    family, _, _, _, addr = infos[0]
    sock = socket.socket(family, socket.SOCK_STREAM)
    try:
        if sys.platform != "win32":
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind(addr)
        sock.listen(64)
    except OSError as exc:
        sock.close()
        if exc.errno == errno.EADDRINUSE:
            raise InputError(f"port {port} on {host} is already in use (another 'saed serve'?); "
                             "choose another with --port") from None
        raise InputError(f"cannot listen on {host}:{port} ({exc.strerror or exc})") from None
    sock.setblocking(False)
    return sock


def _server(app):
    import uvicorn

    config = uvicorn.Config(app, log_level="warning", access_log=False, timeout_graceful_shutdown=2, lifespan="on")
    server = uvicorn.Server(config)
    app.state.server = server  # long-polls end as soon as the server is asked to stop
    return server


def serve_forever(app, sock: socket.socket) -> None:
    """Serve `app` on `sock` until Ctrl+C."""
    server = _server(app)
    try:
        server.run(sockets=[sock])
    finally:
        sock.close()


class ServerThread:
    """`make_app(port)` served on 127.0.0.1 in a background thread; ``url``; :meth:`stop` ends it.

    For tests and benchmarks only: it binds the loopback address and an ephemeral port.
    """

    def __init__(self, make_app, *, host: str = "127.0.0.1", start_timeout_s: float = 30.0):
        self.sock = bind_socket(host, 0)
        self.port = self.sock.getsockname()[1]
        self.url = f"http://{host}:{self.port}/"
        self.app = make_app(self.port)
        self.server = _server(self.app)
        self.thread = threading.Thread(target=self.server.run, kwargs={"sockets": [self.sock]}, name="saed-serve",
                                       daemon=True)
        self.thread.start()
        t_end = time.monotonic() + start_timeout_s
        while not self.server.started:
            if not self.thread.is_alive() or time.monotonic() > t_end:
                raise RuntimeError("the test server did not start")
            time.sleep(0.01)

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=30)
        self.sock.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.stop()

"""Shared set-up of the ``saed serve`` tests: a real server on 127.0.0.1 in a thread, example patterns.

The example patterns (example_images/) are synthetic cobalt grains of the Co-Cr coating; their
truth (phase, zone axis) and calibration are in the sidecar JSON written by
saed.index.demo_set, independent of the server under test.
"""

from __future__ import annotations

import contextlib
import json
import os
import time
from pathlib import Path

from saed.serve.app import create_app
from saed.serve.service import Service
from saed.serve.guard import allowed_hosts
from saed.serve.runner import ServerThread
from saed.serve.settings import PhaseBook, Settings

EXAMPLES = Path(__file__).resolve().parent.parent / "example_images"
PHASES = ("Co-fcc", "Co-hcp", "Ni", "Cr")


def example(name: str) -> tuple[Path, dict]:
    """Path of an example pattern and its sidecar (scale and truth)."""
    return EXAMPLES / f"{name}.tif", json.loads((EXAMPLES / f"{name}.json").read_text())


def start_server(watch: Path | None, *, token: str | None = None, max_upload_mb: float = 64.0,
                 settings: Settings | None = None, remember: bool = True) -> tuple[ServerThread, Service]:
    """A started server (tables warm) watching `watch`; the caller stops it."""
    _, side = example("grain_B_hcp")
    s = settings or Settings(phases=PHASES, scale_inv_nm_per_px=side["scale_inv_nm_per_px"], origin="test")
    service = Service(book=PhaseBook(), settings=s, watch_dir=watch, remember=remember)
    srv = ServerThread(lambda port: create_app(service, hosts=allowed_hosts("127.0.0.1", port), token=token,
                                               max_upload_mb=max_upload_mb))
    wait_for(lambda: service.cache.status()["state"] == "ready", what="tables")
    return srv, service


def wait_for(cond, *, timeout_s: float = 60.0, what: str = "condition"):
    """Poll `cond` until it returns a true value (returned); fail after `timeout_s` (not a timing check)."""
    t_end = time.monotonic() + timeout_s
    while time.monotonic() < t_end:
        v = cond()
        if v:
            return v
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


@contextlib.contextmanager
def settings_dir(folder: Path):
    """SAED_SERVE_DIR set to `folder` (the remembered page settings) for a module-wide fixture."""
    old = os.environ.get("SAED_SERVE_DIR")
    os.environ["SAED_SERVE_DIR"] = str(folder)
    try:
        yield folder
    finally:
        if old is None:
            os.environ.pop("SAED_SERVE_DIR", None)
        else:
            os.environ["SAED_SERVE_DIR"] = old

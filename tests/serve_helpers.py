"""Shared set-up of the ``saed serve`` tests: a real server on 127.0.0.1 in a thread, example patterns.

The example patterns (example_images/) are synthetic cobalt grains of the Co-Cr coating; their
truth (phase, zone axis) and calibration are in the sidecar JSON written by
saed.synth.demo_set, independent of the server under test.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import time
from pathlib import Path

import numpy as np

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


@contextlib.contextmanager
def browser_page(tmp_path_factory):
    """A started server watching a new folder, with headless Chromium on its page: (driver, server, watch
    folder, screenshot folder). Screenshots go to $SAED_SCREENSHOTS when set, else a temporary folder."""
    import shutil
    import tempfile

    from saed.serve.browser import headless_chromium

    with settings_dir(tmp_path_factory.mktemp("serve-state")):
        watch = tmp_path_factory.mktemp("acquisition")
        shots = Path(os.environ.get("SAED_SCREENSHOTS") or tmp_path_factory.mktemp("screenshots"))
        shots.mkdir(parents=True, exist_ok=True)
        srv, _service = start_server(watch)
        profile = tempfile.mkdtemp(prefix="saed-chromium-")
        driver = None
        try:
            driver = headless_chromium(profile)
            driver.get(srv.url)
            yield driver, srv, watch, shots
        finally:
            if driver is not None:
                driver.quit()
            srv.stop()
            shutil.rmtree(profile, ignore_errors=True)


# ---------------------------------------------------------------- a grain at two holder readings
# Check values are worked out here, apart from the code under test: the double-tilt holder as
# H = R(e_alpha, alpha) R(e_beta, beta) (e_alpha on the detector at the alpha-axis azimuth, e_beta =
# z x e_alpha; the convention of docs/conventions.md) with Rodrigues' formula, and the readings that
# bring a crystal direction onto the beam solved from that product. Co-fcc a = 0.35447 nm (built-in
# table; from memory). The images are drawn by saed's synthetic detector (the generator, not the solver).
def rodrigues(axis, deg):
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    a = math.radians(deg)
    return np.eye(3) + math.sin(a) * kx + (1 - math.cos(a)) * (kx @ kx)


def holder_matrix(axis_deg, alpha, beta):
    ea = np.array([math.cos(math.radians(axis_deg)), math.sin(math.radians(axis_deg)), 0.0])
    return rodrigues(ea, alpha) @ rodrigues(np.cross([0, 0, 1.0], ea), beta)


def readings_for(d, axis_deg):
    """alpha, beta with H(alpha, beta) d = z (d a unit vector in the detector frame at readings 0, 0)."""
    ea = np.array([math.cos(math.radians(axis_deg)), math.sin(math.radians(axis_deg)), 0.0])
    eb = np.cross([0, 0, 1.0], ea)
    alpha = math.degrees(math.asin(d @ eb))
    beta = math.degrees(math.atan2(-(d @ ea), d[2]))
    assert np.allclose(holder_matrix(axis_deg, alpha, beta) @ d, [0, 0, 1], atol=1e-9)  # the helper's own check
    return alpha, beta


def grain_pair(folder: Path, zones, *, axis_deg: float, scale: float, first=(5.0, -4.0), rot_deg: float = 35.0,
               seed: int = 7):
    """Two (or more) Co-fcc images of one grain; the first zone at readings `first`, the others at theirs.

    Returns (paths, readings, U0 = crystal Cartesian -> detector frame at readings (0, 0)).
    """
    import tifffile

    from saed.crystal import builtin_phase
    from saed.synth.kinematic import synthetic_image
    from saed.simulate.geometry import orientation_matrix

    ph = builtin_phase("Co-fcc")
    rng = np.random.default_rng(seed)
    u0 = holder_matrix(axis_deg, *first).T @ orientation_matrix(ph.lattice, zones[0], rot_deg)
    paths, tilts = [], []
    for k, z in enumerate(zones):
        d = np.asarray(z, float) / np.linalg.norm(z)  # cubic: the direction [uvw] is along (u, v, w)
        a, b = first if k == 0 else readings_for(u0 @ d, axis_deg)
        u = holder_matrix(axis_deg, a, b) @ u0
        m = u @ orientation_matrix(ph.lattice, z, 0.0).T  # a turn about the beam only
        assert abs(m[2, 2] - 1) < 1e-9
        pat, _ = synthetic_image(ph, z, scale_inv_nm_per_px=scale, image_shape=(512, 512), max_g_inv_nm=11.0, rng=rng,
                                 in_plane_rotation_deg=math.degrees(math.atan2(m[1, 0], m[0, 0])))
        p = folder / f"grain_{k + 1}.tif"
        tifffile.imwrite(p, pat.image)
        paths.append(p)
        tilts.append((round(a, 2), round(b, 2)))
    return paths, tilts, u0

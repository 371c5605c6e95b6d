"""``saed serve`` speed: from a 2048 x 2048 file landing in the watched folder to its result drawn on the page.

A real server (127.0.0.1, ephemeral port) with 10 candidate phases and warm tables, and a real
browser (headless Chromium through Selenium) showing the page. Each call moves one more complete
2048 x 2048 uint16 TIFF (a Co-hcp [2-1-10] pattern made by :func:`saed.synth.kinematic.synthetic_image`,
as in the indexing benchmark) into the watched folder by a rename, the way acquisition programs put
finished files in place, and waits until the page has drawn that pattern's result. The timed
interval therefore contains the folder poll, reading and indexing, the picture for the page, the
page's long-poll, fetching the result and the picture, and drawing.

The page itself records the moment it drew the result (``window.saedShown.t_ms``); the extra line
``page_latency_ms`` is the median landing-to-drawn time from that stamp over the timed calls (the
case's median wall time adds the Selenium poll, ~20 ms and more on a loaded machine);
``server_read_and_index_s`` the part spent reading and indexing on the server. Needs Chromium and
chromedriver (as the browser tests); without them the case is left out with a warning.
"""

from __future__ import annotations

import atexit
import logging
import os
import shutil
import statistics
import tempfile
import time
from pathlib import Path

from saed.bench import Case

__all__ = ["cases"]

logger = logging.getLogger(__name__)

TEN_PHASES = ("Co-fcc", "Co-hcp", "Cr", "Ni", "Ni3Al", "NiAl", "Fe-bcc", "Al", "Si", "Ti-hcp")
COPIES = 200  # hard links of one file: enough for any --repeat


class _State:
    def __init__(self):
        import tifffile
        from saed.crystal import builtin_phase
        from saed.synth.kinematic import synthetic_image
        from saed.serve.service import Service
        from saed.serve.browser import headless_chromium
        from saed.serve.guard import allowed_hosts
        from saed.serve.runner import ServerThread
        from saed.serve.settings import PhaseBook, Settings
        from saed.serve.app import create_app
        from saed.synth.detector import BeamStop

        self.tmp = tempfile.TemporaryDirectory(prefix="saed-bench-serve-")
        root = Path(self.tmp.name)
        self.watch, self.stage = root / "acquisition", root / "staging"
        self.watch.mkdir()
        self.stage.mkdir()
        size = 2048
        scale = 13.0 / (0.46 * size)
        pat, _ = synthetic_image(builtin_phase("Co-hcp"), [2, -1, -1, 0], scale_inv_nm_per_px=scale,
                                 in_plane_rotation_deg=23.0, tilt_deg=0.4, tilt_toward_hkl=[0, 1, 1],
                                 image_shape=(size, size), max_g_inv_nm=13.0, double_diffraction=0.004,
                                 beam_stop=BeamStop(angle_deg=225, width_px=40), rng=5)
        first = self.stage / "p000.tif"
        tifffile.imwrite(first, pat.image)
        for k in range(1, COPIES):
            os.link(first, self.stage / f"p{k:03d}.tif")
        self.next = 0
        os.environ.setdefault("SAED_SERVE_DIR", str(root / "state"))
        settings = Settings(phases=TEN_PHASES, scale_inv_nm_per_px=scale, origin="bench")
        self.service = Service(book=PhaseBook(), settings=settings, watch_dir=self.watch, remember=False)
        self.server = ServerThread(lambda port: create_app(self.service, hosts=allowed_hosts("127.0.0.1", port),
                                                           token=None))
        t_end = time.monotonic() + 300
        while self.service.cache.status()["state"] != "ready" and time.monotonic() < t_end:
            time.sleep(0.05)
        self.profile = tempfile.mkdtemp(prefix="saed-bench-chromium-")
        self.driver = headless_chromium(self.profile, window="1400,1000")
        self.driver.get(self.server.url)
        self.closed = False
        atexit.register(self.close)  # the bench has no tear-down step: the browser and server end with the run
        self.latencies_ms: list[float] = []
        self.index_s: list[float] = []

    def land_and_wait(self) -> None:
        name = f"p{self.next:03d}.tif"
        if self.next >= COPIES:
            raise RuntimeError("bench_serve: more repetitions than staged copies")
        self.next += 1
        os.replace(self.stage / name, self.watch / name)  # complete file renamed into place
        t_land = time.time()
        t_end = time.monotonic() + 120
        while time.monotonic() < t_end:
            shown = self.driver.execute_script("return window.saedShown || null;")
            if shown and shown.get("image") == name:
                self.latencies_ms.append(shown["t_ms"] - 1e3 * t_land)
                rec = next((r for r in self.service.store.newest_first() if r.image == name), None)
                if rec is not None and rec.elapsed_s is not None:
                    self.index_s.append(rec.elapsed_s)
                return
            time.sleep(0.02)
        raise RuntimeError(f"bench_serve: {name} did not appear on the page within 120 s")

    def close(self) -> None:
        if self.closed:
            return
        self.closed = True
        self.driver.quit()
        self.server.stop()
        shutil.rmtree(self.profile, ignore_errors=True)
        self.tmp.cleanup()


def _setup():
    return _State()


def _fn(state: _State):
    state.land_and_wait()
    timed = state.latencies_ms[1:] or state.latencies_ms  # the first call is the warm-up
    index_s = state.index_s[1:] or state.index_s
    out = {"page_latency_ms": round(statistics.median(timed), 1),
           "server_read_and_index_s": round(statistics.median(index_s), 3) if index_s else None,
           "phases": len(TEN_PHASES)}
    return out


def cases():
    from saed.serve.browser import find_browser

    chromium, chromedriver = find_browser()
    if chromium is None or chromedriver is None:
        logger.warning("bench_serve left out: no Chromium/chromedriver or no selenium "
                       "(apt-get install chromium chromium-driver; pip install selenium)")
        return []
    return [Case("serve: 2048x2048 file lands -> result drawn in the browser, 10 phases", _setup, _fn,
                 target_s=1.0, repeat=7, warmup=1,
                 note="real Chromium page; warm tables")]

"""Regression fixture for :func:`saed.image.measure.inspect_pattern` (issue 16, items 6 and 9).

Why this fixture exists: issue 16 splits ``inspect_pattern`` into named steps and replaces
hand-written block sums, bilinear upsampling and label centroids with library calls. Those are
refactors: the centre, the spots, the lattice flags and the notes must come out as before. The
numbers in ``tests/data/inspect_pattern_regression.json`` were recorded from the code BEFORE the
refactor (main at f6ba33b) and are not check values of physics: they pin behaviour, nothing more.
The accuracy of the image stage against ground truth is checked by ``saed bench --only image`` and
tests/test_image_spots.py.

The patterns are drawn here with numpy alone (Gaussian spots on a lattice, a Lorentzian-like haze,
Poisson-like noise from a seeded generator), not with saed.synth, so a change to the synthetic
renderer cannot move the fixture. Regenerate (only when a behaviour change is intended, and say so
in the commit) with ``PYTHONPATH=$PWD python tests/test_image_inspect_regression.py --write``.

Tolerances: positions 1e-3 px and relative 1e-4 elsewhere; block sums in float32 may round in a
different order in a library call (a few units in the last place), which is far below any of these.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

from saed.calibration import Calibration
from saed.image.measure import inspect_pattern

FIXTURE = Path(__file__).parent / "data" / "inspect_pattern_regression.json"
SHAPE = (384, 384)
CENTRE = (190.6, 194.3)


def _gauss(img, x0, y0, amp, sigma):
    r = int(4 * sigma + 2)
    ix, iy = int(round(x0)), int(round(y0))
    r0, r1 = max(iy - r, 0), min(iy + r + 1, img.shape[0])
    c0, c1 = max(ix - r, 0), min(ix + r + 1, img.shape[1])
    if r0 >= r1 or c0 >= c1:
        return
    yy, xx = np.mgrid[r0:r1, c0:c1]
    img[r0:r1, c0:c1] += amp * np.exp(-((xx - x0) ** 2 + (yy - y0) ** 2) / (2 * sigma * sigma))


def _haze(centre=CENTRE, level=300.0):
    yy, xx = np.mgrid[0:SHAPE[0], 0:SHAPE[1]]
    r = np.hypot(xx - centre[0], yy - centre[1])
    return level / (1.0 + (r / 20.0) ** 2) ** 0.8 + 5.0, r, xx, yy


def _lattice(img, *, amp=3000.0, sigma=1.6, g1=(37.0, 6.0), g2=(-9.0, 44.0), rmax=175.0):
    g1, g2 = np.asarray(g1), np.asarray(g2)
    for m in range(-6, 7):
        for n in range(-6, 7):
            if m == 0 and n == 0:
                continue
            v = m * g1 + n * g2
            r = float(np.hypot(*v))
            if r > rmax:
                continue
            _gauss(img, CENTRE[0] + v[0], CENTRE[1] + v[1], amp * np.exp(-r / 90.0), sigma)


def _noisy(img, seed):
    rng = np.random.default_rng(seed)
    return rng.poisson(np.maximum(img, 0.0)).astype(np.float32)


def make_case(name: str) -> np.ndarray:
    """The named test pattern (counts, float32), drawn with numpy only."""
    base, r, xx, yy = _haze()
    img = base.copy()
    if name == "clean":
        _lattice(img, amp=6000.0)
        _gauss(img, *CENTRE, 2e4, 3.0)
        return _noisy(img, 1)
    if name == "noisy":
        _lattice(img, amp=250.0)
        _gauss(img, *CENTRE, 3e3, 3.0)
        return _noisy(img * 0.5, 2)
    if name == "saturated":
        _lattice(img, amp=4000.0)
        _gauss(img, *CENTRE, 2e6, 4.0)
        return np.minimum(_noisy(img, 3), 16000.0)
    if name == "beam_stop":
        _lattice(img, amp=4000.0)
        _gauss(img, *CENTRE, 2e6, 4.0)
        # a rod from just past the centre to the right-hand border, 26 px wide, transmitting 2 %
        ang = np.radians(10.0)
        along = (xx - CENTRE[0]) * np.cos(ang) + (yy - CENTRE[1]) * np.sin(ang)
        across = -(xx - CENTRE[0]) * np.sin(ang) + (yy - CENTRE[1]) * np.cos(ang)
        rod = (along > -14.0) & (np.abs(across) < 13.0)
        img[rod] *= 0.02
        return _noisy(img, 4)
    if name == "rings":
        for radius, amp in ((52.0, 300.0), (60.0, 150.0), (85.0, 120.0), (100.0, 90.0)):
            img += amp * np.exp(-((r - radius) ** 2) / (2 * 1.8 ** 2))
        _gauss(img, *CENTRE, 2e4, 3.0)
        return _noisy(img, 5)
    if name == "friedel":
        # no direct beam and a faint haze (the centre starts from Friedel pairs); hot pixels, a stray spot
        img = _haze(level=20.0)[0]
        _lattice(img, amp=3000.0)
        _gauss(img, CENTRE[0] + 61.0, CENTRE[1] - 23.0, 900.0, 1.6)
        out = _noisy(img, 7)
        for x, y in ((40, 300), (310, 60), (250, 250)):
            out[y, x] += 20000.0
        return out
    if name == "empty":
        return _noisy(np.full(SHAPE, 40.0), 6)
    raise ValueError(name)


CASES = ("clean", "noisy", "saturated", "beam_stop", "rings", "friedel", "hint", "empty")
#: A centre hint 9 px off, as a user might give with --centre (the hint path of the rough centre).
HINT_PX = (CENTRE[0] + 7.0, CENTRE[1] - 5.5)


def record(name: str) -> dict:
    """What inspect_pattern gives for one case, as plain JSON values."""
    if name == "hint":
        insp = inspect_pattern(make_case("friedel"), Calibration(center_px=HINT_PX), source=name)
    else:
        insp = inspect_pattern(make_case(name), Calibration(), source=name)
    mp = insp.measured
    s = mp.spots
    b = mp.basis
    return {
        "center_px": list(mp.center_px), "center_sigma_px": mp.center_sigma_px, "notes": list(mp.notes),
        "spots": {k: getattr(s, k).tolist() for k in ("x_px", "y_px", "intensity", "intensity_sigma", "sigma_xy_px",
                                                      "snr", "size_px", "saturated")},
        "basis": None if b is None else {"g1_px": list(b.g1_px), "g2_px": list(b.g2_px),
                                         "on_lattice": b.on_lattice.tolist(), "indices": b.indices.tolist(),
                                         "rms_residual_px": b.rms_residual_px},
        "spot_sigma_px": insp.spot_sigma_px,
        "direct_beam_px": None if insp.direct_beam_px is None else list(insp.direct_beam_px),
        "direct_beam_saturated": insp.direct_beam_saturated,
        "n_ignored": int(insp.ignored.sum()), "n_saturated": int(insp.saturated.sum()),
        "beam_stop": None if insp.beam_stop is None else [insp.beam_stop.angle_deg, insp.beam_stop.width_px,
                                                          int(insp.beam_stop.mask.sum())],
    }


def _same(got, want, path: str):
    if isinstance(want, dict):
        assert set(got) == set(want), path
        for k in want:
            _same(got[k], want[k], f"{path}.{k}")
    elif isinstance(want, list):
        assert len(got) == len(want), f"{path}: {len(got)} values, recorded {len(want)}"
        for i, (g, w) in enumerate(zip(got, want)):
            _same(g, w, f"{path}[{i}]")
    elif isinstance(want, float) and not isinstance(want, bool):
        if np.isnan(want):
            assert np.isnan(got), path
        else:
            tol = 1e-3 if path.endswith("_px") or "_px[" in path else 1e-4 * max(abs(want), 1.0)
            assert got == pytest.approx(want, abs=tol), path
    else:
        assert got == want, path


@pytest.mark.parametrize("name", CASES)
def test_inspect_pattern_unchanged_by_issue_16_refactor(name):
    want = json.loads(FIXTURE.read_text())[name]
    _same(record(name), want, name)


def test_fixture_covers_what_it_claims():
    """The cases really are what their names say (so the fixture pins each path of inspect_pattern)."""
    rec = json.loads(FIXTURE.read_text())
    assert rec["clean"]["basis"] is not None and len(rec["clean"]["spots"]["x_px"]) > 20
    assert rec["saturated"]["direct_beam_saturated"] and rec["saturated"]["n_saturated"] > 0
    assert rec["beam_stop"]["beam_stop"] is not None
    assert rec["friedel"]["direct_beam_px"] is None and "no direct beam seen at the centre" in rec["friedel"]["notes"]
    assert rec["empty"]["spots"]["x_px"] == [] and any("no spots" in n for n in rec["empty"]["notes"])


if __name__ == "__main__" and "--write" in sys.argv:
    FIXTURE.write_text(json.dumps({n: record(n) for n in CASES}, indent=1) + "\n")
    print(f"wrote {FIXTURE}")

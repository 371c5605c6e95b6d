"""The JSON documents of ``saed spots``, ``simulate``, ``tilt``, ``phases``, ``ratio``, ``rings`` and ``calibrate``
stay field for field as they were.

Issue 16.3 moved these writers out of the command modules into report/ (one schema module per
command). The reference documents in tests/data/json_before/ were written by the commands as they
were before that move (commit f6ba33b; ratio, rings and calibrate: recorded before their move, see
git log of the data files), on the fixed inputs below; CONTRACT.md says "keep every
field, add freely", so every recorded field must still be there with the same value, and new
fields may be added. Floats are compared to 1e-9 relative (they are written rounded, so a real
change shows up far above that). What differs from run to run by nature (the temporary folder, the
time stamps of calibrate and of history file names) is masked before comparing (RUN_PARTS).

To record a new reference after a deliberate change of a value: run this file with
``SAED_RECORD_JSON=1`` and say why in the commit.
"""

from __future__ import annotations

import json
import math
import os
import re
from pathlib import Path

import numpy as np
import pytest
import tifffile

from saed.cli import main

BEFORE = Path(__file__).parent / "data" / "json_before"


def _spot_image(path: Path) -> None:
    """A 256 x 256 pattern written here, not by saed's generators: Gaussian spots (sigma 1.8 px) on a
    centred rectangular lattice g1 = (21, 3) px, g2 = (-4, 27) px about (129.3, 126.8), a bright
    direct beam, flat background 40 counts and Poisson noise with a fixed seed."""
    rng = np.random.default_rng(16)
    yy, xx = np.mgrid[0:256, 0:256].astype(float)
    img = np.full((256, 256), 40.0)
    c = np.array([129.3, 126.8])
    for m in range(-4, 5):
        for n in range(-4, 5):
            x, y = c + m * np.array([21.0, 3.0]) + n * np.array([-4.0, 27.0])
            if not (8 < x < 248 and 8 < y < 248):
                continue
            peak = 9000.0 if (m, n) == (0, 0) else 1500.0 / (1.0 + 0.15 * (m * m + n * n))
            img += peak * np.exp(-((xx - x) ** 2 + (yy - y) ** 2) / (2 * 1.8**2))
    tifffile.imwrite(path, rng.poisson(img).astype(np.uint16), photometric="minisblack")


def _ring_image(path: Path) -> None:
    """A gold ring pattern (384 x 384 px, 0.06 1/nm per px, seed 4) from the ring renderer of saed.synth:
    the renderer is not the ring finder or matcher these commands run, and only the documents' form
    and values before/after the move are compared here, not the physics."""
    from saed.crystal import builtin_phase
    from saed.synth.rings import ring_pattern

    pat = ring_pattern([builtin_phase("Au")], shape_px=(384, 384), scale_inv_nm_per_px=0.06, rng=4)
    tifffile.imwrite(path, np.clip(pat.image, 0, 65535).astype(np.uint16), photometric="minisblack")


CASES = {
    "spots": ["spots", "{image}", "--scale", "0.021", "--voltage", "200"],
    "simulate_fcc": ["simulate", "Co-fcc", "--zone", "0", "1", "1", "--max-g", "12", "--rotation", "12.5"],
    "simulate_hcp_tilted": ["simulate", "Co-hcp", "--zone", "2", "-1", "-1", "0", "--max-g", "10",
                            "--tilt", "1.5", "--tilt-toward", "0", "1", "-1", "0", "--thickness", "80"],
    "tilt_reachable": ["tilt", "Co-fcc", "--zone", "0", "0", "1", "--rotation", "20", "--target", "0", "1", "2",
                       "--max-index", "2"],
    "phases_cobalt": ["phases", "Co"],
    "tilt_out_of_range": ["tilt", "Co-hcp", "--zone", "0", "0", "0", "1", "--target", "2", "-1", "-1", "0",
                          "--alpha-range", "20", "--beta-range", "-10", "15", "--recorded-at", "5", "-3",
                          "--max-index", "2"],
    # Co-fcc d(111) and d(200) at 54.7 deg: the worked numbers of `saed ratio --help` (a = 0.3545 nm, from memory)
    "ratio_d": ["ratio", "0.2047", "0.1772", "54.7", "--phase", "Co", "--phase", "Ni"],
    "ratio_radii": ["ratio", "--radii", "10.0", "11.55", "54.7", "--phase", "Co"],
    "ratio_radii_calibrated": ["ratio", "--radii", "10.0", "11.55", "54.7", "--camera-constant", "2.047",
                               "--phase", "Co", "--top", "3"],
    "rings_au": ["rings", "{rings}", "--scale", "0.06", "--voltage", "200", "--phase", "Au", "--phase", "Al",
                 "--phase", "Cu"],
    "rings_uncalibrated": ["rings", "{rings}", "--phase", "Au", "--phase", "Ag", "--no-mixtures"],
    "calibrate_au": ["calibrate", "{rings}", "--standard", "Au", "--voltage", "200", "--pixel-pitch", "15",
                     "--no-history"],
    "calibrate_history": ["calibrate", "{rings}", "--standard", "Au", "--voltage", "200", "--camera-length", "300",
                          "--history", "{tmp}/hist", "--out", "{tmp}/cal.json"],
    # the list of a history holding one calibration filed just before
    "calibrate_list": [["calibrate", "{rings}", "--standard", "Au", "--camera-length", "300", "--history", "{tmp}/hist"],
                       ["calibrate", "--list", "{tmp}/hist"]],
}
#: Per-run parts of a document: the temporary folder, the time stamps of calibrate and of history file names.
RUN_PARTS = [(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d[+-]\d\d:\d\d", "DATE"), (r"\d{8}-\d{6}", "STAMP")]


def _same(before, now, where: str) -> None:
    if isinstance(before, dict):
        assert isinstance(now, dict), where
        missing = set(before) - set(now)
        assert not missing, f"{where}: fields dropped: {sorted(missing)}"
        for k, v in before.items():
            _same(v, now[k], f"{where}.{k}")
    elif isinstance(before, list):
        assert isinstance(now, list) and len(now) == len(before), f"{where}: {len(before)} items before"
        for i, (a, b) in enumerate(zip(before, now)):
            _same(a, b, f"{where}[{i}]")
    elif isinstance(before, float) and not isinstance(now, bool) and isinstance(now, (int, float)):
        assert math.isclose(before, now, rel_tol=1e-9, abs_tol=1e-12), f"{where}: {before!r} before, {now!r} now"
    else:
        assert type(before) is type(now) and before == now, f"{where}: {before!r} before, {now!r} now"


@pytest.mark.parametrize("case", sorted(CASES))
def test_json_document_keeps_every_field_and_value(case, tmp_path, capsys):
    image, rings = tmp_path / "pattern.tif", tmp_path / "rings.tif"
    steps = CASES[case] if isinstance(CASES[case][0], list) else [CASES[case]]
    if any("{image}" in step for step in steps):
        _spot_image(image)
    if any("{rings}" in step for step in steps):
        _ring_image(rings)
    out = tmp_path / "out.json"
    for k, step in enumerate(steps):
        argv = [a.format(image=image, rings=rings, tmp=tmp_path) for a in step]
        assert main(argv + (["--json", str(out)] if k == len(steps) - 1 else [])) == 0
    capsys.readouterr()
    now = json.loads(out.read_text())
    for path in (image, rings):  # the temporary path differs from run to run
        if isinstance(now, dict) and now.get("image") == str(path):
            now["image"] = path.name
    text = json.dumps(now).replace(str(tmp_path), "TMP")
    for pattern, mark in RUN_PARTS:
        text = re.sub(pattern, mark, text)
    now = json.loads(text)
    ref = BEFORE / f"{case}.json"
    if os.environ.get("SAED_RECORD_JSON"):
        ref.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
    _same(json.loads(ref.read_text()), now, case)


def test_bench_json_keeps_every_field_and_value(tmp_path, monkeypatch, capsys):
    """``saed bench --json`` on fixed timings (the run itself is replaced: its medians differ every time);
    the extras cover every kind the writer treats differently (numbers and text kept, the rest as text)."""
    from saed import bench

    floor = bench.Result("floor: sum of a 2048 x 2048 image", median_s=0.0125, min_s=0.0121, n=7, target_s=None)
    results = [bench.Result("index one pattern", median_s=0.84, min_s=0.8, n=5, target_s=2.0, ratio_to_floor=67.2,
                            note="loaded machine", extra={"rank1_pct": 96.5, "cases": 40, "phase": "Co-fcc",
                                                          "zone": (0, 1, 1), "missing": None}),
               bench.Result("scan frames", median_s=3.5, min_s=3.4, n=3, target_s=None, ratio_to_floor=280.0, per=100)]
    monkeypatch.setattr(bench, "run", lambda **kw: ({"image2048": floor}, results))
    out = tmp_path / "bench.json"
    assert main(["bench", "--json", str(out)]) == 0
    capsys.readouterr()
    now = json.loads(out.read_text())
    ref = BEFORE / "bench_fixed.json"
    if os.environ.get("SAED_RECORD_JSON"):
        ref.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
    _same(json.loads(ref.read_text()), now, "bench")


def test_grain_json_keeps_every_field_and_value(tmp_path, capsys):
    """``saed grain --json`` on the fcc [112] + [111] series of tests/test_grain.py (drawn by the synthetic
    detector at holder readings worked out there, not by the grain solver)."""
    from test_grain import SCALE, _series, _tilt_args

    paths, tilts, _ = _series(tmp_path, [(1, 1, 2), (1, 1, 1)])
    out = tmp_path / "grain.json"
    assert main(["grain", *paths, *_tilt_args(tilts), "--phase", "Co-fcc", "--phase", "Co-hcp", "--scale",
                 f"{SCALE}", "--alpha-axis", "25", "--json", str(out)]) == 0
    capsys.readouterr()
    now = json.loads(out.read_text().replace(str(tmp_path), "TMP"))
    ref = BEFORE / "grain_fcc_112_111.json"
    if os.environ.get("SAED_RECORD_JSON"):
        ref.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
    _same(json.loads(ref.read_text()), now, "grain")

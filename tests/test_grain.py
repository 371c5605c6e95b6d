"""``saed grain``: one orientation from several patterns of one grain at recorded holder readings.

Check values are worked out in the test: the holder rotation H = R(e_alpha, alpha) R(e_beta, beta)
(e_alpha on the detector at the alpha-axis azimuth, e_beta = z x e_alpha; the convention stated in
docs/conventions.md and saed/simulate/tilt.py) with Rodrigues' formula, the readings that put a
zone on the beam from the geometry of that product, the 24 proper rotations of a cubic crystal as
signed permutation matrices of determinant +1 (International Tables vol. A, point group 432), and
Bunge's Euler-angle matrix (Bunge, *Texture Analysis in Materials Science*, 1982, eq. 2.37:
g = Rz(phi2) Rx(Phi) Rz(phi1), passive). Co-fcc a = 0.35447 nm (built-in table; from memory).
The patterns are drawn by saed's synthetic detector (the image generator, not the code under test).
"""

from __future__ import annotations

import itertools
import json
import math
import re
from dataclasses import dataclass

import numpy as np
import pytest
import tifffile
from hypothesis import given, settings, strategies as st

from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.synth.kinematic import synthetic_image
from saed.simulate.geometry import orientation_matrix

SCALE = 13.0 / (0.46 * 512)


def _rod(axis, deg):
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    a = math.radians(deg)
    return np.eye(3) + math.sin(a) * kx + (1 - math.cos(a)) * (kx @ kx)


def _holder(axis_deg, alpha, beta):
    ea = np.array([math.cos(math.radians(axis_deg)), math.sin(math.radians(axis_deg)), 0.0])
    eb = np.cross([0, 0, 1.0], ea)
    return _rod(ea, alpha) @ _rod(eb, beta)


def _readings(d, axis_deg):
    """alpha, beta with H(alpha, beta) d = z: R(e_b, beta) d = R(e_a, -alpha) z; solved component-wise."""
    ea = np.array([math.cos(math.radians(axis_deg)), math.sin(math.radians(axis_deg)), 0.0])
    eb = np.cross([0, 0, 1.0], ea)
    x, y, z = d @ ea, d @ eb, d[2]
    alpha = math.degrees(math.asin(y))
    beta = math.degrees(math.atan2(-x, z))
    assert np.allclose(_holder(axis_deg, alpha, beta) @ d, [0, 0, 1], atol=1e-9)  # the test's own check
    return alpha, beta


CUBIC = [np.array(p) * np.array(s)[:, None] for p in itertools.permutations(np.eye(3))
         for s in itertools.product((1, -1), repeat=3)]
CUBIC = [m for m in CUBIC if round(np.linalg.det(m)) == 1]


def _cubic_misorientation(u, v):
    return min(math.degrees(math.acos(max(-1, min(1, (np.trace(u @ s @ v.T) - 1) / 2)))) for s in CUBIC)


def _series(tmp_path, zones, *, axis=25.0, rot=40.0, noise=0.4, seed=3, first=(4.0, -3.0), phase="Co-fcc"):
    """Images of one grain at the readings that put each zone on the beam; truth U0 at readings (0, 0)."""
    ph = builtin_phase(phase)
    rng = np.random.default_rng(seed)
    u1 = orientation_matrix(ph.lattice, zones[0], rot)
    u0 = _holder(axis, *first).T @ u1
    paths, tilts = [], []
    for k, z in enumerate(zones):
        r = ph.lattice.r_cartesian_nm(z)
        a, b = first if k == 0 else _readings(u0 @ (r / np.linalg.norm(r)), axis)
        u = _holder(axis, a, b) @ u0
        m = u @ orientation_matrix(ph.lattice, z, 0.0).T  # = Rz(phi) on the zone
        assert abs(m[2, 2] - 1) < 1e-9
        pat, _ = synthetic_image(ph, z, scale_inv_nm_per_px=SCALE, in_plane_rotation_deg=math.degrees(
            math.atan2(m[1, 0], m[0, 0])), image_shape=(512, 512), max_g_inv_nm=13.0, rng=rng)
        p = tmp_path / f"p{k + 1}.tif"
        tifffile.imwrite(p, pat.image)
        paths.append(str(p))
        tilts.append((a + rng.uniform(-noise, noise), b + rng.uniform(-noise, noise)))
    return paths, tilts, u0


@dataclass
class _Done:
    returncode: int
    stdout: str
    stderr: str


def _run(args, capsys):
    """`saed grain ARGS` in this process (the command-line entry point, without a start-up per call)."""
    from saed.cli import main

    capsys.readouterr()
    try:
        code = main(["grain", *args])
    except SystemExit as exc:  # argparse refusals
        code = exc.code
    out = capsys.readouterr()
    return _Done(code, out.out, out.err)


def _tilt_args(tilts):
    out = []
    for a, b in tilts:
        out += ["--tilt", f"{a:.3f},{b:.3f}"]
    return out


def test_fcc_112_and_111_give_one_orientation_and_rule_out_hcp(tmp_path, capsys):
    """The look-alike pair: fcc [112] alone fits hcp [01-10] too; with [111] at the recorded tilt only fcc fits."""
    paths, tilts, u0 = _series(tmp_path, [(1, 1, 2), (1, 1, 1)])
    # the tilt between them is the [112]-[111] angle, acos(4 / sqrt(18)) = 19.47 deg (cubic geometry)
    out = tmp_path / "g.json"
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Co-fcc", "--phase", "Co-hcp", "--scale", f"{SCALE}",
              "--alpha-axis", "25", "--json", str(out)], capsys)
    assert r.returncode == 0, r.stderr
    doc = json.loads(out.read_text())
    best = doc["solutions"][0]
    assert best["phase"] == "Co-fcc" and best["joint"]
    u = np.array(best["orientation_matrix"])
    assert _cubic_misorientation(u, u0) < 2.0
    # Bunge: g = U^T = Rz(phi2) Rx(Phi) Rz(phi1)
    p1, pp, p2 = np.radians(best["euler_bunge_deg"])
    rz = lambda t: np.array([[math.cos(t), math.sin(t), 0], [-math.sin(t), math.cos(t), 0], [0, 0, 1]])  # noqa: E731
    rx = np.array([[1, 0, 0], [0, math.cos(pp), math.sin(pp)], [0, -math.sin(pp), math.cos(pp)]])
    assert np.allclose(rz(p2) @ rx @ rz(p1), u.T, atol=1e-4)
    zones = [sorted(map(abs, p["zone_axis"])) for p in best["patterns"]]
    assert zones == [[1, 1, 2], [1, 1, 1]]
    assert all(p["misfit_deg"] < 2.0 for p in best["patterns"])
    hcp = [lk for lk in doc["lookalikes"] if lk["phase"] == "Co-hcp"]
    assert hcp and hcp[0]["relation"] == "decided"
    assert "Co-fcc" in r.stdout and "settled" in r.stdout


def test_the_180_degree_reading_is_settled_by_the_second_pattern(tmp_path, capsys):
    """fcc [111] is no two-fold axis: one pattern fits U and Rz(180) U (60 deg apart in cubic terms); two decide."""
    paths, tilts, u0 = _series(tmp_path, [(1, 1, 1), (0, 1, 1)], rot=12.0, axis=-40.0, seed=5)
    h1 = _holder(-40.0, 4.0, -3.0)  # the first pattern's readings: the turn is about the beam there
    turned = h1.T @ _rod([0, 0, 1], 180) @ h1 @ u0
    assert _cubic_misorientation(turned, u0) == pytest.approx(60.0, abs=1e-6)
    from saed.calibration import Calibration, write_calibration_file

    cal = tmp_path / "cal.json"
    write_calibration_file(Calibration(SCALE, 200.0, alpha_axis_deg=-40.0), cal)
    out = tmp_path / "g.json"
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Co-fcc", "--calibration", str(cal), "--json", str(out)],
             capsys)
    assert r.returncode == 0, r.stderr
    doc = json.loads(out.read_text())
    u = np.array(doc["solutions"][0]["orientation_matrix"])
    assert _cubic_misorientation(u, u0) < 2.0
    assert doc["per_pattern"][0]["solutions"][0]["sense_ambiguous_180"] is True
    assert doc["inputs"][0]["alpha_axis_deg"] == pytest.approx(320.0)  # from the calibration file (-40 = 320)


def test_a_pattern_of_another_grain_is_named(tmp_path, capsys):
    paths, tilts, _ = _series(tmp_path, [(1, 1, 2), (1, 1, 1), (0, 1, 1)], seed=7)
    sub = tmp_path / "other"
    sub.mkdir()
    other, _, _ = _series(sub, [(0, 0, 1)], rot=71.0, seed=9, first=(-8.0, 6.0))  # a grain on [001] elsewhere
    paths[2] = other[0]
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Co-fcc", "--scale", f"{SCALE}", "--alpha-axis", "25"],
             capsys)
    assert r.returncode == 0, r.stderr
    assert "no joint solution" in r.stdout
    assert other[0] in r.stdout.split("no joint solution")[1].splitlines()[0]


@pytest.mark.parametrize("extra,needle", [
    (["--tilt", "0,0"], "--tilt"),
    (["--tilt", "0,0", "--tilt", "95,0"], "-90..90"),
    (["--tilt", "0,0", "--tilt", "abc"], "ALPHA,BETA"),
    (["--tilt", "1,2", "--tilt", "1,2"], "same holder readings"),
])
def test_bad_tilts_exit_2_with_one_line(tmp_path, extra, needle, capsys):
    img = tmp_path / "a.tif"
    tifffile.imwrite(img, np.zeros((64, 64), np.uint16))
    r = _run([str(img), str(img), *extra, "--scale", "0.02"], capsys)
    assert r.returncode == 2
    assert needle in r.stderr and "Traceback" not in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_images_of_different_camera_lengths_need_their_own_calibrations(tmp_path, capsys):
    a, b = tmp_path / "a.tif", tmp_path / "b.tif"
    img = np.zeros((64, 64), np.uint16)
    tifffile.imwrite(a, img, imagej=True, resolution=(1 / 0.02, 1 / 0.02), metadata={"unit": "1/nm"})
    tifffile.imwrite(b, img, imagej=True, resolution=(1 / 0.03, 1 / 0.03), metadata={"unit": "1/nm"})
    r = _run([str(a), str(b), "--tilt", "0,0", "--tilt", "10,0", "--scale", "0.02"], capsys)
    assert r.returncode == 2 and "different camera lengths" in r.stderr and "Traceback" not in r.stderr


@settings(max_examples=30, deadline=None)
@given(st.text(max_size=20))
def test_tilt_parser_never_raises_anything_but_input_error(text):
    from saed.cli.cmd_grain import parse_tilt

    try:
        a, b = parse_tilt(text)
    except InputError:
        return
    assert abs(a) <= 90 and abs(b) <= 90


def test_a_third_pattern_is_named_when_the_recorded_zones_cannot_separate(tmp_path, capsys):
    """Cr (bcc) vs NiAl (B2): the B2 superlattice spots (h+k+l odd) lie in no zone [uvw] with u, v, w all odd,
    so [111] and [113] separate nothing; the third zone must hold such spots and be reached by the readings."""
    paths, tilts, u0 = _series(tmp_path, [(1, 1, 1), (1, 1, 3)], phase="Cr", seed=11, noise=0.2)
    out = tmp_path / "g.json"
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Cr", "--phase", "NiAl", "--scale", f"{SCALE}",
              "--alpha-axis", "25", "--json", str(out)], capsys)
    assert r.returncode == 0, r.stderr
    doc = json.loads(out.read_text())
    assert {s["phase"] for s in doc["solutions"][:2]} == {"Cr", "NiAl"}
    assert any(lk["relation"] == "undecided" for lk in doc["lookalikes"])
    third = doc["third_pattern"]
    assert third is not None and "to settle it" in r.stdout
    z = third["zone_axis"]
    # the test's own zone rule: some low-order hkl in that zone has h+k+l odd (a B2 superlattice spot)
    assert any((h * z[0] + k * z[1] + l * z[2]) == 0 and (h + k + l) % 2 == 1
               for h in range(-2, 3) for k in range(-2, 3) for l in range(-2, 3))
    # and the readings bring it onto the beam for the joint orientation, within the holder's 1 deg or so
    u = np.array(doc["solutions"][0]["orientation_matrix"])
    a, b = third["tilt_deg"]
    beam = _holder(25.0, a, b) @ u @ (np.array(z, float) / np.linalg.norm(z))  # cubic: [uvw] Cartesian || uvw
    assert abs(abs(beam[2]) - 1) < 1e-3


def test_sidecar_calibrations_are_read_without_options(tmp_path, capsys):
    """The calibration order of every image command holds for grain too: each image's NAME.json sidecar
    (saed's calibration-file format) is used when no option is given, and the JSON names the source."""
    from saed.calibration import Calibration, write_calibration_file

    paths, tilts, u0 = _series(tmp_path, [(1, 1, 2), (1, 1, 1)], seed=5)
    for p in paths:
        write_calibration_file(Calibration(SCALE, 200.0, alpha_axis_deg=25.0), p[:-4] + ".json")
    out = tmp_path / "g.json"
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Co-fcc", "--phase", "Co-hcp", "--json", str(out)], capsys)
    assert r.returncode == 0, r.stderr
    doc = json.loads(out.read_text())
    assert [c["calibration_source"] for c in doc["calibrations"]] == ["sidecar", "sidecar"]
    assert "(sidecar" in r.stdout
    best = doc["solutions"][0]
    assert best["phase"] == "Co-fcc" and _cubic_misorientation(np.array(best["orientation_matrix"]), u0) < 2.0


def _hcp_series(tmp_path):
    """Co-hcp on [2-1-10] then [10-11] (3-index [100], [211]): zones with negative 4-index components."""
    return _series(tmp_path, [(1, 0, 0), (2, 1, 1)], phase="Co-hcp", first=(-3.0, 2.0))


def test_terminal_summary_has_overbars_and_stays_aligned_and_honours_units(tmp_path, capsys):
    from saed.crystal.notation import text_width

    paths, tilts, _ = _hcp_series(tmp_path)
    r = _run([*paths, *_tilt_args(tilts), "--phase", "Co-hcp", "--scale", f"{SCALE}", "--alpha-axis", "25",
              "--units", "angstrom", "--report", str(tmp_path / "rep")], capsys)
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    k = next(i for i, line in enumerate(lines) if line.strip().startswith("pattern"))
    head, rows = lines[k], lines[k + 1:k + 3]
    # [2-1-10] (3-index [100], Miller-Bravais U = (2u - v)/3 ..., common practice) with overbars, no minus sign
    assert "[21\u03051\u03050]" in rows[0], rows[0]
    zones = re.findall(r"\[[^\]]*\]", "\n".join(rows))
    assert len(zones) == 2 and all("-" not in z and len(z.replace("\u0305", "")) == 6 for z in zones), zones
    # the columns after the zone stay put: 'misfit' ends with each 'N.NN deg', 'spots' with each count
    misfit_end = text_width(head[:head.index("misfit") + len("misfit")])
    spots_end = text_width(head[:head.index("spots") + len("spots")])
    for row in rows:
        m = re.search(r"\d+\.\d\d deg +(\d+)", row)
        assert text_width(row[:m.start() + len("0.00 deg")]) == misfit_end, row
        assert text_width(row[:m.end()]) == spots_end, row
    assert "1/Å per px" in r.stdout and "1/nm" not in r.stdout  # the calibration lines follow --units
    page = (tmp_path / "rep" / "index.html").read_text()
    card = page.split("<h2")[0]  # the grain card comes before the per-pattern sections
    assert '[2<span class="ob">1</span><span class="ob">1</span>0]' in card and "[2-1-10]" not in card
    assert "1/Å per px" in page


def test_terminal_summary_falls_back_to_minus_signs_on_a_plain_stream(tmp_path, monkeypatch):
    import io
    import sys

    from saed.cli import main

    paths, tilts, _ = _hcp_series(tmp_path)
    buf = io.TextIOWrapper(io.BytesIO(), encoding="ascii")
    monkeypatch.setattr(sys, "stdout", buf)
    assert main(["grain", *map(str, paths), *_tilt_args(tilts), "--phase", "Co-hcp", "--scale", f"{SCALE}",
                 "--alpha-axis", "25"]) == 0
    buf.flush()
    out = buf.buffer.getvalue().decode("ascii")  # nothing the stream cannot encode
    assert "[2-1-10]" in out and "\u0305" not in out

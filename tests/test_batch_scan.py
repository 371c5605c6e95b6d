"""Scan grids, zone families and the scan-map picture."""

import itertools

import numpy as np
import pytest

from saed.batch.inputs import FrameSource
from saed.batch.results import Row
from saed.batch.scan import ERROR, NO_SOLUTION, NOT_DONE, build_scan_map, check_scan_shape, summarize, zone_family
from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.report.scan_map import PHASE_COLOURS, format_summary, render_scan_map, summary_csv


def _signed_permutations(v):
    return {tuple(s * x for s, x in zip(signs, p)) for p in itertools.permutations(v)
            for signs in itertools.product((1, -1), repeat=3)}


def test_cubic_zone_families_have_one_name():
    # m-3m: the form <110> has 12 members, <111> 8, <100> 6, <123> 48 (International Tables Vol. A,
    # point group m-3m); here built by hand as signed permutations, independent of gemmi.
    al = builtin_phase("Al")
    # The representative is the textbook one, in the 001-011-111 triangle with w >= v >= u >= 0.
    for v, n, rep in (((1, 1, 0), 12, (0, 1, 1)), ((1, 1, 1), 8, (1, 1, 1)), ((1, 0, 0), 6, (0, 0, 1)),
                      ((1, 2, 3), 48, (1, 2, 3))):
        members = _signed_permutations(v)
        assert len(members) == n
        assert {zone_family(m, al) for m in members} == {rep}


def test_hexagonal_zone_families_in_four_indices():
    # 6/mmm on hexagonal axes: the a axes <2-1-10> are [100], [010], [110] and their negatives (3-index),
    # the <10-10> directions are [1-10], [210], [120] and negatives ([UVTW] -> [U-T, V-T, W], Frank 1965).
    co = builtin_phase("Co-hcp")
    a_axes = [(1, 0, 0), (0, 1, 0), (1, 1, 0)]
    m_axes = [(1, -1, 0), (2, 1, 0), (1, 2, 0)]
    assert {zone_family(s * np.array(v), co) for v in a_axes for s in (1, -1)} == {(1, 1, -2, 0)}
    assert {zone_family(s * np.array(v), co) for v in m_axes for s in (1, -1)} == {(0, 1, -1, 0)}
    assert zone_family((0, 0, -1), co) == zone_family((0, 0, 1), co) == (0, 0, 0, 1)
    with pytest.raises(InputError):
        zone_family((0, 0, 0), co)


def _rows(name, frames, phase, zone):
    return [Row(name, k, phase=phase, zone_axis=zone, score=0.9) for k in frames]


def test_scan_grid_follows_the_input_order(tmp_path):
    a = FrameSource("a.npy", str(tmp_path / "a.npy"), 6, (6,))
    b = FrameSource("b.npy", str(tmp_path / "b.npy"), 6, (6,))
    rows = (_rows(a.path, range(6), "Co-fcc", (0, 1, 1)) + _rows(b.path, range(3), "Co-hcp", (0, 0, 1))
            + [Row(b.path, 3, status="no-solution"), Row(b.path, 4, status="error: NaN"),
               Row(str(tmp_path / "elsewhere.npy"), 0, phase="Si", zone_axis=(1, 1, 1))])
    phases = {n: builtin_phase(n) for n in ("Co-fcc", "Co-hcp")}
    scan = build_scan_map(rows, (a, b), (3, 4), phases=phases, phase_order=("Co-hcp", "Co-fcc"))
    assert scan.phases == ("Co-hcp", "Co-fcc")
    expected = np.array([[1, 1, 1, 1], [1, 1, 0, 0], [0, NO_SOLUTION, ERROR, NOT_DONE]])
    np.testing.assert_array_equal(scan.phase_index, expected)
    assert scan.summary.n_frames == 11 and scan.summary.n_ok == 9
    assert [(f.phase, f.label, f.count) for f in scan.families] == [("Co-fcc", "<011>", 6), ("Co-hcp", "<0001>", 3)]
    with pytest.raises(InputError, match="12 frames"):
        check_scan_shape((5, 5), (a, b))
    with pytest.raises(InputError, match="--scan-shape"):
        check_scan_shape(None, (a, b))
    assert check_scan_shape(None, (FrameSource("s.npy", "/s.npy", 12, (3, 4)),)) == (3, 4)


def test_summary_tables():
    rows = (_rows("/x.npy", range(3), "Co-fcc", (0, 1, 1)) + _rows("/x.npy", range(3, 4), "Co-fcc", (1, 0, 1))
            + _rows("/x.npy", range(4, 6), "Co-hcp", (1, 0, 0)) + [Row("/x.npy", 6, status="no-solution")])
    s = summarize(rows, phases={n: builtin_phase(n) for n in ("Co-fcc", "Co-hcp")})
    assert s.phases == (("Co-fcc", 4), ("Co-hcp", 2))
    text = format_summary(s)
    assert "<011> 4" in text and "<11-20> 2" in text and "no solution" in text
    # a terminal that can show overbars gets them, as in every other terminal table (common practice)
    assert "<112\u03050> 2" in format_summary(s, "unicode")
    assert "Co-hcp,1 1 -2 0,2," in summary_csv(s)


def test_scan_map_png_shows_each_phase_colour(tmp_path):
    from matplotlib.image import imread

    ny, nx = 12, 16
    src = FrameSource("scan.npy", str(tmp_path / "scan.npy"), ny * nx, (ny, nx))
    rows = []
    for k in range(ny * nx):
        iy, ix = divmod(k, nx)
        if ix < 12:
            rows.append(Row(src.path, k, phase="Co-fcc", zone_axis=(0, 1, 1) if iy < 6 else (1, 1, 2), score=0.9))
        elif iy < 10:
            rows.append(Row(src.path, k, phase="Co-hcp", zone_axis=(0, 0, 1), score=0.8))
        else:
            rows.append(Row(src.path, k, status="no-solution"))
    phases = {n: builtin_phase(n) for n in ("Co-fcc", "Co-hcp")}
    scan = build_scan_map(rows, (src,), None, phases=phases, phase_order=("Co-fcc", "Co-hcp"))
    out = tmp_path / "map.png"
    render_scan_map(scan, out, title="scan.npy")
    full = imread(out)[..., :3]
    h, w = full.shape[:2]
    img = full[: int(0.45 * h), : int(0.7 * w)]      # the phase and zone-family maps (top row)

    def n_pixels(hex_colour):
        rgb = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255
        return int(np.count_nonzero(np.abs(img - rgb).max(axis=-1) < 0.02))

    fcc, hcp, unused = (n_pixels(PHASE_COLOURS[i]) for i in (0, 1, 2))
    assert fcc > 2 * hcp > 0           # Co-fcc covers 144 positions, Co-hcp 40
    assert unused == 0
    # one colour per phase in both maps: every saturated pixel of the zone-family map has the hue of a
    # phase colour (its families are lighter or darker shades of it)
    from matplotlib.colors import rgb_to_hsv, to_rgb

    zone = full[: int(0.45 * h), int(0.36 * w): int(0.68 * w)]
    hsv = rgb_to_hsv(zone.reshape(-1, 3))
    coloured = hsv[(hsv[:, 1] > 0.35) & (hsv[:, 2] > 0.3)]
    phase_hues = [rgb_to_hsv(np.array(to_rgb(PHASE_COLOURS[i])))[0] for i in (0, 1)]
    off = np.min([np.abs((coloured[:, 0] - ph + 0.5) % 1.0 - 0.5) for ph in phase_hues], axis=0)
    assert len(coloured) > 1000 and np.mean(off < 0.03) > 0.98


def test_a_scan_function_gets_16_bit_frames_as_recorded_and_the_checks_still_hold(tmp_path):
    # frames written here: 16-bit counts, a constant frame and an all-zero one (check_image's refusals,
    # saed.image.io); a frame function that takes counts gets the uint16 array itself, one that does not
    # gets check_image's float32 copy, and both see the same error rows
    from saed.batch.runner import Chunk, process_chunk

    stack = np.random.default_rng(4).poisson(40, (4, 48, 48)).astype(np.uint16)
    stack[1] = 7
    stack[2] = 0
    np.save(tmp_path / "s.npy", stack)
    seen = []

    def counts(image, shared, *, name, frame, context=None):
        seen.append((frame, image.dtype, int(image.sum(dtype=np.int64))))
        return Row(name, frame, status="ok")

    def floats(image, shared, *, name, frame, context=None):
        seen.append((frame, image.dtype, int(image.sum(dtype=np.float64))))
        return Row(name, frame, status="ok")

    counts.takes_counts = True
    chunk = Chunk("s.npy", str(tmp_path / "s.npy"), (0, 1, 2, 3), stack=True)
    rows_c = process_chunk(chunk, counts, None)
    got_c, seen[:] = list(seen), []
    rows_f = process_chunk(chunk, floats, None)
    assert [(f, d) for f, d, _ in got_c] == [(0, np.uint16), (3, np.uint16)]
    assert [(f, d) for f, d, _ in seen] == [(0, np.float32), (3, np.float32)]
    assert [t for _, _, t in got_c] == [t for _, _, t in seen] == [int(stack[0].sum()), int(stack[3].sum())]
    for rc, rf in zip(rows_c, rows_f):
        assert rc.status == rf.status
    assert "same value 7" in rows_c[1].status and "every pixel is zero" in rows_c[2].status

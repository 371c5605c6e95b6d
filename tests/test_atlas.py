"""Zone families, zone maps, the atlas PDF, and the pictures of simulated patterns."""

from __future__ import annotations

import math

import numpy as np
import pytest

from saed.cli import main
from saed.crystal import builtin_phase
from saed.crystal.miller import format_indices
from saed.errors import InputError
from saed.synth.zone import detector_image
from saed.simulate.families import family_angles_deg, zone_families
from saed.simulate.zone import zone_pattern
from saed.simulate.zonemap import zone_map


def _code(argv):
    try:
        return main(argv)
    except SystemExit as exc:
        return exc.code


def test_cubic_families_and_multiplicities():
    """m-3m: <001> 6 members, <011> 12, <111> 8, <012> 24, <112> 24, <122> 24 (counting [uvw] and [-u-v-w];
    the multiplicities of the cubic forms, International Tables Vol. A, recalled)."""
    fams = zone_families(builtin_phase("Al"), max_index=2)
    assert [format_indices(f.representative) for f in fams] == ["001", "011", "111", "012", "112", "122"]
    assert [f.multiplicity for f in fams] == [6, 12, 8, 24, 24, 24]


def test_hexagonal_families_use_four_indices():
    """6/mmm: <0001> 2 members, <11-20> 6, <01-10> 6 (counting both signs), within 4-index bound 1..2."""
    from saed.crystal.miller import direction_to_4

    fams = zone_families(builtin_phase("Co-hcp"), max_index=2)
    shown = {format_indices(direction_to_4(f.representative)): f.multiplicity for f in fams}
    assert shown["0001"] == 2 and shown["11-20"] == 6 and shown["01-10"] == 6
    assert all(max(abs(direction_to_4(f.representative))) <= 2 for f in fams)


def test_family_angle_table_cubic():
    """Smallest angles between families: <001>-<011> 45, <001>-<111> 54.74, <011>-<111> 35.26 (Cullity & Stock
    interplanar-angle table, recalled; by hand cos = 1/sqrt2, 1/sqrt3, 2/sqrt6); a family to itself 0."""
    fams = zone_families(builtin_phase("Cu"), max_index=1)
    a = family_angles_deg(builtin_phase("Cu"), fams)
    assert a[0, 1] == pytest.approx(45.0) and a[0, 2] == pytest.approx(math.degrees(math.acos(1 / math.sqrt(3))))
    assert a[1, 2] == pytest.approx(math.degrees(math.acos(2 / math.sqrt(6))))
    assert np.allclose(np.diag(a), 0.0, atol=1e-5)


def test_zone_map_triangle_cubic():
    """The standard triangle 001-011-111 with its three edges: 45 deg about 200, 54.74 about 2-20, 35.26 about 02-2."""
    zm = zone_map(builtin_phase("Cu"), max_index=1)
    assert sorted(format_indices(z) for z in zm.zones) == ["001", "011", "111"]
    rows = {tuple(sorted(np.abs(h).tolist())) for h in zm.joint_hkl}
    assert rows == {(0, 0, 2), (0, 2, 2)}
    # each joint's common row is normal to both of its zones (Weiss zone law)
    for (i, j), h in zip(zm.joints, zm.joint_hkl):
        assert np.dot(h, zm.zones[i]) == 0 and np.dot(h, zm.zones[j]) == 0
    # stereographic radius of [111] from the pole [001]: tan(54.74/2) = 0.5176
    k = [format_indices(z) for z in zm.zones].index("111")
    assert np.hypot(*zm.xy[k]) == pytest.approx(math.tan(math.radians(54.7356 / 2)), abs=1e-4)


def test_zone_map_joins_only_neighbours():
    """On the 200 great circle from [001] to [011] lie [013], [012], [023] (max index 3): joints only between neighbours."""
    zm = zone_map(builtin_phase("Cu"), max_index=3)
    lab = [format_indices(z) for z in zm.zones]
    pairs = {frozenset((lab[i], lab[j])) for i, j in zm.joints}
    assert frozenset(("001", "013")) in pairs and frozenset(("013", "012")) in pairs
    assert frozenset(("001", "011")) not in pairs


def test_atlas_pdf_one_page_per_phase(tmp_path, capsys):
    out = tmp_path / "sheets.pdf"
    rc = main(["atlas", "Co-fcc", "Co-hcp", "--max-index", "1", "--out", str(out)])
    assert rc == 0 and "2 pages" in capsys.readouterr().out  # one sheet each at --max-index 1
    data = out.read_bytes()
    assert data[:5] == b"%PDF-"
    assert data.count(b"/Type /Page\n") + data.count(b"/Type /Page ") + data.count(b"/Type /Page>") >= 2


@pytest.mark.parametrize("argv, words", [
    (["atlas", "Cu", "--out", "sheets.png"], ".pdf"),
    (["atlas", "Cu", "--out", "/nonexistent/dir/a.pdf"], "does not exist"),
    (["atlas", "Cu", "--max-index", "0", "--out", "a.pdf"], "--max-index"),
    (["atlas", "NoSuchPhase", "--out", "a.pdf"], "unknown phase"),
])
def test_atlas_bad_input(tmp_path, monkeypatch, capsys, argv, words):
    monkeypatch.chdir(tmp_path)
    assert _code(argv) == 2
    err = capsys.readouterr().err
    assert words in err and err.count("\n") == 1


def test_families_bad_index_bound():
    with pytest.raises(InputError, match="index bound"):
        zone_families(builtin_phase("Cu"), max_index=0)


# ---------------------------------------------------------------------- pictures
def test_detector_image_bright_centre_symmetric_spots():
    zp = zone_pattern(builtin_phase("Al"), [0, 0, 1])
    det = detector_image(zp, shape_px=(257, 257), scale_inv_nm_per_px=0.05, spot_sigma_px=1.5)
    img = det.image
    assert img[128, 128] == img.max()  # centre pixel of an odd frame
    # a centrosymmetric zone pattern on its axis: the frame is symmetric under 180 deg rotation
    assert np.allclose(img, img[::-1, ::-1], rtol=1e-4, atol=1e-2)
    # 200 of Al (|g| = 2/a = 4.939 1/nm) lands at 4.939 / 0.05 = 98.8 px from the centre
    i = int(np.flatnonzero(np.all(zp.hkl == [2, 0, 0], axis=1))[0])
    assert np.hypot(*(det.spot_xy_px[i] - 128.0)) == pytest.approx(2 / 0.40495 / 0.05, rel=1e-9)
    x, y = np.rint(det.spot_xy_px[i]).astype(int)
    assert img[y, x] > 10 * np.median(img)  # a spot, not background


def test_detector_image_noise_is_seeded():
    zp = zone_pattern(builtin_phase("Al"), [0, 1, 1])
    a = detector_image(zp, shape_px=(64, 64), noise=True, rng=3).image
    b = detector_image(zp, shape_px=(64, 64), noise=True, rng=3).image
    assert np.array_equal(a, b) and np.all(a == np.rint(a))


def test_diagram_and_zone_map_files(tmp_path):
    from saed.report.render_pattern import render_diagram
    from saed.report.render_zonemap import render_zone_map

    zp = zone_pattern(builtin_phase("Co-hcp"), [2, -1, -1, 0], tilt_deg=1.0, tilt_toward_hkl=[0, 1, -1, 0])
    render_diagram(zp, tmp_path / "d.png")
    render_zone_map(zone_map(builtin_phase("Cu"), max_index=1, region="hemisphere"), tmp_path / "m.svg")
    assert (tmp_path / "d.png").read_bytes()[:4] == b"\x89PNG"
    assert b"<svg" in (tmp_path / "m.svg").read_bytes()[:400]
    with pytest.raises(InputError, match=".png, .pdf or .svg"):
        render_diagram(zp, tmp_path / "d.jpg")

"""``saed ratio``: the ratio method by hand, checked against textbook standard-pattern tables.

Check values (each with its source):
- Standard zone-axis patterns, g1/g2, R2/R1 and angle: the kinematic tables computed from the structure
  factor in the shared check-value sheet (section 5), which agree with the standard-pattern figures of
  Andrews, Dyson & Keown, *Interpretation of Electron Diffraction Patterns*, and Edington, *Practical
  Electron Microscopy in Materials Science* vol. 2 (recalled there, "from memory") for fcc [001], [011],
  [111], [112], bcc [001], [011], [111] and hcp [0001], [2-1-10], [01-10]. The angles are also cos^-1 of
  index dot products written in the test (cubic), so they do not depend on the code under test.
- Au and Al ring d-spacings: ICDD cards 04-0784 and 04-0787 as recalled in the sheet (section 8, "from
  memory"), equal to a/sqrt(N) with a(Au) = 0.40782 nm, a(Al) = 0.40495 nm (Pearson's handbook, recalled).
- Cobalt: d(111) fcc 0.20465 nm, d(220) fcc 0.12532 nm, d(0002) hcp 0.20347 nm, d(2-1-10) hcp 0.12535 nm
  (sheet section 7, from a = 0.35447 nm fcc, a = 0.25071 / c = 0.40695 nm hcp, ICDD 15-0806 / 05-0727 recalled);
  fcc [112] and hcp [01-10] differ by 0.6 % in ratio and cannot be told apart from one pattern.
- Si [011]: d(11-1) 0.31356 nm, d(02-2) 0.19202 nm = a/sqrt 8 with a = 0.5431021 nm, which is
  scipy.constants' 'lattice spacing of ideal Si (220)' (CODATA), checked below.
- Camera constant worked example: 200 kV, L = 100 mm -> lambda L = 0.25079 nm mm (sheet section 8, from CODATA).
"""

import json
import math
import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants

from saed.cli import main
from saed.crystal import builtin_phase
from saed.crystal.miller import direction_to_4
from saed.errors import InputError
from saed.index.ratio_method import measurement_from_d, measurement_from_radii, solve_ratio


def _angle(h1, h2):
    """Angle between cubic plane normals, written out: cos = h1.h2 / (|h1||h2|)."""
    a, b = np.array(h1, float), np.array(h2, float)
    return math.degrees(math.acos(a @ b / (np.linalg.norm(a) * np.linalg.norm(b))))


def _same_zone(phase, zone, want):
    """Zone axes equal up to the symmetry of the family (sorted absolute indices; 4-index for hexagonal)."""
    if phase.is_hexagonal:
        z4, w4 = direction_to_4(zone), np.array(want)
        return sorted(np.abs(z4[:3])) == sorted(np.abs(w4[:3])) and abs(z4[3]) == abs(w4[3])
    return sorted(np.abs(zone)) == sorted(np.abs(want))


# (phase, zone, g1 family, g2 family, R2/R1, angle) -- sheet section 5 (angles for cubic re-derived in _angle)
CUBIC_STANDARDS = [
    ("Cu", [0, 0, 1], [2, 0, 0], [0, 2, 0], 1.0000, 90.00),
    ("Cu", [0, 1, 1], [1, 1, -1], [-1, 1, -1], 1.0000, 70.53),
    ("Cu", [1, 1, 1], [2, 0, -2], [2, -2, 0], 1.0000, 60.00),
    ("Cu", [1, 1, 2], [1, 1, -1], [2, -2, 0], 1.6330, 90.00),
    ("Cu", [0, 1, 3], [2, 0, 0], [1, 3, -1], 1.6583, 72.45),
    ("Cu", [1, 2, 3], [1, 1, -1], [-3, 3, -1], 2.5166, 82.39),
    ("Fe-bcc", [0, 0, 1], [1, 1, 0], [1, -1, 0], 1.0000, 90.00),
    ("Fe-bcc", [0, 1, 1], [0, 1, -1], [2, 0, 0], 1.4142, 90.00),
    ("Fe-bcc", [1, 1, 1], [1, 0, -1], [1, -1, 0], 1.0000, 60.00),
    ("Fe-bcc", [0, 1, 3], [2, 0, 0], [0, 3, -1], 1.5811, 90.00),
    ("Fe-bcc", [1, 2, 3], [1, -2, 1], [3, 0, -1], 1.2910, 75.04),
    ("Si", [0, 1, 1], [1, 1, -1], [-1, 1, -1], 1.0000, 70.53),
]


@pytest.mark.parametrize("name, zone, h1, h2, ratio, angle", CUBIC_STANDARDS)
def test_cubic_standard_patterns_ratio_only(name, zone, h1, h2, ratio, angle):
    # the table's own numbers agree with the index arithmetic written here
    assert _angle(h1, h2) == pytest.approx(angle, abs=0.01)
    assert math.sqrt(sum(v * v for v in h2) / sum(v * v for v in h1)) == pytest.approx(ratio, abs=1e-4)
    ph = builtin_phase(name)
    sols = solve_ratio(measurement_from_radii(10.0, 10.0 * ratio, angle), [ph], top=10)
    hits = [s for s in sols if _same_zone(ph, s.zone_axis, zone)]
    assert hits, f"{name} {zone} not found"
    s = hits[0]
    assert s.rank <= 2  # the standard zone leads (at most one other zone fits the same two numbers)
    assert s.ratio_calc == pytest.approx(ratio, abs=1e-4) and s.angle_deg_calc == pytest.approx(angle, abs=0.01)
    n1 = sorted(abs(v) for v in s.hkl1)
    n2 = sorted(abs(v) for v in s.hkl2)
    pairs = [(sorted(abs(v) for v in a), sorted(abs(v) for v in b)) for a, b in ((s.hkl1, s.hkl2),) + s.other_pairs]
    assert (sorted(abs(v) for v in h1), sorted(abs(v) for v in h2)) in pairs, (n1, n2)
    # the zone is g1 x g2 (Weiss zone law): both reflections lie in it
    assert np.dot(s.hkl1, s.zone_axis) == 0 and np.dot(s.hkl2, s.zone_axis) == 0


# hcp Mg (a 0.32094, c 0.52105 nm): sheet section 5, Mg column
@pytest.mark.parametrize("zone4, ratio, angle", [
    ([2, -1, -1, 0], 1.0669, 90.00),   # 01-10 / 0002
    ([0, 1, -1, 0], 1.6235, 90.00),    # 0002 / 2-1-10
    ([0, 0, 0, 1], 1.0000, 60.00),     # 10-10 / 01-10
    ([2, -1, -1, 3], 1.1334, 63.82),   # 01-10 / 10-1-1
])
def test_hcp_standard_patterns_ratio_only(zone4, ratio, angle):
    mg = builtin_phase("Mg")
    sols = solve_ratio(measurement_from_radii(10.0, 10.0 * ratio, angle), [mg], top=10)
    hits = [s for s in sols if _same_zone(mg, s.zone_axis, zone4)]
    assert hits and hits[0].rank <= 3
    assert hits[0].ratio_calc == pytest.approx(ratio, abs=2e-4) and hits[0].angle_deg_calc == pytest.approx(angle, abs=0.02)


def test_si_011_with_d_spacings():
    a_si = 0.5431021  # nm, CODATA (scipy.constants 'lattice parameter of silicon' = 5.431020511e-10 m)
    assert constants.physical_constants["lattice parameter of silicon"][0] * 1e9 == pytest.approx(a_si, abs=1e-7)
    d111, d220 = a_si / math.sqrt(3), a_si / math.sqrt(8)
    assert d220 == pytest.approx(constants.physical_constants["lattice spacing of ideal Si (220)"][0] * 1e9, rel=1e-7)
    sols = solve_ratio(measurement_from_d(0.31356, 0.19202, 35.26), [builtin_phase(n) for n in ("Si", "Ge", "Al", "Cu")])
    best = sols[0]
    assert best.phase.name == "Si" and _same_zone(best.phase, best.zone_axis, [0, 1, 1])
    assert best.d1_nm_calc == pytest.approx(d111, rel=1e-4) and best.d2_nm_calc == pytest.approx(d220, rel=1e-4)
    assert abs(best.d1_diff_pct) < 0.05 and abs(best.angle_diff_deg) < 0.05


def test_cobalt_fcc_112_and_hcp_01_10_are_named_look_alikes():
    phases = [builtin_phase("Co-fcc"), builtin_phase("Co-hcp")]
    sols = solve_ratio(measurement_from_d(0.20465, 0.12532, 90.0), phases)
    best = sols[0]
    assert best.phase.name == "Co-fcc" and _same_zone(best.phase, best.zone_axis, [1, 1, 2])
    hcp = [s for s in sols if s.phase.name == "Co-hcp"]
    assert hcp and _same_zone(hcp[0].phase, hcp[0].zone_axis, [0, 1, -1, 0])
    assert hcp[0].d1_nm_calc == pytest.approx(0.20347, abs=2e-5) and hcp[0].d2_nm_calc == pytest.approx(0.12535, abs=2e-5)
    text = " ".join(best.lookalikes)
    assert "ambiguous with Co-hcp [" in text and "0.6 %" in text


def test_gold_and_aluminium_cannot_be_told_apart_by_two_spots():
    # Au 111 0.23545, 200 0.20391 nm; Al 0.23380, 0.20248 nm: 0.7 % apart, below SAED accuracy
    sols = solve_ratio(measurement_from_d(0.23545, 0.20391, 54.74), [builtin_phase("Au"), builtin_phase("Al")])
    assert [s.phase.name for s in sols[:2]] == ["Au", "Al"]
    assert all(_same_zone(s.phase, s.zone_axis, [0, 1, 1]) for s in sols[:2])
    assert any("ambiguous with Al [011]" in t for t in sols[0].lookalikes)


def test_radii_with_the_camera_constant_worked_example(capsys, tmp_path):
    k = 0.25079  # nm mm, 200 kV and L = 100 mm (sheet section 8)
    r1, r2 = k / 0.23545, k / 0.20391  # Au 111 and 200 (ICDD 04-0784, recalled)
    out = tmp_path / "r.json"
    rc = main(["ratio", "--radii", f"{r1:.5f}", f"{r2:.5f}", "54.74", "--camera-constant", str(k), "--phase", "Au",
               "--json", str(out)])
    assert rc == 0
    doc = json.loads(out.read_text())
    s = doc["solutions"][0]
    assert s["phase"] == "Au" and sorted(map(abs, s["zone_axis"])) == [0, 1, 1]
    assert s["d1_nm_calc"] == pytest.approx(0.23545, abs=5e-5) and s["angle_deg_calc"] == pytest.approx(54.74, abs=0.01)
    assert "Au" in capsys.readouterr().out


def test_json_has_the_contract_fields_and_4_index_zones(capsys):
    rc = main(["ratio", "0.2035", "0.1254", "90", "--phase", "Co-hcp", "--json", "-"])
    doc = json.loads(capsys.readouterr().out)
    assert rc == 0 and doc["solutions"]
    for s in doc["solutions"]:
        assert {"rank", "phase", "zone_axis", "zone_axis_4", "hkl1", "hkl2", "d1_nm_calc", "d2_nm_calc",
                "angle_deg_calc"} <= set(s)
    s = doc["solutions"][0]
    assert len(s["zone_axis_4"]) == 4 and sum(s["zone_axis_4"][:3]) == 0
    # U = u - t, V = v - t (sheet's 4 -> 3 index rule), reduced
    u, v, t, w = s["zone_axis_4"]
    z3 = np.array([u - t, v - t, w])
    z3 //= np.gcd.reduce(np.abs(z3))
    assert sorted(np.abs(z3)) == sorted(np.abs(s["zone_axis"]))


def test_table_is_aligned_and_names_the_columns(capsys):
    assert main(["ratio", "0.2047", "0.1772", "54.7", "--phase", "Co"]) == 0
    out = capsys.readouterr().out.splitlines()
    head = next(i for i, line in enumerate(out) if line.startswith("rank"))
    assert "d1 nm" in out[head] and "angle" in out[head] and "misfit" in out[head]
    # the zone column starts at the same place in every row
    col = out[head].index("zone")
    rows = [line for line in out[head + 1:] if line[:6].strip().isdigit()]
    assert rows and all(line[col] == "[" for line in rows)


def test_no_solution_says_so(capsys):
    assert main(["ratio", "0.5", "0.11", "13", "--phase", "Cu"]) == 0
    assert "no solution within the tolerances" in capsys.readouterr().out


@pytest.mark.parametrize("argv, words", [
    (["-0.2", "0.1", "50"], "must be positive"),
    (["0.2", "-0.1", "50"], "must be positive"),
    (["0", "0", "50"], "both are zero"),
    (["0.2", "0.1", "190"], "0 to 180"),
    (["0.2", "0.1", "-5"], "0 to 180"),
    (["0.2", "0.1", "180"], "parallel"),
    (["0.2", "0.1"], "D1 D2 ANGLE"),
    (["--radii", "10", "12", "0.2", "0.1", "50"], "ANGLE alone"),
    (["0.2", "0.1", "50", "--camera-constant", "2.5"], "goes with --radii"),
    (["0.2", "0.1", "inf"], "finite"),
    (["20", "0.1", "50"], "not a lattice spacing"),
])
def test_bad_input_one_line_exit_2(capsys, argv, words):
    try:
        rc = main(["ratio", *argv])
    except SystemExit as exc:
        rc = exc.code
    err = capsys.readouterr().err
    assert rc == 2 and words in err and err.count("\n") == 1


@settings(max_examples=60, deadline=None)
@given(d1=st.floats(allow_nan=True, allow_infinity=True), d2=st.floats(allow_nan=True, allow_infinity=True),
       angle=st.floats(allow_nan=True, allow_infinity=True))
def test_measurement_is_either_valid_or_refused_by_name(d1, d2, angle):
    try:
        m = measurement_from_d(d1, d2, angle)
    except InputError as exc:
        assert "\n" not in str(exc)
        return
    assert 0 < m.d1_nm <= 10 and 0 < m.d2_nm <= 10 and 1 <= m.angle_deg <= 179


def test_one_row_per_zone_family_with_the_other_pairs_in_that_zone():
    # Cu [123]: 11-1/-33-1 and 22-4/-10 6-4 (a [132] description) are spots of the same pattern family
    sols = solve_ratio(measurement_from_radii(10.0, 25.166, 82.39), [builtin_phase("Cu")])
    fam = [s for s in sols if sorted(map(abs, s.zone_axis)) == [1, 2, 3]]
    assert len(fam) == 1
    s = fam[0]
    for h1, h2 in ((s.hkl1, s.hkl2),) + s.other_pairs:
        assert np.dot(h1, s.zone_axis) == 0 and np.dot(h2, s.zone_axis) == 0  # every listed pair lies in the zone
        assert _angle(h1, h2) == pytest.approx(82.39, abs=0.01)


# ---------------------------------------------------------------------------------- units and overbars (issue 15)
def _minus_index_groups(text: str) -> list[str]:
    """Index groups written with a minus sign ('1-210', '[10-10]', '-1-11'); signed numbers (-0.1) are not."""
    tokens = re.split(r"[\s/\[\]()<>{},;:*]+", text)
    return [t for t in tokens if re.fullmatch(r"(?:-?\d){3,4}", t) and "-" in t]


def test_units_angstrom_shows_every_length_in_angstrom_and_the_json_keeps_nm(capsys, tmp_path):
    # Si [011]: d(111) = a/sqrt 3, d(220) = a/sqrt 8, a = scipy.constants' lattice parameter of silicon (CODATA)
    a_ang = constants.physical_constants["lattice parameter of silicon"][0] * 1e10
    js = tmp_path / "r.json"
    assert main(["ratio", "0.31356", "0.19202", "35.26", "--phase", "Si", "--units", "angstrom",
                 "--json", str(js)]) == 0
    out = capsys.readouterr().out
    assert "d1 3.136 Å, d2 1.920 Å" in out  # the measurement, typed in nm, echoed in Å
    head = next(line for line in out.splitlines() if line.startswith("rank"))
    assert "d1 Å" in head and "d2 Å" in head and "d Å" in head
    row = next(line for line in out.splitlines() if line.split()[:2] == ["1", "Si"]).split()
    d1, d2, d_sum = float(row[5]), float(row[7]), float(row[12])
    assert d1 == pytest.approx(a_ang / math.sqrt(3), abs=6e-4) and d2 == pytest.approx(a_ang / math.sqrt(8), abs=6e-4)
    # |g1 + g2|^2 = (3 + 8 + 2 sqrt(3 * 8) cos 35.26 deg) / a^2 = 19 / a^2 (cos 35.26 deg = sqrt(2/3)): a 133 spot
    assert d_sum == pytest.approx(a_ang / math.sqrt(19), abs=6e-4)
    assert " nm" not in out
    best = json.loads(js.read_text())["solutions"][0]  # the JSON contract stays in nm
    assert best["d1_nm_calc"] == pytest.approx(a_ang / 10 / math.sqrt(3), rel=1e-4)


def test_look_alike_lines_follow_the_units(capsys):
    # Co-fcc 111 / 220 at 90 deg vs Co-hcp 0002 / 2-1-10: 0.6 % apart (sheet section 7)
    assert main(["ratio", "0.20465", "0.12532", "90", "--phase", "Co-fcc", "--phase", "Co-hcp",
                 "--units", "angstrom"]) == 0
    out = capsys.readouterr().out
    line = next(t for t in out.splitlines() if t.startswith("rank 1 ambiguous with Co-hcp"))
    assert re.search(r"at d 1\.06\d Å vs .* at d 1\.06\d Å", line) and "nm" not in line


def test_terminal_overbars_on_utf8_and_minus_signs_on_a_plain_stream(capsys, monkeypatch):
    import io
    import sys

    argv = ["ratio", "0.2035", "0.1254", "90", "--phase", "Co-hcp", "--phase", "Co-fcc"]
    assert main(argv) == 0  # pytest's capture is UTF-8
    out = capsys.readouterr().out
    assert "\u0305" in out and _minus_index_groups(out) == [], _minus_index_groups(out)
    # hcp [10-10] holds (0002) and (1-210): Weiss zone law in 4 indices, hU + kV + iT + lW = 0 (common practice)
    row = next(line for line in out.splitlines() if line.split()[:2] == ["1", "Co-hcp"])
    assert "[101\u03050]" in row and "0002" in row and "12\u030510" in row
    buf = io.TextIOWrapper(io.BytesIO(), encoding="ascii")
    monkeypatch.setattr(sys, "stdout", buf)
    assert main(argv) == 0
    buf.flush()
    plain = buf.buffer.getvalue().decode("ascii")  # nothing the stream cannot encode
    assert "[10-10]" in plain and "1-210" in plain and "\u0305" not in plain


def test_table_columns_stay_aligned_with_overbars(capsys):
    from saed.crystal.notation import text_width

    assert main(["ratio", "0.2035", "0.1254", "90", "--phase", "Co-hcp", "--phase", "Co-fcc", "--top", "5"]) == 0
    lines = capsys.readouterr().out.splitlines()
    k = next(i for i, line in enumerate(lines) if line.startswith("rank"))
    rows = [line for line in lines[k + 1:] if line[:6].strip().isdigit()]
    assert len(rows) >= 2 and any("\u0305" in r for r in rows)
    head = lines[k]
    # the right-aligned last column ends in the same terminal column in every row
    assert {text_width(r) for r in rows} == {text_width(head)}
    g1_col = text_width(head[:head.index("g1 ")])
    for r in rows:
        cells = r.split()
        assert text_width(r[:r.index(" " + cells[3] + " ") + 1]) == g1_col, r

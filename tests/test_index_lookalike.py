"""Look-alikes: cobalt fcc vs hcp, ordered vs disordered alloys, diamond / zinc blende / fcc / rock salt.

Facts used, with their sources:
* Co-fcc a = 0.35447 nm (ICDD 15-0806), Co-hcp a = 0.25071, c = 0.40695 nm (ICDD 05-0727), from memory;
  so d111(fcc) = a/sqrt(3) = 0.20465 nm and d0002(hcp) = c/2 = 0.20347 nm differ by 0.6 %, and the
  fcc [112] (111 x 220) and hcp [01-10] (0002 x 11-20) rectangles have ratios sqrt(8/3) = 1.633 and
  (c/2)/(a/2) ... = 1.623: below SAED accuracy (about 1-2 %; Williams & Carter 2009 ch. 18, from memory).
* The angle between <112> and <111> in a cubic crystal is 19.47 deg (cubic angle tables, e.g. Cullity &
  Stock, *Elements of X-Ray Diffraction*, from memory): tilting fcc [112] about 2-20 by that angle
  reaches [111].
* fcc <111>: the 1/3{422} positions, where thin or faulted foils show weak spots, coincide with the hcp
  {10-10} spots of the Shoji-Nishiyama relation (common practice; e.g. Williams & Carter ch. 17).
* B2 (NiAl) and L1_2 (Ni3Al) superlattice reflections (h+k+l odd; mixed hkl) are absent in the
  disordered bcc/fcc (structure-factor rules, International Tables / any TEM text, common practice).
* Diamond 200 is forbidden (d-glide) but appears in <011> by double diffraction (111 + 1-11);
  in zinc blende it is weakly allowed (Williams & Carter ch. 16, from memory).
"""

from __future__ import annotations

import math
import re

import pytest

from saed.crystal import builtin_phase
from saed.index import index_pattern, prepare_phases
from saed.synth.kinematic import synthetic_measured


@pytest.fixture(scope="module")
def cobalt():
    return prepare_phases([builtin_phase(n) for n in ("Co-fcc", "Co-hcp", "Cr")])


def _numbers(text: str) -> list[float]:
    """Every decimal number written in `text` (the advice is prose; its numbers are what matters)."""
    return [float(v) for v in re.findall(r"-?\d+(?:\.\d+)?", text)]


def _percent(text: str) -> float:
    """The number written before the first '%' in `text`."""
    m = re.search(r"(\d+(?:\.\d+)?)\s*%", text)
    assert m is not None, text
    return float(m.group(1))


def _look(sol, phase):
    return next((lk for lk in sol.lookalikes if lk.phase_name == phase), None)


def _index(tables, phase, zone, **kw):
    kw.setdefault("rng", 21)
    kw.setdefault("max_g_inv_nm", 13.0)
    kw.setdefault("in_plane_rotation_deg", 37.0)
    m, truth = synthetic_measured(builtin_phase(phase), zone, **kw)
    return index_pattern(m, tables), truth


def test_fcc_112_and_hcp_0110_are_reported_ambiguous_with_the_separating_tilt(cobalt):
    res, _ = _index(cobalt, "Co-fcc", [1, 1, 2])
    names = [s.phase_name for s in res.solutions[:2]]
    assert set(names) == {"Co-fcc", "Co-hcp"}
    best = res.best
    other = "Co-hcp" if best.phase_name == "Co-fcc" else "Co-fcc"
    lk = _look(best, other)
    assert lk is not None and lk.relation == "ambiguous"
    # the two rectangles' side ratios from the cells above: fcc sqrt(8/3) = 1.6330; hcp |11-20| / |0002| =
    # (2/a) / (2/c) = c/a = 1.6232; the advice states their difference (0.6 %), read here as a number
    fcc_ratio, hcp_ratio = math.sqrt(8 / 3), 0.40695 / 0.25071
    assert _percent(lk.separating) == pytest.approx(100 * (fcc_ratio / hcp_ratio - 1), abs=0.06)
    t = lk.tilt
    assert t is not None
    # fcc [112] is no two-fold axis: the sense of any tilt is unknown from one pattern, so the advice is
    # the tilt that separates in both senses: 30 deg about the close-packed row (angle [112]-[011] in a
    # cubic crystal: acos(3 / (sqrt 6 sqrt 2)) = 30 deg) reaches fcc <011> or hcp <2-1-10> either way.
    assert t.sense_ambiguous
    assert abs(t.angle_deg) == pytest.approx(30.0, abs=0.3)
    for fcc_target, hcp_target in ((t.target_zone, t.other_target_zone),
                                   (t.turned_target_zone, t.turned_other_target_zone)):
        if best.phase_name != "Co-fcc":
            fcc_target, hcp_target = hcp_target, fcc_target
        assert fcc_target is not None and sorted(abs(v) for v in fcc_target) == [0, 1, 1]
        # <2-1-10> in 3 indices: [2-1-10] = [100], [11-20] = [110] (u = U - T, v = V - T; common practice)
        assert hcp_target is not None and hcp_target[2] == 0 and sorted(abs(v) for v in hcp_target) in ([0, 0, 1], [0, 1, 1])
    assert any("ambiguous" in n for n in best.notes)


def test_thin_fcc_111_with_weak_extra_spots_earns_a_caution_and_a_tilt(cobalt):
    res, _ = _index(cobalt, "Co-fcc", [1, 1, 1], holz_projection_intensity=0.02)
    best = res.best
    assert {best.phase_name, res.solutions[1].phase_name} == {"Co-fcc", "Co-hcp"}
    other = "Co-hcp" if best.phase_name == "Co-fcc" else "Co-fcc"
    lk = _look(best, other)
    assert lk is not None and lk.relation == "ambiguous"
    assert "thin or faulted foils" in lk.separating
    assert lk.tilt is not None
    assert any(s.kind == "holz-projection" for s in res.solutions[0 if best.phase_name == "Co-fcc" else 1].indexed)


def test_strong_1010_spots_favour_hcp_0001(cobalt):
    res, truth = _index(cobalt, "Co-hcp", [0, 0, 0, 1])
    best = res.best
    assert best.phase_name == "Co-hcp" and best.zone_axis == (0, 0, 1)
    lk = _look(best, "Co-fcc")
    assert lk is None or lk.relation != "ambiguous"


def test_fcc_011_rules_out_hcp_by_its_1010_and_1011_spots(cobalt):
    res, _ = _index(cobalt, "Co-fcc", [0, 1, 1])
    best = res.best
    assert best.phase_name == "Co-fcc" and sorted(abs(v) for v in best.zone_axis) == [0, 1, 1]
    lk = _look(best, "Co-hcp")
    assert lk is not None and lk.relation == "ruled out"
    # the spacings the advice names, as numbers (1/nm): hcp 10-10 |g| = 2/(sqrt3 a) = 4.606 and 10-11 =
    # sqrt(4/(3a^2) + 1/c^2) = 5.220 (missing here), and the fcc 200 = 2/a = 5.642 (seen here); check-values
    # section 7 from the ICDD cells in the module docstring
    named = _numbers(lk.separating)
    for g in (2 / (math.sqrt(3) * 0.25071), math.sqrt(4 / (3 * 0.25071**2) + 1 / 0.40695**2), 2 / 0.35447):
        assert any(abs(v - g) <= 0.006 for v in named), (g, lk.separating)


def test_hcp_2110_rules_out_fcc_and_shows_0001_by_double_diffraction(cobalt):
    res, _ = _index(cobalt, "Co-hcp", [2, -1, -1, 0], double_diffraction=0.01)
    best = res.best
    assert best.phase_name == "Co-hcp" and best.zone_axis_4 == (2, -1, -1, 0)
    assert any(s.kind == "double-diffraction" and s.hkil is not None and s.hkil[:3] == (0, 0, 0) for s in best.indexed)
    lk = _look(best, "Co-fcc")
    assert lk is not None and lk.relation == "ruled out"


@pytest.fixture(scope="module")
def alloys():
    return prepare_phases([builtin_phase(n) for n in ("Cr", "NiAl", "Ni", "Ni3Al")])


def test_ordered_b2_superlattice_spots_pick_nial_over_bcc(alloys):
    res, _ = _index(alloys, "NiAl", [0, 0, 1])
    assert res.best.phase_name == "NiAl"


def test_disordered_bcc_without_superlattice_spots_says_what_nial_would_add(alloys):
    res, _ = _index(alloys, "Cr", [0, 0, 1])
    best = res.best
    assert best.phase_name == "Cr"
    lk = _look(best, "NiAl")
    assert lk is not None and lk.relation in ("close", "ruled out")
    assert "100 at" in lk.separating and "not seen" in lk.separating


def test_b2_and_bcc_look_identical_along_111_and_the_tilt_finds_superlattice_spots(alloys):
    res, _ = _index(alloys, "NiAl", [1, 1, 1])
    best = res.best
    other = "Cr" if best.phase_name == "NiAl" else "NiAl"
    lk = _look(best, other)
    assert lk is not None and lk.relation == "ambiguous"
    assert lk.tilt is not None


def test_ordered_l12_superlattice_spots_pick_ni3al_over_fcc_ni(alloys):
    res, _ = _index(alloys, "Ni3Al", [0, 0, 1])
    assert res.best.phase_name == "Ni3Al"
    res, _ = _index(alloys, "Ni", [0, 0, 1])
    assert res.best.phase_name == "Ni"


def test_zinc_blende_and_diamond_are_ambiguous_along_011_with_a_tilt():
    t = prepare_phases([builtin_phase("Ge"), builtin_phase("GaAs")])
    res, _ = _index(t, "Ge", [0, 1, 1], double_diffraction=0.01)
    best = res.best
    other = "GaAs" if best.phase_name == "Ge" else "Ge"
    lk = _look(best, other)
    assert lk is not None and lk.relation == "ambiguous"
    # the tilt turns about a row that both index alike, toward a zone where the 200 spots differ: the
    # axis is a reflection of the zone (Weiss zone law) and the targets are named for both phases
    t = lk.tilt
    assert t is not None and t.target_zone is not None and t.other_target_zone is not None
    assert sum(h * u for h, u in zip(t.about_hkl, best.zone_axis)) == 0
    assert "200" in t.text


def test_diamond_011_is_told_from_fcc_011_by_the_200_spots_uncalibrated():
    # uncalibrated, diamond [001] is an fcc [001] net at sqrt(2) the scale; along [011] the 200 row differs:
    # forbidden in diamond (absent here: no double diffraction drawn), strong in fcc
    t = prepare_phases([builtin_phase("Si"), builtin_phase("Al")])
    res, _ = _index(t, "Si", [0, 1, 1], calibrated=False)
    assert res.best.phase_name == "Si"
    res, _ = _index(t, "Al", [0, 1, 1], calibrated=False)
    assert res.best.phase_name == "Al"


def test_rock_salt_and_fcc_differ_by_the_weak_111_spots_uncalibrated():
    # uncalibrated, rock salt and fcc give the same spot net; only the intensities differ: rock-salt 111
    # is weak (4(f_Mg - f_O)), fcc 111 the strongest (structure-factor rules, common practice)
    t = prepare_phases([builtin_phase("MgO"), builtin_phase("Cu")])
    for truth, other in (("MgO", "Cu"), ("Cu", "MgO")):
        res, _ = _index(t, truth, [0, 1, 1], calibrated=False, intensity_noise=0.2)
        best = res.best
        assert best.phase_name == truth and sorted(abs(v) for v in best.zone_axis) == [0, 1, 1]
        rival = next(s for s in res.solutions if s.phase_name == other)
        assert rival.score < best.score
        # the 111 spots (all odd) are there and indexed as allowed reflections of the winner
        assert any(s.kind == "allowed" and s.hkl is not None and all(v % 2 for v in s.hkl) for s in best.indexed)


def test_without_tilt_advice_the_lookalikes_and_ranking_are_the_same_and_no_tilt_is_worked_out(cobalt):
    # what saed batch asks for: its rows name a look-alike but never show the tilt that separates it
    m, _ = synthetic_measured(builtin_phase("Co-fcc"), [1, 1, 2], rng=21, max_g_inv_nm=13.0, in_plane_rotation_deg=37.0)
    full, lean = index_pattern(m, cobalt), index_pattern(m, cobalt, tilt_advice=False)
    assert any(lk.tilt is not None for lk in full.best.lookalikes)
    assert all(lk.tilt is None for s in lean.solutions for lk in s.lookalikes)
    assert [(s.phase_name, s.zone_axis, s.score, s.in_plane_rotation_deg) for s in lean.solutions] == \
        [(s.phase_name, s.zone_axis, s.score, s.in_plane_rotation_deg) for s in full.solutions]
    for a, b in zip(full.solutions, lean.solutions):
        assert [(lk.phase_name, lk.zone_axis, lk.relation, lk.separating) for lk in a.lookalikes] == \
            [(lk.phase_name, lk.zone_axis, lk.relation, lk.separating) for lk in b.lookalikes]

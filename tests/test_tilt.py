"""Holder-tilt planning: round trips, the reachable list, and the command line."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.cli import main
from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.simulate.geometry import orientation_matrix, unit
from saed.simulate.zone import zone_axis_3
from saed.simulate.tilt import (Holder, check_orientation_matrix, holder_rotation, orientation_at, reachable_zones,
                                tilt_to_zone)


def _off_zone_deg(phase, u, uvw):
    d = u @ unit(phase.lattice.r_cartesian_nm(uvw))
    return math.degrees(math.acos(min(1.0, abs(float(d[2])))))


@settings(max_examples=40, deadline=None)
@given(phi=st.floats(-180, 180), axis=st.floats(-180, 180), a0=st.floats(-20, 20), b0=st.floats(-20, 20),
       target=st.sampled_from([(0, 0, 1), (1, 1, 2), (0, 1, 2), (1, 1, 1), (1, 2, 3), (0, 1, 3)]),
       flip=st.booleans())
def test_tilt_round_trip_lands_on_the_zone(phi, axis, a0, b0, target, flip):
    """Tilt to the computed (alpha, beta), recompute the beam: it lies on the target zone within 0.01 deg."""
    cu = builtin_phase("Cu")
    u = orientation_matrix(cu.lattice, [0, 1, 1], phi)
    holder = Holder(alpha_axis_deg=axis, alpha_range_deg=(-80, 80), beta_range_deg=(-80, 80),
                    alpha_sign=-1 if flip else 1)
    s = tilt_to_zone(cu, u, target, holder, recorded_at_deg=(a0, b0))
    u_new = orientation_at(u, holder, s.alpha_deg, s.beta_deg, recorded_at_deg=(a0, b0))
    assert _off_zone_deg(cu, u_new, target) < 0.01
    # at the recorded readings nothing moves
    assert np.allclose(orientation_at(u, holder, a0, b0, recorded_at_deg=(a0, b0)), u)


def test_round_trip_hexagonal():
    co = builtin_phase("Co-hcp")
    u = orientation_matrix(co.lattice, [1, 0, 0], 40.0)  # [2-1-10] on the beam
    holder = Holder(alpha_axis_deg=-25.0)
    for target in ([0, 1, -1, 0], [2, -1, -1, 3], [0, -1, 1, 1]):
        uvw = zone_axis_3(co, target)
        s = tilt_to_zone(co, u, target, holder)
        u_new = orientation_at(u, holder, s.alpha_deg, s.beta_deg)
        assert _off_zone_deg(co, u_new, uvw) < 0.01


def test_pure_alpha_and_pure_beta_tilts():
    """Zones reached by turning about one holder axis only need that axis: Cu [011] -> [001] is 45 deg about
    the [100] direction (the 200 row); with the alpha axis along that row the plan is alpha = +/-45, beta = 0."""
    cu = builtin_phase("Cu")
    u = orientation_matrix(cu.lattice, [0, 1, 1], 0.0)  # x of the frame || a = [100] (geometry convention)
    holder = Holder(alpha_axis_deg=0.0, alpha_range_deg=(-60, 60))
    s = tilt_to_zone(cu, u, [0, 0, 1], holder)
    assert abs(s.alpha_deg) == pytest.approx(45.0, abs=1e-9) and abs(s.beta_deg) < 1e-9
    holder_b = Holder(alpha_axis_deg=90.0, beta_range_deg=(-60, 60))  # now beta runs along x
    s = tilt_to_zone(cu, u, [0, 0, 1], holder_b)
    assert abs(s.beta_deg) == pytest.approx(45.0, abs=1e-9) and abs(s.alpha_deg) < 1e-9


def test_holder_rotation_is_alpha_after_beta():
    h = Holder(alpha_axis_deg=30.0)
    r = holder_rotation(h, 10.0, 20.0)
    assert np.allclose(r @ r.T, np.eye(3)) and np.linalg.det(r) == pytest.approx(1.0)
    # the beta axis is carried by alpha: H(a, b) e_beta = R(e_alpha, a) e_beta
    assert np.allclose(r @ h.beta_axis, holder_rotation(h, 10.0, 0.0) @ h.beta_axis)


def test_reachable_zones_sorted_and_in_range():
    cu = builtin_phase("Cu")
    u = orientation_matrix(cu.lattice, [0, 1, 1], 12.0)
    holder = Holder()
    out = reachable_zones(cu, u, holder, max_index=3)
    assert out[0].zone_axis in ((0, 1, 1), (0, -1, -1)) and out[0].angle_from_beam_deg < 1e-6
    ang = [s.angle_from_beam_deg for s in out]
    assert ang == sorted(ang)
    assert all(holder.reachable(s.alpha_deg, s.beta_deg) for s in out)
    zones = {tuple(abs(np.array(s.zone_axis))) for s in out}
    assert (0, 1, 2) in zones or (0, 2, 1) in zones  # 18.43 deg (cos 3/sqrt10): within reach


def test_bad_orientation_matrix():
    with pytest.raises(InputError, match="not a rotation"):
        check_orientation_matrix(np.arange(9.0))
    with pytest.raises(InputError, match="determinant -1"):
        check_orientation_matrix(-np.eye(3))
    with pytest.raises(InputError, match="9 finite"):
        check_orientation_matrix([1, 0, 0])


# ---------------------------------------------------------------------- the command line
def _code(argv):
    try:
        return main(argv)
    except SystemExit as exc:
        return exc.code


def test_tilt_command_table_and_json(tmp_path, capsys):
    out_json = tmp_path / "plan.json"
    rc = main(["tilt", "Co-fcc", "--zone", "0", "1", "1", "--rotation", "10", "--target", "0", "1", "2",
               "--json", str(out_json)])
    out = capsys.readouterr().out
    assert rc == 0 and "target [012]" in out and "within range" in out and "alpha" in out
    doc = json.loads(out_json.read_text())
    assert doc["target"]["reachable"] and doc["reachable_zones"][0]["angle_from_beam_deg"] < 1e-3
    # 18.43 deg between [011] and [012]: cos = (0 + 1 + 2)/(sqrt2 sqrt5) = 3/sqrt10
    assert doc["target"]["angle_from_beam_deg"] == pytest.approx(math.degrees(math.acos(3 / math.sqrt(10))), abs=1e-3)


def test_tilt_out_of_range_is_an_answer_exit_0(capsys, tmp_path):
    # [011] -> [001] is 45 deg (cos = 1/sqrt2, written here), beyond a +/-30 / +/-25 deg holder.
    argv = ["tilt", "Co-fcc", "--zone", "0", "1", "1", "--target", "0", "0", "1", "--alpha-axis", "90"]
    rc = _code(argv)
    cap = capsys.readouterr()
    assert rc == 0 and cap.err == ""
    assert "OUT OF RANGE" in cap.out and "Not reachable" in cap.out
    assert "outside the holder range" in cap.out and "nearest reachable" in cap.out
    out_json = tmp_path / "plan.json"
    assert _code(argv + ["--json", str(out_json)]) == 0
    capsys.readouterr()
    t = json.loads(out_json.read_text())["target"]
    assert not t["reachable"] and t["angle_from_beam_deg"] == pytest.approx(45.0, abs=1e-3)
    near = t["nearest_reachable"]
    assert near["reachable"] and near["angle_from_beam_deg"] <= 30.0 + 25.0
    # JSON on stdout stays parseable; the note goes to stderr, one line
    assert _code(argv + ["--json", "-"]) == 0
    cap = capsys.readouterr()
    assert json.loads(cap.out)["target"]["reachable"] is False
    assert "not reachable" in cap.err and cap.err.count("\n") == 1


def test_tilt_from_index_json(tmp_path, capsys):
    cu = builtin_phase("Cu")
    u = orientation_matrix(cu.lattice, [1, 1, 2], 33.0)
    f = tmp_path / "index.json"
    f.write_text(json.dumps({"solutions": [{"rank": 1, "phase": "Cu", "zone_axis": [1, 1, 2],
                                            "orientation_matrix": u.tolist(), "in_plane_rotation_deg": 33.0}]}))
    rc = main(["tilt", "--from-index", str(f), "--target", "1", "1", "1", "--json", "-"])
    doc = json.loads(capsys.readouterr().out)
    assert rc == 0 and doc["phase"] == "Cu"
    # [112] -> [111]: cos = (1 + 1 + 2)/(sqrt6 sqrt3) = 4/sqrt18 -> 19.47 deg
    assert doc["target"]["angle_from_beam_deg"] == pytest.approx(19.47, abs=0.01)


@pytest.mark.parametrize("argv, words", [
    (["tilt", "Cu"], "present orientation"),
    (["tilt", "Cu", "--zone", "0", "0", "0"], "[000]"),
    (["tilt", "Cu", "--zone", "0", "1", "1", "--target", "1", "0.5", "0"], "integers"),
    (["tilt", "Cu", "--orientation-matrix", "1", "0", "0", "0", "1", "0", "0", "0", "-1"], "determinant"),
    (["tilt", "Cu", "--zone", "0", "1", "1", "--alpha-range", "10", "20"], "include 0"),
    (["tilt", "Cu", "--zone", "0", "1", "1", "--recorded-at", "40", "0"], "outside the holder range"),
    (["tilt", "--from-index", "/nonexistent/x.json"], "no such file"),
])
def test_tilt_bad_input(capsys, argv, words):
    rc = _code(argv)
    err = capsys.readouterr().err
    assert rc == 2 and words in err and err.count("\n") == 1

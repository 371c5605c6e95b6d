"""``saed index`` per the contract: JSON fields, overlay, report, summary, and bad input (exit 2, one line)."""

from __future__ import annotations

import json
from importlib import resources

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from saed.calibration import Calibration
from saed.cli import main
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern, Spots
from saed.index import IndexResult, index_pattern, prepare_phases

EXAMPLES = resources.files("saed").joinpath("data/examples")


@pytest.fixture()
def example(tmp_path):
    img = tmp_path / "grain_B_hcp.tif"
    cal = tmp_path / "grain_B_hcp.json"
    img.write_bytes(EXAMPLES.joinpath("grain_B_hcp.tif").read_bytes())
    cal.write_bytes(EXAMPLES.joinpath("grain_B_hcp.json").read_bytes())
    return img, cal


def test_index_writes_the_contract_json_overlay_and_report(example, tmp_path, capsys):
    img, cal = example
    out, ov, rep = tmp_path / "r.json", tmp_path / "o.png", tmp_path / "rep"
    rc = main(["index", str(img), "--calibration", str(cal), "--phase", "Co-fcc", "--phase", "Co-hcp",
               "--json", str(out), "--overlay", str(ov), "--report", str(rep), "--top", "3"])
    assert rc == 0
    text = capsys.readouterr().out
    # a UTF-8 stream gets overbars (combining overline U+0305 after each negative digit)
    assert "answer: Co-hcp [21\u03051\u03050]" in text and "rank" in text
    doc = json.loads(out.read_text())
    for key in ("image", "center_px", "scale_inv_nm_per_px", "voltage_kv", "spots", "solutions"):
        assert key in doc
    assert doc["image"] == str(img) and doc["voltage_kv"] == 200.0
    assert set(doc["spots"][0]) >= {"x", "y", "intensity"}
    sol = doc["solutions"][0]
    for key in ("rank", "phase", "zone_axis", "zone_axis_4", "score", "orientation_matrix", "in_plane_rotation_deg",
                "scale_inv_nm_per_px", "indexed_spots", "mean_d_error_pct", "mean_angle_error_deg"):
        assert key in sol
    assert sol["rank"] == 1 and sol["phase"] == "Co-hcp" and sol["zone_axis_4"] == [2, -1, -1, 0]
    assert sol["zone_axis"] == [1, 0, 0]  # 3-index form of [2-1-10] (Miller-Bravais relations)
    spot = sol["indexed_spots"][0]
    assert set(spot) >= {"x", "y", "hkl", "hkil", "d_nm_measured", "d_nm_calc"}
    assert spot["hkil"][2] == -(spot["hkil"][0] + spot["hkil"][1])
    u = np.array(sol["orientation_matrix"])
    assert np.allclose(u @ u.T, np.eye(3), atol=1e-5)
    assert ov.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    html = (rep / "index.html").read_text()
    assert "data:image/png;base64," in html and "Co-hcp" in html and "<table>" in html


def test_json_to_stdout_keeps_the_summary_on_stderr(example, capsys):
    img, cal = example
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--json", "-"]) == 0
    cap = capsys.readouterr()
    assert json.loads(cap.out)["solutions"][0]["phase"] == "Co-hcp"
    assert "answer:" in cap.err


def test_uncalibrated_with_pixel_pitch_reports_the_implied_camera_length(example, tmp_path, capsys):
    img, cal = example
    side = json.loads(cal.read_text())  # the demo was made at L = 120 mm, 15 um pixels
    out = tmp_path / "u.json"
    assert main(["index", str(img), "--pixel-pitch", "15", "--uncalibrated", "--phase", "Co-hcp", "--phase", "Co-fcc",
                 "--json", str(out)]) == 0
    sol = json.loads(out.read_text())["solutions"][0]
    assert sol["phase"] == "Co-hcp"
    assert sol["implied_camera_length_mm"] == pytest.approx(side["camera_length_mm"], rel=0.01)
    assert "implied scale" in capsys.readouterr().out


def test_unknown_phase_gets_did_you_mean_and_exit_2(example, capsys):
    img, cal = example
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hpc"]) == 2
    err = capsys.readouterr().err
    assert "did you mean" in err and len(err.strip().splitlines()) == 1


def test_broken_cif_is_named_with_the_reason(example, tmp_path, capsys):
    img, cal = example
    bad = tmp_path / "broken.cif"
    bad.write_text("data_x\n_cell_length_a 3.5\n")
    assert main(["index", str(img), "--calibration", str(cal), "--phase", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "broken.cif" in err and "Traceback" not in err


def test_unwritable_output_fails_before_any_work(example, tmp_path, capsys):
    img, cal = example
    assert main(["index", str(img), "--calibration", str(cal), "--json", str(tmp_path / "no" / "x.json")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_contradicting_calibration_options_exit_2(example, capsys):
    img, cal = example
    assert main(["index", str(img), "--calibration", str(cal), "--scale", "0.05"]) == 2
    assert "either" in capsys.readouterr().err


def test_a_pattern_without_spots_exits_0_with_a_message(tmp_path, capsys):
    import tifffile

    rng = np.random.default_rng(1)
    path = tmp_path / "blank.tif"
    tifffile.imwrite(path, (100 + rng.poisson(20, (256, 256))).astype(np.uint16))
    out = tmp_path / "b.json"
    assert main(["index", str(path), "--scale", "0.05", "--phase", "Cu", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["solutions"] == [] and doc["message"]
    assert "saed index:" in capsys.readouterr().err


@pytest.fixture(scope="module")
def few_tables():
    return prepare_phases([builtin_phase(n) for n in ("Cu", "Co-hcp")])


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(xy=st.lists(st.tuples(st.floats(0, 255), st.floats(0, 255), st.floats(0, 1e5)), min_size=0, max_size=25),
       calibrated=st.booleans())
def test_any_spot_list_gives_a_result_never_an_exception(few_tables, xy, calibrated):
    a = np.array(xy, float).reshape(-1, 3)
    spots = Spots(a[:, 0], a[:, 1], a[:, 2])
    m = MeasuredPattern((256, 256), (127.5, 127.5), spots, None, Calibration(0.05 if calibrated else None, 200.0))
    res = index_pattern(m, few_tables)
    assert isinstance(res, IndexResult)
    if res.solutions:
        for sol in res.solutions:  # every spot accounted for, once, and a score in 0..1
            assert sorted(s.spot_index for s in sol.indexed) == list(range(len(a)))
            assert 0.0 <= sol.score <= 1.0
    else:  # no answer: a one-line reason instead
        assert res.message.strip() and "\n" not in res.message

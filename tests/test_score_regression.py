"""score_candidate gives the answers it gave before it was split into steps and vectorised.

Regression pin for issue 16 item 6 / issue 14 (the scorer rewritten without a per-spot Python
loop; answers must not change). The expected values in tests/data/score_regression.json.gz were
recorded from the per-spot-loop scorer by tests/score_regression_make.py (its docstring says how
and why); they are a record of behaviour, not an outside check of the physics (that is in
test_index.py). Floating-point values may differ only by summation order (relative 1e-9).
"""

from __future__ import annotations

import gzip
import json
import math
from pathlib import Path

import numpy as np
import pytest

from saed.calibration import Calibration
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern, Spots
from saed.index.candidates import Candidate, SpotSet
from saed.index.score import score_candidate
from saed.index.tables import prepare_phases

FIXTURE = Path(__file__).with_name("data") / "score_regression.json.gz"
DATA = json.loads(gzip.decompress(FIXTURE.read_bytes()))
RTOL, ATOL = 1e-9, 1e-9


@pytest.fixture(scope="module")
def tables():
    return prepare_phases([builtin_phase(n) for n in DATA["phases"]], voltage_kv=DATA["voltage_kv"],
                          max_g_inv_nm=DATA["max_g_inv_nm"])


def _num(x):
    return float(x) if not isinstance(x, str) else float(x)  # 'nan' / 'inf' were written as text


def _close(got, want, what):
    if want is None:
        assert got is None, what
        return
    g, w = np.asarray(got, float), np.asarray([_num(v) for v in np.ravel(want)] if np.ndim(want) else _num(want))
    w = w.reshape(np.shape(want)) if np.ndim(want) else w
    assert g.shape == w.shape, f"{what}: shape {g.shape} != {w.shape}"
    assert np.allclose(g, w, rtol=RTOL, atol=ATOL, equal_nan=True), f"{what}: {g} != {w}"


def _tuple(x):
    return None if x is None else tuple(x)


def recorded_inputs(case, row):
    """(candidate, spot set, measured pattern, options) of one recorded scoring, rebuilt from the record."""
    sp = case["spots"]
    spots = Spots(np.array(sp["x_px"]), np.array(sp["y_px"]), np.array(sp["intensity"]),
                  sigma_xy_px=np.array(sp["sigma_xy_px"]))
    measured = MeasuredPattern(tuple(DATA["shape"]), tuple(case["center_px"]), spots, None,
                               Calibration(case["calibrated_scale"], DATA["voltage_kv"]),
                               center_sigma_px=case["center_sigma_px"])
    ss = case["spot_set"]
    spot_set = SpotSet(**{k: np.array(v, dtype=bool if k in ("strong", "on_lattice") else float).reshape(
        (-1, 2) if k in ("v_px", "v_seed_px") else (-1,)) for k, v in ss.items()})
    c = row["candidate"]
    cand = Candidate(c["phase_index"], c["i1"], c["i2"], tuple(c["zone_axis"]), tuple(c["canonical_zone"]),
                     np.array(c["u_matrix"]), c["scale"], c["quick"])
    return cand, spot_set, measured, row["options"]


def _rescore(case, row, tables):
    cand, spot_set, measured, o = recorded_inputs(case, row)
    return score_candidate(cand, tables, spot_set, measured, calibrated_scale=case["calibrated_scale"],
                           length_tol=o["length_tol"], rel_pos_tol=0.008, pixel_pitch_um=o["pixel_pitch_um"],
                           allow_distortion=o["allow_distortion"])


ROWS = [(case, row) for case in DATA["cases"] for row in case["scored"]]


def test_fixture_exercises_every_branch():
    """The recorded candidates cover every spot kind and both notes, so the pin below means something."""
    kinds = {s[1] for _, row in ROWS for s in row["expected"]["spots"]}
    assert kinds == {"allowed", "double-diffraction", "forbidden", "holz-projection", "unindexed"}
    notes = " ".join(n for _, row in ROWS for n in row["expected"]["notes"])
    assert "stretched" in notes and "centre" in notes
    assert len(ROWS) >= 50


@pytest.mark.parametrize("k", range(len(ROWS)), ids=[f"{c['name']}#{i}" for i, (c, _) in enumerate(ROWS)])
def test_score_candidate_unchanged_by_vectorising(k, tables):
    case, row = ROWS[k]
    want = row["expected"]
    sol, fit = _rescore(case, row, tables)
    assert sol.phase_name == want["phase"] and list(sol.zone_axis) == want["zone"]
    assert _tuple(sol.zone_axis_4) == _tuple(want["zone4"])
    _close(sol.score, want["score"], "score")
    _close(sol.in_plane_rotation_deg, want["rotation_deg"], "rotation")
    _close(sol.scale_inv_nm_per_px, want["scale"], "scale")
    _close(sol.orientation_matrix, want["u"], "U")
    assert [k for k, _ in sol.terms] == [k for k, _ in want["terms"]]
    got_terms, want_terms = dict(sol.terms), {k: v for k, v in want["terms"]}
    if _num(want_terms["distortion_pct"]) < 1e-9:
        # a similarity map has no long axis: the recorded azimuth was whichever direction rounding picked
        assert got_terms["distortion_axis_deg"] == 0.0
        want_terms["distortion_axis_deg"] = 0.0
    _close(list(got_terms.values()), list(want_terms.values()), "terms")
    for name in ("mean_d_error_pct", "mean_angle_error_deg"):
        _close(getattr(sol, name), want[name], name)
    _close(sol.implied_camera_length_mm, want["camera_length_mm"], "camera length")
    _close(sol.scale_error_pct, want["scale_error_pct"], "scale error")
    assert list(sol.notes) == want["notes"]
    assert len(sol.indexed) == len(want["spots"])
    for s, w in zip(sol.indexed, want["spots"]):
        idx, kind, hkl, hkil, d_meas, d_calc, res, ic, proj, proj_den, x, y, inten = w
        assert (s.spot_index, s.kind, _tuple(s.hkl), _tuple(s.hkil)) == (idx, kind, _tuple(hkl), _tuple(hkil))
        assert (_tuple(s.projected_hkl), s.projected_denominator) == (_tuple(proj), proj_den)
        for got, exp, what in ((s.d_nm_measured, d_meas, "d measured"), (s.d_nm_calc, d_calc, "d calc"),
                               (s.residual_px, res, "residual"), (s.intensity_calc, ic, "intensity calc"),
                               (s.x_px, x, "x"), (s.y_px, y, "y"), (s.intensity, inten, "intensity")):
            _close(got, exp, f"spot {idx} {what}")
    _close(sol.predicted_xy_px, np.reshape(want["predicted_xy_px"], (-1, 2)), "predicted xy")
    assert np.array_equal(sol.predicted_hkl, np.reshape(want["predicted_hkl"], (-1, 3)))
    _close(sol.predicted_intensity, want["predicted_intensity"], "predicted intensity")
    assert list(sol.predicted_kind) == want["predicted_kind"]
    _close(fit.phi_deg, want["fit_phi_deg"], "fit phi")
    _close(fit.scale, want["fit_scale"], "fit scale")
    assert fit.assigned.tolist() == want["fit_assigned"]
    assert list(fit.kinds) == want["fit_kinds"]
    _close(fit.predicted_px, np.reshape(want["fit_predicted_px"], (-1, 2)), "fit predicted px")
    assert fit.seen.tolist() == want["fit_seen"] and fit.in_region.tolist() == want["fit_in_region"]
    assert fit.holz_hkl.tolist() == want["fit_holz_hkl"]
    _close(fit.holz_xy_inv_nm, np.reshape(want["fit_holz_xy_inv_nm"], (-1, 2)), "fit holz xy")
    assert math.isfinite(sol.score)

"""score_figure (the scan's warm start) gives the numbers score_candidate recorded, without the per-spot records.

Checked against the same record as tests/test_score_regression.py (tests/data/score_regression.json.gz,
written by tests/score_regression_make.py from the per-spot-loop scorer): phase, zone, score, in-plane
rotation and scale, and the unexplained spot weight from the recorded spot kinds. A scan row is built
from exactly these numbers, so they must be the full scorer's (docs/batch.md, Scans: speed).
"""

from __future__ import annotations

import numpy as np
import pytest

from saed.index.score import score_figure
from test_score_regression import ROWS, _close, _rescore, _tuple, recorded_inputs, tables  # noqa: F401 (fixture)


def _figure(case, row, tables):
    cand, spot_set, measured, o = recorded_inputs(case, row)
    fig = score_figure(cand, tables, spot_set, measured, calibrated_scale=case["calibrated_scale"],
                       length_tol=o["length_tol"], rel_pos_tol=0.008, allow_distortion=o["allow_distortion"])
    return fig, spot_set


@pytest.mark.parametrize("k", range(len(ROWS)), ids=[f"{c['name']}#{i}" for i, (c, _) in enumerate(ROWS)])
def test_score_figure_gives_the_recorded_numbers(k, tables):
    case, row = ROWS[k]
    want = row["expected"]
    fig, spot_set = _figure(case, row, tables)
    assert fig.phase_name == want["phase"] and list(fig.zone_axis) == want["zone"]
    assert _tuple(fig.zone_axis_4) == _tuple(want["zone4"])
    _close(fig.score, want["score"], "score")
    _close(fig.in_plane_rotation_deg, want["rotation_deg"], "rotation")
    _close(fig.scale_inv_nm_per_px, want["scale"], "scale")
    bad = np.array([s[1] in ("unindexed", "forbidden") for s in want["spots"]], bool)
    _close(fig.unexplained_weight, float(np.sum(spot_set.weight[bad])), "unexplained weight")


@pytest.mark.parametrize("k", range(0, len(ROWS), 7))
def test_score_figure_is_the_same_arithmetic_as_score_candidate(k, tables):
    """Not only within the record's tolerance: the warm start must write the very numbers a full scoring gives."""
    case, row = ROWS[k]
    sol, _ = _rescore(case, row, tables)
    fig, _ = _figure(case, row, tables)
    assert (fig.score, fig.in_plane_rotation_deg, fig.scale_inv_nm_per_px) == (
        sol.score, sol.in_plane_rotation_deg, sol.scale_inv_nm_per_px)

"""The matcher's own notes reach the result (issue 16, item 10: they were never filled).

The pattern is built here from the fcc extinction rule (h, k, l unmixed; International Tables A) and a
rotation written here, not with saed's simulation; the stated calibration is made 4.5 % off on purpose.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from saed.calibration import Calibration
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern
from saed.index import index_pattern, prepare_phases

sys.path.insert(0, str(Path(__file__).parent))
from test_crystals import SCALE, beam_along, measured, spots_of  # noqa: E402


@pytest.mark.parametrize("off", [0.045, -0.045])
def test_a_calibration_a_few_per_cent_off_is_indexed_and_said(off):
    tables = prepare_phases([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")], max_g_inv_nm=12.0)
    m = measured(spots_of(0.35447, "fcc", beam_along([0, 1, 1], [1, 0, 0], 23.0)))
    wrong = MeasuredPattern(image_shape=m.image_shape, center_px=m.center_px, spots=m.spots, basis=None,
                            calibration=Calibration(SCALE * (1 + off), 200.0))
    r = index_pattern(wrong, tables)
    assert r.best is not None and r.best.phase_name == "Co-fcc"
    (note,) = [n for n in r.notes if "off the stated calibration" in n]
    # the spots fit at the true scale: the note states the offset of the stated one (-off / (1 + off), in %)
    pct = float(note.split("scale ")[1].split(" %")[0])
    assert pct == pytest.approx(-100 * off / (1 + off), abs=0.3)
    assert "check the camera length" in note

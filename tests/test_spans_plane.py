"""One collinearity test for the matcher's guard, the seed pairs and the benchmark (issue 16 item 7).

Regression pin for the bug where the guard used 8 deg and the seed pairs 12 deg: spots spanning
8-12 deg passed the guard and were then told "no pair of measured spots matches". The geometry
is written here (spot directions from cos/sin of chosen angles), not taken from the matcher.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from saed.calibration import Calibration
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern, Spots
from saed.index import index_pattern, prepare_phases
from saed.vectors2d import MIN_SPAN_ANGLE_DEG, spans_plane

CENTRE = (256.0, 256.0)


def _direction(deg: float) -> np.ndarray:
    return np.array([math.cos(math.radians(deg)), math.sin(math.radians(deg))])


@given(st.floats(0, 360), st.floats(0, 180), st.floats(1, 300), st.floats(1, 300))
def test_two_vectors_span_when_their_lines_differ_by_the_angle(start, turn, r1, r2):
    line_angle = min(turn, 180 - turn)  # the angle between the two lines, 0..90
    assume(abs(line_angle - MIN_SPAN_ANGLE_DEG) > 1e-6)
    v = [r1 * _direction(start), r2 * _direction(start + turn)]
    assert spans_plane(v) == (line_angle > MIN_SPAN_ANGLE_DEG)


def test_zero_vectors_and_single_directions_never_span():
    assert not spans_plane(np.zeros((0, 2)))
    assert not spans_plane([[0.0, 0.0], [5.0, 5.0]])
    assert not spans_plane([[5.0, 5.0], [-10.0, -10.0], [1.0, 1.0]])  # one row, both senses


@pytest.fixture(scope="module")
def tables():
    return prepare_phases([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")])


def _measured(angles_deg, lengths_px, senses) -> MeasuredPattern:
    v = np.array([s * r * _direction(a) for a, r, s in zip(angles_deg, lengths_px, senses)])
    spots = Spots(CENTRE[0] + v[:, 0], CENTRE[1] + v[:, 1], np.full(len(v), 1000.0), sigma_xy_px=np.full(len(v), 0.3))
    return MeasuredPattern((512, 512), CENTRE, spots, None, Calibration(0.05, 200.0))


@st.composite
def fans(draw, lo_deg: float, hi_deg: float):
    """(span, angles, lengths, senses): 2-8 spots filling a fan of exactly `span` deg (both edges
    present), turned at random, lengths 10 % apart (so no spot is another's repeat), either sense."""
    span = draw(st.floats(lo_deg, hi_deg))
    n = draw(st.integers(2, 8))
    inner = draw(st.lists(st.floats(0, 1), min_size=n - 2, max_size=n - 2))
    turn = draw(st.floats(0, 360))
    order = draw(st.permutations(list(range(n))))
    senses = draw(st.lists(st.sampled_from([1, -1]), min_size=n, max_size=n))
    angles = [turn, turn + span] + [turn + f * span for f in inner]
    return span, angles, [30.0 * 1.1 ** k for k in order], senses


def _checked(fan) -> MeasuredPattern:
    span, angles, lengths, senses = fan
    m = _measured(angles, lengths, senses)
    assert spans_plane(m.spot_vectors_px()) == (span > MIN_SPAN_ANGLE_DEG)  # the fan is what the test says it is
    return m


@settings(max_examples=40, deadline=None)
@given(fans(8.0, MIN_SPAN_ANGLE_DEG - 0.05))
def test_spots_spanning_8_to_12_deg_are_told_they_lie_on_one_line(tables, fan):
    """Once the 'no pair of measured spots matches' message: now the guard and the pairs agree."""
    result = index_pattern(_checked(fan), tables, lookalikes=False, max_crystals=1)
    assert result.solutions == ()
    assert "lie on one line" in result.message and "no pair" not in result.message


@settings(max_examples=15, deadline=None)
@given(fans(MIN_SPAN_ANGLE_DEG + 0.05, 90.0))
def test_spots_spanning_more_reach_the_pair_search(tables, fan):
    result = index_pattern(_checked(fan), tables, lookalikes=False, max_crystals=1)
    assert "lie on one line" not in result.message

"""The holder-tilt plan (saed.simulate.tilt.plan_tilt): the closest setting when a zone is out of reach.

Geometry written here: cubic Co-fcc, [001] on the beam, so [011] lies 45 deg away (cos = 1/sqrt2).
The alpha axis is set along z x d, d = the detector-frame direction of [011], so a pure alpha tilt of
45 deg would bring it on; with alpha limited to +/-30 deg the closest is alpha at its limit, beta 0
and 15 deg left (a beta tilt b would leave arccos(cos 15 deg cos b) >= 15 deg).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from saed.crystal import builtin_phase
from saed.simulate.geometry import orientation_matrix
from saed.simulate.tilt import Holder, plan_tilt, reachable_zones


def _setup(alpha_limit_deg):
    phase = builtin_phase("Co-fcc")
    u = orientation_matrix(phase.lattice, [0, 0, 1], 0.0)
    d = u @ phase.lattice.r_cartesian_nm([0, 1, 1])
    d = d / np.linalg.norm(d)
    axis = np.cross([0.0, 0.0, 1.0], d)
    holder = Holder(alpha_axis_deg=math.degrees(math.atan2(axis[1], axis[0])), alpha_range_deg=alpha_limit_deg,
                    beta_range_deg=25.0)
    return phase, u, holder


def test_out_of_reach_closest_setting_is_alpha_at_its_limit():
    phase, u, holder = _setup(30.0)
    plan = plan_tilt(phase, u, [0, 1, 1], holder, reachable_zones(phase, u, holder, max_index=2))
    assert not plan.target.reachable
    assert plan.target.angle_from_beam_deg == pytest.approx(45.0, abs=1e-6)
    c = plan.closest
    assert abs(c.alpha_deg) == pytest.approx(30.0, abs=0.01)
    assert c.beta_deg == pytest.approx(0.0, abs=0.1)
    assert c.angle_left_deg == pytest.approx(15.0, abs=0.01)
    # every <011> zone is 45 or 90 deg from [001], none within reach: the nearest reachable zone instead is
    # a <012>, 18.43 deg from [011] (cos = 3 / (sqrt2 sqrt5), written here)
    near = plan.nearest_reachable
    assert not plan.same_family and near.reachable
    assert sorted(abs(v) for v in near.zone_axis) == [0, 1, 2]
    z = np.asarray(near.zone_axis, float)
    cos = abs(z @ [0.0, 1.0, 1.0]) / (np.linalg.norm(z) * math.sqrt(2.0))
    assert math.degrees(math.acos(cos)) == pytest.approx(math.degrees(math.acos(3 / math.sqrt(10))), abs=1e-9)


def test_within_reach_needs_no_closest_setting():
    phase, u, holder = _setup(50.0)
    plan = plan_tilt(phase, u, [0, 1, 1], holder, [])
    assert plan.target.reachable and plan.closest is None and plan.nearest_reachable is None
    assert abs(plan.target.alpha_deg) == pytest.approx(45.0, abs=1e-6) and plan.target.beta_deg == pytest.approx(0.0, abs=1e-6)

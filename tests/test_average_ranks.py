"""The tie-averaged ranks behind the scorer's Spearman term, against scipy.stats.rankdata (its 'average' method)."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats

from saed.index.score import _average_ranks, spearman_rho


@settings(max_examples=300, deadline=None)
@given(arrays(np.float64, st.integers(1, 60),
              elements=st.one_of(st.sampled_from([0.0, 1.0, 2.0, -3.5]), st.floats(-1e6, 1e6, allow_nan=False))))
def test_ranks_equal_scipy_rankdata(x):
    assert np.array_equal(_average_ranks(x), stats.rankdata(x, method="average"))


@settings(max_examples=200, deadline=None)
@given(st.integers(3, 40), st.integers(0, 2**31 - 1))
def test_spearman_equals_scipy(n, seed):
    rng = np.random.default_rng(seed)
    a = rng.random(n)
    b = np.round(rng.random(n), 1)              # ties on one side, as the rounded kinematic intensities have
    if np.ptp(b) == 0:
        return
    assert abs(spearman_rho(a, b) - stats.spearmanr(a, b).statistic) < 1e-12

"""percentile_linear (the spot set's 'strong' reference) is numpy's np.percentile to the last bit.

numpy is the external reference here: the function exists only to skip np.percentile's per-call
set-up on a scan frame's few spots, so it must return exactly what numpy returns.
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from saed.index.candidates import percentile_linear

finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=400, deadline=None)
@given(arrays(np.float64, st.integers(1, 80), elements=finite),
       st.one_of(st.sampled_from([0.0, 10.0, 50.0, 90.0, 99.0, 100.0]), st.floats(0.0, 100.0)))
def test_equals_numpy_percentile(values, q):
    assert percentile_linear(values, q) == np.percentile(values, q)


@settings(max_examples=200, deadline=None)
@given(arrays(np.float64, st.integers(3, 40), elements=st.sampled_from([0.0, 1.0, 2.5, 1e6])))
def test_equals_numpy_with_ties(values):
    # many equal intensities (saturated spots) are the usual case of ties
    assert percentile_linear(values, 90.0) == np.percentile(values, 90.0)

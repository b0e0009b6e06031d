"""plumbrule's selection-based quantiles against numpy's default (linear, Hyndman and Fan
definition 7), the reference library they promise to equal bit for bit."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from plumbrule.numeric.quantiles import quantiles

finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False)


@settings(max_examples=300, deadline=None)
@given(arrays(np.float64, st.integers(1, 400), elements=finite),
       st.lists(st.floats(0.0, 1.0), min_size=1, max_size=6))
def test_quantiles_equal_numpys(values, probs):
    got = quantiles(values.copy(), probs)
    want = np.quantile(values, probs)
    np.testing.assert_array_equal(got, want)


def test_quantiles_leave_the_input_alone():
    v = np.array([5.0, 1.0, 4.0, 2.0, 3.0])
    quantiles(v, [0.25, 0.5])
    np.testing.assert_array_equal(v, [5.0, 1.0, 4.0, 2.0, 3.0])

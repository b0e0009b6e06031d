"""A sheet's number cells as Python floats (what calamine hands over for an xlsx) become a
float column by one C-level copy; the result must be exactly what pandas' to_numeric +
astype(float) gives them (the careful path, the reference here): the same values bit for
bit (-0.0, NaN, ±inf), the same index and name. Columns that mix ints in keep the careful
path, where to_numeric may type them as integers (-0.0 becomes 0: the first test's
example [0, -0.0] fails when ints take the copy), and an int past float range is ±inf."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from plumbrule.intake.cells import _numbers_of

NUMBERS = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                    st.integers(min_value=-2**70, max_value=2**70),
                    st.sampled_from([0, 1, -0.0, 2**53 + 1, 2**63 - 1, 2**63, -2**63, 10**300]))


@settings(max_examples=200, deadline=None)
@given(st.lists(NUMBERS, min_size=1, max_size=40))
def test_floats_and_ints_convert_as_to_numeric_does(values):
    col = pd.Series(values, dtype=object, index=np.arange(5, 5 + len(values)), name="Lot size")
    got = _numbers_of(col)
    want = pd.to_numeric(col, errors="coerce").astype(float)
    assert got.index.equals(col.index) and got.name == "Lot size"
    assert np.array_equal(got.to_numpy().view(np.int64), want.to_numpy().view(np.int64)) or (
        np.array_equal(got.to_numpy(), want.to_numpy(), equal_nan=True)
        and np.array_equal(np.signbit(got.to_numpy()), np.signbit(want.to_numpy())))


def test_an_int_past_float_range_is_infinite():
    got = _numbers_of(pd.Series([2.5, 2**1100, -2**1100], dtype=object))
    assert got.tolist() == [2.5, float("inf"), float("-inf")]

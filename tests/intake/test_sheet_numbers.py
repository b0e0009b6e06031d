"""A sheet's number cells as Python floats (what calamine hands over for an xlsx) become a
float column by one C-level copy; the result must be exactly what pandas' to_numeric +
astype(float) gives them (the careful path, the reference here): the same values bit for
bit (-0.0, NaN, ±inf), the same index and name. Columns that mix ints in keep the careful
path, where to_numeric may type them as integers (-0.0 becomes 0: the first test's
example [0, -0.0] fails when ints take the copy), and an int past float range is ±inf."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import example, given, settings
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


# float cells with every case the number rules look at: blanks (NaN), ±inf, COM error codes
# (0x800A0000 + XlCVError, from memory; #N/A is 2042), beyond ±1e60, nearer zero than 1e-60
FLOAT_CELLS = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                        st.floats(-1e7, 1e7), st.sampled_from(
                            [float(0x800A0000 + c - 2 ** 32) for c in (2007, 2042, 2015)]
                            + [1e61, -1e61, 1e-61, 0.0, -0.0]))


def _outcome(fn):
    from plumbrule.errors import PlumbError
    try:
        return "ok", fn()
    except PlumbError as err:
        return "error", str(err)


@settings(max_examples=200, deadline=None)
@given(st.lists(FLOAT_CELLS, min_size=1, max_size=30))
@example([1.0, float("nan"), 3.5])               # a blank
@example([250.0, float(0x800A0000 + 2042 - 2 ** 32)])    # #N/A as its code
@example([1.0, float("inf"), 1e61])              # refused: the same cells named
def test_a_column_of_float_cells_types_as_the_cell_by_cell_rules_do(values):
    # the reference: the same cells with one text cell below them, which sends the column
    # through the per-cell rules (cell kinds, blank and error reasons, parse_number_text)
    from plumbrule.intake.cells import to_numbers
    index = np.arange(2, 2 + len(values))
    fast = _outcome(lambda: to_numbers(pd.Series(values, dtype=object, index=index,
                                                 name="Lot size"), "Lot size"))
    careful = _outcome(lambda: to_numbers(pd.Series([*values, "12"], dtype=object,
                                                    index=np.arange(2, 3 + len(values)),
                                                    name="Lot size"), "Lot size"))
    assert fast[0] == careful[0]
    if fast[0] == "error":
        assert fast[1] == careful[1]       # the same cells named, the same message
        return
    (v, why), (cv, cwhy) = fast[1], careful[1]
    assert np.array_equal(v.to_numpy(), cv.to_numpy()[:-1], equal_nan=True)
    real = ~np.isnan(v.to_numpy())       # -0.0 stays -0.0 (a blank is NaN of either sign)
    assert np.array_equal(np.signbit(v.to_numpy()[real]), np.signbit(cv.to_numpy()[:-1][real]))
    assert v.index.equals(pd.Index(index))
    assert why.astype(object).where(why.notna(), None).tolist() == \
        cwhy.astype(object).where(cwhy.notna(), None).tolist()[:-1]


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.integers(-10 ** 6, 10 ** 9), st.sampled_from(
    [0, -1, 2 ** 53 - 1, 2 ** 53, -(2 ** 53), 2 ** 62, 0x800A0000 + 2042 - 2 ** 32])),
    min_size=1, max_size=30))
@example([104, 2 ** 53])                       # past exact floats: the careful text
@example([7, 0x800A0000 + 2042 - 2 ** 32])     # #N/A as its code: an error value
def test_integer_labels_are_the_cell_by_cell_labels(values):
    # an int64 column (a DataFrame's or a Parquet file's IDs) labelled on the array; the
    # reference: the same integers as object cells, which take the per-cell rules
    from plumbrule.intake.cells import to_labels
    index = np.arange(2, 2 + len(values))
    fast = to_labels(pd.Series(values, dtype=np.int64, index=index), "ID")
    careful = to_labels(pd.Series(values, dtype=object, index=index), "ID")
    assert fast[0].tolist() == careful[0].tolist() or \
        fast[0].fillna("").tolist() == careful[0].fillna("").tolist()
    assert fast[1].notna().tolist() == careful[1].notna().tolist()
    assert fast[1].dropna().tolist() == careful[1].dropna().tolist()


def test_a_dataframes_text_columns_are_read_as_cells():
    # pandas 3 infers its string dtype for a column of texts; the table keeps the texts as
    # cells (object), so the one-scan plain-text path reads an ID or neighbourhood column
    from plumbrule.intake.cells import plain_text
    from plumbrule.intake.table import table_from_frame
    frame = pd.DataFrame({"id": ["Q001", "Q002"], "hood": ["Millbank", "Old Quay"],
                          "price": [1.0, 2.0]})
    table = table_from_frame(frame)
    assert plain_text(table.frame["id"]) and plain_text(table.frame["hood"])
    assert table.frame["hood"].tolist() == ["Millbank", "Old Quay"]

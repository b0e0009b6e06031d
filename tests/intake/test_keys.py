"""A sale's 64-bit key from its ID (keys.sale_hashes) is what pandas' own
hash_pandas_object gives for the IDs as a one-column frame: the holdout and the folds draw
by these keys, so a faster hashing must not move a single sale.

Reference: pandas.util.hash_pandas_object on the frame the keys were first made from, on
generated IDs (texts in any script, numbers, repeats, IDs missing for some rows)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from plumbrule.intake.keys import sale_hashes


def _reference(data: pd.DataFrame, ids: pd.Series) -> np.ndarray:
    frame = pd.DataFrame({"id": ids.reindex(data.index).astype(str).to_numpy()})
    return pd.util.hash_pandas_object(frame, index=False).to_numpy(np.uint64)


_ID = st.one_of(st.text(max_size=8), st.integers(-10**6, 10**6),
                st.sampled_from(["Q-1001", "104", "Müller 3", "", " ", "nan", "日本"]))


@settings(max_examples=300, deadline=None)
@given(st.lists(_ID, min_size=1, max_size=20), st.booleans())
def test_id_keys_are_pandas_hashes_of_the_ids(values, fewer_rows):
    ids = pd.Series(values, index=pd.RangeIndex(2, 2 + len(values)), dtype=object)
    rows = ids.index[::2] if fewer_rows else ids.index
    data = pd.DataFrame(index=rows.append(pd.Index([10 ** 6])) if fewer_rows else rows)
    got = sale_hashes(data, ids)
    assert got.dtype == np.uint64
    np.testing.assert_array_equal(got, _reference(data, ids))


def test_a_large_id_column_keys_as_before():
    ids = pd.Series([f"{i}" for i in range(100001, 160001)], dtype=object,
                    index=pd.RangeIndex(2, 60002))
    data = pd.DataFrame(index=ids.index)
    np.testing.assert_array_equal(sale_hashes(data, ids), _reference(data, ids))

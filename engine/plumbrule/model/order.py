"""The order of the sales in time, independent of how the sheet is sorted."""

from __future__ import annotations

import numpy as np
import pandas as pd


def date_order(data: pd.DataFrame, date_column: str) -> np.ndarray:
    """Positions of ``data``'s rows in sale-date order. Sales on the same date are put in the
    order of a hash of their own values (pandas ``hash_pandas_object`` of every column,
    columns taken by name; never the sheet row), so no sorting of the sheet changes the
    order: sales with equal hashes have equal values, hence equal residuals, and their order
    does not matter."""
    cols = sorted(data.columns, key=str)
    content = pd.util.hash_pandas_object(data[cols], index=False).to_numpy()
    stamps = data[date_column].to_numpy(dtype="datetime64[ns]").astype(np.int64)
    return np.lexsort((content, stamps))

"""An engine table as the cells a worksheet function should return, written out
independently of plumbrule.excel (the reference the worksheet-function tests compare with)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd


def expected_cells(frame: pd.DataFrame) -> list[list]:
    """Header row, then one row per record: bools as bools, numbers as floats (NaN and
    ±inf as None), timestamps as datetimes (NaT as None), other missing values as None."""
    out = [list(frame.columns)]
    for rec in frame.itertuples(index=False):
        row = []
        for v in rec:
            if isinstance(v, (bool, np.bool_)):
                row.append(bool(v))
            elif isinstance(v, (int, float, np.integer, np.floating)):
                row.append(float(v) if math.isfinite(float(v)) else None)
            elif isinstance(v, pd.Timestamp):
                row.append(None if pd.isna(v) else v.to_pydatetime())
            elif v is None or (not isinstance(v, str) and pd.isna(v)):
                row.append(None)
            else:
                row.append(v)
        out.append(row)
    return out

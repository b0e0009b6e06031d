"""The column-wise JSON writer gives what the standard json module gives for the same values
taken one by one (the reference: Python's json with every cell made plain), for every kind of
column an engine table holds."""

import json
import math

import numpy as np
import pandas as pd

from plumbrule.render.json import column_values, dumps, frame_records, jsonable


def _reference(frame):
    cols = [str(c) for c in frame.columns]
    return [dict(zip(cols, (jsonable(v) for v in row), strict=True))
            for row in frame.itertuples(index=False, name=None)]


def test_every_column_kind_matches_the_cell_by_cell_reference():
    frame = pd.DataFrame({
        "row": np.array([2, 3, 4], dtype=np.int64),
        "value": [1.0 / 3.0, np.nan, -np.inf],
        "big": [1e300, 5e-324, 0.1 + 0.2],
        "ok": [True, False, True],
        "when": pd.to_datetime(["2025-03-14", None, "2024-01-02 10:30"], format="ISO8601"),
        "when_us": pd.to_datetime(["2025-03-14 00:00:00.25", "2025-01-01", None], format="ISO8601"),
        "text": ["Old Quay", None, "élan \u202e"],
        "mixed": [1, "a", np.nan],
    })
    got, want = frame_records(frame), _reference(frame)
    assert got == want
    assert json.loads(dumps(got)) == json.loads(json.dumps(want, allow_nan=False))
    assert got[0]["value"] == 1.0 / 3.0 and got[1]["value"] is None and got[2]["value"] is None
    assert got[0]["when"] == "2025-03-14T00:00:00" and got[1]["when"] is None


def test_floats_keep_full_precision():
    v = pd.Series(np.random.default_rng(3).normal(size=1000) * 1e6)
    back = json.loads(dumps(column_values(v)))
    assert all(a == b for a, b in zip(back, v.tolist(), strict=True))   # round-trip exact
    assert not any(isinstance(x, float) and math.isnan(x) for x in back)

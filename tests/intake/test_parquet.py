"""Parquet input (the optional extra `parquet`, pyarrow): read like a DataFrame of sales,
and a one-line message naming the fix when pyarrow is not installed."""

import sys

import numpy as np
import pandas as pd
import pytest

from plumbrule import intake
from plumbrule.errors import IntakeError


def test_without_pyarrow_the_message_says_how_to_install_it(tmp_path, monkeypatch):
    path = tmp_path / "sales.parquet"
    path.write_bytes(b"PAR1")
    monkeypatch.setitem(sys.modules, "pyarrow", None)        # import pyarrow fails
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    with pytest.raises(IntakeError) as err:
        intake.read_table(path)
    text = str(err.value)
    assert "\n" not in text
    assert "sales.parquet" in text and "pip install 'plumbrule[parquet]'" in text


def test_a_parquet_file_has_no_sheets(tmp_path):
    path = tmp_path / "s.parquet"
    path.write_bytes(b"PAR1")
    with pytest.raises(IntakeError, match="no sheets"):
        intake.read_table(path, sheet="Sales")


def test_a_parquet_file_reads_as_its_dataframe(tmp_path):
    pytest.importorskip("pyarrow")
    from plumbrule.analysis import analyze
    rng = np.random.default_rng(3)
    n = 60
    frame = pd.DataFrame({"id": [f"Q{i:03d}" for i in range(n)],
                          "price": rng.normal(2e5, 2e4, n), "area": rng.normal(120, 20, n),
                          "hood": rng.choice(["Millbank", "Old Quay"], n)})
    path = tmp_path / "sales.parquet"
    frame.to_parquet(path)
    settings = {"response": "price", "predictors": "area,hood", "categorical": "hood",
                "id_column": "id", "folds": 0}
    # the same analysis as of the DataFrame itself (table_from_frame, the scripted path)
    a, b = analyze(path, settings), analyze(frame, settings)
    pd.testing.assert_frame_equal(a.tables.coefficients, b.tables.coefficients)
    assert a.ids.tolist() == b.ids.tolist()

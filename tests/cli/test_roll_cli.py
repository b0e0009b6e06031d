"""``plumbrule value SALES --roll ROLL --out VALUES``: the roll written by parcel ID and
loaded back unchanged; streamed in chunks with the same result as at once; bad IDs named by
cell with no file left behind. The county is our own simulation (tests/roll_county.py); the
reference for the values is plumbrule's in-memory roll (valuation/roll.py), itself checked
row by row against the subject path in tests/valuation/test_roll.py."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import roll_county as county
from plumbrule.analysis import analyze
from plumbrule.cli import roll as cli_roll
from plumbrule.cli.main import main
from plumbrule.intake import table_from_frame
from plumbrule.settings import parse_settings
from plumbrule.valuation.roll import ROLL_COLUMNS, value_roll

FIGURES = ["estimate", "ci_low", "ci_high", "pi_low", "pi_high", "se_mean", "se_single",
           "leverage"]


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("roll")
    roll = county.parcels(2500, seed=31)
    sales = county.sales(roll, 500, seed=32)
    roll.to_csv(d / "roll.csv", index=False)
    sales.to_csv(d / "sales.csv", index=False)
    return d, roll, sales


def _flags():
    s = county.settings()
    return ["--response", s["response"], "--predictors", s["predictors"], "--categorical",
            s["categorical"], "--date-column", s["date_column"], "--log-response",
            "--id-column", "Parcel", "--valuation-date", s["valuation_date"], "--folds", "0"]


def _reference(d):
    sales = pd.read_csv(d / "sales.csv")
    settings = parse_settings({**county.settings(), "folds": 0})
    analysis = analyze(table_from_frame(sales), settings)
    return value_roll(analysis, pd.read_csv(d / "roll.csv"))


def _same(loaded, want):
    assert list(loaded.columns) == ROLL_COLUMNS
    assert list(loaded["parcel_id"].astype(str)) == list(want["parcel_id"])
    assert list(loaded["row"]) == list(want["row"])
    for col in FIGURES:   # the file's numbers are the engine's, to the last bit for csv
        np.testing.assert_allclose(loaded[col].to_numpy(float), want[col].to_numpy(float),
                                   rtol=1e-15, atol=0, err_msg=col)
    assert list(loaded["flags"].fillna("").astype(str)) == list(want["flags"].astype(str))


def test_csv_loads_back_with_identical_ids_and_values(files, capsys, monkeypatch):
    d, roll, _ = files
    monkeypatch.setattr(cli_roll, "CHUNK", 700)       # four chunks: the streaming path
    out = d / "values.csv"
    assert main(["value", str(d / "sales.csv"), "--roll", str(d / "roll.csv"), "--out",
                 str(out), "--json", *_flags()]) == 0
    payload = json.loads(capsys.readouterr().out)
    want = _reference(d)
    loaded = pd.read_csv(out, keep_default_na=False, na_values=[])
    _same(loaded, want.values)
    assert list(loaded["parcel_id"]) == list(roll["Parcel"])
    # the summary of the streamed roll is the in-memory one's
    assert payload["roll"]["parcels"] == len(roll)
    assert payload["roll"]["flagged"] == int(want.summary["flagged"].iloc[0])
    assert [f["parcels"] for f in payload["roll_flags"]] == list(want.flags["parcels"])
    assert payload["roll_total"]["total"] == pytest.approx(want.total["total"].iloc[0],
                                                           rel=1e-12)
    assert payload["roll_total"]["ci_low"] == pytest.approx(want.total["ci_low"].iloc[0],
                                                            rel=1e-12)


def test_xlsx_loads_back(files, capsys):
    d, roll, _ = files
    out = d / "values.xlsx"
    assert main(["value", str(d / "sales.csv"), "--roll", str(d / "roll.csv"), "--out",
                 str(out), *_flags()]) == 0
    assert "Flags, counted once for the roll" in capsys.readouterr().out
    loaded = pd.read_excel(out, sheet_name="Roll values", engine="openpyxl",
                           keep_default_na=False, na_values=[])
    _same(loaded, _reference(d).values)


def test_parquet_loads_back(files):
    pytest.importorskip("pyarrow")
    d, roll, _ = files
    out = d / "values.parquet"
    assert main(["value", str(d / "sales.csv"), "--roll", str(d / "roll.csv"), "--out",
                 str(out), *_flags()]) == 0
    _same(pd.read_parquet(out), _reference(d).values)


def test_parquet_without_pyarrow_is_one_line(files, capsys, monkeypatch):
    # as on a machine without the extra (pandas itself notices pyarrow when it loads, so
    # hiding the module from a running test would mislead pandas, not plumbrule)
    monkeypatch.setattr(cli_roll, "has_pyarrow", lambda: False)
    d, _, _ = files
    assert main(["value", str(d / "sales.csv"), "--roll", str(d / "roll.csv"), "--out",
                 str(d / "v.parquet"), *_flags()]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "needs pyarrow" in err and "plumbrule[parquet]" in err
    assert not (d / "v.parquet").exists()


def test_an_id_repeated_across_chunks_names_both_cells_and_leaves_no_file(files, capsys,
                                                                          monkeypatch):
    d, roll, _ = files
    bad = roll.copy()
    bad.loc[2400, "Parcel"] = bad.loc[5, "Parcel"]       # sheet rows 7 and 2402
    bad.to_csv(d / "bad.csv", index=False)
    monkeypatch.setattr(cli_roll, "CHUNK", 1000)
    out = d / "bad_values.csv"
    assert main(["value", str(d / "sales.csv"), "--roll", str(d / "bad.csv"), "--out",
                 str(out), *_flags()]) == 2
    err = capsys.readouterr().err
    assert "cells A7 and A2402" in err and "'P-0000006' is on both" in err
    assert not out.exists()
    assert not list(d.glob(".bad_values.csv.*"))       # no partial file either


def test_out_without_a_roll_is_refused(files, capsys):
    d, _, _ = files
    assert main(["value", str(d / "sales.csv"), "--out", str(d / "x.csv"), *_flags()]) == 2
    assert "--roll" in capsys.readouterr().err


def test_roll_with_assessments_compares_sold_with_unsold_parcels(tmp_path, capsys):
    # Sales chasing (issue 15 §3; IAAO Standard on Ratio Studies, 2013, on sales chasing, from
    # memory): an invented roll whose sold parcels were reassessed at their sale price
    # (+~20 %) while the unsold ones moved +2 %; `value --roll` compares the two changes
    # with the unsold parcels of the roll. Reference: medians by numpy, Mann–Whitney by scipy.
    from scipy.stats import mannwhitneyu
    roll = county.parcels(1500, seed=41)
    sales = county.sales(roll, 300, seed=42)
    rng = np.random.default_rng(43)
    prior = pd.Series(rng.uniform(150_000, 300_000, len(roll)), index=roll["Parcel"])
    current = prior * 1.02
    price = sales.set_index("Parcel")["Sale price"]
    current[price.index] = price.to_numpy()            # chased: the roll follows the sale
    prior[price.index] = price.to_numpy() / 1.2
    for frame in (roll, sales):
        frame["Assessed"] = current[frame["Parcel"]].to_numpy()
        frame["Prior assessed"] = prior[frame["Parcel"]].to_numpy()
    roll.to_csv(tmp_path / "roll.csv", index=False)
    sales.to_csv(tmp_path / "sales.csv", index=False)
    assert main(["value", str(tmp_path / "sales.csv"), "--roll", str(tmp_path / "roll.csv"),
                 *_flags(), "--assessed-column", "Assessed",
                 "--prior-assessed-column", "Prior assessed", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    row = out["sales_chasing"][0]
    unsold = ~roll["Parcel"].isin(sales["Parcel"])
    sold_change = (sales["Assessed"] / sales["Prior assessed"] - 1).to_numpy()
    un_change = (roll.loc[unsold, "Assessed"] / roll.loc[unsold, "Prior assessed"] - 1).to_numpy()
    assert row["sold"] == pytest.approx(np.median(sold_change), rel=1e-12)
    assert row["unsold"] == pytest.approx(np.median(un_change), rel=1e-12)
    assert row["p_value"] == pytest.approx(mannwhitneyu(sold_change, un_change).pvalue,
                                           rel=1e-6)
    assert row["verdict"] == "watch"

"""`plumbrule compare`: the command-line contract of issue 13 section 4 (the command, --models,
--json's `comparison` records with `name` and `chosen` true for exactly one, and `reason`),
bad candidate rows refused with one line naming the cell (exit status 2)."""

import json

import pytest

from plumbrule import cli
from plumbrule.compare import COMPARISON_COLUMNS
from simulated_market import bent_market

FLAGS = ["--response", "Price", "--predictors", "Living area,Age", "--log-response",
         "--date-column", "Sale date", "--id-column", "Sale ID", "--holdout", "0.3"]


@pytest.fixture
def files(tmp_path):
    frame = bent_market(n=900, seed=5)
    frame.insert(0, "Sale ID", [f"M-{i:04d}" for i in range(len(frame))])
    sales = tmp_path / "sales.csv"
    frame.to_csv(sales, index=False)
    models = tmp_path / "models.csv"
    models.write_text("Model,trend,trend_knots,log_response\n"
                      "piecewise,piecewise,\"2024-07-01,2025-07-01\",\n"
                      "price scale,,,FALSE\n", encoding="utf-8")
    return sales, models, tmp_path


def test_json_contract(files, capsys):
    sales, models, _ = files
    assert cli.main(["compare", str(sales), "--models", str(models), "--json", *FLAGS]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {"comparison", "reason"} <= set(out)
    recs = out["comparison"]
    assert [r["name"] for r in recs].count("base") == 1 and len(recs) == 3
    assert sum(r["chosen"] is True for r in recs) == 1
    assert recs[0]["chosen"] is True                      # best first
    for r in recs:
        assert list(r)[:len(COMPARISON_COLUMNS)] == COMPARISON_COLUMNS
    mapes = [r["holdout_mape"] for r in recs]             # the default criterion: holdout
    assert mapes == sorted(mapes)
    assert recs[0]["name"] in out["reason"]
    assert sum(r["used"] is True for r in recs) == 1


def test_text_marks_the_chosen_and_carries_the_caution(files, capsys):
    sales, models, _ = files
    assert cli.main(["compare", str(sales), "--models", str(models), *FLAGS]) == 0
    text = capsys.readouterr().out
    assert " *" in text and "not an appraisal" in text and "is chosen" in text


def test_bad_models_cell_is_one_line_naming_the_cell(files, capsys):
    sales, _, tmp = files
    bad = tmp / "bad.csv"
    bad.write_text("Model,trend\nwavy,sideways\n", encoding="utf-8")
    assert cli.main(["compare", str(sales), "--models", str(bad), *FLAGS]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("plumbrule: bad.csv, cell B2:") and "\n" not in err
    assert "linear" in err                                # says what the setting accepts


def test_no_candidates_is_said(files, capsys):
    sales, _, _ = files
    assert cli.main(["compare", str(sales), *FLAGS]) == 2
    assert "--models" in capsys.readouterr().err

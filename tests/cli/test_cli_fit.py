"""`plumbrule fit`: the command-line contract (options, exit codes, the
--json keys scripts rely on), exercised through a real
subprocess and through cli.main().

Sources: the contract itself (options, JSON keys, exit status 2 with one line on
stderr); statsmodels OLS as the reference library for the numbers the JSON carries
(estimates, HC3 standard errors, intervals from scipy's t quantile).
"""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from foreign_labels import FOREIGN_LABELS as FOREIGN  # tests/reference/foreign_labels.txt
import statsmodels.api as sm
from scipy.stats import t as tdist

from plumbrule import cli
from plumbrule.demo.town import demo_sales

COEF_KEYS = ["term", "estimate", "std_error", "t", "p_value", "ci_low", "ci_high", "std_beta",
             "vif"]
FIT_KEYS = ["n_used", "n_dropped", "n_params", "df_resid", "r_squared", "adj_r_squared",
            "f_stat", "f_p_value", "resid_std_error", "rmse", "mae", "mape", "log_likelihood",
            "aic", "bic"]
CHECK_KEYS = ["check", "statistic", "p_value", "threshold", "verdict", "note"]


@pytest.fixture(scope="module")
def sales():
    frame = demo_sales(n=80, seed=11).head(80)
    frame = frame.assign(**{"Sale date": frame["Sale date"].dt.strftime("%Y-%m-%d")})
    frame = frame.astype(object)
    frame.loc[4, "Living area"] = "#N/A"          # sheet row 6
    frame.loc[9, "Sale price"] = ""               # sheet row 11
    frame.loc[12, "Lot size"] = "7,250"           # number stored as text, kept
    return frame


@pytest.fixture(scope="module")
def csv_path(sales, tmp_path_factory):
    path = tmp_path_factory.mktemp("cli") / "sales.csv"
    sales.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def xlsx_path(sales, tmp_path_factory):
    import openpyxl
    wb = openpyxl.Workbook()
    wb.active.title = "Sales"
    ws = wb.active
    ws.append(list(sales.columns))
    for row in sales.itertuples(index=False):
        ws.append([None if v == "" else v for v in row])
    other = wb.create_sheet("Small")
    other.append(["Price", "Area"])
    for i in range(12):
        other.append([100000 + 5000 * i + (i % 4) * 900, 1000 + 50 * i])
    path = tmp_path_factory.mktemp("cli") / "sales.xlsx"
    wb.save(path)
    return path


BASE = ["--response", "Sale price", "--predictors", "Living area,Lot size,Age,Neighbourhood",
        "--categorical", "Neighbourhood", "--folds", "0"]


def run(*args):
    """The console command as a user runs it (a fresh interpreter)."""
    return subprocess.run([sys.executable, "-m", "plumbrule", *map(str, args)],
                          capture_output=True, text=True, timeout=120)


def test_json_through_a_subprocess_keeps_the_contract(csv_path):
    proc = run("fit", csv_path, *BASE, "--json")
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)                 # exactly one JSON object
    for key in ["coefficients", "fit", "checks", "dropped_rows", "residuals", "correlations"]:
        assert key in out
    assert list(out["coefficients"][0])[:9] == COEF_KEYS
    assert out["coefficients"][0]["term"] == "intercept"
    assert isinstance(out["fit"], dict) and all(k in out["fit"] for k in FIT_KEYS)
    assert all(list(c)[:6] == CHECK_KEYS for c in out["checks"])
    assert out["dropped_rows"] == [
        {"row": 6, "column": "Living area", "reason": "error value #N/A"},
        {"row": 11, "column": "Sale price", "reason": "blank"}]
    assert out["fit"]["n_dropped"] == 2 and out["fit"]["n_used"] == 78
    assert len(out["residuals"]) == 78 and out["residuals"][0]["row"] == 2


def test_json_numbers_are_full_precision_and_match_statsmodels(csv_path, sales):
    code, out = _main_json(csv_path, *BASE)
    assert code == 0
    used = sales.drop(index=[4, 9])
    x = pd.concat([used[["Living area", "Age"]].astype(float),
                   used["Lot size"].map(lambda v: float(str(v).replace(",", ""))),
                   pd.get_dummies(used["Neighbourhood"], dtype=float)], axis=1)
    ref_level = used["Neighbourhood"].value_counts().idxmax()
    x = x.drop(columns=ref_level)[["Living area", "Lot size", "Age"]
                                  + sorted(c for c in x.columns[3:] if c != ref_level)]
    ref = sm.OLS(used["Sale price"].astype(float), sm.add_constant(x)).fit()
    est = np.array([c["estimate"] for c in out["coefficients"]])
    np.testing.assert_allclose(est, ref.params.to_numpy(), rtol=1e-10)
    assert out["fit"]["r_squared"] == pytest.approx(ref.rsquared, rel=1e-12)
    assert out["fit"]["aic"] == pytest.approx(ref.aic, rel=1e-12)
    # Full precision: the printed float is the float itself (not rounded for display).
    assert any(len(repr(v).split(".")[-1]) > 8 for v in est)


def _main_json(*args):
    import contextlib
    import io
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = cli.main(["fit", *map(str, args), "--json"])
    return code, (json.loads(buf.getvalue()) if code == 0 else None)


def test_robust_se_and_confidence_options(csv_path, sales):
    code, out = _main_json(csv_path, "--response", "Sale price", "--predictors",
                           "Living area,Age", "--robust-se", "HC3", "--confidence", "0.9",
                           "--folds", "0")
    assert code == 0
    used = sales.drop(index=[4, 9])
    x = sm.add_constant(used[["Living area", "Age"]].astype(float))
    ref = sm.OLS(used["Sale price"].astype(float), x).fit(cov_type="HC3")
    se = np.array([c["std_error"] for c in out["coefficients"]])
    np.testing.assert_allclose(se, ref.bse.to_numpy(), rtol=1e-9)
    q = tdist.ppf(0.95, out["fit"]["df_resid"])
    first = out["coefficients"][1]
    assert first["ci_high"] == pytest.approx(first["estimate"] + q * first["std_error"], rel=1e-12)
    assert out["fit"]["se_type"] == "HC3"


def test_log_date_and_no_intercept_options(csv_path):
    code, out = _main_json(csv_path, "--response", "Sale price", "--predictors",
                           "Living area,Age", "--log-response", "--log-predictors", "Living area",
                           "--date-column", "Sale date", "--folds", "0")
    assert code == 0
    assert [c["term"] for c in out["coefficients"]] == [
        "intercept", "log(Living area)", "Age", "Sale date (months)"]
    code, out = _main_json(csv_path, "--response", "Sale price", "--predictors",
                           "Living area,Age", "--no-intercept", "--folds", "0")
    assert code == 0 and [c["term"] for c in out["coefficients"]] == ["Living area", "Age"]


def test_xlsx_first_sheet_by_default_or_the_named_sheet(xlsx_path):
    code, out = _main_json(xlsx_path, *BASE)
    assert code == 0 and out["fit"]["n_used"] == 78
    code, out = _main_json(xlsx_path, "--sheet", "Small", "--response", "Price",
                           "--predictors", "Area", "--folds", "0")
    assert code == 0 and out["fit"]["n_used"] == 12


def test_text_output_is_our_own_layout(csv_path, capsys):
    assert cli.main(["fit", str(csv_path), *BASE]) == 0
    text = capsys.readouterr().out
    for part in ["hedonic model of Sale price", "78 sales used", "2 rows left out",
                 "reference levels: Neighbourhood =", "How well the model fits",
                 "What each feature does to", "The coefficients in detail",
                 "Checks, question by question", "Rows left out for missing values",
                 "not an appraisal", "USPAP"]:
        assert part in text, part
    for label in FOREIGN:
        assert label.lower() not in text.lower(), label
    # issue 14: what a reader acts on first (effects in words), then the coefficients, then
    # the fit; the checks question by question, in plumbrule's order (not a statistics
    # library's footer, which opens with the omnibus normality test)
    at = [text.index(p) for p in ("What each feature does to", "The coefficients in detail",
                                  "How well the model fits", "Checks, question by question")]
    assert at == sorted(at)
    asked = [q for q in ("the data:", "the shape of the relationship:",
                         "the spread of errors:", "independence:", "normality:",
                         "collinearity:", "influence:") if "\n  " + q in text]
    assert asked.index("normality:") > asked.index("independence:") > asked.index(
        "the shape of the relationship:")
    assert [text.index("\n  " + q) for q in asked] == sorted(text.index("\n  " + q)
                                                            for q in asked)
    assert "omnibus" not in text.lower() and "D'Agostino–Pearson K²" in text
    effects = text.split("The coefficients in detail")[0]
    assert " against " in effects                        # a level against the reference
    assert " per unit of " in effects or " per 1% of " in effects   # a numeric feature


def _bad(args, capsys, pattern):
    code = cli.main(args)
    err = capsys.readouterr().err
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("plumbrule: "), err
    assert "Traceback" not in err
    import re
    assert re.search(pattern, lines[0]), lines[0]


def test_bad_inputs_exit_2_with_one_line(csv_path, xlsx_path, tmp_path, capsys):
    damaged = tmp_path / "damaged.xlsx"
    damaged.write_bytes(b"PK\x03\x04 not really a workbook")
    zero = tmp_path / "zero.csv"
    zero.write_text("Price,Age\n100,5\n120,3\n130,0\n150,7\n160,9\n")
    cases = [
        (["fit", str(tmp_path / "missing.csv"), *BASE], r"missing\.csv' does not exist"),
        (["fit", str(damaged), *BASE], r"'damaged\.xlsx' cannot be read as a workbook"),
        (["fit", str(csv_path), *BASE, "--robust-se", "HC9"],
         r"Setting 'robust_se' \(--robust-se\): 'HC9' is not one of HC1, HC3\."),
        (["fit", str(csv_path), *BASE, "--confidence", "2"],
         r"Setting 'confidence' \(--confidence\): 2 is outside"),
        (["fit", str(csv_path), "--response", "Price", "--predictors", "Age"],
         r"Setting 'response' \(--response\): there is no column 'Price'\. Did you mean "
         r"'Sale price'\?"),
        (["fit", str(csv_path), "--response", "Sale price", "--predictors", "Age,Condition"],
         r"Column 'Condition', row 2: '\w+' is not a number\..*'categorical' setting"),
        (["fit", str(zero), "--response", "Price", "--predictors", "Age",
          "--log-predictors", "Age"], r"Column 'Age', row 4: the logarithm needs a positive "
                                      r"value, found 0\."),
        (["fit", str(xlsx_path), "--sheet", "Nope", *BASE], r"has no sheet 'Nope'"),
        (["fit", str(csv_path), *BASE, "--bogus"], r"unrecognized arguments: --bogus"),
        (["fit", "--response", "x"], r"required: DATA"),
        (["fit", str(csv_path), "--predictors", "Age"], r"Setting 'response' \(--response\) is "
                                                        r"empty"),
    ]
    for args, pattern in cases:
        _bad(args, capsys, pattern)


def test_bad_input_through_a_subprocess_has_no_traceback(tmp_path):
    bad = tmp_path / "bad.csv"
    rows = ["Sale price,Living area"] + [f"{100000 + i},{1000 + i}" for i in range(15)]
    rows.append("120000,approx 1200")               # sheet row 17
    bad.write_text("\n".join(rows) + "\n")
    proc = run("fit", bad, "--response", "Sale price", "--predictors", "Living area")
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr == ("plumbrule: Column 'Living area', row 17: 'approx 1200' is not a "
                           "number. Enter a number or leave the cell blank.\n")


def test_help_and_version_exit_0(capsys):
    assert cli.main(["--version"]) == 0
    assert cli.main(["fit", "--help"]) == 0
    assert "--log-predictors" in capsys.readouterr().out

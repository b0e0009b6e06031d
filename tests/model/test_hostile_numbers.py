"""Numbers no fit can work with: refused by cell in one line, never R² nan, "F inf", AIC
−inf, a false "same value in every row" or a RuntimeWarning.

Sources: IEEE 754 double range (largest 1.8e308, smallest normal 2.2e-308; numpy.finfo);
the facts of the trade (a sale price is an amount, never TRUE/FALSE, and prices that do
not vary leave nothing to explain: R² = 1 − SSR/TSS is 0/0 when TSS = 0). The CLI cases
run with RuntimeWarning as an error (pytest's filterwarnings, as python -W
error::RuntimeWarning would), one of them in a real subprocess.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from plumbrule.cli.main import main
from plumbrule.demo.town import demo_sales

pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")
FIT = ["--response", "Sale price", "--predictors", "Living area,Age,Neighbourhood",
       "--categorical", "Neighbourhood"]


@pytest.fixture(scope="module")
def sales():
    return demo_sales(n=40, seed=3)[["Sale price", "Living area", "Age", "Neighbourhood"]]


def _refused(capsys, path) -> str:
    """stderr of ``plumbrule fit`` on ``path``, which must exit 2 (bad input)."""
    status = main(["fit", str(path), *FIT])
    err = capsys.readouterr().err
    assert status == 2, err
    assert err.startswith("plumbrule: ") and "internal error" not in err, err
    return err


def _csv(frame, tmp_path, name="sales.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def test_the_limits_keep_fourth_powers_inside_the_double_range():
    from plumbrule.intake.cells import MAX_MAGNITUDE, MIN_MAGNITUDE
    fi = np.finfo(float)
    assert MAX_MAGNITUDE ** 4 * 1e9 < fi.max           # a billion sales of the largest value
    assert MIN_MAGNITUDE ** 4 > fi.tiny


def test_prices_scaled_by_1e302_are_refused_by_cell(sales, tmp_path, capsys):
    err = _refused(capsys, _csv(sales.assign(**{"Sale price": sales["Sale price"] * 1e302}),
                                tmp_path))
    assert err.startswith(f"plumbrule: {len(sales)} cells cannot be read")
    assert "  Column 'Sale price', row 2: " in err and "too large for the fit" in err


def test_one_price_of_1e308_is_named(sales, tmp_path, capsys):
    frame = sales.astype(object)
    frame.loc[3, "Sale price"] = 1e308                  # sheet row 5
    err = _refused(capsys, _csv(frame, tmp_path))
    assert "Column 'Sale price', row 5: '1e+308' is too large for the fit" in err


def test_a_single_1e308_in_a_real_subprocess_prints_no_warning(sales, tmp_path):
    frame = sales.astype(object)
    frame.loc[3, "Sale price"] = 1e308
    path = _csv(frame, tmp_path)
    import os
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path))
    out = subprocess.run([sys.executable, "-W", "error::RuntimeWarning", "-m", "plumbrule",
                          "fit", str(path), *FIT], capture_output=True, text=True, env=env)
    assert out.returncode == 2 and "Warning" not in out.stderr, out.stderr
    assert out.stderr.count("\n") == 1 and "row 5" in out.stderr


def test_a_constant_response_is_refused(sales, tmp_path, capsys):
    err = _refused(capsys, _csv(sales.assign(**{"Sale price": 100000.0}), tmp_path))
    assert "'Sale price' (the response) is 100,000 in every one of the" in err


@pytest.mark.parametrize("scale,words", [(1e300, "too large"), (1e-310, "too close to zero")])
def test_a_predictor_scaled_out_of_range_is_said_so(sales, tmp_path, capsys, scale, words):
    err = _refused(capsys, _csv(sales.assign(**{"Living area": sales["Living area"] * scale}),
                                tmp_path))
    assert "Column 'Living area', row 2" in err and words in err
    assert "exact combination" not in err and "same value in every" not in err


def test_zero_is_in_range(sales):
    # 0 is an ordinary value (a lot with no garage); only nonzero values near 0 are refused.
    from plumbrule.analysis import analyze
    frame = sales.assign(Garage=np.arange(len(sales)) % 3 * 1.0)     # 0, 1, 2, 0, ...
    assert (frame["Garage"] == 0).sum() > 0
    a = analyze(frame, {"response": "Sale price", "predictors": "Living area,Garage"})
    assert a.model.fit.n == len(frame)


def test_a_subject_of_1e308_is_refused_by_row(sales):
    from plumbrule.analysis import analyze
    from plumbrule.errors import PlumbError
    from plumbrule.valuation.estimates import valuate
    a = analyze(sales, {"response": "Sale price", "predictors": "Living area,Age"})
    subjects = pd.DataFrame({"Living area": [1500.0, 1e308], "Age": [10, 12]})
    with pytest.raises(PlumbError, match=r"Column 'Living area', row 3: '1e\+308' is too large"):
        valuate(a, subjects, ())


def test_a_subject_the_log_model_cannot_price_is_refused_by_row(sales):
    # 1e50 is in range, but exp(b·1e50) of a log-price model is no float.
    from plumbrule.analysis import analyze
    from plumbrule.errors import PlumbError
    from plumbrule.valuation.estimates import valuate
    a = analyze(sales, {"response": "Sale price", "predictors": "Living area,Age",
                        "log_response": True})
    subjects = pd.DataFrame({"Living area": [1500.0, 1e50], "Age": [10, 12]})
    with pytest.raises(PlumbError, match=r"Subject row 3: the model gives it no finite price"):
        valuate(a, subjects, ())
    ok = valuate(a, subjects.head(1), ()).estimates["estimate"]
    assert np.isfinite(ok).all()

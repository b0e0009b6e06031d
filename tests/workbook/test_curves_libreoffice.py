"""LibreOffice recomputes the live block of a model with curves (a restricted cubic spline,
a square and bands) to the engine's figures (1e-9 relative, the issue's tolerance), after a
real `plumbrule run` of a filled template; the Model sheet keeps its curve tables and charts.
"""

import subprocess
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from test_live_curves import CURVES, SUBJECT, curved_sales

pytestmark = pytest.mark.spreadsheet

# the LibreOffice found (the module skips without one) and the live/static name pairs
from test_libreoffice import PAIRS, SOFFICE  # noqa: E402


def _convert(book: Path, outdir: Path, profile: Path) -> Path:
    outdir.mkdir(parents=True, exist_ok=True)
    done = subprocess.run(
        [SOFFICE, f"-env:UserInstallation={profile.as_uri()}", "--headless", "--norestore",
         "--convert-to", "xlsx", "--outdir", str(outdir), str(book)],
        capture_output=True, text=True, timeout=240)
    out = outdir / (book.stem + ".xlsx")
    assert done.returncode == 0 and out.exists(), (done.stdout, done.stderr)
    return out


def _named(wb, name):
    (sheet, ref), = wb.defined_names[name].destinations
    return wb[sheet][ref.replace("$", "")].value


def test_live_block_with_curves_recomputes_in_libreoffice(tmp_path):
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.run import run_book
    path = tmp_path / "curved.xlsx"
    fill_template(path, curved_sales(), SUBJECT, (),
                  {"response": "Price", "predictors": "Living area,Lot size,Age",
                   "log_response": True, "curves": CURVES, "folds": 0, "date_column": "",
                   "categorical": "",
                   "id_column": ""})
    result = run_book(path, backup=False)
    assert len(result.analysis.tables.curves)
    model = openpyxl.load_workbook(path)["Model"]
    assert len(model._charts) == 3                 # one chart per curve
    out = _convert(path, tmp_path / "out", tmp_path / "profile")
    wb = openpyxl.load_workbook(out, data_only=True)
    formulas = openpyxl.load_workbook(path)["Valuation"]
    for row in formulas.iter_rows():
        for c in row:
            if c.data_type == "f":
                v = wb["Valuation"][c.coordinate].value
                assert isinstance(v, (int, float)) or v == "ok", (c.coordinate, c.value, v)
    engine = result.valuation.estimates.iloc[0]
    for live, static in PAIRS:
        got = _named(wb, live)
        assert isinstance(got, float), (live, got)
        assert got == pytest.approx(_named(wb, static), rel=1e-9), live
        assert got == pytest.approx(float(engine[static.replace("plumb_", "")]), rel=1e-9)
    words = [c.value for row in wb["Model"].iter_rows(max_col=1) for c in row
             if isinstance(c.value, str)]
    assert "Curves: effects that bend" in words
    assert pd.notna(engine["estimate"])

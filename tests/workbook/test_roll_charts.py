"""Charts and tables of the assessments on the roll and of location (workbook/roll_charts.py,
the Validation sheet). References: the engine's own tables, which test_assessments.py and
diagnostics/test_location.py check against the IAAO formulas and esda; here the charts must
plot exactly those numbers."""

import numpy as np
import openpyxl
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.workbook import report, sheets
from plumbrule.workbook.stamp import make_stamp
from simulated_county import SETTINGS, county
from sheet_reading import chart_title as _title, chart_values as _values


@pytest.fixture(scope="module")
def book():
    d = county(400, seed=6)
    d["Sale date"] = pd.Timestamp("2025-01-01") + pd.to_timedelta(
        np.random.default_rng(6).integers(0, 365, len(d)), unit="D")
    a = analyze(d, {**SETTINGS, "assessed_column": "Assessed", "prior_assessed_column": "Prior",
                    "date_column": "Sale date"})
    wb = openpyxl.Workbook()
    wb.active.title = "Report"
    report.write_report(wb, a, None, make_stamp(a, "f00d", "test.xlsx"))
    sheets.write_validation(wb.create_sheet("Validation"), a)
    return d, a, wb


def test_roll_and_map_charts_plot_the_engine_tables(book):
    d, a, wb = book
    charts = {_title(c): c for c in wb["Report"]._charts}
    vert = charts["Roll: ratio against assessed value"].series[0]
    est = a.tables.assessed_estimates
    np.testing.assert_allclose(_values(wb, vert.xVal.numRef.f), est["assessed"], rtol=1e-12)
    np.testing.assert_allclose(_values(wb, vert.yVal.numRef.f), d["Assessed"] / d["Price"],
                               rtol=1e-12)
    dated = charts["Roll: ratio against sale date"].series[0]
    serial = (d["Sale date"] - pd.Timestamp("1899-12-30")).dt.days.to_numpy(float)
    np.testing.assert_allclose(np.sort(_values(wb, dated.xVal.numRef.f)), np.sort(serial))
    rmap = charts["Map of residuals (blue above the model, red below)"]
    xs = np.concatenate([_values(wb, s.xVal.numRef.f) for s in rmap.series])
    assert len(xs) == len(d)
    np.testing.assert_allclose(np.sort(xs), np.sort(d["X"].to_numpy()), rtol=1e-12)
    names = [s.tx.v for s in rmap.series]
    assert sum(n.startswith("above") for n in names) == 3 and len(names) == 6


def test_validation_sheet_lists_the_roll_tables(book):
    _, _, wb = book
    texts = {c.value for row in wb["Validation"].iter_rows() for c in row
             if isinstance(c.value, str)}
    assert "Assessments on the roll against the sale prices" in texts
    assert "Sales chasing: did sold parcels' values move toward their prices?" in texts
    assert "Residuals on the map" in texts
    assert "assessed" in texts


def test_report_marks_the_roll_records(book):
    _, _, wb = book
    texts = [c.value for row in wb["Report"].iter_rows() for c in row if isinstance(c.value, str)]
    assert "Roll (assessed): all" in texts

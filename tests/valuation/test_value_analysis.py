"""`plumbrule value` runs the analysis without the checks, validation and ratio study it
never shows (compute what is shown). Its valuation must be the one the whole analysis gives:
the same estimates, intervals, flags, grid and reconciled value, on the demo town with its
comparables and on a model with a trend and a holdout."""

import pytest

from plumbrule.analysis import analyze
from plumbrule.cli.demo import demo_settings
from plumbrule.cli.value import render_valuation, valuation_json
from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
from plumbrule.valuation.estimates import valuate


@pytest.mark.parametrize("extra", [{}, {"final_fit": "training", "influence_screen": "yes"}])
def test_value_analysis_values_as_the_whole_analysis(extra):
    sales = demo_sales()
    settings = {**{k: v for k, v in demo_settings().items() if v is not None}, **extra}
    subjects, comps = demo_subjects(), demo_comps(sales)
    whole = analyze(sales, settings)
    lean = analyze(sales, settings, for_valuation=True)
    assert lean.tables.checks.empty and len(whole.tables.checks) > 10
    got, want = valuate(lean, subjects, comps), valuate(whole, subjects, comps)
    assert valuation_json(got) == valuation_json(want)
    assert render_valuation(got, lean) == render_valuation(want, whole)

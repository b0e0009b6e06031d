"""Checks grouped by the question they answer (issue 14): every check has a question, the
table runs question by question in plumbrule's order, each question one verdict."""

import pytest

from plumbrule.diagnostics.questions import QUESTIONS, question_of, question_table


@pytest.fixture(scope="module")
def demo():
    from plumbrule.analysis import analyze
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_sales
    from plumbrule.settings import parse_settings
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    return analyze(demo_sales(), parse_settings(settings))


def test_every_check_answers_one_question_in_our_order(demo):
    checks = demo.tables.checks
    assert list(checks.columns)[-1] == "question"          # extended at the end
    assert set(checks["question"]) <= set(QUESTIONS)
    rank = [QUESTIONS.index(q) for q in checks["question"]]
    assert rank == sorted(rank)
    # a statistics library's printed summary opens its footer with the omnibus test,
    # then skew, kurtosis, Durbin-Watson: our list must not open that way
    assert checks["question"].iloc[0] == "the data"
    assert not checks["check"].str.contains("omnibus", case=False).any()
    assert "Normality: D'Agostino–Pearson K²" in set(checks["check"])


@pytest.mark.parametrize("name, question", [
    ("Constant variance: Breusch-Pagan (Koenker)", "the spread of errors"),
    ("Autocorrelation: Durbin-Watson (date order)", "independence"),
    ("Linearity: Ramsey RESET", "the shape of the relationship"),
    ("Multicollinearity: condition number", "collinearity"),
    ("Influence: Cook's distance > 4/n", "influence"),
    ("Residual kurtosis", "normality"),
    ("Screening: percentile trim", "the data"),
])
def test_question_of_each_kind_of_check(name, question):
    assert question_of(name) == question


def test_a_question_takes_its_worst_check_and_says_why(demo):
    checks = demo.tables.checks.copy()
    table = question_table(checks)
    assert list(table["question"]) == [q for q in QUESTIONS if q in set(checks["question"])]
    assert table.equals(demo.tables.check_questions)
    i = checks.index[checks["check"] == "Linearity: Ramsey RESET"][0]
    checks.loc[i, ["verdict", "note"]] = ["fails", "A curve is missing."]
    shape = question_table(checks).set_index("question").loc["the shape of the relationship"]
    assert shape["verdict"] == "fails" and shape["needing_attention"] >= 1
    assert shape["sentence"] == "Linearity: Ramsey RESET: A curve is missing."


def test_questions_reach_the_json(demo):
    import json
    from plumbrule.render.json import analysis_json
    out = json.loads(analysis_json(demo))
    assert {"question"} <= set(out["checks"][0])
    assert [q["question"] for q in out["check_questions"]][:1] == ["the data"]

"""The questions the checks answer, in the order a reader asks them.

Every check belongs to one question (the ``question`` column of the checks table); the
checks table lists them question by question, and :func:`question_table` gives each
question one verdict (its worst check's) and one sentence. The order is plumbrule's own:
first whether the sales can carry a model, then whether the model's form is right, then
the assumptions behind the intervals, last what single sales do to the fit.
"""

from __future__ import annotations

import pandas as pd

from plumbrule.verdicts import FAILS, NA, OK, TOO_FEW, WATCH

DATA = "the data"
SHAPE = "the shape of the relationship"
SPREAD = "the spread of errors"
INDEPENDENCE = "independence"
NORMALITY = "normality"
COLLINEARITY = "collinearity"
INFLUENCE = "influence"
QUESTIONS = (DATA, SHAPE, SPREAD, INDEPENDENCE, NORMALITY, COLLINEARITY, INFLUENCE)

QUESTION_COLUMNS = ["question", "verdict", "checks", "needing_attention", "sentence"]

# What each question asks, and what an 'ok' answer means for the valuation.
ASKS = {
    DATA: "Are the sales fit to model: readable, enough of each kind, set aside only by rules "
          "a reader can defend?",
    SHAPE: "Does the model's form (straight lines on its scale, a market trend) follow the "
           "sales?",
    SPREAD: "Is the scatter of prices about the model even across cheap and dear properties?",
    INDEPENDENCE: "Are the errors of sales close in time unrelated, as the intervals assume?",
    NORMALITY: "Are the errors close enough to normal for the prediction interval's width?",
    COLLINEARITY: "Can the effect of each feature be told apart from the others?",
    INFLUENCE: "Does any single sale pull the model far on its own?",
}
ALL_CLEAR = {
    DATA: "The sales used are readable and every sale set aside has its rule.",
    SHAPE: "Nothing suggests a missing curve or a trend out of step with the sale dates.",
    SPREAD: "The scatter is about even, so one interval width suits every subject.",
    INDEPENDENCE: "Errors of sales close in time look unrelated.",
    NORMALITY: "The errors' skew and tails are consistent with normal errors.",
    COLLINEARITY: "Each feature's effect is measured apart from the others.",
    INFLUENCE: "No sale moves the model much on its own.",
}

# Check names by their opening words (the checks' own modules name them); anything else
# is about the data (screening, category levels, hidden rows, intake).
_BY_NAME = (
    ("Normality", NORMALITY), ("Residual skewness", NORMALITY),
    ("Residual kurtosis", NORMALITY), ("Autocorrelation", INDEPENDENCE),
    ("Constant variance", SPREAD), ("Multicollinearity", COLLINEARITY),
    ("Linearity", SHAPE), ("Trend", SHAPE), ("Influence", INFLUENCE),
)
_SEVERITY = {FAILS: 3, WATCH: 2, OK: 1, TOO_FEW: 0, NA: 0}


def question_of(check_name: str) -> str:
    """The question a check answers, from its name."""
    for start, question in _BY_NAME:
        if check_name.startswith(start):
            return question
    return DATA


def in_question_order(checks: pd.DataFrame) -> pd.DataFrame:
    """The checks table question by question (each question's checks in their own order),
    with the ``question`` column filled."""
    out = checks.copy()
    given = out["question"] if "question" in out.columns else pd.Series("", index=out.index)
    out["question"] = [q if isinstance(q, str) and q else question_of(str(n))
                       for q, n in zip(given, out["check"], strict=True)]
    rank = out["question"].map({q: i for i, q in enumerate(QUESTIONS)}).fillna(len(QUESTIONS))
    order = sorted(range(len(out)), key=lambda i: (rank.iloc[i], i))
    return out.iloc[order].reset_index(drop=True)


def question_table(checks: pd.DataFrame) -> pd.DataFrame:
    """One row per question that has a check, in :data:`QUESTIONS` order: ``verdict`` (the
    worst of its checks: fails, watch, ok; n/a when none could run), ``checks`` (how many),
    ``needing_attention`` (how many say watch or fails) and ``sentence`` (all clear, or the
    worst check's note)."""
    rows = []
    if not len(checks):
        return pd.DataFrame(columns=QUESTION_COLUMNS)
    ordered = in_question_order(checks)
    for q in QUESTIONS:
        group = ordered[ordered["question"] == q]
        if not len(group):
            continue
        severity = group["verdict"].map(_SEVERITY).fillna(0)
        worst = group.iloc[int(severity.to_numpy().argmax())]
        verdict = str(worst["verdict"]) if severity.max() > 0 else NA
        attention = int(group["verdict"].isin((FAILS, WATCH)).sum())
        if verdict == OK:
            sentence = ALL_CLEAR[q]
        elif verdict == NA:
            sentence = f"Not checked: {worst['note']}"
        else:
            sentence = f"{worst['check']}: {worst['note']}"
        rows.append((q, verdict, len(group), attention, sentence))
    return pd.DataFrame(rows, columns=QUESTION_COLUMNS)

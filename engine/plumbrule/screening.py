"""Screening: set sales aside by a rule an appraiser can defend, with an audit row for each.

Rules run in a fixed order, and a sheet row is logged once, by the first rule
that catches it:

1. ``manual``           sheet rows the user lists (``exclude_rows``), with the user's reason;
2. ``percentile trim``  a value outside the LOW/HIGH percentiles of its column;
3. ``IQR fence``        a value beyond Q1 − k·IQR or Q3 + k·IQR of its column;
4. ``influence``        after a first fit on the training rows: Cook's distance > 4/n or
                        |studentized residual| > 3; the model is refitted once, never in a loop.

Percentile and fence limits are computed once, on the training sales entering
screening (the holdout never sets a limit it is judged by), before any rule removes a
row: a limit never depends on the order of the rules or on another rule's choices, so
anyone can recompute it from the sales sheet. Quantiles are pandas' default (linear
interpolation between order statistics). A column the model takes the logarithm of is
judged on its logarithm (``fence_scale`` = model, the default), where its spread is the
one the fit sees; ``raw`` judges every column in its own units.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from plumbrule.numbers import written
from plumbrule.diagnostics.checks import OK, WATCH, Check
from plumbrule.errors import SettingError
from plumbrule.numeric.quantiles import _lerp, _positions, quantiles

MANUAL, TRIM, FENCE, INFLUENCE, RATIO_TRIM = (
    "manual", "percentile trim", "IQR fence", "influence", "ratio trim")
RULE_ORDER = (MANUAL, TRIM, FENCE, INFLUENCE)
LOG_COLUMNS = ["row", "column", "value", "rule", "limit", "reason"]
COOKS_COLUMN, STUDENT_COLUMN = "Cook's distance", "studentized residual"
STUDENT_LIMIT = 3.0     # |studentized residual| > 3: common practice, no source


@dataclass(frozen=True)
class Screening:
    """Result of the data rules (manual, trim, fence).

    ``kept`` is the clean data without the rows set aside; ``log`` has one
    record per row set aside (LOG_COLUMNS); ``looked_at`` maps each rule that
    ran to the number of rows it examined (for the share that raises a watch).
    """

    kept: pd.DataFrame
    log: pd.DataFrame
    columns: tuple[str, ...]
    looked_at: tuple[tuple[str, int], ...]


def empty_log() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "value": pd.Series(dtype=float), "rule": pd.Series(dtype=object),
                         "limit": pd.Series(dtype=float), "reason": pd.Series(dtype=object)})


MISSING = "missing value"


def set_aside_table(log: pd.DataFrame, dropped: pd.DataFrame) -> pd.DataFrame:
    """The screening log (LOG_COLUMNS) plus the rows intake dropped for missing values that
    the log does not already list (rule 'missing value'), in sheet-row order."""
    extra = dropped[~dropped["row"].isin(log["row"])]
    if not len(extra):
        return log
    extra = pd.DataFrame({"row": extra["row"], "column": extra["column"], "value": None,
                          "rule": MISSING, "limit": None, "reason": extra["reason"]})
    out = pd.concat([log.astype(object), extra[LOG_COLUMNS].astype(object)], ignore_index=True)
    return out.sort_values("row", kind="stable", ignore_index=True)


# --- limits ------------------------------------------------------------------

def percentile_limits(data: pd.DataFrame, columns: Sequence[str], low_pct: float,
                      high_pct: float) -> pd.DataFrame:
    """Per column the LOW and HIGH percentiles (pandas' linear quantile).

    A tail at 0 or 100 is off: its limit is −inf / +inf. Returns column, low, high.
    """
    q = data[list(columns)].quantile([low_pct / 100.0, high_pct / 100.0])
    low = q.iloc[0].to_numpy(float) if low_pct > 0 else np.full(len(columns), -np.inf)
    high = q.iloc[1].to_numpy(float) if high_pct < 100 else np.full(len(columns), np.inf)
    return pd.DataFrame({"column": list(columns), "low": low, "high": high})


def fence_limits(data: pd.DataFrame, columns: Sequence[str], k: float) -> pd.DataFrame:
    """Per column Q1 − k·IQR and Q3 + k·IQR (quartiles by pandas' linear quantile).

    Returns column, q1, q3, low, high.
    """
    q = data[list(columns)].quantile([0.25, 0.75])
    q1, q3 = q.iloc[0].to_numpy(float), q.iloc[1].to_numpy(float)
    iqr = q3 - q1
    return pd.DataFrame({"column": list(columns), "q1": q1, "q3": q3,
                         "low": q1 - k * iqr, "high": q3 + k * iqr})


# --- rules -------------------------------------------------------------------

def manual_rule(data: pd.DataFrame, exclude_rows: Sequence[tuple[int, str]],
                sheet_rows: pd.Index) -> pd.DataFrame:
    """Log records for the rows the user sets aside (rows already dropped at intake are skipped).

    A row number that is not a row of the sales block is a :class:`SettingError`.
    """
    if not exclude_rows:
        return empty_log()
    rows = np.array([r for r, _ in exclude_rows], dtype=np.int64)
    reasons = [why or "set aside by hand (no reason given)" for _, why in exclude_rows]
    unknown = rows[~np.isin(rows, sheet_rows.to_numpy())]
    if len(unknown):
        first, last = int(sheet_rows.min()), int(sheet_rows.max())
        raise SettingError(f"Setting 'exclude_rows': sheet row {int(unknown[0])} is not a row of "
                           f"the sales table (rows {first} to {last}). Correct the row number.",
                           setting="exclude_rows", row=int(unknown[0]))
    frame = pd.DataFrame({"row": rows, "reason": reasons}).drop_duplicates("row")
    frame = frame[frame["row"].isin(data.index)].sort_values("row", kind="stable")
    return pd.DataFrame({"row": frame["row"].to_numpy(np.int64), "column": "",
                         "value": np.nan, "rule": MANUAL, "limit": np.nan,
                         "reason": frame["reason"].to_numpy(object)})[LOG_COLUMNS]


def outside_rule(data: pd.DataFrame, limits: pd.DataFrame, rule: str,
                 low_label: str, high_label: str, logged: Sequence[str] = ()) -> pd.DataFrame:
    """One log record per row with a value below ``low`` or above ``high`` in any column.

    The record names the first such column (in ``limits`` order); the reason
    names the others. ``low_label``/``high_label`` describe the limits in words.
    """
    cols = list(limits["column"])
    v = data[cols].to_numpy(float)
    lo, hi = limits["low"].to_numpy(float), limits["high"].to_numpy(float)
    below, above = v < lo, v > hi
    bad = below | above
    hit = bad.any(axis=1)
    if not hit.any():
        return empty_log()
    vb, bb, ab = v[hit], bad[hit], above[hit]
    j = bb.argmax(axis=1)
    i = np.arange(len(j))
    is_high = ab[i, j]
    value, limit = vb[i, j], np.where(is_high, hi[j], lo[j])
    col = np.array(cols, dtype=object)[j]
    more = bb.sum(axis=1) - 1
    reason = [f"{c} {written(x)} is {'above' if up else 'below'} "
              f"{high_label if up else low_label} ({written(lim)}"
              f"{', judged on the logarithm' if c in logged else ''})"
              + (f"; {m} more column{'s' if m > 1 else ''} outside too" if m else "")
              for c, x, up, lim, m in zip(col, value, is_high, limit, more, strict=False)]
    return pd.DataFrame({"row": data.index[hit].to_numpy(np.int64), "column": col,
                         "value": value, "rule": rule, "limit": limit,
                         "reason": reason})[LOG_COLUMNS]


def data_rules(data: pd.DataFrame, columns: Sequence[str], sheet_rows: pd.Index,
               exclude_rows: Sequence[tuple[int, str]] = (),
               trim: tuple[float, float] | None = None, fence: float | None = None,
               logged: Sequence[str] = (), basis: pd.DataFrame | None = None) -> Screening:
    """Manual → percentile trim → IQR fence on ``data`` (clean rows, index = sheet rows).

    Limits are computed once on ``basis`` (the training sales; default ``data``) and applied
    to every row of ``data``; a column in ``logged`` (one the model takes the logarithm of)
    is judged on its logarithm, the limits reported back in its own units.
    """
    columns = tuple(columns)
    basis = data if basis is None else basis
    logs, looked = [], []
    remaining = data
    manual = manual_rule(data, exclude_rows, sheet_rows)
    if exclude_rows:
        looked.append((MANUAL, len(remaining)))
        logs.append(manual)
        remaining = remaining.drop(index=manual["row"])
    if trim is not None:
        lo, hi = trim
        lim = _in_own_units(percentile_limits(_on_scale(basis, columns, logged), columns, lo,
                                              hi), logged)
        looked.append((TRIM, len(remaining)))
        log = outside_rule(remaining, lim, TRIM, f"the {_ordinal(lo)} percentile",
                           f"the {_ordinal(hi)} percentile", logged)
        logs.append(log)
        remaining = remaining.drop(index=log["row"])
    if fence is not None:
        k = fence
        lim = _in_own_units(fence_limits(_on_scale(basis, columns, logged), columns, k), logged)
        looked.append((FENCE, len(remaining)))
        log = outside_rule(remaining, lim, FENCE, f"Q1 − {k:g}·IQR", f"Q3 + {k:g}·IQR",
                           logged)
        logs.append(log)
        remaining = remaining.drop(index=log["row"])
    log = pd.concat(logs, ignore_index=True) if logs else empty_log()
    return Screening(kept=remaining, log=log, columns=columns, looked_at=tuple(looked))


def _on_scale(data: pd.DataFrame, columns: Sequence[str], logged: Sequence[str]
              ) -> pd.DataFrame:
    """The columns on the scale the model uses: logged columns as their logarithm (a value
    that is not positive has none: NaN, left out of the quantiles)."""
    out = data[list(columns)].astype(float)
    for c in columns:
        if c in logged:
            v = out[c].to_numpy()
            with np.errstate(divide="ignore", invalid="ignore"):
                out[c] = np.log(np.where(v > 0, v, np.nan))
    return out


def _in_own_units(limits: pd.DataFrame, logged: Sequence[str]) -> pd.DataFrame:
    """Limits computed on the logarithm, turned back into the column's units (exp is
    monotone, so the same rows fall outside)."""
    on_log = limits["column"].isin(list(logged)).to_numpy()
    if not on_log.any():
        return limits
    out = limits.copy()
    for c in ("low", "high", "q1", "q3"):
        if c in out:
            v = out[c].to_numpy(float)
            with np.errstate(over="ignore"):     # a limit beyond the float range is +inf
                out[c] = np.where(on_log, np.exp(v), v)
    return out


def influence_rule(model) -> pd.DataFrame:
    """Log records for sales of a first fit with Cook's D > 4/n or |studentized residual| > 3.

    The record names Cook's distance when that limit is broken, else the
    studentized residual. Rows with leverage 1 (NaN diagnostics) are kept.
    """
    n = model.fit.n
    cooks = model.influence.cooks_distance
    stud = model.influence.studentized
    c_lim = 4.0 / n
    with np.errstate(invalid="ignore"):
        big_c = cooks > c_lim
        big_t = np.abs(stud) > STUDENT_LIMIT
    hit = big_c | big_t
    if not hit.any():
        return empty_log()
    bc, bt = big_c[hit], big_t[hit]
    col = np.where(bc, COOKS_COLUMN, STUDENT_COLUMN).astype(object)
    value = np.where(bc, cooks[hit], stud[hit])
    limit = np.where(bc, c_lim, np.where(stud[hit] < 0, -STUDENT_LIMIT, STUDENT_LIMIT))
    reason = [(f"Cook's distance {c:.3g} is above 4/n ({c_lim:.3g})" if a else "")
              + ("; " if a and b else "")
              + (f"studentized residual {t:.3g} is beyond ±3" if b else "")
              for a, b, c, t in zip(bc, bt, cooks[hit], stud[hit], strict=False)]
    return pd.DataFrame({"row": model.rows[hit].astype(np.int64), "column": col, "value": value,
                         "rule": INFLUENCE, "limit": limit, "reason": reason})[LOG_COLUMNS]


# --- checks and summary ----------------------------------------------------------

def screening_checks(log: pd.DataFrame, looked_at: Sequence[tuple[str, int]],
                     max_share: float) -> list[Check]:
    """One check per rule that ran: the share it set aside, watch above ``max_share``."""
    counts = log["rule"].value_counts()
    out = []
    for rule, n in looked_at:
        k = int(counts.get(rule, 0))
        share = k / n if n else 0.0
        verdict = WATCH if share > max_share else OK
        note = (f"{k} of {n} sales set aside ({share:.1%})."
                + (" That is many: the rule may be cutting genuine market sales; check the screen "
                   "log before trusting the model." if verdict == WATCH else ""))
        out.append(Check(f"Screening: {rule}", share, float("nan"),
                         f"more than {max_share:.0%} of rows (common practice, no source)",
                         verdict, note))
    return out


def price_screen_check(response: str, log: pd.DataFrame) -> Check:
    """A watch when the trim or fence read the sale price: cutting sales by their price
    (the response) biases every slope toward zero and leaves the intervals too narrow
    (truncated regression: Heckman 1979, from memory)."""
    k = int((log["column"] == response).sum())
    return Check("Screening on the sale price", float(k), float("nan"),
                 "the trim and fence read only the predictors", WATCH,
                 f"trim_columns names the price '{response}', so {k} sales were set aside for "
                 "their price. Cutting sales by the value being explained biases every effect "
                 "toward zero, and the p-values and intervals after it are too narrow. Screen "
                 "on the predictors, and set aside odd prices by hand with a reason.")


FIVE = (0.0, 0.25, 0.5, 0.75, 1.0)
SUMMARY_STATS = ("min", "q1", "median", "q3", "max", "fence_low_1_5", "fence_high_1_5",
                 "fence_low_3", "fence_high_3", "fence_low_used", "fence_high_used")


def five_numbers(data: pd.DataFrame, columns: Sequence[str], k: float = 1.5,
                 logged: Sequence[str] = ()) -> pd.DataFrame:
    """Per column min, Q1, median, Q3, max, the 1.5·IQR and 3·IQR fences in the column's
    units, and the fence the rule uses (``k``·IQR, on the logarithm for a ``logged``
    column, given back in the column's units) as fence_low_used / fence_high_used
    (index: column)."""
    return _box_numbers(data, columns, k, logged)[0]


def _box_numbers(data: pd.DataFrame, columns: Sequence[str], k: float,
                 logged: Sequence[str]) -> tuple[pd.DataFrame, dict[str, int]]:
    """:func:`five_numbers` and each column's number of distinct values (as pandas'
    ``nunique``: missing left out), both from one sort of the column."""
    cols = list(columns)
    if not len(data):
        return (pd.DataFrame(np.nan, index=cols, columns=list(SUMMARY_STATS)),
                {c: 0 for c in cols})
    rows, distinct, other = [], {}, []
    for c in cols:
        # One sort gives every order statistic and the distinct values: the quantiles by
        # numpy's linear interpolation (pandas' quantile), bit for bit (see quantiles.py)
        five, distinct[c] = _sorted_numbers(data[c])
        rows.append(five)
        if c in logged or np.isnan(five).any():
            other.append(c)      # the rule's fence on another scale, or missing left out
    q = pd.DataFrame(rows, index=cols, columns=["min", "q1", "median", "q3", "max"])
    iqr = q["q3"] - q["q1"]
    q["fence_low_1_5"], q["fence_high_1_5"] = q["q1"] - 1.5 * iqr, q["q3"] + 1.5 * iqr
    q["fence_low_3"], q["fence_high_3"] = q["q1"] - 3.0 * iqr, q["q3"] + 3.0 * iqr
    # the fence the rule uses: the same quartiles where the rule reads the column as it is
    low, high = q["q1"] - k * iqr, q["q3"] + k * iqr
    q["fence_low_used"], q["fence_high_used"] = low.to_numpy(float), high.to_numpy(float)
    if other:
        used = _in_own_units(fence_limits(_on_scale(data, other, logged), other, k),
                             logged).set_index("column")
        q.loc[other, "fence_low_used"] = used["low"].to_numpy(float)
        q.loc[other, "fence_high_used"] = used["high"].to_numpy(float)
    return q[list(SUMMARY_STATS)], distinct


def _sorted_numbers(col: pd.Series) -> tuple[np.ndarray, int]:
    """(min, Q1, median, Q3, max — NaN throughout when a value is missing, as
    :func:`quantiles` answers; the number of distinct values, missing left out)."""
    v = col.to_numpy()
    if not (isinstance(v.dtype, np.dtype) and v.dtype.kind in "fiu"):
        return quantiles(col.to_numpy(float), FIVE), int(col.nunique())
    s = np.sort(v)                          # NaN last, as numpy orders it
    present = len(s) - (int(np.count_nonzero(np.isnan(s))) if s.dtype.kind == "f" else 0)
    distinct = 1 + int(np.count_nonzero(s[1:present] != s[:present - 1])) if present else 0
    if present < len(s):
        return np.full(len(FIVE), np.nan), distinct
    f = s.astype(float, copy=False)         # a monotone map: still sorted
    prev, nxt, gamma = _positions(len(f), np.asarray(FIVE))
    return _lerp(f[prev], f[nxt], gamma), distinct


def summary_table(before: pd.DataFrame, after: pd.DataFrame, log: pd.DataFrame,
                  columns: Sequence[str], looked_at: Sequence[tuple[str, int]],
                  fence: float | None = None, logged: Sequence[str] = ()) -> pd.DataFrame:
    """screen_summary: one record for all rows, one per rule that ran, one per screened column.

    kind 'rows': rows_before, rows_after, excluded; kind 'rule': excluded and share of the rows
    the rule examined; kind 'column': rows set aside on that column and the box-plot numbers
    before and after screening (``<stat>_before`` / ``<stat>_after``), the fence
    multiplier the box plots draw (``fence_k``: the IQR fence's, else 1.5) and the scale it
    is drawn on (``fence_scale``: 'log' for a logged column, else 'raw'); at the end the
    number of distinct values before screening (``distinct_before``) and whether an IQR
    fence rule ran (``fence_set``: without it no fence was used).
    """
    fence_k = 1.5 if fence is None else float(fence)
    fit_log = log[log["rule"] != RATIO_TRIM]
    recs = [{"kind": "rows", "item": "all rows", "rows_before": len(before),
             "rows_after": len(after), "excluded": len(fit_log),
             "share_excluded": len(fit_log) / len(before) if len(before) else np.nan}]
    counts = log["rule"].value_counts()
    for rule, n in looked_at:
        k = int(counts.get(rule, 0))
        recs.append({"kind": "rule", "item": rule, "rows_before": n, "rows_after": n - k,
                     "excluded": k, "share_excluded": k / n if n else np.nan})
    b, distinct = _box_numbers(before, columns, fence_k, logged)
    a = b if len(after) == len(before) else five_numbers(after, columns, fence_k, logged)
    per_col = fit_log["column"].value_counts()
    for c in columns:
        rec = {"kind": "column", "item": c, "rows_before": len(before), "rows_after": len(after),
               "excluded": int(per_col.get(c, 0)),
               "share_excluded": int(per_col.get(c, 0)) / len(before) if len(before) else np.nan}
        rec.update({f"{s}_before": float(b.at[c, s]) for s in SUMMARY_STATS})
        rec.update({f"{s}_after": float(a.at[c, s]) for s in SUMMARY_STATS})
        rec.update(fence_k=fence_k, fence_scale="log" if c in logged else "raw")
        rec.update(distinct_before=distinct.get(c, 0) if c in before else 0,
                   fence_set=fence is not None)
        recs.append(rec)
    cols = (["kind", "item", "rows_before", "rows_after", "excluded", "share_excluded",
             "fence_k", "fence_scale"]
            + [f"{s}_before" for s in SUMMARY_STATS] + [f"{s}_after" for s in SUMMARY_STATS]
            + ["distinct_before", "fence_set"])
    return pd.DataFrame(recs).reindex(columns=cols)


# --- text ----------------------------------------------------------------------

def _ordinal(p: float) -> str:
    if p != int(p):
        return f"{p:g}th"
    p = int(p)
    suffix = "th" if 10 <= p % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(p % 10, "th")
    return f"{p}{suffix}"

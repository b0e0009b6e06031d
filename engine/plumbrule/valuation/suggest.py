"""Suggested comparables: the sales the model must adjust least to reach the subject.

Every candidate sale (the sales the model was fitted to, and the held-out sales; never a
sale screening set aside) is adjusted to the subject with the same model-derived
adjustments as the grid (:mod:`plumbrule.valuation.comparables`), in one matrix product
for all of them. The score is the gross adjustment as a share of the sale's price: the
smaller, the more alike the model finds the sale and the subject. Filters narrow the
candidates first: the same value of a column (``comp_same``, e.g. the neighbourhood) and a
recency window (``comp_months`` before the valuation date).

Bracketing (a practice of the trade: comparables on both sides of the subject, so the
adjustments do not all push one way) is checked per feature — some comparables adjusted
up and some down (or one needing none) for that feature — and for the value: the
comparables' adjusted prices lie on both sides of the model's estimate. When the first
``n`` by score do not bracket the estimate, the last of them gives way to the best-scored
candidate on the other side.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.errors import SettingError

SUGGESTION_COLUMNS = [
    "subject", "rank", "comp_row", "sale_price", "sale_date", "months_before", "same_value",
    "net_adjustment", "net_pct", "gross_adjustment", "gross_pct", "adjusted_price",
    "chosen_for",
]
BRACKET_COLUMNS = [
    "subject", "feature", "subject_value", "comp_low", "comp_high", "adjusted_down",
    "adjusted_up", "bracketed", "note",
]
DEFAULT_SUGGESTIONS = 4      # the `comps` command without suggest_comps: four, as a grid shows


@dataclass(frozen=True)
class Suggestions:
    """``table``: the suggested comparables, best first (one row each, ``SUGGESTION_COLUMNS``;
    money in the sale-price column's units, *_pct shares of the sale price);
    ``bracketing``: one row per feature plus the adjusted price (``BRACKET_COLUMNS``);
    ``rows``: the suggested sheet rows, in rank order; ``n_candidates``: sales scored."""

    table: pd.DataFrame
    bracketing: pd.DataFrame
    rows: tuple[int, ...]
    n_candidates: int


def candidate_sales(analysis) -> pd.DataFrame:
    """The sales a comparable may come from: fitted and held-out, in sheet-row order."""
    data = analysis.final_model.data
    parts = [data]
    if analysis.holdout is not None and len(analysis.holdout):
        hold = analysis.holdout[~analysis.holdout.index.isin(data.index)]   # not refitted
        if len(hold):
            parts.append(hold.reindex(columns=data.columns))
    if len(parts) == 1:
        return data
    return pd.concat(parts).sort_index(kind="stable")


def score_sales(model, subj_x: np.ndarray, sales: pd.DataFrame) -> dict[str, np.ndarray]:
    """Each sale adjusted to one subject (design row ``subj_x``): arrays of length n with
    the feature adjustments ``money`` (n × features, money), ``net``, ``gross`` (money),
    ``gross_pct`` (share of the price) and ``adjusted`` (price + net). One matrix product
    for every sale; the same algebra as the grid (``comparables._adjustments_in_money``)."""
    from plumbrule.valuation.comparables import _adjustments_in_money, _features
    fit = model.fit
    enc = model.encoding
    x = enc.design(sales, label="sales row")
    b = fit.coef[int(fit.has_intercept):]
    features = _features(enc)
    members = np.zeros((x.shape[1], len(features)))        # term → feature indicator
    for j, (_, _, idx) in enumerate(features):
        members[idx, j] = 1.0
    e_f = ((subj_x - x) * b) @ members
    price = sales[model.spec.response].to_numpy(dtype=float)
    money, _, net = _adjustments_in_money(e_f, e_f.sum(axis=1), price, model.spec.log_response)
    gross = np.abs(money).sum(axis=1)
    return {"money": money, "net": net, "gross": gross, "gross_pct": gross / price,
            "adjusted": price + net, "price": price,
            "features": np.array([f for f, _, _ in features], dtype=object)}


def suggest(analysis, subjects, n: int, when: _dt.date, estimates: pd.DataFrame,
            same: str | None = None, months: float | None = None,
            distance: float | None = None) -> Suggestions:
    """The ``n`` best comparables for the first subject of ``subjects``
    (:class:`~plumbrule.valuation.estimates.Subjects`), among sales matching ``same`` (a
    column of the sales table: the subject's value) and sold at most ``months`` before
    ``when``; ``estimates`` is the estimate table (its first row is the subject's)."""
    model = analysis.final_model
    spec = model.spec
    sales = candidate_sales(analysis)
    keep = np.ones(len(sales), dtype=bool)
    same_values = _same_values(analysis, sales, same)
    if same_values is not None and same is not None:
        subject_value = _subject_value(analysis, subjects, same)
        keep &= same_values.to_numpy(dtype=object) == subject_value
    months_before = np.full(len(sales), np.nan)
    if spec.date_column:
        dates = pd.to_datetime(sales[spec.date_column])
        months_before = ((pd.Timestamp(when) - dates).dt.days / (365.2425 / 12)).to_numpy()
    if months is not None:
        if not spec.date_column:
            raise SettingError("Setting 'comp_months' needs the sale dates: set date_column, "
                               "or leave comp_months blank.", setting="comp_months")
        keep &= (months_before >= 0) & (months_before <= months)
    if distance is not None:
        keep &= _distances(analysis, subjects, sales) <= distance
    pool = sales[keep]
    if pool.empty and distance is not None:
        raise SettingError(f"Setting 'comp_distance': no sale lies within {distance:g} of the "
                           "subject (with the other limits). Enter a larger distance, or leave "
                           "it blank.", setting="comp_distance")
    if pool.empty:
        raise SettingError(_no_candidates(same, months), setting="comp_same" if same
                           else "comp_months")
    scored = score_sales(model, subjects.x[0], pool)
    estimate = float(estimates["estimate"].iloc[0])
    pick, why = _pick(scored["gross_pct"], scored["adjusted"], estimate, n)
    rows = pool.index.to_numpy()[pick]
    label = subjects.labels.iloc[0]
    table = pd.DataFrame({
        "subject": label, "rank": np.arange(1, len(pick) + 1), "comp_row": rows.astype(np.int64),
        "sale_price": scored["price"][pick],
        "sale_date": (pool[spec.date_column].to_numpy()[pick] if spec.date_column
                      else pd.NaT),
        "months_before": months_before[keep][pick],
        "same_value": (same_values.to_numpy(dtype=object)[keep][pick]
                       if same_values is not None else None),
        "net_adjustment": scored["net"][pick],
        "net_pct": scored["net"][pick] / scored["price"][pick],
        "gross_adjustment": scored["gross"][pick], "gross_pct": scored["gross_pct"][pick],
        "adjusted_price": scored["adjusted"][pick], "chosen_for": why,
    }, columns=SUGGESTION_COLUMNS)
    if same is None:
        table = table.drop(columns="same_value").reindex(columns=SUGGESTION_COLUMNS)
    brackets = bracketing(model, subjects, pool.iloc[pick], scored["money"][pick],
                          scored["adjusted"][pick], estimate, label)
    return Suggestions(table=table, bracketing=brackets,
                       rows=tuple(int(r) for r in rows), n_candidates=int(keep.sum()))


def _pick(gross_pct: np.ndarray, adjusted: np.ndarray, estimate: float, n: int):
    """Indices of the ``n`` smallest gross shares (ties: the earlier sheet row), with the
    last swapped for the best candidate on the other side of ``estimate`` when the first
    ``n`` adjusted prices all lie on one side; and why each was chosen."""
    order = np.argsort(gross_pct, kind="stable")
    pick = order[:n].copy()
    why = ["smallest gross adjustment"] * len(pick)
    if len(pick) >= 2:
        above = adjusted[pick] >= estimate
        below = adjusted[pick] <= estimate
        if above.all() or below.all():
            other = (adjusted[order[n:]] < estimate) if above.all() else \
                (adjusted[order[n:]] > estimate)
            if other.any():
                pick[-1] = order[n:][np.argmax(other)]
                why[-1] = ("best on the other side of the estimate (bracketing)")
    return pick, why


def bracketing(model, subjects, comps: pd.DataFrame, money: np.ndarray, adjusted: np.ndarray,
               estimate: float, label) -> pd.DataFrame:
    """Per feature: how many comparables are adjusted down / up for it, and whether they
    bracket the subject (some adjusted each way, or one needing no adjustment); the
    comparables' range of a numeric feature beside the subject's value. Last row: whether
    the adjusted prices lie on both sides of the model's ``estimate``."""
    from plumbrule.valuation.comparables import _features
    rows = []
    for j, (name, kind, _) in enumerate(_features(model.encoding)):
        m = money[:, j]
        down, up, zero = int((m < 0).sum()), int((m > 0).sum()), bool((m == 0).any())
        if kind == "market":
            col = model.spec.date_column
            subject_value: object = pd.Timestamp(subjects.data[col].iloc[0])
            values = pd.to_datetime(comps[col])
            low, high = values.min(), values.max()
        elif kind == "category":
            subject_value = subjects.data[name].iloc[0]
            low = high = None
        else:
            subject_value = float(subjects.data[name].iloc[0])
            values = comps[name].astype(float)
            low, high = float(values.min()), float(values.max())
        ok: bool | None = zero or (down > 0 and up > 0)
        note = "" if ok else (f"every comparable is adjusted {'up' if up else 'down'} for "
                              f"{name}: the subject lies outside them")
        if kind == "category" and zero:
            note = "a comparable shares the subject's level"
        if kind == "market" and not ok and pd.notna(high) and high <= subject_value:
            ok = None          # sales precede the valuation date: time adjusts one way
            note = "every sale precedes the valuation date, so time adjusts one way"
        rows.append([label, name, subject_value, low, high, down, up, ok, note])
    below, above = int((adjusted < estimate).sum()), int((adjusted > estimate).sum())
    ok = (below > 0 and above > 0) or bool((adjusted == estimate).any())
    rows.append([label, "adjusted price", estimate, float(adjusted.min()),
                 float(adjusted.max()), below, above, ok,
                 "" if ok else "the adjusted prices lie on one side of the model's estimate"])
    out = pd.DataFrame(rows, columns=BRACKET_COLUMNS)
    out["subject_value"] = out["subject_value"].astype(object)
    out["bracketed"] = out["bracketed"].astype(object)
    return out


def _same_values(analysis, sales: pd.DataFrame, same: str | None) -> pd.Series | None:
    """The ``comp_same`` column's values for ``sales`` (from the sales table, so a column
    outside the model serves too); an unknown column is a SettingError."""
    if same is None:
        return None
    frame = analysis.table.frame
    col = next((c for c in frame.columns if str(c).strip().casefold() == same.casefold()),
               None)
    if col is None:
        raise SettingError(f"Setting 'comp_same': there is no column '{same}' in the sales. "
                           f"Enter one of: {', '.join(map(str, frame.columns))}.",
                           setting="comp_same")
    if col in sales.columns:
        return sales[col]
    return frame.loc[sales.index, col].map(lambda v: str(v).strip() if isinstance(v, str)
                                           else v)


def _subject_value(analysis, subjects, same: str):
    """The subject's value of the ``comp_same`` column (typed as the model typed it)."""
    data = subjects.data
    col = next((c for c in data.columns if str(c).strip().casefold() == same.casefold()), None)
    if col is None or pd.isna(data[col].iloc[0]):
        raise SettingError(f"Setting 'comp_same': the subject has no value in '{same}'. Fill "
                           f"it in on the subject's row, or leave comp_same blank.",
                           setting="comp_same")
    return data[col].iloc[0]


def _distances(analysis, subjects, sales: pd.DataFrame) -> np.ndarray:
    """Each sale's distance from the first subject (``comp_distance``): straight-line in the
    coordinates' units, or for ``coordinates = degrees`` the chord on the Earth's mean
    sphere in kilometres (≈ the great-circle distance at a town's scale). A sale without
    coordinates is never within reach."""
    from plumbrule.diagnostics.location import points
    from plumbrule.sales import side_numbers
    spec = analysis.spec
    if not (spec.x_column and spec.y_column):
        raise SettingError("Setting 'comp_distance' needs the coordinates: name x_column and "
                           "y_column, or leave comp_distance blank.", setting="comp_distance")
    here = (subjects.coords[0] if subjects.coords is not None
            else np.array([np.nan, np.nan]))
    if not np.isfinite(here).all():
        raise SettingError(f"Setting 'comp_distance': the subject has no number in "
                           f"'{spec.x_column}' or '{spec.y_column}'. Fill in its coordinates, "
                           "or leave comp_distance blank.", setting="comp_distance")
    xs = side_numbers(analysis.table, spec.x_column, sales.index)
    ys = side_numbers(analysis.table, spec.y_column, sales.index)
    pts = points(xs, ys, spec.coordinates)
    origin = points(np.array([here[0]]), np.array([here[1]]), spec.coordinates)[0]
    away = np.sqrt(((pts - origin) ** 2).sum(axis=1))
    return np.where(np.isfinite(away), away, np.inf)


def _no_candidates(same, months) -> str:
    parts = []
    if same:
        parts.append(f"the subject's value of '{same}'")
    if months is not None:
        parts.append(f"a sale date within {months:g} months before the valuation date")
    return (f"Settings comp_same / comp_months: no sale has {' and '.join(parts)}. Widen "
            "comp_months or leave comp_same blank.")


def suggest_each(analysis, subjects, settings, when: _dt.date, estimates: pd.DataFrame):
    """(first subject's :class:`Suggestions`, every subject's suggestions table, every
    subject's bracketing table) for ``settings.suggest_comps`` comparables each."""
    from plumbrule.valuation.estimates import Subjects
    out = []
    for i in range(len(subjects.data)):
        one = Subjects(data=subjects.data.iloc[i:i + 1], labels=subjects.labels.iloc[i:i + 1],
                       x=subjects.x[i:i + 1],
                       coords=None if subjects.coords is None else subjects.coords[i:i + 1])
        out.append(suggest(analysis, one, settings.suggest_comps, when, estimates.iloc[i:i + 1],
                           settings.comp_same, settings.comp_months, settings.comp_distance))
    return (out[0], pd.concat([s.table for s in out], ignore_index=True),
            pd.concat([s.bracketing for s in out], ignore_index=True))

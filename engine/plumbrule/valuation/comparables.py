"""The comparable-sales adjustment grid with model-derived adjustments, and the
reconciled value.

For each comparable the model's effects turn the differences between subject
and comparable into money. In a price model the adjustment for a feature is
coefficient × difference. In a log-price model the effects multiply: the
comparable's price P becomes P·exp(E) with E = Σ_f e_f, e_f = b·Δ for feature f
(Δ the log difference for a logged predictor, the indicator differences for a
category, months for the market trend; for a curve (model/curves.py) e_f = f(subject) −
f(comp), the curve's difference on the model's scale). The money P·(exp(E) − 1) is shared
among the features in proportion to their e_f, so the feature adjustments add
up to the net adjustment exactly and do not depend on an order of application.
The feature's stand-alone effect P·(exp(e_f) − 1) is shown beside it.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from plumbrule.errors import SpecError

MAX_COMPS = 10

GRID_COLUMNS = [
    "subject", "comp_row", "feature", "kind", "subject_value", "comp_value", "difference",
    "model_difference", "coefficient", "effect", "adjustment", "adjustment_alone",
    "adjustment_pct", "sale_price", "net_adjustment", "net_pct", "gross_adjustment",
    "gross_pct", "adjusted_price", "weight", "flags", "adjustment_rounded",
]
RECONCILED_COLUMNS = [
    "subject", "value", "range_low", "range_high", "spread", "spread_pct", "n_comps",
    "weighting", "weights", "model_estimate", "pi_low", "pi_high", "flags",
    "gap", "gap_pct", "gap_limit", "gap_warning", "largest_adjustments",
]
# the lines of the grid as appraisers read it (grid_table), in order, with their kind
GRID_TABLE_HEAD = ["line", "kind", "subject"]


@dataclass(frozen=True)
class CompSet:
    """The comparables' clean rows (index: sales sheet rows, in the user's order)
    and notes per row (e.g. set aside by screening)."""

    data: pd.DataFrame
    notes: dict = field(default_factory=dict)


# --- which comparables ----------------------------------------------------------

def resolve_comps(analysis, rows) -> CompSet | None:
    """Check the sheet rows named as comparables against the sales; ``None`` when
    there are none. A row not in the sales, or dropped for a missing value, is
    an error naming the row; a row screening set aside is kept with a note."""
    rows = [_row_number(r) for r in rows]
    if not rows:
        return None
    if len(rows) > MAX_COMPS:
        raise SpecError(f"Setting 'comps': {len(rows)} comparables were given; use at most "
                        f"{MAX_COMPS}.", setting="comps")
    seen = set()
    for r in rows:
        if r in seen:
            raise SpecError(f"Setting 'comps': row {r} is listed twice. List each comparable "
                            "once.", setting="comps", row=r)
        seen.add(r)
    table_rows = analysis.table.frame.index
    clean = analysis.clean
    used = analysis.final_model.data.index      # the sales of the model that values
    notes = {}
    for r in rows:
        if r not in table_rows:
            span = (f"its rows run {table_rows.min()} to {table_rows.max()}" if len(table_rows)
                    else "it has no rows")
            raise SpecError(f"Setting 'comps': row {r} is not a row of the sales table ({span}). "
                            "Enter the sheet row of a sale.", setting="comps", row=r)
        if r not in clean.data.index:
            raise SpecError(f"Setting 'comps': row {r} was dropped from the sales "
                            f"({_drop_reason(clean.dropped, r)}). Complete the row or choose "
                            "another comparable.", setting="comps", row=r)
        if r not in used:
            notes[r] = _set_aside_note(analysis, r)
    return CompSet(data=clean.data.loc[rows], notes=notes)


def _row_number(r) -> int:
    from plumbrule.settings import sheet_row
    row = sheet_row(r)
    if row is None:
        raise SpecError(f"Setting 'comps': '{r}' is not a sheet row number. Enter rows such as "
                        "12,40,57.", setting="comps")
    return row


def _drop_reason(dropped: pd.DataFrame, row: int) -> str:
    hit = dropped[dropped["row"] == row]
    if hit.empty:
        return "missing value"
    return f"column '{hit['column'].iloc[0]}' {hit['reason'].iloc[0]}"


def _set_aside_note(analysis, row: int) -> str:
    log = analysis.tables.screen_log
    if log is not None and len(log) and "row" in log:
        hit = log[log["row"] == row]
        if len(hit):
            why = hit["reason"].iloc[0] if "reason" in hit else hit.iloc[0].get("rule", "")
            return (f"set aside by screening ({why}) and not used in the fit: check it is a "
                    "fair comparable")
    holdout = getattr(analysis, "holdout", None)
    if holdout is not None and row in getattr(holdout, "index", ()):
        return "held out to test the model (not used in the fit)"
    return "not used in the fit"


# --- the grid -----------------------------------------------------------------

@dataclass(frozen=True)
class GridRules:
    """How the grid judges and weighs comparables: ``weights`` 'gross' (inverse gross
    adjustment) or 'equal'; flags above ``net_limit`` / ``gross_limit`` (shares of the
    sale price)."""

    weights: str = "gross"
    net_limit: float = 0.15
    gross_limit: float = 0.25
    rounding: float = 100.0     # adjustments shown rounded to this many price units (0: none)
    gap: float = 0.10           # reconciled vs model estimate: say so beyond this share

    @classmethod
    def from_settings(cls, settings) -> "GridRules":
        return cls(settings.comp_weights, settings.net_adjustment_limit,
                   settings.gross_adjustment_limit, settings.adjustment_rounding,
                   settings.reconcile_gap)


def adjustment_grid(model, subj, comps: CompSet | None, rules: GridRules, when: _dt.date,
                    estimates: pd.DataFrame | None = None, gap: bool = True):
    """(grid, reconciled) DataFrames; both empty (with their columns) without
    comparables. Money in the sale-price column's units; *_pct are shares of
    the comparable's price (0.05 = 5 %). ``gap`` False leaves the reconciled record's gap
    columns out (for a caller that adds them itself, :func:`with_gap`)."""
    if comps is None:
        return (pd.DataFrame(columns=GRID_COLUMNS),
                pd.DataFrame(columns=RECONCILED_COLUMNS))
    enc, spec = model.encoding, model.spec
    fit = model.fit
    xc = enc.design(comps.data, label="comparable row")
    diff = subj.x[0] - xc                              # m × k, model scale
    eff = diff * fit.coef[int(fit.has_intercept):]
    price = comps.data[spec.response].to_numpy(dtype=float)
    features = _features(enc)
    e_f = np.column_stack([eff[:, idx].sum(axis=1) for _, _, idx in features])
    total = e_f.sum(axis=1)
    money, alone, net = _adjustments_in_money(e_f, total, price, spec.log_response)
    gross = np.abs(money).sum(axis=1)
    adjusted = price + net
    net_pct, gross_pct = net / price, gross / price
    weights = comp_weights(gross_pct, rules.weights)
    flags = _comp_flags(comps, net_pct, gross_pct, rules, when, spec)
    label = subj.labels.iloc[0]
    place = (model_location(spec, comps, subj, enc.location) if enc.location is not None
             else None)
    parts = [_feature_frame(f, comps, subj, diff, fit, idx, kind, e_f[:, j], money[:, j],
                            alone[:, j], price, spec, when, place)
             for j, (f, kind, idx) in enumerate(features)]
    totals = pd.DataFrame({
        "comp_row": comps.data.index.to_numpy(dtype=np.int64), "feature": "total",
        "kind": "total", "effect": total, "adjustment": net, "adjustment_pct": net_pct,
        "sale_price": price, "net_adjustment": net, "net_pct": net_pct,
        "gross_adjustment": gross, "gross_pct": gross_pct, "adjusted_price": adjusted,
        "weight": weights, "flags": flags})
    grid = pd.concat(parts + [totals], ignore_index=True)
    order = {r: i for i, r in enumerate(comps.data.index)}
    grid["_c"] = grid["comp_row"].map(order)
    grid["_f"] = np.repeat(np.arange(len(features) + 1), len(price))
    grid = grid.sort_values(["_c", "_f"], kind="stable").drop(columns=["_c", "_f"])
    grid.insert(0, "subject", label)
    grid = grid.reindex(columns=GRID_COLUMNS).reset_index(drop=True)
    grid["adjustment_rounded"] = _rounded_adjustments(grid, rules.rounding)
    reconciled = reconcile(label, comps.data.index.to_numpy(), adjusted, weights,
                           rules.weights, flags, estimates)
    if gap:
        reconciled = with_gap(reconciled, grid, rules.gap)
    return grid, reconciled


def round_to(x, step: float):
    """``x`` rounded to the nearest multiple of ``step``, halves away from zero (as money is
    rounded by hand); unchanged when ``step`` is 0."""
    x = np.asarray(x, dtype=float)
    if not step:
        return x
    return np.sign(x) * np.floor(np.abs(x) / step + 0.5) * step


def _rounded_adjustments(grid: pd.DataFrame, step: float) -> np.ndarray:
    """Each feature's adjustment rounded to ``step``; a total row gets the sum of its
    comparable's rounded adjustments (so the net shown is the sum of the lines shown)."""
    feat = (grid["kind"] != "total").to_numpy()
    out = np.where(feat, round_to(grid["adjustment"].to_numpy(dtype=float), step), np.nan)
    sums = pd.Series(out[feat]).groupby(grid.loc[feat, "comp_row"].to_numpy()).sum()
    tot = ~feat
    out[tot] = sums.reindex(grid.loc[tot, "comp_row"].to_numpy()).to_numpy()
    return out


def grid_table(grid: pd.DataFrame, rounding: float, names=None, subject_row=None) -> pd.DataFrame:
    """The grid in the layout appraisers read: one line per item down the side (the
    sale, its price, each feature with the market-conditions line, net and gross
    adjustment, adjusted price, weight, notes), the subject and each comparable across.

    Columns: ``line`` (words), ``kind`` (sale, row, price, feature, market, net, gross,
    adjusted, weight, notes), ``subject``, then per comparable i = 1, 2, …: ``comp_i``
    (its value; a share of the price on the net and gross lines) and
    ``comp_i_adjustment`` (money, rounded to ``rounding``; net is the sum of the rounded
    adjustments, adjusted price = sale price + net). ``names`` maps sheet row → the
    sale's name (default: the grid's ``comp_sale``, else 'row N'); ``subject_row`` fills
    the subject's sheet-row cell (blank by default: its row is on another sheet). Empty
    (with its head columns) without comparables."""
    if grid is None or not len(grid):
        return pd.DataFrame(columns=GRID_TABLE_HEAD)
    rows = list(dict.fromkeys(grid["comp_row"].tolist()))
    if names is None and "comp_sale" in grid:
        names = dict(zip(grid["comp_row"], grid["comp_sale"], strict=False))
    feats = grid[grid["kind"] != "total"]
    order = list(dict.fromkeys(feats["feature"].tolist()))
    kinds = dict(zip(feats["feature"], feats["kind"], strict=False))
    adj = (grid["adjustment_rounded"] if "adjustment_rounded" in grid
           else pd.Series(_rounded_adjustments(grid, rounding), index=grid.index))
    subject = grid["subject"].iloc[0]
    lines: list[dict] = [
        {"line": "sale", "kind": "sale", "subject": subject},
        {"line": "sheet row", "kind": "row", "subject": subject_row},
        {"line": "sale price", "kind": "price", "subject": None},
    ]
    subject_value: dict = {}             # each feature's first subject value
    for f, v in zip(feats["feature"].to_numpy(), feats["subject_value"].to_numpy(),
                    strict=True):
        subject_value.setdefault(f, v)
    for f in order:
        kind = kinds[f]
        word = "market conditions (sale date)" if kind == "market" else f
        lines.append({"line": word, "kind": "market" if kind == "market" else "feature",
                      "subject": subject_value[f]})
    lines += [{"line": w, "kind": k, "subject": None} for w, k in (
        ("net adjustment", "net"), ("gross adjustment", "gross"),
        ("adjusted price", "adjusted"), ("weight", "weight"), ("notes", "notes"))]
    out = pd.DataFrame(lines)
    # each comparable's lines by position in the grid's arrays (one boolean filter, index
    # and row lookup per comparable in pandas cost more than the whole table)
    comp_row = grid["comp_row"].to_numpy()
    is_feat = (grid["kind"] != "total").to_numpy()
    feature = grid["feature"].to_numpy()
    comp_value = grid["comp_value"].to_numpy()
    sale_price, weight = grid["sale_price"].to_numpy(), grid["weight"].to_numpy()
    flags = grid["flags"].to_numpy()
    adj_at = (adj.to_numpy(dtype=float) if adj.index.equals(grid.index)
              else adj[grid.index].to_numpy(dtype=float))
    for i, r in enumerate(rows, start=1):
        at = np.flatnonzero(comp_row == r)
        f_at, t_at = at[is_feat[at]], at[~is_feat[at]][0]
        value_of = {feature[k]: comp_value[k] for k in f_at[::-1]}   # the first one wins
        a_feat = adj_at[f_at]
        price = float(sale_price[t_at])
        net = float(a_feat.sum())
        gross = float(np.abs(a_feat).sum())
        name = names.get(r, f"row {r}") if names is not None else f"row {r}"
        value = [name, r, price] + [value_of[f] for f in order] + [
            net / price, gross / price, None, float(weight[t_at]), flags[t_at] or ""]
        money = [None, None, None] + list(a_feat) + [net, gross, price + net, None, None]
        out[f"comp_{i}"] = pd.Series(value, dtype=object)
        out[f"comp_{i}_adjustment"] = pd.Series(money, dtype=object).astype(float)
    return out


def largest_adjustments(grid: pd.DataFrame, names=None,
                        n: int = 3) -> pd.DataFrame:
    """The ``n`` largest feature adjustments (by size, money) across the comparables: one
    row each with comp_row, comp_sale, feature, adjustment, adjustment_pct."""
    feats = grid[grid["kind"] != "total"]
    top = feats.reindex(feats["adjustment"].abs().sort_values(ascending=False,
                                                               kind="stable").index).head(n)
    out = top[["comp_row", "feature", "adjustment", "adjustment_pct"]].reset_index(drop=True)
    if names is None and "comp_sale" in grid:
        names = dict(zip(grid["comp_row"], grid["comp_sale"], strict=False))
    sale = [names.get(r, f"row {r}") if names is not None else f"row {r}"
            for r in out["comp_row"]]
    out.insert(1, "comp_sale", sale)
    return out


def with_gap(reconciled: pd.DataFrame, grid: pd.DataFrame, limit: float,
             names=None) -> pd.DataFrame:
    """``reconciled`` with the gap between the comparables' value and the model's estimate:
    ``gap`` (value − estimate, money), ``gap_pct`` (share of the estimate), ``gap_limit``
    (money: the larger of half the prediction interval's width and ``limit`` × estimate... the
    smaller one trips it: a gap beyond either is said), ``gap_warning`` and
    ``largest_adjustments`` (the comparables' largest adjustments, the likely cause)."""
    out = reconciled.copy()
    if not len(out):
        return out
    rec = out.iloc[0]
    est, lo, hi = (float(rec[c]) for c in ("model_estimate", "pi_low", "pi_high"))
    value = float(rec["value"])
    gap = value - est
    half = (hi - lo) / 2.0
    share_limit = limit * abs(est)
    bound = float(np.nanmin([half, share_limit])) if np.isfinite(est) else np.nan
    warn = bool(np.isfinite(gap) and abs(gap) > bound)
    top = largest_adjustments(grid, names)
    cause = "; ".join(f"{s}: {f} {a:+,.0f} ({100 * p:+.1f}%)" for s, f, a, p in zip(
        top["comp_sale"], top["feature"], top["adjustment"], top["adjustment_pct"],
        strict=False))
    out["gap"], out["gap_pct"] = gap, gap / est if est else np.nan
    out["gap_limit"], out["gap_warning"] = bound, warn
    out["largest_adjustments"] = cause
    return out[RECONCILED_COLUMNS]


def _features(enc):
    """(feature name, kind, term indices) in the spec's order, market trend last."""
    out = []
    for col in enc.spec.predictors:
        idx = [j for j, t in enumerate(enc.terms) if t.column == col
               and t.kind not in ("location", "trend")]
        kind = enc.terms[idx[0]].kind if idx else "numeric"
        out.append((col, "category" if kind == "level" else kind, idx))
    if enc.spec.date_column:
        idx = [j for j, t in enumerate(enc.terms) if t.kind == "trend"]
        out.append(("market conditions", "market", idx))
    if enc.location is not None:
        idx = [j for j, t in enumerate(enc.terms) if t.kind == "location"]
        out.append(("location", "location", idx))
    return out


def _adjustments_in_money(e_f, total, price, log_response):
    """(feature adjustments, stand-alone adjustments, net) in money per comp.

    Log model: net = P·(e^E − 1) shared in proportion to e_f, i.e.
    adjustment_f = P·e_f·(e^E − 1)/E (→ P·e_f as E → 0), so Σ_f = net exactly.
    """
    if not log_response:
        return e_f, e_f, total
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(total == 0, 1.0, np.expm1(total) / total)
    p = price[:, None]
    money = p * e_f * rel[:, None]
    return money, p * np.expm1(e_f), price * np.expm1(total)


def _feature_frame(name, comps, subj, diff, fit, idx, kind, e, money, alone, price, spec,
                   when, place=None):
    m = len(price)
    rows = comps.data.index.to_numpy(dtype=np.int64)
    b = fit.coef[int(fit.has_intercept):]
    if kind == "market":
        col = spec.date_column
        s_val = np.repeat(pd.Timestamp(when), m).astype(object)
        c_val = comps.data[col].to_numpy(dtype=object)
        raw = diff[:, idx[0]]
        model_diff, coef = raw, b[idx[0]]
        if len(idx) > 1:     # piecewise / periods: months apart, the mean rate over them
            from plumbrule.model.design import DAYS_PER_MONTH
            raw = ((pd.to_datetime(pd.Series(s_val)) - pd.to_datetime(pd.Series(c_val)))
                   .dt.days.to_numpy(dtype=float) / DAYS_PER_MONTH)
            with np.errstate(divide="ignore", invalid="ignore"):
                model_diff, coef = raw, np.where(raw != 0, e / raw, np.nan)
    elif kind == "location":
        # the surface's effect of the subject's place against the comparable's; the
        # difference is the distance between them (coordinate units; km for degrees)
        b = place
        s_val = np.repeat(f"{b[0]:g}, {b[1]:g}", m).astype(object)
        c_val = np.array([f"{a:g}, {c:g}" for a, c in zip(b[2], b[3], strict=True)],
                         dtype=object)
        raw = b[4]
        model_diff = np.full(m, np.nan)
        coef = e
    elif kind == "category":
        s_val = np.repeat(subj.data[name].iloc[0], m).astype(object)
        c_val = comps.data[name].to_numpy(dtype=object)
        raw = model_diff = np.full(m, np.nan)
        coef = e          # the effect of the subject's level against the comparable's
    else:
        s_num = float(subj.data[name].iloc[0])
        c_num = comps.data[name].to_numpy(dtype=float)
        s_val, c_val = np.repeat(s_num, m).astype(object), c_num.astype(object)
        raw = s_num - c_num
        model_diff, coef = diff[:, idx[0]], b[idx[0]]
        if kind == "curve":     # f(subject) − f(comp) on the model's scale: the mean rate
            with np.errstate(divide="ignore", invalid="ignore"):
                model_diff, coef = raw, np.where(raw != 0, e / raw, np.nan)
    return pd.DataFrame({
        "comp_row": rows, "feature": name, "kind": kind, "subject_value": s_val,
        "comp_value": c_val, "difference": raw, "model_difference": model_diff,
        "coefficient": coef, "effect": e, "adjustment": money, "adjustment_alone": alone,
        "adjustment_pct": money / price, "sale_price": price})


def _comp_flags(comps, net_pct, gross_pct, rules: GridRules, when, spec) -> list[str]:
    """Adjustment limits (common practice, no source; settable) and comp notes."""
    out = []
    for i, row in enumerate(comps.data.index):
        notes = []
        if abs(net_pct[i]) > rules.net_limit:
            notes.append(f"net adjustment {100 * net_pct[i]:+.1f}% exceeds "
                         f"{100 * rules.net_limit:g}% of the sale price")
        if gross_pct[i] > rules.gross_limit:
            notes.append(f"gross adjustment {100 * gross_pct[i]:.1f}% exceeds "
                         f"{100 * rules.gross_limit:g}% of the sale price")
        if spec.date_column and comps.data[spec.date_column].iloc[i] > pd.Timestamp(when):
            notes.append("sold after the valuation date")
        if row in comps.notes:
            notes.append(comps.notes[row])
        out.append("; ".join(notes))
    return out


# --- reconciliation ---------------------------------------------------------------

def comp_weights(gross_pct: np.ndarray, how: str) -> np.ndarray:
    """Weights summing to 1: inversely proportional to the gross adjustment
    (as a share of each comparable's price), or equal. Comparables needing no
    adjustment at all (gross = 0) share the whole weight."""
    m = len(gross_pct)
    if how == "equal":
        return np.full(m, 1.0 / m)
    zero = gross_pct == 0
    if zero.any():
        return zero / zero.sum()
    inv = 1.0 / gross_pct
    return inv / inv.sum()


def reconcile(label, rows, adjusted, weights, how, flags, estimates) -> pd.DataFrame:
    """One record: the weighted value of the adjusted prices, their range and spread."""
    value = float(np.dot(weights, adjusted))
    low, high = float(adjusted.min()), float(adjusted.max())
    text = "; ".join(f"row {r}: {w:.3f}" for r, w in zip(rows, weights, strict=False))
    est = pi_lo = pi_hi = np.nan
    notes = []
    n_flag = sum(bool(f) for f in flags)
    if n_flag:
        notes.append(f"{n_flag} of {len(rows)} comparables flagged")
    if estimates is not None and len(estimates):
        est, pi_lo, pi_hi = (float(estimates[c].iloc[0]) for c in ("estimate", "pi_low", "pi_high"))
        if not pi_lo <= value <= pi_hi:
            notes.append("reconciled value lies outside the model's prediction interval")
    return pd.DataFrame([{
        "subject": label, "value": value, "range_low": low, "range_high": high,
        "spread": high - low, "spread_pct": (high - low) / value, "n_comps": len(rows),
        "weighting": "inverse gross adjustment" if how == "gross" else "equal",
        "weights": text, "model_estimate": est, "pi_low": pi_lo, "pi_high": pi_hi,
        "flags": "; ".join(notes)}], columns=RECONCILED_COLUMNS)


def model_location(spec, comps, subj, basis):
    """(subject x, subject y, comps' x, comps' y, distances) for the location row."""
    xc, yc = spec.location_columns
    sx, sy = float(subj.data[xc].iloc[0]), float(subj.data[yc].iloc[0])
    cx, cy = comps.data[xc].to_numpy(float), comps.data[yc].to_numpy(float)
    dist = basis.distance(np.full(len(cx), sx), np.full(len(cy), sy), cx, cy)
    return sx, sy, cx, cy, dist

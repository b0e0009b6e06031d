"""The roll: every parcel of a jurisdiction valued by the model, keyed by parcel ID.

The same estimates and intervals as :func:`plumbrule.valuation.estimates.valuate` (the same
algebra: :func:`working_vectors`, :func:`mean_variance`, :func:`log_mean_variance`), but built
for a million rows: the parcels' cells are typed column by column (a category column through
its distinct values only), one design matrix is formed per block of parcels, and leverage
comes from one triangular solve with the fit's R per block. No per-parcel Python, no
per-parcel pandas objects. Flags are kept as a bit mask per parcel and counted once for the
roll (:func:`flag_summary`), not written as one caution per parcel.

Every parcel is valued at the valuation date (a roll values the parcels as of one date), so
the roll's own date column, if it has one, is not read.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import Callable, Iterable, Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError, SpecError

ROLL_COLUMNS = ["parcel_id", "row", "estimate", "ci_low", "ci_high", "pi_low", "pi_high",
                "se_mean", "se_single", "leverage", "flags"]
FLAG_COLUMNS = ["flag", "feature", "side", "limit", "parcels", "share", "note"]
SUMMARY_COLUMNS = ["parcels", "flagged", "valuation_date", "confidence", "estimate_kind",
                   "retransform", "retransform_factor", "sales_used", "response"]

# A sheet holds 1,048,576 rows (Excel's limit, also LibreOffice's since 7.4).
SHEET_ROWS = 1_048_576
BLOCK = 1 << 16          # parcels per block: the temporaries stay small (a few MB)


@dataclass(frozen=True)
class ParcelBlock:
    """Parcels typed for the model. ``ids`` (text), ``rows`` (sheet rows), ``x`` the design
    (m × k, user units, no constant), ``numeric`` each numeric predictor's values (user
    units, before any log), ``codes`` each categorical predictor's level index (the
    encoding's order, reference first)."""

    ids: np.ndarray
    rows: np.ndarray
    x: np.ndarray
    numeric: dict
    codes: dict


@dataclass(frozen=True)
class Roll:
    """The valued roll: ``values`` one row per parcel (ROLL_COLUMNS; money in the sale-price
    column's units, leverage unitless), ``flags`` the flags counted once for the roll
    (FLAG_COLUMNS), ``summary`` one row (SUMMARY_COLUMNS), ``total`` the roll's total with its
    honest interval (valuation/portfolio.py; empty for one parcel)."""

    values: pd.DataFrame
    flags: pd.DataFrame
    summary: pd.DataFrame
    total: pd.DataFrame


# --- typing the parcels ---------------------------------------------------------

def roll_id_column(settings, columns: Sequence[str]) -> str:
    """The roll's parcel-ID header: the setting roll_id_column, else id_column."""
    from plumbrule.errors import SettingError
    from plumbrule.model.spec import match_column
    name = settings.roll_id_column or settings.id_column
    if not name:
        raise SettingError("Setting 'roll_id_column': the roll needs the column holding each "
                           "parcel's ID. Set roll_id_column (or id_column) to its header.",
                           setting="roll_id_column")
    return match_column(name, columns, "roll_id_column" if settings.roll_id_column
                        else "id_column")


def parcel_block(model, frame: pd.DataFrame, id_column: str, first_row: int,
                 first_column: int = 1) -> ParcelBlock:
    """Type ``frame`` (one column per header; cells as read, numbers may already be floats)
    for the model. Its row i is sheet row ``first_row + i``; ``first_column`` is the sheet
    column (A = 1) of its first column, so a message can name the cell. A blank or unreadable
    cell, or a category level the sales do not have, is an error naming the cell (a parcel
    cannot be dropped from a roll)."""
    from plumbrule.model.design import _find
    enc = model.encoding
    spec = enc.spec
    m = len(frame)
    rows = np.arange(first_row, first_row + m, dtype=np.int64)
    frame = frame.set_axis(pd.RangeIndex(first_row, first_row + m), axis=0)
    letters = _letters(frame.columns, first_column)
    ids = parcel_ids(frame[id_column], id_column, letters[id_column])
    numeric: dict[str, np.ndarray] = {}
    codes: dict[str, np.ndarray] = {}
    levels = dict(enc.levels)
    for c in enc.input_columns:
        if c == spec.date_column:
            continue
        src = _find(c, frame.columns)
        if src is None:
            raise SpecError(f"The roll has no column '{c}'; the model needs it for every "
                            "parcel. Add the column (same header as in the sales).", column=c)
        if c in levels:
            codes[c] = _level_codes(frame[src], c, levels[c], spec, letters[src], ids)
        else:
            numeric[c] = _numbers(frame[src], c, letters[src], ids,
                                  positive=c in spec.log_predictors)
    x = np.empty((m, len(enc.terms)), order="F")     # filled column by column
    trend = [j for j, t in enumerate(enc.terms) if t.kind == "trend"]
    for j, t in enumerate(enc.terms):
        if t.kind == "numeric":
            x[:, j] = numeric[t.column]
        elif t.kind == "log":
            np.log(numeric[t.column], out=x[:, j])
        elif t.kind == "level":
            x[:, j] = codes[t.column] == levels[t.column].index(t.level)
    if trend:
        x[:, trend] = 0.0     # set by value_block at the valuation date
    return ParcelBlock(ids=ids, rows=rows, x=x, numeric=numeric, codes=codes)


def parcel_ids(cells: pd.Series, column: str, letter: str) -> np.ndarray:
    """Parcel IDs as text (104.0 → '104', text trimmed), indexed like ``cells`` (sheet rows).
    A blank ID, or one repeated within these rows, is an error naming the cell.

    Text IDs go through one fixed-width numpy array (trim, and the repeat check by sorting):
    a million Python strings hashed or trimmed one by one cost seconds."""
    kind = pd.api.types.infer_dtype(cells, skipna=False)
    rows = cells.index.to_numpy(dtype=np.int64)
    if kind == "string" and len(cells):
        raw = cells.to_numpy(dtype=object).astype(str)
        fixed = np.strings.strip(raw) if raw.dtype.itemsize <= 4 * 64 else None
    else:
        fixed = None
    if fixed is not None:
        blank = fixed == ""
        # the cells' own strings when trimming changed none (no million new objects)
        ids = cells.to_numpy(dtype=object) if (fixed == raw).all() else fixed.astype(object)
    elif kind == "integer":
        ids = cells.to_numpy(dtype=np.int64).astype(str).astype(object)
        blank = np.zeros(len(ids), dtype=bool)
    else:                           # mixed cells: the sheet rules, one cell at a time
        from plumbrule.intake import to_labels
        labels, why = to_labels(cells, column)
        blank = why.notna().to_numpy()
        ids = labels.fillna("").to_numpy(dtype=object)
    if blank.any():
        row = int(rows[int(np.argmax(blank))])
        more = int(blank.sum()) - 1
        extra = f" ({more} more parcels have no ID)" if more else ""
        raise IntakeError(f"Roll, cell {letter}{row} (column '{column}', the parcel ID) is "
                          f"blank{extra}. Give every parcel its ID.", column=column, row=row)
    check_unique_ids(fixed if fixed is not None else ids.astype(str), rows, column, letter)
    return ids


def check_unique_ids(ids: np.ndarray, rows: np.ndarray, column: str, letter: str) -> None:
    """A parcel ID on two rows (``ids`` text, ``rows`` their sheet rows) is an error naming
    both cells."""
    order = np.argsort(ids, kind="stable")
    ranked = ids[order]
    same = ranked[1:] == ranked[:-1]
    if not same.any():
        return
    k = int(np.argmax(same))
    first, second = sorted((int(rows[order[k]]), int(rows[order[k + 1]])))
    repeated = np.unique(ranked[1:][same])
    more = len(repeated) - 1
    extra = f" ({more} more IDs are repeated)" if more else ""
    raise IntakeError(f"Roll, cells {letter}{first} and {letter}{second} (column '{column}'): "
                      f"parcel ID '{ranked[k]}' is on both{extra}. Each parcel needs its own "
                      "ID: correct it, or delete the repeated row.", column=column, row=first)


def _letters(columns, first_column: int) -> dict[str, str]:
    from plumbrule.intake.table import column_letter
    return {c: column_letter(first_column + j) for j, c in enumerate(columns)}


def _numbers(cells: pd.Series, name: str, letter: str, ids: np.ndarray,
             positive: bool) -> np.ndarray:
    """A numeric column by the sheet rules (:func:`plumbrule.intake.to_numbers`: fast for a
    column already read as numbers); a blank or unreadable cell names the cell."""
    from plumbrule.intake import to_numbers
    try:
        values, reasons = to_numbers(cells, name)
    except IntakeError as err:
        raise IntakeError(f"Roll: {err}", column=name, row=err.row) from None
    v = values.to_numpy(dtype=float)
    missing = ~np.isfinite(v)
    if missing.any():
        i = int(np.argmax(missing))
        row = int(cells.index[i])
        what = reasons.iloc[i]
        what = "is blank" if what == "blank" or not isinstance(what, str) else f"holds an {what}"
        more = int(missing.sum()) - 1
        extra = f" ({more} more cells of the column are missing)" if more else ""
        raise IntakeError(f"Roll, cell {letter}{row} (column '{name}', parcel '{ids[i]}') "
                          f"{what}{extra}. Fill it in: the model needs it to value the parcel.",
                          column=name, row=row)
    if positive and not (v > 0).all():
        i = int(np.argmax(~(v > 0)))
        row = int(cells.index[i])
        raise SpecError(f"Roll, cell {letter}{row} (column '{name}', parcel '{ids[i]}'): the "
                        f"logarithm needs a positive value, found {v[i]:g}. Correct the cell or "
                        f"take '{name}' out of 'log_predictors'.", column=name, row=row,
                        setting="log_predictors")
    return v


def _level_codes(cells: pd.Series, name: str, known: tuple[str, ...], spec, letter: str,
                 ids: np.ndarray) -> np.ndarray:
    """Level index (into ``known``) per parcel: the cells' distinct values are typed and
    matched to the sales' spelling (:func:`canonical_levels`) once each."""
    from plumbrule.intake import to_labels
    from plumbrule.intake.levels import canonical_levels
    codes, uniques = pd.factorize(cells, use_na_sentinel=True)
    labels, why = to_labels(pd.Series(uniques, dtype=object), name)
    pairs = [(a, b) for c, a, b in spec.level_map if c == name]
    labels = canonical_levels(labels, known, pairs)
    missing_u = why.notna().to_numpy()
    index = np.where(missing_u, -1, pd.Index(known).get_indexer(labels))
    safe = np.maximum(codes, 0)
    blank = (codes < 0) | missing_u[safe]
    if blank.any():
        i = int(np.argmax(blank))
        row = int(cells.index[i])
        raise IntakeError(f"Roll, cell {letter}{row} (column '{name}', parcel '{ids[i]}') is "
                          "blank. Fill it in: the model needs it to value the parcel.",
                          column=name, row=row)
    unseen = index[safe] < 0
    if unseen.any():
        from plumbrule.model.design import _check_levels
        i = int(np.argmax(unseen))
        row = int(cells.index[i])
        bad = pd.Series([labels.iloc[codes[i]]], index=[row], dtype=object)
        names = pd.Series([str(ids[i])], index=[row], dtype=object)
        _check_levels(bad, known, name, "parcel row", names)
    return index[codes].astype(np.int64)


# --- valuing ------------------------------------------------------------------------

@dataclass(frozen=True)
class FlagPlan:
    """The bits of a parcel's flag mask: per numeric predictor 'below' and 'above' the sales'
    range, per categorical predictor 'level with one sale', and 'leverage beyond the sales'."""

    names: tuple[tuple[str, str, str, float], ...]     # (flag, feature, side, limit) per bit

    @classmethod
    def of(cls, model) -> "FlagPlan":
        spec, sales = model.spec, model.data
        out: list[tuple[str, str, str, float]] = []
        for col in spec.numeric_predictors:
            out.append(("out of range", col, "below", float(sales[col].min())))
            out.append(("out of range", col, "above", float(sales[col].max())))
        for col in spec.categorical:
            out.append(("one-sale level", col, "", np.nan))
        out.append(("leverage", "combination of features", "above",
                    float(model.fit.leverage_limit)))
        return cls(tuple(out))


def value_block(model, block: ParcelBlock, confidence: float, retransform: str,
                when: _dt.date) -> tuple[pd.DataFrame, np.ndarray]:
    """Estimates, intervals and flags for the parcels of ``block`` at ``confidence``, valued
    at ``when``; returns (table with ROLL_COLUMNS, flag mask per parcel as uint64)."""
    enc = model.encoding
    x = block.x
    trend = [j for j, t in enumerate(enc.terms) if t.kind == "trend"]
    if trend:
        x[:, trend] = enc.trend_columns(pd.Series([pd.Timestamp(when)]))[0]
    m = len(x)
    q = model.t_quantile(confidence)
    keys = ("estimate", "ci_low", "ci_high", "pi_low", "pi_high", "se_mean", "se_single",
            "leverage", "shared")
    cols = {k: np.empty(m) for k in keys}
    algebra = _classical if _classical_applies(model) else _general
    for a in range(0, m, BLOCK):
        part = slice(a, min(a + BLOCK, m))
        got = algebra(model, x[part], q, retransform)
        _check_finite_price(model, got.pop("upper"), block, a)
        for k in keys:
            cols[k][part] = got[k]
    shared = cols.pop("shared")
    mask = flag_mask(model, block, shared)
    table = pd.DataFrame({"parcel_id": pd.Series(block.ids, dtype=object), "row": block.rows,
                          **cols,
                          "flags": flag_text(mask, FlagPlan.of(model))}, copy=False)
    return table[ROLL_COLUMNS], mask


def _classical_applies(model) -> bool:
    """The fused algebra of :func:`_classical` holds for classical standard errors with an
    intercept and no sale that alone fixes a direction; anything else takes the subject
    path's functions block by block (:func:`_general`)."""
    fit = model.fit
    return not model.robust_se and fit.has_intercept and not len(fit.alone_directions())


def _general(model, x: np.ndarray, q: float, retransform: str) -> dict:
    """The subject path's algebra (valuation/estimates.py) on one block of parcels."""
    from plumbrule.valuation.estimates import (
        _log_scale,
        _shared_leverage,
        log_mean_variance,
        mean_variance,
        working_vectors,
    )
    fit = model.fit
    v = working_vectors(fit, x)
    eta = model.predict(x)
    var_mean = mean_variance(model, v)
    se_m = np.sqrt(var_mean)
    se_s = np.sqrt(var_mean + fit.sigma ** 2)
    out = dict(leverage=np.einsum("ij,ij->i", v, v), shared=_shared_leverage(fit, v),
               upper=eta + q * se_s)
    if model.spec.log_response:
        se_ci = np.sqrt(log_mean_variance(model, v, retransform))
        out.update(_log_scale(model, eta, se_ci, se_s, q, retransform))
    else:
        out.update(estimate=eta, se_mean=se_m, se_single=se_s, ci_low=eta - q * se_m,
                   ci_high=eta + q * se_m, pi_low=eta - q * se_s, pi_high=eta + q * se_s)
    return out


def _classical(model, x: np.ndarray, q: float, retransform: str) -> dict:
    """:func:`_general` with the same formulas fused for the common case (classical
    standard errors, an intercept): one triangular solve, the leverage formed once and every
    variance read from it. With w = R⁻ᵀz (z the centred, scaled row) the working vector is
    v = [1/√n, w], so ‖v‖² = 1/n + ‖w‖², and for the smearing factor's error
    ‖v − ṽ‖² = ‖w − w̃‖² (the 1/√n parts cancel) with Σc = 0 (the centred columns of Q sum
    to 0): the terms of :func:`log_mean_variance`, no m × p temporary beyond w."""
    from scipy.linalg import solve_triangular
    fit = model.fit
    d = x - fit.x_means
    w = solve_triangular(fit.r, (d / fit.x_norms).T, trans="T", check_finite=False)
    lev_w = np.einsum("ij,ij->j", w, w)
    lev = lev_w + 1.0 / fit.n
    b = fit.coef[1:]
    eta = d @ b
    eta += fit.coef[0] + fit.x_means @ b
    s2 = fit.sigma ** 2
    se_m = np.sqrt(s2 * lev)
    se_s = np.sqrt(s2 * lev + s2)
    out = dict(leverage=lev, shared=lev, upper=eta + q * se_s)
    if not model.spec.log_response:
        out.update(estimate=eta, se_mean=se_m, se_single=se_s, ci_low=eta - q * se_m,
                   ci_high=eta + q * se_m, pi_low=eta - q * se_s, pi_high=eta + q * se_s)
        return out
    var = s2 * lev
    if retransform == "lognormal":
        var = var + fit.sigma ** 4 / (2.0 * fit.df_resid)
    elif retransform == "smearing":
        w_t, const = _smearing_parts(model)
        var = s2 * (lev_w - 2.0 * (w_t @ w) + float(w_t @ w_t)) + const
    se_ci = np.sqrt(np.maximum(var, 0.0))
    factor = model.retransform_factor(retransform)
    median = np.exp(eta)
    est = factor * median
    up_ci, up_pi = np.exp(q * se_ci), np.exp(q * se_s)
    out.update(estimate=est, se_mean=est * se_ci, se_single=est * se_s,
               ci_low=est / up_ci, ci_high=est * up_ci, pi_low=median / up_pi,
               pi_high=median * up_pi)
    return out


def _smearing_parts(model) -> tuple[np.ndarray, float]:
    """w̃ = R⁻ᵀz̃ for the exp(e)-weighted mean row x̃ of the sales, and the constant
    Σd²/df/n of :func:`log_mean_variance` (classical, with an intercept)."""
    from plumbrule.valuation.estimates import working_vectors
    fit = model.fit
    e = fit.resid
    ex = np.exp(e)
    dd = ex / ex.mean() - 1.0
    x_tilde = (ex @ model.x) / ex.sum()
    w_t = working_vectors(fit, x_tilde)[0, 1:]
    return w_t, float(dd @ dd) / fit.df_resid / fit.n


def _check_finite_price(model, upper: np.ndarray, block: ParcelBlock, offset: int) -> None:
    from plumbrule.valuation.estimates import _LOG_PRICE_LIMIT
    limit = _LOG_PRICE_LIMIT if model.spec.log_response else 1e300
    bad = ~(np.abs(upper) < limit)
    if bad.any():
        i = offset + int(np.argmax(bad))
        raise SpecError(f"Roll, parcel '{block.ids[i]}' (row {block.rows[i]}): the model gives "
                        "it no finite price (its values lie far outside those of the sales). "
                        "Check its cells against the sales'.", row=int(block.rows[i]))


def flag_mask(model, block: ParcelBlock, shared_leverage: np.ndarray) -> np.ndarray:
    """One uint64 per parcel, bit b set when flag b of :class:`FlagPlan` applies: the same
    checks as the subject path (:func:`subject_flags`), as whole-column comparisons."""
    plan = FlagPlan.of(model)
    mask = np.zeros(len(block.rows), dtype=np.uint64)
    counts = model.data
    for b, (flag, feature, side, limit) in enumerate(plan.names):
        if flag == "out of range":
            vals = block.numeric[feature]
            hit = vals < limit if side == "below" else vals > limit
        elif flag == "one-sale level":
            known = dict(model.encoding.levels)[feature]
            per_level = counts[feature].value_counts().reindex(list(known)).fillna(0)
            hit = per_level.to_numpy()[block.codes[feature]] == 1
        else:
            hit = shared_leverage > limit
        mask |= hit.astype(np.uint64) << np.uint64(b)
    return mask


def flag_text(mask: np.ndarray, plan: FlagPlan) -> pd.Categorical:
    """Each parcel's flags in words ('' when none), built once per distinct mask."""
    inverse, uniq = pd.factorize(mask)
    words = []
    for u in uniq:
        parts = []
        for b, (flag, feature, side, _limit) in enumerate(plan.names):
            if not int(u) >> b & 1:
                continue
            if flag == "out of range":
                parts.append(f"{feature} {side} the sales' range")
            elif flag == "one-sale level":
                parts.append(f"{feature} level has one sale")
            else:
                parts.append("leverage beyond the sales (combination of features)")
        words.append("; ".join(parts))
    # distinct masks give distinct words, so the words are the categories as they are
    return pd.Categorical.from_codes(inverse, categories=words)


def flag_counts(mask: np.ndarray, plan: FlagPlan) -> np.ndarray:
    """Parcels per flag bit (int64), plus the count of parcels with any flag last."""
    inverse, uniq = pd.factorize(mask)
    per_mask = np.bincount(inverse, minlength=len(uniq))
    bits = (uniq[:, None] >> np.arange(len(plan.names), dtype=np.uint64)) & np.uint64(1)
    counts = per_mask @ bits.astype(np.int64)
    return np.append(counts, int(per_mask[uniq != 0].sum()))


def flag_summary(model, plan: FlagPlan, counts: np.ndarray, n: int,
                 when: _dt.date) -> pd.DataFrame:
    """The roll's flags counted once: one row per flag that applies to at least one parcel
    (FLAG_COLUMNS; ``limit`` in the feature's units, ``share`` of all parcels), and a row for
    the valuation date when it lies outside the sales' dates (it applies to every parcel)."""
    rows = []
    for (flag, feature, side, limit), k in zip(plan.names, counts[:-1], strict=True):
        if not k:
            continue
        if flag == "out of range":
            edge = "smallest" if side == "below" else "largest"
            note = (f"{_parcels(k, 'have')} {feature} {side} the {edge} in the sales used "
                    f"({limit:,.6g}): their values are extrapolated")
        elif flag == "one-sale level":
            note = (f"{_parcels(k, 'are')} in a {feature} level with one sale: their values "
                    "rest on that sale alone")
        else:
            note = (f"{_parcels(k, 'have')} leverage above the largest among the sales used "
                    f"({limit:.4g}): the sales do not cover their combination of features")
        rows.append(dict(flag=flag, feature=feature, side=side, limit=limit, parcels=int(k),
                         share=int(k) / n, note=note))
    spec = model.spec
    if spec.date_column:
        from plumbrule.valuation.estimates import _date_note
        sales = model.data[spec.date_column]
        note = _date_note(pd.Timestamp(when), sales.min(), sales.max())
        if note:
            rows.append(dict(flag="valuation date", feature=spec.date_column,
                             side="after" if pd.Timestamp(when) > sales.max() else "before",
                             limit=np.nan, parcels=n, share=1.0,
                             note=f"every parcel: {note}"))
    return pd.DataFrame(rows, columns=FLAG_COLUMNS)


def _parcels(k, verb: str) -> str:
    """'1 parcel has', '2,000 parcels have'."""
    one = {"have": "has", "are": "is"}[verb]
    return f"1 parcel {one}" if int(k) == 1 else f"{int(k):,} parcels {verb}"


def roll_summary(model, n: int, flagged: int, when: _dt.date, confidence: float,
                 retransform: str) -> pd.DataFrame:
    """One row: how many parcels, how many flagged, and what the estimates are."""
    from plumbrule.valuation.estimates import _KIND
    log = model.spec.log_response
    return pd.DataFrame([dict(
        parcels=n, flagged=flagged, valuation_date=pd.Timestamp(when), confidence=confidence,
        estimate_kind=_KIND[retransform] if log else "mean",
        retransform=retransform if log else "none",
        retransform_factor=model.retransform_factor(retransform) if log else np.nan,
        sales_used=model.fit.n, response=model.encoding.response_name)],
        columns=SUMMARY_COLUMNS)


def value_roll(analysis, frame: pd.DataFrame, settings=None, first_row: int = 2,
               first_column: int = 1, limit: int | None = SHEET_ROWS - 1) -> Roll:
    """Value every parcel of ``frame`` (one column per header, cells as read; row i is sheet
    row ``first_row + i``) with ``analysis.final_model`` at the settings' valuation date. ``limit``
    bounds the parcels held at once (a sheet's rows less its header): past it the message
    says to stream the roll to a file with the command line. Returns a frozen :class:`Roll`."""
    n = len(frame)
    if limit is not None and n > limit:
        raise IntakeError(f"The roll has {n:,} parcels; a sheet holds {SHEET_ROWS:,} rows. "
                          "Value it from a file instead: plumbrule value SALES --roll ROLL.csv "
                          "--out VALUES.csv (written in chunks).")
    parts: list[pd.DataFrame] = []
    roll = stream_roll(analysis, [(frame, first_row, first_column)], parts.append, settings)
    values = parts[0] if len(parts) == 1 else pd.concat(parts, ignore_index=True)
    return Roll(values=values, flags=roll.flags, summary=roll.summary, total=roll.total)


def stream_roll(analysis, chunks: Iterable[tuple[pd.DataFrame, int, int]],
                write: Callable[[pd.DataFrame], None], settings=None) -> Roll:
    """Value a roll block by block: ``chunks`` yields (frame, sheet row of its first row,
    sheet column of its first column); each block's table (ROLL_COLUMNS) goes to ``write``
    as soon as it is valued, so no more than one block is held. A parcel ID repeated across
    blocks is found at the end (the caller discards what it wrote). Returns the
    :class:`Roll` with ``values`` empty (the columns only) and the flags, summary and total
    of every parcel."""
    from plumbrule.valuation.portfolio import add_sums, portfolio_sums, total_from_sums
    settings = settings or analysis.settings
    model = analysis.final_model     # the model that values (final_fit)
    when = settings.valuation_date or _dt.date.today()
    plan = FlagPlan.of(model)
    counts = np.zeros(len(plan.names) + 1, dtype=np.int64)
    sums = None
    seen: list[tuple[np.ndarray, np.ndarray]] = []
    ident, letter = None, ""
    for frame, first_row, first_column in chunks:
        if not len(frame):
            continue
        if ident is None:
            ident = roll_id_column(settings, list(frame.columns))
            letter = _letters(frame.columns, first_column)[ident]
        block = parcel_block(model, frame, ident, first_row, first_column)
        table, mask = value_block(model, block, settings.confidence, settings.retransform,
                                  when)
        counts += flag_counts(mask, plan)
        sums = add_sums(sums, portfolio_sums(model, block.x, table, settings.retransform))
        seen.append((block.ids, block.rows))
        write(table)
    if sums is None:
        raise IntakeError("The roll has no parcels under its header. Enter one row per parcel.")
    if len(seen) > 1:
        check_unique_ids(np.concatenate([i for i, _ in seen]).astype(str),
                         np.concatenate([r for _, r in seen]), ident or "", letter)
    n = int(sums["m"])
    return Roll(values=pd.DataFrame(columns=ROLL_COLUMNS),
                flags=flag_summary(model, plan, counts, n, when),
                summary=roll_summary(model, n, int(counts[-1]), when, settings.confidence,
                                     settings.retransform),
                total=total_from_sums(model, sums, settings.confidence, settings.retransform))

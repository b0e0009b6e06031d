"""Candidate models compared on the same evidence.

:func:`compare` judges each candidate (the base settings with some model settings changed)
on one set of sales, one holdout and one set of folds, and returns :class:`Comparison`:
one row per candidate (``table``, sorted by the criterion ``compare_by``), the chosen one,
the one the results follow (``use_model``) and the reason in words.

What "the same sales" means here: the sales are read and typed once with the columns of
every candidate (a row missing a value any candidate needs is left out for all), then split
and screened once with the reference model — the candidate named in ``use_model``, else the
base settings' model — so every candidate is fitted on the same training sales and judged on
the same holdout sales and folds. Holdout and fold membership come from each sale's own key
(its ID with an ID column, else its values in all candidates' columns), so they do not depend
on which candidate is being judged. A holdout sale whose category level a candidate never
saw in training moves to that candidate's training rows, as in a single analysis.

A candidate row's figures equal those of a single analysis with that candidate's settings on
those sales, without further screening (tests/test_compare.py holds that to 1e-9).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import FitError, SettingError, SpecError
from plumbrule.settings import REGISTRY, Settings, normalise_name, parse_settings
from plumbrule.verdicts import FAILS, NA, OK, TOO_FEW, WATCH

BASE_NAME = "base"
# Settings a candidate may change: the model's own (not the response column, which would make
# every figure incomparable, and not how sales are read, screened or validated, which must be
# the same for every candidate to make the comparison fair).
NOT_PER_MODEL = ("response",)

COMPARISON_COLUMNS = [
    "rank", "name", "chosen", "used", "changes", "response", "n", "n_holdout", "n_params",
    "adj_r_squared", "adj_r_squared_scale", "aic", "bic", "cv_mape", "cv_rmse",
    "holdout_mape", "holdout_rmse", "ratio_sample", "median_ratio", "cod", "prd", "prb",
    "vertical_equity", "max_vif", "checks_watch", "checks_fail", "note",
]

# compare_by → (column, smaller is better, words)
CRITERIA: dict[str, tuple[str, bool, str]] = {
    "mape": ("oos_mape", True, "out-of-sample MAPE"),
    "rmse": ("oos_rmse", True, "out-of-sample RMSE"),
    "cv_mape": ("cv_mape", True, "cross-validated MAPE"),
    "cv_rmse": ("cv_rmse", True, "cross-validated RMSE"),
    "holdout_mape": ("holdout_mape", True, "holdout MAPE"),
    "holdout_rmse": ("holdout_rmse", True, "holdout RMSE"),
    "adj_r_squared": ("adj_r_squared", False, "adjusted R² (price scale)"),
    "aic": ("aic", True, "AIC"),
    "bic": ("bic", True, "BIC"),
    "cod": ("cod", True, "COD"),
}


@dataclass(frozen=True)
class Candidate:
    """One candidate model: its ``name``, the raw setting values it changes (setting name →
    value) and where it was written (for messages), e.g. "Models sheet, row 3"."""

    name: str
    changes: Mapping[str, Any]
    where: str = ""
    cells: Mapping[str, str] | None = None     # setting name → cell address, for messages


@dataclass(frozen=True)
class Comparison:
    """``table``: COMPARISON_COLUMNS, one row per candidate, best first by ``criterion``;
    ``chosen``: the best candidate's name; ``used``: the candidate the results follow;
    ``reason``: why, in words; ``settings``: each candidate's full settings by name;
    ``reference``: the candidate whose screening every candidate shares."""

    table: pd.DataFrame
    chosen: str
    used: str
    reason: str
    criterion: str
    settings: Mapping[str, Settings]
    reference: str
    rows: tuple[int, ...] = ()                 # sheet rows of the shared sales (train + holdout)
    screen_log: pd.DataFrame | None = None     # the shared screening's log


# --- reading candidates ---------------------------------------------------------------

def model_settings() -> tuple[str, ...]:
    """The settings a candidate may change (the registry's model group, less the response)."""
    return tuple(s.name for s in REGISTRY.values()
                 if s.group == "model" and s.name not in NOT_PER_MODEL)


def column_letter(j: int) -> str:
    """1 → A, 27 → AA."""
    out = ""
    while j > 0:
        j, r = divmod(j - 1, 26)
        out = chr(65 + r) + out
    return out


def candidates_from_rows(rows: Sequence[Sequence[Any]], where: str = "Models sheet",
                         first_row: int = 1, first_col: int = 1) -> tuple[Candidate, ...]:
    """A block of cells, header first (``Model`` or ``Name``, then setting names), → the
    candidates. ``first_row``/``first_col`` are the sheet row and column of the header's first
    cell, so messages name the cell. Blank rows are skipped; a blank cell means "as in the
    Settings". Raises :class:`SettingError` naming the cell for a header that is not a model
    setting, a value without a name, a name given twice, or a value the setting cannot take."""
    from plumbrule.cell_values import error_text, is_blank
    rows = [list(r) if r is not None else [] for r in rows]
    while rows and all(is_blank(v) for v in rows[0]):
        rows, first_row = rows[1:], first_row + 1
    if not rows:
        return ()

    def cell(i: int, j: int) -> str:
        return f"{where}, cell {column_letter(first_col + j)}{first_row + i}"

    header = rows[0]
    allowed = model_settings()
    names: dict[int, str] = {}
    for j, head in enumerate(header[1:], start=1):
        if is_blank(head):
            continue
        key = normalise_name(head)
        if key not in REGISTRY:
            import difflib
            close = difflib.get_close_matches(key, allowed, n=1)
            hint = f" Did you mean '{close[0]}'?" if close else ""
            raise SettingError(f"{cell(0, j)}: '{head}' is not a setting plumbrule knows.{hint} "
                               "Head each column with a model setting's name.")
        if key not in allowed:
            raise SettingError(f"{cell(0, j)}: '{head}' cannot differ between candidates "
                               "(every candidate shares the Settings' response, screening and "
                               f"validation). Model settings: {', '.join(allowed)}.",
                               setting=key)
        if key in names.values():
            raise SettingError(f"{cell(0, j)}: the column '{head}' appears twice. Keep one.",
                               setting=key)
        names[j] = key
    out: list[Candidate] = []
    seen: dict[str, int] = {}
    for i, row in enumerate(rows[1:], start=1):
        name = row[0] if row else None
        values = {j: row[j] for j in names if j < len(row) and not is_blank(row[j])}
        for j in range(1, len(row)):
            if error_text(row[j]):
                raise SettingError(f"{cell(i, j)}: the cell holds the error value "
                                   f"{error_text(row[j])}. Enter a value or leave it blank.")
            if j not in names and not is_blank(row[j]):
                raise SettingError(f"{cell(i, j)}: the value '{row[j]}' has no setting name "
                                   "above it. Head its column with a model setting's name.")
        if is_blank(name):
            if values:
                raise SettingError(f"{cell(i, 0)}: this candidate has settings but no name. "
                                   "Give it a short name (e.g. curved age).")
            continue
        if error_text(name):
            raise SettingError(f"{cell(i, 0)}: the name cell holds the error value "
                               f"{error_text(name)}. Enter the candidate's name.")
        label = " ".join(str(name).split())
        if isinstance(name, float) and name.is_integer():
            label = str(int(name))
        if label.casefold() in seen:
            raise SettingError(f"{cell(i, 0)}: the name '{label}' is already used on row "
                               f"{seen[label.casefold()]}. Give each candidate its own name.")
        seen[label.casefold()] = first_row + i
        changes = {names[j]: v for j, v in values.items()}
        cells = {names[j]: cell(i, j) for j in values}
        for key, value in changes.items():   # each value checked here, so the cell is named
            try:
                parse_settings({key: value})
            except SettingError as err:
                raise SettingError(f"{cells[key]}: {err}", setting=key) from None
        out.append(Candidate(label, changes, f"{where}, row {first_row + i}", cells))
    return tuple(out)


def candidates_from_table(table, where: str) -> tuple[Candidate, ...]:
    """A :class:`plumbrule.intake.SheetTable` read from a CSV/xlsx file (index: sheet rows)."""
    frame = table.frame
    width = frame.shape[1]
    last = int(frame.index.max()) if len(frame) else table.header_row
    rows: list[list[Any]] = [[None] * width for _ in range(last - table.header_row + 1)]
    rows[0] = list(frame.columns)
    for r, values in zip(frame.index, frame.itertuples(index=False, name=None), strict=True):
        rows[int(r) - table.header_row] = list(values)
    return candidates_from_rows(rows, where=where, first_row=table.header_row,
                                first_col=table.first_column)


# --- the comparison ---------------------------------------------------------------------------

def candidate_settings(base: Settings, candidates: Sequence[Candidate]
                       ) -> dict[str, Settings]:
    """Each candidate's full settings by name, the base first (named ``base`` unless a
    candidate changes nothing: that candidate is the base under its own name)."""
    out: dict[str, Settings] = {}
    plain = [c for c in candidates if not c.changes]
    if len(plain) > 1:
        raise SettingError(f"{plain[1].where}: candidate '{plain[1].name}' changes no setting, "
                           f"like '{plain[0].name}': both are the Settings' model. Keep one.")
    if not plain:
        if any(c.name.casefold() == BASE_NAME for c in candidates):
            bad = next(c for c in candidates if c.name.casefold() == BASE_NAME)
            raise SettingError(f"{bad.where}: the name '{bad.name}' is kept for the Settings' "
                               "own model. Give this candidate another name.")
        out[BASE_NAME] = base
    for c in candidates:
        given = {k: v for k, v in c.changes.items() if not _is_none(k, v)}
        try:
            typed = parse_settings(given)
        except SettingError as err:
            raise SettingError(f"{c.where}: {err}", setting=err.setting) from None
        changed = {k: getattr(typed, k) if k in given else REGISTRY[k].default
                   for k in c.changes}
        if "predictors" in changed:
            # roles inherited from the Settings follow the candidate's own predictors: a
            # column list keeps its predictors, a list of (column, ...) entries (reference
            # levels, curves, any such model setting) the entries of its predictors
            keep = {normalise_name(p) for p in changed["predictors"]}
            for k in model_settings():
                value = getattr(base, k, None)
                if k in changed or not isinstance(value, tuple) or not value:
                    continue
                if REGISTRY[k].kind == "columns":
                    changed[k] = tuple(p for p in value if normalise_name(p) in keep)
                elif all(isinstance(e, tuple) and e and isinstance(e[0], str) for e in value):
                    changed[k] = tuple(e for e in value if normalise_name(e[0]) in keep)
        if "categorical" in changed and "reference_levels" not in changed:
            cats = {normalise_name(p) for p in changed["categorical"]}
            changed["reference_levels"] = tuple(pair for pair in base.reference_levels
                                                if normalise_name(pair[0]) in cats)
        out[c.name] = base.replace(**changed)
    return out


NONE_WORDS = {"none", "(none)", "-"}


def _is_none(key: str, value: Any) -> bool:
    """'none' in a Models cell clears a list setting (blank means: as in the Settings)."""
    return (REGISTRY[key].kind in ("columns", "pairs", "knots", "rows")
            and isinstance(value, str) and value.strip().casefold() in NONE_WORDS)


def compare(source: Any, settings: Settings | Mapping[str, Any] | None = None,
            candidates: Sequence[Candidate] = (), **kw) -> Comparison:
    """Judge every candidate on the same sales, holdout and folds (see the module docstring).

    ``source``: sales as :func:`plumbrule.analysis.analyze` takes them; ``settings``: the
    base settings (including ``compare_by`` and ``use_model``); ``candidates``: the models to
    try. Figures: MAPE in percent, RMSE in the price's currency, on the price scale for every
    model; AIC and BIC on the model's own scale (log price for a log model)."""
    from plumbrule import analysis as an
    from plumbrule.model.spec import build_spec
    from plumbrule.sales import prepare_sales
    base = an.coerce_settings(settings, **kw)
    table = an.as_table(source, base.header_row)
    by_name = candidate_settings(base, candidates)
    where = {c.name: c for c in candidates}
    reference = reference_name(base, by_name)
    specs = {}
    for name, cset in by_name.items():
        try:
            specs[name] = build_spec(cset, table.columns)
        except SpecError as err:
            raise _at(err, where.get(name), name) from None
    union = _union_settings(by_name[reference], specs, where)
    sales = prepare_sales(table, union)
    ref_spec = specs[reference]
    train, hold, fit_log, _looked, _moved = an._screen_and_split(sales, by_name[reference],
                                                               spec=ref_spec)
    records = []
    for name, cset in by_name.items():
        try:
            rec = judge(sales, cset, specs[name], train, hold)
        except (SpecError, SettingError) as err:
            raise _at(err, where.get(name), name) from None
        except FitError as err:      # a candidate the sales cannot fit: say which
            raise FitError(f"Candidate '{name}': {err}", setting=err.setting) from None
        records.append({"name": name, "changes": _changes_text(where.get(name)), **rec})
    frame = pd.DataFrame(records)
    out = _rank(frame, base, reference, by_name)
    from dataclasses import replace
    rows = tuple(int(r) for r in sorted([*train.index, *hold.index]))
    return replace(out, rows=rows, screen_log=fit_log)


def judge(sales, settings: Settings, spec, train: pd.DataFrame, hold: pd.DataFrame) -> dict:
    """The figures of one candidate fitted on ``train`` and judged on ``hold`` and the folds
    of ``train`` (a dict of COMPARISON_COLUMNS' figures, plus oos_mape/oos_rmse)."""
    from plumbrule import analysis as an
    from plumbrule.diagnostics.tables import checks_table, fit_table
    from plumbrule.model.fitted import fit_model
    train, hold, moved = an._move_unseen(train, hold, spec)
    model = fit_model(spec, train, robust_se=settings.robust_se, confidence=settings.confidence)
    validation, h_est, cv = an._validate(model, hold, settings, sales)
    study, *_ = an._ratio_tables(model, hold, h_est, cv, settings, spec.ratio_by)
    # the model's own checks, as analyze() makes them (the screening's are shared by all)
    checks = an.fit_checks(model) + an.level_and_trend_checks(model, sales, settings)
    if len(moved):
        checks.append(an._moved_check(moved))
    verdicts = checks_table(checks)["verdict"]
    fit = fit_table(model, retransform=settings.retransform).iloc[0]
    # a categorical or curved predictor as one group, on the VIF scale: (GVIF^(1/(2df)))²
    # (Fox and Monette 1992), so a spline's own columns never inflate it
    from plumbrule.diagnostics.checks import collinearity_by_predictor
    per = collinearity_by_predictor(model)
    vif = (per["gvif_root"].to_numpy(float) ** 2 if len(per) else np.array([np.nan]))
    n, df_resid = int(fit["n_used"]), float(fit["df_resid"])
    if spec.log_response:
        # 1 − (1 − R²)(n − 1)/(n − p) with R² of the prices against the retransformed fit
        r2 = float(fit["r_squared_price_scale"])
        adj = 1.0 - (1.0 - r2) * (n - int(model.fit.has_intercept)) / df_resid
        scale = "price (log model: prices against its retransformed estimates)"
    else:
        adj, scale = float(fit["adj_r_squared"]), "price"
    row = validation.set_index("set")
    cv_row = row.loc["folds mean"] if "folds mean" in row.index else None
    h_row = row.loc["holdout"] if "holdout" in row.index else None
    whole = study[study["stratum"] == "all"].iloc[0] if len(study) else None
    rec = {
        "response": fit["response"], "n": n, "n_holdout": len(hold),
        "n_params": int(fit["n_params"]), "adj_r_squared": adj, "adj_r_squared_scale": scale,
        "aic": float(fit["aic"]), "bic": float(fit["bic"]),
        "cv_mape": _get(cv_row, "mape"), "cv_rmse": _get(cv_row, "rmse"),
        "holdout_mape": _get(h_row, "mape"), "holdout_rmse": _get(h_row, "rmse"),
        "ratio_sample": None if whole is None else whole["sample"],
        "median_ratio": _get(whole, "median_ratio"), "cod": _get(whole, "cod"),
        "prd": _get(whole, "prd"), "prb": _get(whole, "prb"),
        "vertical_equity": _equity(whole),
        "max_vif": float(np.nanmax(vif)) if np.isfinite(vif).any() else np.nan,
        "checks_watch": int((verdicts == WATCH).sum()),
        "checks_fail": int((verdicts == FAILS).sum()),
    }
    use_holdout = h_row is not None
    rec["oos_mape"] = rec["holdout_mape"] if use_holdout else rec["cv_mape"]
    rec["oos_rmse"] = rec["holdout_rmse"] if use_holdout else rec["cv_rmse"]
    return rec


def _get(row, key: str) -> float:
    if row is None:
        return np.nan
    v = row[key]
    return float(v) if v is not None and pd.notna(v) else np.nan


def _equity(whole) -> str:
    """The vertical-equity verdict: the worse of PRD's, PRB's and the value slope's."""
    if whole is None:
        return NA
    found = [whole.get(k) for k in ("prd_verdict", "prb_verdict", "value_slope_verdict")]
    for word in (FAILS, WATCH, OK, TOO_FEW):
        if word in found:
            return word
    return NA


def reference_name(base: Settings, by_name: Mapping[str, Settings]) -> str:
    """The candidate the results follow: ``use_model``, else the base settings' model."""
    wanted = base.use_model
    if wanted is None:
        for name, s in by_name.items():
            if s == base:
                return name
        return next(iter(by_name))
    for name in by_name:
        if name.casefold() == str(wanted).casefold():
            return name
    raise SettingError(f"Setting 'use_model': '{wanted}' is not one of the candidates "
                       f"({', '.join(by_name)}). Enter a candidate's name, or leave it blank "
                       "for the Settings' model.", setting="use_model")


def _union_settings(reference: Settings, specs: Mapping[str, Any], where) -> Settings:
    """The reference settings with every candidate's columns, so the sales are typed once.
    A column that is a category in one candidate and a number in another cannot share one
    typing: said, naming both."""
    preds: list[str] = []
    cats: list[str] = []
    numeric: dict[str, str] = {}          # column → first candidate using it as a number
    dates: dict[str, str] = {}            # date column → first candidate naming it
    for name, spec in specs.items():
        preds += list(spec.predictors)
        cats += list(spec.categorical)
        for col in spec.numeric_predictors:
            numeric.setdefault(col, name)
        if spec.date_column:
            dates.setdefault(spec.date_column, name)
    for name, spec in specs.items():
        for col in spec.categorical:
            if col in numeric:
                c = where.get(name) or where.get(numeric[col])
                raise SpecError(f"{c.where + ': ' if c else ''}'{col}' is a category in candidate "
                                f"'{name}' and a number in '{numeric[col]}'. Compare them in "
                                "separate runs, or use bands (curves) for the numeric one.",
                                column=col)
    if len(dates) > 1:
        a, b = list(dates)[:2]
        raise SpecError(f"Candidates '{dates[a]}' and '{dates[b]}' name different sale-date "
                        f"columns ('{a}', '{b}'). Use one date_column for every candidate.",
                        setting="date_column")
    date = next(iter(dates), reference.date_column)
    return reference.replace(predictors=tuple(dict.fromkeys(preds)),
                             categorical=tuple(dict.fromkeys(cats)), log_predictors=(),
                             reference_levels=(), date_column=date, trend="linear",
                             trend_knots=None)


def _at(err, cand: Candidate | None, name: str):
    """``err`` restated with the cell (or the candidate) it comes from."""
    setting = getattr(err, "setting", None)
    if cand is not None and cand.cells and setting is not None and setting in cand.cells:
        prefix = cand.cells[setting]
    elif cand is not None and cand.where:
        prefix = f"{cand.where} (candidate '{name}')"
    else:
        prefix = f"Candidate '{name}'"
    return type(err)(f"{prefix}: {err}", setting=setting)


def _changes_text(cand: Candidate | None) -> str:
    if cand is None or not cand.changes:
        return "as in the Settings"
    return "; ".join(f"{k}={_plain(v)}" for k, v in cand.changes.items())


def _plain(v: Any) -> str:
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return " ".join(str(v).split())


def _rank(frame: pd.DataFrame, base: Settings, reference: str,
          by_name: Mapping[str, Settings]) -> Comparison:
    from plumbrule.numbers import readable
    criterion = base.compare_by
    column, smaller, words = CRITERIA[criterion]
    if criterion in ("aic", "bic") and frame["response"].nunique() > 1:
        raise SettingError(f"Setting 'compare_by': {words} compares only models of the same "
                           f"response, and these candidates explain {_quoted(frame['response'])}"
                           ". Choose mape (the default) or rmse.", setting="compare_by")
    values = frame[column].to_numpy(float)
    if not np.isfinite(values).any():
        raise SettingError(f"Setting 'compare_by': no candidate has a {words} (e.g. no holdout "
                           "or folds = 0). Set a holdout or folds, or choose another "
                           "criterion.", setting="compare_by")
    key = np.where(np.isfinite(values), values if smaller else -values, np.inf)
    order = np.lexsort((np.arange(len(frame)), key))       # ties keep the listed order
    frame = frame.iloc[order].reset_index(drop=True)
    frame["rank"] = np.arange(1, len(frame) + 1)
    chosen = str(frame["name"].iloc[0])
    frame["chosen"] = frame["name"] == chosen
    frame["used"] = frame["name"] == reference
    notes = []
    for _, r in frame.iterrows():
        bits = []
        if r["name"] == reference:
            bits.append("the results follow this model; its screening is shared by all")
        if frame["response"].nunique() > 1:
            bits.append(f"AIC/BIC on the scale of {r['response']}: compare only with models "
                        "of the same response")
        notes.append("; ".join(bits))
    frame["note"] = notes
    best, fmt = frame.iloc[0], (lambda v: _fig(v, column, readable))
    if len(frame) > 1:
        second = frame.iloc[1]
        reason = (f"'{chosen}' is chosen: it has the {'lowest' if smaller else 'highest'} "
                  f"{words} of the {len(frame)} candidates ({fmt(best[column])}; next "
                  f"'{second['name']}' at {fmt(second[column])}).")
    else:
        reason = f"'{chosen}' is the only candidate ({words} {fmt(best[column])})."
    if column.startswith("oos_"):
        reason += (" Out-of-sample here means the holdout sales" if best["n_holdout"]
                   else " Out-of-sample here means cross-validated (out-of-fold)") + \
            "; every candidate was fitted and judged on the same sales."
    if frame["response"].nunique() > 1:
        reason += (" AIC and BIC are comparable only between candidates of the same response "
                   f"({_quoted(frame['response'])} differ).")
    if reference != chosen:
        reason += (f" The results follow '{reference}'"
                   + (" (use_model)" if base.use_model else " (the Settings' model)")
                   + f", not the chosen '{chosen}'"
                   + (": set use_model to the chosen name to follow it." if not base.use_model
                      else "."))
    else:
        reason += " The results follow it."
    if best["checks_fail"]:
        reason += (f" It still fails {int(best['checks_fail'])} check(s): read them before "
                   "relying on it.")
    table = frame.reindex(columns=COMPARISON_COLUMNS + ["oos_mape", "oos_rmse"])
    return Comparison(table=table, chosen=chosen, used=reference, reason=reason,
                      criterion=criterion, settings=dict(by_name), reference=reference)


def _fig(v: float, column: str, readable) -> str:
    if not np.isfinite(v):
        return "not available"
    if column.endswith("mape"):
        return f"{v:.2f}%"
    if column in ("adj_r_squared", "cod"):
        return f"{v:.4f}" if column == "adj_r_squared" else f"{v:.2f}"
    return readable(v)


def _quoted(values) -> str:
    return ", ".join(f"'{v}'" for v in dict.fromkeys(values))

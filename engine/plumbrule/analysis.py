"""Run the pipeline: intake → spec → screening → split → fit → checks → tables.

:func:`analyze` returns one immutable :class:`Analysis`; every surface (CLI,
worksheet functions, workbook) renders its ``tables`` and never computes.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from typing import Any, Iterator, Mapping

import numpy as np
import pandas as pd

from plumbrule import assessments, intake, ratios
from plumbrule import screening as screen
from plumbrule import validation as validate
from plumbrule.diagnostics.checks import WATCH, Check, run_checks
from plumbrule.diagnostics.curves import curve_table, linearity_by_predictor
from plumbrule.diagnostics.levels import level_checks
from plumbrule.diagnostics.location import location_tables
from plumbrule.diagnostics.questions import question_table
from plumbrule.diagnostics.trend import (
    market_index,
    trend_checks,
    valuation_day,
    with_time_adjusted,
)
from plumbrule.errors import FitError, SettingError
from plumbrule.model.fitted import FittedModel, fit_model
from plumbrule.model.retransform import price_estimates
from plumbrule.settings import Settings, parse_settings
from plumbrule.model.spec import ModelSpec, match_column
from plumbrule.sales import (Sales, prepare_sales, sale_names, side_numbers, with_ids,
                            with_names)
from plumbrule.diagnostics.tables import (
    checks_table,
    coefficient_table,
    correlation_table,
    fit_table,
    residual_table,
)


@dataclass(frozen=True)
class AnalysisTables:
    """The tables of one run, each a DataFrame, always present (empty when a step did not
    run). Field order is the order of the JSON output."""

    coefficients: pd.DataFrame
    fit: pd.DataFrame
    checks: pd.DataFrame
    dropped_rows: pd.DataFrame
    residuals: pd.DataFrame
    correlations: pd.DataFrame
    screen_log: pd.DataFrame
    screen_summary: pd.DataFrame
    validation: pd.DataFrame
    ratio_study: pd.DataFrame
    holdout_estimates: pd.DataFrame
    cv_estimates: pd.DataFrame
    level_merges: pd.DataFrame
    market_index: pd.DataFrame = field(default_factory=pd.DataFrame)
    curves: pd.DataFrame = field(default_factory=pd.DataFrame)
    assessed_estimates: pd.DataFrame = field(default_factory=pd.DataFrame)
    sales_chasing: pd.DataFrame = field(default_factory=pd.DataFrame)
    residual_map: pd.DataFrame = field(default_factory=pd.DataFrame)
    check_questions: pd.DataFrame = field(default_factory=pd.DataFrame)

    @classmethod
    def names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))

    def items(self) -> Iterator[tuple[str, pd.DataFrame]]:
        """(name, table) pairs in field order."""
        return ((name, getattr(self, name)) for name in self.names())

    def table(self, name: str) -> pd.DataFrame:
        """The table called ``name``; an unknown name is a :class:`SettingError` listing them."""
        if name not in self.names():
            raise SettingError(f"There is no table '{name}'. Tables: {', '.join(self.names())}.",
                               setting="table")
        return getattr(self, name)

    @property
    def set_aside(self) -> pd.DataFrame:
        """Every sale left out of the fit, one row per sale and reason: the screening log
        plus the rows intake dropped for missing values (rule 'missing value')."""
        return screen.set_aside_table(self.screen_log, self.dropped_rows)


@dataclass(frozen=True)
class Analysis:
    """The result of one run: :class:`AnalysisTables` in ``tables``.

    ``model`` is fitted on the training rows (after screening): validation, the holdout
    estimates and the ratio study are its, out-of-sample. ``final_model`` is the model that
    values subjects, fills the grid and is described by the coefficient, fit, checks,
    residual, correlation and market-index tables: with ``final_fit = all`` (the default)
    and a holdout, refitted on every screened sale (training and holdout); otherwise the
    training model itself. ``holdout`` holds the clean holdout rows the training model
    never saw (empty without a holdout).
    """

    settings: Settings
    spec: ModelSpec
    table: intake.SheetTable
    clean: intake.CleanData
    model: FittedModel
    tables: AnalysisTables
    holdout: pd.DataFrame = field(default_factory=pd.DataFrame)
    ids: pd.Series | None = None      # sheet row → sale ID, with an id_column
    # sheet row → how a reader names the sale (sale, sale_price, sale_date): sales.sale_names
    names: pd.DataFrame | None = None
    final_model: FittedModel = None   # type: ignore[assignment]  # None: the training model

    def __post_init__(self) -> None:
        if self.final_model is None:      # built without a refit: the training model values
            object.__setattr__(self, "final_model", self.model)

    @property
    def encoding(self):
        """The encoding of the model that values (``final_model``)."""
        return self.final_model.encoding

    @property
    def fit(self):
        """The least-squares fit of the model that values (``final_model``)."""
        return self.final_model.fit

    @property
    def refitted(self) -> bool:
        """True when the final model was refitted on the training and holdout sales."""
        return self.final_model is not self.model


class HandedOver:
    """A sales table its caller gives up to :func:`analyze` (``plumbrule fit``, which only
    renders the tables): once intake has typed it, the analysis keeps of it only what later
    steps read (its rows, hidden rows and side columns: coordinates, assessed values), not
    the file's text, its blank mask or the raw cells of the model's columns, so they are not
    held to the end. ``Analysis.table`` is then that trimmed table."""

    def __init__(self, table: intake.SheetTable) -> None:
        self._table: intake.SheetTable | None = table

    def take(self) -> intake.SheetTable:
        """The table (once: the holder lets it go)."""
        table, self._table = self._table, None
        if table is None:
            raise ValueError("this sales table was handed over already")
        return table


def _trimmed(table: intake.SheetTable, spec: ModelSpec, label: str | None
             ) -> intake.SheetTable:
    """``table`` with the rows, hidden rows and the columns the later steps read (the side
    columns of :func:`side_numbers`, the ``label`` column of :func:`sale_names`), without
    the file's text and blank mask."""
    from dataclasses import replace
    side = [c for c in (spec.x_column, spec.y_column, spec.assessed_column,
                        spec.prior_assessed_column, label) if c and c in table.frame.columns]
    return replace(table, frame=table.frame[list(dict.fromkeys(side))], file_text=None,
                   blanks=None)


def _with_trimmed_table(sales: Sales, table: intake.SheetTable, label: str | None
                        ) -> tuple[Sales, intake.SheetTable]:
    """(sales, table) holding trimmed tables (:func:`_trimmed`; one when they are one)."""
    from dataclasses import replace
    light = _trimmed(table, sales.spec, label)
    own = light if sales.table is table else _trimmed(sales.table, sales.spec, label)
    out = replace(sales, table=own)
    out.__dict__.update({k: v for k, v in sales.__dict__.items() if k == "_id_keys"})
    return out, light


def as_table(source: Any, header_row: int | None = None,
             text_columns: tuple[str, ...] = ()) -> intake.SheetTable:
    """Accept a SheetTable, a DataFrame, a file path, or a 2-D block of values (its header
    found below any title rows, or on sheet row ``header_row``). ``text_columns``: the
    columns read as labels (a hint for the CSV reader)."""
    if isinstance(source, intake.SheetTable):
        return source
    if isinstance(source, pd.DataFrame):
        return intake.table_from_frame(source)
    if isinstance(source, (str, bytes)) or hasattr(source, "__fspath__"):
        return intake.read_table(source, header_row=header_row, text_columns=text_columns)
    return intake.table_from_values(source, header_at=header_row)


def coerce_settings(settings: Settings | Mapping[str, Any] | None = None, **kw) -> Settings:
    if isinstance(settings, Settings):
        return settings.replace(**{k: v for k, v in parse_settings(**kw).__dict__.items()
                                   if k in kw}) if kw else settings
    return parse_settings(settings, **kw)


def prepare(table: intake.SheetTable, settings: Settings) -> tuple[ModelSpec, intake.CleanData]:
    """Match the spec to the headers and type the used columns (the validation edge)."""
    sales = prepare_sales(table, settings)
    return sales.spec, sales.clean


def analyze(source: Any, settings: Settings | Mapping[str, Any] | None = None,
            *, for_valuation: bool = False, **kw) -> Analysis:
    """Run the whole analysis on ``source`` (values, DataFrame, path or SheetTable).

    Order: intake (typing, IDs, duplicates, validity filter, level spellings) → spec →
    holdout split (of the clean rows, each sale by its own key) → data screening (manual,
    percentile trim, IQR fence; limits from the training sales) → influence screening on
    the training rows (one first fit, one refit) → fit on training rows → checks →
    validation (holdout, k-fold) → ratio study → tables.
    ``source`` may be a :class:`HandedOver` table (its raw cells are let go after intake).
    ``for_valuation``: the analysis a valuation needs (the model and its set-aside log); the
    checks, validation, ratio study and estimate tables are left empty.
    """
    settings = coerce_settings(settings, **kw)
    handed = isinstance(source, HandedOver)
    table = (source.take() if handed
             else as_table(source, settings.header_row, settings.text_columns))
    del source
    sales = prepare_sales(table, settings)
    spec, clean = sales.spec, sales.clean
    # label_column is matched here, at the edge, before the fit; the sales' names are made
    # once the model and its checks are done (a million 'row N' texts need not be held
    # through them)
    label = (match_column(settings.label_column, table.columns, "label_column")
             if settings.label_column else None)
    if handed:      # the raw cells and the file's text are read: let them go
        sales, table = _with_trimmed_table(sales, table, label)
    columns = spec.screened
    train, hold, fit_log, looked, moved = _screen_and_split(sales, settings)
    model = fit_model(spec, train, robust_se=settings.robust_se,
                      confidence=settings.confidence)
    final = final_model(model, hold, settings)
    # `plumbrule value` shows none of the model's checks: they are not run for it. They run
    # before the validation, whose per-sale estimates need not be held through them.
    checks = [] if for_valuation else _all_checks(final, sales, settings, fit_log, looked,
                                                  moved)
    if for_valuation and not settings.ratio_trim and not spec.assessed_column:
        # `plumbrule value` shows the model's estimates, never the validation or the ratio
        # study: they are left empty (a ratio trim sets sales aside, and the assessments'
        # study reads the model's, so those are computed)
        validation = study = holdout_estimates = cv_estimates = study_est = pd.DataFrame()
        ratio_log = screen.empty_log()
    else:
        validation, h_est, cv = _validate(model, hold, settings, sales)
        study, holdout_estimates, cv_estimates, ratio_log, study_est = _ratio_tables(
            model, hold, h_est, cv, settings, spec.ratio_by)

    screen_log = pd.concat([lg for lg in (fit_log, ratio_log) if len(lg)]
                           or [screen.empty_log()], ignore_index=True)
    after = pd.concat([train, hold]).sort_index() if len(hold) else train
    study, assessed_est, chasing = _assessed_tables(sales, after, study, study_est, settings)
    residual_map = pd.DataFrame()
    if spec.x_column and not for_valuation:
        check, residual_map = location_tables(
            model.rows, model.fit.resid, side_numbers(sales.table, spec.x_column, model.rows),
            side_numbers(sales.table, spec.y_column, model.rows), settings.coordinates,
            settings.neighbours, basis=_fit_basis(model))
        checks.append(check)
    ids = sales.ids
    day = valuation_day(settings)
    # how a reader names each sale (sheet row → sale, sale_price, sale_date)
    names = sale_names(table, clean.data, spec, sales.shown_ids, settings.label_column)

    def named(frame, ident):
        return with_names(with_ids(frame, ident), names)
    checks_frame = checks_table(checks)
    tables = AnalysisTables(
        coefficients=coefficient_table(final),
        fit=fit_table(final, n_dropped=len(clean.dropped),
                      extra={"n_holdout": len(hold), "n_screened": len(fit_log),
                             "final_fit": "all" if final is not model or not len(hold)
                             else "training", "n_training": model.fit.n},
                      retransform=settings.retransform),
        checks=checks_frame,
        dropped_rows=with_ids(clean.dropped, sales.shown_ids),
        residuals=named(with_time_adjusted(residual_table(final), final, day), ids),
        correlations=correlation_table(final),
        screen_log=named(screen_log, sales.shown_ids),
        screen_summary=screen.summary_table(
            sales.data, after, screen_log, columns, looked, settings.iqr_fence,
            spec.logged_columns if settings.fence_scale == "model" else ()),
        validation=validation,
        ratio_study=study,
        holdout_estimates=named(holdout_estimates, ids),
        cv_estimates=named(cv_estimates, ids),
        level_merges=sales.level_merges,
        market_index=market_index(final, day),
        curves=curve_table(final),
        assessed_estimates=with_ids(assessed_est, ids),
        sales_chasing=chasing,
        residual_map=with_ids(residual_map, ids),
        check_questions=question_table(checks_frame),
    )
    return Analysis(settings=settings, spec=spec, table=table, clean=clean, model=model,
                    tables=tables, holdout=hold, ids=ids, final_model=final, names=names)


def _all_checks(final: FittedModel, sales: Sales, settings: Settings, fit_log: pd.DataFrame,
                looked: list, moved: pd.DataFrame) -> list[Check]:
    """The checks of the analysis but the location check, in the checks table's order."""
    spec = sales.spec
    checks = fit_checks(final) + screen.screening_checks(fit_log, looked,
                                                         settings.max_excluded_share)
    checks += level_and_trend_checks(final, sales, settings)
    if sales.table.hidden_rows and not settings.skip_hidden_rows:
        checks.append(_hidden_check(len(sales.table.hidden_rows)))
    if spec.screens_price and (settings.trim_percentiles is not None
                               or settings.iqr_fence is not None):
        checks.append(screen.price_screen_check(spec.response, fit_log))
    if len(moved):
        checks.append(_moved_check(moved))
    return checks


def final_model(model: FittedModel, hold: pd.DataFrame, settings: Settings) -> FittedModel:
    """The model that values: with a holdout and ``final_fit = all``, the spec refitted on
    the training and holdout sales (sheet-row order; the encoding, trend knots and periods
    captured afresh from them); otherwise ``model`` itself (no refit)."""
    if settings.final_fit != "all" or not len(hold):
        return model
    data = pd.concat([model.data, hold.reindex(columns=model.data.columns)]).sort_index(
        kind="stable")
    return fit_model(model.spec, data, robust_se=settings.robust_se,
                     confidence=settings.confidence)


def fit_checks(model: FittedModel) -> list[Check]:
    """The checks of the fitted model itself, in the checks table's order. A check of the fit
    is added here (not in :func:`analyze` alone), so the comparison of candidate models
    (compare.py) counts it too."""
    # the per-predictor linearity checks run first (their n × 2k block then meets no
    # cached influence arrays), and are shown beside RESET: the same question
    linearity = linearity_by_predictor(model)
    checks = run_checks(model)
    at = next((i + 1 for i, c in enumerate(checks) if c.name.startswith("Linearity")),
              len(checks))
    checks[at:at] = linearity
    return checks


def level_and_trend_checks(model: FittedModel, sales: Sales, settings: Settings) -> list[Check]:
    """The model's checks of its category levels and of its trend against the sale dates."""
    return (level_checks(model, sales.level_merges, settings.min_level_sales)
            + trend_checks(model))


def _screen_and_split(sales: Sales, settings: Settings, spec: ModelSpec | None = None):
    """Split, then screen: (training rows, holdout rows, fit log, rows each rule examined,
    holdout rows moved to training). ``spec``: the model whose columns the rules read and
    which the influence rule fits (default: the sales' own)."""
    data, spec = sales.data, spec or sales.spec
    split = validate.split_rows(data, validate.holdout_share(settings), settings.holdout_recent,
                                settings.seed, spec.date_column, sales.keys(data.index))
    basis = data.loc[data.index.isin(split.training)] if len(split.holdout) else data
    screened = screen.data_rules(
        data, spec.screened, sales.table.frame.index, exclude_rows=sales.exclude_rows,
        trim=settings.trim_percentiles, fence=settings.iqr_fence,
        logged=spec.logged_columns if settings.fence_scale == "model" else (), basis=basis)
    kept = screened.kept
    if len(split.holdout):
        train = kept.loc[kept.index.isin(split.training)]
        hold = kept.loc[kept.index.isin(split.holdout)]
    else:   # no holdout: every kept row trains (no copy of the whole table)
        train, hold = kept, kept.iloc[:0]
    train, hold, moved = _move_unseen(train, hold, spec)
    logs = [sales.log, screened.log]
    looked = list(sales.looked_at) + list(screened.looked_at)
    _enough(train, hold, screened.log)
    if settings.influence_screen:
        first = fit_model(spec, train, robust_se=settings.robust_se,
                          confidence=settings.confidence)
        flagged = screen.influence_rule(first)
        looked.append((screen.INFLUENCE, first.fit.n))
        logs.append(flagged)
        train = train.drop(index=flagged["row"])
        train, hold, moved2 = _move_unseen(train, hold, spec)
        moved = pd.concat([moved, moved2], ignore_index=True)
    fit_log = pd.concat([lg for lg in logs if len(lg)] or [screen.empty_log()],
                        ignore_index=True)
    return train, hold, fit_log, looked, moved


def _validate(model: FittedModel, hold: pd.DataFrame, settings: Settings, sales: Sales):
    """(validation table, holdout estimates on the price scale, CrossValidation or None)."""
    factor = model.retransform_factor(settings.retransform)
    h_pred = validate.predict(model, hold) if len(hold) else np.empty(0)
    h_est = price_estimates(h_pred, model.spec.log_response, factor)
    cv = None
    if settings.folds and settings.folds <= model.fit.n:
        cv = validate.cross_validate(model, settings.folds, settings.seed, settings.retransform,
                                     keys=sales.keys(model.data.index))
    table = validate.validation_table(model, settings.retransform, hold, h_pred, h_est, cv)
    if settings.folds and cv is None:     # a default of 5 folds must not break a tiny table
        table = pd.concat([table, pd.DataFrame([{
            "set": "folds", "n": model.fit.n,
            "note": f"cross-validation not run: {settings.folds} folds need at least "
                    f"{settings.folds} training sales"}])], ignore_index=True)
    return table, h_est, cv


def _ratio_tables(model: FittedModel, hold: pd.DataFrame, h_est: np.ndarray, cv,
                  settings: Settings, by: str | None):
    """The ratio study on the holdout; without one on the out-of-fold estimates; with
    neither in-sample (labelled optimistic). Returns (ratio_study, holdout_estimates,
    cv_estimates, ratio-trim log, the estimates the study read)."""
    spec = model.spec
    strat = (lambda frame: frame[by].to_numpy()) if by else (lambda frame: None)
    holdout_estimates = ratios.estimates_table(hold.index, hold[spec.response], h_est,
                                               strat(hold))
    cv_estimates = _cv_estimates(model, cv, strat)
    if len(hold):
        sample, study_est = "holdout", holdout_estimates
    elif cv is not None:
        sample, study_est = "cross-validated (out-of-fold)", cv_estimates
        if settings.influence_screen:
            # the influence rule saw every training sale before the folds were cut, so the
            # folds never meet the sales it removed: the figures flatter the model
            sample = ("cross-validated after influence screening of all sales (optimistic: "
                      "the rule saw every fold)")
    else:
        fitted = model.fitted_prices(settings.retransform)
        sample = "in-sample (optimistic: the model has seen these sales)"
        study_est = ratios.estimates_table(model.rows, model.data[spec.response], fitted,
                                           strat(model.data))
    ratio_log = screen.empty_log()
    if settings.ratio_trim:
        ratio_log = ratios.ratio_trim(study_est[study_est["in_study"]])
        study_est = study_est.assign(in_study=study_est["in_study"]
                                     & ~study_est["row"].isin(ratio_log["row"]))
        if len(hold):
            holdout_estimates = study_est
        elif cv is not None:
            cv_estimates = study_est
    targets = ratios.RatioTargets.for_class(settings.property_class)
    study = ratios.ratio_study(study_est, sample, targets, settings.confidence, by)
    return study, holdout_estimates, cv_estimates, ratio_log, study_est


def _fit_basis(model: FittedModel) -> np.ndarray:
    """The fit's orthonormal columns, the constant's 1/√n first (n × p)."""
    fit = model.fit
    if not fit.has_intercept:
        return fit.q
    return np.column_stack([np.full(fit.n, 1.0 / np.sqrt(fit.n)), fit.q])


def _assessed_tables(sales: Sales, after: pd.DataFrame, study: pd.DataFrame,
                     study_est: pd.DataFrame, settings: Settings):
    """(ratio_study with value ranges and the assessed records, assessed_estimates,
    sales_chasing). The assessed study reads every sale left after intake and screening
    (``after``); without assessed_column and value_strata the study is unchanged."""
    spec = sales.spec
    strata = settings.value_strata or (4 if spec.assessed_column else None)
    targets = ratios.RatioTargets.for_class(settings.property_class)
    if strata is not None and len(study):
        study = assessments.with_value_ranges(study, study_est, strata, targets,
                                              settings.confidence)
    if not spec.assessed_column:
        return study, pd.DataFrame(), pd.DataFrame()
    model_rows = study_est["row"].to_numpy()[study_est["in_study"].to_numpy(bool)]
    strata = strata or 4
    rows = after.index
    price = after[spec.response].to_numpy(float)
    current = side_numbers(sales.table, spec.assessed_column, rows)
    by = spec.ratio_by
    est = assessments.assessed_estimates(
        rows, price, current, after[by].to_numpy() if by else None,
        after[spec.date_column].to_numpy() if spec.date_column else None, strata)
    own = assessments.assessed_study(est, targets, settings.confidence, by, strata, model_rows)
    study = pd.concat([study, own], ignore_index=True)
    chasing = pd.DataFrame()
    if spec.prior_assessed_column:
        prior = side_numbers(sales.table, spec.prior_assessed_column, rows)
        chasing = assessments.chasing_table(price, current, prior, targets=targets)
    return study, est, chasing


def _enough(train: pd.DataFrame, hold: pd.DataFrame, log: pd.DataFrame) -> None:
    """Say why when the holdout and screening leave too few sales to fit anything."""
    if len(train) >= 3 or (not len(hold) and not len(log)):
        return   # without holdout or screening the fit's own message is the clearer one
    raise FitError(f"Only {len(train)} sales remain to fit the model after holding out "
                   f"{len(hold)} and screening out {len(log)}. Use a smaller 'holdout' or "
                   "loosen the screening settings.", setting="holdout" if len(hold) else None)


def _move_unseen(train: pd.DataFrame, hold: pd.DataFrame, spec: ModelSpec):
    """Holdout rows with a category level absent from training move to training (logged)."""
    moved = validate.unseen_level_rows(train, hold, spec.categorical)
    if len(moved):
        train = pd.concat([train, hold.loc[moved["row"]]]).sort_index()
        hold = hold.drop(index=moved["row"])
    return train, hold, moved


def _hidden_check(n: int) -> Check:
    return Check("Hidden rows used as sales", float(n), float("nan"),
                 "no hidden or filtered-out rows", WATCH,
                 f"{n} rows of the sales sheet are hidden or filtered out, and were used as "
                 "sales like any other. Set skip_hidden_rows to TRUE to set them aside.")


def _moved_check(moved: pd.DataFrame) -> Check:
    rows = ", ".join(str(r) for r in moved["row"].head(10))
    more = f" and {len(moved) - 10} more" if len(moved) > 10 else ""
    return Check("Holdout: category levels unseen in training", float(len(moved)), float("nan"),
                 "any", WATCH,
                 f"Sheet rows {rows}{more} were moved from the holdout to the training rows: "
                 "their level (e.g. '" + str(moved['level'].iloc[0]) + "' in '"
                 + str(moved['column'].iloc[0]) + "') had no other sale to learn from.")


def _cv_estimates(model: FittedModel, cv, strat) -> pd.DataFrame:
    """Out-of-fold estimates of the training rows (empty without cross-validation), with fold."""
    if cv is None:
        out = ratios.estimates_table([], [], [])
    else:
        out = ratios.estimates_table(model.rows, model.data[model.spec.response], cv.estimate,
                                     strat(model.data))
        out["fold"] = cv.labels + 1
    if "fold" not in out:
        out["fold"] = pd.Series(dtype=np.int64)
    return out

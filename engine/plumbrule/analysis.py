"""Run the pipeline: intake → spec → screening → split → fit → checks → tables.

:func:`analyze` returns one immutable :class:`Analysis`; every surface (CLI,
worksheet functions, workbook) renders its ``tables`` and never computes.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from . import intake
from .checks import run_checks
from .model import FittedModel, fit_model
from .settings import Settings, parse_settings
from .spec import ModelSpec, build_spec
from .tables import (checks_table, coefficient_table, correlation_table, fit_table,
                     residual_table)


@dataclass(frozen=True)
class Analysis:
    """The result of one run. ``tables`` maps a table name to a DataFrame:
    coefficients, fit, checks, dropped_rows, residuals, correlations (and the
    screening / validation / ratio-study tables when those run)."""

    settings: Settings
    spec: ModelSpec
    table: intake.SheetTable
    clean: intake.CleanData
    model: FittedModel
    tables: Mapping[str, pd.DataFrame] = field(default_factory=dict)

    @property
    def encoding(self):
        return self.model.encoding

    @property
    def fit(self):
        return self.model.fit


def as_table(source: Any) -> intake.SheetTable:
    """Accept a SheetTable, a DataFrame, a file path, or a 2-D block of values."""
    if isinstance(source, intake.SheetTable):
        return source
    if isinstance(source, pd.DataFrame):
        return intake.table_from_frame(source)
    if isinstance(source, (str, bytes)) or hasattr(source, "__fspath__"):
        return intake.read_table(source)
    return intake.table_from_values(source)


def coerce_settings(settings: Settings | Mapping[str, Any] | None = None, **kw) -> Settings:
    if isinstance(settings, Settings):
        return settings.replace(**{k: v for k, v in parse_settings(**kw).__dict__.items()
                                   if k in kw}) if kw else settings
    return parse_settings(settings, **kw)


def prepare(table: intake.SheetTable, settings: Settings) -> tuple[ModelSpec, intake.CleanData]:
    """Match the spec to the headers and type the used columns (the validation edge)."""
    spec = build_spec(settings, table.columns)
    extra_numeric = [c for c in _extra_numeric(settings, table) if c not in spec.used_columns]
    extra_labels = [c for c in _extra_labels(settings, table) if c not in spec.used_columns]
    clean = intake.clean(table, numeric=list(spec.numeric_columns) + extra_numeric,
                         categorical=list(spec.categorical) + extra_labels,
                         date=spec.date_column)
    return spec, clean


def _extra_numeric(settings: Settings, table: intake.SheetTable) -> list[str]:
    """Columns outside the model that screening reads as numbers."""
    from .spec import match_column
    return [match_column(c, table.columns, "trim_columns") for c in settings.trim_columns]


def _extra_labels(settings: Settings, table: intake.SheetTable) -> list[str]:
    from .spec import match_column
    if settings.ratio_by:
        return [match_column(settings.ratio_by, table.columns, "ratio_by")]
    return []


def analyze(source: Any, settings: Settings | Mapping[str, Any] | None = None,
            **kw) -> Analysis:
    """Run the whole analysis on ``source`` (values, DataFrame, path or SheetTable)."""
    settings = coerce_settings(settings, **kw)
    table = as_table(source)
    spec, clean = prepare(table, settings)
    model = fit_model(spec, clean.data, robust_se=settings.robust_se,
                      confidence=settings.confidence)
    checks = run_checks(model)
    tables = {
        "coefficients": coefficient_table(model),
        "fit": fit_table(model, n_dropped=len(clean.dropped)),
        "checks": checks_table(checks),
        "dropped_rows": clean.dropped,
        "residuals": residual_table(model),
        "correlations": correlation_table(model),
    }
    return Analysis(settings=settings, spec=spec, table=table, clean=clean, model=model,
                    tables=tables)

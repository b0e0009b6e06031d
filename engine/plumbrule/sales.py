"""From a sheet to the sales a model may use: the used columns typed (every unreadable cell
found at once), IDs checked, repeated rows and sales outside the validity codes set aside,
one spelling per category level, hand exclusions by ID turned into sheet rows.

:func:`prepare_sales` is the validation edge of :func:`plumbrule.analysis.analyze`."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

from plumbrule import intake
from plumbrule.errors import CellErrors, IntakeError
from plumbrule.intake.keys import id_labels as _id_labels
from plumbrule.intake.keys import rows_of_ids, sale_hashes, sale_ids
from plumbrule.intake.levels import merge_levels
from plumbrule.intake.rules import DUPLICATE, SALE_FILTER, duplicate_rows, sale_filter
from plumbrule.model.spec import ModelSpec, build_spec
from plumbrule.settings import Settings

TOTALS_RULE, HIDDEN_RULE = "totals row", "hidden row"


@dataclass(frozen=True)
class Sales:
    """The sales after intake. ``data``: typed used columns of the sales that go on to
    screening (index: sheet rows); ``clean``: the typed table before the intake rules (its
    ``dropped`` lists rows with missing values); ``ids``: sheet row → ID (None without an
    ID column); ``log``: screening-log records of the intake rules, with ``looked_at``
    (rule, sales examined); ``level_merges``: the spellings merged; ``exclude_rows``: the
    hand exclusions by sheet row (from exclude_rows and exclude_ids)."""

    spec: ModelSpec
    clean: intake.CleanData
    data: pd.DataFrame
    ids: pd.Series | None
    shown_ids: pd.Series | None          # every row's ID cell, for the logs
    log: pd.DataFrame
    looked_at: tuple[tuple[str, int], ...]
    level_merges: pd.DataFrame
    exclude_rows: tuple[tuple[int, str], ...]
    table: intake.SheetTable

    def keys(self, rows: pd.Index) -> np.ndarray:
        """Each sale's 64-bit key (ID, else its typed values in the model's columns)."""
        if self.ids is not None and rows.isin(self.ids.index).all():
            return self._id_keys.reindex(rows).to_numpy(np.uint64)
        return sale_hashes(self.clean.data.loc[rows, list(self.spec.used_columns)], self.ids)

    @cached_property
    def _id_keys(self) -> pd.Series:
        """The keys of every sale with an ID, hashed once (the holdout and the folds both
        draw by key)."""
        assert self.ids is not None
        return pd.Series(sale_hashes(pd.DataFrame(index=self.ids.index), self.ids),
                         index=self.ids.index)


def prepare_sales(table: intake.SheetTable, settings: Settings) -> Sales:
    """Match the spec to the headers, set aside rows that are not sales (totals rows; hidden
    rows with skip_hidden_rows), type the used columns, apply the intake rules."""
    spec = build_spec(settings, table.columns)
    extra_numeric = [c for c in spec.screened if c not in spec.used_columns]
    numeric = list(dict.fromkeys([*spec.numeric_columns, *extra_numeric]))
    # each row's ID cell as text, totals rows included: the logs show it beside the row
    id_labels = _id_labels(table, spec.id_column) if spec.id_column else None
    shown_ids = id_labels[0] if id_labels is not None else None
    # IDs all different over the whole sheet are so over any of its rows: hashed once here,
    # not again by the duplicates rule and the ID check
    ids_unique = (shown_ids is not None and spec.id_column is not None
                  and _all_different(table, spec.id_column, shown_ids))
    logs, looked = [], []
    totals = intake.totals_rows(table, numeric)        # before typing: 'Total' is no price
    if len(totals):
        logs.append(totals)
        looked.append((TOTALS_RULE, len(table.frame)))
        table = intake.table_without(table, totals["row"])
    if settings.skip_hidden_rows and table.hidden_rows:
        hidden = intake.hidden_rows_log(table)
        logs.append(hidden)
        looked.append((HIDDEN_RULE, len(table.frame)))
        table = intake.table_without(table, hidden["row"])
    _check_has_values(table, [*numeric, *spec.categorical, *spec.label_columns,
                              *([spec.date_column] if spec.date_column else [])])
    try:
        clean = intake.clean(table, numeric=numeric,
                             categorical=list(spec.categorical) + list(spec.label_columns),
                             date=spec.date_column, hint_categorical=spec.numeric_predictors,
                             bad_cells=settings.bad_cells, date_format=settings.date_format,
                             amounts=[spec.response])
    except CellErrors as err:
        if shown_ids is not None:
            raise err.with_ids(shown_ids) from None
        raise
    # one spelling per level first, so 'Good' and 'good ' rows are the same sale below
    merged, merges = merge_levels(clean.data, spec.categorical, spec.level_map,
                                  clean.factors)
    clean = intake.CleanData(merged, clean.dropped)
    data = clean.data
    raw_ids = None if shown_ids is None else _on_rows(shown_ids, table.frame.index)
    data, dup_log = duplicate_rows(data, raw_ids, settings.duplicates, ids_unique)
    if len(dup_log):      # a rule that found nothing adds no line to the checks
        looked.append((DUPLICATE, len(clean.data)))
    logs.append(dup_log)
    ids = None
    if spec.id_column:
        kept = table if not len(dup_log) else _rows_of(
            table, table.frame.index.difference(pd.Index(dup_log["row"])))
        ids = sale_ids(kept, spec.id_column, spec.used_columns, id_labels, ids_unique)
    if spec.filters:
        n = len(data)
        data, filter_log = sale_filter(data, spec.filters)
        looked.append((SALE_FILTER, n))
        logs.append(filter_log)
    exclude = tuple(settings.exclude_rows)
    if settings.exclude_ids:
        if ids is None:
            from plumbrule.errors import SettingError
            raise SettingError("Setting 'exclude_ids' needs the ID column: set id_column, or "
                               "list sheet rows in exclude_rows.", setting="exclude_ids")
        exclude += rows_of_ids(ids, settings.exclude_ids, "exclude_ids")
    log = pd.concat([lg for lg in logs if len(lg)], ignore_index=True) if any(
        len(lg) for lg in logs) else logs[0]
    return Sales(spec=spec, clean=clean, data=data, ids=ids, shown_ids=shown_ids, log=log,
                 looked_at=tuple(looked), level_merges=merges, exclude_rows=exclude,
                 table=table)


def with_ids(frame: pd.DataFrame, ids: pd.Series | None, column: str = "row",
             name: str = "id") -> pd.DataFrame:
    """``frame`` with the sale's ID beside its sheet-row column (unchanged without IDs)."""
    if ids is None or column not in frame.columns or name in frame.columns:
        return frame
    pos = list(frame.columns).index(column) + 1
    out = frame.copy(deep=False)    # the columns stay shared (nothing writes into them)
    out.insert(pos, name, ids.reindex(frame[column].to_numpy()).to_numpy(dtype=object))
    return out


NAME_COLUMNS = ["sale", "sale_price", "sale_date"]


def sale_names(table: intake.SheetTable, data: pd.DataFrame, spec, shown_ids: pd.Series | None,
               label_column: str | None) -> pd.DataFrame:
    """How a reader names each sale, per sheet row of the sales table (the index): ``sale``
    is the label column's text with the ID ('3 Mill Lane (Q-2417)'), else the ID, else
    'row N'; ``sale_price`` and ``sale_date`` are the typed cells (NaN / NaT for a row
    intake dropped). ``label_column`` is matched to the headers here, once."""
    rows = table.frame.index
    ids = None if shown_ids is None else shown_ids.reindex(rows)
    names = (pd.Series(ids.to_numpy(dtype=object), index=rows, dtype=object) if ids is not None
             else pd.Series(np.full(len(rows), None, dtype=object), index=rows, dtype=object))
    unnamed = names.isna().to_numpy()
    if unnamed.any():         # 'row N' only where a sale has no ID (not 200,000 texts made)
        names[unnamed] = [f"row {r}" for r in rows[unnamed]]
    if label_column:
        from plumbrule.model.spec import match_column
        col = match_column(label_column, table.columns, "label_column")
        text = intake.to_labels(table.frame[col], col)[0]
        labelled = text.notna()
        both = text + " (" + ids.astype(object) + ")" if ids is not None else text
        if ids is not None:
            both = both.where(ids.notna(), text)
        names = both.where(labelled, names).astype(object)
    out = pd.DataFrame({"sale": names}, index=rows)
    out["sale_price"] = data[spec.response].reindex(rows).astype(float) \
        if spec.response in data else float("nan")
    if spec.date_column and spec.date_column in data:
        out["sale_date"] = pd.to_datetime(data[spec.date_column].reindex(rows))
    else:
        out["sale_date"] = pd.NaT
    return out


def with_names(frame: pd.DataFrame, names: pd.DataFrame | None, column: str = "row",
               ) -> pd.DataFrame:
    """``frame`` with each sale's name and, where the table has none, its price and date,
    as columns at the end (``comp_sale`` … for a ``comp_row`` column); unchanged without a
    ``column``."""
    if names is None or column not in frame.columns:
        return frame
    out = frame.copy(deep=False)    # the columns stay shared (nothing writes into them)
    at = out[column].to_numpy()
    prefix = "comp_" if column.startswith("comp") else ""
    name = f"{prefix}sale"
    if name not in out.columns:        # at the end: worksheet functions spill by position
        shown = names["sale"].reindex(at).to_numpy(dtype=object)
        missing = pd.isna(shown)
        if missing.any():       # a row intake took out before typing (a totals row)
            shown[missing] = [f"row {r}" for r in at[missing]]
        out[name] = shown
    for c in ("sale_price", "sale_date"):
        if f"{prefix}{c}" not in out.columns and c not in out.columns:
            out[f"{prefix}{c}"] = names[c].reindex(at).to_numpy()
    return out


def _all_different(table: intake.SheetTable, column: str, labels: pd.Series) -> bool:
    """Whether the ID labels all differ: from the integers when the CSV column is integers
    written plainly (different integers are different texts; hashing a million integers
    is a fraction of hashing their texts), else from the labels."""
    from plumbrule.intake.cells import _plain_int_array
    from plumbrule.intake.table import plain_integers
    ints = plain_integers(table, column)
    if ints is None:          # an integer column of a DataFrame or Parquet file: str(n) each
        ints = _plain_int_array(table.frame[column])
    if ints is not None and pd.Index(ints).is_unique:
        return True
    return pd.Index(labels.to_numpy(dtype=object), dtype=object).is_unique


def _on_rows(values: pd.Series, rows: pd.Index) -> pd.Series:
    """``values`` reindexed to ``rows`` (itself when it has those rows already)."""
    return values if values.index.equals(rows) else values.reindex(rows)


def _rows_of(table: intake.SheetTable, rows: pd.Index) -> intake.SheetTable:
    from dataclasses import replace
    return replace(table, frame=table.frame.loc[rows])


def _check_has_values(table: intake.SheetTable, used: list[str]) -> None:
    """A table with no row below its header, or a used column blank in every row, is said
    as such (rather than as the fit's count of usable sales or a level count)."""
    where = f" (sheet '{table.sheet}')" if table.sheet else ""
    if len(table.frame) == 0:
        raise IntakeError(f"The sales table{where} has its header on row {table.header_row} "
                          "but no rows below it. Put the sales below the header row.")
    present = [c for c in dict.fromkeys(used) if c in table.frame.columns]
    all_blank = intake.blank_cells(table, present).all(axis=0)
    for col in present:
        if all_blank[col]:
            raise IntakeError(f"Column '{col}' is blank in every row of the sales table"
                              f"{where}. Fill it in, or take it out of the settings that "
                              "name it.", column=col)


def side_numbers(table: intake.SheetTable, column: str | None, rows: pd.Index) -> np.ndarray:
    """A column the model does not use (assessed values, coordinates) as floats for the
    sheet ``rows``: blanks and error values NaN (left out by the step that reads it), text
    that is not a number refused with its cell. Empty without a column."""
    if column is None:
        return np.full(len(rows), np.nan)
    values, _ = intake.to_numbers(table.frame[column], column)
    return values.reindex(rows).to_numpy(float)

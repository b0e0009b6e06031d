"""The typed table and the log of rows set aside: :func:`clean` types every column and
drops (and logs by sheet row) the rows a model cannot use.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np
import pandas as pd

from plumbrule.errors import CellErrors, CellProblem, IntakeError, quote_list
from plumbrule.intake.cells import _blank_mask, _no_reason, to_labels, to_numbers
from plumbrule.intake.dates import to_dates
from plumbrule.intake.table import SheetTable, blank_cells, text_cells, text_factors


@dataclass(frozen=True)
class CleanData:
    """The used columns, typed (float / text / datetime64), only complete rows;
    ``dropped`` lists each dropped sheet row with the column and the reason."""

    data: pd.DataFrame
    dropped: pd.DataFrame
    # label columns read once per distinct text: column → (a code per row of ``data``,
    # the distinct labels); :func:`plumbrule.intake.levels.merge_levels` counts by them
    factors: dict = field(default_factory=dict, repr=False, compare=False)


def clean(table: SheetTable, numeric: Iterable[str] = (), categorical: Iterable[str] = (),
          date: str | None = None, hint_categorical: Iterable[str] = (),
          bad_cells: str = "refuse", date_format: str = "auto",
          amounts: Iterable[str] = ()) -> CleanData:
    """Type the used columns; drop (and log) rows with a missing value in any.

    ``hint_categorical`` names numeric predictor columns whose "not a number"
    message should suggest the ``categorical`` setting. A cell that cannot be what its
    column needs is found with every other such cell of the used columns: with
    ``bad_cells='refuse'`` they are raised together as one :class:`CellErrors`; with
    ``'set_aside'`` their rows are dropped, each logged with the cell's problem.
    ``date_format`` (auto, MDY, DMY, YMD) is the order of dates typed as text
    (see :mod:`plumbrule.intake.dates`). A used column holding formulas the file has no
    saved results for (``table.unsaved_formula_columns``) is refused while it has blanks:
    the blanks are not missing values but results nobody computed. ``amounts`` names
    numeric columns (the sale price) in which a TRUE/FALSE cell is refused, not read as 1/0.
    """
    numeric, categorical = list(dict.fromkeys(numeric)), list(dict.fromkeys(categorical))
    frame = table.frame
    wanted = numeric + categorical + ([date] if date is not None else [])
    missing = [c for c in dict.fromkeys(wanted) if c not in frame.columns]
    if missing:
        raise IntakeError(f"The sales table has no column {quote_list(missing)}. Columns are: "
                          f"{quote_list(list(frame.columns)[:12])}.", column=missing[0])
    for col in dict.fromkeys(wanted):
        if col in table.unsaved_formula_columns and _blank_mask(frame[col]).any():
            raise IntakeError(f"Column '{col}' holds formulas with no saved values: open the "
                              "workbook in a spreadsheet program and save it, then run again.",
                              column=col)
    hints, amounts = set(hint_categorical), set(amounts)
    typed: dict[str, pd.Series] = {}
    reasons: dict[str, pd.Series] = {}
    problems: list[CellProblem] = []
    factors: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    jobs: list[tuple[str, Any, dict]] = [
        (c, to_numbers, {"hint_categorical": c in hints, "booleans": c not in amounts})
        for c in numeric]
    jobs += [(c, to_labels, {}) for c in categorical]
    jobs += [(date, to_dates, {"date_format": date_format})] if date is not None else []
    for col, fn, kw in jobs:
        if fn is not to_numbers:
            quick = _on_distinct(table, col, fn, kw)
            if quick is not None:
                typed[col], reasons[col], codes = quick
                if fn is to_labels:
                    factors[col] = codes
                continue
        cells = frame[col] if fn is to_numbers else text_cells(table, col)   # labels: the text
        typed[col], reasons[col], found = _typed(fn, cells, col, kw)
        problems += found
    if problems and bad_cells != "set_aside":
        raise CellErrors(problems)
    order = list(typed)
    if not order:
        return CleanData(pd.DataFrame(index=frame.index), _empty_log())
    data = pd.DataFrame(typed, index=frame.index, copy=False)    # columns in ``order``
    masks = {c: r.notna().to_numpy() for c, r in reasons.items()}
    if not any(m.any() for m in masks.values()):      # the usual case: nothing to log
        return CleanData(data, _empty_log(), factors)
    why = pd.DataFrame(reasons, index=frame.index, copy=False)[order]
    bad = np.column_stack([masks[c] for c in order])
    any_bad = bad.any(axis=1)
    sub, sub_bad = why[any_bad], bad[any_bad]
    first = sub_bad.argmax(axis=1)
    cols = np.array(order, dtype=object)[first]
    text = sub.to_numpy(dtype=object)[np.arange(len(sub)), first].astype(str)
    also = sub_bad.sum(axis=1) - 1
    text = np.where(also > 0, np.char.add(np.char.add(text, " (and "),
                                          np.char.add(also.astype(str), " more missing)")), text)
    empty = blank_cells(table).loc[any_bad].all(axis=1).to_numpy()
    text = np.where(empty, "empty row", text)
    cols = np.where(empty, "", cols)
    dropped = pd.DataFrame({"row": sub.index.to_numpy(dtype=np.int64),
                            "column": pd.Series(cols, dtype=object).to_numpy(),
                            "reason": pd.Series(text, dtype=object).to_numpy()})
    return CleanData(data[~any_bad], dropped,
                     {c: (k[~any_bad], u) for c, (k, u) in factors.items()})


def _on_distinct(table: SheetTable, name: str, fn, kw: dict
                 ) -> tuple[pd.Series, pd.Series, tuple[np.ndarray, np.ndarray]] | None:
    """(values, reasons, (codes, distinct values)) of a label or date column the reader
    holds as distinct texts with a code per row (:func:`text_factors`), typed once per
    distinct text; None when the careful pass must type it cell by cell: a cell left out,
    any cell with a reason or a problem (their messages name the rows), or an error.
    ``fn`` types each cell on its own (a date column's day/month order is settled by the
    set of its texts), so spreading the distinct results over the codes is the careful
    result."""
    got = text_factors(table, name)
    if got is None:
        return None
    codes, uniq = got
    if not len(codes) or codes.min() < 0:
        return None
    held = np.bincount(codes, minlength=len(uniq)) > 0
    if not held.all():     # texts of rows left out (a totals row's): not in the set read
        uniq = uniq[held]
        codes = (np.cumsum(held) - 1).take(codes)
    try:
        values, reasons = fn(pd.Series(uniq, dtype=object), name, **kw)
    except (CellErrors, IntakeError):
        return None
    if reasons.notna().any():
        return None
    index = table.frame.index
    out = pd.Series(values.to_numpy().take(codes), index=index, dtype=values.dtype,
                    copy=False)
    if fn is to_labels:       # distinct texts may share a label ('Mill' and 'Mill ')
        label_codes, labels = pd.factorize(values.to_numpy(dtype=object))
        return out, _no_reason(index), (label_codes.take(codes), labels)
    return out, _no_reason(index), (codes, uniq)


def _typed(fn, cells: pd.Series, name: str, kw: dict
           ) -> tuple[pd.Series, pd.Series, list[CellProblem]]:
    """(values, reasons, problems) of one column: every unreadable cell is found (a typing
    function reports all cells of one kind at a time, so the reported cells are blanked and
    the column typed again) and becomes a missing value whose reason is its problem."""
    problems: list[CellProblem] = []
    for _ in range(8):             # each pass removes one kind of problem; few kinds exist
        try:
            values, reasons = fn(cells, name, **kw)
            break
        except CellErrors as err:
            problems += err.problems
            cells = cells.astype(object).copy()
            cells[[p.row for p in err.problems]] = None
    else:  # pragma: no cover - every pass blanks at least one cell of a finite column
        raise AssertionError("typing did not settle")
    if problems:
        reasons = reasons.astype(object).copy()
        for p in problems:
            reasons[p.row] = f"{p.value} {p.problem}"
    return values, reasons, problems


def _empty_log() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "reason": pd.Series(dtype=object)})

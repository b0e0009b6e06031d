"""The typed table and the log of rows set aside: :func:`clean` types every column and
drops (and logs by sheet row) the rows a model cannot use.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError, quote_list
from plumbrule.intake.cells import _blank_frame, to_dates, to_labels, to_numbers
from plumbrule.intake.table import SheetTable


@dataclass(frozen=True)
class CleanData:
    """The used columns, typed (float / text / datetime64), only complete rows;
    ``dropped`` lists each dropped sheet row with the column and the reason."""

    data: pd.DataFrame
    dropped: pd.DataFrame


def clean(table: SheetTable, numeric: Iterable[str] = (), categorical: Iterable[str] = (),
          date: str | None = None, hint_categorical: Iterable[str] = ()) -> CleanData:
    """Type the used columns; drop (and log) rows with a missing value in any.

    ``hint_categorical`` names numeric predictor columns whose "not a number"
    message should suggest the ``categorical`` setting. Raises
    :class:`IntakeError` for a cell that cannot be what its column needs.
    """
    numeric, categorical = list(dict.fromkeys(numeric)), list(dict.fromkeys(categorical))
    frame = table.frame
    wanted = numeric + categorical + ([date] if date is not None else [])
    missing = [c for c in dict.fromkeys(wanted) if c not in frame.columns]
    if missing:
        raise IntakeError(f"The sales table has no column {quote_list(missing)}. Columns are: "
                          f"{quote_list(list(frame.columns)[:12])}.", column=missing[0])
    hints = set(hint_categorical)
    typed: dict[str, pd.Series] = {}
    reasons: dict[str, pd.Series] = {}
    for col in numeric:
        typed[col], reasons[col] = to_numbers(frame[col], col, hint_categorical=col in hints)
    for col in categorical:
        typed[col], reasons[col] = to_labels(frame[col], col)
    if date is not None:
        typed[date], reasons[date] = to_dates(frame[date], date)
    order = list(typed)
    if not order:
        return CleanData(pd.DataFrame(index=frame.index), _empty_log())
    data = pd.DataFrame(typed, index=frame.index, copy=False)[order]
    masks = {c: r.notna().to_numpy() for c, r in reasons.items()}
    if not any(m.any() for m in masks.values()):      # the usual case: nothing to log
        return CleanData(data, _empty_log())
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
    empty = _blank_frame(frame[any_bad]).all(axis=1).to_numpy()
    text = np.where(empty, "empty row", text)
    cols = np.where(empty, "", cols)
    dropped = pd.DataFrame({"row": sub.index.to_numpy(dtype=np.int64),
                            "column": pd.Series(cols, dtype=object).to_numpy(),
                            "reason": pd.Series(text, dtype=object).to_numpy()})
    return CleanData(data[~any_bad], dropped)


def _empty_log() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "reason": pd.Series(dtype=object)})

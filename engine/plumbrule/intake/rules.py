"""Sales that are not market evidence, set aside before anything is fitted: repeated rows
(``duplicates``) and sales outside the validity codes the user keeps (``keep_only``).
Each rule returns the rows it keeps and screening-log records (row, column, value, rule,
limit, reason) for the rest."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError

DUPLICATE, SALE_FILTER = "duplicate", "sale filter"
_LOG = ["row", "column", "value", "rule", "limit", "reason"]


def duplicate_rows(data: pd.DataFrame, ids: pd.Series | None, mode: str,
                   ids_unique: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Rows identical in every used column (and in the ID when there is one): all but the
    first are set aside (``mode`` 'set_aside'), kept ('keep') or refused ('refuse').
    ``ids_unique``: the caller knows every ID differs (over these rows or more).
    Returns (kept rows, log)."""
    if mode == "keep" or len(data) < 2:
        return data, _empty()
    if ids is not None and ids_unique:
        return data, _empty()          # rows with different IDs are never the same sale
    if ids is not None and pd.Index(ids.reindex(data.index).to_numpy(dtype=object),
                                    dtype=object).is_unique:
        return data, _empty()          # rows with different IDs are never the same sale
    key = data if ids is None else data.assign(__id=ids.reindex(data.index))
    hashed = pd.util.hash_pandas_object(key, index=False)
    repeat = hashed.duplicated(keep="first").to_numpy()
    if not repeat.any():
        return data, _empty()
    first_row = pd.Series(data.index.to_numpy(), index=hashed.to_numpy()).groupby(level=0).first()
    same_as = first_row.reindex(hashed.to_numpy()[repeat]).to_numpy()
    rows = data.index[repeat]
    if mode == "refuse":
        raise IntakeError(f"Sheet row {rows[0]} repeats sheet row {same_as[0]} in every column "
                          f"used ({int(repeat.sum())} repeated rows in all). Delete the copies, "
                          "or set duplicates to set_aside.", row=int(rows[0]),
                          )
    log = pd.DataFrame({"row": rows.to_numpy(np.int64), "column": "", "value": np.nan,
                        "rule": DUPLICATE, "limit": np.nan,
                        "reason": "same as sheet row " + pd.Series(same_as).astype(str)})[_LOG]
    return data[~repeat], log


def sale_filter(data: pd.DataFrame, filters: Sequence[tuple[str, tuple[str, ...]]]
                ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Keep sales whose column holds one of the values (case and spacing ignored), for
    each (column, values) of ``keep_only``. Returns (kept rows, log)."""
    logs = []
    for column, values in filters:
        wanted = {_fold(v) for v in values}
        cells = data[column]
        keep = _folded(cells).isin(wanted).to_numpy(bool)
        if (~keep).any():
            out = cells[~keep]
            logs.append(pd.DataFrame({
                "row": out.index.to_numpy(np.int64), "column": column, "value": np.nan,
                "rule": SALE_FILTER, "limit": np.nan,
                "reason": (f"{column} is '" + out.astype(str) + "'").to_numpy()})[_LOG])
            data = data[keep]
    return data, (pd.concat(logs, ignore_index=True) if logs else _empty())


def _fold(v) -> str:
    return " ".join(str(v).split()).casefold()


def _folded(cells: pd.Series) -> pd.Series:
    return cells.astype(str).str.split().str.join(" ").str.casefold()


def _empty() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "value": pd.Series(dtype=float), "rule": pd.Series(dtype=object),
                         "limit": pd.Series(dtype=float), "reason": pd.Series(dtype=object)})

"""Knowing a sale by what it is, not where it sits: IDs from the ``id_column``, and a
64-bit key per sale (its ID, else its cells) that sorting, inserting or deleting other
rows cannot change."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError
from plumbrule.intake.cells import _no_reason, to_labels
from plumbrule.intake.table import SheetTable, blank_cells, plain_integers, text_cells


def id_labels(table: SheetTable, column: str) -> tuple[pd.Series, pd.Series]:
    """``to_labels`` of the ID column's cells (labels, reasons), indexed like
    ``table.frame``. A CSV column of integers each written as Python writes them is its own
    labels: digits and a sign are plain text (:func:`cells.plain_text`), so the per-cell
    scan that finds so is skipped (a million IDs: about 0.05 s)."""
    cells = text_cells(table, column)
    if plain_integers(table, column) is not None:
        return (pd.Series(cells.to_numpy(dtype=object), index=cells.index, dtype=object),
                _no_reason(cells.index))
    return to_labels(cells, column)


def sale_ids(table: SheetTable, column: str, used: Sequence[str],
             labels: tuple[pd.Series, pd.Series] | None = None,
             unique: bool = False) -> pd.Series:
    """The ID of each sale (text; 104.0 → '104'), indexed by sheet row, for the rows that
    hold anything in the ``used`` columns. A blank or repeated ID among them is an error
    naming the rows. ``labels``: the column's ``to_labels`` (labels, reasons) over these
    rows or more, when the caller has it (each cell is typed on its own, so a subset of
    it is the subset's). ``unique``: the caller knows the labels all differ."""
    frame = table.frame
    filled = ~blank_cells(table, list(dict.fromkeys([*used, column]))).all(axis=1)
    if labels is None:
        ids, why = id_labels(table, column)
        ids, why = ids[filled], why[filled]
    elif filled.all() and labels[0].index.equals(frame.index):
        ids, why = labels
    else:
        rows = frame.index[filled.to_numpy()]
        ids, why = labels[0].reindex(rows), labels[1].reindex(rows)
    blank = why.notna()
    if blank.any():
        rows = ids.index[blank.to_numpy()]
        raise IntakeError(f"Column '{column}' (the ID column) is blank in {_rows(rows)}. Give "
                          "every sale an ID, or clear the id_column setting.", column=column,
                          row=int(rows[0]))
    if (unique and labels is not None) or pd.Index(ids.to_numpy(dtype=object),
                                                   dtype=object).is_unique:
        return ids.astype(object)
    twice = ids.duplicated(keep=False)
    if twice.any():
        first = ids[twice].iloc[0]
        rows = ids.index[(ids == first).to_numpy()]
        more = int(ids[twice].nunique()) - 1
        extra = f" ({more} more IDs are repeated)" if more else ""
        raise IntakeError(f"Column '{column}' (the ID column): ID '{first}' is on {_rows(rows)}"
                          f"{extra}. Each sale needs its own ID: correct the ID, or delete the "
                          "repeated sale.", column=column, row=int(rows[0]))
    return ids.astype(object)


def rows_of_ids(ids: pd.Series, wanted: Sequence[tuple[str, str]], setting: str
                ) -> tuple[tuple[int, str], ...]:
    """(sheet row, reason) for each (ID, reason); an ID not among the sales is an error
    naming it."""
    by_id = pd.Series(ids.index.to_numpy(), index=ids.to_numpy())
    folded = {str(k).casefold(): k for k in by_id.index}
    out = []
    for ident, reason in wanted:
        key = ident if ident in by_id.index else folded.get(ident.casefold())
        if key is None:
            raise IntakeError(f"Setting '{setting}': there is no sale with ID '{ident}'. Check "
                              "the ID against the ID column.", column=None)
        out.append((int(by_id[key]), reason))
    return tuple(out)


def sale_hashes(data: pd.DataFrame, ids: pd.Series | None = None) -> np.ndarray:
    """A uint64 key per row of ``data`` (typed used columns, index: sheet rows): from its
    ID when there is one, else from its typed values — so '$245,000' typed as text and
    245000 typed as a number give one key, and a copy of a sale has the same key."""
    if ids is not None:
        text = ids if ids.index.equals(data.index) else ids.reindex(data.index)
        v = text.to_numpy(dtype=object)
        if pd.api.types.infer_dtype(v, skipna=False) == "string":    # texts, none missing
            return _one_column_key(pd.util.hash_array(v, categorize=False))
        values = pd.DataFrame({"id": text.astype(str).to_numpy()})
    else:
        values = data.reset_index(drop=True)
    return pd.util.hash_pandas_object(values, index=False).to_numpy(np.uint64)


def _one_column_key(hashed: np.ndarray) -> np.ndarray:
    """What ``pd.util.hash_pandas_object`` makes of a one-column frame (index=False) from
    its column's ``pd.util.hash_array``: the column hash mixed as pandas combines columns.
    The IDs are hashed without first factorising them (all different: nothing to share);
    tests compare it with hash_pandas_object itself."""
    with np.errstate(over="ignore"):
        out = np.zeros_like(hashed) + np.uint64(0x345678)
        out ^= hashed
        out *= np.uint64(1000003)
        out += np.uint64(97531)
    return out


def stable_uniform(keys: np.ndarray, seed: int, stream: int) -> np.ndarray:
    """A number in [0, 1) per key, fixed by (seed, stream, key): the splitmix64 finaliser
    (Steele, Lea & Flood 2014) of the key mixed with the seed, so each sale's draw depends
    on nothing but itself."""
    with np.errstate(over="ignore"):
        z = keys.astype(np.uint64) ^ np.uint64((seed * 0x9E3779B97F4A7C15 + stream)
                                               & 0xFFFFFFFFFFFFFFFF)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) / float(2 ** 53)


def _rows(rows) -> str:
    shown = ", ".join(str(r) for r in list(rows)[:10])
    more = f" and {len(rows) - 10} more" if len(rows) > 10 else ""
    return f"sheet row{'s' if len(rows) > 1 else ''} {shown}{more}"

"""One spelling per category level: 'good', 'Good ' and 'GOOD' are one level.

Spellings that differ only in case or spacing are merged into the most frequent spelling
(ties: the first in sorted order); ``level_map`` maps other spellings explicitly (applied
first). The ``level_merges`` table says what was merged, so nothing happens unseen.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

MERGE_COLUMNS = ["column", "spelling", "merged_into", "sales"]


def fold(text: pd.Series) -> pd.Series:
    """The comparison key of a spelling: spacing collapsed, case folded."""
    return text.astype(str).str.split().str.join(" ").str.casefold()


def _fold_one(text) -> str:
    """:func:`fold` of one spelling (the same key; a column's few levels are folded one by
    one without a pandas call each)."""
    return " ".join(str(text).split()).casefold()


def merge_levels(data: pd.DataFrame, columns: Sequence[str],
                 level_map: Sequence[tuple[str, str, str]] = (),
                 factors: dict[str, tuple[np.ndarray, np.ndarray]] | None = None
                 ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(data with one spelling per level in each categorical column, level_merges table:
    column, spelling, merged_into, sales). ``level_map`` holds (column, spelling, level)
    with the column already matched to a header. ``factors``: column → (a code per row of
    ``data``, the distinct labels), where intake has them (CleanData.factors)."""
    out = data
    recs = []
    for col in columns:
        cells = data[col]
        known = (factors or {}).get(col)
        counts = _counts(cells) if known is None or len(known[0]) != len(cells) \
            else _counted(known[0], known[1], name=cells.name)
        if not len(counts):
            continue
        spell = pd.Series(counts.index.astype(str), index=counts.index)
        explicit = {_fold_one(a): b for c, a, b in level_map if c == col}
        keys = fold(spell)
        target_of = keys.map(explicit).where(keys.isin(list(explicit)), keys)
        # within each key the most frequent spelling wins (ties: first in sorted order);
        # an explicit target keeps the map's own spelling
        frame = pd.DataFrame({"spelling": spell.to_numpy(), "key": fold(target_of).to_numpy(),
                              "n": counts.to_numpy()})
        frame = frame.sort_values(["key", "n", "spelling"], ascending=[True, False, True],
                                  kind="stable")
        winner = frame.groupby("key", sort=False)["spelling"].first()
        mapped = {e_key: e_val for e_key, e_val in
                  ((_fold_one(b), b) for c, _, b in level_map if c == col)}
        winner = winner.where(~winner.index.isin(list(mapped)),
                              pd.Series(mapped).reindex(winner.index))
        into = frame["key"].map(winner)
        changed = (into != frame["spelling"]).to_numpy()
        if changed.any():
            mapping = dict(zip(frame["spelling"][changed], into[changed], strict=True))
            out = out.assign(**{col: cells.replace(mapping)})
            recs.append(pd.DataFrame({"column": col, "spelling": frame["spelling"][changed],
                                      "merged_into": into[changed],
                                      "sales": frame["n"][changed].astype(np.int64)}))
    merges = (pd.concat(recs, ignore_index=True) if recs else
              pd.DataFrame({"column": pd.Series(dtype=object),
                            "spelling": pd.Series(dtype=object),
                            "merged_into": pd.Series(dtype=object),
                            "sales": pd.Series(dtype=np.int64)}))
    return out, merges[MERGE_COLUMNS]


def _counts(cells: pd.Series) -> pd.Series:
    """How many cells hold each value (blanks left out), by value: a factorisation and a
    bincount (value_counts of text costs about twice as much)."""
    codes, uniq = pd.factorize(cells.to_numpy(dtype=object))
    n = np.bincount(codes[codes >= 0], minlength=len(uniq)).astype(np.int64)
    return pd.Series(n, index=pd.Index(uniq, dtype=object, name=cells.name), name="count")


def _counted(codes: np.ndarray, labels: np.ndarray, name=None) -> pd.Series:
    """:func:`_counts` from a code per cell and the distinct labels (no missing cell)."""
    n = np.bincount(codes, minlength=len(labels)).astype(np.int64)
    held = n > 0
    return pd.Series(n[held], index=pd.Index(labels[held], dtype=object, name=name),
                     name="count")


def canonical_levels(values: pd.Series, known: Sequence[str],
                     level_map: Sequence[tuple[str, str]] = ()) -> pd.Series:
    """New rows' labels (subjects, comparables) in the spelling the model learned: the
    explicit (spelling, level) pairs first, then case and spacing ignored. A label that
    matches no known level is left as typed (the caller reports it)."""
    keys = fold(values)
    explicit = {_fold_one(a): _fold_one(b) for a, b in level_map}
    if explicit:
        keys = keys.map(explicit).where(keys.isin(list(explicit)), keys)
    spelled = {_fold_one(k): k for k in known}
    out = keys.map(spelled)
    return out.where(out.notna(), values)


def one_edit_apart(levels: Sequence[str]) -> list[tuple[str, str]]:
    """Pairs of levels one edit apart (insert, delete, substitute or swap two neighbours:
    'Excelent' / 'Excellent'), case ignored. Levels are few: pairwise is fine."""
    out = []
    names = list(levels)
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            if _one_edit(a.casefold(), b.casefold()):
                out.append((a, b))
    return out


def _one_edit(a: str, b: str) -> bool:
    if a == b or abs(len(a) - len(b)) > 1:
        return False
    if len(a) == len(b):
        diff = [i for i in range(len(a)) if a[i] != b[i]]
        return len(diff) == 1 or (len(diff) == 2 and diff[1] == diff[0] + 1
                                  and a[diff[0]] == b[diff[1]] and a[diff[1]] == b[diff[0]])
    if len(a) > len(b):
        a, b = b, a
    i = 0
    while i < len(a) and a[i] == b[i]:
        i += 1
    return a[i:] == b[i + 1:]

"""A small evaluator for the formulas plumbrule writes into its live block.

It understands exactly the subset the block uses (cell and range references on
one sheet, + - * / ^, comparison with =, >= and <, and SUMPRODUCT, SQRT, LN, EXP, IF,
MAX, MIN, DATE, COUNTIF), following the spreadsheet semantics of those functions
(SUMPRODUCT multiplies same-shaped ranges elementwise and sums; text compares without
regard to case; dates are serial days since 1899-12-30, DATE(y, m, d) the serial of that
day). A formula outside the subset
raises, so a new function in the block cannot slip past the tests unevaluated.
"""

from __future__ import annotations

import datetime as dt
import math
import re

import numpy as np
from openpyxl.utils import column_index_from_string

_RANGE = re.compile(r"\$?([A-Z]{1,3})\$?(\d+):\$?([A-Z]{1,3})\$?(\d+)")
_CELL = re.compile(r"\$?([A-Z]{1,3})\$?(\d+)")
_ALLOWED = {"SUMPRODUCT", "SQRT", "LN", "EXP", "IF", "MAX", "MIN", "DATE", "COUNTIF"}
_EPOCH = dt.datetime(1899, 12, 30)


class Evaluator:
    def __init__(self, ws):
        self.ws = ws
        self.cache: dict[tuple[int, int], object] = {}

    def value(self, ref: str):
        m = _CELL.fullmatch(ref.replace("$", ""))
        return self._cell(int(m.group(2)), column_index_from_string(m.group(1)))

    def _cell(self, row: int, col: int):
        key = (row, col)
        if key not in self.cache:
            v = self.ws.cell(row=row, column=col).value
            if isinstance(v, str) and v.startswith("=") and \
                    self.ws.cell(row=row, column=col).data_type == "f":
                v = self.formula(v)
            elif isinstance(v, dt.datetime):
                v = (v - _EPOCH).total_seconds() / 86400.0
            self.cache[key] = v
        return self.cache[key]

    def _range(self, c1, r1, c2, r2):
        cols = range(column_index_from_string(c1), column_index_from_string(c2) + 1)
        rows = range(int(r1), int(r2) + 1)
        return _Range([[self._cell(r, c) for c in cols] for r in rows])

    def formula(self, text: str):
        body = text[1:]
        for name in re.findall(r"([A-Z]+)\(", body):
            if name not in _ALLOWED:
                raise ValueError(f"function {name} is outside the evaluated subset")
        py = _RANGE.sub(lambda m: f"_R('{m[1]}',{m[2]},'{m[3]}',{m[4]})", body)
        py = re.sub(r"(?<![A-Za-z_'])\$?([A-Z]{1,3})\$?(\d+)(?![\d(])",
                    lambda m: f"_C({m[2]},{column_index_from_string(m[1])})", py)
        py = py.replace("^", "**")
        py = re.sub(r"(_C\(\d+,\d+\))=(_C\(\d+,\d+\)|\"[^\"]*\")", r"_EQ(\1,\2)", py)
        py = re.sub(r"\)=(\d+)", r")==\1", py)
        if re.search(r"(?<![<>!=])=(?!=)", py):
            raise ValueError(f"comparison outside the evaluated subset: {text}")
        env = {"_EQ": _eq, "_R": self._range, "_C": self._cell, "SUMPRODUCT": _sumproduct,
               "SQRT": math.sqrt, "LN": math.log, "EXP": math.exp, "MAX": max, "MIN": min,
               "DATE": _date,
               "IF": lambda c, a, b: a if c else b, "COUNTIF": _countif}
        return eval(py, {"__builtins__": {}}, env)   # noqa: S307 - our own test formulas


class _Range:
    def __init__(self, rows):
        self.rows = rows

    def array(self):
        return np.array([[np.nan if v is None else v for v in r] for r in self.rows], dtype=object)


def _sumproduct(*ranges):
    arrays = [r.array() for r in ranges]
    shape = arrays[0].shape
    if any(a.shape != shape for a in arrays):
        raise ValueError("SUMPRODUCT ranges differ in shape (#VALUE! in a spreadsheet)")
    prod = np.ones(shape, dtype=float)
    for a in arrays:
        prod = prod * np.array([[float(v) if isinstance(v, (int, float)) else 0.0 for v in row]
                                for row in a])
    return float(prod.sum())


def _countif(rng, value):
    flat = [v for row in rng.rows for v in row]
    if isinstance(value, str):
        return sum(isinstance(v, str) and v.casefold() == value.casefold() for v in flat)
    return sum(v == value for v in flat)


def _date(year, month, day):
    """The serial day number of a date (days since 1899-12-30, as spreadsheets count)."""
    return float((dt.datetime(int(year), int(month), int(day)) - _EPOCH).days)


def _eq(a, b):
    if isinstance(a, str) and isinstance(b, str):
        return a.casefold() == b.casefold()
    return a == b

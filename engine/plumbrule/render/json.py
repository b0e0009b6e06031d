"""Analysis tables → one JSON object (full-precision floats; NaN and ±inf as null).

Tables are turned into plain values a column at a time (numpy does the NaN → None and
the numbers; only text columns go cell by cell) and written by orjson, so a 200k-sale
residual table is not built value by value in Python."""

from __future__ import annotations

import datetime as _dt
from typing import Any, Mapping

import pandas as pd

from plumbrule.render.plain import plain_value


def jsonable(value: Any) -> Any:
    """Plain JSON values: numpy scalars unwrapped, NaN/inf → None, dates → ISO text."""
    if isinstance(value, pd.DataFrame):
        return frame_records(value)
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    value = plain_value(value)
    if isinstance(value, (_dt.date, _dt.time)):
        return value.isoformat()
    return value


def frame_records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """One dict per row, {column: plain value}, in column order."""
    cols = [str(c) for c in frame.columns]
    values = [column_values(frame.iloc[:, j]) for j in range(frame.shape[1])]
    return [dict(zip(cols, row, strict=True)) for row in zip(*values, strict=True)]


def column_values(col: pd.Series) -> list[Any]:
    """A column as plain JSON values, the same as :func:`jsonable` of each cell: floats
    with NaN/±inf as None, ints, bools, dates as ISO text; other columns cell by cell."""
    import numpy as np
    kind = col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"
    if kind == "f":
        v = col.to_numpy(dtype=float)
        out = v.astype(object)
        out[~np.isfinite(v)] = None
        return out.tolist()
    if kind in "iub":
        return col.to_numpy().tolist()
    if kind == "M":
        v = col.to_numpy(dtype="datetime64[us]")
        whole = v.astype("datetime64[s]")
        if np.all((v == whole) | np.isnat(v)):    # no fraction of a second: the ISO text
            text = np.datetime_as_string(whole, unit="s").astype(object)
            text[np.isnat(v)] = None
            return text.tolist()
    return [jsonable(v) for v in col.tolist()]


def analysis_json(result, extra: Mapping[str, Any] | None = None) -> str:
    """The ``--json`` object of ``plumbrule fit``: one key per table; ``fit`` is one record."""
    out: dict[str, Any] = {}
    for name, table in result.tables.items():
        recs = frame_records(table)
        out[name] = recs[0] if name == "fit" and recs else recs
    out.update(jsonable(dict(extra or {})))
    return dumps(out)


def dumps(value: Any) -> str:
    """JSON text of plain values (orjson: UTF-8, shortest round-trip floats)."""
    import orjson
    return orjson.dumps(value, default=_fallback).decode("utf-8")


def _fallback(value: Any) -> Any:
    """Anything json cannot write natively (arrays, Decimal ...) as its plain form."""
    if hasattr(value, "tolist"):
        return jsonable(value.tolist())
    value = jsonable(value)
    return value if isinstance(value, (int, float, str, bool, type(None))) else str(value)

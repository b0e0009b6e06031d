"""Analysis tables → one JSON object (full-precision floats; NaN and ±inf as null)."""

from __future__ import annotations

import datetime as _dt
import json
import math
from typing import Any, Mapping

import numpy as np
import pandas as pd


def jsonable(value: Any) -> Any:
    """Plain JSON values: numpy scalars unwrapped, NaN/inf → None, dates → ISO text."""
    if isinstance(value, pd.DataFrame):
        return frame_records(value)
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, (pd.Timestamp, _dt.date)):
        return value.isoformat()
    if value is pd.NaT or (value is not None and not isinstance(value, str) and pd.isna(value)):
        return None
    return value


def frame_records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    cols = [str(c) for c in frame.columns]
    return [dict(zip(cols, (jsonable(v) for v in row)))
            for row in frame.itertuples(index=False, name=None)]


def analysis_json(result, extra: Mapping[str, Any] | None = None) -> str:
    """The ``--json`` object of ``plumbrule fit``: one key per table; ``fit`` is one record."""
    out: dict[str, Any] = {}
    for name, table in result.tables.items():
        recs = frame_records(table)
        out[name] = recs[0] if name == "fit" and recs else recs
    out.update(jsonable(dict(extra or {})))
    return json.dumps(out, allow_nan=False, ensure_ascii=False, default=_fallback)


def _fallback(value: Any) -> Any:
    """Anything json cannot write natively (numpy dates, Decimal ...) as its plain form."""
    if isinstance(value, np.datetime64):
        return None if np.isnat(value) else pd.Timestamp(value).isoformat()
    if isinstance(value, np.ndarray):
        return [jsonable(v) for v in value.tolist()]
    return str(value)

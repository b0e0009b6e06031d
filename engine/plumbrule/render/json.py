"""Analysis tables → one JSON object (full-precision floats; NaN and ±inf as null)."""

from __future__ import annotations

import datetime as _dt
import json
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
    cols = [str(c) for c in frame.columns]
    return [dict(zip(cols, (jsonable(v) for v in row), strict=False))
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
    """Anything json cannot write natively (arrays, Decimal ...) as its plain form."""
    if hasattr(value, "tolist"):
        return jsonable(value.tolist())
    value = jsonable(value)
    return value if isinstance(value, (int, float, str, bool, type(None))) else str(value)

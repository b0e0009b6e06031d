"""Analysis tables → one JSON object (full-precision floats; NaN and ±inf as null).

Two writers give the same object. :func:`frame_records` turns a table into plain Python
records (a dict per row) for callers that add to them. The ``--json`` writer
(:func:`analysis_json_chunks`) never builds a Python value or a dict per cell: orjson writes
a block of rows' column as one array (numbers) or one list (text, dates), the cells are found
in that text by numpy (commas outside quotes), and the rows are laid out in a byte matrix,
one zero-padded slot per key and per column, whose zeros are then dropped (JSON text holds
none). Only columns mixing kinds, or text needing escapes, go cell by cell. Text goes out a
block of rows at a time, so a caller writing to a stream never holds the whole text.

:func:`reference_json` is the careful cell-by-cell writer both are tested against."""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import IO, Any, Iterator, Mapping

import pandas as pd

from plumbrule.render.plain import plain_value

# Rows per block of the streaming writer: a residual table's block is a few MB of text, and
# the per-block numpy calls are noise beside the work.
BLOCK_ROWS = 20_000
# Largest byte matrix the row layout builds at once (a wide text column gets fewer rows).
MATRIX_BYTES = 1 << 24


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
    with NaN/±inf as None, ints, bools, dates as ISO text, text with missing as None;
    only columns mixing kinds go cell by cell."""
    import numpy as np
    kind = _kind(col)
    if kind == "f":
        v = col.to_numpy(dtype=float)
        out = v.astype(object)
        out[~np.isfinite(v)] = None
        return out.tolist()
    if kind in "iub":
        return col.to_numpy().tolist()
    if kind == "M":
        text, at = _iso_dates(col)
        return text[at].tolist()
    text = _text_or_missing(col)
    if text is not None:
        return text.tolist()
    return [jsonable(v) for v in col.tolist()]


@dataclass(frozen=True)
class ColumnText:
    """A column's cells as JSON text (UTF-8): cell i is ``buf[starts[i]:starts[i] + lens[i]]``
    (byte offsets and lengths, numpy intp arrays; ``buf`` a uint8 array)."""

    buf: Any
    starts: Any
    lens: Any

    def texts(self) -> list[bytes]:
        """Each cell's JSON text."""
        raw = self.buf.tobytes()
        return [raw[a:a + n] for a, n in zip(self.starts.tolist(), self.lens.tolist(),
                                             strict=True)]


def column_json(col: pd.Series) -> ColumnText:
    """Each cell's JSON text, the same as ``orjson.dumps(jsonable(cell))``, found without a
    Python call per cell unless the column mixes kinds or its text needs escapes."""
    import numpy as np
    import orjson
    kind = _kind(col)
    if kind in "fiub":
        # one orjson call writes the whole array (NaN, ±inf → null; floats shortest
        # round-trip); no number, true, false or null holds a comma
        v = col.to_numpy(dtype=float) if kind == "f" else col.to_numpy()
        v = np.ascontiguousarray(v, dtype=v.dtype.newbyteorder("="))  # orjson: native order
        raw = orjson.dumps(v, option=orjson.OPT_SERIALIZE_NUMPY)
        return _split(np.frombuffer(raw, np.uint8)[1:-1], len(v), quoted=False)
    if kind == "M":
        # each distinct date written once; the cells point at their date's text
        text, at = _iso_dates(col)
        dates = _split(np.frombuffer(orjson.dumps(text.tolist()), np.uint8)[1:-1], len(text),
                       quoted=True)             # ISO text: no comma, nothing to escape
        return ColumnText(dates.buf, dates.starts[at], dates.lens[at])
    text = _text_or_missing(col)
    if text is not None:
        buf = np.frombuffer(orjson.dumps(text.tolist()), np.uint8)[1:-1]
        # without a backslash nothing was escaped, so every '"' opens or closes a string
        # and a comma outside the strings parts two cells
        if not (buf == 92).any():
            return _split(buf, len(text), quoted=True)
        texts = list(map(orjson.dumps, text))
    else:
        texts = [orjson.dumps(jsonable(v), default=_fallback) for v in col.tolist()]
    lens = np.fromiter(map(len, texts), dtype=np.intp, count=len(texts))
    return ColumnText(np.frombuffer(b"".join(texts), np.uint8), np.cumsum(lens) - lens, lens)


def _split(buf, n: int, *, quoted: bool) -> ColumnText:
    """``n`` cells written one after another with a comma between (commas inside a quoted
    string skipped when ``quoted``)."""
    import numpy as np
    comma = buf == 44
    if quoted and np.count_nonzero(comma) != n - 1:   # some text holds a comma
        comma &= (np.cumsum(buf == 34) & 1) == 0
    ends = np.flatnonzero(comma)
    starts = np.zeros(n, dtype=np.intp)
    starts[1:] = ends + 1
    stops = np.full(n, len(buf), dtype=np.intp)
    stops[:-1] = ends
    return ColumnText(buf, starts, stops - starts)


def _kind(col: pd.Series) -> str:
    """numpy's dtype kind letter; "O" for object and every pandas extension type."""
    import numpy as np
    return col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"


def _iso_dates(col: pd.Series):
    """A datetime column's distinct dates as an object array of ISO text (seconds, with
    microseconds where a date has a fraction, as ``datetime.isoformat`` writes it; None for
    NaT) and each cell's place in it (intp)."""
    import numpy as np
    # sale dates repeat: each distinct date is written once
    ticks, at = np.unique(col.to_numpy(dtype="datetime64[us]").view(np.int64),
                          return_inverse=True)  # integers sort faster than datetimes
    v = ticks.view("datetime64[us]")
    whole = v.astype("datetime64[s]")
    text = np.datetime_as_string(whole, unit="s").astype(object)
    frac = (v != whole) & ~np.isnat(v)
    if frac.any():
        text[frac] = np.datetime_as_string(v[frac], unit="us").astype(object)
    text[np.isnat(v)] = None
    return text, at.reshape(-1)


def _text_or_missing(col: pd.Series):
    """An object array of the column's values with None for missing ones, when every other
    value is text (str); None when the column holds anything else."""
    from pandas.api.types import infer_dtype
    if isinstance(col.dtype, pd.StringDtype):      # text or missing by its type
        return col.to_numpy(dtype=object, na_value=None)
    values = col.to_numpy(dtype=object, copy=True)
    missing = pd.isna(values)       # what plain_value makes None: None, NaN, NaT, pd.NA ...
    if infer_dtype(values[~missing], skipna=False) not in ("string", "empty"):
        return None
    values[missing] = None
    return values


def table_chunks(frame: pd.DataFrame, *, single: bool = False,
                 block: int | None = None) -> Iterator[bytes]:
    """The JSON text of ``frame`` as a list of row objects (``single``: the first row's
    object alone, ``[]`` when there is none), the same as ``orjson.dumps(frame_records)``,
    in UTF-8 pieces of at most ``block`` rows (default :data:`BLOCK_ROWS`)."""
    import orjson
    block = block or BLOCK_ROWS
    # dict(zip(columns, row)) keeps a repeated name once, where it first stands, with the
    # value of its last column: the same here
    last = {str(c): j for j, c in enumerate(frame.columns)}
    n = len(frame) if last else 0           # no columns: no records (as frame_records)
    if single:
        n = min(n, 1)
        if n == 0:
            yield b"[]"
            return
    heads = [(b"," if i else b"{") + orjson.dumps(name) + b":" for i, name in enumerate(last)]
    if not single:
        yield b"["
    for start in range(0, n, block):
        stop = min(start + block, n)
        part = frame.iloc[start:stop]
        cols = [column_json(part.iloc[:, j]) for j in last.values()]
        yield from _rows(heads, cols, stop - start, last_block=stop == n)
    if not single:
        yield b"]"


def _rows(heads: list[bytes], cols: list[ColumnText], n: int, *,
          last_block: bool) -> Iterator[bytes]:
    """Row objects, head and cell text column by column, each followed by a comma (not the
    very last): laid out in a byte matrix, one fixed-width slot per head and per column,
    cells zero-padded; JSON text holds no zero byte, so dropping the zeros leaves the rows."""
    import numpy as np
    from numpy.lib.stride_tricks import sliding_window_view
    widths = [int(c.lens.max()) for c in cols]
    width = sum(widths) + sum(map(len, heads)) + 2
    text = sum(int(c.lens.sum()) for c in cols) + n * (width - sum(widths))
    if width * n > 4 * text + MATRIX_BYTES:
        # a few very long cells would make every row's slot that wide: cell by cell instead
        yield _joined(heads, cols, n, last_block=last_block)
        return
    step = max(1, MATRIX_BYTES // width)       # rows at a time: a bounded matrix
    padded = [np.concatenate([c.buf, np.zeros(w, np.uint8)]) for c, w in zip(cols, widths,
                                                                             strict=True)]
    # cell lengths in the smallest integer type that holds the slot width (a faster
    # comparison); None where every cell has the same length
    narrow = [None if int(c.lens.min()) == w else
              c.lens.astype(np.uint8 if w < 256 else np.uint32 if w < 2**32 else np.intp)
              for c, w in zip(cols, widths, strict=True)]
    row = np.zeros(width, dtype=np.uint8)       # the heads in place, zeros for the cells
    slots, pos = [], 0
    for head, w in zip(heads, widths, strict=True):
        row[pos:pos + len(head)] = np.frombuffer(head, np.uint8)
        slots.append(pos + len(head))
        pos += len(head) + w
    row[pos:] = np.frombuffer(b"},", np.uint8)
    for r0 in range(0, n, step):
        r1 = min(r0 + step, n)
        out = np.broadcast_to(row, (r1 - r0, width)).copy()
        for col, w, pad, pos, lens in zip(cols, widths, padded, slots, narrow, strict=True):
            cells = sliding_window_view(pad, w)[col.starts[r0:r1]]     # a copy: writable
            if lens is not None:                 # not every cell fills its slot
                cells[np.arange(w, dtype=lens.dtype) >= lens[r0:r1, None]] = 0
            out[:, pos:pos + w] = cells
        if last_block and r1 == n:
            out[-1, -1] = 0
        yield out[out != 0].tobytes()


def _joined(heads: list[bytes], cols: list[ColumnText], n: int, *, last_block: bool) -> bytes:
    """The rows of :func:`_rows` joined from each cell's text (a bytes object per cell)."""
    import numpy as np
    pieces = np.empty((n, 2 * len(cols) + 1), dtype=object)
    for i, (head, col) in enumerate(zip(heads, cols, strict=True)):
        pieces[:, 2 * i] = head
        pieces[:, 2 * i + 1] = col.texts()
    pieces[:, -1] = b"},"
    if last_block:
        pieces[-1, -1] = b"}"
    return b"".join(pieces.ravel().tolist())


def analysis_json_chunks(result, extra: Mapping[str, Any] | None = None) -> Iterator[bytes]:
    """The ``--json`` object of ``plumbrule fit`` as UTF-8 pieces: one key per table in
    table order (each a list of records; ``fit`` one record), then ``extra``'s keys (a key
    that names a table takes the table's place)."""
    import orjson
    extras = jsonable(dict(extra or {}))
    sep = b"{"
    for name, table in result.tables.items():
        yield sep + orjson.dumps(str(name)) + b":"
        if name in extras:
            yield dumps_bytes(extras.pop(name))
        else:
            yield from table_chunks(table, single=name == "fit")
        sep = b","
    for name, value in extras.items():
        yield sep + orjson.dumps(name) + b":" + dumps_bytes(value)
        sep = b","
    yield b"{}" if sep == b"{" else b"}"


def analysis_json_bytes(result, extra: Mapping[str, Any] | None = None) -> bytes:
    """The ``--json`` object as UTF-8 bytes (see :func:`analysis_json_chunks`)."""
    import io
    out = io.BytesIO()
    for chunk in analysis_json_chunks(result, extra):
        out.write(chunk)
    return out.getvalue()


def write_analysis_json(result, stream: IO[bytes],
                        extra: Mapping[str, Any] | None = None) -> None:
    """Write the ``--json`` object to a binary stream a block of rows at a time."""
    for chunk in analysis_json_chunks(result, extra):
        stream.write(chunk)


def analysis_json(result, extra: Mapping[str, Any] | None = None) -> str:
    """The ``--json`` object of ``plumbrule fit`` as text: one key per table; ``fit`` is one
    record."""
    return analysis_json_bytes(result, extra).decode("utf-8")


def reference_json(result, extra: Mapping[str, Any] | None = None) -> str:
    """The ``--json`` object built the careful way, every cell through :func:`jsonable`
    into a dict per row: the reference the fast writer is tested and timed against."""
    out: dict[str, Any] = {}
    for name, table in result.tables.items():
        cols = [str(c) for c in table.columns]
        recs = [dict(zip(cols, (jsonable(v) for v in row), strict=True))
                for row in zip(*(table.iloc[:, j].tolist() for j in range(len(cols))),
                               strict=True)]
        out[name] = recs[0] if name == "fit" and recs else recs
    out.update(jsonable(dict(extra or {})))
    return dumps(out)


def dumps(value: Any) -> str:
    """JSON text of plain values (orjson: UTF-8, shortest round-trip floats)."""
    return dumps_bytes(value).decode("utf-8")


def dumps_bytes(value: Any) -> bytes:
    """UTF-8 JSON of plain values (orjson: shortest round-trip floats)."""
    import orjson
    return orjson.dumps(value, default=_fallback)


def _fallback(value: Any) -> Any:
    """Anything json cannot write natively (arrays, Decimal ...) as its plain form."""
    if hasattr(value, "tolist"):
        return jsonable(value.tolist())
    value = jsonable(value)
    return value if isinstance(value, (int, float, str, bool, type(None))) else str(value)

"""Analysis tables → one JSON object (full-precision floats; NaN and ±inf as null).

Two writers give the same object. :func:`frame_records` turns a table into plain Python
records (a dict per row) for callers that add to them. The ``--json`` writer
(:func:`analysis_json_chunks`) never builds a Python value or a dict per cell: orjson writes
a block of rows' column as one array (numbers) or one list (text), the cells are found in
that text by numpy (commas outside quotes), dates are written digit by digit from lookup
tables, and the rows are laid out straight into one byte buffer whose offsets are computed
from the cells' lengths (a numpy scatter per run of fixed-width pieces; see :func:`_rows`).
Only columns mixing kinds, or text needing escapes, go cell by cell. Text goes out a block
of rows at a time, so a caller writing to a stream never holds the whole text.

:func:`reference_json` is the careful cell-by-cell writer both are tested against."""

from __future__ import annotations

import datetime as _dt
import functools
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
    if not len(col):
        empty = np.zeros(0, dtype=np.intp)
        return ColumnText(np.zeros(0, dtype=np.uint8), empty, empty)
    return _Source(col).text(0, len(col))


def _split(buf, n: int, *, quoted: bool) -> ColumnText:
    """``n`` cells written one after another with a comma between (commas inside a quoted
    string skipped when ``quoted``)."""
    import numpy as np
    comma = buf == 44
    if quoted and np.count_nonzero(comma) != n - 1:   # some text holds a comma
        comma &= (np.cumsum(buf == 34) & 1) == 0
    ends = np.flatnonzero(comma)
    starts = np.empty(n, dtype=np.intp)
    starts[0] = 0
    np.add(ends, 1, out=starts[1:])
    lens = np.empty(n, dtype=np.intp)
    np.subtract(ends, starts[:-1], out=lens[:-1])
    lens[-1] = len(buf) - starts[-1]
    return ColumnText(buf, starts, lens)


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
                 block: int | None = None) -> Iterator[bytes | memoryview]:
    """The JSON text of ``frame`` as a list of row objects (``single``: the first row's
    object alone, ``[]`` when there is none), the same as ``orjson.dumps(frame_records)``,
    in UTF-8 pieces of at most ``block`` rows (default :data:`BLOCK_ROWS`): bytes, or a
    memoryview of a block's buffer (written out as it is, never copied)."""
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
    # each column made ready once (its numpy values, its kind); a block's text from that
    sources = [_Source(frame.iloc[:, j]) for j in last.values()] if n else []
    for start in range(0, n, block):
        stop = min(start + block, n)
        cols = [src.text(start, stop) for src in sources]
        yield from _rows(heads, cols, stop - start, last_block=stop == n)
    if not single:
        yield b"]"


class _Source:
    """One column made ready for :meth:`text` of any block of its rows: its kind and its
    values as the array the writer reads (numbers native-order, dates as datetime64[us],
    text as an object array with None or NaN for missing)."""

    def __init__(self, col: pd.Series) -> None:
        import numpy as np
        self.col = col
        self.kind = kind = _kind(col)
        self.values: Any = None
        if kind in "fiub":
            v = col.to_numpy(dtype=float) if kind == "f" else col.to_numpy()
            self.values = np.ascontiguousarray(v, dtype=v.dtype.newbyteorder("="))
        elif kind == "M":
            self.values = col.to_numpy(dtype="datetime64[us]")
        elif isinstance(col.dtype, pd.StringDtype) and col.dtype.na_value is not pd.NA:
            # text or NaN by its type (a view, no copy): orjson writes NaN as null
            self.values = col.to_numpy(dtype=object)
        else:
            self.values = _text_or_missing(col)

    def text(self, start: int, stop: int) -> ColumnText:
        """Rows ``start:stop`` as :class:`ColumnText`."""
        import numpy as np
        import orjson
        kind, v = self.kind, self.values
        if kind in "fiub":
            # one orjson call writes the whole array (NaN, ±inf → null; floats shortest
            # round-trip); no number, true, false or null holds a comma
            raw = orjson.dumps(v[start:stop], option=orjson.OPT_SERIALIZE_NUMPY)
            return _split(np.frombuffer(raw, np.uint8)[1:-1], stop - start, quoted=False)
        if kind == "M":
            return _date_text(v[start:stop])
        if v is not None:
            buf = np.frombuffer(orjson.dumps(v[start:stop].tolist()), np.uint8)[1:-1]
            # without a backslash nothing was escaped, so every '"' opens or closes a string
            # and a comma outside the strings parts two cells
            if not (buf == 92).any():
                return _split(buf, stop - start, quoted=True)
            texts = [orjson.dumps(None if x != x else x) for x in v[start:stop].tolist()]
        else:
            texts = [orjson.dumps(jsonable(x), default=_fallback)
                     for x in self.col.iloc[start:stop].tolist()]
        lens = np.fromiter(map(len, texts), dtype=np.intp, count=len(texts))
        return ColumnText(np.frombuffer(b"".join(texts), np.uint8), np.cumsum(lens) - lens,
                          lens)


def _date_text(v) -> ColumnText:
    """Dates (datetime64[us]) as JSON text: ``"YYYY-MM-DDTHH:MM:SS"`` (``.ffffff`` where a
    date has a fraction of a second, as ``datetime.isoformat`` writes it), null for NaT.
    Each distinct day's text is made once (sale dates repeat) and the digits by lookup, into
    a fixed-width row per cell; dates outside years 1-9999 go through :func:`_iso_dates`."""
    import numpy as np
    import orjson
    n = len(v)
    t = v.view(np.int64)
    nat = np.isnat(v)
    secs, micro = np.divmod(t, 1_000_000)
    days, sod = np.divmod(secs, 86_400)
    days[nat] = days[~nat][0] if n and not nat.all() else 0
    lo, hi = (int(days.min()), int(days.max())) if n else (0, 0)
    if hi - lo <= 4 * n + 4096:                 # each day of the span written once
        ymd, year = _day_text(np.arange(lo, hi + 1, dtype=np.int64))
        at = days - lo
    else:
        ymd, year = _day_text(days)
        at = np.arange(n)
    if n and ((year < 1) | (year > 9999)).any() and not nat.all():
        text, where = _iso_dates(pd.Series(v))
        dates = _split(np.frombuffer(orjson.dumps(text.tolist()), np.uint8)[1:-1], len(text),
                       quoted=True)
        return ColumnText(dates.buf, dates.starts[where], dates.lens[where])
    frac = (micro != 0) & ~nat
    width = 28 if frac.any() else 21
    two = _two_digits()
    if (sod == 0).all():
        time = _bytes_item(b"T00:00:00")
    else:
        hour, rest = np.divmod(sod, 3600)
        minute, second = np.divmod(rest, 60)
        time = _record(["T", two[hour], ":", two[minute], ":", two[second]], n)
    pieces = ['"', ymd[at], time]
    if width == 28:
        high, low = np.divmod(micro, 100)
        pieces.append(_record([".", two[high // 100], two[high % 100], two[low]], n))
    raw = _record(pieces + ['"'], n).view(np.uint8).reshape(n, width)
    lens = np.full(n, width, dtype=np.intp)
    if width == 28:
        lens[~frac] = 21
        raw[~frac, 20] = 34
    if nat.any():
        raw[nat, :4] = np.frombuffer(b"null", np.uint8)
        lens[nat] = 4
    return ColumnText(raw.reshape(-1), np.arange(n, dtype=np.intp) * width, lens)


def _bytes_item(text: str | bytes):
    """Text as one fixed-width numpy item (``V`` type), to fill a field with."""
    import numpy as np
    raw = text.encode() if isinstance(text, str) else text
    return np.frombuffer(raw, np.uint8).view(f"V{len(raw)}")[0]


def _record(parts: list, n: int):
    """``n`` fixed-width items, each the parts one after another: a part is text (the same
    in every item) or an array of ``n`` fixed-width items."""
    import numpy as np
    parts = [_bytes_item(p) if isinstance(p, (str, bytes)) else p for p in parts]
    sizes = [p.dtype.itemsize for p in parts]
    offsets = np.cumsum([0] + sizes)
    out = np.empty(n, dtype=_record_type(tuple(sizes), tuple(offsets[:-1].tolist()),
                                         int(offsets[-1])))
    for k, p in enumerate(parts):
        out[f"p{k}"] = p
    return out.view(f"V{int(offsets[-1])}")


def _day_text(days):
    """Days since 1970-01-01 as ``YYYY-MM-DD`` (10-byte items; proleptic Gregorian, by
    whole 400-year eras) and their years (int64)."""
    import numpy as np
    z = days + 719_468
    era = np.floor_divide(z, 146_097)
    doe = z - era * 146_097
    yoe = (doe - doe // 1460 + doe // 36_524 - doe // 146_096) // 365
    doy = doe - (365 * yoe + yoe // 4 - yoe // 100)
    mp = (5 * doy + 2) // 153
    day = doy - (153 * mp + 2) // 5 + 1
    month = np.where(mp < 10, mp + 3, mp - 9)
    year = yoe + era * 400 + (month <= 2)
    two = _two_digits()
    y = np.clip(year, 0, 9999)
    return _record([two[y // 100], two[y % 100], "-", two[month], "-", two[day]],
                   len(days)), year


@functools.lru_cache(maxsize=256)
def _record_type(sizes: tuple[int, ...], offsets: tuple[int, ...], itemsize: int):
    """A numpy record type: fields ``p0``, ``p1`` … of ``sizes`` bytes at ``offsets``."""
    import numpy as np
    return np.dtype({"names": [f"p{k}" for k in range(len(sizes))],
                     "formats": [f"V{k}" for k in sizes], "offsets": list(offsets),
                     "itemsize": itemsize})


def _two_digits():
    """``00`` … ``99`` as 2-byte items (made once)."""
    import numpy as np
    global _TWO
    if _TWO is None:
        d = np.arange(100)
        _TWO = np.stack([d // 10, d % 10], axis=1).astype(np.uint8) + 48
        _TWO = _TWO.reshape(-1).view("V2")
    return _TWO


_TWO: Any = None


def _rows(heads: list[bytes], cols: list[ColumnText], n: int, *,
          last_block: bool) -> Iterator[bytes | memoryview]:
    """Row objects, head and cell text column by column, each followed by a comma (not the
    very last), laid out straight into one byte buffer.

    The pieces of a row (heads, cells, the closing brace) run in groups, each ending at a
    cell whose length varies (or at the row's end), so every other piece of a group sits at
    a fixed place in it. A group is built for all rows as a byte matrix (heads broadcast,
    cells copied as fixed-width items from their text) and written with one numpy
    scatter, an item per row, at the row's offset. A group's last cell is written at its
    widest, with whatever follows it in its text; the groups after it, written later,
    overwrite that. Where it could reach past the row's end the group is merged with the
    bytes already there instead."""
    widths = [int(c.lens.max()) for c in cols]
    width = sum(widths) + sum(map(len, heads)) + 2
    text = sum(int(c.lens.sum()) for c in cols) + n * (width - sum(widths))
    if width * n > 4 * text + MATRIX_BYTES:
        # a few very long cells would make every row's slot that wide: cell by cell instead
        yield _joined(heads, cols, n, last_block=last_block)
        return
    # the pieces: (bytes, None, True) for a fixed text, (ColumnText, width, every cell of
    # that width) for a column
    pieces: list[tuple[Any, Any, bool]] = []
    for head, col, w in zip(heads, cols, widths, strict=True):
        pieces += [(head, None, True), (col, w, int(col.lens.min()) == w)]
    pieces.append((b"},", None, True))
    # (piece, width, offset in group, fixed)
    groups: list[list[tuple[Any, Any, int, bool]]] = [[]]
    at = 0
    for piece, w, fixed in pieces:
        groups[-1].append((piece, w, at, fixed))
        at += len(piece) if w is None else w
        if not fixed:
            groups.append([])
            at = 0
    if not groups[-1]:
        groups.pop()
    step = max(1, MATRIX_BYTES // width)       # rows at a time: bounded matrices
    for r0 in range(0, n, step):
        r1 = min(r0 + step, n)
        yield _layout(groups, r0, r1, last=last_block and r1 == n)


def _layout(groups, r0: int, r1: int, *, last: bool) -> bytes | memoryview:
    """Rows ``r0:r1`` of :func:`_rows`'s groups written into one buffer (see there)."""
    import numpy as np
    m = r1 - r0
    # each group's length per row: its fixed pieces plus its last cell's length
    sizes = []
    for group in groups:
        piece, w, at, fixed = group[-1]
        sizes.append(np.full(m, _group_width(group), np.intp) if fixed else
                     at + piece.lens[r0:r1])
    row_len = np.add.reduce(sizes) if len(sizes) > 1 else sizes[0]
    ends = np.cumsum(row_len)
    total = int(ends[-1])
    # every byte up to ``total`` is written (the groups tile each row); past it, slack
    out = np.empty(total + max(_group_width(g) for g in groups), dtype=np.uint8)
    pos = ends - row_len                        # where each row's next group starts
    for group, size in zip(groups, sizes, strict=True):
        gw = _group_width(group)
        # a group's row as a record: a field per piece at its place (numpy copies a field
        # of fixed-width items faster than a slice of a byte matrix)
        mat = np.empty(m, dtype=_record_type(
            tuple(len(p) if w is None else w for p, w, _, _ in group),
            tuple(at for _, _, at, _ in group), gw))
        for k, (piece, w, _, fixed) in enumerate(group):
            mat[f"p{k}"] = (_bytes_item(piece) if w is None else
                            _cells(piece, w, r0, r1, fixed))
        items = mat.view(f"V{gw}")
        view = _items(out, gw)
        spill = gw - size                       # bytes written past the group's true end
        if int(spill.max()) > int((ends - pos - size).min()):
            # could reach into the next row (written already): keep the bytes there
            if m > 1 and int((pos[1:] - pos[:-1]).min()) < gw:
                return _joined_groups(groups, r0, r1, last=last)
            keep = np.arange(gw) >= size[:, None]
            here = view[pos].view(np.uint8).reshape(m, gw)
            raw = items.view(np.uint8).reshape(m, gw)
            raw[keep] = here[keep]
        view[pos] = items
        pos += size
    return out[:total - 1 if last else total].data     # no copy: the caller writes it


def _group_width(group) -> int:
    """Bytes a group's matrix row holds (its last cell at its widest)."""
    piece, w, at, _ = group[-1]
    return at + (len(piece) if w is None else w)


def _items(buf, width: int, start: int = 0, stride: int = 1, count: int | None = None):
    """``buf`` (uint8) seen as ``width``-byte items, from byte ``start``, one every
    ``stride`` bytes (by default one starting at every byte: overlapping); numpy copies
    such items whole, a row's cell or group in one step."""
    import numpy as np
    if count is None:
        count = (len(buf) - start - width) // stride + 1
    return np.ndarray((count,), dtype=f"V{width}", buffer=buf, offset=start,
                      strides=(stride,))


def _cells(col: ColumnText, w: int, r0: int, r1: int, fixed: bool):
    """Cells ``r0:r1`` of ``col`` as ``w``-byte items: each cell's text followed by
    whatever follows it in the column's text (zeros past its end). ``fixed``: every cell
    is ``w`` bytes long."""
    import numpy as np
    starts = col.starts[r0:r1]
    m = r1 - r0
    if m > 1 and fixed:
        # cells of one length, evenly spaced (numbers or text written one after another,
        # the date matrix): a strided view, no gather
        step = int(starts[1] - starts[0])
        if step >= w and int(starts[-1] - starts[0]) == step * (m - 1) and \
                (np.diff(starts) == step).all():
            return _items(col.buf, w, int(starts[0]), step, m)
    buf = col.buf
    src = np.empty(len(buf) + w, dtype=np.uint8)
    src[:len(buf)] = buf
    src[len(buf):] = 0
    return _items(src, w)[starts]


def _joined_groups(groups, r0: int, r1: int, *, last: bool) -> bytes:
    """Rows ``r0:r1`` of the groups joined from each cell's text (no byte matrix)."""
    heads = [p for g in groups for p, w, _, _ in g if w is None][:-1]
    cols = [p for g in groups for p, w, _, _ in g if w is not None]
    part = [ColumnText(c.buf, c.starts[r0:r1], c.lens[r0:r1]) for c in cols]
    return _joined(heads, part, r1 - r0, last_block=last)


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


def analysis_json_chunks(result, extra: Mapping[str, Any] | None = None
                         ) -> Iterator[bytes | memoryview]:
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

"""``plumbrule value DATA --roll ROLL.csv|xlsx [--out VALUES.csv|.xlsx|.parquet]``: every
parcel of a roll valued by the model, keyed by parcel ID.

A CSV roll is read in chunks and each chunk's values are written before the next is read,
so a roll of any length passes through bounded memory; an .xlsx roll is one sheet (at most
1,048,576 rows) read at once. The file is written beside its final name and moved into place
only when every parcel is valued: a failed run leaves no half-written file. The terminal (or
``--json``) gets the summary: how many parcels, the flags counted once, the roll's total.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, Iterator

from plumbrule.errors import IntakeError, SettingError
from plumbrule.numbers import money
from plumbrule.render.wording import CAUTION

CHUNK = 200_000          # parcels per chunk read from a CSV roll
FORMATS = {".csv": "csv", ".xlsx": "xlsx", ".parquet": "parquet"}


def run_roll(args, inputs) -> int:
    """Handler for ``value --roll``; returns the exit status (0)."""
    from plumbrule.analysis import analyze
    from plumbrule.valuation.roll import stream_roll
    roll_path = Path(args.roll)
    out = _out_path(args, roll_path)
    sink = _sink(out) if out else _Counter()
    analysis = analyze(inputs.sales, inputs.settings)
    try:
        result = stream_roll(analysis, roll_chunks(roll_path, inputs.settings), sink.write,
                             inputs.settings)
        sink.close(result)
    except BaseException:
        sink.abort()
        raise
    chasing = _chasing(analysis, roll_path)
    if getattr(args, "json", False):
        print(roll_json(result, out, chasing))
    else:
        print(render_roll(result, analysis, out, chasing))
    return 0


def _chasing(analysis, roll_path: Path):
    """The sales-chasing tests with the roll's unsold parcels (assessments.chasing_with_roll)
    when the settings name the current and prior assessed columns; None otherwise."""
    spec = analysis.spec
    if not (spec.assessed_column and spec.prior_assessed_column):
        return None
    from plumbrule.assessments import chasing_with_roll
    return chasing_with_roll(analysis, roll_path)


def _out_path(args, roll_path: Path) -> Path | None:
    if not getattr(args, "out", None):
        return None
    out = Path(args.out)
    if out.suffix.lower() not in FORMATS:
        raise SettingError(f"--out '{out.name}': write the roll's values as .csv, .xlsx or "
                           ".parquet.")
    for given in (roll_path, Path(args.data)):
        if out.exists() and given.exists() and out.resolve() == given.resolve():
            raise SettingError(f"--out '{out.name}' is an input of this run; name a new file "
                               "for the roll's values.")
    if not out.parent.exists():
        raise SettingError(f"--out '{out}': folder '{out.parent}' does not exist. Create it or "
                           "give another path.")
    if FORMATS[out.suffix.lower()] == "parquet" and not has_pyarrow():
        raise SettingError(f"--out '{out.name}': writing parquet needs pyarrow; install it "
                           "(pip install 'plumbrule[parquet]') or write .csv or .xlsx.")
    return out


def has_pyarrow() -> bool:
    """pyarrow (the optional extra ``parquet``) can be imported."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


# --- reading the roll ------------------------------------------------------------------

def roll_chunks(path: Path, settings) -> Iterator[tuple[Any, int, int]]:
    """(frame, sheet row of its first row, sheet column of its first column) blocks of the
    roll: a CSV in chunks of :data:`CHUNK` parcels, a sheet at once."""
    if not path.exists():
        raise IntakeError(f"Roll file '{path}' does not exist. Check the path.")
    if path.suffix.lower() in (".csv", ".txt"):
        yield from _csv_chunks(path, settings)
        return
    from plumbrule.intake import read_table
    table = read_table(path, header_row=settings.header_row)
    frame = table.frame
    first = int(frame.index[0]) if len(frame) else table.header_row + 1
    yield frame.reset_index(drop=True), first, table.first_column


def _csv_chunks(path: Path, settings) -> Iterator[tuple[Any, int, int]]:
    """The CSV read by pandas in chunks, numbers as numbers (text cells such as '$350,000'
    keep the column as text, which the sheet rules then read), IDs and categories as text.
    Line i of the file is sheet row i, as for the sales."""
    import csv

    import pandas as pd

    from plumbrule.intake.table import _header_text, find_header, padded
    from plumbrule.model.spec import match_column
    encoding = _encoding(path)
    with open(path, encoding=encoding, newline="") as f:
        head = [line for _, line in zip(range(50), f, strict=False)]
    if not "".join(head).strip():
        raise IntakeError(f"Roll file '{path.name}' is empty. Save the roll with a header row.")
    sep = ";" if head[0].count(";") > head[0].count(",") else ","
    rows = list(csv.reader(head, delimiter=sep))
    header_row = settings.header_row or find_header(padded(rows)) + 1
    raw = rows[header_row - 1]
    names = [_header_text(h) for h in raw]
    text_cols = set()
    model_cats = settings.categorical
    for want in [settings.roll_id_column or settings.id_column, *model_cats]:
        if want:
            try:
                text_cols.add(match_column(want, names, "roll_id_column"))
            except Exception:      # named later, with the fix, by the roll's own checks
                pass
    dtype = {j: object for j, nm in enumerate(names) if nm in text_cols}
    try:
        reader = pd.read_csv(path, sep=sep, skiprows=header_row, header=None, names=names,
                             dtype=dtype, keep_default_na=False, na_values=[""],
                             skip_blank_lines=False, chunksize=CHUNK, encoding=encoding)
        first = header_row + 1
        for chunk in reader:
            yield chunk, first, 1
            first += len(chunk)
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise IntakeError(f"Roll file '{path.name}' cannot be read as CSV "
                          f"({' '.join(str(exc).split())[:120]}). Save it as CSV with one "
                          "header row and the same number of cells on every line.") from None


def _encoding(path: Path) -> str:
    with open(path, "rb") as f:
        start = f.read(1 << 16)
    if start[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return "utf-16"
    try:
        start.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(start) - 4:     # not a character cut at the block's end
            return "cp1252"
    return "utf-8-sig"


# --- writing the values -------------------------------------------------------------------

class _Counter:
    """No --out: the values are counted, not kept."""

    def write(self, table) -> None:
        pass

    def close(self, roll) -> None:
        pass

    def abort(self) -> None:
        pass


class _FileSink:
    """Writes to a partial file beside ``out``; :meth:`close` moves it into place."""

    def __init__(self, out: Path) -> None:
        self.out = out
        self.partial = out.with_name(f".{out.name}.{os.getpid()}.partial")
        self.rows = 0

    def close(self, roll) -> None:
        self.finish(roll)
        os.replace(self.partial, self.out)

    def abort(self) -> None:
        try:
            self.abandon()
        finally:
            self.partial.unlink(missing_ok=True)

    def write(self, table) -> None:
        raise NotImplementedError

    def finish(self, roll) -> None:
        raise NotImplementedError

    def abandon(self) -> None:
        pass


class _CsvSink(_FileSink):
    def __init__(self, out: Path) -> None:
        super().__init__(out)
        self.file = open(self.partial, "w", encoding="utf-8", newline="")

    def write(self, table) -> None:
        # floats as their shortest round-trip text: the file loads back to the same values
        table.to_csv(self.file, index=False, header=self.rows == 0, lineterminator="\n")
        self.rows += len(table)

    def finish(self, roll) -> None:
        self.file.close()

    def abandon(self) -> None:
        self.file.close()


class _ParquetSink(_FileSink):
    def __init__(self, out: Path) -> None:
        super().__init__(out)
        self.writer: Any = None

    def write(self, table) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq
        frame = table.assign(parcel_id=table["parcel_id"].astype(str),
                             flags=table["flags"].astype(str))
        batch = pa.Table.from_pandas(frame, preserve_index=False)
        if self.writer is None:
            self.writer = pq.ParquetWriter(self.partial, batch.schema)
        self.writer.write_table(batch)
        self.rows += len(table)

    def finish(self, roll) -> None:
        if self.writer is not None:
            self.writer.close()

    def abandon(self) -> None:
        if self.writer is not None:
            self.writer.close()


class _XlsxSink(_FileSink):
    """A write-only workbook: sheet 'Roll values' (the parcels), sheet 'Roll flags' (the
    flags counted once, the total, the caution). One sheet holds 1,048,576 rows."""

    def __init__(self, out: Path) -> None:
        from openpyxl import Workbook
        super().__init__(out)
        self.book = Workbook(write_only=True)
        self.sheet = self.book.create_sheet("Roll values")

    def write(self, table) -> None:
        from plumbrule.valuation.roll import ROLL_COLUMNS, SHEET_ROWS
        if self.rows + len(table) + 1 > SHEET_ROWS:
            raise IntakeError(f"--out '{self.out.name}': the roll has more than "
                              f"{SHEET_ROWS - 1:,} parcels, more than one sheet holds. Write "
                              ".csv or .parquet instead.")
        if self.rows == 0:
            self.sheet.append(ROLL_COLUMNS)
        cols = [table[c].tolist() for c in ROLL_COLUMNS]
        cols[-1] = [str(f) for f in cols[-1]]
        for row in zip(*cols, strict=True):
            self.sheet.append(row)
        self.rows += len(table)

    def finish(self, roll) -> None:
        from plumbrule.render.json import frame_records
        sheet = self.book.create_sheet("Roll flags")
        for title, frame in (("summary", roll.summary), ("flags", roll.flags),
                             ("total", roll.total)):
            sheet.append([title])
            sheet.append(list(frame.columns))
            for rec in frame_records(frame):
                sheet.append(list(rec.values()))
            sheet.append([])
        sheet.append([CAUTION])
        self.book.save(self.partial)


def _sink(out: Path) -> _FileSink:
    kind = FORMATS[out.suffix.lower()]
    return {"csv": _CsvSink, "xlsx": _XlsxSink, "parquet": _ParquetSink}[kind](out)


# --- rendering -------------------------------------------------------------------------------

def roll_json(roll, out: Path | None, chasing=None) -> str:
    """One JSON object: roll (the summary, with out: the file written or null), roll_flags
    (records), roll_total (the total with its interval; null for one parcel), caution; with
    assessed and prior assessed columns, sales_chasing (records: sold against the roll's
    unsold parcels)."""
    from plumbrule.render.json import frame_records
    summary = frame_records(roll.summary)[0]
    summary["out"] = None if out is None else str(out)
    payload = {"roll": summary, "roll_flags": frame_records(roll.flags),
               "roll_total": frame_records(roll.total)[0] if len(roll.total) else None,
               "caution": CAUTION}
    if chasing is not None:
        payload["sales_chasing"] = frame_records(chasing)
    return json.dumps(payload, allow_nan=False, ensure_ascii=False)


def render_roll(roll, analysis, out: Path | None, chasing=None) -> str:
    s = roll.summary.iloc[0]
    model = analysis.final_model
    lines = [f"plumbrule roll as of {s.valuation_date.date().isoformat()} ({model.fit.n:,} "
             f"sales in the model of {model.encoding.response_name}, "
             f"{int(100 * s.confidence + 0.5)}% intervals; estimates: {s.estimate_kind})", "",
             f"  parcels valued  {int(s.parcels):,}",
             f"  flagged         {int(s.flagged):,} ({100 * s.flagged / s.parcels:.2f}%)"]
    if len(roll.total):
        t = roll.total.iloc[0]
        lines += [f"  total           {money(t.total)}",
                  f"  likely total    {money(t.ci_low)} to {money(t.ci_high)}",
                  f"  (adding every parcel's own interval would give {money(t.naive_ci_low)} "
                  f"to {money(t.naive_ci_high)}, {t.naive_ci_ratio:.2f}× as wide)"]
    lines.append("")
    if out is None:
        lines.append("Give --out VALUES.csv, .xlsx or .parquet to write every parcel's value "
                     "by ID.")
    else:
        lines.append(f"Wrote {int(s.parcels):,} parcels' values to {out}.")
    if len(roll.flags):
        lines += ["", "Flags, counted once for the roll"]
        lines += [f"  {n}" for n in roll.flags["note"]]
    if chasing is not None and len(chasing):
        lines += ["", "Sales chasing: the sold parcels against the roll's unsold ones"]
        lines += [f"  {r.test}: {r.verdict}. {r.note}" for r in chasing.itertuples()]
    lines += ["", CAUTION]
    from plumbrule.render.terminal import visible
    return visible("\n".join(lines))

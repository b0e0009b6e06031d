"""Read the input sheets of a plumbrule workbook with python-calamine (fast).

Sales, Subjects and Comps are read from the Excel table of that name when there
is one (wherever it sits), else from the sheet of that name (the header found below
any title rows). Settings is read as two columns: setting name, value.

An Excel table's totals row is never a sale: calamine reads a table without it (the
table's ``totalsRowCount``), so it never reaches the engine. For Sales the sheet's
hidden rows and the columns of formulas with no saved result are carried on the table
(:class:`plumbrule.intake.SheetTable`), as :func:`plumbrule.intake.read_sheet` does.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from plumbrule.errors import WorkbookError
from plumbrule.settings import settings_from_rows
from plumbrule.intake import SheetTable, table_from_values
from plumbrule.intake.readers import _restore_error_cells, _with_facts, _xlsx_facts


@dataclass(frozen=True)
class BookInputs:
    """What a workbook hands to the engine. ``comps`` are Sales sheet rows;
    ``settings`` maps setting name → raw cell value; ``sales_hash`` is SHA-256 hex."""

    sales: SheetTable
    subjects: SheetTable | None
    comps: tuple[int, ...]
    settings: dict[str, Any]
    sales_hash: str
    sales_values: list          # header row first, as read (for a results copy)
    other_values: dict          # sheet name → 2-D values of Subjects / Comps / Settings
    other_rows: dict            # sheet name → sheet row of that block's first row
    comp_ids: tuple[str, ...] = ()          # the Comps sheet lists sale IDs
    models: tuple = ()                      # candidate models (plumbrule.compare.Candidate)
    roll: SheetTable | None = None          # the Roll sheet's parcels (None: no rows)


def read_inputs(path: str | Path) -> BookInputs:
    """Read Sales / Subjects / Comps / Settings; errors name the sheet and the fix."""
    from python_calamine import CalamineWorkbook
    from plumbrule.intake.zipcheck import check_package
    path = Path(path)
    check_package(path)          # a zip bomb is refused before calamine inflates anything
    try:
        book = CalamineWorkbook.from_path(str(path), load_tables=True)
    except Exception as exc:   # calamine's own error types for damaged or encrypted files
        raise WorkbookError(f"'{path.name}' cannot be read as a workbook ({exc}). Open and save "
                            "it in your spreadsheet as .xlsx first.") from None
    try:
        sales_block, header_row, sheet, first_col, is_table = _block_at(book, "Sales",
                                                                        required=True)
        facts = (_xlsx_facts(path, str(sheet)) if path.suffix.lower() in (".xlsx", ".xlsm")
                 else None)
        if facts is not None:   # calamine hands error cells over as blanks: '#N/A' back
            _restore_error_cells(sales_block, facts.errors, (header_row - 1, first_col - 1))
        sales = table_from_values(sales_block, header_row=header_row, sheet=sheet,
                                  first_column=first_col,
                                  header_at=header_row if is_table else None)
        # Title rows above the header of a Sales sheet are not copied to the results.
        sales_block = sales_block[sales.header_row - header_row:]
        if facts is not None:
            sales = _with_facts(sales, sales_block, (sales.header_row - 1, first_col - 1),
                                facts)
        if len(sales.frame) == 0:
            raise WorkbookError(f"The Sales table (sheet '{sheet}') has no sales below its header "
                                "row. Paste your sales into it and run again.", sheet=sheet)
        other, other_rows = {}, {}
        subj_block, subj_row, subj_sheet = _block(book, "Subjects")
        subjects = None
        if subj_block and len(subj_block) > 1:
            other["Subjects"], other_rows["Subjects"] = subj_block, subj_row
            subjects = table_from_values(subj_block, header_row=subj_row, sheet=subj_sheet)
            if len(subjects.frame) == 0:
                subjects = None
        comp_block, comp_row, comp_sheet = _block(book, "Comps")
        if comp_block:
            other["Comps"], other_rows["Comps"] = comp_block, comp_row
        roll_block, roll_row, roll_sheet, roll_col, _ = _block_at(book, "Roll")
        roll = None
        if roll_block and len(roll_block) > 1:
            other["Roll"], other_rows["Roll"] = roll_block, roll_row
            roll = table_from_values(roll_block, header_row=roll_row, sheet=roll_sheet,
                                     first_column=roll_col)
            if len(roll.frame) == 0:
                roll = None
        set_block, set_row, set_sheet = _block(book, "Settings")
        if set_block:
            other["Settings"], other_rows["Settings"] = set_block, set_row
        settings = settings_from_rows(set_block, where="Settings sheet")
        models, models_block, models_row = _models(book)
        if models_block:
            other["Models"], other_rows["Models"] = models_block, models_row
        by_id = _comps_by_id(comp_block, settings)
        return BookInputs(
            sales=sales,
            subjects=subjects,
            comps=() if by_id else _comp_rows(comp_block, comp_row, comp_sheet),
            comp_ids=_comp_ids(comp_block) if by_id else (),
            settings=settings,
            sales_hash=hash_block(sales_block),
            sales_values=sales_block,
            other_values=other,
            other_rows=other_rows,
            models=models,
            roll=roll,
        )
    finally:
        book.close()


def _block(book, name: str, required: bool = False) -> tuple[list, int, str | None]:
    """(values with header first, sheet row of the header, sheet name) for table/sheet ``name``."""
    values, row, sheet, _, _ = _block_at(book, name, required)
    return values, row, sheet


def _block_at(book, name: str, required: bool = False
              ) -> tuple[list, int, str | None, int, bool]:
    """:func:`_block` plus the sheet column number of the block's first column and whether
    it is an Excel table (whose first row is its header, and which calamine reads without
    its totals row)."""
    tables = {t.lower(): t for t in _table_names(book)}
    if name.lower() in tables:
        try:
            t = book.get_table_by_name(tables[name.lower()])
            values = [list(t.columns)] + t.to_python()
        except Exception as exc:   # calamine's own error types for a damaged part
            raise _damaged(f"table '{tables[name.lower()]}'", exc) from None
        return values, int(t.start[0]), t.sheet, int(t.start[1]) + 1, True
    sheets = {s.lower(): s for s in book.sheet_names}
    if name.lower() in sheets:
        sheet = sheets[name.lower()]
        try:
            ws = book.get_sheet_by_name(sheet)
            values = ws.to_python(skip_empty_area=True)
        except Exception as exc:   # calamine's own error types for a damaged part
            raise _damaged(f"sheet '{sheet}'", exc) from None
        start = ws.start[0] if ws.start else 0
        if not values or not any(str(v).strip() for v in values[0]):
            if required:
                raise WorkbookError(
                    f"Sheet '{sheet}' is empty. Put the sales there with a header "
                    "row, or use the template (plumbrule new BOOK.xlsx).",
                    sheet=sheet,
                )
            return [], 1, sheet, 1, False
        first_col = ws.start[1] + 1 if ws.start else 1
        return values, start + 1, sheet, first_col, False
    if required:
        raise WorkbookError(f"The workbook has no table or sheet named '{name}'. Put the sales in "
                            "a sheet named Sales (or an Excel table named Sales); "
                            "plumbrule new BOOK.xlsx writes a template.", sheet=name)
    return [], 1, None, 1, False


def _models(book) -> tuple:
    """(the Models sheet's candidates, its values, its header's sheet row); none without the
    sheet. Errors name the cell."""
    from plumbrule.compare import candidates_from_rows
    values, row, sheet, first_col, _ = _block_at(book, "Models")
    if not values:
        return (), [], 1
    return (candidates_from_rows(values, where=f"{sheet or 'Models'} sheet", first_row=row,
                                 first_col=first_col), values, row)


def _damaged(where: str, exc: Exception) -> WorkbookError:
    detail = " ".join(str(exc).split())[:200]
    return WorkbookError(f"The workbook's {where} cannot be read ({detail}). The file is "
                         "damaged: open it in your spreadsheet and save it again.")


def _table_names(book) -> list[str]:
    """The workbook's Excel table names; [] when it has none or cannot have any (.xls, .ods).
    python-calamine 0.9 gives them as a property, earlier versions as a method."""
    try:
        names = book.table_names
        names = names() if callable(names) else names
    except Exception as exc:
        # only "this format has no tables" (.xls, .ods) means none; anything else decides
        # what data is read, so it is never swallowed
        if type(exc).__name__ in ("TablesNotSupported", "TablesNotLoaded"):
            return []
        raise
    return list(names or [])


def _has_tables(book) -> bool:
    return bool(_table_names(book))


def _comp_rows(block: list, header_row: int, sheet: str | None) -> tuple[int, ...]:
    """First column below the header: Sales sheet row numbers (blank cells skipped)."""
    from plumbrule.settings import sheet_row
    out = []
    for i, row in enumerate(block[1:], start=header_row + 1):
        v = row[0] if row else None
        if v is None or (isinstance(v, str) and not v.strip()):
            continue
        r = sheet_row(v, first=2)
        if r is None:
            raise WorkbookError(f"Sheet '{sheet}', cell A{i}: '{v}' is not a row number of the "
                                "Sales sheet. Enter the sheet row of a comparable sale (e.g. 12).",
                                sheet=sheet, row=i)
        out.append(r)
    return tuple(out)


_ROW_HEADERS = {"sales row", "sheet row", "row", "sales rows"}


def _comps_by_id(block: list, settings: dict) -> bool:
    """The Comps sheet lists IDs when the workbook has an ID column and the first column's
    header does not say it holds sheet rows ('Sales row')."""
    ident = settings.get("id_column")
    if not block or ident is None or not str(ident).strip():
        return False
    head = block[0][0] if block[0] else None
    return " ".join(str(head or "").split()).casefold() not in _ROW_HEADERS


def _comp_ids(block: list) -> tuple[str, ...]:
    """First column below the header: sale IDs as text (104.0 → '104'; blanks skipped)."""
    out = []
    for row in block[1:]:
        v = row[0] if row else None
        if v is None or (isinstance(v, str) and not v.strip()):
            continue
        if isinstance(v, float) and v.is_integer():
            v = int(v)
        out.append(" ".join(str(v).split()))
    return tuple(out)


def hash_block(values: list) -> str:
    """SHA-256 (hex) of a block of cell values, type-aware (1 and '1' differ)."""
    h = hashlib.sha256()
    for row in values:
        h.update("\x1f".join(map(repr, row)).encode("utf-8", "surrogatepass"))
        h.update(b"\x1e")
    return h.hexdigest()

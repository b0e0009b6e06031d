"""Build the plumbrule template workbook, and copy it for ``plumbrule new``.

The template is built by code (so it can be reviewed and rebuilt) and the built
file is committed once, inside the package (engine/plumbrule/templates/), for
``plumbrule new`` and ``plumbrule demo``; ``plumbrule new BOOK.xlsx`` gives a user their
copy. tests/workbook/test_workbook_template.py checks it matches what :func:`build_template` makes.
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from plumbrule.errors import WorkbookError
from plumbrule.render.wording import CAUTION
from plumbrule.workbook.cells import fit_for_print

TEMPLATE_NAME = "plumbrule-template.xlsx"
SALES_COLUMNS = ["Sale ID", "Sale price", "Living area", "Lot size", "Age", "Bedrooms",
                 "Bathrooms", "Condition", "Neighbourhood", "Sale date", "Notes"]
SUBJECT_COLUMNS = ["Subject", "Living area", "Lot size", "Age", "Bedrooms", "Bathrooms",
                   "Condition", "Neighbourhood"]
ROLL_COLUMNS = ["Parcel", "Living area", "Lot size", "Age", "Bedrooms", "Bathrooms",
                "Condition", "Neighbourhood"]
COMP_COLUMNS = ["Sales row", "Note"]
SETTINGS_COLUMNS = ["Setting", "Value", "Default", "What it does"]
# The example columns come filled in, so the template runs once sales are pasted.
TEMPLATE_VALUES = {
    "response": "Sale price",
    "predictors": "Living area,Lot size,Age,Bedrooms,Bathrooms,Condition,Neighbourhood",
    "categorical": "Condition,Neighbourhood",
    "date_column": "Sale date",
    "id_column": "Sale ID",
    "roll_id_column": "Parcel",
}
_FIXED_TIME = _dt.datetime(2024, 1, 1)      # document properties: same on every build

READ_ME = [
    ("plumbrule workbook", "title"),
    ("A hedonic price model of your sales, the sales set aside and why, a sales-ratio study, "
     "and a value for each subject property with an honest interval.", "text"),
    ("", "text"),
    ("What to do, in five steps", "heading"),
    ("1. Sales: paste your sales into the Sales table (one row per sale, header row kept). "
     "Rename or add columns as you need; keep one header per column.", "text"),
    ("2. Settings: name the price column (response) and the columns that explain it "
     "(predictors); mark the categories; pick screening and validation rules. A blank value "
     "uses the default shown beside it.", "text"),
    ("3. Subjects: enter the properties to value, with the same column names as the Sales "
     "table. Comps: enter the sheet row numbers (on the Sales sheet) of up to 10 comparable "
     "sales. Roll (optional, for an assessor): one row per parcel with its ID in Parcel and "
     "the same columns; every parcel is valued on the Roll results sheet.", "text"),
    ("4. Save and close the workbook, then run:  plumbrule run THIS-FILE.xlsx", "text"),
    ("5. Open it again and read the Report sheet first; Model, Screening, Validation and "
     "Valuation hold the tables. Add sales and run again: only plumbrule's own result sheets "
     "are replaced, the previous file is kept as .bak.", "text"),
    ("Optional: Models lists candidate models to compare (one row each: a name, then only "
     "the settings that differ from the Settings sheet; blank means the same, 'none' clears a "
     "list). Each is judged on the same sales, holdout and folds; use_model names the one the "
     "results follow.", "text"),
    ("", "text"),
    ("Cautions", "heading"),
    (CAUTION, "text"),
    ("The model is only as good as the sales behind it: check the sales set aside, the "
     "checks on the Model sheet and the ratio study before relying on a value.", "text"),
    ("A subject unlike the sales used (outside their range, or an unusual combination of "
     "features) is flagged; its estimate is an extrapolation.", "text"),
    ("", "text"),
    ("With Excel on Windows and xlwings, the PLUMB_ worksheet functions also work in this "
     "workbook (the xlwings.conf sheet names the module). Without Python, every result is a "
     "plain value and the Valuation sheet's live block recalculates in any spreadsheet.",
     "text"),
]


def build_template(path: str | Path) -> Path:
    """Write the template workbook to ``path``; returns the path. The bytes depend only
    on the code (fixed document times and zip entry dates), so rebuilding an unchanged
    template leaves the committed file unchanged."""
    import io
    buf = io.BytesIO()
    template_book().save(buf)
    path = Path(path)
    path.write_bytes(_deterministic(buf.getvalue()))
    return path


def _deterministic(data: bytes) -> bytes:
    import io
    import re
    import zipfile
    stamp = _FIXED_TIME.strftime("%Y-%m-%dT%H:%M:%SZ").encode()
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as zin, \
            zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            part = zin.read(info.filename)
            if info.filename == "docProps/core.xml":   # openpyxl stamps 'modified' at save
                part = re.sub(rb"(<dcterms:modified[^>]*>)[^<]*(</dcterms:modified>)",
                              rb"\g<1>" + stamp + rb"\g<2>", part)
            entry = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = info.external_attr
            zout.writestr(entry, part)
    return out.getvalue()


def template_book():
    """The template as an openpyxl Workbook (not saved)."""
    from openpyxl import Workbook
    from plumbrule.workbook.cells import ensure_styles
    book = Workbook()
    ensure_styles(book)
    book.remove(book.active)
    _read_me(book.create_sheet("Read me"))
    _sales(book.create_sheet("Sales"))
    _subjects(book.create_sheet("Subjects"))
    _comps(book.create_sheet("Comps"))
    _settings(book.create_sheet("Settings"))
    _models(book.create_sheet("Models"))
    _roll(book.create_sheet("Roll"))
    _xlwings_conf(book.create_sheet("xlwings.conf"))
    book.active = 0
    # the sheet a spreadsheet prints by default (the selected tabs): never the Sales table
    book["Read me"].sheet_view.tabSelected = True
    props = book.properties
    props.creator = "plumbrule"
    props.title = "plumbrule workbook"
    props.created = _FIXED_TIME
    props.modified = _FIXED_TIME
    props.lastModifiedBy = "plumbrule"
    return book


def _read_me(ws) -> None:
    from openpyxl.styles import Alignment, Font
    from plumbrule.workbook.cells import put, TITLE_COLOUR
    ws.column_dimensions["A"].width = 90
    for i, (text, kind) in enumerate(READ_ME, start=1):
        if not text:
            continue
        cell = put(ws, i, 1, text)
        if kind == "title":
            cell.style = "plumb_title"
        elif kind == "heading":
            cell.font = Font(bold=True, color=TITLE_COLOUR)
        else:
            cell.alignment = Alignment(wrap_text=True, vertical="top")
    fit_for_print(ws, last_col=1, landscape=False)


def _table(ws, name: str, columns: list[str], widths: dict[str, float],
           formats: dict[str, str]) -> None:
    """Header row 1 and one blank data row, as an Excel table ``name``."""
    from openpyxl.utils import get_column_letter
    from openpyxl.worksheet.table import Table, TableStyleInfo
    from plumbrule.workbook.cells import put
    for j, col in enumerate(columns, start=1):
        put(ws, 1, j, col)
        letter = get_column_letter(j)
        ws.column_dimensions[letter].width = widths.get(col, 12)
        if col in formats:
            ws.cell(row=2, column=j).number_format = formats[col]
    ref = f"A1:{get_column_letter(len(columns))}2"
    table = Table(displayName=name, ref=ref)
    table.tableStyleInfo = TableStyleInfo(name="TableStyleLight9", showRowStripes=True)
    ws.add_table(table)
    ws.freeze_panes = "A2"
    fit_for_print(ws, last_col=len(columns), title_rows="1:1", area=False)


def _sales(ws) -> None:
    from plumbrule.workbook.cells import DATE, MONEY
    _table(ws, "Sales", SALES_COLUMNS,
           {"Sale ID": 10, "Sale price": 13, "Condition": 11, "Neighbourhood": 16,
            "Sale date": 12, "Notes": 30},
           {"Sale price": MONEY, "Living area": "#,##0", "Lot size": "#,##0", "Sale date": DATE})


def _subjects(ws) -> None:
    _table(ws, "Subjects", SUBJECT_COLUMNS, {"Subject": 20, "Neighbourhood": 16}, {})


def _roll(ws) -> None:
    _table(ws, "Roll", ROLL_COLUMNS, {"Parcel": 14, "Neighbourhood": 16}, {})


def _comps(ws) -> None:
    _table(ws, "Comps", COMP_COLUMNS, {"Sales row": 11, "Note": 40}, {"Sales row": "0"})


def _settings(ws) -> None:
    from openpyxl.styles import Alignment
    from openpyxl.utils import get_column_letter
    from openpyxl.worksheet.datavalidation import DataValidation
    from openpyxl.worksheet.table import Table, TableStyleInfo
    from plumbrule.settings import REGISTRY
    from plumbrule.workbook.cells import put
    for j, col in enumerate(SETTINGS_COLUMNS, start=1):
        put(ws, 1, j, col)
    bools = DataValidation(type="list", formula1='"TRUE,FALSE"', allow_blank=True)
    bools.error, bools.errorTitle = "Enter TRUE or FALSE (or leave blank for the default).", \
        "plumbrule setting"
    choice_lists: dict[tuple[str, ...], DataValidation] = {}
    for i, s in enumerate(REGISTRY.values(), start=2):
        put(ws, i, 1, s.name)
        value = TEMPLATE_VALUES.get(s.name)
        if value is not None:
            put(ws, i, 2, value)
        put(ws, i, 3, _default_text(s))
        put(ws, i, 4, s.help).alignment = Alignment(wrap_text=True, vertical="top")
        if s.kind == "bool":
            bools.add(f"B{i}")
        elif s.kind == "choice":
            dv = choice_lists.get(s.choices)
            if dv is None:
                dv = DataValidation(type="list", formula1='"' + ",".join(s.choices) + '"',
                                    allow_blank=True)
                dv.error = "Choose one of: " + ", ".join(s.choices) + " (or leave blank)."
                dv.errorTitle = "plumbrule setting"
                choice_lists[s.choices] = dv
            dv.add(f"B{i}")
        elif s.kind == "date":
            ws.cell(row=i, column=2).number_format = "yyyy-mm-dd"
    ws.add_data_validation(bools)
    for dv in choice_lists.values():
        dv.showErrorMessage = True
        ws.add_data_validation(dv)
    bools.showErrorMessage = True
    last = len(REGISTRY) + 1
    table = Table(
        displayName="Settings", ref=f"A1:{get_column_letter(len(SETTINGS_COLUMNS))}{last}"
    )
    table.tableStyleInfo = TableStyleInfo(name="TableStyleLight9", showRowStripes=True)
    ws.add_table(table)
    for letter, width in zip("ABCD", (24, 34, 14, 70), strict=False):
        ws.column_dimensions[letter].width = width
    ws.freeze_panes = "A2"
    fit_for_print(ws, last_col=len(SETTINGS_COLUMNS), landscape=True, title_rows="1:1",
                  area=False)


def _models(ws) -> None:
    """The Models table: a name, then one column per model setting a candidate may change
    (from the registry, so a new model setting gets its column when the template is
    rebuilt). Blank rows; a blank cell means "as on the Settings sheet"."""
    from plumbrule.compare import model_settings
    columns = ["Model", *model_settings()]
    _table(ws, "Models", columns, {"Model": 22, "predictors": 40, "categorical": 24,
                                   "log_predictors": 24, "trend_knots": 24}, {})
    ws.column_dimensions["A"].width = 22


def _default_text(s) -> str:
    d = s.default
    if d is None or d == ():
        return "(none)"
    if isinstance(d, bool):
        return "TRUE" if d else "FALSE"
    return str(d)


def _xlwings_conf(ws) -> None:
    from plumbrule.workbook.cells import put
    # xlwings reads key/value pairs from columns A and B of a sheet with this name.
    put(ws, 1, 1, "UDF MODULES")
    put(ws, 1, 2, "plumbrule.sheet_functions")
    ws.column_dimensions["A"].width = 16
    ws.column_dimensions["B"].width = 30
    fit_for_print(ws, last_col=2, landscape=False)


def packaged_template() -> Path:
    """The template shipped inside the package."""
    return Path(__file__).resolve().parent.parent / "templates" / TEMPLATE_NAME


def new_book(dest: str | Path) -> Path:
    """Copy the template to ``dest``; refuses to overwrite an existing file."""
    import shutil
    dest = Path(dest)
    if dest.suffix.lower() != ".xlsx":
        raise WorkbookError(f"'{dest.name}' must end in .xlsx (the template is an .xlsx "
                            "workbook). Choose a name such as sales.xlsx.")
    if dest.exists():
        raise WorkbookError(f"'{dest}' already exists; plumbrule new does not overwrite. "
                            "Choose another name or delete the file first.")
    if not dest.parent.exists():
        raise WorkbookError(f"Folder '{dest.parent}' does not exist. Create it first.")
    src = packaged_template()
    if not src.exists():
        raise WorkbookError(f"The packaged template is missing ({src}); reinstall plumbrule.")
    try:
        with open(src, "rb") as fin, open(dest, "xb") as fout:
            shutil.copyfileobj(fin, fout)
    except FileExistsError:
        raise WorkbookError(f"'{dest}' already exists; plumbrule new does not overwrite. "
                            "Choose another name or delete the file first.") from None
    return dest

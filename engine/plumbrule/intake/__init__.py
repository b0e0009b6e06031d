"""Sheet values → a clean typed table, plus a log of the rows dropped.

Input is what a spreadsheet or a CSV hands over: a 2-D block whose first row is
the header. Cells may be numbers, numbers stored as text ("$350,000", "12.5%",
"(1,200)"), text, blanks, booleans, dates or spreadsheet error values. Rows keep
the sheet's row numbers as the index everywhere downstream.

Validation happens here, once: the numeric code after this trusts its input.

Decisions a user relies on:

- Headers are trimmed (inner runs of spaces and line breaks become one space).
- Trailing fully blank rows are an over-wide selection and are not kept; a fully
  blank row *inside* the block is kept, and :func:`clean` drops and logs it as
  "empty row", so nothing disappears silently.
- In a numeric column TRUE/FALSE (cells or text) read as 1/0, so a yes/no
  feature can enter the model directly.
- A date column takes date cells, spreadsheet serial numbers (1900 date system,
  also as text), ISO text (YYYY-MM-DD) and text dates such as 3/14/2025 or 14.03.2025
  whose day/month order the column settles (or the ``date_format`` setting gives).
- The header is found below title rows, notes and blank rows (or given as a sheet row);
  row numbers stay the sheet's.
- Totals rows (a 'Total' label, or numbers equal to the sums or means above) and rows
  hidden in the sheet are found here and listed for the caller to set aside.

The package: ``cells`` (typing spreadsheet values), ``dates`` (date columns), ``table``
(header and sheet rows), ``readers`` (CSV, xlsx; hidden rows, unsaved formulas),
``totals`` (totals rows), ``clean`` (the typed table and the set-aside log).
"""

from plumbrule.intake.cells import (  # noqa: F401
    BLANK,
    BOOL,
    COM_ERROR_CODES,
    DATE,
    ERROR_TEXTS,
    NUMBER,
    OTHER,
    TEXT,
    _EARLIEST,
    _EXCEL_EPOCH,
    _KINDS,
    _LATEST,
    _MAX_SERIAL,
    _NUMBER_RE,
    _SHOWN_TEXT,
    _blank_frame,
    _blank_mask,
    is_blank,
    _error_names,
    _iso_dates,
    _kind_of_type,
    _kind_series,
    _missing_reasons,
    _numbers_of,
    _parse_formatted,
    _plain_numbers,
    _refuse,
    _serial_dates,
    _shown,
    cell_kinds,
    on_uniques,
    parse_number_text,
    to_dates,
    to_labels,
    to_numbers,
)
from plumbrule.intake.dates import DATE_FORMATS  # noqa: F401
from plumbrule.intake.table import (  # noqa: F401
    SheetTable,
    _header_text,
    _with_header,
    column_letter,
    find_header,
    table_from_frame,
    blank_cells,
    table_from_values,
    text_cells,
)
from plumbrule.intake.readers import (  # noqa: F401
    _restore_error_cells,
    _xlsx_error_cells,
    hidden_rows_log,
    read_csv,
    read_sheet,
    read_table,
)
from plumbrule.intake.totals import TOTALS, table_without, totals_rows  # noqa: F401
from plumbrule.intake.clean import (  # noqa: F401
    CleanData,
    _empty_log,
    clean,
)

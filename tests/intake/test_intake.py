"""Intake: what a spreadsheet hands over becomes a typed table and a log of dropped rows.

Source for the behaviour: plumbrule's intake contract (docs/methods.md, "Intake": headers,
numbers stored
as text, error values, dropped-row log, sheet row numbers) — users' scripts and the
worksheet functions rely on it. Spreadsheet facts used below (from memory, checkable
in any spreadsheet): in the 1900 date system DATE(2024,1,1) = 45292, serial 1 is
1900-01-01, serial 59 is 1900-02-28, serial 61 is 1900-03-01 (60 is the fictitious
29 Feb 1900). A COM bridge passes error cells as the HRESULT 0x800A0000 + the
XlCVError code (Microsoft's XlCVError enumeration: xlErrDiv0 2007, xlErrNA 2042,
xlErrName 2029, xlErrNull 2000, xlErrNum 2036, xlErrRef 2023, xlErrValue 2015).
"""

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from plumbrule import intake
from plumbrule.analysis import analyze
from plumbrule.errors import IntakeError, PlumbError
from plumbrule.intake import clean, read_table, table_from_frame, table_from_values


def _col(values):
    return pd.Series(values, dtype=object, index=pd.RangeIndex(2, 2 + len(values)))


# --- headers ------------------------------------------------------------------

def test_headers_are_trimmed_and_inner_spaces_collapsed():
    t = table_from_values([["  Sale price ", "Living\narea", " Age"], [1, 2, 3]])
    assert t.columns == ["Sale price", "Living area", "Age"]


def test_blank_header_over_values_names_the_column_letter():
    with pytest.raises(IntakeError, match=r"Header row \(sheet row 1\): column B has no name"):
        table_from_values([["Price", None, "Age"], [1, 2, 3]])


def test_blank_header_letter_counts_from_the_blocks_first_column():
    # A block starting in column C: its second column is D.
    with pytest.raises(IntakeError, match=r"column D has no name"):
        table_from_values([["Price", "  ", "Age"], [1, 2, 3]], first_column=3)


def test_blank_header_and_blank_column_is_just_a_wide_selection():
    t = table_from_values([["Price", None, "Age", ""], [1, None, 3, ""], [2, "", 4, None]])
    assert t.columns == ["Price", "Age"]


def test_duplicate_headers_are_named_with_both_columns():
    with pytest.raises(IntakeError, match=r"'Age' in columns B and D"):
        table_from_values([["Price", "Age", "Lot", " Age "], [1, 2, 3, 4]])


def test_all_duplicates_are_named_at_once():
    with pytest.raises(IntakeError, match=r"'A' in columns A and C; 'B' in columns B and D"):
        table_from_values([["A", "B", "A", "B"], [1, 2, 3, 4]])


def test_non_text_headers_read_as_a_user_sees_them():
    t = table_from_values([[2024.0, True, dt.datetime(2024, 1, 1)], [1, 2, 3]])
    assert t.columns == ["2024", "True", "2024-01-01"]


def test_empty_block_is_an_intake_error():
    with pytest.raises(IntakeError, match="The sales block is empty"):
        table_from_values([])
    with pytest.raises(IntakeError, match="The sales block is empty"):
        table_from_values([[]])


# --- numbers stored as text ---------------------------------------------------------

@pytest.mark.parametrize("text, number", [
    ("1,250", 1250.0), ("$350,000", 350000.0), (" 12.5 ", 12.5), ("12.5%", 0.125),
    ("(1,200)", -1200.0), ("-$5", -5.0), ("$-5", -5.0), ("+5", 5.0), ("5.", 5.0),
    (".5", 0.5), ("1e3", 1000.0), ("1,234,567.89", 1234567.89), ("($1,200)", -1200.0),
    ("-12.5%", -0.125), ("(12.5%)", -0.125), ("12 %", 0.12), ("\u22123", -3.0),
    ("£1,000", 1000.0), ("€ 2,500.50", 2500.5), ("TRUE", 1.0), ("false", 0.0),
])
def test_number_text_reads_as_meant(text, number):
    # Issue 2 §2: "1,250", "$350,000", " 12.5 ", "12.5%", "(1,200)" read as a user means them;
    # the percent sign divides by 100 as a spreadsheet does when it parses "12.5%".
    got = intake.parse_number_text(_col([text]))
    assert got.iloc[0] == pytest.approx(number, rel=1e-15)


@pytest.mark.parametrize("text", [
    "approx 1200", "1,23", "12,34,567", "1 234", "1.234,5", "(-5)", "+-5", "$", "%", "inf",
    "nan", "NaN", "Infinity", "0x10", "1_000", "five", "12..5", "--5",
])
def test_text_that_is_not_a_number_is_rejected(text):
    assert np.isnan(intake.parse_number_text(_col([text])).iloc[0])


def test_not_a_number_message_has_the_exact_shape():
    # The message shape users and their scripts rely on: column, row, value, fix.
    values = [["Sale price", "Living area"]] + [[100000 + i, 1000 + i] for i in range(15)]
    values.append([120000, "approx 1200"])          # sheet row 17
    table = table_from_values(values)
    with pytest.raises(IntakeError) as err:
        clean(table, numeric=["Sale price", "Living area"])
    assert str(err.value) == ("Column 'Living area', row 17: 'approx 1200' is not a number. "
                              "Enter a number or leave the cell blank.")
    assert (err.value.column, err.value.row) == ("Living area", 17)


def test_text_in_a_numeric_predictor_hints_at_the_categorical_setting():
    values = [["Price", "Area", "Hood"], [100, 10, 1], [120, 12, 2], [130, 14, "Hilltop"],
              [150, 15, 1]]
    with pytest.raises(IntakeError, match=r"^Column 'Hood', row 4: 'Hilltop' is not a number\. "
                       r"Enter a number or leave the cell blank; if 'Hood' holds categories "
                       r"\(names or codes\), list it under the 'categorical' setting\.$") as err:
        analyze(values, response="Price", predictors="Area,Hood", folds=0)
    assert "\n" not in str(err.value)


def test_mistyped_number_in_a_predictor_keeps_the_exact_shape():
    # 'approx 1200' in a column of numbers is a mistyped number, not a category: the message
    # keeps the same one-line shape, even for a predictor.
    values = [["Sale price", "Living area"]] + [[100000 + 7 * i * i, 1000 + 10 * i]
                                                for i in range(15)]
    values.append([120000, "approx 1200"])          # sheet row 17
    with pytest.raises(IntakeError, match=r"^Column 'Living area', row 17: 'approx 1200' is not "
                                          r"a number\. Enter a number or leave the cell "
                                          r"blank\.$"):
        analyze(values, response="Sale price", predictors="Living area", folds=0)


def test_a_column_of_coded_labels_gets_the_categorical_hint():
    values = [["Price", "Area", "Zone"], [100, 10, "Zone 1"], [120, 12, "Zone 2"],
              [130, 14, "Zone 1"], [150, 15, "Zone 3"]]
    with pytest.raises(IntakeError, match=r"Column 'Zone', row 2: 'Zone 1' is not a number\..*"
                                          r"list it under the 'categorical' setting"):
        analyze(values, response="Price", predictors="Area,Zone", folds=0)


def test_text_in_the_response_gets_no_categorical_hint():
    values = [["Price", "Area"], [100, 10], ["call agent", 12], [130, 14], [150, 15]]
    with pytest.raises(IntakeError, match=r"^Column 'Price', row 3: 'call agent' is not a "
                       r"number\. Enter a number or leave the cell blank\.$"):
        analyze(values, response="Price", predictors="Area", folds=0)


def test_infinite_number_is_an_error_naming_the_cell():
    with pytest.raises(IntakeError, match=r"Column 'Area', row 3: 'inf' is not a finite number"):
        clean(table_from_values([["Area"], [1.0], [float("inf")]]), numeric=["Area"])


def test_huge_integer_is_an_error_not_an_overflow():
    with pytest.raises(IntakeError, match=r"Column 'Area', row 2: '1000.*\.\.\.' is not a finite"):
        clean(table_from_values([["Area"], [10 ** 400]]), numeric=["Area"])


def test_a_date_in_a_numeric_column_is_named_as_a_date():
    with pytest.raises(IntakeError, match=r"row 2: a date \(2020-01-01\) is not a number"):
        clean(table_from_values([["Area"], [dt.date(2020, 1, 1)]]), numeric=["Area"])


def test_booleans_and_numpy_scalars_read_as_numbers():
    t = table_from_values([["Pool"], [True], [False], [np.float32(1.5)], [np.int64(3)],
                           [np.bool_(True)], ["TRUE"]])
    got = clean(t, numeric=["Pool"]).data["Pool"].tolist()
    assert got == [1.0, 0.0, 1.5, 3.0, 1.0, 1.0]


# --- missing values: dropped and logged ----------------------------------------------------

def _sales_with_gaps():
    return [
        ["Price", "Area", "Hood", "Notes"],
        [100000, 1000, "A", ""],            # row 2 ok
        [None, 1100, "B", "no price"],      # row 3 blank
        [120000, "#N/A", "A", ""],          # row 4 error text
        [130000, 1300, "#REF!", ""],        # row 5 error text in a category
        [-2146826281, 1400, "B", ""],       # row 6 COM #DIV/0!
        [150000, "  ", None, ""],           # row 7 two blanks
        [160000, 1600, "B", ""],            # row 8 ok
        [170000, 1700, "A", "#VALUE!"],     # row 9: error in an unused column is fine
    ]


def test_blanks_and_error_values_drop_the_row_and_log_it():
    cd = clean(table_from_values(_sales_with_gaps()), numeric=["Price", "Area"],
               categorical=["Hood"])
    assert cd.data.index.tolist() == [2, 8, 9]
    log = cd.dropped
    assert list(log.columns) == ["row", "column", "reason"]
    assert log["row"].tolist() == [3, 4, 5, 6, 7]
    assert log["column"].tolist() == ["Price", "Area", "Hood", "Price", "Area"]
    assert log["reason"].tolist() == [
        "blank", "error value #N/A", "error value #REF!",
        "error value #DIV/0! (code -2146826281)", "blank (and 1 more missing)"]


@pytest.mark.parametrize("name, xl_code", [
    ("#DIV/0!", 2007), ("#N/A", 2042), ("#NAME?", 2029), ("#NULL!", 2000),
    ("#NUM!", 2036), ("#REF!", 2023), ("#VALUE!", 2015),
])
def test_com_error_codes_are_error_values(name, xl_code):
    code = 0x800A0000 + xl_code - 2 ** 32     # HRESULT as a signed 32-bit integer
    cd = clean(table_from_values([["A"], [1.0], [code], [float(code)]]), numeric=["A"])
    assert cd.dropped["reason"].tolist() == [f"error value {name} (code {code})"] * 2


@pytest.mark.parametrize("text", ["#N/A", "#VALUE!", "#DIV/0!", "#REF!", "#NAME?", "#NUM!",
                                  "#NULL!", " #n/a ", "Err:502"])
def test_error_texts_are_missing_in_every_column_kind(text):
    values = [["P", "H", "D"], [1, "A", "2024-01-01"], [text, text, text]]
    cd = clean(table_from_values(values), numeric=["P"], categorical=["H"], date="D")
    assert cd.dropped["row"].tolist() == [3]
    assert cd.dropped["reason"].iloc[0].startswith("error value ")
    assert cd.dropped["reason"].iloc[0].endswith("(and 2 more missing)")


def test_dropped_rows_reach_the_analysis_tables():
    rows = [["Price", "Area"]] + [[100000 + 900 * i + (i % 3) * 700, 1000 + 10 * i]
                                  for i in range(20)]
    rows[5][1] = "#N/A"        # sheet row 6
    rows[9][0] = None          # sheet row 10
    res = analyze(rows, response="Price", predictors="Area", folds=0)
    assert res.tables.dropped_rows.to_dict("records") == [
        {"row": 6, "column": "Area", "reason": "error value #N/A"},
        {"row": 10, "column": "Price", "reason": "blank"}]
    assert res.tables.fit["n_dropped"].iloc[0] == 2
    assert res.tables.fit["n_used"].iloc[0] == 18
    assert 6 not in res.tables.residuals["row"].tolist()


def test_interior_empty_row_is_logged_trailing_ones_are_selection():
    values = [["P", "A"], [1, 2], [None, ""], [3, 4], [None, None], ["", None]]
    t = table_from_values(values)
    assert t.frame.index.tolist() == [2, 3, 4]        # rows 5-6 trimmed: over-wide selection
    cd = clean(t, numeric=["P", "A"])
    assert cd.dropped.to_dict("records") == [{"row": 3, "column": "", "reason": "empty row"}]


def test_row_numbers_follow_the_blocks_header_row():
    values = [["P", "A"], [1, 2], [None, 3], [4, 5]]
    cd = clean(table_from_values(values, header_row=5), numeric=["P", "A"])
    assert cd.data.index.tolist() == [6, 8]
    assert cd.dropped["row"].tolist() == [7]
    with pytest.raises(IntakeError, match=r"Column 'A', row 8: 'x'"):
        clean(table_from_values([["P", "A"], [1, 2], [2, 3], [3, "x"]], header_row=5),
              numeric=["A"])


def test_frame_rows_count_from_the_header_row():
    frame = pd.DataFrame({"P": [1.0, np.nan, 3.0]}, index=[10, 20, 30])
    cd = clean(table_from_frame(frame), numeric=["P"])
    assert cd.data.index.tolist() == [2, 4]
    assert cd.dropped["row"].tolist() == [3]


def test_frame_with_nullable_and_categorical_dtypes():
    frame = pd.DataFrame({"P": pd.array([1, None, 3], dtype="Int64"),
                          "H": pd.Categorical(["a", "b", None]),
                          "S": pd.array(["1,000", "2,000", "3,000"], dtype="string")})
    cd = clean(table_from_frame(frame), numeric=["P", "S"], categorical=["H"])
    assert cd.data.index.tolist() == [2]
    assert cd.data["S"].tolist() == [1000.0]
    assert cd.dropped["row"].tolist() == [3, 4]


def test_unknown_column_in_clean_is_named():
    with pytest.raises(IntakeError, match=r"no column 'Lot'"):
        clean(table_from_values([["P"], [1]]), numeric=["P", "Lot"])


# --- categories -----------------------------------------------------------------------

def test_category_labels_unify_numbers_text_and_spacing():
    t = table_from_values([["H"], [3.0], ["3"], [3], [" Old  Town "], [True], [2.5],
                           [1e20], [dt.date(2024, 5, 1)]])
    got = clean(t, categorical=["H"]).data["H"].tolist()
    assert got == ["3", "3", "3", "Old Town", "TRUE", "2.5", "1e+20", "2024-05-01"]


# --- dates ------------------------------------------------------------------------------

def test_dates_from_cells_serials_and_iso_text():
    t = table_from_values([["D"], [dt.datetime(2024, 1, 1, 15, 30)], [dt.date(2024, 1, 1)],
                           [45292], [45292.0], ["45292"], ["2024-01-01"], [" 2024-01-01 "],
                           [pd.Timestamp("2024-01-01")], [np.datetime64("2024-01-01")]])
    got = clean(t, date="D").data["D"]
    assert str(got.dtype) == "datetime64[ns]"
    assert got.iloc[0] == pd.Timestamp("2024-01-01 15:30")
    assert (got.iloc[1:] == pd.Timestamp("2024-01-01")).all()


@pytest.mark.parametrize("serial, day", [(1, "1900-01-01"), (59, "1900-02-28"),
                                         (61, "1900-03-01"), (45292, "2024-01-01"),
                                         (2958465, "9999-12-31")])
def test_spreadsheet_serials_follow_the_1900_date_system(serial, day):
    got = intake._serial_dates(pd.Series([float(serial)]))
    if pd.Timestamp(day).year > 2262:      # beyond what datetime64[ns] can hold
        assert got.isna().all()
    else:
        assert got.iloc[0] == pd.Timestamp(day)


@pytest.mark.parametrize("cell, shown", [("yesterday", "'yesterday'"), (True, "'True'"),
                                         (-5, "'-5'"), (60, "'60'"),
                                         ("14 March 2024", "'14 March 2024'"),
                                         (dt.time(12), "a time value")])
def test_a_cell_that_is_not_a_date_is_named(cell, shown):
    t = table_from_values([["Sale date"], ["2024-01-01"], [cell]])
    with pytest.raises(IntakeError, match=rf"^Column 'Sale date', row 3: {shown} is not a date\. "
                       r"Enter a date cell or text as YYYY-MM-DD\.$"):
        clean(t, date="Sale date")


def test_a_date_beyond_what_can_be_held_is_named():
    t = table_from_values([["Sold"], [dt.date(2024, 1, 1)], [dt.date(2993, 11, 19)]])
    with pytest.raises(IntakeError, match=r"^Column 'Sold', row 3: a date \(2993-11-19\) is "
                                          r"outside the dates plumbrule can use \(1677-09-22 to "
                                          r"2262-04-11\)\. Correct the date\.$"):
        clean(t, date="Sold")


def test_invisible_characters_are_shown_escaped():
    with pytest.raises(IntakeError, match=r"row 2: '\\u200b' is not a number"):
        clean(table_from_values([["A"], ["\u200b"]]), numeric=["A"])


def test_blank_and_error_dates_are_dropped_and_logged():
    t = table_from_values([["D", "P"], ["2024-01-01", 1], [None, 2], ["#N/A", 3]])
    cd = clean(t, numeric=["P"], date="D")
    assert cd.dropped[["row", "reason"]].to_dict("records") == [
        {"row": 3, "reason": "blank"}, {"row": 4, "reason": "error value #N/A"}]


def test_timezone_aware_dates_become_plain_dates():
    frame = pd.DataFrame({"D": pd.to_datetime(["2024-01-01 10:00"]).tz_localize("UTC")})
    got = clean(table_from_frame(frame), date="D").data["D"]
    assert got.iloc[0] == pd.Timestamp("2024-01-01 10:00") and got.dt.tz is None


# --- files ------------------------------------------------------------------------------

def test_csv_keeps_duplicate_headers_visible(tmp_path):
    # pandas alone would rename the second 'Age' to 'Age.1' and hide the mistake.
    path = tmp_path / "s.csv"
    path.write_text("Price,Age,Age\n1,2,3\n")
    with pytest.raises(IntakeError, match=r"'Age' in columns B and C"):
        read_table(path)


def test_csv_blank_lines_keep_sheet_row_numbers(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("Price,Area\n100,10\n\n120,x\n")
    t = read_table(path)
    with pytest.raises(IntakeError, match=r"Column 'Area', row 4: 'x'"):
        clean(t, numeric=["Area"])
    path.write_text("Price,Area\n100,10\n\n120,12\n")
    assert clean(read_table(path), numeric=["Price", "Area"]).dropped.to_dict("records") == [
        {"row": 3, "column": "", "reason": "empty row"}]


def test_csv_text_cells_parse_like_sheet_cells(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text('Price,Area,Date\n"$350,000","1,250",2024-02-01\n(1200),12.5%,45292\n')
    cd = clean(read_table(path), numeric=["Price", "Area"], date="Date")
    assert cd.data["Price"].tolist() == [350000.0, -1200.0]
    assert cd.data["Area"].tolist() == [1250.0, 0.125]
    assert cd.data["Date"].tolist() == [pd.Timestamp("2024-02-01"), pd.Timestamp("2024-01-01")]


def test_csv_saved_by_a_windows_spreadsheet_and_semicolons(tmp_path):
    path = tmp_path / "s.csv"
    path.write_bytes("Hood;Price\nTanner\u2019s Green;100\n".encode("cp1252"))
    cd = clean(read_table(path), numeric=["Price"], categorical=["Hood"])
    assert cd.data["Hood"].tolist() == ["Tanner\u2019s Green"]


@pytest.mark.parametrize("content, message", [
    (b"", r"File 's.csv' is empty"),
    (b"a,b\n1,2,3,4\n", r"File 's.csv' cannot be read as CSV"),
])
def test_unreadable_csv_is_an_intake_error(tmp_path, content, message):
    path = tmp_path / "s.csv"
    path.write_bytes(content)
    with pytest.raises(IntakeError, match=message):
        read_table(path)


def test_missing_file_folder_and_wrong_type(tmp_path):
    with pytest.raises(IntakeError, match=r"does not exist"):
        read_table(tmp_path / "nope.csv")
    (tmp_path / "d.csv").mkdir()
    with pytest.raises(IntakeError, match=r"is a folder"):
        read_table(tmp_path / "d.csv")
    (tmp_path / "s.json").write_text("{}")
    with pytest.raises(IntakeError, match=r"'s.json' is not .csv or .xlsx"):
        read_table(tmp_path / "s.json")


def test_damaged_xlsx_is_an_intake_error(tmp_path):
    path = tmp_path / "s.xlsx"
    path.write_bytes(b"this is not a zip file")
    with pytest.raises(IntakeError, match=r"File 's.xlsx' cannot be read as a workbook"):
        read_table(path)


@pytest.fixture
def workbook(tmp_path):
    import openpyxl
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Notes"
    ws["A1"] = "read me"
    ws2 = wb.create_sheet("Sales")
    # The block starts at C3: header row 3, first column C.
    ws2["C3"], ws2["D3"], ws2["E3"] = "Price", "Area", "Sold"
    ws2.append([])
    for r, (p, a, d) in enumerate([(100000, "1,000", dt.date(2024, 1, 5)),
                                   ("$120,000", 1200, 45300), (None, 900, dt.date(2024, 2, 1))],
                                  start=4):
        ws2.cell(r, 3, p), ws2.cell(r, 4, a), ws2.cell(r, 5, d)
    wb.create_sheet("Empty")
    path = tmp_path / "book.xlsx"
    wb.save(path)
    return path


def test_xlsx_sheet_block_keeps_sheet_rows_and_letters(workbook):
    t = read_table(workbook, sheet="sales")          # sheet names match case-insensitively
    assert (t.sheet, t.header_row, t.first_column) == ("Sales", 3, 3)
    cd = clean(t, numeric=["Price", "Area"], date="Sold")
    assert cd.data.index.tolist() == [4, 5]
    assert cd.data["Price"].tolist() == [100000.0, 120000.0]
    assert cd.data["Sold"].tolist() == [pd.Timestamp("2024-01-05"), pd.Timestamp("2024-01-09")]
    assert cd.dropped.to_dict("records") == [{"row": 6, "column": "Price", "reason": "blank"}]


def test_xlsx_first_sheet_of_sales_by_default_and_missing_sheets(workbook):
    # the 'Notes' sheet before the sales has one column of words: passed over
    assert read_table(workbook).sheet == "Sales"
    assert read_table(workbook, sheet="Notes").columns == ["read me"]
    with pytest.raises(IntakeError, match=r"has no sheet 'Prices'\. Sheets: 'Notes', 'Sales' "
                                          r"and 'Empty'"):
        read_table(workbook, sheet="Prices")
    with pytest.raises(IntakeError, match=r"Sheet 'Empty' of 'book.xlsx' is empty"):
        read_table(workbook, sheet="Empty")


def test_xlsx_error_cells_are_logged_as_error_values(tmp_path):
    # The fast reader hands over error cells as blanks; the log must still say which error.
    import openpyxl
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Price", "Area"])
    ws.append([100000, 1000])
    ws.append([110000, 1100])
    cell = ws.cell(3, 2)
    cell.value, cell.data_type = "#DIV/0!", "e"     # an error cell, as a spreadsheet saves it
    ws.append([None, 1200])
    path = tmp_path / "errors.xlsx"
    wb.save(path)
    cd = clean(read_table(path), numeric=["Price", "Area"])
    assert cd.dropped.to_dict("records") == [
        {"row": 3, "column": "Area", "reason": "error value #DIV/0!"},
        {"row": 4, "column": "Price", "reason": "blank"}]


def test_every_intake_error_is_a_plumb_error():
    assert issubclass(IntakeError, PlumbError) and issubclass(IntakeError, ValueError)


def test_dates_centuries_apart_are_refused_naming_both_cells():
    # Date arithmetic runs in int64 nanoseconds (292 years); a sale-date column spanning
    # more than half of that holds a typo, and without this the trend terms would wrap
    # round (found by test_analysis_of_any_block_raises_only_plumb_errors: 1768 and 2066).
    from plumbrule.intake.dates import to_dates
    col = pd.Series(["2024-05-01", "1768-02-03", "2066-10-17"], index=[2, 3, 4], dtype=object)
    with pytest.raises(IntakeError, match=r"^Column 'Sale date': the dates 1768-02-03 \(row 3\) "
                       r"and 2066-10-17 \(row 4\) are more than 146 years apart"):
        to_dates(col, "Sale date")
    # the careful path (a date cell among the texts) says the same
    mixed = pd.Series([dt.datetime(2024, 5, 1), "1768-02-03", "2066-10-17"], index=[2, 3, 4],
                      dtype=object)
    with pytest.raises(IntakeError, match=r"more than 146 years apart"):
        to_dates(mixed, "Sale date")
    # a century of sales is read as it is
    ok, _ = to_dates(pd.Series(["1925-01-01", "2024-12-31"], dtype=object), "Sale date")
    assert ok.notna().all()

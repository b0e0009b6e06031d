"""Dates typed as text in a day/month order: 3/14/2025 (United States), 14.03.2025 or
14-03-2025 (much of Europe), 2025/03/14 (year first).

Facts used: no month is above 12, so 14/03/2025 can only be day/month/year and 03/14/2025
only month/day/year; 2024 is a leap year and 2025 is not (Gregorian calendar). Two-digit
years follow the POSIX %y convention (69-99 → 1900s, 00-68 → 2000s; common practice, no
source). Behaviour users rely on: one order per column, never a silent guess
(docs/workbook.md, "Dates"). The sales are invented (Wrenfield, an invented town).
"""

import datetime as dt

import openpyxl
import pandas as pd
import pytest

from plumbrule.errors import CellErrors, IntakeError
from plumbrule.intake import clean, read_table, table_from_values, to_dates
from plumbrule.intake.cells import to_dates as to_dates_from_cells


def _dates(*cells, fmt="auto"):
    """The typed 'Sale date' column of a sheet whose header is row 1 (cells from row 2)."""
    t = table_from_values([["Sale date"]] + [[c] for c in cells])
    return clean(t, date="Sale date", date_format=fmt).data["Sale date"].tolist()


def _ts(*days):
    return [pd.Timestamp(d) for d in days]


def test_a_csv_saved_with_month_day_year_dates_is_read(tmp_path):
    path = tmp_path / "wrenfield.csv"
    path.write_text("Sale ID,Sale price,Sale date\nW-1,312000,3/4/2025\nW-2,298500,3/14/2025\n"
                    "W-3,355000,12/1/2024\n")
    cd = clean(read_table(path), numeric=["Sale price"], date="Sale date")
    assert cd.data["Sale date"].tolist() == _ts("2025-03-04", "2025-03-14", "2024-12-01")


def test_day_month_year_with_dots_and_dashes():
    assert _dates("14.03.2025", "04.03.2025", "1.2.2025") == _ts("2025-03-14", "2025-03-04",
                                                                "2025-02-01")
    assert _dates("14-03-2025", "04-03-2025") == _ts("2025-03-14", "2025-03-04")


def test_year_first_text_and_iso_text():
    assert _dates("2025/03/14", "2025.3.4", "2025-03-04") == _ts("2025-03-14", "2025-03-04",
                                                                "2025-03-04")


def test_two_digit_years():
    assert _dates("3/14/25", "3/4/68", "3/4/69", "3/4/99", "3/4/00") == _ts(
        "2025-03-14", "2068-03-04", "1969-03-04", "1999-03-04", "2000-03-04")


def test_a_time_after_the_date_is_kept():
    assert _dates("3/14/2025 10:30 PM", "3/4/2025 12:05 AM", "3/4/2025 14:00:30") == _ts(
        "2025-03-14 22:30", "2025-03-04 00:05", "2025-03-04 14:00:30")


def test_days_that_are_not_on_the_calendar_are_named():
    assert _dates("2/29/2024", "3/14/2024") == _ts("2024-02-29", "2024-03-14")
    with pytest.raises(CellErrors, match=r"^Column 'Sale date', row 3: '2/29/2025' is not a date "
                                         r"read as month/day/year\. Correct the date, or enter "
                                         r"it as YYYY-MM-DD\.$"):
        _dates("3/14/2025", "2/29/2025")


def test_both_orders_in_one_column_name_a_cell_of_each():
    with pytest.raises(IntakeError, match=r"^Column 'Sale date': '14/03/2025' \(row 3\) reads "
                                          r"only as day/month/year and '03/15/2025' \(row 5\) "
                                          r"only as month/day/year\. Correct the dates that do "
                                          r"not follow the column's order, or set date_format "
                                          r"\(--date-format\) to MDY or DMY\.$") as err:
        _dates("05/05/2025", "14/03/2025", "14/03/2025", "03/15/2025")
    assert (err.value.column, err.value.row, err.value.setting) == ("Sale date", 3,
                                                                    "date_format")


def test_a_column_that_reads_both_ways_asks_for_the_setting():
    with pytest.raises(IntakeError, match=r"^Column 'Sale date': dates such as '03/04/2025' "
                                          r"\(row 3\) could be day/month or month/day\. Set "
                                          r"date_format \(--date-format\) to MDY or DMY\.$") as err:
        _dates("2025-01-10", "03/04/2025", "04/03/2025")
    assert (err.value.row, err.value.setting) == (3, "date_format")


def test_day_equal_to_month_reads_the_same_either_way():
    assert _dates("05/05/2025", "11.11.2024") == _ts("2025-05-05", "2024-11-11")


def test_the_setting_forces_the_order():
    assert _dates("03/04/2025", fmt="MDY") == _ts("2025-03-04")
    assert _dates("03/04/2025", fmt="DMY") == _ts("2025-04-03")
    assert _dates("25/03/14", "2025/03/14", fmt="YMD") == _ts("2025-03-14", "2025-03-14")
    # A four-digit first part is the year under every setting.
    assert _dates("2025-03-04", "03/04/2025", fmt="DMY") == _ts("2025-03-04", "2025-04-03")


def test_a_cell_against_the_forced_order_is_named():
    with pytest.raises(CellErrors, match=r"^Column 'Sale date', row 3: '03/14/2025' is not a date "
                                         r"read as day/month/year\."):
        _dates("14/03/2025", "03/14/2025", fmt="DMY")


def test_a_date_format_outside_the_four_is_refused():
    with pytest.raises(IntakeError, match=r"^date_format is 'US'; use one of auto, MDY, DMY or "
                                          r"YMD\.$"):
        _dates("3/14/2025", fmt="US")


def test_date_cells_and_serial_numbers_do_not_depend_on_the_setting():
    for fmt in ("auto", "MDY", "DMY", "YMD"):
        assert _dates(dt.date(2025, 3, 4), 45720, "45720", fmt=fmt) == _ts(
            "2025-03-04", "2025-03-04", "2025-03-04")    # DATE(2025,3,4) = 45720 (1900 system)


def test_date_cells_are_no_evidence_for_text_dates():
    with pytest.raises(IntakeError, match=r"dates such as '03/04/2025' \(row 3\) could be"):
        _dates(dt.date(2025, 3, 14), "03/04/2025")


def test_text_dates_in_an_xlsx_date_column_follow_the_same_rule(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Sale ID", "Sale date"])
    for row in (["W-1", dt.date(2025, 3, 4)], ["W-2", "14/03/2025"], ["W-3", "04/03/2025"]):
        ws.append(row)
    path = tmp_path / "w.xlsx"
    wb.save(path)
    got = clean(read_table(path), date="Sale date").data["Sale date"].tolist()
    assert got == _ts("2025-03-04", "2025-03-14", "2025-03-04")


def test_to_dates_keeps_its_old_home_and_default():
    assert to_dates is to_dates_from_cells
    col = pd.Series(["3/14/2025", None], dtype=object, index=[7, 8])
    values, reasons = to_dates(col, "Sale date")
    assert values[7] == pd.Timestamp("2025-03-14") and reasons[8] == "blank"

"""The fast CSV reader (pandas' C parser typing the plain-number columns) against the careful
one (every cell as text through the cell-by-cell rules): on generated hostile CSV files both
give the same table (every column's cells, as text where the fast path typed them), the same
typed columns and set-aside log from clean and prepare_sales, and the same error messages.

The careful reader is the reference: it is the reading the intake tests specify.
"""

import os

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plumbrule import intake
from plumbrule.errors import PlumbError
from plumbrule.sales import prepare_sales
from plumbrule.settings import parse_settings

SETTINGS = settings(max_examples=int(os.environ.get("PLUMBRULE_HYPOTHESIS_EXAMPLES", 200)),
                    deadline=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.function_scoped_fixture])

# Cells as they appear in CSV files saved by spreadsheets and scripts, the awkward ones
# included: plain numbers in every spelling the C parser accepts, numbers it accepts but the
# sheet rules read otherwise ('inf', '1e400', COM error codes, huge integers), and text.
plain = st.one_of(
    st.integers(-10 ** 6, 10 ** 6).map(str),
    st.floats(-1e9, 1e9, allow_nan=False).map(repr),
    st.floats(-1e9, 1e9, allow_nan=False).map(lambda x: f"{x:.3f}"),
    st.floats(1e-9, 1e9).map(lambda x: f"{x:.6e}"),
)
odd_numbers = st.sampled_from([
    "0012", "+5", "-0", "-0.0", " 12", "12 ", "1e400", "-1e400", "inf", "-inf", "Infinity",
    "nan", "NaN", "NA", "1e70", "1e-70", "-2146826281", "-2146826259", "9007199254740993",
    "99999999999999999999", "0x10", "1_000", ".5", "5.", "1E3", "3.50", "7.0",
])
texty = st.sampled_from([
    "", "   ", "TRUE", "FALSE", "true", "False", "#N/A", "#VALUE!", "Err:502", '"1,250"',
    "$5", "(1,200)", "12.5%", "2024-01-05", "3/14/2025", "14.03.2025", "45000", "Total",
    "Average", "Millbank", "Old Quay", '" Fenby Park "', '"two\nlines"', "é", "x y",
])
cell = st.one_of(plain, plain, plain, odd_numbers, texty)


@st.composite
def csv_files(draw):
    width = draw(st.integers(2, 6))
    sep = draw(st.sampled_from([",", ",", ";"]))
    n = draw(st.integers(0, 25))
    # most columns clean (the fast path types them), some with one awkward cell or more
    kinds = draw(st.lists(st.sampled_from(["clean", "clean", "mixed", "text"]),
                          min_size=width, max_size=width))
    rows = []
    for _ in range(n):
        row = []
        for k in kinds:
            if k == "clean":
                row.append(draw(st.one_of(plain, plain, plain, plain, st.just(""))))
            elif k == "mixed":
                row.append(draw(cell))
            else:
                row.append(draw(st.one_of(texty, st.sampled_from(["North", "South", "7"]))))
        if draw(st.integers(0, 14)) == 0:
            row = row[:draw(st.integers(0, width))]         # a short line, or a blank one
        rows.append(row)
    header = [f"c{j}" for j in range(width)]
    if draw(st.integers(0, 9)) == 0:
        header[draw(st.integers(0, width - 1))] = draw(st.sampled_from(["", "c0", " c1 ", "5"]))
    titles = draw(st.sampled_from([[], [], [["Sales 2025"]], [["Quillford sales"], []]]))
    lines = [*titles, header, *rows]
    if draw(st.integers(0, 19)) == 0 and rows:
        lines.append(rows[0] + ["extra"])                  # a line wider than the header
    text = "\n".join(sep.join(r) for r in lines) + draw(st.sampled_from(["\n", "", "\n\n"]))
    return text, width


def _outcome(fn):
    try:
        return "ok", fn()
    except PlumbError as err:
        return "error", str(err)


def _same_table(fast, careful):
    assert fast.columns == careful.columns
    assert fast.header_row == careful.header_row
    pd.testing.assert_index_equal(fast.frame.index, careful.frame.index)
    for c in careful.columns:
        # every column's cells as the file has them: the fast path's text where it typed
        pd.testing.assert_series_equal(intake.text_cells(fast, c), careful.frame[c])
        if fast.frame[c].dtype == object:
            pd.testing.assert_series_equal(fast.frame[c], careful.frame[c])
    # the blank cells the fast path finds from the bytes are the careful rule's
    pd.testing.assert_frame_equal(intake.blank_cells(fast), intake.blank_cells(careful))


def _same_clean(a, b):
    pd.testing.assert_frame_equal(a.data, b.data)
    pd.testing.assert_frame_equal(a.dropped, b.dropped)


@SETTINGS
@given(csv_files(), st.sampled_from(["refuse", "set_aside"]), st.booleans())
def test_fast_reader_equals_careful_reader(tmp_path_factory, drawn, bad_cells, hint):
    text, width = drawn
    path = tmp_path_factory.mktemp("csv") / "sales.csv"
    path.write_bytes(text.encode("utf-8"))
    names = [f"c{j}" for j in range(width)]
    hints = names[-2:] if hint else ()
    kind_f, fast = _outcome(lambda: intake.read_csv(path, text_columns=hints))
    kind_c, careful = _outcome(lambda: intake.read_csv(path, typed=False))
    assert kind_f == kind_c
    if kind_c != "ok":
        assert fast == careful           # the same one-line message
        return
    _same_table(fast, careful)
    present = [c for c in names if c in careful.columns]
    if len(present) < 2:
        return
    # the first columns as numbers, the last as a category (labels), or as dates
    numeric, label = present[:-1], present[-1]
    for kw in ({"categorical": [label]}, {"date": label}, {}):
        a = _outcome(lambda kw=kw: intake.clean(fast, numeric=numeric, bad_cells=bad_cells, **kw))
        b = _outcome(lambda kw=kw: intake.clean(careful, numeric=numeric, bad_cells=bad_cells,
                                                **kw))
        assert a[0] == b[0]
        if a[0] == "ok":
            _same_clean(a[1], b[1])
        else:
            assert a[1] == b[1]
    # the whole intake with an ID column (IDs read as labels: '0012' stays '0012')
    s = parse_settings({"response": numeric[0], "predictors": ",".join(numeric[1:] or [label]),
                        "id_column": label, "bad_cells": bad_cells})
    a = _same_intake(fast, careful, s)
    if a is not None:
        pd.testing.assert_series_equal(a[0].ids, a[1].ids)
    # the hinted column as a category of the model: typed once per distinct text on the
    # fast path (intake.text_factors), its spellings merged by their counts
    s = parse_settings({"response": numeric[0], "predictors": ",".join([*numeric[1:], label]),
                        "categorical": label, "bad_cells": bad_cells})
    a = _same_intake(fast, careful, s)
    if a is not None:
        pd.testing.assert_frame_equal(a[0].level_merges, a[1].level_merges)


def _same_intake(fast, careful, s):
    """prepare_sales on both tables: the same data and log, or the same message. Returns
    the two Sales when both succeed, else None."""
    a = _outcome(lambda: prepare_sales(fast, s))
    b = _outcome(lambda: prepare_sales(careful, s))
    assert a[0] == b[0]
    if a[0] != "ok":
        assert a[1] == b[1]
        return None
    pd.testing.assert_frame_equal(a[1].data, b[1].data)
    pd.testing.assert_frame_equal(a[1].log, b[1].log)
    return a[1], b[1]


def test_plain_number_columns_are_typed_and_keep_their_text(tmp_path):
    # The fast path types a column of plain numbers as floats; its text stays readable
    # ('0012' is an ID, not 12 — the ID rule's own example in intake.keys).
    path = tmp_path / "s.csv"
    path.write_text("id,price,area\n0012,250000,120.50\n0013,260000,130\n")
    table = intake.read_csv(path)
    assert table.frame["price"].dtype == float
    assert table.frame["price"].tolist() == [250000.0, 260000.0]
    assert intake.text_cells(table, "id").tolist() == ["0012", "0013"]
    assert intake.text_cells(table, "area").tolist() == ["120.50", "130"]
    hinted = intake.read_csv(path, text_columns=["ID"])      # the hint: kept as text at once
    assert hinted.frame["id"].tolist() == ["0012", "0013"]


@pytest.mark.parametrize("cell", ["inf", "1e400", "-2146826281", "1e70", "nan", "TRUE", " "])
def test_numbers_the_sheet_rules_read_otherwise_stay_text(tmp_path, cell):
    # 'inf' and '1e400' parse as floats in C but are not numbers a sheet holds; a COM error
    # code typed in a CSV is a number, not an error; 1e70 is refused quoting the cell.
    path = tmp_path / "s.csv"
    path.write_text(f"price,area\n250000,{cell}\n260000,130\n")
    assert intake.read_csv(path).frame["area"].dtype == object


@pytest.mark.parametrize("odd", [None, "0012", " 12", "12 ", "+5", "-0", "007"])
def test_a_text_column_of_integers_is_typed_only_when_written_plainly(tmp_path, odd):
    # An ID column hinted as text whose cells are integers as Python writes them is parsed
    # as numbers and its text made from them; one cell written otherwise ('0012' is an ID,
    # not 12) anywhere below the head keeps the file's text, as the careful reader has it.
    ids = [str(100001 + i) for i in range(120)]
    if odd is not None:
        ids[100] = odd
    text = "id,price,hood\n" + "".join(f"{v},{250000 + i},Old Quay\n"
                                        for i, v in enumerate(ids))
    path = tmp_path / "s.csv"
    path.write_text(text)
    fast = intake.read_csv(path, text_columns=["id", "hood"])
    careful = intake.read_csv(path, typed=False)
    _same_table(fast, careful)
    assert intake.text_cells(fast, "id").tolist() == ids
    assert (fast.frame["id"].dtype == float) == (odd is None)


@pytest.mark.parametrize("cell", ["   ", " Old Quay", "\u00a0", "\t"])
def test_text_cells_of_white_space_are_blank_on_both_paths(tmp_path, cell):
    # A cell of spaces only is blank (the careful rule: text of only spaces); a cell that
    # begins with a space is not. The fast path reads both from the bytes or, when a field
    # may begin with white space, by the careful rule.
    path = tmp_path / "s.csv"
    path.write_text(f"price,hood\n250000,Millbank\n260000,{cell}\n270000,\n",
                    encoding="utf-8")
    fast = intake.read_csv(path, text_columns=["hood"])
    careful = intake.read_csv(path, typed=False)
    _same_table(fast, careful)
    blank = intake.blank_cells(fast)["hood"].tolist()
    assert blank == [False, cell != " Old Quay", True]


@pytest.mark.parametrize("repeat", [False, True])
def test_integer_ids_are_checked_by_their_integers_as_by_their_text(tmp_path, repeat):
    # IDs written as plain integers are told apart by their integers (intake.plain_integers)
    # rather than by hashing their texts: a repeated ID is still found and named, exactly
    # as the careful reader's text finds it (ID rule: intake.keys.sale_ids)
    ids = [1001, 1002, 1003, 1004, 1005]
    if repeat:
        ids[3] = 1002
    lines = ["id,price,area"] + [f"{i},{200000 + 1000 * k},{90 + 7 * k % 5}"
                                 for k, i in enumerate(ids)]
    path = tmp_path / "sales.csv"
    path.write_text("\n".join(lines) + "\n")
    fast = intake.read_csv(path, text_columns=["id"])
    careful = intake.read_csv(path, typed=False)
    from plumbrule.intake.table import plain_integers
    assert plain_integers(fast, "id") is not None and plain_integers(careful, "id") is None
    s = parse_settings({"response": "price", "predictors": "area", "id_column": "id"})
    a = _outcome(lambda: prepare_sales(fast, s))
    b = _outcome(lambda: prepare_sales(careful, s))
    assert a[0] == b[0] == ("error" if repeat else "ok")
    if repeat:
        assert a[1] == b[1] and "ID '1002' is on sheet rows 3, 5" in a[1]
    else:
        pd.testing.assert_series_equal(a[1].ids, b[1].ids)


def _hinted_sales(tmp_path, lines):
    path = tmp_path / "sales.csv"
    path.write_text("\n".join(lines) + "\n")
    return (intake.read_csv(path, text_columns=["hood", "sold"]),
            intake.read_csv(path, typed=False))


def test_category_and_date_columns_are_typed_once_per_distinct_text(tmp_path):
    # A hinted text column comes from the C parser with a code per row; its labels, dates
    # and spelling counts are those of the careful cell-by-cell pass. 'Old  Quay' is the
    # label 'Old Quay' (labels are single-spaced: cells.to_labels); 'old quay' is a spelling
    # of it (the level rule: intake.levels), which the most frequent spelling names.
    hoods = ["Old Quay"] * 5 + ["old quay", "Old  Quay", "Millbank", "Millbank", "Hilltop"]
    lines = ["id,price,area,hood,sold"] + [
        f"{k + 1},{200000 + 5000 * k},{80 + 3 * k},{h},2024-0{1 + k % 9}-1{k % 10}"
        for k, h in enumerate(hoods)]
    fast, careful = _hinted_sales(tmp_path, lines)
    from plumbrule.intake.table import text_factors
    codes, uniq = text_factors(fast, "hood")
    assert sorted(uniq.tolist()) == sorted(set(hoods)) and len(codes) == len(hoods)
    assert text_factors(careful, "hood") is None
    s = parse_settings({"response": "price", "predictors": "area,hood,sold",
                        "categorical": "hood", "date_column": "sold"})
    a, b = prepare_sales(fast, s), prepare_sales(careful, s)
    pd.testing.assert_frame_equal(a.data, b.data)
    pd.testing.assert_frame_equal(a.level_merges, b.level_merges)
    merged = a.level_merges.set_index("spelling")
    assert merged["merged_into"].to_dict() == {"old quay": "Old Quay"}
    assert merged["sales"].tolist() == [1]
    assert (a.data["hood"] == "Old Quay").sum() == 7
    assert a.data["sold"].iloc[0] == pd.Timestamp("2024-01-10")


def test_a_totals_rows_date_does_not_settle_the_order_of_the_sales_dates(tmp_path):
    # The day/month order of text dates is settled by the sales' own dates: a totals row
    # dropped before typing (intake.totals) may not decide it, on either path. Here the
    # sales' dates read either way; the totals row's '13/01/2024' reads only as day/month.
    lines = ["id,price,area,hood,sold",
             "1,200000,80,Millbank,03/04/2024", "2,210000,85,Millbank,05/06/2024",
             "3,220000,90,Hilltop,07/08/2024",
             "Total,630000,255,Hilltop,13/01/2024"]
    fast, careful = _hinted_sales(tmp_path, lines)
    s = parse_settings({"response": "price", "predictors": "area,hood,sold",
                        "categorical": "hood", "date_column": "sold"})
    a, b = _outcome(lambda: prepare_sales(fast, s)), _outcome(lambda: prepare_sales(careful, s))
    assert a[0] == b[0]
    if a[0] == "ok":
        pd.testing.assert_frame_equal(a[1].data, b[1].data)
        pd.testing.assert_frame_equal(a[1].log, b[1].log)
    else:
        assert a[1] == b[1]

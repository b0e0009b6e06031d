"""Hostile or broken input files: each is refused (or read) with one line naming the place,
never an internal error, a memory blow-up or a message about another column.

Sources: the behaviour a user relies on (exit status 2 and one line "plumbrule: ..." on
stderr, errors naming the file, part, sheet row or column); the zip format's central
directory layout (PKWARE APPNOTE 4.3.12: uncompressed size at offset 24 of a directory
entry, from memory); Unicode normalisation forms NFC/NFD (UAX #15, via unicodedata).
"""

from __future__ import annotations

import struct
import unicodedata
import zipfile

import pytest

from plumbrule.cli.main import main
from plumbrule.demo.town import demo_sales

FIT = ["--response", "Sale price", "--predictors", "Living area,Age,Neighbourhood",
       "--categorical", "Neighbourhood"]


@pytest.fixture(scope="module")
def sales():
    return demo_sales(n=40, seed=3)[["Sale price", "Living area", "Age", "Neighbourhood"]]


@pytest.fixture(scope="module")
def book(sales, tmp_path_factory):
    """A small plain xlsx: Sales and Settings sheets (openpyxl)."""
    from workbook_snapshot import plain_book
    return plain_book(tmp_path_factory.mktemp("hostile") / "book.xlsx", sales,
                      {"response": "Sale price", "predictors": "Living area,Age"})


def _one_line(capsys, argv) -> str:
    """Run the CLI; the exit status must be 2 (bad input) with one line on stderr."""
    status = main([str(a) for a in argv])
    err = capsys.readouterr().err
    assert status == 2, err
    assert err.startswith("plumbrule: ") and "internal error" not in err, err
    assert err.count("\n") == 1, err
    return err


def _claiming(src, dest, part: str, size: int) -> None:
    """A copy of ``src`` whose zip directory says ``part`` inflates to ``size`` bytes."""
    data = bytearray(src.read_bytes())
    at = data.find(b"PK\x01\x02")
    while at >= 0:
        n = struct.unpack("<H", data[at + 28:at + 30])[0]
        if bytes(data[at + 46:at + 46 + n]) == part.encode():
            data[at + 24:at + 28] = struct.pack("<I", size)
        at = data.find(b"PK\x01\x02", at + 4)
    dest.write_bytes(bytes(data))


# --- zip bombs ---------------------------------------------------------------------

@pytest.mark.parametrize("argv", [["fit", "{b}"] + FIT[:4], ["fit", "{b}", "--sheet", "Sales"]
                                  + FIT[:4], ["run", "{b}"]], ids=["fit-book", "fit-sheet", "run"])
def test_a_part_claiming_4_gib_is_refused_from_the_directory(book, tmp_path, capsys, argv):
    bomb = tmp_path / "bomb.xlsx"
    _claiming(book, bomb, "xl/worksheets/sheet1.xml", 0xFFFFFFF0)
    err = _one_line(capsys, [a.format(b=bomb) for a in argv])
    assert "xl/worksheets/sheet1.xml" in err and "4.0 GiB" in err and "zip bomb" in err


def test_a_part_inflating_over_200_times_is_refused(book, tmp_path, capsys):
    # 51 MiB of spaces deflate to about 50 KB (deflate's ceiling is about 1032:1).
    bomb = tmp_path / "ratio.xlsx"
    with zipfile.ZipFile(book) as z, zipfile.ZipFile(bomb, "w", zipfile.ZIP_DEFLATED) as out:
        for info in z.infolist():
            out.writestr(info.filename, z.read(info.filename))
        with out.open("xl/media/pad.xml", "w") as fh:
            for _ in range(51):
                fh.write(b" " * (1 << 20))
    assert bomb.stat().st_size < 200_000
    err = _one_line(capsys, ["fit", bomb, "--sheet", "Sales", *FIT[:4]])
    assert "'xl/media/pad.xml' inflates" in err and "at most 200 times" in err


def test_the_limits_leave_a_real_sheet_alone():
    from plumbrule.intake.zipcheck import check_members
    # A million-row sheet: about 200 MB of XML deflated 10:1 (the brief's estimate).
    info = zipfile.ZipInfo("xl/worksheets/sheet1.xml")
    info.file_size, info.compress_size = 200 * 1024 ** 2, 20 * 1024 ** 2
    assert check_members([info], "big.xlsx") is None


# --- damaged files -------------------------------------------------------------------

@pytest.fixture
def damaged(book, tmp_path):
    """The book with bytes of the Sales sheet's deflate stream flipped."""
    data = bytearray(book.read_bytes())
    with zipfile.ZipFile(book) as z:
        info = z.getinfo("xl/worksheets/sheet1.xml")
    start = info.header_offset + 30 + len(info.filename.encode()) + len(info.extra)
    for k in range(40, 80):
        data[start + k] ^= 0x5A
    path = tmp_path / "damaged.xlsx"
    path.write_bytes(bytes(data))
    return path


def test_damaged_deflate_data_names_the_part_for_run(damaged, capsys):
    err = _one_line(capsys, ["run", damaged])
    assert "Part 'xl/worksheets/sheet1.xml'" in err and "damaged" in err


def test_damaged_deflate_data_names_the_sheet_for_fit(damaged, capsys):
    err = _one_line(capsys, ["fit", damaged, *FIT[:4]])
    assert "sheet 'Sales'" in err and "damaged" in err


def test_a_folder_named_like_a_workbook_is_said_to_be_a_folder(tmp_path, capsys):
    folder = tmp_path / "BOOK.xlsx"
    folder.mkdir()
    assert "is a folder" in _one_line(capsys, ["run", folder])


# --- CSV text --------------------------------------------------------------------------

@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-le"])
def test_a_utf16_csv_is_read(sales, tmp_path, capsys, encoding):
    path = tmp_path / "sales.csv"
    path.write_bytes(sales.to_csv(index=False).encode(encoding))   # utf-16 writes a BOM
    assert main(["fit", str(path), *FIT, "--json"]) == 0
    import json
    assert json.loads(capsys.readouterr().out)["fit"]["n_used"] == len(sales)


def test_an_unclosed_quote_is_reported_at_its_sheet_row(sales, tmp_path, capsys):
    lines = sales.to_csv(index=False).splitlines()
    lines[7] = '"' + lines[7]                      # line 8 of the file = sheet row 8
    path = tmp_path / "quote.csv"
    path.write_text("\n".join(lines) + "\n")
    err = _one_line(capsys, ["fit", path, *FIT])
    assert "row 8" in err and "never closed" in err


def test_a_header_only_csv_says_there_are_no_rows(sales, tmp_path, capsys):
    path = tmp_path / "head.csv"
    sales.head(0).to_csv(path, index=False)
    err = _one_line(capsys, ["fit", path, *FIT])
    assert "no rows below it" in err and "Neighbourhood" not in err


def test_a_one_row_csv_is_too_few_rows_not_a_single_level(sales, tmp_path, capsys):
    path = tmp_path / "one.csv"
    sales.head(1).to_csv(path, index=False)
    err = _one_line(capsys, ["fit", path, *FIT])
    assert "Only 1 usable rows" in err and "one level" not in err


def test_an_all_blank_predictor_is_named(sales, tmp_path, capsys):
    path = tmp_path / "blank.csv"
    sales.assign(Age="").to_csv(path, index=False)
    err = _one_line(capsys, ["fit", path, *FIT])
    assert "Column 'Age' is blank in every row" in err and "Neighbourhood" not in err


def test_true_is_not_a_sale_price(sales, tmp_path, capsys):
    frame = sales.astype(object)
    frame.loc[5, "Sale price"] = True                   # sheet row 7
    path = tmp_path / "bool.csv"
    frame.to_csv(path, index=False)
    err = _one_line(capsys, ["fit", path, *FIT])
    assert "'Sale price', row 7" in err and "TRUE/FALSE" in err


def test_true_in_a_yes_no_predictor_still_reads_as_one(sales):
    from plumbrule.analysis import analyze
    frame = sales.assign(Pool=[True, False] * (len(sales) // 2) + [True] * (len(sales) % 2))
    a = analyze(frame, {"response": "Sale price", "predictors": "Living area,Pool"})
    assert "Pool" in a.tables.coefficients["term"].tolist()


# --- names ----------------------------------------------------------------------------

def test_an_nfc_setting_finds_an_nfd_header(sales, tmp_path, capsys):
    nfd = unicodedata.normalize("NFD", "Âge")
    assert nfd != "Âge" and len(nfd) == 4
    path = tmp_path / "nfd.csv"
    sales.rename(columns={"Age": nfd}).to_csv(path, index=False)
    assert main(["fit", str(path), "--response", "Sale price", "--predictors",
                 "Living area,Âge"]) == 0, capsys.readouterr().err


def test_a_header_with_a_comma_is_named_in_quotes(sales, tmp_path, capsys):
    path = tmp_path / "comma.csv"
    sales.rename(columns={"Living area": "Lot size, sq ft"}).to_csv(path, index=False)
    err = _one_line(capsys, ["fit", path, "--response", "Sale price", "--predictors",
                             "Lot size, sq ft,Age"])
    assert "Did you mean 'Lot size, sq ft'?" in err and 'double quotes' in err
    assert main(["fit", str(path), "--response", "Sale price", "--predictors",
                 '"Lot size, sq ft",Age', "--json"]) == 0
    import json
    terms = [c["term"] for c in json.loads(capsys.readouterr().out)["coefficients"]]
    assert terms == ["intercept", "Lot size, sq ft", "Age"]


def test_quoted_names_in_the_settings_parser():
    from plumbrule.settings import parse_settings
    s = parse_settings({"predictors": 'Age, "Lot size, sq ft", "A ""B"""'})
    assert s.predictors == ("Age", "Lot size, sq ft", 'A "B"')
    assert parse_settings({"predictors": "Age,Bedrooms"}).predictors == ("Age", "Bedrooms")


# --- error values through run -----------------------------------------------------------

def test_run_logs_the_error_value_not_blank(book, tmp_path):
    import re
    from openpyxl import load_workbook
    from plumbrule.workbook.run import run_book
    path = tmp_path / "na.xlsx"
    with zipfile.ZipFile(book) as z, zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as out:
        for info in z.infolist():
            data = z.read(info.filename)
            if info.filename == "xl/worksheets/sheet1.xml":     # B5: a real #N/A cell
                data, k = re.subn(rb'<c r="B5"[^>]*><v>[^<]*</v></c>',
                                  b'<c r="B5" t="e"><v>#N/A</v></c>', data)
                assert k == 1
            out.writestr(info, data)
    run_book(path, backup=False)
    rows = [r for r in load_workbook(path, read_only=True)["Screening"].iter_rows(values_only=True)
            if r and r[0] == 5]
    assert rows and rows[0][1:3] == ("Living area", "error value #N/A")

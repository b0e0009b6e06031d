"""A user's workbook is never damaged: open books, parts openpyxl would lose, macros,
XML attacks and files that are not workbooks are handled before anything is written."""

from __future__ import annotations

import shutil
import zipfile

import pytest

from workbook_snapshot import rezip, sheet_part, snapshot, refused_run
from plumbrule.cli.main import main
from plumbrule.workbook import RESULT_SHEETS


@pytest.mark.parametrize("lock", ["~$book.xlsx", ".~lock.book.xlsx#"],
                         ids=["excel", "libreoffice"])
def test_open_workbook_is_refused(book, capsys, lock):
    (book.parent / lock).write_text("owner")
    refused_run(book, capsys, "open in a spreadsheet", lock, "nothing was written")


_DRAWING_NS = "http://schemas.openxmlformats.org/drawingml/2006/spreadsheetDrawing"
_R_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PNG = bytes.fromhex("89504e470d0a1a0a0000000d49484452000000010000000108060000001f15c489"
                     "0000000d49444154789c6360000002000154a24f5d0000000049454e44ae426082")


def _with_picture(src, dest):
    """Add a picture (a drawing with xdr:pic and a PNG) to the 'Read me' sheet."""
    part = sheet_part(src, "Read me")
    folder, name = part.rsplit("/", 1)
    rels = f"{folder}/_rels/{name}.rels"
    with zipfile.ZipFile(src) as z:
        assert rels not in z.namelist()
    drawing = (f'<xdr:wsDr xmlns:xdr="{_DRAWING_NS}" xmlns:r="{_R_NS}"><xdr:absoluteAnchor>'
               '<xdr:pic><xdr:blipFill><a:blip xmlns:a="http://schemas.openxmlformats.org/'
               'drawingml/2006/main" r:embed="rId1"/></xdr:blipFill></xdr:pic>'
               '</xdr:absoluteAnchor></xdr:wsDr>')
    rel = ('<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
           '<Relationship Id="rId1" Type="{t}" Target="{target}"/></Relationships>')
    return rezip(src, dest, replace={
        part: lambda d: d.replace(b"</worksheet>",
                                  f'<drawing xmlns:r="{_R_NS}" r:id="rId1"/></worksheet>'.encode()),
        "[Content_Types].xml": lambda d: d.replace(b"</Types>", (
            '<Default Extension="png" ContentType="image/png"/><Override PartName='
            '"/xl/drawings/drawing99.xml" ContentType="application/vnd.openxmlformats-'
            'officedocument.drawing+xml"/></Types>').encode()),
    }, add={
        rels: rel.format(t=_R_NS + "/drawing", target="../drawings/drawing99.xml"),
        "xl/drawings/drawing99.xml": drawing,
        "xl/drawings/_rels/drawing99.xml.rels": rel.format(t=_R_NS + "/image",
                                                           target="../media/image99.png"),
        "xl/media/image99.png": _PNG,
    })


def _with_sparklines(src, dest):
    part = sheet_part(src, "Sales")
    ext = ('<extLst><ext uri="{05C60535-1F16-4fd2-B633-F4F36F0B64E0}" xmlns:x14="http://schemas.'
           'microsoft.com/office/spreadsheetml/2009/9/main"><x14:sparklineGroups/></ext></extLst>')
    return rezip(src, dest, replace={part: lambda d: d.replace(b"</worksheet>",
                                                              (ext + "</worksheet>").encode())})


@pytest.mark.parametrize("inject, word", [(_with_picture, "pictures"),
                                          (_with_sparklines, "sparklines")],
                         ids=["picture", "sparklines"])
def test_parts_openpyxl_would_lose_leave_the_book_untouched(filled, tmp_path, capsys,
                                                            inject, word):
    book = inject(filled, tmp_path / "book.xlsx")
    original = book.read_bytes()
    assert main(["run", str(book)]) == 0
    out = capsys.readouterr().out
    assert word in out and "book.results.xlsx" in out
    assert book.read_bytes() == original                     # not touched
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.results.xlsx", "book.xlsx"]
    # the results copy: the input values plus the result sheets
    from python_calamine import CalamineWorkbook
    res = CalamineWorkbook.from_path(str(tmp_path / "book.results.xlsx"))
    src = CalamineWorkbook.from_path(str(book))
    assert res.get_sheet_by_name("Sales").to_python() == src.get_sheet_by_name("Sales").to_python()
    for name in RESULT_SHEETS[:5]:
        assert name in res.sheet_names


def test_our_own_charts_do_not_count_as_foreign_parts(filled, tmp_path):
    # After one run the Report sheet holds plumbrule's charts; a rerun still updates in place.
    from plumbrule.workbook.run import run_book
    book = shutil.copyfile(filled, tmp_path / "book.xlsx")
    run_book(book, backup=False)
    second = run_book(book, backup=False)
    assert second.in_place and second.unsupported == ()


def _as_xlsm(src, dest, vba=b"VBA-PROJECT-BYTES\x00\x01"):
    """Turn the book into a macro-enabled one with a (stand-in) vbaProject.bin."""
    ct_main = b"application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"
    return rezip(src, dest, replace={
        "[Content_Types].xml": lambda d: d.replace(ct_main, b"application/vnd.ms-excel.sheet."
                                                   b"macroEnabled.main+xml").replace(
            b"</Types>", b'<Default Extension="bin" ContentType="application/vnd.ms-office.'
                         b'vbaProject"/></Types>'),
        "xl/_rels/workbook.xml.rels": lambda d: d.replace(b"</Relationships>", (
            '<Relationship Id="rId99" Type="http://schemas.microsoft.com/office/2006/'
            'relationships/vbaProject" Target="vbaProject.bin"/></Relationships>').encode()),
    }, add={"xl/vbaProject.bin": vba})


def test_xlsm_keeps_its_macros(filled, tmp_path):
    book = _as_xlsm(filled, tmp_path / "book.xlsm")
    assert main(["run", str(book), "--no-backup"]) == 0
    with zipfile.ZipFile(book) as z:
        assert z.read("xl/vbaProject.bin") == b"VBA-PROJECT-BYTES\x00\x01"
        assert b"macroEnabled" in z.read("[Content_Types].xml")
        assert b"vbaProject" in z.read("xl/_rels/workbook.xml.rels")
    assert "Model" in snapshot(book)["sheetnames"]


def test_entity_expansion_bomb_is_refused(filled, tmp_path, capsys):
    # The "billion laughs" shape (nested entities); defusedxml refuses DTDs outright.
    dtd = ('<!DOCTYPE worksheet [<!ENTITY a "lol"><!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">'
           '<!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;">]>')
    part = sheet_part(filled, "Read me")
    book = rezip(filled, tmp_path / "book.xlsx", replace={
        part: lambda d: dtd.encode() + d.replace(b"<t>plumbrule workbook</t>", b"<t>&c;</t>")})
    refused_run(book, capsys, "entit", "refuses")


def test_a_dtd_behind_a_long_comment_is_refused(filled, tmp_path, capsys):
    # the prolog is read a little at a time up to the root element: a DOCTYPE 3 KB in,
    # past the first reads, is still found before the root
    dtd = b'<!DOCTYPE worksheet [<!ENTITY a "lol">]>'
    part = sheet_part(filled, "Read me")

    def behind_comment(d: bytes) -> bytes:
        end = d.index(b"?>") + 2 if d.startswith(b"<?xml") else 0
        return d[:end] + b"<!--" + b" long note " * 300 + b"-->" + dtd + d[end:]
    book = rezip(filled, tmp_path / "book.xlsx", replace={part: behind_comment})
    refused_run(book, capsys, "entit", "refuses")


def test_not_a_workbook(tmp_path, capsys):
    book = tmp_path / "book.xlsx"
    book.write_text("Sale price,Living area\n100,10\n")
    refused_run(book, capsys, "not a workbook")


def test_encrypted_workbook(tmp_path, capsys):
    # An encrypted OOXML file is an OLE compound file holding an EncryptionInfo stream
    # ([MS-OFFCRYPTO] 2.3.4); this stand-in has the signature and the stream name.
    book = tmp_path / "book.xlsx"
    book.write_bytes(bytes.fromhex("d0cf11e0a1b11ae1") + b"\x00" * 64
                     + "EncryptionInfo".encode("utf-16-le") + b"\x00" * 64)
    refused_run(book, capsys, "encrypted")


def test_missing_sales_sheet(tmp_path, capsys):
    from openpyxl import Workbook
    wb = Workbook()
    wb.active.title = "Data"
    wb.active.append(["Sale price", "Living area"])
    wb.active.append([100, 10])
    book = tmp_path / "book.xlsx"
    wb.save(book)
    refused_run(book, capsys, "no table or sheet named 'Sales'")


def test_empty_sales_table(tmp_path, capsys):
    book = tmp_path / "book.xlsx"
    assert main(["new", str(book)]) == 0
    capsys.readouterr()
    refused_run(book, capsys, "Sales", "no sales")


def test_user_sheet_with_a_result_sheet_name_is_not_replaced(book, capsys):
    from openpyxl import load_workbook
    wb = load_workbook(book)
    wb.create_sheet("Model")["A1"] = "my own model notes"
    wb.save(book)
    refused_run(book, capsys, "'Model'", "did not write", "rename")


def test_a_failed_save_leaves_the_book_as_it_was(book, monkeypatch, capsys):
    import plumbrule.workbook.graft as graft

    def broken_graft(user, data, out, *args):
        with open(out, "wb") as fh:          # half a file, then the disk fills up
            fh.write(b"partial")
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(graft, "graft", broken_graft)
    refused_run(book, capsys, "No space left", "not changed")


def test_missing_file(tmp_path, capsys):
    assert main(["run", str(tmp_path / "nope.xlsx")]) == 2
    assert "does not exist" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_a_book_saved_from_a_spreadsheet_during_the_run_is_kept(book, monkeypatch, capsys):
    """If the user saves the book while plumbrule runs, their save wins; nothing written."""
    import os
    import plumbrule.workbook.graft as graft
    real = graft.graft

    def graft_while_user_saves(user, data, out, *args):
        real(user, data, out, *args)
        st = os.stat(user)
        os.utime(user, ns=(st.st_atime_ns, st.st_mtime_ns + 5_000_000_000))
    monkeypatch.setattr(graft, "graft", graft_while_user_saves)
    original = book.read_bytes()
    assert main(["run", str(book)]) == 2
    assert "changed while plumbrule was running" in capsys.readouterr().err
    assert book.read_bytes() == original
    assert sorted(p.name for p in book.parent.iterdir()) == ["book.xlsx"]

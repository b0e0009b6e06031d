"""A workbook's sheets as a PDF, printed by LibreOffice (headless).

``plumbrule report BOOK.xlsx --pdf [OUT.pdf]`` prints the Report (with ``--all`` every
result sheet). The user's book is never opened for writing: a temporary copy is made
in which every sheet not wanted is hidden (a spreadsheet prints no hidden sheet), and
that copy is converted. Each conversion gets a private LibreOffice profile
(``-env:UserInstallation``), so it runs while the user has LibreOffice open.
"""

from __future__ import annotations

import glob
import os
import shutil
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path
from typing import Iterable, Sequence

from plumbrule.errors import WorkbookError

INSTALL_HINT = ("install LibreOffice (https://www.libreoffice.org/download/; on Debian or "
                "Ubuntu: sudo apt-get install libreoffice-calc) or put soffice on the PATH")
TIMEOUT = 300          # seconds: a 100,000-sale book converts in well under this


def find_soffice() -> str | None:
    """The LibreOffice program: on the PATH, else at the usual install places; None
    when it is not installed."""
    for name in ("soffice", "libreoffice"):
        found = shutil.which(name)
        if found:
            return found
    places = ["/usr/bin/soffice", "/usr/lib/libreoffice/program/soffice",
              "/usr/local/bin/soffice", "/snap/bin/libreoffice",
              *sorted(glob.glob("/opt/libreoffice*/program/soffice"), reverse=True),
              "/Applications/LibreOffice.app/Contents/MacOS/soffice"]
    if sys.platform.startswith("win"):
        for root in filter(None, (os.environ.get("ProgramFiles"),
                                  os.environ.get("ProgramFiles(x86)"),
                                  r"C:\Program Files", r"C:\Program Files (x86)")):
            places.append(os.path.join(root, "LibreOffice", "program", "soffice.exe"))
    return next((p for p in places if os.path.isfile(p) and os.access(p, os.X_OK)), None)


def sheet_names(book: str | Path) -> list[tuple[str, str | None]]:
    """(name, state) of every sheet in tab order; state as written: None or 'visible',
    'hidden', 'veryHidden'."""
    try:
        with zipfile.ZipFile(book) as z:
            wb, _ = _workbook_part(z, book)
    except (zipfile.BadZipFile, OSError) as exc:
        raise WorkbookError(f"'{Path(book).name}' cannot be read as an .xlsx workbook ({exc})."
                            " Save it from your spreadsheet as an Excel workbook.") from None
    return [(s.name, s.state) for s in wb.sheets]


def _workbook_part(z: zipfile.ZipFile, book: str | Path):
    """(the parsed workbook part, its part name) of the open package ``z``; a package
    without one is a WorkbookError saying how to save the file."""
    from plumbrule.workbook import package as pk
    main = pk.main_part(z)
    if main is None:
        raise WorkbookError(f"'{Path(book).name}' holds no workbook part. Save it from your "
                            "spreadsheet as an Excel workbook (.xlsx).")
    return pk.read_workbook(z, main), main


def print_copy(book: str | Path, sheets: Iterable[str], dest: str | Path) -> Path:
    """Write ``dest``: ``book`` with every sheet outside ``sheets`` hidden and the first
    wanted sheet active (only ``xl/workbook.xml`` differs). Raises WorkbookError naming a
    wanted sheet the book does not have."""
    from plumbrule.workbook import package as pk
    wanted = {s.casefold() for s in sheets}
    with zipfile.ZipFile(book) as z:
        wb, main = _workbook_part(z, book)
        have = {s.name.casefold() for s in wb.sheets}
        missing = sorted(wanted - have)
        if missing:
            raise WorkbookError(f"'{Path(book).name}' has no sheet '{missing[0]}'. Run "
                                f"plumbrule run {Path(book).name} first, or name a sheet it has.")
        data = z.read(main)
        nodes = pk.scan(data, main)
        ed = pk.Edits(data)
        first = None
        for node in nodes:
            if node.uri != pk.NS_MAIN:
                continue
            if node.local == "sheet":
                name = (node.get("name") or "").casefold()
                s, e = pk.start_tag(data, node)
                tag = data[s:e]
                if name in wanted:
                    first = next(i for i, sh in enumerate(wb.sheets)
                                 if sh.name.casefold() == name) if first is None else first
                    tag = _drop_attr(tag, b"state")
                else:
                    tag = pk.set_attr(tag, "state", "hidden")
                ed.replace(s, e, tag)
            elif node.local == "definedName" and _print_name_of_other(node, wb, wanted):
                ed.replace(node.start, node.end, b"")
        for node in nodes:
            if node.uri == pk.NS_MAIN and node.local == "workbookView":
                s, e = pk.start_tag(data, node)
                tag = pk.set_attr(data[s:e], "activeTab", str(first or 0))
                ed.replace(s, e, pk.set_attr(tag, "firstSheet", str(first or 0)))
        edited = ed.apply()
        with zipfile.ZipFile(dest, "w", zipfile.ZIP_DEFLATED) as out:
            for info in z.infolist():
                out.writestr(info, edited if info.filename == main else z.read(info.filename))
    return Path(dest)


def _print_name_of_other(node, wb, wanted: set[str]) -> bool:
    """A print area or print titles of a sheet not wanted: LibreOffice prints a hidden
    sheet that has a print area, so the copy drops them."""
    if (node.get("name") or "").lower() not in ("_xlnm.print_area", "_xlnm.print_titles"):
        return False
    local = node.get("localSheetId")
    if local is None or not local.isdigit() or int(local) >= len(wb.sheets):
        return False
    return wb.sheets[int(local)].name.casefold() not in wanted


def _drop_attr(tag: bytes, name: bytes) -> bytes:
    import re
    return re.sub(rb'\s' + name + rb'\s*=\s*("[^"]*"|\'[^\']*\')', b"", tag)


def convert(books: Sequence[Path], outdir: Path, soffice: str | None = None) -> list[Path]:
    """Each of ``books`` printed to ``outdir/<stem>.pdf`` by one LibreOffice process with a
    private profile; returns the PDFs. Raises WorkbookError when LibreOffice is missing or
    fails."""
    if not books:
        return []
    soffice = soffice or find_soffice()
    if soffice is None:
        raise WorkbookError(f"A PDF needs LibreOffice, which was not found: {INSTALL_HINT}.")
    outdir.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="plumbrule-lo-") as profile:
        try:
            done = subprocess.run(
                [soffice, f"-env:UserInstallation={Path(profile).as_uri()}", "--headless",
                 "--norestore", "--nologo", "--convert-to", "pdf", "--outdir", str(outdir),
                 *map(str, books)],
                capture_output=True, text=True, timeout=TIMEOUT)
        except subprocess.TimeoutExpired:
            raise WorkbookError(f"LibreOffice did not finish printing within {TIMEOUT} s. "
                                "Close other LibreOffice windows and try again.") from None
        except OSError as exc:
            raise WorkbookError(f"LibreOffice ({soffice}) could not be started ({exc}): "
                                f"{INSTALL_HINT}.") from None
    pdfs = [outdir / (Path(b).stem + ".pdf") for b in books]
    missing = [p for p in pdfs if not p.exists()]
    if done.returncode != 0 or missing:
        detail = " ".join((done.stderr or done.stdout or "").split())[:200]
        raise WorkbookError(f"LibreOffice could not print the workbook ({detail or 'no output'})."
                            " Open it in LibreOffice to see why, or try again.")
    return pdfs


def write_pdf(book: str | Path, sheets: Sequence[str], out: str | Path,
              soffice: str | None = None) -> Path:
    """``sheets`` of ``book`` printed to ``out`` (a PDF; replaced atomically). The book is
    only read."""
    book, out = Path(book), Path(out)
    soffice = soffice or find_soffice()
    if soffice is None:
        raise WorkbookError(f"A PDF needs LibreOffice, which was not found: {INSTALL_HINT}.")
    if not out.parent.exists():
        raise WorkbookError(f"Folder '{out.parent}' does not exist. Create it first or name "
                            "another PDF file.")
    with tempfile.TemporaryDirectory(prefix="plumbrule-pdf-") as tmp:
        copy = print_copy(book, sheets, Path(tmp) / "print.xlsx")
        pdf, = convert([copy], Path(tmp) / "out", soffice)
        staged = out.with_name(f".~plumbrule-{os.getpid()}-{out.name}")
        try:
            shutil.copyfile(pdf, staged)
            os.replace(staged, out)
        except OSError as exc:
            raise WorkbookError(f"Cannot write '{out}' ({exc.strerror or exc}). Check the "
                                "folder is writable and the PDF is not open elsewhere.") from None
        finally:
            if staged.exists():
                staged.unlink()
    return out


def page_count(pdf: str | Path) -> int:
    """Pages in a PDF LibreOffice wrote (its page objects, counted in the file)."""
    import re
    data = Path(pdf).read_bytes()
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", data))


def pages_per_sheet(book: str | Path, sheets: Sequence[str] | None = None,
                    soffice: str | None = None) -> dict[str, int]:
    """Printed pages of each visible sheet (or of ``sheets``), one copy per sheet printed
    by one LibreOffice process."""
    names = [n for n, state in sheet_names(book) if state in (None, "visible")] \
        if sheets is None else list(sheets)
    if not names:
        return {}
    with tempfile.TemporaryDirectory(prefix="plumbrule-pages-") as tmp:
        copies = [print_copy(book, [n], Path(tmp) / f"sheet{i}.xlsx")
                  for i, n in enumerate(names)]
        pdfs = convert(copies, Path(tmp) / "out", soffice)
        return {n: page_count(p) for n, p in zip(names, pdfs, strict=True)}

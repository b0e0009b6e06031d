"""Checks made before a workbook is touched.

plumbrule updates a book by grafting its result sheets into the package (graft.py),
so every part of the user's file is carried byte for byte. The parts listed as
unsupported here are the ones the workbook contract names (what an openpyxl load and
save would lose: pictures, shapes, text boxes, charts not ours, sparklines and other
sheet extensions, slicers, pivot tables, form controls...); for those the book is
left untouched and the results go to BOOK.results.xlsx (conservative by design).

* :func:`check_not_open` — an owner lock file beside the book means a spreadsheet has it open.
* :func:`inspect_book` — the file is a zip package with a workbook part (not an
  encrypted or legacy file), every XML part is free of DTDs and entity declarations
  (parsed with defusedxml), and it lists the parts openpyxl cannot carry through a
  load and save (pictures, shapes, charts not ours, sparklines and other extensions,
  slicers, pivot tables, form controls, …), and a protected workbook structure. Parts
  that hang off plumbrule's own result sheets (proven by their marks, see
  :mod:`.package`) do not count: plumbrule wrote them and they are carried byte for byte.
  ``result_sheets`` are the sheets a rerun replaces (marked, and named as the mark says).
"""

from __future__ import annotations

import re
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path

from plumbrule.errors import WorkbookError
from plumbrule.intake.zipcheck import check_package
from plumbrule.workbook import package as pk

_CFB_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"   # OLE compound file: encrypted xlsx or .xls
_CT = "application/vnd.openxmlformats-officedocument."
_SS = _CT + "spreadsheetml."

# Content types openpyxl reads and writes back faithfully (or regenerates harmlessly).
CARRIED = {
    _SS + "sheet.main+xml",
    "application/vnd.ms-excel.sheet.macroEnabled.main+xml",
    _SS + "worksheet+xml",
    _SS + "styles+xml",
    _SS + "sharedStrings+xml",
    _SS + "table+xml",
    _SS + "comments+xml",
    _SS + "calcChain+xml",
    _SS + "externalLink+xml",
    _CT + "theme+xml",
    _CT + "vmlDrawing",
    "application/vnd.openxmlformats-package.core-properties+xml",
    _CT + "extended-properties+xml",
    _CT + "custom-properties+xml",
    "application/vnd.openxmlformats-package.relationships+xml",
    _SS + "printerSettings",
    "application/xml",
}
VBA_TYPES = {
    "application/vnd.ms-office.vbaProject",
    "application/vnd.ms-office.vbaProjectSignature",
}
_FRIENDLY_TYPES = [
    ("drawing+xml", "pictures, shapes, text boxes or charts"),
    ("chartsheet", "chart sheets"),
    ("drawingml.chart", "charts"),
    ("chartStyle", "charts"),
    ("chartColorStyle", "charts"),
    ("pivotTable", "pivot tables"),
    ("pivotCache", "pivot caches"),
    ("slicer", "slicers"),
    ("timeline", "timelines"),
    ("ctrlProps", "form controls"),
    ("activeX", "ActiveX controls"),
    ("oleObject", "embedded objects"),
    ("package", "embedded objects"),
    ("threadedComment", "threaded comments"),
    ("person", "threaded comments"),
    ("connections", "data connections"),
    ("queryTable", "query tables"),
    ("sheetMetadata", "dynamic-array formula metadata"),
    ("rdRichValue", "pictures in cells"),
    ("richData", "pictures in cells"),
    ("customXml", "custom XML data"),
    ("revision", "shared-workbook revisions"),
    ("image/", "pictures"),
    ("model", "data model"),
    ("webextension", "add-in task panes"),
    ("dialogsheet", "dialog sheets"),
    ("macrosheet", "Excel 4 macro sheets"),
    ("volatileDependencies", "volatile dependencies"),
]
# Extensions (extLst) named for the user; every sheet-level extension is a part openpyxl drops.
_EXT_NAMES = {
    "05C60535-1F16-4FD2-B633-F4F36F0B64E0": "sparklines",
    "78C0D931-6437-407D-A8EE-F0AAD7539E65":
        "data bars, icon sets or other newer conditional formats",
    "CCE6A557-97BC-4B89-ADB6-D9C93CAAB3DF": "data validations that use other sheets",
    "A8765BA9-456A-4DAB-B4F3-ACF838C121DE": "slicers",
    "3A4CF648-6AED-40F4-86FF-DC5316D8AED3": "slicers",
    "7E03D99C-DC04-49D9-9315-930204A7B6E9": "timelines",
    "FCE2AD5D-F65C-4FA6-A056-5C36A1767C68": "data model",
    "BBE1A952-AA13-448E-AADC-164F8A28A991": "slicers",
    "46BE6895-7355-4A93-B00E-2C351335B9C9": "slicers",
    "876F7934-8845-4945-9796-88D515C7AA90": "pivot caches",
    "841E416B-1EF1-43B6-AB56-02D37102CBD5": "pivot caches",
}
# Sheet elements openpyxl's reader drops (after </sheetData>).
_SHEET_DROPPED = {
    b"controls": "form controls", b"oleObjects": "embedded objects",
    b"picture": "a background picture", b"legacyDrawingHF": "header/footer pictures",
    b"drawingHF": "header/footer pictures", b"customSheetViews": "custom views",
    b"protectedRanges": "protected ranges", b"cellWatches": "cell watches",
    b"smartTags": "smart tags", b"webPublishItems": "web publishing items",
    b"dataConsolidate": "data consolidation settings", b"AlternateContent":
        "form controls or embedded objects",
}
_TAG = re.compile(rb"<(?:[A-Za-z0-9_]+:)?([A-Za-z0-9_]+)[\s/>]")
_EXT_URI = re.compile(rb"<(?:[A-Za-z0-9_]+:)?ext\b[^>]*\buri=\"\{([0-9A-Fa-f-]+)\}\"")


@dataclass(frozen=True)
class BookParts:
    """What :func:`inspect_book` found. ``unsupported`` holds one plain description per
    kind of part that openpyxl would lose (empty when the book can be updated in place)."""

    macro_enabled: bool
    sheets: tuple[str, ...]
    result_sheets: tuple[str, ...]       # plumbrule's, proven by their marks: replaced
    unsupported: tuple[str, ...] = field(default_factory=tuple)
    listed: tuple[str, ...] = field(default_factory=tuple)   # plumb_sheets (a hint only)


def lock_files(path: Path) -> list[Path]:
    """Owner lock files a spreadsheet program keeps beside an open workbook."""
    return [path.with_name("~$" + path.name), path.with_name(".~lock." + path.name + "#")]


def check_not_open(path: str | Path) -> None:
    path = Path(path)
    for lock in lock_files(path):
        if lock.exists():
            raise WorkbookError(
                f"'{path.name}' is open in a spreadsheet (lock file '{lock.name}' beside it). "
                "Close it there and run again; nothing was written. If it is not open, "
                "delete the lock file.")


def check_is_file(path: Path) -> None:
    if not path.exists():
        raise WorkbookError(f"Workbook '{path}' does not exist. Check the path.")
    if path.is_dir():
        raise WorkbookError(f"'{path.name}' is a folder, not a workbook. Give the path of the "
                            ".xlsx file.")
    if path.suffix.lower() not in (".xlsx", ".xlsm"):
        raise WorkbookError(f"'{path.name}' is not an .xlsx or .xlsm workbook. Save it as an "
                            "Excel workbook (.xlsx) and run again.")
    with open(path, "rb") as fh:
        head = fh.read(8)
    if head == _CFB_MAGIC:
        data = path.read_bytes()
        if "EncryptionInfo".encode("utf-16-le") in data:
            raise WorkbookError(f"'{path.name}' is encrypted (password-protected). Save a copy "
                                "without a password to open it, and run on that.")
        raise WorkbookError(f"'{path.name}' is an old-format (.xls) workbook with an .xlsx name. "
                            "Save it as an Excel workbook (.xlsx) and run again.")
    if not zipfile.is_zipfile(path):
        raise WorkbookError(f"'{path.name}' is not a workbook (not an .xlsx package). "
                            "Save it from your spreadsheet as an Excel workbook (.xlsx).")


def _friendly(content_type: str, name: str) -> str:
    for key, text in _FRIENDLY_TYPES:
        if key.lower() in content_type.lower() or key.lower() in name.lower():
            return text
    return f"part '{name}' ({content_type or 'unknown type'})"


def inspect_book(path: str | Path) -> BookParts:
    """Validate the package and list what openpyxl could not carry (see module doc)."""
    path = Path(path)
    check_is_file(path)
    try:
        z = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError) as exc:
        raise WorkbookError(f"'{path.name}' cannot be opened as a workbook ({exc}).") from None
    with z:
        check_package(z)         # from the directory, before any part is inflated
        try:
            return _inspect(z, path)
        except (zipfile.BadZipFile, KeyError, EOFError, OSError, zlib.error) as exc:
            raise WorkbookError(f"'{path.name}' is damaged ({exc}). Open and save it in your "
                                "spreadsheet first.") from None


def _inspect(z: zipfile.ZipFile, path: Path) -> BookParts:
    types = pk.content_types(z)
    main = _main_part(z, path)
    _check_xml(z, types)
    wb = _read_workbook(z, main, path)
    macro = types.get(main, "").startswith("application/vnd.ms-excel.sheet.macroEnabled")
    marked = pk.marks(wb)
    owned = _owned_parts(z, wb, marked)
    found = _sheet_level_losses(z, wb, marked)
    described = _drawings_of(z, wb, marked)
    found += _foreign_parts(types, owned | described | {main}, macro)
    found += _form_controls(z, types, owned)
    if pk.structure_locked(wb):
        found.append("a protected workbook structure (Review > Protect Workbook: no sheets "
                     "may be added)")
    return BookParts(macro_enabled=macro, sheets=tuple(s.name for s in wb.sheets),
                     result_sheets=tuple(s.name for s in pk.replaceable(wb)),
                     unsupported=tuple(dict.fromkeys(found)),
                     listed=tuple(_listed_sheets(wb)))


def _main_part(z: zipfile.ZipFile, path: Path) -> str:
    main = pk.main_part(z)
    if main is None or main not in z.NameToInfo:
        raise WorkbookError(f"'{path.name}' is a zip archive but holds no workbook. Save it from "
                            "your spreadsheet as an Excel workbook (.xlsx).")
    return main


def _check_xml(z: zipfile.ZipFile, types: dict[str, str]) -> None:
    """Every XML part's prolog through defusedxml (no DTD, no entity declarations)."""
    for name, ctype in types.items():
        if name.endswith((".xml", ".rels", ".vml")) or ctype.endswith("xml"):
            try:
                pk.check_prolog(z, name)
            except (zipfile.BadZipFile, EOFError, zlib.error) as exc:
                raise WorkbookError(
                    f"Part '{name}' of '{Path(z.filename or 'the workbook').name}' is damaged "
                    f"({' '.join(str(exc).split())}). Open the book in your spreadsheet and "
                    "save it again, or restore a backup.") from None


def _read_workbook(z: zipfile.ZipFile, main: str, path: Path) -> pk.Workbook:
    if b"purl.oclc.org/ooxml/spreadsheetml" in z.read(main):
        raise WorkbookError(f"'{path.name}' is saved as Strict Open XML. Save it as an ordinary "
                            "Excel Workbook (.xlsx) and run again.")
    return pk.read_workbook(z, main)


def _owned_parts(z: zipfile.ZipFile, wb: pk.Workbook, marked: dict[int, str]) -> set[str]:
    """Parts hanging off plumbrule's own (marked) sheets: written by plumbrule, carried
    byte for byte, so they never count as foreign (also when the user renamed the sheet)."""
    owned: set[str] = set()
    for s in wb.sheets:
        if s.index in marked and s.part:
            owned.add(s.part)
            pk.reachable(z, s.part, owned)
    return owned


def _users_sheets(z: zipfile.ZipFile, wb: pk.Workbook, marked: dict[int, str]):
    return [s for s in wb.sheets if s.index not in marked and s.part in z.NameToInfo]


def _sheet_level_losses(z: zipfile.ZipFile, wb: pk.Workbook, marked) -> list[str]:
    # Workbook-level extensions (x15 settings, LibreOffice's calc settings...) are kept:
    # xl/workbook.xml is edited in place, never re-serialised. Slicer and pivot caches
    # they point to are parts of their own and are caught by _foreign_parts.
    return [f"{what} (sheet '{s.name}')" for s in _users_sheets(z, wb, marked)
            for what in _sheet_losses(z, s.part)]


def _drawings_of(z: zipfile.ZipFile, wb: pk.Workbook, marked) -> set[str]:
    """Drawing parts (and what hangs off them) already named through their sheet."""
    described: set[str] = set()
    for s in _users_sheets(z, wb, marked):
        for rel in pk.rels(z, s.part).values():
            if rel.kind == "drawing":
                described.add(rel.target)
                pk.reachable(z, rel.target, described)
    return described


def _foreign_parts(types: dict[str, str], skip: set[str], macro: bool) -> list[str]:
    found = []
    for name, ctype in types.items():
        if name in skip or ctype in CARRIED or (ctype in VBA_TYPES and macro):
            continue
        if name.startswith("customXml/"):
            found.append("custom XML data")
            continue
        if ctype == _SS + "worksheet+xml" or name.startswith("docProps/thumbnail"):
            continue
        found.append(_friendly(ctype, name))
    return found


def _form_controls(z: zipfile.ZipFile, types: dict[str, str], owned: set[str]) -> list[str]:
    found = []
    for name, ctype in types.items():
        if ctype == _CT + "vmlDrawing" and name not in owned:
            kinds = set(re.findall(rb'ObjectType="(\w+)"', z.read(name))) - {b"Note"}
            if kinds:
                found.append("form controls (" + ", ".join(sorted(k.decode() for k in kinds)) + ")")
    return found


def _sheet_losses(z: zipfile.ZipFile, part: str) -> list[str]:
    """What openpyxl's reader would drop from one worksheet part."""
    data = z.read(part)
    end = data.rfind(b"</sheetData>")
    tail = data[end:] if end >= 0 else data
    out = []
    names = set(_TAG.findall(tail))
    for tag, what in _SHEET_DROPPED.items():
        if tag in names:
            out.append(what)
    if b"extLst" in names:
        for uri in _EXT_URI.findall(tail):
            u = uri.decode().upper()
            out.append(_EXT_NAMES.get(u, f"an extension {{{u}}}"))
    for rel in pk.rels(z, part).values():
        if rel.kind == "drawing":
            out.append(_drawing_contents(z, rel.target))
    return out


def _drawing_contents(z: zipfile.ZipFile, part: str) -> str:
    if part not in z.NameToInfo:
        return "a drawing"
    data = z.read(part)
    names = _TAG.findall(data)
    parts = []
    for tag, what in ((b"pic", "pictures"), (b"sp", "shapes or text boxes"),
                      (b"cxnSp", "connectors"), (b"graphicFrame", "charts or other objects")):
        if tag in names:
            parts.append(what)
    return ", ".join(parts) or "a drawing"


def _listed_sheets(wb: pk.Workbook) -> list[str]:
    """The sheets the hidden defined name ``plumb_sheets`` lists: a hint for messages only
    (it can be copied or edited; the marks decide)."""
    for n in wb.names:
        if n.name == "plumb_sheets" and n.local is None:
            return parse_sheet_list(n.text)
    return []


def parse_sheet_list(text: str) -> list[str]:
    """'="Report|Model"' → ['Report', 'Model']."""
    t = text.strip().lstrip("=").strip()
    if len(t) >= 2 and t[0] == t[-1] == '"':
        t = t[1:-1].replace('""', '"')
    return [s for s in t.split("|") if s]

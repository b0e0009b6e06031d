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
  slicers, pivot tables, form controls, …). Parts that hang only off plumbrule's own
  result sheets do not count: those sheets are replaced anyway.
"""

from __future__ import annotations

import posixpath
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from plumbrule.errors import WorkbookError

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
_NS_R = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_NS_PKG = "http://schemas.openxmlformats.org/package/2006/relationships"


@dataclass(frozen=True)
class BookParts:
    """What :func:`inspect_book` found. ``unsupported`` holds one plain description per
    kind of part that openpyxl would lose (empty when the book can be updated in place)."""

    macro_enabled: bool
    sheets: tuple[str, ...]
    result_sheets: tuple[str, ...]
    unsupported: tuple[str, ...] = field(default_factory=tuple)


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


def _parse(data: bytes, part: str):
    """A small XML part through defusedxml (DTDs and entities refused)."""
    import defusedxml.ElementTree as dET
    from defusedxml import DefusedXmlException
    from xml.etree.ElementTree import ParseError
    try:
        return dET.fromstring(data, forbid_dtd=True)
    except DefusedXmlException:
        raise _dtd_error(part) from None
    except ParseError as exc:
        raise WorkbookError(f"Part '{part}' of the workbook is not valid XML ({exc}). The file "
                            "is damaged; open and save it in your spreadsheet first.") from None


def _dtd_error(part: str) -> WorkbookError:
    return WorkbookError(
        f"Part '{part}' of the workbook declares a DTD or XML entities (a possible "
        "entity-expansion attack); plumbrule refuses to read it. Nothing was written.")


def _check_prolog(z: zipfile.ZipFile, part: str) -> None:
    """Parse ``part`` up to its root element with defusedxml (DTDs come before the root)."""
    import defusedxml.ElementTree as dET
    from defusedxml import DefusedXmlException
    from xml.etree.ElementTree import ParseError
    try:
        with z.open(part) as fh:
            for _ in dET.iterparse(fh, events=("start",), forbid_dtd=True):
                break
    except DefusedXmlException:
        raise _dtd_error(part) from None
    except ParseError as exc:
        raise WorkbookError(f"Part '{part}' of the workbook is not valid XML ({exc}). The file "
                            "is damaged; open and save it in your spreadsheet first.") from None


def _rels(z: zipfile.ZipFile, part: str) -> dict[str, tuple[str, str]]:
    """rId → (type suffix, target part) for ``part``'s relationships."""
    folder, name = posixpath.split(part)
    rel_part = posixpath.join(folder, "_rels", name + ".rels")
    if rel_part not in z.NameToInfo:
        return {}
    root = _parse(z.read(rel_part), rel_part)
    out = {}
    for rel in root.iter(f"{{{_NS_PKG}}}Relationship"):
        if rel.get("TargetMode") == "External":
            continue
        target = rel.get("Target", "")
        target = target[1:] if target.startswith("/") else posixpath.normpath(
            posixpath.join(folder, target))
        out[rel.get("Id")] = (rel.get("Type", "").rsplit("/", 1)[-1], target)
    return out


def _content_types(z: zipfile.ZipFile) -> dict[str, str]:
    if "[Content_Types].xml" not in z.NameToInfo:
        raise WorkbookError(
            "The file is a zip archive but not a workbook (no [Content_Types].xml). "
            "Save it from your spreadsheet as an Excel workbook (.xlsx)."
        )
    root = _parse(z.read("[Content_Types].xml"), "[Content_Types].xml")
    ns = "{http://schemas.openxmlformats.org/package/2006/content-types}"
    defaults = {
        d.get("Extension", "").lower(): d.get("ContentType", "") for d in root.iter(ns + "Default")
    }
    overrides = {
        o.get("PartName", "").lstrip("/"): o.get("ContentType", "")
        for o in root.iter(ns + "Override")
    }
    types = {}
    for name in z.namelist():
        if name.endswith("/"):
            continue
        types[name] = overrides.get(name) or defaults.get(name.rsplit(".", 1)[-1].lower(), "")
    return types


def _friendly(content_type: str, name: str) -> str:
    for key, text in _FRIENDLY_TYPES:
        if key.lower() in content_type.lower() or key.lower() in name.lower():
            return text
    return f"part '{name}' ({content_type or 'unknown type'})"


def _reachable(z, start: str, seen: set[str]) -> None:
    """Every part reachable by relationships from ``start`` (drawings → charts → styles)."""
    for _, target in _rels(z, start).values():
        if target not in seen and target in z.NameToInfo:
            seen.add(target)
            _reachable(z, target, seen)


def inspect_book(path: str | Path) -> BookParts:
    """Validate the package and list what openpyxl could not carry (see module doc)."""
    path = Path(path)
    check_is_file(path)
    try:
        z = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError) as exc:
        raise WorkbookError(f"'{path.name}' cannot be opened as a workbook ({exc}).") from None
    with z:
        try:
            return _inspect(z, path)
        except (zipfile.BadZipFile, KeyError, EOFError, OSError) as exc:
            raise WorkbookError(f"'{path.name}' is damaged ({exc}). Open and save it in your "
                                "spreadsheet first.") from None


def _inspect(z: zipfile.ZipFile, path: Path) -> BookParts:
    types = _content_types(z)
    root_rels = _rels(z, "")
    main = next((t for kind, t in root_rels.values() if kind == "officeDocument"), None)
    if main is None or main not in z.NameToInfo:
        raise WorkbookError(f"'{path.name}' is a zip archive but holds no workbook. Save it from "
                            "your spreadsheet as an Excel workbook (.xlsx).")
    for name, ctype in types.items():
        if name.endswith((".xml", ".rels", ".vml")) or ctype.endswith("xml"):
            _check_prolog(z, name)
    wb_xml = z.read(main)
    if b"purl.oclc.org/ooxml/spreadsheetml" in wb_xml:
        raise WorkbookError(f"'{path.name}' is saved as Strict Open XML. Save it as an ordinary "
                            "Excel Workbook (.xlsx) and run again.")
    wb = _parse(wb_xml, main)
    wb_rels = _rels(z, main)
    sheets: list[tuple[str, str]] = []
    for s in wb.iter(f"{{{_NS_MAIN}}}sheet"):
        rid = s.get(f"{{{_NS_R}}}id")
        sheets.append((s.get("name", ""), wb_rels.get(rid, ("", ""))[1]))
    ours = _result_sheet_names(wb)
    found: list[str] = []
    macro = types.get(main, "").startswith("application/vnd.ms-excel.sheet.macroEnabled")

    # parts hanging off our own result sheets are replaced with them
    owned: set[str] = set()
    for name, part in sheets:
        if name in ours:
            owned.add(part)
            _reachable(z, part, owned)
    # Workbook-level extensions (x15 settings, LibreOffice's calc settings...) are kept:
    # xl/workbook.xml is edited textually, never re-serialised. Slicer and pivot caches
    # they point to are parts of their own and are caught below.
    described: set[str] = set()          # parts already named through their sheet
    for name, part in sheets:
        if name in ours or part not in z.NameToInfo:
            continue
        found.extend(f"{what} (sheet '{name}')" for what in _sheet_losses(z, part))
        for kind, target in _rels(z, part).values():
            if kind == "drawing":
                described.add(target)
                _reachable(z, target, described)
    for name, ctype in types.items():
        if name in owned or name in described or name == main or ctype in CARRIED:
            continue
        if ctype in VBA_TYPES and macro:
            continue
        if name.startswith("customXml/"):
            found.append("custom XML data")
            continue
        if ctype == _SS + "worksheet+xml" or name.startswith("docProps/thumbnail"):
            continue
        found.append(_friendly(ctype, name))
    for name, ctype in types.items():
        if ctype == _CT + "vmlDrawing" and name not in owned:
            kinds = set(re.findall(rb'ObjectType="(\w+)"', z.read(name))) - {b"Note"}
            if kinds:
                found.append("form controls (" + ", ".join(sorted(k.decode() for k in kinds)) + ")")
    return BookParts(macro_enabled=macro, sheets=tuple(n for n, _ in sheets),
                     result_sheets=tuple(n for n, _ in sheets if n in ours),
                     unsupported=tuple(dict.fromkeys(found)))


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
    sheet_rels = _rels(z, part)
    for kind, target in sheet_rels.values():
        if kind == "drawing":
            out.append(_drawing_contents(z, target))
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


def _result_sheet_names(wb) -> set[str]:
    """plumbrule's own sheets, as recorded by the hidden defined name ``plumb_sheets``."""
    for dn in wb.iter(f"{{{_NS_MAIN}}}definedName"):
        if dn.get("name") == "plumb_sheets" and dn.text:
            return set(parse_sheet_list(dn.text))
    return set()


def parse_sheet_list(text: str) -> list[str]:
    """'="Report|Model"' → ['Report', 'Model']."""
    t = text.strip().lstrip("=").strip()
    if len(t) >= 2 and t[0] == t[-1] == '"':
        t = t[1:-1].replace('""', '"')
    return [s for s in t.split("|") if s]

"""The workbook package (Open Packaging Conventions), read as XML.

Shared by safety.py (what is in the book, what is plumbrule's) and graft.py (putting
result sheets in). Every decision is taken on parsed XML (defusedxml): relationships,
content types, the sheet list, defined names and plumbrule's marks. :func:`scan`
locates elements by byte offset (expat, the parser defusedxml wraps) so graft.py can
edit a part in place and leave every byte it does not edit as the user's file had it,
whatever the dialect: prefixes, quote style, ``<a></a>`` or ``<a/>``, attribute order.

plumbrule's mark: each result sheet carries a hidden sheet-local defined name
:data:`MARK_NAME` whose value is ``"plumbrule:<sheet name>"``. A sheet-local name
lives and dies with its sheet (deleting the sheet deletes it, a new sheet never has
it) and survives a save in Excel and in LibreOffice Calc (measured for LibreOffice; an
extension element in the sheet part or a code name does not). A sheet is plumbrule's
to replace only when it carries the mark and still has the name the mark records.
"""

from __future__ import annotations

import posixpath
import xml.parsers.expat as expat
import zipfile
from dataclasses import dataclass

from plumbrule.errors import WorkbookError

NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
NS_R = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
NS_PKG = "http://schemas.openxmlformats.org/package/2006/relationships"
NS_CT = "http://schemas.openxmlformats.org/package/2006/content-types"
REL_SHEET = NS_R + "/worksheet"
CONTENT_TYPES = "[Content_Types].xml"

MARK_NAME = "plumb_result"
_MARK_PREFIX = "plumbrule:"


def mark_text(sheet: str) -> str:
    """The defined name's formula text marking ``sheet`` as plumbrule's (a string constant)."""
    return '"' + (_MARK_PREFIX + sheet).replace('"', '""') + '"'


def _mark_role(text: str | None) -> str | None:
    t = (text or "").strip().lstrip("=").strip()
    if len(t) < 2 or t[0] != '"' or t[-1] != '"':
        return None
    t = t[1:-1].replace('""', '"')
    return t[len(_MARK_PREFIX):] if t.startswith(_MARK_PREFIX) else None


# --- parsing --------------------------------------------------------------------

def xml_error(part: str, exc) -> WorkbookError:
    return WorkbookError(f"Part '{part}' of the workbook is not valid XML ({exc}). The file "
                         "is damaged; open and save it in your spreadsheet first.")


def dtd_error(part: str) -> WorkbookError:
    return WorkbookError(
        f"Part '{part}' of the workbook declares a DTD or XML entities (a possible "
        "entity-expansion attack); plumbrule refuses to read it. Nothing was written.")


def parse(data: bytes, part: str):
    """A part through defusedxml (DTDs and entities refused); the root Element."""
    import defusedxml.ElementTree as dET
    from defusedxml import DefusedXmlException
    from xml.etree.ElementTree import ParseError
    try:
        return dET.fromstring(data, forbid_dtd=True)
    except DefusedXmlException:
        raise dtd_error(part) from None
    except ParseError as exc:
        raise xml_error(part, exc) from None


def check_prolog(z: zipfile.ZipFile, part: str) -> None:
    """Parse ``part`` up to its root element with defusedxml (DTDs come before the root)."""
    import defusedxml.ElementTree as dET
    from defusedxml import DefusedXmlException
    from xml.etree.ElementTree import ParseError
    try:
        with z.open(part) as fh:
            for _ in dET.iterparse(_Sips(fh), events=("start",), forbid_dtd=True):
                break
    except DefusedXmlException:
        raise dtd_error(part) from None
    except ParseError as exc:
        raise xml_error(part, exc) from None


class _Sips:
    """A part read a little at a time: the parser stops at the root element, which comes
    within the first bytes, instead of building the elements of iterparse's first 16 KiB
    (a sheet's rows; 80 parts of a result book each time it is checked)."""

    def __init__(self, fh, size: int = 1024):
        self.fh, self.size = fh, size

    def read(self, n: int = -1) -> bytes:
        return self.fh.read(self.size if n < 0 else min(n, self.size))


# --- relationships and content types ---------------------------------------------

@dataclass(frozen=True)
class Rel:
    """One relationship: ``kind`` is the last segment of its type ("worksheet"),
    ``target`` the resolved part name (no leading slash), or the raw target if external."""

    id: str
    kind: str
    target: str
    external: bool = False


def rels_part(part: str) -> str:
    folder, name = posixpath.split(part)
    return posixpath.join(folder, "_rels", name + ".rels")


def resolve(source: str, target: str) -> str:
    """A relationship target of ``source`` as a part name (no leading slash)."""
    if target.startswith("/"):
        return posixpath.normpath(target[1:])
    return posixpath.normpath(posixpath.join(posixpath.dirname(source), target))


def rels(z: zipfile.ZipFile, part: str, external: bool = False) -> dict[str, Rel]:
    """rId → :class:`Rel` for ``part``'s relationships ('' = the package); internal only
    unless ``external``."""
    rel_part = rels_part(part)
    if rel_part not in z.NameToInfo:
        return {}
    out = {}
    for el in parse(z.read(rel_part), rel_part).iter(f"{{{NS_PKG}}}Relationship"):
        ext = el.get("TargetMode") == "External"
        if ext and not external:
            continue
        target = el.get("Target", "")
        out[el.get("Id")] = Rel(el.get("Id"), el.get("Type", "").rsplit("/", 1)[-1],
                                target if ext else resolve(part, target), ext)
    return out


def content_types(z: zipfile.ZipFile) -> dict[str, str]:
    """part name → content type, for every part in the zip."""
    if CONTENT_TYPES not in z.NameToInfo:
        raise WorkbookError(
            "The file is a zip archive but not a workbook (no [Content_Types].xml). "
            "Save it from your spreadsheet as an Excel workbook (.xlsx)."
        )
    root = parse(z.read(CONTENT_TYPES), CONTENT_TYPES)
    ns = f"{{{NS_CT}}}"
    defaults = {d.get("Extension", "").lower(): d.get("ContentType", "")
                for d in root.iter(ns + "Default")}
    overrides = {o.get("PartName", "").lstrip("/").lower(): o.get("ContentType", "")
                 for o in root.iter(ns + "Override")}
    return {name: overrides.get(name.lower()) or defaults.get(name.rsplit(".", 1)[-1].lower(), "")
            for name in z.namelist() if not name.endswith("/")}


def main_part(z: zipfile.ZipFile) -> str | None:
    return next((r.target for r in rels(z, "").values() if r.kind == "officeDocument"), None)


def reachable(z: zipfile.ZipFile, start: str, seen: set[str] | None = None,
              stop: frozenset[str] = frozenset()) -> set[str]:
    """Every part reachable by relationships from ``start`` (drawings → charts → styles),
    added to ``seen`` (returned); parts in ``stop`` are not entered."""
    seen = set() if seen is None else seen
    todo = [start]
    while todo:
        for r in rels(z, todo.pop()).values():
            if r.target not in seen and r.target not in stop and r.target in z.NameToInfo:
                seen.add(r.target)
                todo.append(r.target)
    return seen


def free_part_name(wanted: str, taken: set[str]) -> str:
    """``wanted``, or ``stem-2.ext``, ``stem-3.ext``... whichever (with its rels part) is not
    in ``taken`` (lower-case names: part names are case-insensitive). Adds it to ``taken``."""
    stem, dot, ext = wanted.rpartition(".")
    if not dot:
        stem, ext = wanted, ""
    name, k = wanted, 1
    while name.lower() in taken or rels_part(name).lower() in taken:
        k += 1
        name = f"{stem}-{k}{dot}{ext}"
    taken.update({name.lower(), rels_part(name).lower()})
    return name


# --- the workbook part: sheets, defined names, marks -----------------------------

@dataclass(frozen=True)
class Sheet:
    """One ``<sheet>`` of workbook.xml, in tab order (``index`` = localSheetId)."""

    index: int
    name: str
    sheet_id: int
    rid: str
    part: str
    state: str | None


@dataclass(frozen=True)
class Name:
    """One ``<definedName>``: ``local`` is its localSheetId (None = workbook-wide)."""

    name: str
    local: int | None
    text: str
    attrs: tuple[tuple[str, str], ...]


@dataclass(frozen=True)
class Workbook:
    main: str
    root: object                       # the parsed workbook.xml (ElementTree Element)
    rels: dict                         # rId → Rel
    sheets: tuple[Sheet, ...]
    names: tuple[Name, ...]


def read_workbook(z: zipfile.ZipFile, main: str) -> Workbook:
    root = parse(z.read(main), main)
    wb_rels = rels(z, main)
    sheets = []
    for i, el in enumerate(root.iter(f"{{{NS_MAIN}}}sheet")):
        rid = el.get(f"{{{NS_R}}}id", "")
        rel = wb_rels.get(rid)
        try:
            sheet_id = int(el.get("sheetId", ""))
        except ValueError:
            raise WorkbookError(
                f"Sheet '{el.get('name')}' has no valid sheetId in '{main}'. The file is "
                "damaged; open and save it in your spreadsheet first.") from None
        sheets.append(Sheet(i, el.get("name", ""), sheet_id, rid, rel.target if rel else "",
                            el.get("state")))
    names = []
    for el in root.iter(f"{{{NS_MAIN}}}definedName"):
        local = el.get("localSheetId")
        names.append(Name(el.get("name", ""), int(local) if local not in (None, "") else None,
                          el.text or "", tuple(el.attrib.items())))
    return Workbook(main, root, wb_rels, tuple(sheets), tuple(names))


def marks(wb: Workbook) -> dict[int, str]:
    """sheet index → the sheet name its plumbrule mark records (sheets plumbrule wrote)."""
    out = {}
    for n in wb.names:
        if n.name.lower() == MARK_NAME and n.local is not None and n.local < len(wb.sheets):
            role = _mark_role(n.text)
            if role is not None:
                out[n.local] = role
    return out


def replaceable(wb: Workbook) -> tuple[Sheet, ...]:
    """plumbrule's sheets that a rerun replaces: marked, and still named as the mark says
    (a marked sheet the user renamed is theirs now)."""
    m = marks(wb)
    return tuple(s for s in wb.sheets
                 if s.index in m and m[s.index].casefold() == s.name.casefold())


def structure_locked(wb: Workbook) -> bool:
    el = wb.root.find(f"{{{NS_MAIN}}}workbookProtection")   # type: ignore[attr-defined]
    return el is not None and el.get("lockStructure", "").lower() in ("1", "true")


# --- locating elements by byte offset ----------------------------------------------

@dataclass
class Node:
    """An element of a part: its qualified name, resolved namespace, attributes as written
    and byte offsets. ``body`` is (start, end) of its content, None when self-closing."""

    qname: str
    uri: str
    local: str
    attrs: dict
    start: int
    end: int
    body: tuple[int, int] | None
    parent: int | None
    scope: dict                        # prefix ('' = default) → namespace URI in scope

    @property
    def prefix(self) -> str:
        return self.qname[: -len(self.local)]

    def get(self, name: str, ns: str = "") -> str | None:
        """Attribute value by local name and namespace URI ('' = unprefixed)."""
        for q, v in self.attrs.items():
            p, _, loc = q.rpartition(":")
            if loc == name and (self.scope.get(p) if p else "") == ns and p != "xmlns":
                return v
        return None

    def prefix_for(self, uri: str) -> str | None:
        """A prefix bound to ``uri`` here ('' for the default namespace), or None."""
        if self.scope.get("") == uri:
            return ""
        return next((p for p, u in self.scope.items() if u == uri and p), None)


def tag_end(data: bytes, i: int) -> int:
    """Offset just after the tag starting at ``data[i] == '<'`` (quotes respected)."""
    quote = None
    for j in range(i + 1, len(data)):
        c = data[j]
        if quote is not None:
            if c == quote:
                quote = None
        elif c in (0x22, 0x27):
            quote = c
        elif c == 0x3E:
            return j + 1
    raise ValueError("unterminated tag")


def scan(data: bytes, part: str) -> list[Node]:
    """Every element of ``data`` in document order (DTDs refused, like defusedxml)."""
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise WorkbookError(f"Part '{part}' of the workbook is saved as UTF-16, which plumbrule "
                            "does not edit. Open and save the book in your spreadsheet first.")
    nodes: list[Node] = []
    stack: list[int] = []
    p = expat.ParserCreate()
    p.ordered_attributes = True

    def refuse(*_):
        raise dtd_error(part)

    def start(qname, attrs):
        pairs = dict(zip(attrs[::2], attrs[1::2], strict=True))
        scope = dict(nodes[stack[-1]].scope) if stack else {"xml": ""}
        for k, v in pairs.items():
            if k == "xmlns":
                scope[""] = v
            elif k.startswith("xmlns:"):
                scope[k[6:]] = v
        prefix, _, local = qname.rpartition(":")
        i = p.CurrentByteIndex
        end = tag_end(data, i)
        closed = data[end - 2:end] == b"/>"
        nodes.append(Node(qname, scope.get(prefix, ""), local, pairs, i, end,
                          None if closed else (end, -1), stack[-1] if stack else None, scope))
        stack.append(len(nodes) - 1)

    def stop(qname):
        n = nodes[stack.pop()]
        if n.body is not None:
            i = p.CurrentByteIndex
            n.body = (n.body[0], i)
            n.end = tag_end(data, i)

    p.StartDoctypeDeclHandler = refuse
    p.EntityDeclHandler = refuse
    p.StartElementHandler = start
    p.EndElementHandler = stop
    try:
        p.Parse(data, True)
    except expat.ExpatError as exc:
        raise xml_error(part, exc) from None
    return nodes


def children(nodes: list[Node], parent: int, local: str | None = None,
             uri: str | None = None) -> list[int]:
    return [i for i, n in enumerate(nodes) if n.parent == parent
            and (local is None or n.local == local) and (uri is None or n.uri == uri)]


def start_tag(data: bytes, node: Node) -> tuple[int, int]:
    """(start, end) offsets of ``node``'s start tag (the whole element when self-closing)."""
    return node.start, node.end if node.body is None else node.body[0]


def set_attr(tag: bytes, name: str, value: str) -> bytes:
    """A start tag with unprefixed attribute ``name`` set to ``value`` (the other
    attributes, their order and quotes exactly as written)."""
    quoted = escape_attr(value).encode("utf-8")
    pos = _attr_value_span(tag, name.encode())
    if pos is not None:
        return tag[:pos[0]] + quoted + tag[pos[1]:]
    close = len(tag) - (2 if tag.endswith(b"/>") else 1)
    return tag[:close].rstrip() + b" " + name.encode() + b'="' + quoted + b'"' + tag[close:]


def _attr_value_span(tag: bytes, name: bytes) -> tuple[int, int] | None:
    """(start, end) of the value (inside the quotes) of attribute ``name`` in a start tag."""
    n = len(tag)
    i = 1
    while i < n and tag[i] not in b" \t\r\n/>":     # past the element's name
        i += 1
    while i < n:
        while i < n and tag[i] in b" \t\r\n":
            i += 1
        j = i
        while j < n and tag[j] not in b" \t\r\n=/>":
            j += 1
        if j == i:
            return None
        key = tag[i:j]
        while j < n and tag[j] in b" \t\r\n=":
            j += 1
        quote = tag[j:j + 1]
        k = tag.index(quote, j + 1)
        if key == name:
            return j + 1, k
        i = k + 1
    return None


def escape_text(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def escape_attr(text: str) -> str:
    return escape_text(text).replace('"', "&quot;")


class Edits:
    """Non-overlapping byte-range replacements of one part, applied at once."""

    def __init__(self, data: bytes):
        self.data = data
        self._edits: list[tuple[int, int, bytes]] = []

    def replace(self, start: int, end: int, new: bytes) -> None:
        self._edits.append((start, end, new))

    def insert(self, at: int, new: bytes) -> None:
        self._edits.append((at, at, new))

    def apply(self) -> bytes:
        out, pos = [], 0
        for start, end, new in sorted(self._edits, key=lambda e: (e[0], e[1])):
            if start < pos:
                raise ValueError("overlapping edits")
            out += [self.data[pos:start], new]
            pos = end
        out.append(self.data[pos:])
        return b"".join(out)

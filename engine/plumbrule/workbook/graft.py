"""Put freshly written result sheets into a user's workbook without re-saving it.

openpyxl builds the result sheets in a small workbook of their own; this module
copies those sheet parts (with their drawings, charts, comments, tables) into the
user's package. Every other part of the user's file is copied byte for byte, so
nothing openpyxl would normalise, drop or re-serialise is touched, and the cost
does not grow with the size of the Sales sheet beyond one zip copy.

Only four of the user's parts are edited, in place (:func:`package.scan` locates the
elements; every byte outside them, namespace prefixes and ``mc:Ignorable`` lists
included, stays as written): ``[Content_Types].xml``, ``xl/workbook.xml`` (sheet list,
defined names, full recalculation on load), ``xl/_rels/workbook.xml.rels`` and
``xl/styles.xml`` (our cell formats appended, reusing identical ones, so rerunning
does not grow the file). ``calcChain.xml`` is dropped (the spreadsheet rebuilds it; it
would name cells of replaced sheets). A sheet is replaced only when it carries
plumbrule's mark (:func:`package.replaceable`); new parts get names no existing part has.
"""

from __future__ import annotations

import io
import posixpath
import re
import zipfile
from dataclasses import dataclass
from typing import Iterable

from plumbrule.errors import WorkbookError
from plumbrule.workbook import package as pk
from plumbrule.workbook.rawzip import copy_member
from plumbrule.workbook.package import (
    CONTENT_TYPES,
    NS_MAIN,
    NS_R,
    REL_SHEET,
    Edits,
    children,
    escape_attr,
    escape_text,
    rels_part,
    scan,
    set_attr,
    start_tag,
)

_NS_MAIN = NS_MAIN
# workbook.xml children that follow definedNames / calcPr (ECMA-376 Part 1, CT_Workbook order)
_AFTER_NAMES = ("calcPr", "oleSize", "customWorkbookViews", "pivotCaches", "smartTagPr",
                "smartTagTypes", "webPublishing", "fileRecoveryPr", "webPublishObjects", "extLst")
_AFTER_CALC = _AFTER_NAMES[1:]


@dataclass(frozen=True)
class _Pkg:
    z: zipfile.ZipFile
    types: dict
    main: str
    wb: pk.Workbook

    @property
    def rels(self) -> dict:
        return self.wb.rels


@dataclass(frozen=True)
class _NewSheet:
    name: str
    rid: str
    sheet_id: int
    part: str
    state: str | None


def _open(z: zipfile.ZipFile) -> _Pkg:
    main = pk.main_part(z)
    if main is None or main not in z.NameToInfo:
        raise WorkbookError("The file holds no workbook part. Save it from your spreadsheet "
                            "as an Excel workbook (.xlsx).")
    return _Pkg(z, pk.content_types(z), main, pk.read_workbook(z, main))


def graft(user_path, result_bytes: bytes, out_path, replace: Iterable[str],
          sheet_names: Iterable[str]) -> None:
    """Write ``out_path``: the user's book minus the sheets ``replace`` (each must carry
    plumbrule's mark, else :class:`WorkbookError` and nothing is written) plus the sheets
    ``sheet_names`` of the result workbook ``result_bytes`` (appended, in that order)."""
    wanted = list(sheet_names)
    from plumbrule.intake.zipcheck import check_package
    with zipfile.ZipFile(user_path) as uz, zipfile.ZipFile(io.BytesIO(result_bytes)) as rz:
        check_package(uz)        # the book may have changed since it was inspected
        u, r = _open(uz), _open(rz)
        removed, kept = _split_sheets(u, replace)
        drop = _parts_to_drop(u, removed)
        new_parts = _name_new_parts(u, r, wanted, drop)
        out = _result_parts(u, r, new_parts, drop)
        new_sheets = _new_sheets(u, r, kept, removed, wanted, new_parts)
        out[u.main] = _edit_workbook(u, r, kept, new_sheets)
        styles = None if _styles_part(u) else new_parts.get(_result_styles(r))
        out[rels_part(u.main)] = _edit_rels(u, removed, drop, new_sheets, styles)
        out[CONTENT_TYPES] = _edit_types(uz, drop, new_parts, r.types)
        _write(uz, out_path, drop, out)


def _split_sheets(u: _Pkg, replace: Iterable[str]):
    """(removed, kept) sheets; every removed one proven plumbrule's by its mark."""
    wanted = {s.casefold() for s in replace}
    ours = {s.index for s in pk.replaceable(u.wb)}
    removed = [s for s in u.wb.sheets if s.name.casefold() in wanted]
    for s in removed:
        if s.index not in ours:
            raise WorkbookError(
                f"Sheet '{s.name}' does not carry plumbrule's mark, so it is not replaced "
                "(plumbrule replaces only the sheets it wrote). Nothing was written.",
                sheet=s.name)
    return removed, [s for s in u.wb.sheets if s not in removed]


def _parts_to_drop(u: _Pkg, removed) -> set[str]:
    """The removed sheets' parts and what hangs only off them, their rels, calcChain."""
    sheet_parts = frozenset(s.part for s in removed if s.part)
    still_used = pk.reachable(u.z, "", stop=sheet_parts)
    gone: set[str] = set(sheet_parts)
    for part in sheet_parts:
        pk.reachable(u.z, part, gone)
    drop = gone - still_used
    drop |= {rels_part(p) for p in drop}
    drop |= {x.target for x in u.rels.values() if x.kind == "calcChain"}
    return drop


def _name_new_parts(u: _Pkg, r: _Pkg, wanted, drop: set[str]) -> dict[str, str]:
    """result part → its name in the user's package: 'plumbrule-' + its own name, made
    unique against every part (and content-type override) the user's book keeps."""
    ct = pk.parse(u.z.read(CONTENT_TYPES), CONTENT_TYPES)
    listed = {o.get("PartName", "").lstrip("/") for o in ct.iter(f"{{{pk.NS_CT}}}Override")}
    dropped = {d.lower() for d in drop}
    taken = {n.lower() for n in (*u.z.namelist(), *listed)} - dropped
    r_sheets = {s.name: s for s in r.wb.sheets}
    new_parts: dict[str, str] = {}
    for name in wanted:
        part = r_sheets[name].part
        for p in [part, *sorted(pk.reachable(r.z, part))]:
            if p not in new_parts:
                folder, base = posixpath.split(p)
                new_parts[p] = pk.free_part_name(posixpath.join(folder, "plumbrule-" + base),
                                                 taken)
    if not _styles_part(u):
        # A book without a styles part (valid: every cell in the default format) takes the
        # result book's, under its usual name when free (openpyxl looks only there).
        styles = _result_styles(r)
        new_parts[styles] = pk.free_part_name(styles, taken)
    return new_parts


def _result_parts(u: _Pkg, r: _Pkg, new_parts: dict[str, str], drop: set[str]) -> dict:
    """The result parts under their new names (formats remapped, table ids unique, rels
    retargeted) and the merged styles.xml."""
    style_map = _merge_styles(u, r)
    out: dict[str, bytes] = {}
    table_id = _max_table_id(u, drop)
    for old, new in new_parts.items():
        data = r.z.read(old)
        ctype = r.types.get(old, "")
        if ctype.endswith("worksheet+xml"):
            data = _restyle_sheet(data, style_map["xf"], style_map["dxf"])
        elif ctype.endswith("table+xml"):
            table_id += 1
            root = scan(data, old)[0]
            s, e = start_tag(data, root)
            data = data[:s] + set_attr(data[s:e], "id", str(table_id)) + data[e:]
        out[new] = data
        rel = rels_part(old)
        if rel in r.z.NameToInfo:
            out[rels_part(new)] = _retarget(r.z.read(rel), old, new_parts)
    if style_map["part"] is not None:
        out[style_map["part"]] = style_map["data"]
    return out


def _new_sheets(u: _Pkg, r: _Pkg, kept, removed, wanted, new_parts) -> list[_NewSheet]:
    r_sheets = {s.name: s for s in r.wb.sheets}
    taken = set(u.rels) - {s.rid for s in removed}
    next_id = max([s.sheet_id for s in kept] + [0]) + 1
    out, n = [], 1
    for i, name in enumerate(wanted):
        while f"rIdPlumb{n}" in taken:
            n += 1
        taken.add(f"rIdPlumb{n}")
        out.append(_NewSheet(name, f"rIdPlumb{n}", next_id + i,
                             new_parts[r_sheets[name].part], r_sheets[name].state))
    return out


def _write(uz: zipfile.ZipFile, out_path, drop: set[str], out: dict[str, bytes]) -> None:
    dropped = {d.lower() for d in drop}
    edited = {k.lower(): k for k in out}
    with zipfile.ZipFile(out_path, "w", zipfile.ZIP_DEFLATED) as oz:
        for info in uz.infolist():
            name = info.filename.lower()
            if name in dropped:
                continue
            if name in edited:
                oz.writestr(_info(info), out.pop(edited[name]))
            else:   # unchanged: its compressed bytes as they are (no inflate, no deflate)
                copy_member(uz, info, oz, _info(info))
        for name, data in out.items():
            oz.writestr(_info(zipfile.ZipInfo(name)), data)


def _info(src: zipfile.ZipInfo) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(src.filename, date_time=(1980, 1, 1, 0, 0, 0))
    info.compress_type = zipfile.ZIP_DEFLATED
    info.external_attr = src.external_attr
    return info


def _max_table_id(u: _Pkg, drop: set[str]) -> int:
    best = 0
    for name, ctype in u.types.items():
        if ctype.endswith("table+xml") and name not in drop:
            value = pk.parse(u.z.read(name), name).get("id", "")
            if value.isdigit():
                best = max(best, int(value))
    return best


def _retarget(data: bytes, old_part: str, mapping: dict[str, str]) -> bytes:
    """A result part's rels with targets naming the renamed parts (absolute)."""
    nodes = scan(data, rels_part(old_part))
    ed = Edits(data)
    for node in nodes[1:]:
        if node.local != "Relationship" or node.get("TargetMode") == "External":
            continue
        resolved = pk.resolve(old_part, node.get("Target") or "")
        if resolved in mapping:
            s, e = start_tag(data, node)
            ed.replace(s, e, set_attr(data[s:e], "Target", "/" + mapping[resolved]))
    return ed.apply()


# --- workbook.xml ----------------------------------------------------------------

def _child(nodes, parent: int, local: str) -> int | None:
    found = children(nodes, parent, local, NS_MAIN)
    return found[0] if found else None


def _anchor(nodes, root: int, following: tuple[str, ...]) -> int:
    """Where a new child of ``root`` goes: before the first of ``following`` present, else
    at the end of its content (CT_Workbook's element order)."""
    for i in children(nodes, root, uri=NS_MAIN):
        if nodes[i].local in following:
            return nodes[i].start
    return nodes[root].body[1]


def _edit_workbook(u: _Pkg, r: _Pkg, kept, new_sheets: list[_NewSheet]) -> bytes:
    data = u.z.read(u.main)
    nodes = scan(data, u.main)
    if nodes[0].local != "workbook" or nodes[0].body is None:
        raise WorkbookError(f"'{u.main}' is not a workbook part. Open and save the book in "
                            "your spreadsheet first.")
    new_index = {s.index: j for j, s in enumerate(kept)}
    by_name = {s.name.casefold(): len(kept) + j for j, s in enumerate(new_sheets)}
    ed = Edits(data)
    _edit_sheet_list(ed, data, nodes, u, kept, new_sheets)
    _edit_defined_names(ed, data, nodes, u, r, new_index, by_name, new_sheets)
    _edit_views(ed, data, nodes, u, new_index, by_name)
    _full_calc(ed, data, nodes)
    return ed.apply()


def _edit_sheet_list(ed: Edits, data: bytes, nodes, u: _Pkg, kept, new_sheets) -> None:
    sheets = _child(nodes, 0, "sheets")
    items = children(nodes, sheets, "sheet", NS_MAIN) if sheets is not None else []
    if len(items) != len(u.wb.sheets) or any(
            nodes[i].get("name") != s.name for i, s in zip(items, u.wb.sheets, strict=True)):
        raise WorkbookError(f"The sheet list of '{u.main}' cannot be read. Open and save the "
                            "book in your spreadsheet first.")
    keep = {s.index for s in kept}
    for k, i in enumerate(items):
        if k not in keep:
            ed.replace(nodes[i].start, nodes[i].end, b"")
    node = nodes[sheets]
    rp = node.prefix_for(NS_R)
    decl = "" if rp else f' xmlns:r="{NS_R}"'
    rp = rp or "r"
    add = "".join(
        f'<{node.prefix}sheet{decl} name="{escape_attr(s.name)}" sheetId="{s.sheet_id}"'
        + (f' state="{escape_attr(s.state)}"' if s.state else "") + f' {rp}:id="{s.rid}"/>'
        for s in new_sheets).encode("utf-8")
    _append_children(ed, data, node, add)


def _append_children(ed: Edits, data: bytes, node, add: bytes) -> None:
    """Append raw child elements at the end of ``node`` (opening it up if self-closing)."""
    if not add:
        return
    if node.body is not None:
        ed.insert(node.body[1], add)
        return
    tag = data[node.start:node.end]
    ed.replace(node.start, node.end,
               tag[:-2].rstrip() + b">" + add + f"</{node.qname}>".encode("utf-8"))


def _edit_defined_names(ed: Edits, data: bytes, nodes, u: _Pkg, r: _Pkg, new_index, by_name,
                        new_sheets) -> None:
    """Drop ours and those local to removed sheets, renumber local ones, add the result
    book's names (local ones to their new sheets)."""
    container = _child(nodes, 0, "definedNames")
    items = [i for i, n in enumerate(nodes) if n.local == "definedName" and n.uri == NS_MAIN]
    if len(items) != len(u.wb.names):
        raise WorkbookError(f"The defined names of '{u.main}' cannot be read. Open and save the "
                            "book in your spreadsheet first.")
    ours = {n.name.casefold() for n in r.wb.names if n.local is None} | {"plumb_sheets"}
    remaining = 0
    for i, name in zip(items, u.wb.names, strict=True):
        node = nodes[i]
        if name.local is not None:
            if name.local not in new_index:
                ed.replace(node.start, node.end, b"")
                continue
            if new_index[name.local] != name.local:
                s, e = start_tag(data, node)
                ed.replace(s, e, set_attr(data[s:e], "localSheetId", str(new_index[name.local])))
        elif name.name.casefold() in ours:
            ed.replace(node.start, node.end, b"")
            continue
        remaining += 1
    p = nodes[container].prefix if container is not None else nodes[0].prefix
    mine = _result_names(r, by_name, {s.name for s in new_sheets}, p)
    if container is not None:
        if not remaining and not mine:
            ed.replace(nodes[container].start, nodes[container].end, b"")
        else:
            _append_children(ed, data, nodes[container], mine)
    elif mine:
        ed.insert(_anchor(nodes, 0, _AFTER_NAMES),
                  f"<{p}definedNames>".encode() + mine + f"</{p}definedNames>".encode())


def _result_names(r: _Pkg, by_name, written: set[str], p: str) -> bytes:
    out = []
    for n in r.wb.names:
        attrs = dict(n.attrs)
        if n.local is not None:
            sheet = r.wb.sheets[n.local].name
            if sheet not in written:
                continue
            attrs["localSheetId"] = str(by_name[sheet.casefold()])
        text = "".join(f' {k}="{escape_attr(v)}"' for k, v in attrs.items())
        out.append(f"<{p}definedName{text}>{escape_text(n.text)}</{p}definedName>")
    return "".join(out).encode("utf-8")


def _edit_views(ed: Edits, data: bytes, nodes, u: _Pkg, new_index, by_name) -> None:
    """The active tab and the first visible tab follow their sheets (a replaced active
    sheet hands over to its replacement)."""
    for node in nodes:
        if node.local != "workbookView" or node.uri != NS_MAIN:
            continue
        s, e = start_tag(data, node)
        tag = data[s:e]
        for attr in ("activeTab", "firstSheet"):
            value = node.get(attr)
            if value is None or not value.isdigit():
                continue
            idx = int(value)
            sheet = u.wb.sheets[idx] if idx < len(u.wb.sheets) else None
            if sheet is not None and sheet.index in new_index:
                new = new_index[sheet.index]
            elif sheet is not None and attr == "activeTab":
                new = by_name.get(sheet.name.casefold(), 0)
            else:
                new = 0
            tag = set_attr(tag, attr, str(new))
        if tag != data[s:e]:
            ed.replace(s, e, tag)


def _full_calc(ed: Edits, data: bytes, nodes) -> None:
    """Recalculate on open, so the user's formulas see the new results."""
    calc = _child(nodes, 0, "calcPr")
    if calc is not None:
        s, e = start_tag(data, nodes[calc])
        ed.replace(s, e, set_attr(data[s:e], "fullCalcOnLoad", "1"))
    else:
        ed.insert(_anchor(nodes, 0, _AFTER_CALC),
                  f'<{nodes[0].prefix}calcPr fullCalcOnLoad="1"/>'.encode())


def _edit_rels(u: _Pkg, removed, drop: set[str], new_sheets, styles: str | None = None
               ) -> bytes:
    """The workbook's rels: removed sheets' gone, the new sheets' (and ``styles``, the
    styles part added to a book that had none) appended."""
    part = rels_part(u.main)
    data = u.z.read(part)
    nodes = scan(data, part)
    gone = {s.rid for s in removed} | {x.id for x in u.rels.values() if x.target in drop}
    ed = Edits(data)
    for node in nodes[1:]:
        if node.parent == 0 and node.local == "Relationship" and node.get("Id") in gone:
            ed.replace(node.start, node.end, b"")
    p = nodes[0].prefix
    add = "".join(
        f'<{p}Relationship Id="{s.rid}" Type="{REL_SHEET}" Target="/{escape_attr(s.part)}"/>'
        for s in new_sheets)
    if styles:
        rid = next(f"rIdPlumbStyles{k}" for k in range(1, len(u.rels) + 2)
                   if f"rIdPlumbStyles{k}" not in u.rels)
        add += (f'<{p}Relationship Id="{rid}" Type="{NS_R}/styles" '
                f'Target="/{escape_attr(styles)}"/>')
    _append_children(ed, data, nodes[0], add.encode("utf-8"))
    return ed.apply()


def _edit_types(uz: zipfile.ZipFile, drop: set[str], new_parts, r_types) -> bytes:
    """Drop the overrides of removed parts; one Override per new part (valid for any
    extension, so the user's Defaults never need to change)."""
    data = uz.read(CONTENT_TYPES)
    nodes = scan(data, CONTENT_TYPES)
    dropped = {d.lower() for d in drop}
    ed = Edits(data)
    has_rels = False
    for node in nodes[1:]:
        if node.parent != 0:
            continue
        if node.local == "Override" and (node.get("PartName") or "").lstrip("/").lower() in dropped:
            ed.replace(node.start, node.end, b"")
        if node.local == "Default" and (node.get("Extension") or "").lower() == "rels":
            has_rels = True
    p = nodes[0].prefix
    add = "".join(f'<{p}Override PartName="/{escape_attr(new)}" ContentType="'
                  f'{escape_attr(r_types[old])}"/>'
                  for old, new in new_parts.items() if r_types.get(old))
    if not has_rels:
        add = (f'<{p}Default Extension="rels" ContentType="application/vnd.openxmlformats-'
               'package.relationships+xml"/>') + add
    _append_children(ed, data, nodes[0], add.encode("utf-8"))
    return ed.apply()


def _attr(el: str, name: str) -> str | None:
    """An attribute of one of plumbrule's own style elements (openpyxl writes '"')."""
    m = re.search(r'\b%s="([^"]*)"' % re.escape(name), el)
    return m.group(1) if m else None


def _unescape(text: str | None) -> str:
    from xml.sax.saxutils import unescape
    return unescape(text or "", {"&quot;": '"', "&apos;": "'"})


def _escape(text: str) -> str:
    from xml.sax.saxutils import escape
    return escape(text, {'"': "&quot;"})


def _prefix(data: str, local: str) -> str:
    m = re.search(r"<(\w+:)?%s\b" % local, data)
    return (m.group(1) or "") if m else ""


# --- styles ------------------------------------------------------------------------

_CONTAINERS = ("numFmts", "fonts", "fills", "borders", "cellXfs")
# CT_Stylesheet's children in schema order (ECMA-376 Part 1)
_STYLE_ORDER = ("numFmts", "fonts", "fills", "borders", "cellStyleXfs", "cellXfs",
                "cellStyles", "dxfs", "tableStyles", "colors", "extLst")
_ITEM = {"numFmts": "numFmt", "fonts": "font", "fills": "fill", "borders": "border",
         "cellXfs": "xf", "dxfs": "dxf"}


def _items(text: str, container: str, p: str = "") -> tuple[list[str], re.Match | None]:
    m = re.search(r"<%s%s\b[^>]*?(?:/>|>(.*?)</%s%s>)" % (p, container, p, container), text, re.S)
    if not m or m.group(1) is None:
        return [], m
    item = _ITEM[container]
    body = m.group(1)
    found = re.findall(r"<%s%s\b(?:[^>]*?/>|[^>]*?>.*?</%s%s>)" % (p, item, p, item), body, re.S)
    return found, m


def _result_styles(r: _Pkg) -> str:
    """The result book's styles part (openpyxl always writes one)."""
    part = _styles_part(r)
    if part is None:  # pragma: no cover - openpyxl never writes a book without styles
        raise AssertionError("the result book has no styles part")
    return part


def _merge_styles(u: _Pkg, r: _Pkg) -> dict:
    """Append the result book's cell formats to the user's styles.xml (reusing identical
    ones). Returns {'part', 'data', 'xf': result xf index → user xf index}."""
    u_part, r_part = _styles_part(u), _result_styles(r)
    if u_part is None:      # the result book's styles go in whole (see _name_new_parts)
        same = {i: i for i in range(len(_items(r.z.read(r_part).decode("utf-8"),
                                                 "cellXfs")[0]))}
        return {"part": None, "data": b"", "xf": same, "dxf": {}}
    if u_part not in u.z.NameToInfo:
        raise WorkbookError(f"The workbook's styles part '{u_part}' is missing. The file is "
                            "damaged; open and save it in your spreadsheet first.")
    text = u.z.read(u_part).decode("utf-8")
    p = _prefix(text, "styleSheet")
    rtext = r.z.read(r_part).decode("utf-8")
    ns = f' xmlns="{_NS_MAIN}"' if p else ""
    maps: dict[str, dict[int, int]] = {}
    # number formats: by format code; new ids above every id in use
    u_fmts, _ = _items(text, "numFmts", re.escape(p))
    code_to_id = {_unescape(_attr(f, "formatCode")): int(_attr(f, "numFmtId") or 0)
                  for f in u_fmts}
    next_id = max([163] + list(code_to_id.values())) + 1
    fmt_map, new_fmts = {}, []
    for f in _items(rtext, "numFmts")[0]:
        rid, code = int(_attr(f, "numFmtId") or 0), _unescape(_attr(f, "formatCode"))
        if code not in code_to_id:
            code_to_id[code] = next_id
            new_fmts.append(f'<{p}numFmt{ns} numFmtId="{next_id}" formatCode="{_escape(code)}"/>')
            next_id += 1
        fmt_map[rid] = code_to_id[code]
    text = _append(text, "numFmts", p, new_fmts, before=("fonts",))
    for container in ("fonts", "fills", "borders"):
        maps[container], text = _merge_list(text, rtext, container, p, ns)
    xf_items = _items(rtext, "cellXfs")[0]
    # a minimal styles.xml has no cell styles (cellStyleXfs) for an xfId to point at
    has_cell_styles = re.search(r"<%scellStyleXfs\b" % re.escape(p), text) is not None
    fixed = []
    for xf in xf_items:
        xf = _sub_id(xf, "numFmtId", lambda v: fmt_map.get(v, v))
        xf = _sub_id(xf, "fontId", lambda v: maps["fonts"][v])
        xf = _sub_id(xf, "fillId", lambda v: maps["fills"][v])
        xf = _sub_id(xf, "borderId", lambda v: maps["borders"][v])
        xf = _sub_id(xf, "xfId", lambda v: 0)
        if not has_cell_styles:
            xf = re.sub(r'\s+xfId="\d+"', "", xf, count=1)
        fixed.append(xf)
    u_xfs, _ = _items(text, "cellXfs", re.escape(p))
    canon = {_canon(x): i for i, x in enumerate(u_xfs)}
    xf_map: dict[int, int] = {}
    new_xfs: list = []
    for i, xf in enumerate(fixed):
        key = _canon(xf)
        if key not in canon:
            canon[key] = len(u_xfs) + len(new_xfs)
            new_xfs.append(_with_prefix(xf, "xf", p, ns))
        xf_map[i] = canon[key]
    text = _append(text, "cellXfs", p, new_xfs, before=("cellStyles",))
    # differential formats (conditional formatting) keep their own list
    dxf_map, text = _merge_list(text, rtext, "dxfs", p, ns,
                                before=("tableStyles", "colors", "extLst"), tail=True)
    return {"part": u_part, "data": text.encode("utf-8"), "xf": xf_map, "dxf": dxf_map}


def _styles_part(pkg: _Pkg) -> str | None:
    """The part the workbook's styles relationship names; None when it has none."""
    return next((x.target for x in pkg.rels.values() if x.kind == "styles"), None)


def _canon(el: str) -> str:
    el = re.sub(r"<\w+:", "<", el)
    el = re.sub(r"</\w+:", "</", el)
    el = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", el)
    return re.sub(r"\s+", " ", el).strip()


def _with_prefix(el: str, item: str, p: str, ns: str) -> str:
    if not p:
        return el
    # our elements are unprefixed: declare the main namespace as their default
    return re.sub(r"^<%s\b" % item, f"<{item}{ns}", el, count=1)


def _sub_id(el: str, attr: str, fn) -> str:
    return re.sub(r'\b%s="(\d+)"' % attr, lambda m: f'{attr}="{fn(int(m.group(1)))}"', el, count=1)


def _merge_list(text: str, rtext: str, container: str, p: str, ns: str, before=(),
                tail: bool = False):
    u_items, _ = _items(text, container, re.escape(p))
    canon: dict = {}
    for i, el in enumerate(u_items):
        canon.setdefault(_canon(el), i)
    mapping: dict[int, int] = {}
    new: list = []
    for i, el in enumerate(_items(rtext, container)[0]):
        key = _canon(el)
        if key not in canon:
            canon[key] = len(u_items) + len(new)
            new.append(_with_prefix(el, _ITEM[container], p, ns))
        mapping[i] = canon[key]
    return mapping, _append(text, container, p, new, before=before, tail=tail)


def _append(text: str, container: str, p: str, items: list[str], before=(),
            tail: bool = False) -> str:
    """Append ``items`` to a container element, fixing its count (creating it if absent,
    before the first of ``before`` present, else at the end of the stylesheet if ``tail``)."""
    if not items:
        return text
    pe = re.escape(p)
    m = re.search(r"<%s%s\b([^>]*?)(/?)>" % (pe, container), text)
    if m is None:
        block = f'<{p}{container} count="{len(items)}">{"".join(items)}</{p}{container}>'
        # before the first element present that follows it in CT_Stylesheet order (a
        # minimal styles.xml may hold cellXfs alone), else at the end of the stylesheet
        following = _STYLE_ORDER[_STYLE_ORDER.index(container) + 1:]
        for b in (*before, *following):
            mb = re.search(r"<%s%s\b" % (pe, b), text)
            if mb:
                return text[:mb.start()] + block + text[mb.start():]
        end = text.rfind(f"</{p}styleSheet>")
        if end < 0:        # <styleSheet/>: open it
            m = re.search(r"<%sstyleSheet\b([^>]*?)/>" % pe, text)
            if m is None:
                raise WorkbookError("The workbook's styles part has no styleSheet element. "
                                    "The file is damaged; open and save it in your "
                                    "spreadsheet first.")
            text = (text[:m.start()] + f"<{p}styleSheet{m.group(1)}></{p}styleSheet>"
                    + text[m.end():])
            end = text.rfind(f"</{p}styleSheet>")
        return text[:end] + block + text[end:]
    count = len(_items(text, container, pe)[0]) + len(items)
    attrs = re.sub(r'\s*count="\d+"', "", m.group(1))
    if m.group(2):      # <fonts/> self-closing
        new = f'<{p}{container}{attrs} count="{count}">{"".join(items)}</{p}{container}>'
        return text[:m.start()] + new + text[m.end():]
    head = f'<{p}{container}{attrs} count="{count}">'
    text = text[:m.start()] + head + text[m.end():]
    close = f"</{p}{container}>"
    pos = text.index(close, m.start())
    return text[:pos] + "".join(items) + text[pos:]


_CELL_S = re.compile(rb'(<c r="[A-Z]{1,3}[0-9]{1,7}" s=")([0-9]+)"')    # as save.py writes
_ANY_CELL_S = re.compile(rb'(<c\b[^>]*?\bs=")(\d+)"')
_ROW_S = re.compile(rb'(<row\b[^>]*?\bs=")(\d+)"')
_COL_STYLE = re.compile(rb'(<col\b[^>]*?\bstyle=")(\d+)"')


def _restyle_sheet(data: bytes, xf_map: dict[int, int], dxf_map: dict[int, int]) -> bytes:
    """Point a result sheet's cells, rows, columns and conditional formats at the merged
    formats."""
    known: dict[bytes, bytes] = {}

    def fix_s(m):
        old = m.group(2)
        new = known.get(old)
        if new is None:
            new = known[old] = str(xf_map.get(int(old), 0)).encode()
        return m.group(1) + new + b'"'
    out, n_rows = _ROW_S.subn(fix_s, data)
    # the cells as the result book's writer writes them (r, then s): a literal start the
    # search finds fast; when that does not account for every s attribute, any cell form
    out, n_cells = _CELL_S.subn(fix_s, out)
    if n_rows + n_cells != data.count(b' s="'):
        out = _ROW_S.sub(fix_s, _ANY_CELL_S.sub(fix_s, data))
    out = _COL_STYLE.sub(fix_s, out)
    if dxf_map:
        out = re.sub(rb'(<cfRule\b[^>]*?\bdxfId=")(\d+)"', lambda m: m.group(1) + str(
            dxf_map.get(int(m.group(2)), 0)).encode() + b'"', out)
    return out

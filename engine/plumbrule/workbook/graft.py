"""Put freshly written result sheets into a user's workbook without re-saving it.

openpyxl builds the result sheets in a small workbook of their own; this module
copies those sheet parts (with their drawings, charts, comments, tables) into the
user's package. Every other part of the user's file is copied byte for byte, so
nothing openpyxl would normalise, drop or re-serialise is touched, and the cost
does not grow with the size of the Sales sheet beyond one zip copy.

Only four of the user's parts are edited, textually (their namespace prefixes and
``mc:Ignorable`` lists stay exactly as written): ``[Content_Types].xml``,
``xl/workbook.xml`` (sheet list, defined names, full recalculation on load),
``xl/_rels/workbook.xml.rels`` and ``xl/styles.xml`` (our cell formats appended,
reusing identical ones, so rerunning does not grow the file). ``calcChain.xml`` is
dropped (the spreadsheet rebuilds it; it would name cells of replaced sheets).
"""

from __future__ import annotations

import io
import posixpath
import re
import zipfile
from dataclasses import dataclass
from typing import Iterable

from plumbrule.workbook.safety import _content_types, _rels

_NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_NS_R = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_REL_SHEET = _NS_R + "/worksheet"


@dataclass(frozen=True)
class _Pkg:
    z: zipfile.ZipFile
    types: dict
    main: str
    rels: dict           # workbook rels: rId → (kind, target)


def _open(z: zipfile.ZipFile) -> _Pkg:
    types = _content_types(z)
    main = next(t for kind, t in _rels(z, "").values() if kind == "officeDocument")
    return _Pkg(z, types, main, _rels(z, main))


def _sheets(pkg: _Pkg) -> list[dict]:
    """[{name, rid, part, sheetId, xml}] in workbook order (raw <sheet> text kept)."""
    data = pkg.z.read(pkg.main).decode("utf-8")
    out = []
    for m in re.finditer(r"<(?:\w+:)?sheet\b[^>]*?/>", data):
        el = m.group(0)
        name = _attr(el, "name")
        rid = re.search(r'\b\w+:id="([^"]+)"', el).group(1)
        out.append({"name": _unescape(name), "rid": rid,
                    "part": pkg.rels.get(rid, ("", ""))[1], "sheetId": int(_attr(el, "sheetId")),
                    "xml": el})
    return out


def _attr(el: str, name: str) -> str | None:
    m = re.search(r'\b%s="([^"]*)"' % re.escape(name), el)
    return m.group(1) if m else None


def _unescape(text: str | None) -> str:
    from xml.sax.saxutils import unescape
    return unescape(text or "", {"&quot;": '"', "&apos;": "'"})


def _escape(text: str) -> str:
    from xml.sax.saxutils import escape
    return escape(text, {'"': "&quot;"})


def _reach(z: zipfile.ZipFile, part: str, seen: set[str]) -> set[str]:
    for _, target in _rels(z, part).values():
        if target not in seen and target in z.NameToInfo:
            seen.add(target)
            _reach(z, target, seen)
    return seen


def _rels_part(part: str) -> str:
    folder, name = posixpath.split(part)
    return posixpath.join(folder, "_rels", name + ".rels")


def graft(user_path, result_bytes: bytes, out_path, replace: Iterable[str],
          sheet_names: Iterable[str]) -> None:
    """Write ``out_path``: the user's book minus the sheets ``replace`` plus the sheets
    ``sheet_names`` of the result workbook ``result_bytes`` (appended, in that order)."""
    replace = {s.lower() for s in replace}
    wanted = list(sheet_names)
    with zipfile.ZipFile(user_path) as uz, zipfile.ZipFile(io.BytesIO(result_bytes)) as rz:
        u, r = _open(uz), _open(rz)
        u_sheets, r_sheets = _sheets(u), {s["name"]: s for s in _sheets(r)}
        removed = [s for s in u_sheets if s["name"].lower() in replace]
        kept = [s for s in u_sheets if s["name"].lower() not in replace]
        drop: set[str] = set()
        for s in removed:
            drop.add(s["part"])
            _reach(uz, s["part"], drop)
        still_used: set[str] = set()
        for s in kept:
            _reach(uz, s["part"], still_used)
        drop -= still_used
        drop |= {_rels_part(p) for p in drop}
        calc = [t for kind, t in u.rels.values() if kind == "calcChain"]
        drop |= set(calc)

        # result parts, renamed so they cannot clash with the user's
        new_parts: dict[str, str] = {}        # result part → new name
        for name in wanted:
            part = r_sheets[name]["part"]
            for p in [part, *sorted(_reach(rz, part, set()))]:
                folder, base = posixpath.split(p)
                new_parts[p] = posixpath.join(folder, "plumbrule-" + base)
        style_map = _merge_styles(u, r)
        out: dict[str, bytes] = {}
        table_id = _max_table_id(u, drop)
        for old, new in new_parts.items():
            data = rz.read(old)
            if r.types.get(old, "").endswith("worksheet+xml"):
                data = _restyle_sheet(data, style_map["xf"], style_map["dxf"])
            elif r.types.get(old, "").endswith("table+xml"):
                table_id += 1
                data = re.sub(
                    rb'(<table\b[^>]*?\bid=")(\d+)(")',
                    lambda m, tid=table_id: m.group(1) + str(tid).encode() + m.group(3),
                    data,
                    count=1,
                )
            out[new] = data
            rel = _rels_part(old)
            if rel in rz.NameToInfo:
                out[_rels_part(new)] = _retarget(rz.read(rel), old, new_parts)
        out[style_map["part"]] = style_map["data"]

        # workbook.xml, its rels and the content types
        rid_base = _free_rid(u, {s["rid"] for s in removed})
        new_sheets = []
        next_id = max([s["sheetId"] for s in kept] + [0]) + 1
        for i, name in enumerate(wanted):
            new_sheets.append({"name": name, "rid": f"rIdPlumb{rid_base + i}",
                               "sheetId": next_id + i,
                               "part": new_parts[r_sheets[name]["part"]],
                               "r_index": list(r_sheets).index(name),
                               "state": _attr(r_sheets[name]["xml"], "state")})
        out[u.main] = _edit_workbook(uz.read(u.main), r.z.read(r.main), u_sheets, kept,
                                     new_sheets, list(r_sheets))
        wb_rels = _rels_part(u.main)
        out[wb_rels] = _edit_rels(uz.read(wb_rels), u, removed, calc, new_sheets)
        out["[Content_Types].xml"] = _edit_types(uz.read("[Content_Types].xml"), drop, out,
                                                 new_parts, r.types, u.types)

        with zipfile.ZipFile(out_path, "w", zipfile.ZIP_DEFLATED) as oz:
            for info in uz.infolist():
                name = info.filename
                if name in drop:
                    continue
                data = out.pop(name) if name in out else uz.read(name)
                oz.writestr(_info(info), data)
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
            m = re.search(rb'<(?:\w+:)?table\b[^>]*?\bid="(\d+)"', u.z.read(name))
            if m:
                best = max(best, int(m.group(1)))
    return best


def _free_rid(u: _Pkg, freed: set[str]) -> int:
    """First n such that rIdPlumb{n}.. are free (ids of replaced sheets count as free)."""
    taken = set(u.rels) - freed
    n = 1
    while any(f"rIdPlumb{n + i}" in taken for i in range(len(RESULT_SHEETS_MAX))):
        n += 1
    return n


RESULT_SHEETS_MAX = range(16)


def _retarget(data: bytes, old_part: str, mapping: dict[str, str]) -> bytes:
    """Rewrite a result part's rels so targets name the renamed parts (absolute)."""
    folder = posixpath.dirname(old_part)
    text = data.decode("utf-8")

    def fix(m):
        el = m.group(0)
        if 'TargetMode="External"' in el:
            return el
        target = _attr(el, "Target")
        resolved = target[1:] if target.startswith("/") else posixpath.normpath(
            posixpath.join(folder, target))
        if resolved not in mapping:
            return el
        return el.replace(f'Target="{target}"', f'Target="/{mapping[resolved]}"')
    return re.sub(r"<Relationship\b[^>]*/>", fix, text).encode("utf-8")


# --- workbook.xml ----------------------------------------------------------------

def _prefix(data: str, local: str) -> str:
    m = re.search(r"<(\w+:)?%s\b" % local, data)
    return (m.group(1) or "") if m else ""


def _edit_workbook(data: bytes, r_data: bytes, u_sheets, kept, new_sheets, r_order) -> bytes:
    text = data.decode("utf-8")
    p = _prefix(text, "workbook")
    rp = next((m.group(1) for m in re.finditer(r'xmlns:(\w+)="%s"' % re.escape(_NS_R), text)), None)
    # 1. the sheet list
    for s in u_sheets:
        if s not in kept:
            text = text.replace(s["xml"], "", 1)
    rdecl = "" if rp else f' xmlns:r="{_NS_R}"'
    rp = rp or "r"
    add = "".join(
        f'<{p}sheet{rdecl} name="{_escape(s["name"])}" sheetId="{s["sheetId"]}"'
        + (f' state="{s["state"]}"' if s["state"] else "") + f' {rp}:id="{s["rid"]}"/>'
        for s in new_sheets)
    text = re.sub(r"</%ssheets>" % re.escape(p), lambda m: add + m.group(0), text, count=1)
    # 2. defined names: drop ours and those local to removed sheets; remap local indices
    old_index = {i: s for i, s in enumerate(u_sheets)}
    new_index = {s["name"]: i for i, s in enumerate(kept)}
    for j, s in enumerate(new_sheets):
        new_index[s["name"]] = len(kept) + j
    r_names = _defined_names(r_data.decode("utf-8"))
    ours = {(_attr(el, "name") or "").lower() for el in r_names}

    def keep_name(m):
        el = m.group(0)
        name = (_attr(el, "name") or "").lower()
        local = _attr(el, "localSheetId")
        if local is not None:
            sheet = old_index.get(int(local))
            if sheet is None or sheet not in kept:
                return ""
            return re.sub(
                r'localSheetId="\d+"', f'localSheetId="{new_index[sheet["name"]]}"', el, count=1
            )
        if name in ours or name == "plumb_sheets":
            return ""
        return el
    text = re.sub(r"<(\w+:)?definedName\b[^>]*?(?:/>|>.*?</\1?definedName>)", keep_name, text,
                  flags=re.S)
    mine = []
    for el in r_names:
        local = _attr(el, "localSheetId")
        if local is not None:
            name = r_order[int(local)]
            if name not in new_index or name not in {s["name"] for s in new_sheets}:
                continue
            el = re.sub(r'localSheetId="\d+"', f'localSheetId="{new_index[name]}"', el, count=1)
        mine.append(el if not p else _prefixed(el, p))
    block = "".join(mine)
    if re.search(r"</%sdefinedNames>" % re.escape(p), text):
        text = re.sub(
            r"</%sdefinedNames>" % re.escape(p), lambda m: block + m.group(0), text, count=1
        )
    elif re.search(r"<%sdefinedNames\s*/>" % re.escape(p), text):
        text = re.sub(r"<%sdefinedNames\s*/>" % re.escape(p),
                      lambda m: f"<{p}definedNames>{block}</{p}definedNames>", text, count=1)
    elif block:
        text = re.sub(
            r"</%ssheets>" % re.escape(p),
            lambda m: m.group(0) + f"<{p}definedNames>{block}</{p}definedNames>",
            text,
            count=1,
        )
    text = re.sub(r"<(\w+:)?definedNames>\s*</\1?definedNames>", "", text)
    # 3. the active tab and the first visible tab follow their sheets
    text = _remap_views(text, u_sheets, kept, new_index)
    # 4. recalculate on open, so the user's formulas see the new results
    text = _full_calc(text, p)
    return text.encode("utf-8")


def _prefixed(el: str, p: str) -> str:
    return re.sub(r"<(/?)definedName\b", lambda m: f"<{m.group(1)}{p}definedName", el)


def _defined_names(text: str) -> list[str]:
    return [m.group(0) for m in re.finditer(
        r"<(\w+:)?definedName\b[^>]*?(?:/>|>.*?</\1?definedName>)", text, flags=re.S)]


def _remap_views(text: str, u_sheets, kept, new_index) -> str:
    def fix(m):
        el = m.group(0)
        for attr in ("activeTab", "firstSheet"):
            v = _attr(el, attr)
            if v is None:
                continue
            idx = int(v)
            sheet = u_sheets[idx] if idx < len(u_sheets) else None
            new = new_index.get(sheet["name"], 0) if sheet is not None else 0
            if sheet is not None and sheet not in kept and attr == "firstSheet":
                new = 0
            el = el.replace(f'{attr}="{v}"', f'{attr}="{new}"', 1)
        return el
    return re.sub(r"<(?:\w+:)?workbookView\b[^>]*>", fix, text)


def _full_calc(text: str, p: str) -> str:
    m = re.search(r"<%scalcPr\b[^>]*?/?>" % re.escape(p), text)
    if m:
        el = m.group(0)
        if "fullCalcOnLoad=" in el:
            new = re.sub(r'fullCalcOnLoad="[^"]*"', 'fullCalcOnLoad="1"', el)
        else:
            new = el.replace(f"<{p}calcPr", f'<{p}calcPr fullCalcOnLoad="1"', 1)
        return text.replace(el, new, 1)
    # calcPr comes after definedNames (or sheets) in the schema order
    for anchor in (f"</{p}definedNames>", f"</{p}sheets>"):
        if anchor in text:
            return text.replace(anchor, anchor + f'<{p}calcPr fullCalcOnLoad="1"/>', 1)
    return text


def _edit_rels(data: bytes, u: _Pkg, removed, calc, new_sheets) -> bytes:
    text = data.decode("utf-8")
    gone = {s["rid"] for s in removed} | {rid for rid, (_, t) in u.rels.items() if t in calc}

    def fix(m):
        return "" if _attr(m.group(0), "Id") in gone else m.group(0)
    text = re.sub(r"<(?:\w+:)?Relationship\b[^>]*/>", fix, text)
    add = "".join(f'<Relationship Id="{s["rid"]}" Type="{_REL_SHEET}" Target="/{s["part"]}"/>'
                  for s in new_sheets)
    p = _prefix(text, "Relationships")
    text = text.replace(f"</{p}Relationships>", _prefixed_rel(add, p) + f"</{p}Relationships>", 1)
    return text.encode("utf-8")


def _prefixed_rel(add: str, p: str) -> str:
    return add.replace("<Relationship ", f"<{p}Relationship ") if p else add


def _edit_types(data: bytes, drop: set[str], out: dict, new_parts, r_types, u_types) -> bytes:
    """Drop the overrides of removed parts; one Override per new part (valid for any
    extension, so the user's Defaults never need to change)."""
    text = data.decode("utf-8")

    def fix(m):
        part = (_attr(m.group(0), "PartName") or "").lstrip("/")
        return "" if part in drop else m.group(0)
    text = re.sub(r"<(?:\w+:)?Override\b[^>]*/>", fix, text)
    p = _prefix(text, "Types")
    add = "".join(f'<{p}Override PartName="/{new}" ContentType="{r_types.get(old, "")}"/>'
                  for old, new in new_parts.items() if r_types.get(old))
    if not re.search(r'Extension="rels"', text, re.I):
        add = (f'<{p}Default Extension="rels" ContentType="application/vnd.openxmlformats-'
               'package.relationships+xml"/>') + add
    return text.replace(f"</{p}Types>", add + f"</{p}Types>", 1).encode("utf-8")


# --- styles ------------------------------------------------------------------------

_CONTAINERS = ("numFmts", "fonts", "fills", "borders", "cellXfs")
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


def _merge_styles(u: _Pkg, r: _Pkg) -> dict:
    """Append the result book's cell formats to the user's styles.xml (reusing identical
    ones). Returns {'part', 'data', 'xf': result xf index → user xf index}."""
    u_part = next(t for kind, t in u.rels.values() if kind == "styles")
    r_part = next(t for kind, t in r.rels.values() if kind == "styles")
    text = u.z.read(u_part).decode("utf-8")
    p = _prefix(text, "styleSheet")
    rtext = r.z.read(r_part).decode("utf-8")
    ns = f' xmlns="{_NS_MAIN}"' if p else ""
    maps: dict[str, dict[int, int]] = {}
    # number formats: by format code; new ids above every id in use
    u_fmts, _ = _items(text, "numFmts", re.escape(p))
    code_to_id = {_unescape(_attr(f, "formatCode")): int(_attr(f, "numFmtId")) for f in u_fmts}
    next_id = max([163] + list(code_to_id.values())) + 1
    fmt_map, new_fmts = {}, []
    for f in _items(rtext, "numFmts")[0]:
        rid, code = int(_attr(f, "numFmtId")), _unescape(_attr(f, "formatCode"))
        if code not in code_to_id:
            code_to_id[code] = next_id
            new_fmts.append(f'<{p}numFmt{ns} numFmtId="{next_id}" formatCode="{_escape(code)}"/>')
            next_id += 1
        fmt_map[rid] = code_to_id[code]
    text = _append(text, "numFmts", p, new_fmts, before=("fonts",))
    for container in ("fonts", "fills", "borders"):
        maps[container], text = _merge_list(text, rtext, container, p, ns)
    xf_items = _items(rtext, "cellXfs")[0]
    fixed = []
    for xf in xf_items:
        xf = _sub_id(xf, "numFmtId", lambda v: fmt_map.get(v, v))
        xf = _sub_id(xf, "fontId", lambda v: maps["fonts"][v])
        xf = _sub_id(xf, "fillId", lambda v: maps["fills"][v])
        xf = _sub_id(xf, "borderId", lambda v: maps["borders"][v])
        xf = _sub_id(xf, "xfId", lambda v: 0)
        fixed.append(xf)
    u_xfs, _ = _items(text, "cellXfs", re.escape(p))
    canon = {_canon(x): i for i, x in enumerate(u_xfs)}
    xf_map, new_xfs = {}, []
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
    canon = {}
    for i, el in enumerate(u_items):
        canon.setdefault(_canon(el), i)
    mapping, new = {}, []
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
        for b in before:
            mb = re.search(r"<%s%s\b" % (pe, b), text)
            if mb:
                return text[:mb.start()] + block + text[mb.start():]
        end = text.rfind(f"</{p}styleSheet>")
        if tail and end >= 0:
            return text[:end] + block + text[end:]
        raise ValueError(f"styles.xml has no place for {container}")
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


def _restyle_sheet(data: bytes, xf_map: dict[int, int], dxf_map: dict[int, int]) -> bytes:
    """Point a result sheet's cells, rows, columns and conditional formats at the merged
    formats."""
    def fix_s(m):
        return m.group(1) + str(xf_map.get(int(m.group(2)), 0)).encode() + b'"'
    data = re.sub(rb'(<c\b[^>]*?\bs=")(\d+)"', fix_s, data)
    data = re.sub(rb'(<row\b[^>]*?\bs=")(\d+)"', fix_s, data)
    data = re.sub(rb'(<col\b[^>]*?\bstyle=")(\d+)"', fix_s, data)
    if dxf_map:
        data = re.sub(rb'(<cfRule\b[^>]*?\bdxfId=")(\d+)"', lambda m: m.group(1) + str(
            dxf_map.get(int(m.group(2)), 0)).encode() + b'"', data)
    return data

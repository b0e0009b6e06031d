"""Write an XML part again in another dialect of the same XML: namespace prefixes, quote
style, ``<a></a>`` for ``<a/>``, attribute order. Every spelling is valid XML with the
same meaning (XML 1.0 §3.1, Namespaces in XML 1.0 §6), as other spreadsheet programs
and libraries write workbook parts."""

from __future__ import annotations

import xml.etree.ElementTree as ET

NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
NS_R = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"


def _split(name):
    return name[1:].split("}", 1) if name.startswith("{") else ("", name)


def _esc(text, quote=None):
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    if quote:
        text = text.replace(quote, "&quot;" if quote == '"' else "&apos;")
        text = text.replace("\n", "&#10;").replace("\t", "&#9;")
    return text


def rewrite(data, prefixes=None, quote='"', self_close=True, order="as is", space=" "):
    """``data`` (bytes or an Element) serialised again. ``prefixes``: namespace URI →
    prefix ('' = default namespace); ``order``: 'as is', 'reversed' or 'sorted';
    ``space``: what goes between attributes."""
    root = ET.fromstring(data) if isinstance(data, bytes) else data
    prefixes = dict(prefixes or {NS_MAIN: "", NS_R: "r"})
    for el in root.iter():
        for name in [el.tag, *el.attrib]:
            uri, _ = _split(name)
            if uri and uri not in prefixes:
                prefixes[uri] = f"n{len(prefixes)}"

    def qn(name):
        uri, local = _split(name)
        p = prefixes.get(uri, "") if uri else ""
        return f"{p}:{local}" if p else local

    def attrs(el, top):
        items = list(el.attrib.items())
        if order == "reversed":
            items.reverse()
        elif order == "sorted":
            items.sort(key=lambda kv: qn(kv[0]))
        out = [(qn(k), v) for k, v in items]
        if top:
            out = [("xmlns" + (":" + p if p else ""), uri) for uri, p in prefixes.items()] + out
        return "".join(f"{space}{k}={quote}{_esc(v, quote)}{quote}" for k, v in out)

    def write(el, top=False):
        head = f"<{qn(el.tag)}{attrs(el, top)}"
        body = _esc(el.text or "") + "".join(write(c) for c in el)
        if not body and self_close:
            s = head + "/>"
        else:
            s = f"{head}>{body}</{qn(el.tag)}>"
        return s + _esc(el.tail or "")
    return ('<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
            + write(root, top=True)).encode("utf-8")

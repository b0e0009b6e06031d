"""xlwings' own registration path, run on a machine without Excel.

On Windows, *Import Functions* in the xlwings ribbon calls ``xlwings.udfs.import_udfs``:
it reads the ``__xlfunc__`` metadata that ``@xw.func``/``@xw.arg``/``@xw.ret``
attach, writes a VBA module (``generate_vba_wrapper``), imports it into the
workbook and registers each function's help with ``Application.MacroOptions``.
Here pywin32 (pythoncom, pywintypes, win32com.client) is replaced by empty stand-in
modules, the real decorators from ``xlwings.udfs`` are put where ``xw.func`` etc.
point, ``plumbrule.sheet_functions`` is imported afresh under them, and the real
``generate_vba_wrapper`` and ``import_udfs`` run against a fake workbook. What a user
relies on: Excel accepts every name, each function has the right arguments, and the
function wizard shows our help text.
"""

from __future__ import annotations

import importlib
import inspect
import io
import re
import sys
import types

import pytest

MODULE = "plumbrule.sheet_functions"   # the path users write in xlwings.conf
IMPL = "plumbrule.excel.functions"

# VBA keywords and reserved identifiers, from the VBA language reference (Microsoft's
# "Keywords summary" and the reserved-identifier lists of the VBA language
# specification MS-VBAL §3.3.5.2: statement keywords, marker keywords, operator
# identifiers, reserved names, special forms, reserved type identifiers, literal
# identifiers) — written out from memory, so it errs on the side of too many.
VBA_RESERVED = """
Abs Access AddressOf Alias And Any Append Array As Attribute Base Binary Boolean ByRef
Byte ByVal Call Case CBool CByte CCur CDate CDbl CDec CDecl Circle CInt Close CLng
CLngLng CLngPtr Compare Const CSng CStr Currency CVar CVErr Database Date Debug Decimal
Declare DefBool DefByte DefCur DefDate DefDbl DefDec DefInt DefLng DefLngLng DefLngPtr
DefObj DefSng DefStr DefVar Dim Do DoEvents Double Each Else ElseIf Empty End EndIf
Enum Eqv Erase Error Event Exit Explicit False Fix For Friend Function Get Global GoSub
GoTo If Imp Implements In Input InputB Int Integer Is Kill LBound Len LenB Let Lib Like
Line Load Local Lock Long LongLong LongPtr Loop LSet Me Mid MidB Mod Module Name New
Next Not Nothing Null Object On Open Option Optional Or Output ParamArray Preserve Print
Private Property PSet PtrSafe Public Put RaiseEvent Random Read ReDim Rem Reset Resume
Return RSet Scale Seek Select Set Sgn Shared Single Spc Static Step Stop String Sub Tab
Text Then Time To True Type TypeOf UBound Unload Unlock Until Variant Wend While Width
With WithEvents Write Xor
""".split()

IDENT = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")        # VBA identifier: letter first, ASCII


def _column_number(letters: str) -> int:
    n = 0
    for ch in letters.upper():
        n = n * 26 + ord(ch) - 64
    return n


def looks_like_cell_reference(name: str) -> bool:
    """A1 style up to XFD1048576, R1C1 style (R, C, R1, C1, R1C1, RC), per Excel's grid."""
    m = re.fullmatch(r"([A-Za-z]{1,3})([0-9]+)", name)
    if m and _column_number(m.group(1)) <= 16_384 and 1 <= int(m.group(2)) <= 1_048_576:
        return True
    return re.fullmatch(r"[Rr][0-9]*[Cc]?[0-9]*|[Cc][0-9]*", name) is not None


def test_cell_reference_detector_itself():
    # Facts of Excel's grid: XFD is the last column, row 1,048,576 the last row.
    assert looks_like_cell_reference("A1") and looks_like_cell_reference("XFD1048576")
    assert looks_like_cell_reference("R1C1") and looks_like_cell_reference("rc")
    assert not looks_like_cell_reference("XFE1") and not looks_like_cell_reference("A1048577")
    assert not looks_like_cell_reference("PLUMB_FIT")


@pytest.fixture()
def registered(monkeypatch):
    """sheet_functions imported under xlwings' real Windows decorators."""
    pythoncom = types.ModuleType("pythoncom")
    pythoncom.CoInitialize = lambda: None
    pythoncom.IID_IDispatch = object()
    pywintypes = types.ModuleType("pywintypes")
    pywintypes.com_error = type("com_error", (Exception,), {})
    win32com = types.ModuleType("win32com")
    client = types.ModuleType("win32com.client")
    client.Dispatch = lambda *a, **k: None
    win32com.client = client
    for name, mod in {"pythoncom": pythoncom, "pywintypes": pywintypes, "win32com": win32com,
                      "win32com.client": client}.items():
        monkeypatch.setitem(sys.modules, name, mod)
    monkeypatch.delitem(sys.modules, "xlwings.udfs", raising=False)
    udfs = importlib.import_module("xlwings.udfs")
    import xlwings
    monkeypatch.setattr(xlwings, "func", udfs.xlfunc)
    monkeypatch.setattr(xlwings, "arg", udfs.xlarg)
    monkeypatch.setattr(xlwings, "ret", udfs.xlret)
    saved = sys.modules.pop(MODULE, None)
    saved_impl = sys.modules.pop(IMPL, None)
    try:
        module = importlib.import_module(MODULE)
        yield udfs, module
    finally:
        sys.modules.pop(MODULE, None)
        sys.modules.pop(IMPL, None)
        if saved is not None:
            sys.modules[MODULE] = saved
        if saved_impl is not None:
            sys.modules[IMPL] = saved_impl
        import plumbrule
        if saved is not None:
            plumbrule.sheet_functions = saved
        if saved_impl is not None:
            import plumbrule.excel
            plumbrule.excel.functions = saved_impl
        sys.modules.pop("xlwings.udfs", None)


class FakeWorkbook:
    """What import_udfs touches on the COM workbook, recording the calls."""

    def __init__(self, name="Quillford demo.xlsm"):
        self.Name = name
        self.imported_vba = None
        self.macro_options = {}
        book = self

        class Components:
            def Remove(self, component):
                pass

            def __call__(self, name):
                return name

            def Import(self, path):
                with open(path, encoding="utf-8") as fh:
                    book.imported_vba = fh.read()

        class Application:
            Version = "16.0"

            def MacroOptions(self, macro, **kw):
                book.macro_options[macro.split("!")[-1]] = kw

        self.VBProject = types.SimpleNamespace(VBComponents=Components())
        self.Application = Application()


def _functions(module):
    return [getattr(module, n) for n in dir(module) if hasattr(getattr(module, n), "__xlfunc__")]


def test_every_plumb_function_carries_xlwings_metadata(registered):
    udfs, module = registered
    names = sorted(f.__xlfunc__["name"] for f in _functions(module))
    # The list of worksheet functions (plus PLUMB_RECONCILE, an extension;
    # PLUMB_MODEL, the model cell of the speed issue; PLUMB_SUGGEST, issue 14; PLUMB_TOTAL,
    # the mass-appraisal issue; PLUMB_COMPARE, issue 13).
    assert names == sorted(["PLUMB_COEFS", "PLUMB_FIT", "PLUMB_CHECKS", "PLUMB_SCREEN",
                            "PLUMB_RATIOS", "PLUMB_VALUE", "PLUMB_GRID", "PLUMB_RECONCILE",
                            "PLUMB_INFO", "PLUMB_MODEL", "PLUMB_SUGGEST", "PLUMB_TOTAL",
                            "PLUMB_COMPARE"])
    assert names == sorted(f.__name__ for f in module.FUNCTIONS)


def test_raw_two_dimensional_ranges_not_the_dataframe_converter(registered):
    # The issue: ranges as raw 2-D values (ndim=2); xlwings' DataFrame converter would
    # turn the first column into the index.
    udfs, module = registered
    for f in _functions(module):
        for arg in f.__xlfunc__["args"]:
            opts = arg["options"]
            assert "convert" not in opts or opts["convert"] in (None, list), (f.__name__, arg)
            if arg["name"] in ("sales", "subject", "settings", "models"):
                assert opts.get("ndim") == 2, (f.__name__, arg["name"])


def test_generated_vba_declares_each_function_with_its_arguments(registered):
    udfs, module = registered
    out = io.StringIO()
    udfs.generate_vba_wrapper(MODULE, module, out, FakeWorkbook())
    vba = out.getvalue()
    for f in module.FUNCTIONS:
        params = list(inspect.signature(f).parameters.values())
        decl = ", ".join(("Optional " if p.default is not inspect.Parameter.empty else "")
                         + p.name for p in params)
        assert f"Function {f.__name__}({decl})" in vba, f.__name__
        call = f'{f.__name__} = XLPy.CallUDF("{MODULE}", "{f.__name__}", ' \
               f'Array({", ".join(p.name for p in params)}), ThisWorkbook, Application.Caller)'
        assert call in vba
    assert vba.count("End Function") == len(module.FUNCTIONS)
    assert "PLUMB_INFO()" in vba and "Application.Volatile" in vba   # INFO shows live state


def test_names_are_legal_vba_and_excel_names(registered):
    udfs, module = registered
    reserved = {w.casefold() for w in VBA_RESERVED}
    fnames = [f.__xlfunc__["name"] for f in _functions(module)]
    assert len({n.casefold() for n in fnames}) == len(fnames)      # unique ignoring case
    for f in _functions(module):
        name = f.__xlfunc__["name"]
        assert IDENT.match(name) and len(name) <= 255 and name.startswith("PLUMB_")
        assert name.casefold() not in reserved and not looks_like_cell_reference(name)
        args = [a["name"] for a in f.__xlfunc__["args"]]
        assert len({a.casefold() for a in args}) == len(args), name
        for a in args:
            assert IDENT.match(a), (name, a)
            assert a.casefold() not in reserved, (name, a)
            assert not looks_like_cell_reference(a), (name, a)
            assert a.casefold() != name.casefold()
            assert a != "caller"          # xlwings fills an argument named caller itself


def test_the_reserved_word_check_would_catch_the_usual_suspects():
    # The issue names these as argument names Excel's VBA would refuse.
    for word in ("date", "currency", "string", "type", "end", "ByVal", "Optional"):
        assert word.casefold() in {w.casefold() for w in VBA_RESERVED}


def test_import_functions_registers_the_help_text(registered):
    udfs, module = registered
    monkeypatch_modules = udfs.udf_modules
    monkeypatch_modules[MODULE] = {"module": module, "filetime": None,
                                   "filename": module.__file__}
    book = FakeWorkbook()
    try:
        udfs.import_udfs(MODULE, book)
    finally:
        monkeypatch_modules.pop(MODULE, None)
    assert book.imported_vba.startswith('Attribute VB_Name = "xlwings_udfs"')
    for f in module.FUNCTIONS:
        opts = book.macro_options[f.__name__]
        # xlwings cuts help at 255 characters: ours must be whole within that.
        assert opts["Description"] == f.__doc__ and len(f.__doc__) < 255
        assert opts["Category"] == "plumbrule"
        docs = opts["ArgumentDescriptions"] or []
        params = list(inspect.signature(f).parameters)
        assert len(docs) == len(params)
        for d in docs:
            assert 0 < len(d) < 255 and not d.startswith("Positional argument")
    assert book.macro_options["PLUMB_VALUE"]["ArgumentDescriptions"][3] == module.DOC_SUBJECT
    assert "not an appraisal" in book.macro_options["PLUMB_VALUE"]["Description"]

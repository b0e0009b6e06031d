"""xlwings' real ``call_udf``: what a cell's formula runs on Windows, driven here without Excel.

When Excel recalculates ``=PLUMB_COEFS(Sales[#All], ...)``, the VBA module from *Import
Functions* calls ``xlwings.udfs.call_udf(module, name, args, ThisWorkbook,
Application.Caller)``; each range argument arrives as a COM Range whose ``Value`` is a tuple
of row tuples (floats, text, None for empty, ``pywintypes.TimeType`` for dates, the integer
HRESULT codes for error cells, booleans). call_udf reads each argument through xlwings'
converter with our options, calls the function and converts the result for Excel.

Stand-ins (no pywin32 here): pywin32's modules as empty modules, ``ctypes.windll`` /
``oledll`` / ``PyDLL`` (Windows-only, touched at import of ``xlwings._xlwindows``), the
COM server module (only its event loop is imported, used for async functions, which ours are
not), and the COM Range / Worksheet / Workbook / Application objects with just the
attributes call_udf reads. Everything else — call_udf, the Range wrapper, the value
converter, the error-code table and the write conversion — is xlwings' own code.

Reference: the engine (``analysis.analyze``) on the same values; the error codes from
xlwings' own table (``_xlwindows.cell_errors``, -2146826246 = #N/A as Excel's CVErr(xlErrNA)
HRESULT 0x800A07FA, from memory).
"""

from __future__ import annotations

import ctypes
import datetime as dt
import importlib
import sys
import types

import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_sales, demo_subjects
from plumbrule.valuation.estimates import valuate

MODULE = "plumbrule.sheet_functions"
IMPL = "plumbrule.excel.functions"
RANGE_IID = "{00020846-0000-0000-C000-000000000046}"   # Excel's Range interface (xlwings)
NA_CODE = -2146826246                                   # #N/A as COM passes it
DIV0_CODE = -2146826281                                 # #DIV/0!


class _Anything:
    """A Windows-only object nobody calls in this path: any attribute, any call."""

    def __init__(self, *a, **k):
        pass

    def __call__(self, *a, **k):
        return _Anything()

    def __getattr__(self, name):
        return _Anything()


class TimeType(dt.datetime):
    """Stand-in for pywintypes.TimeType (a datetime subclass in pywin32 ≥ 300)."""


def _module(name, **attrs):
    m = types.ModuleType(name)
    m.__getattr__ = lambda n: _Anything()          # `from X import Y` of unused names
    for k, v in attrs.items():
        setattr(m, k, v)
    return m


class _Count:
    def __init__(self, n):
        self.Count = n


class FakeApplication:
    Hwnd = 1
    Version = "16.0"


class FakeWorkbook:
    Name = "Quillford demo.xlsm"
    Application = FakeApplication()


class FakeSheet:
    Name = "Live"
    Parent = FakeWorkbook()


class FakeComRange:
    """A COM Range: Value as Excel hands it over, plus its place and size."""

    def __init__(self, rows, row=1, column=1):
        self.Value = tuple(tuple(r) for r in rows)
        self.Row, self.Column = row, column
        self.Rows = _Count(len(rows))
        self.Columns = _Count(len(rows[0]) if rows else 0)
        self.Worksheet = FakeSheet()
        self.Parent = self.Worksheet
        self._oleobj_ = types.SimpleNamespace(GetTypeInfo=lambda: types.SimpleNamespace(
            GetTypeAttr=lambda: types.SimpleNamespace(iid=RANGE_IID)))


@pytest.fixture()
def xl(monkeypatch):
    """xlwings.udfs importable, and sheet_functions under its real decorators."""
    mods = {"pythoncom": _module("pythoncom", CoInitialize=lambda: None),
            "pywintypes": _module("pywintypes", TimeType=TimeType, IID=lambda s: s,
                                  com_error=type("com_error", (Exception,), {})),
            "xlwings.com_server": _module("xlwings.com_server", loop=None)}
    # The Excel process id xlwings asks for on the caller's application window.
    mods["win32process"] = _module("win32process", GetWindowThreadProcessId=lambda h: (1, 4242))
    # Dates written back carry pywin32's UTC zone; the standard library's serves.
    mods["win32timezone"] = _module("win32timezone", TimeZoneInfo=types.SimpleNamespace(
        utc=lambda: dt.timezone.utc))
    for n in ("win32api", "win32con", "win32gui",
              "win32event", "win32com", "win32com.client"):
        mods[n] = _module(n)
    for name, mod in mods.items():
        monkeypatch.setitem(sys.modules, name, mod)
    for n in ("windll", "oledll", "PyDLL"):
        monkeypatch.setattr(ctypes, n, _Anything(), raising=False)
    for n in ("xlwings.udfs", "xlwings._xlwindows"):
        monkeypatch.delitem(sys.modules, n, raising=False)
    udfs = importlib.import_module("xlwings.udfs")
    import xlwings
    windows = importlib.import_module("xlwings._xlwindows")
    # What xlwings/__init__ does on Windows: the module attribute and the "excel" engine.
    monkeypatch.setattr(xlwings, "_xlwindows", windows, raising=False)
    excel = xlwings.main.Engine(impl=windows.engine)
    monkeypatch.setitem(xlwings.engines.engines_by_name, "excel", excel)
    monkeypatch.setattr(xlwings.engines, "engines", xlwings.engines.engines + [excel])
    monkeypatch.setattr(xlwings, "func", udfs.xlfunc)
    monkeypatch.setattr(xlwings, "arg", udfs.xlarg)
    monkeypatch.setattr(xlwings, "ret", udfs.xlret)
    saved = {n: sys.modules.pop(n, None) for n in (MODULE, IMPL)}
    import plumbrule
    import plumbrule.excel
    saved_attrs = (getattr(plumbrule, "sheet_functions", None),
                   getattr(plumbrule.excel, "functions", None))
    try:
        module = importlib.import_module(MODULE)
        udfs.udf_modules[MODULE] = {"module": module, "filetime": None,
                                    "filename": module.__file__}
        yield udfs, module
    finally:
        udfs.udf_modules.pop(MODULE, None)
        for n, m in saved.items():
            sys.modules.pop(n, None)
            if m is not None:
                sys.modules[n] = m
        plumbrule.sheet_functions, plumbrule.excel.functions = saved_attrs
        for n in ("xlwings.udfs", "xlwings._xlwindows"):
            sys.modules.pop(n, None)


def com_cells(frame):
    """A frame as COM hands over a range: header row, floats, text, None, TimeType."""
    rows = [list(frame.columns)]
    for rec in frame.astype(object).itertuples(index=False):
        row = []
        for v in rec:
            if v is None or v is pd.NaT or (isinstance(v, float) and v != v):
                v = None
            elif hasattr(v, "to_pydatetime"):
                d = v.to_pydatetime()
                v = TimeType(d.year, d.month, d.day)
            elif isinstance(v, (int, float)) and not isinstance(v, bool):
                v = float(v)
            elif hasattr(v, "item"):
                v = v.item()
                v = float(v) if isinstance(v, int) and not isinstance(v, bool) else v
            elif v == "":
                v = None
            row.append(v)
        rows.append(row)
    return rows


def python_cells(rows):
    """The same values as Python types: TimeType → datetime, error codes → their text."""
    text = {NA_CODE: "#N/A", DIV0_CODE: "#DIV/0!"}
    return [[dt.datetime(v.year, v.month, v.day) if isinstance(v, TimeType)
             else text.get(v, v) if type(v) is int else v for v in r] for r in rows]


@pytest.fixture(scope="module")
def sales_rows():
    rows = com_cells(demo_sales())
    rows[5][2] = NA_CODE         # Living area, sheet row 6: #N/A
    rows[9][3] = DIV0_CODE       # Lot size, sheet row 10: #DIV/0!
    return rows


SETTINGS = [["setting", "value"]] + [[k, v if not isinstance(v, (list, tuple)) else ",".join(v)]
                                     for k, v in DEMO_SETTINGS.items()]


def _call(udfs, name, args, height=1, width=1):
    caller = FakeComRange([[None] * width] * height, row=1, column=1)
    return udfs.call_udf(MODULE, name, tuple(args), None, caller)


def _as_written(cells):
    """What xlwings writes for a table of cells: None → "" (an empty cell)."""
    return [["" if v is None else v for v in r] for r in cells]


def test_coefs_through_call_udf_equal_the_engine(xl, sales_rows):
    udfs, module = xl
    out = _call(udfs, "PLUMB_COEFS", [FakeComRange(sales_rows), "", "",
                                     FakeComRange(SETTINGS)])
    engine = analyze(python_cells(sales_rows), DEMO_SETTINGS)
    table = engine.tables.table("coefficients")
    assert isinstance(out, list), out
    assert (len(out), len(out[0])) == (len(table) + 1, len(table.columns))   # spilled shape
    assert out == _as_written(module.frame_cells(table))


def test_screen_logs_the_error_text_not_blank(xl, sales_rows):
    udfs, module = xl
    out = _call(udfs, "PLUMB_SCREEN", [FakeComRange(sales_rows), "", "",
                                      FakeComRange(SETTINGS)])
    engine = analyze(python_cells(sales_rows), DEMO_SETTINGS)
    table = engine.tables.set_aside
    assert (len(out), len(out[0])) == (len(table) + 1, len(table.columns))
    assert out == _as_written(module.frame_cells(table))
    text = [" ".join(str(v) for v in r) for r in out[1:]]
    row6 = [t for t in text if t.split()[0] in ("6", "6.0")]
    row10 = [t for t in text if t.split()[0] in ("10", "10.0")]
    # Without err_to_str xlwings hands the error cell over as None and it reads "blank".
    assert row6 and "#N/A" in row6[0] and "blank" not in row6[0], row6
    assert row10 and "#DIV/0!" in row10[0] and "blank" not in row10[0], row10


def _engine_valuation(module, sales_rows, subject_rows):
    """The engine's own valuation of the subjects with the sheet's settings (what the worksheet
    functions must return), the valuation date today when the settings give none."""
    engine = analyze(python_cells(sales_rows), DEMO_SETTINGS)
    s = module.resolve_settings("", "", SETTINGS)
    when = s.valuation_date or dt.date.today()
    return valuate(engine, python_cells(subject_rows), comps=(),
                   settings=s.replace(valuation_date=when))


def test_value_through_call_udf_equals_the_engine(xl, sales_rows):
    udfs, module = xl
    subject_rows = com_cells(demo_subjects())
    out = _call(udfs, "PLUMB_VALUE", [FakeComRange(sales_rows), "", "",
                                     FakeComRange(subject_rows), FakeComRange(SETTINGS)])
    est = _engine_valuation(module, sales_rows, subject_rows).estimates
    assert isinstance(out, list), out
    assert (len(out), len(out[0])) == (len(est) + 1, len(est.columns))
    expected = _as_written(module.frame_cells(est))
    assert out[0] == expected[0]
    # Dates go back to Excel as UTC-stamped datetimes of the same day; the rest as is.
    naive = [[v.replace(tzinfo=None) if isinstance(v, dt.datetime) else v for v in r]
             for r in out]
    assert naive == expected


@pytest.mark.parametrize("name", ["PLUMB_FIT", "PLUMB_CHECKS", "PLUMB_RATIOS", "PLUMB_GRID",
                                  "PLUMB_RECONCILE", "PLUMB_SUGGEST"])
def test_every_other_function_through_call_udf_equals_its_direct_call(xl, sales_rows, name):
    """The remaining worksheet functions through xlwings' real call path give what the same
    function gives called directly with the same values (the direct calls are checked
    against the engine in test_sheet_functions.py): xlwings hands over nothing different."""
    from plumbrule.demo.town import demo_comps
    udfs, module = xl
    args = [FakeComRange(sales_rows), "", ""]
    direct = [python_cells(sales_rows), "", ""]
    if name in ("PLUMB_GRID", "PLUMB_RECONCILE"):
        subject_rows = com_cells(demo_subjects())
        comps = [[float(r)] for r in demo_comps(demo_sales())]
        args += [FakeComRange(subject_rows), FakeComRange(comps)]
        direct += [python_cells(subject_rows), [r[0] for r in comps]]
    if name == "PLUMB_SUGGEST":
        subject_rows = com_cells(demo_subjects())
        args += [FakeComRange(subject_rows)]
        direct += [python_cells(subject_rows)]
    out = _call(udfs, name, args + [FakeComRange(SETTINGS)])
    want = getattr(module, name)(*direct, SETTINGS)
    assert isinstance(out, list) and len(out) > 1, out
    naive = [[v.replace(tzinfo=None) if isinstance(v, dt.datetime) else v for v in r]
             for r in out]
    assert naive == _as_written(want)


def test_model_cell_and_its_handle_through_call_udf(xl, sales_rows):
    """PLUMB_MODEL through xlwings' call path returns one text cell; a cell referring to it
    (a one-cell COM range holding that text) gives the direct call's coefficient table."""
    udfs, module = xl
    handle = _call(udfs, "PLUMB_MODEL", [FakeComRange(sales_rows), "", "",
                                        FakeComRange(SETTINGS)])
    assert isinstance(handle, list) and len(handle) == 1 and len(handle[0]) == 1, handle
    handle = handle[0][0]                          # xlwings writes one cell: [[text]]
    assert isinstance(handle, str) and handle.startswith("plumbrule model "), handle
    out = _call(udfs, "PLUMB_COEFS", [FakeComRange([[handle]]), "", "",
                                     FakeComRange(SETTINGS)])
    engine = analyze(python_cells(sales_rows), DEMO_SETTINGS)
    assert out == _as_written(module.frame_cells(engine.tables.table("coefficients")))


def _two_subjects():
    """The demo's subject and a second one, larger, in the same neighbourhood."""
    one = demo_subjects()
    two = one.copy()
    two["Subject"] = "2 Lantern Row"
    two["Living area"] = two["Living area"] + 400
    return pd.concat([one, two], ignore_index=True)


def test_total_through_call_udf_equals_the_engine_portfolio(xl, sales_rows):
    """PLUMB_TOTAL through xlwings' call path: the engine's portfolio record of the same
    subjects (reference: valuate().portfolio, itself checked against statsmodels in
    tests/valuation/test_portfolio.py)."""
    udfs, module = xl
    subject_rows = com_cells(_two_subjects())
    out = _call(udfs, "PLUMB_TOTAL", [FakeComRange(sales_rows), "", "",
                                     FakeComRange(subject_rows), FakeComRange(SETTINGS)])
    port = _engine_valuation(module, sales_rows, subject_rows).portfolio
    assert len(port) == 1
    got = {r[0]: r[1] for r in out[1:]}
    assert got["n"] == float(port["n"].iloc[0])
    assert got["total"] == pytest.approx(float(port["total"].iloc[0]), rel=1e-12)
    assert got["ci_low"] < got["total"] < got["ci_high"]


MODELS = [["Model", "trend", "trend_period", "log_response"],
          ["quarterly", "periods", "quarter", None],
          ["price scale", None, None, False]]


def test_compare_through_call_udf_equals_the_engine_comparison(xl, sales_rows):
    """PLUMB_COMPARE through xlwings' call path: the engine's comparison table of the same
    sales and candidates (reference: compare(), whose rows tests/test_compare.py checks
    against single analyses and statsmodels), then a blank row and the reason."""
    from plumbrule.compare import candidates_from_rows, compare
    udfs, module = xl
    out = _call(udfs, "PLUMB_COMPARE", [FakeComRange(sales_rows), FakeComRange(MODELS),
                                       FakeComRange(SETTINGS)])
    s = module.resolve_settings("", "", SETTINGS)
    engine = compare(python_cells(sales_rows), s, candidates_from_rows(MODELS))
    table = _as_written(module.frame_cells(engine.table))
    assert out[:len(table)] == table
    assert [r[1] for r in out[1:len(table)]] == list(engine.table["name"])
    assert all(v == "" for v in out[len(table)])                  # the blank row
    reason = " ".join(r[0] for r in out[len(table) + 1:])
    assert reason == engine.reason
    chosen = [r for r in out[1:len(table)] if r[2] is True]
    assert len(chosen) == 1


def test_compare_bad_models_cell_is_one_cell_naming_it(xl, sales_rows):
    udfs, module = xl
    bad = [row[:] for row in MODELS]
    bad[2][3] = "maybe"
    out = module.PLUMB_COMPARE(python_cells(sales_rows), bad, SETTINGS)
    assert isinstance(out, str) and out.startswith("plumbrule: models range")
    assert "cell D3" in out

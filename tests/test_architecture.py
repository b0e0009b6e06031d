"""The layering DEVELOPERS.md promises, held by reading every module's imports: the engine
never reaches a surface or a spreadsheet library; the surfaces compute no statistic (no
scipy.stats, no least-squares internals)."""

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "engine" / "plumbrule"
SURFACES = ("render", "cli", "excel", "workbook", "sheet_functions", "__main__")
SURFACE_MODULES = tuple(f"plumbrule.{s}" for s in SURFACES)
SPREADSHEET_LIBS = ("openpyxl", "xlwings")   # intake may read xlsx (python-calamine)


def _modules():
    for path in sorted(PKG.rglob("*.py")):
        rel = path.relative_to(PKG).with_suffix("")
        yield ".".join(("plumbrule", *rel.parts)).removesuffix(".__init__"), path


def _imports(path: Path) -> set[str]:
    """Every module named by an import anywhere in the file (function-level ones included)."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"{path}: relative import; the layout uses absolute ones"
            found.add(node.module or "")
            found.update(f"{node.module}.{a.name}" for a in node.names)
    return found


def _is_surface(name: str) -> bool:
    return name.startswith(SURFACE_MODULES)


def _under(name: str, roots) -> bool:
    return any(name == r or name.startswith(r + ".") for r in roots)


MODULES = list(_modules())


def test_the_layout_is_found():
    names = {n for n, _ in MODULES}
    assert {"plumbrule.model.ols", "plumbrule.intake", "plumbrule.workbook.graft",
            "plumbrule.excel.functions", "plumbrule.render.json"} <= names


@pytest.mark.parametrize("name,path", [m for m in MODULES if not _is_surface(m[0])],
                         ids=[m[0] for m in MODULES if not _is_surface(m[0])])
def test_engine_never_imports_a_surface(name, path):
    bad = sorted(i for i in _imports(path)
                 if _under(i, SURFACE_MODULES) or _under(i, SPREADSHEET_LIBS))
    assert not bad, f"{name} imports {bad}"


@pytest.mark.parametrize("name,path", [m for m in MODULES if _is_surface(m[0])],
                         ids=[m[0] for m in MODULES if _is_surface(m[0])])
def test_surfaces_compute_no_statistic(name, path):
    bad = sorted(i for i in _imports(path)
                 if _under(i, ("scipy", "statsmodels", "plumbrule.model.ols")))
    assert not bad, f"{name} imports {bad}"


def test_the_command_line_starts_without_numpy_pandas_or_scipy():
    """`plumbrule --version` and `--help` wait on nothing heavy: importing the command line
    (the parser, the settings registry, the errors) loads no numpy, pandas or scipy — a
    behaviour a user feels on every command, checked by import, not by a clock."""
    import subprocess
    import sys
    code = ("import sys; from plumbrule.cli.main import build_parser; build_parser(); "
            "print(sorted(x for x in ('numpy', 'pandas', 'scipy') if x in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"


def test_a_whole_analysis_loads_no_scipy_stats_nor_statsmodels():
    """scipy.stats costs about 1.6 s to import (every distribution and its docstrings) and
    statsmodels more: the analysis reads its t, F, χ² and normal tails from
    plumbrule.numeric.distributions, so a command waits on neither. Checked by import on
    the demo analysis with every check the demo runs (a curve, a location-free market, the
    per-predictor linearity checks), not by a clock."""
    import subprocess
    import sys
    code = ("import sys; from plumbrule.demo.town import DEMO_SETTINGS, demo_sales; "
            "from plumbrule.analysis import analyze; "
            "a = analyze(demo_sales(), {**DEMO_SETTINGS, 'curves': 'Age=spline:4'}); "
            "assert len(a.tables.checks); "
            "print(sorted(x for x in ('scipy.stats', 'statsmodels') if x in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"

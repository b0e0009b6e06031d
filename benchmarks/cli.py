"""`plumbrule fit` stage by stage, each stage beside its anchor measured in the same run.

    PYTHONPATH=engine python benchmarks/cli.py [--sizes 10000,200000,1000000]
                                               [--formats csv,xlsx] [--repeat 3]

Invented sales (an ID, the price, eight numeric predictors, a six-level neighbourhood and a
sale date: 12 columns), written once per size as CSV and as xlsx. For each size and format:

  read            plumbrule's reader (intake.read_table)      | pandas.read_csv (CSV) or
                                                              | pandas.read_excel, calamine
  intake          prepare_sales: spec, typing, IDs, rules     | —
  read + intake   the two above                               | pandas.read_csv   target ≤ 3×
  analysis        analyze() on the table, minus intake        | —
  render JSON     render.json.write_analysis_json (streamed)  | —
  fit --json      `python -m plumbrule fit FILE --json`       | a plain script: pandas,
                  (a subprocess, output to /dev/null)         | statsmodels, the same fit
                                                              | (target: plumbrule ≥ 3×
                                                              | faster at 200k)
  peak memory     tracemalloc over read + analysis + JSON, as a multiple of the design
                  matrix (n × p × 8 bytes, p the model's design columns)

Both sides run from bytecode: the engine is compiled first (compileall), as pip compiles an
installed package and as the anchor's libraries are; a machine with PYTHONDONTWRITEBYTECODE
set would otherwise recompile every plumbrule module in each command (about 0.13 s).

BLAS runs on one thread (OPENBLAS_NUM_THREADS=1 unless set) on both sides. Times are
paired: in each repeat the anchor and plumbrule run back to back, and the ratio
shown is the median of the per-repeat ratios (the machine may be shared and busy); the
seconds shown are medians too.
"""

from __future__ import annotations

import os

# One BLAS thread for this process and the subprocesses (both sides alike): on a shared,
# busy machine multi-threaded BLAS spins and makes every small call slow.
os.environ["OPENBLAS_NUM_THREADS"] = os.environ.get("OPENBLAS_NUM_THREADS", "1")
os.environ["OMP_NUM_THREADS"] = os.environ.get("OMP_NUM_THREADS", "1")

import argparse
import gc
import json
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "engine"))

K = 8
HOODS = ["Millbank", "Old Quay", "Fenby Park", "Hilltop", "Riverside", "Kestrel Park"]
SETTINGS = {"response": "price", "predictors": ",".join([*(f"x{j + 1}" for j in range(K)),
                                                         "hood"]),
            "categorical": "hood", "date_column": "sale_date", "id_column": "id", "folds": 5}


def make_sales(n: int, seed: int = 7) -> pd.DataFrame:
    """Sales-like numbers: areas, ages and counts on their own scales, a neighbourhood
    effect, a market trend over 30 months, and noise about 10% of the mean price."""
    rng = np.random.default_rng(seed)
    loc, scale = rng.uniform(10, 1000, K), rng.uniform(1, 100, K)
    x = np.round(rng.normal(size=(n, K)) * scale + loc, 2)
    hood = rng.integers(0, len(HOODS), n)
    days = rng.integers(0, 900, n)
    effect = rng.uniform(-2e4, 2e4, len(HOODS))
    price = (2e5 + (x - loc) @ (rng.uniform(-3, 3, K) * 1e3 / scale) + effect[hood]
             + 20.0 * days + rng.normal(0, 2e4, n))
    date = (np.datetime64("2023-01-01") + days.astype("timedelta64[D]")).astype(str)
    frame = pd.DataFrame({"id": np.arange(100001, 100001 + n), "price": np.round(price)})
    for j in range(K):
        frame[f"x{j + 1}"] = x[:, j]
    frame["hood"] = np.array(HOODS, dtype=object)[hood]
    frame["sale_date"] = date
    return frame


def write_xlsx(frame: pd.DataFrame, path: Path) -> None:
    """A one-sheet xlsx with inline strings, written directly (openpyxl takes minutes at
    a million rows); python-calamine and pandas read it like any saved workbook."""
    import zipfile
    from xml.sax.saxutils import escape

    def col(j: int) -> str:
        return chr(65 + j)

    head = "".join(f'<c r="{col(j)}1" t="inlineStr"><is><t>{escape(str(c))}</t></is></c>'
                   for j, c in enumerate(frame.columns))
    parts = [f'<row r="1">{head}</row>']
    cells = []
    rows = np.arange(2, len(frame) + 2).astype(str)
    for j, c in enumerate(frame.columns):
        v = frame[c]
        if not pd.api.types.is_numeric_dtype(v):
            txt = v.astype(object).map(escape).to_numpy(dtype=object)
            cells.append(pd.Series(txt).radd('" t="inlineStr"><is><t>').add("</t></is></c>")
                         .radd(pd.Series(rows).radd(f'<c r="{col(j)}')).to_numpy())
        else:
            cells.append(pd.Series(v.astype(str).to_numpy()).radd('"><v>').add("</v></c>")
                         .radd(pd.Series(rows).radd(f'<c r="{col(j)}')).to_numpy())
    body = pd.Series(rows).radd('<row r="').add('">').to_numpy(dtype=object)
    for c in cells:
        body = body + c
    parts.extend((body + "</row>").tolist())
    ns = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
    rel = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
    sheet = (f'<?xml version="1.0" encoding="UTF-8" standalone="yes"?><worksheet xmlns="{ns}">'
             f"<sheetData>{''.join(parts)}</sheetData></worksheet>")
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as z:
        z.writestr("[Content_Types].xml", (
            '<?xml version="1.0" encoding="UTF-8"?><Types xmlns="http://schemas.openxmlformats.'
            'org/package/2006/content-types"><Default Extension="rels" ContentType="application/'
            'vnd.openxmlformats-package.relationships+xml"/><Default Extension="xml" '
            'ContentType="application/xml"/><Override PartName="/xl/workbook.xml" ContentType="'
            'application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
            '<Override PartName="/xl/worksheets/sheet1.xml" ContentType="application/vnd.'
            'openxmlformats-officedocument.spreadsheetml.worksheet+xml"/></Types>'))
        z.writestr("_rels/.rels", (
            '<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="http://schemas.'
            'openxmlformats.org/package/2006/relationships"><Relationship Id="rId1" Type="'
            f'{rel}/officeDocument" Target="xl/workbook.xml"/></Relationships>'))
        z.writestr("xl/workbook.xml", (
            f'<?xml version="1.0" encoding="UTF-8"?><workbook xmlns="{ns}" xmlns:r="{rel}">'
            '<sheets><sheet name="Sales" sheetId="1" r:id="rId1"/></sheets></workbook>'))
        z.writestr("xl/_rels/workbook.xml.rels", (
            '<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="http://schemas.'
            'openxmlformats.org/package/2006/relationships"><Relationship Id="rId1" Type="'
            f'{rel}/worksheet" Target="worksheets/sheet1.xml"/></Relationships>'))
        z.writestr("xl/worksheets/sheet1.xml", sheet)


# --- the anchor: what a script using pandas and statsmodels does for the same fit ----------

ANCHOR = r'''
import sys, warnings, numpy as np, pandas as pd, statsmodels.api as sm
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
path = sys.argv[1]
df = (pd.read_csv(path) if path.endswith(".csv") else pd.read_parquet(path)
      if path.endswith(".parquet") else pd.read_excel(path, engine="calamine"))
df = df.dropna()
date = pd.to_datetime(df["sale_date"])
months = (date - date.min()).dt.days / (365.25 / 12)
x = pd.concat([df[[f"x{j + 1}" for j in range(8)]], pd.get_dummies(df["hood"], drop_first=True,
               dtype=float), months.rename("months")], axis=1)
x = sm.add_constant(x)
y = df["price"].to_numpy()
res = sm.OLS(y, x).fit()
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    res.summary()
het_breuschpagan(res.resid, x, robust=True)
[variance_inflation_factor(x.to_numpy(), j) for j in range(1, x.shape[1])]
inf = OLSInfluence(res)
# externally studentized residuals in closed form: OLSInfluence.resid_studentized_external
# refits the model once per sale (n regressions), which never finishes at 200k
h, r = inf.hat_matrix_diag, res.resid.to_numpy()
s2_not_i = (res.ssr - r ** 2 / (1 - h)) / (res.df_resid - 1)
table = pd.DataFrame({"id": df["id"], "fitted": res.fittedvalues, "residual": res.resid,
                      "studentized": r / np.sqrt(s2_not_i * (1 - h)),
                      "cooks": inf.cooks_distance[0], "leverage": inf.hat_matrix_diag})
fold = np.random.default_rng(1).integers(0, 5, len(y))
pred = np.empty(len(y))
xa = x.to_numpy()
for k in range(5):
    m = sm.OLS(y[fold != k], xa[fold != k]).fit()
    pred[fold == k] = m.predict(xa[fold == k])
cv = pd.DataFrame({"id": df["id"], "estimate": pred, "price": y, "ratio": pred / y})
ratio = cv["ratio"]
study = {"median": ratio.median(), "cod": 100 * (ratio - ratio.median()).abs().mean()
         / ratio.median(), "prd": ratio.mean() / (pred.sum() / y.sum())}
coef = pd.DataFrame({"estimate": res.params, "se": res.bse, "p": res.pvalues})
if sys.argv[2:] == ["text"]:     # the text output: the tables a reader looks at
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        print(res.summary(), coef, study)
else:
    print(coef.to_json(orient="records"), table.to_json(orient="records"),
          cv.to_json(orient="records"), study)
'''


def timed(fn):
    gc.collect()
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


PEAK_RSS: dict[str, list[float]] = {}


def run_quiet(cmd: list[str], label: str = "") -> None:
    """Run ``cmd`` with its output to /dev/null; record its peak resident memory (bytes)
    under ``label`` (os.wait4 reports the child's own rusage)."""
    # A small launcher starts the command: a child forked from this (large) process would
    # report this process's resident memory as its own peak.
    done = subprocess.run([sys.executable, "-c", _LAUNCH, *cmd], stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True, cwd=ROOT)
    if done.returncode:
        raise subprocess.CalledProcessError(done.returncode, cmd, stderr=done.stderr)
    if label:
        kb = float(done.stderr.strip().splitlines()[-1])
        PEAK_RSS.setdefault(label, []).append(kb * 1024.0)


_LAUNCH = ("import resource, subprocess, sys; r = subprocess.run(sys.argv[1:]).returncode; "
           "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, file=sys.stderr); "
           "sys.exit(r)")


def fit_args(path: Path, json_out: bool = True) -> list[str]:
    args = [sys.executable, "-m", "plumbrule", "fit", str(path)] + (["--json"] if json_out
                                                                     else [])
    for k, v in SETTINGS.items():
        args += [f"--{k.replace('_', '-')}", str(v)]
    return args


def measure(path: Path, repeat: int, whole: bool, text: bool = False, stages: bool = True
            ) -> dict:
    from plumbrule.analysis import analyze
    from plumbrule.intake import read_table
    from plumbrule.render.json import write_analysis_json
    from plumbrule.sales import prepare_sales

    class Discard:          # fit --json streams its blocks to stdout; here they go nowhere
        def write(self, chunk: bytes) -> int:
            return len(chunk)

    def analysis_json(result) -> None:
        write_analysis_json(result, Discard())
    from plumbrule.settings import parse_settings
    settings = parse_settings(SETTINGS)
    csv = path.suffix == ".csv"

    def anchor_read():
        if path.suffix == ".parquet":
            return pd.read_parquet(path)
        return pd.read_csv(path) if csv else pd.read_excel(path, engine="calamine")

    def ours_read():
        return read_table(path, text_columns=settings.text_columns)

    rows: dict[str, list] = {k: [] for k in ("anchor_read", "read", "intake", "analyze",
                                             "json", "anchor_fit", "fit", "anchor_text",
                                             "fit_text")}
    result = None
    for _ in range(repeat):
        if not stages:        # the whole commands only (5M sales: no in-process copy)
            if whole:
                rows["anchor_fit"].append(timed(lambda: run_quiet(
                    [sys.executable, "-c", ANCHOR, str(path)], f"anchor json {path}"))[0])
                rows["fit"].append(timed(lambda: run_quiet(fit_args(path),
                                                           f"fit json {path}"))[0])
            if text:
                rows["anchor_text"].append(timed(lambda: run_quiet(
                    [sys.executable, "-c", ANCHOR, str(path), "text"],
                    f"anchor text {path}"))[0])
                rows["fit_text"].append(timed(lambda: run_quiet(fit_args(path, False),
                                                                f"fit text {path}"))[0])
            continue
        rows["anchor_read"].append(timed(anchor_read)[0])
        t, table = timed(ours_read)
        rows["read"].append(t)
        rows["intake"].append(timed(lambda table=table: prepare_sales(table, settings))[0])
        t, result = timed(lambda table=table: analyze(table, settings))
        rows["analyze"].append(t)
        rows["json"].append(timed(lambda result=result: analysis_json(result))[0])
        if whole:
            rows["anchor_fit"].append(timed(lambda: run_quiet(
                [sys.executable, "-c", ANCHOR, str(path)], f"anchor json {path}"))[0])
            rows["fit"].append(timed(lambda: run_quiet(fit_args(path), f"fit json {path}"))[0])
        if text:
            rows["anchor_text"].append(timed(lambda: run_quiet(
                [sys.executable, "-c", ANCHOR, str(path), "text"], f"anchor text {path}"))[0])
            rows["fit_text"].append(timed(lambda: run_quiet(fit_args(path, False),
                                                            f"fit text {path}"))[0])
    if not stages:
        rows["memory"] = []
        return rows
    # peak memory of the in-process whole, stage by stage (numpy reports its buffers to
    # tracemalloc); the read table is handed over to the analysis, as `plumbrule fit` does
    from plumbrule.analysis import HandedOver
    n, p = result.model.x.shape
    del table, result
    gc.collect()
    tracemalloc.start()
    holder = HandedOver(ours_read())
    read_held, read_peak = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    result = analyze(holder, settings)
    held, analysis_peak = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    analysis_json(result)
    json_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    design = n * (p + 1) * 8.0                      # the design with its constant column
    rows["design_bytes"] = [design]
    rows["memory"] = [max(read_peak, analysis_peak, json_peak) / design]
    rows["memory_stages"] = [(read_held / design, read_peak / design, held / design,
                              analysis_peak / design, json_peak / design)]
    return rows


def paired(a: list, b: list) -> str:
    """median of b/a over the repeats, and the two medians in seconds"""
    if not a or not b:
        return ""
    r = statistics.median([y / x for x, y in zip(a, b, strict=True)])
    return f"{statistics.median(b):8.3f} s  {statistics.median(a):8.3f} s  {r:6.2f}×"


def _rss(label: str, path: Path) -> float:
    got = PEAK_RSS.get(f"{label} {path}", [])
    return statistics.median(got) if got else float("nan")


def report(n: int, fmt: str, m: dict, path: Path) -> None:
    med = statistics.median
    anchor = {"csv": "pandas.read_csv", "parquet": "pandas.read_parquet"}.get(
        fmt, "pandas.read_excel(calamine)")
    print(f"\n{n:,} sales, {fmt}  (plumbrule | anchor | ratio plumbrule/anchor)")
    if m["read"]:
        read_intake = [r + i for r, i in zip(m["read"], m["intake"], strict=True)]
        analysis = [max(a - i, 0.0) for a, i in zip(m["analyze"], m["intake"], strict=True)]
        print(f"  read            {paired(m['anchor_read'], m['read'])}   anchor {anchor}")
        print(f"  intake          {med(m['intake']):8.3f} s")
        print(f"  read + intake   {paired(m['anchor_read'], read_intake)}   "
              f"target ≤ 3× {anchor}")
        print(f"  analysis        {med(analysis):8.3f} s")
        print(f"  render JSON     {med(m['json']):8.3f} s")
    design = m.get("design_bytes", [n * 15 * 8.0])[0]    # 15 design columns in these sales
    for key, anchor_key, label in (("fit", "anchor_fit", "json"),
                                   ("fit_text", "anchor_text", "text")):
        if not m[key]:
            continue
        r = statistics.median([a / b for a, b in zip(m[anchor_key], m[key], strict=True)])
        name = "fit --json" if label == "json" else "fit (text)"
        print(f"  {name:<15} {paired(m[anchor_key], m[key])}   pandas+statsmodels script; "
              f"plumbrule {r:.2f}× faster" + (" (target ≥ 3× at 200k)" if label == "json"
                                             else ""))
        ours, theirs = _rss(f"fit {label}", path), _rss(f"anchor {label}", path)
        print(f"  peak RSS        {ours / 1e6:8.0f} MB  {theirs / 1e6:8.0f} MB  "
              f"{ours / theirs:6.2f}×   = {ours / design:.1f}× the design matrix "
              f"({design / 1e6:.0f} MB; the anchor {theirs / design:.1f}×)")
    if m["memory"]:
        print(f"  traced peak     {m['memory'][0]:.1f}× the design matrix (read + analysis + "
              "streamed JSON, in process)")
        r_held, r_peak, held, a_peak, j_peak = m["memory_stages"][0]
        print(f"    by stage      read holds {r_held:.2f}× (peak {r_peak:.2f}×); analysis "
              f"peak {a_peak:.2f}×, its result holds {held:.2f}×; JSON peak {j_peak:.2f}× "
              f"(+{j_peak - held:.2f}× over the result)")


def compile_engine() -> None:
    """Write the engine's bytecode, as installing the package does (the anchor's pandas and
    statsmodels run from theirs)."""
    import compileall
    compileall.compile_dir(str(ROOT / "engine" / "plumbrule"), quiet=1)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="10000,200000,1000000")
    ap.add_argument("--formats", default="csv,xlsx", help="csv, xlsx, parquet (pyarrow)")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--no-whole", action="store_true", help="skip the fit --json subprocesses")
    ap.add_argument("--text", action="store_true",
                    help="also time `fit` with text output beside the script's text output")
    ap.add_argument("--whole-only", action="store_true",
                    help="only the whole commands (no in-process stages): for 5M sales")
    args = ap.parse_args(argv)
    compile_engine()
    sizes = [int(s) for s in args.sizes.split(",")]
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            frame = make_sales(n)
            for fmt in args.formats.split(","):
                path = Path(tmp) / f"sales-{n}.{fmt}"
                if fmt == "csv":
                    frame.to_csv(path, index=False)
                elif fmt == "parquet":
                    frame.to_parquet(path, index=False)
                else:
                    write_xlsx(frame, path)
                m = measure(path, args.repeat, not args.no_whole, args.text,
                            stages=not args.whole_only)
                report(n, fmt, m, path)
                sys.stdout.flush()
                path.unlink()
            del frame
    print("\n" + json.dumps({"note": "ratios are medians of paired per-repeat ratios"}))


if __name__ == "__main__":
    main()

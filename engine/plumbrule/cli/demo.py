"""``plumbrule demo [DIR]``: the invented town's workbook, analysed, in one command.

Writes DIR/plumbrule-demo.xlsx from the template filled with the Quillford sales,
one subject and four comparables, runs the analysis into it (as ``plumbrule run``
would) and prints where it is and the headline numbers.
"""

from __future__ import annotations

from pathlib import Path

DEMO_BOOK = "plumbrule-demo.xlsx"


def demo_settings() -> dict:
    """The demo's Settings sheet values: the model plus screening, holdout and a date."""
    from plumbrule.demo.town import DEMO_SETTINGS
    return {**DEMO_SETTINGS, "id_column": "Sale ID", "label_column": "Address",
            "trim_percentiles": "1,99", "holdout": 0.3,
            # the non-market sales the clerk's notes name, set aside by ID with the reason
            "exclude_ids": "Q-9001=Small hotel (14 rooms),Q-9002=Block of 6 flats,"
                           "Q-9003=Transfer between relatives",
            "ratio_by": None, "valuation_date": "2026-01-05"}


def demo_models():
    """The demo's Models sheet: candidate models beside the Settings' own (which the results
    follow), so the Comparison sheet shows the choice made on evidence."""
    import pandas as pd
    from plumbrule.settings import REGISTRY
    rows = [
        {"Model": "as set (log-log, linear trend)"},
        {"Model": "price scale", "log_response": False, "log_predictors": "none"},
        {"Model": "without lot size",
         "predictors": "Living area,Age,Bathrooms,Condition,Neighbourhood"},
        {"Model": "trend bends every 6 months", "trend": "piecewise",
         "trend_knots": "every 6 months"},
        {"Model": "quarterly index", "trend": "periods", "trend_period": "quarter"},
    ]
    if "curves" in REGISTRY:        # effects that bend (issue 13), when the setting exists
        rows.append({"Model": "curved age", "curves": "Age=spline:4"})
        # the town's market as it was made: a bending trend and depreciation that levels off
        rows.append({"Model": "bends and curved age", "trend": "piecewise",
                     "trend_knots": "every 6 months", "curves": "Age=spline:4"})
    frame = pd.DataFrame(rows)
    return frame.reindex(columns=["Model", *[c for c in frame.columns if c != "Model"]])


def write_demo_book(folder: str | Path) -> Path:
    """The filled (not yet analysed) demo workbook in ``folder``; returns its path."""
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    from plumbrule.errors import WorkbookError
    from plumbrule.workbook.fill import fill_template
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise WorkbookError(f"Cannot create folder '{folder}' ({exc.strerror}). Choose another "
                            "folder.") from None
    sales = demo_sales()
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    path = folder / DEMO_BOOK
    from plumbrule.workbook.safety import check_not_open
    check_not_open(path)
    tmp = folder / f".~plumbrule-demo-{DEMO_BOOK}"
    fill_template(tmp, sales, demo_subjects(), demo_comps(sales), settings, demo_models())
    import os
    os.replace(tmp, path)
    return path


def run_demo(args) -> int:
    from plumbrule.render.wording import CAUTION
    from plumbrule.demo.town import TOWN
    from plumbrule.workbook.run import run_book
    path = write_demo_book(args.dir)
    result = run_book(path, backup=False)
    if getattr(args, "json", False):
        import json
        from plumbrule.render.json import analysis_json_bytes
        out = json.loads(analysis_json_bytes(result.analysis))
        out["workbook"] = str(result.written.resolve())
        out["headline"] = result.headline
        if result.valuation is not None:
            from plumbrule.cli.value import valuation_json
            out.update(json.loads(valuation_json(result.valuation)))
        print(json.dumps(out, allow_nan=False, ensure_ascii=False))
        return 0
    h = result.headline
    print(f"Demo workbook for {TOWN} (an invented town): {result.written.resolve()}")
    print("Open it and read the Report sheet first.\n")
    from plumbrule.render.text import headline_text
    print(headline_text(h) + "\n\n" + CAUTION)
    return 0

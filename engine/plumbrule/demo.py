"""``plumbrule demo``: write the invented-town sales and run the analysis on them."""

from __future__ import annotations

from pathlib import Path


def run_demo(args) -> int:
    from .analysis import analyze
    from .demo_data import DEMO_SETTINGS, TOWN, demo_sales
    from .render_text import render_analysis
    folder = Path(args.dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "plumbrule-demo-sales.csv"
    sales = demo_sales()
    sales.assign(**{"Sale date": sales["Sale date"].dt.strftime("%Y-%m-%d")}).to_csv(path, index=False)
    result = analyze(path, DEMO_SETTINGS)
    if getattr(args, "json", False):
        from .render_json import analysis_json
        print(analysis_json(result))
    else:
        print(f"Demo sales of {TOWN} (an invented town) written to {path}\n")
        print(render_analysis(result))
    return 0

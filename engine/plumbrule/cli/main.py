"""Command line: ``plumbrule fit|value|comps|compare|run|new|demo|report``.

Options are generated from the settings registry, so a CLI option, a worksheet
setting and a Settings-sheet row always share one name (dashes here,
underscores there). Bad input exits with status 2 and one line on stderr.
"""

from __future__ import annotations

import argparse
import sys
from typing import Any, Sequence

from plumbrule.collection import cycle_collection_paused
from plumbrule.errors import CellErrors, PlumbError
from plumbrule.render.terminal import visible
from plumbrule.settings import REGISTRY

FIT_GROUPS = ("intake", "model", "screen", "validate")


def _add_setting_options(parser: argparse.ArgumentParser, groups: Sequence[str]) -> None:
    for s in REGISTRY.values():
        if s.group not in groups:
            continue
        flag = "--" + s.name.replace("_", "-")
        if s.kind == "bool":
            parser.add_argument(flag, dest=s.name, action="store_true", default=None, help=s.help)
        else:
            meta = {"columns": "A,B", "rows": "ROWS", "percentiles": "LOW,HIGH",
                    "date": "YYYY-MM-DD", "choice": "|".join(s.choices)}.get(s.kind, "VALUE")
            parser.add_argument(flag, dest=s.name, default=None, metavar=meta, help=s.help)


def _settings_from_args(args: argparse.Namespace):
    from plumbrule.settings import parse_settings
    raw = {name: getattr(args, name) for name in REGISTRY if getattr(args, name, None) is not None}
    return parse_settings(raw)


def _data_command(sub: Any, name: str, *, handler: Any, groups: tuple[str, ...], help: str,
                  subjects: str | None = None) -> argparse.ArgumentParser:
    """A command reading a sales table: DATA, --sheet, [--subjects], --json and the settings."""
    cmd: argparse.ArgumentParser = sub.add_parser(name, help=help)
    cmd.add_argument("data", metavar="DATA", help="Sales table: .csv or .xlsx, or a plumbrule "
                     "workbook (its Sales, Settings, Subjects and Comps; flags override)")
    cmd.add_argument("--sheet", help="Worksheet of an .xlsx file (default: the first).")
    if subjects is not None:
        cmd.add_argument("--subjects", metavar="SUBJECTS", help=subjects)
    cmd.add_argument("--json", action="store_true", help="Print one JSON object.")
    _add_setting_options(cmd, groups)
    cmd.set_defaults(handler=handler)
    return cmd


def build_parser() -> argparse.ArgumentParser:
    from plumbrule import __version__
    parser = _Parser(
        prog="plumbrule",
        description="Hedonic price models for appraisers, inside the spreadsheet.")
    parser.add_argument("--version", action="version", version=f"plumbrule {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    _data_command(sub, "fit", handler=cmd_fit, groups=FIT_GROUPS,
                  help="Fit the model to a CSV or xlsx sales table.")
    value = _data_command(sub, "value", handler=cmd_value, groups=FIT_GROUPS + ("value",),
                          help="Value subject properties with intervals and a grid.",
                          subjects="Subject properties: .csv or .xlsx with the sales' columns "
                                   "(default for a plumbrule workbook: its Subjects sheet).")
    value.add_argument("--roll", metavar="ROLL",
                       help="A roll of parcels (.csv or .xlsx with the sales' columns and a "
                            "parcel ID, see roll_id_column): value every parcel by ID.")
    value.add_argument("--out", metavar="VALUES",
                       help="With --roll: write every parcel's value to VALUES.csv, .xlsx or "
                            ".parquet (parquet needs pyarrow).")
    _data_command(sub, "comps", handler=cmd_comps, groups=FIT_GROUPS + ("value",),
                  help="Suggest comparables: the sales the model adjusts least to the "
                       "subject, with their grid.",
                  subjects="Subject property (first row): .csv or .xlsx with the sales' "
                           "columns (default for a plumbrule workbook: its Subjects sheet).")

    cmp_ = sub.add_parser("compare", help="Compare candidate models on the same sales, holdout "
                          "and folds.")
    cmp_.add_argument("data", metavar="DATA", help="Sales table: .csv or .xlsx, or a plumbrule "
                      "workbook (its Models sheet lists the candidates)")
    cmp_.add_argument("--models", metavar="MODELS",
                      help="Candidates: .csv or .xlsx, one row per model: its name, then the "
                           "model settings that differ (default for a plumbrule workbook: its "
                           "Models sheet).")
    cmp_.add_argument("--sheet", help="Worksheet of an .xlsx file (default: the first).")
    cmp_.add_argument("--json", action="store_true", help="Print one JSON object.")
    _add_setting_options(cmp_, FIT_GROUPS + ("compare",))
    cmp_.set_defaults(handler=cmd_compare)

    new = sub.add_parser("new", help="Write a fresh plumbrule workbook (the template).")
    new.add_argument("book", metavar="BOOK.xlsx", help="Workbook to create (never overwritten).")
    new.set_defaults(handler=cmd_new)

    run_ = sub.add_parser("run", help="Analyse a plumbrule workbook and write the result sheets.")
    run_.add_argument("book", metavar="BOOK.xlsx", help="Workbook with Sales (and Subjects, "
                      "Comps, Settings) sheets.")
    run_.add_argument("--no-backup", dest="no_backup", action="store_true",
                      help="Do not keep the previous version as BOOK.xlsx.bak.")
    run_.add_argument("--json", action="store_true", help="Print one JSON object.")
    run_.set_defaults(handler=cmd_run)

    report = sub.add_parser("report", help="Print a plumbrule workbook's Report (with --all, "
                            "every result sheet) to a PDF, by LibreOffice.")
    report.add_argument("book", metavar="BOOK.xlsx", help="A workbook plumbrule run has "
                        "written its results into (it is only read).")
    report.add_argument("--pdf", nargs="?", const="", default="", metavar="OUT.pdf",
                        help="The PDF to write (default: BOOK.pdf beside the workbook).")
    report.add_argument("--all", dest="all_sheets", action="store_true",
                        help="Print every result sheet, not only the Report.")
    report.set_defaults(handler=cmd_report)

    demo = sub.add_parser("demo", help="Write the demo (an invented town) and run it.")
    demo.add_argument("dir", nargs="?", default=".", metavar="DIR",
                      help="Folder to write into (default: here).")
    demo.add_argument("--json", action="store_true", help="Print one JSON object.")
    demo.set_defaults(handler=cmd_demo)
    return parser


def cmd_fit(args: argparse.Namespace) -> int:
    from plumbrule.analysis import HandedOver, analyze
    from plumbrule.cli.inputs import read_inputs
    from plumbrule.render.text import render_analysis
    inputs = read_inputs(args)
    # only the tables are rendered: the read table is handed over, so the analysis can let
    # the file's text and raw cells go once intake has typed them
    settings, sales = inputs.settings, HandedOver(inputs.sales)
    del inputs
    result = analyze(sales, settings)
    if args.json:
        from plumbrule.render.json import write_analysis_json
        write_json(lambda stream: write_analysis_json(result, stream))
    else:
        print(render_analysis(result))
    return 0


def write_json(write) -> None:
    """Let ``write`` put UTF-8 JSON on standard output a piece at a time, then a newline
    (as print would): bytes go to the binary stream, undecoded, when there is one."""
    import io
    sys.stdout.flush()
    stream = getattr(sys.stdout, "buffer", None)
    if stream is None:                      # a text-only stdout (a caller's StringIO)
        text = io.BytesIO()
        write(text)
        sys.stdout.write(text.getvalue().decode("utf-8") + "\n")
        return
    write(stream)
    stream.write(b"\n")
    stream.flush()


def cmd_value(args: argparse.Namespace) -> int:
    from plumbrule.cli.inputs import read_inputs
    if getattr(args, "roll", None):
        from plumbrule.cli.roll import run_roll
        return run_roll(args, read_inputs(args))
    if getattr(args, "out", None):
        from plumbrule.errors import SettingError
        raise SettingError("--out writes a roll's values: give the roll with --roll ROLL.csv.")
    from plumbrule.cli.value import run_value
    return run_value(args, read_inputs(args))


def cmd_comps(args: argparse.Namespace) -> int:
    from plumbrule.cli.comps import run_comps
    from plumbrule.cli.inputs import read_inputs
    return run_comps(args, read_inputs(args))


def cmd_compare(args: argparse.Namespace) -> int:
    from plumbrule.cli.inputs import read_inputs, read_models
    from plumbrule.compare import compare
    inputs = read_inputs(args)
    result = compare(inputs.sales, inputs.settings, read_models(args, inputs))
    if args.json:
        from plumbrule.render.compare import comparison_json
        print(comparison_json(result))
    else:
        from plumbrule.render.compare import comparison_text
        print(visible(comparison_text(result)))
    return 0


def cmd_new(args: argparse.Namespace) -> int:
    from plumbrule.workbook.template import new_book
    path = new_book(args.book)
    print(f"Wrote {path}: paste your sales into the Sales table, fill in Settings, save, then "
          f"run: plumbrule run {path}")
    return 0


def cmd_run(args: argparse.Namespace) -> int:
    from plumbrule.workbook.run import print_run, run_book
    result = run_book(args.book, backup=False if args.no_backup else None)
    print_run(result, as_json=args.json)
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from pathlib import Path
    from plumbrule.errors import WorkbookError
    from plumbrule.workbook import RESULT_SHEETS
    from plumbrule.workbook.pdf import page_count, sheet_names, write_pdf
    book = Path(args.book)
    if not book.is_file():
        raise WorkbookError(f"'{book}' is not a file. Name the plumbrule workbook to print.")
    out = Path(args.pdf) if args.pdf else book.with_suffix(".pdf")
    if out.suffix.lower() != ".pdf":
        raise WorkbookError(f"'{out.name}' must end in .pdf. Choose a name such as report.pdf.")
    if out.resolve() == book.resolve():
        raise WorkbookError("The PDF would replace the workbook. Name another file.")
    have = {n: state for n, state in sheet_names(book)}
    if "Report" not in have:
        raise WorkbookError(f"'{book.name}' has no Report sheet. Run plumbrule run "
                            f"{book.name} first.")
    wanted = [n for n in RESULT_SHEETS if n in have and have[n] in (None, "visible")] \
        if args.all_sheets else ["Report"]
    write_pdf(book, wanted, out)
    print(visible(f"Wrote {out} ({page_count(out)} pages: {', '.join(wanted)})."))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from plumbrule.cli.demo import run_demo
    return run_demo(args)


class _Parser(argparse.ArgumentParser):
    """argparse with plumbrule's one-line message for a bad command line (status 2)."""

    def error(self, message: str):  # noqa: D401 - argparse hook
        self.exit(2, f"plumbrule: {' '.join(message.split())}. "
                     f"See '{self.prog} --help'.\n")


def _one_line(err: PlumbError, command: str | None = None) -> str:
    """The message in the words of the surface the user is on: a setting's flag on the
    command line; its Settings-sheet name (as the engine says it) for ``run``, whose
    settings come from the workbook."""
    text = str(err)
    name = getattr(err, "setting", None)
    if name in REGISTRY and command != "run":
        flag = "--" + name.replace("_", "-")
        text = text.replace(f"Setting '{name}'", f"Setting '{name}' ({flag})", 1)
    elif name in REGISTRY:
        text = text.replace(f"Setting '{name}'", f"Setting '{name}' (Settings sheet)", 1)
    return text


def _report_cells(err: CellErrors, as_json: bool) -> None:
    """Every unreadable cell: a summary line then one line per cell on stderr; with --json,
    also ``{"errors": [{"row", "id", "column", "value", "problem"}]}`` on stdout."""
    if as_json:
        import json
        print(json.dumps({"errors": [p.record() for p in err.problems]}, ensure_ascii=False))
    lines = err.lines() if len(err.problems) > 1 else [str(err)]   # one cell: one line
    print("plumbrule: " + visible(lines[0]), file=sys.stderr)
    for line in lines[1:]:
        print(visible(line), file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit status (0 ok, 2 bad input, 1 a plumbrule bug)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as stop:   # --help, --version, or a bad command line
        return stop.code if isinstance(stop.code, int) else 2
    try:
        with cycle_collection_paused():
            return int(args.handler(args) or 0)
    except CellErrors as err:
        _report_cells(err, bool(getattr(args, "json", False)))
        return 2
    except PlumbError as err:
        print(f"plumbrule: {visible(_one_line(err, getattr(args, 'command', None)))}",
              file=sys.stderr)
        return 2
    except BrokenPipeError:  # e.g. piped into head
        return 0
    except KeyboardInterrupt:
        return 130
    except Exception as exc:  # a bug in plumbrule, not the user's input
        import os
        if os.environ.get("PLUMBRULE_DEBUG"):
            raise
        detail = visible(" ".join(str(exc).split())[:300])
        print(f"plumbrule: internal error ({type(exc).__name__}: {detail}). This is a bug in "
              "plumbrule, not in your data; please report it with the command you ran "
              "(set PLUMBRULE_DEBUG=1 for details).", file=sys.stderr)
        return 1


def run(argv: Any = None) -> None:  # console-script entry point
    code = main(argv)
    # The process ends here: the collection the interpreter runs at exit would walk every
    # object still alive (0.15 s after `fit` on 200k sales) only to free memory the exit
    # frees anyway. Frozen objects are still freed by reference counting as the
    # interpreter clears its modules; only that last walk is skipped.
    import gc
    gc.freeze()
    sys.exit(code)


if __name__ == "__main__":
    run()

"""Control characters from the data never reach the terminal raw: a header or cell holding
ESC sequences (ECMA-48 CSI, ESC '['), NUL, C1 controls or bidirectional overrides is
printed with them as escapes (ESC as \\x1b) in the text report and in error messages; the
engine's tables (and so the workbook) keep the text as it is.

Sources: ECMA-48 (ESC [ ... m sets colours; U+009B is its one-character CSI), Unicode
UAX #9 (U+202E RIGHT-TO-LEFT OVERRIDE reorders what is shown), from memory.
"""

from __future__ import annotations

import re

import pytest

from plumbrule.cli.main import main
from plumbrule.demo.town import demo_sales

# Every C0 control but the line break, DEL, C1, and the bidi overrides / isolates.
RAW = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")
HOOD = "Hood\x1b[31m\x00"            # a header that would turn the terminal red


@pytest.fixture(scope="module")
def frame():
    f = demo_sales(n=40, seed=3)[["Sale price", "Living area", "Age", "Neighbourhood"]]
    f = f.rename(columns={"Neighbourhood": HOOD})
    f[HOOD] = f[HOOD].replace({"Millbank": "Mill\x9b2Jbank\u202e"})   # a cell: CSI, RLO
    return f


def test_visible_escapes_controls_and_keeps_line_breaks():
    from plumbrule.render.terminal import visible
    assert visible("a\x1b[31mb\x00\nc\x9bd\u202e") == "a\\x1b[31mb\\x00\nc\\x9bd\\u202e"
    assert visible("Sale price — Âge\n") == "Sale price — Âge\n"


def test_the_text_report_shows_escapes_not_controls(frame):
    from plumbrule.analysis import analyze
    from plumbrule.render.text import render_analysis
    a = analyze(frame, {"response": "Sale price", "predictors": f"Living area,Age,{HOOD}",
                        "categorical": HOOD})
    text = render_analysis(a)
    assert not RAW.search(text)
    assert "Hood\\x1b[31m\\x00" in text and "Mill\\x9b2Jbank\\u202e" in text
    # the engine's tables keep the text as it is (the workbook writes them)
    assert any(HOOD in t for t in a.tables.coefficients["term"])


def test_an_error_message_shows_escapes_not_controls(frame, tmp_path, capsys):
    path = tmp_path / "sales.csv"
    frame.to_csv(path, index=False)
    assert main(["fit", str(path), "--response", "Sale price", "--predictors", "Nope"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("plumbrule: ") and not RAW.search(err)
    assert "Hood\\x1b[31m\\x00" in err


def test_every_unreadable_cell_line_shows_escapes(frame, tmp_path, capsys):
    f = frame.astype(object)
    f.loc[2, "Living area"] = "12\x1b]0;owned\x07"       # OSC: would retitle the window
    f.loc[3, "Living area"] = "x\x1b[2J"                  # would clear the screen
    path = tmp_path / "cells.csv"
    f.to_csv(path, index=False)
    assert main(["fit", str(path), "--response", "Sale price", "--predictors",
                 "Living area,Age"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 3 and not RAW.search(err)
    assert "\\x1b[2J" in err


def test_json_output_keeps_the_text(frame, tmp_path, capsys):
    # JSON is for programs: the header comes back exactly (JSON escapes it itself).
    import json
    path = tmp_path / "sales.csv"
    frame.to_csv(path, index=False)
    assert main(["fit", str(path), "--response", "Sale price", "--predictors",
                 f"Living area,{HOOD}", "--categorical", HOOD, "--json"]) == 0
    out = capsys.readouterr().out
    terms = [c["term"] for c in json.loads(out)["coefficients"]]
    assert any(t.startswith(HOOD + ": ") for t in terms)

"""A messy sales register as people keep it, of an invented town (Wrenfield): a title and a
note above the header, an ID column, prices typed as '$245,000', condition and neighbourhood
spelled several ways, a typo among the spellings, validity codes in a 'Sale type' column,
US month/day/year dates, a repeated row, three mistyped numbers and a totals row.

Each test asserts what a user relies on: every problem found in one pass and named by cell
and ID, the spellings merged and listed, the non-sales set aside with their rule, and the
results following each sale by its ID when the sheet is edited."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.cli.main import main
from plumbrule.errors import CellErrors

CONDITION = ["Average", "Good", "Fair", "Excellent"]
SPELLINGS = {"Good": ["Good", "good", "Good ", "GOOD"], "Average": ["Average", "Avg"],
             "Excellent": ["Excellent", "Excelent"], "Fair": ["Fair"]}
HOODS = {"Kestrel Park": ["Kestrel Park", "Kestrel Park", "kestrel park"],
         "Sorrel Heights": ["Sorrel Heights"], "Old Mill": ["Old Mill", "Old Mill", "old mill "]}
TYPOS = {(9, "Sale price"): "$24S,000", (31, "Living area"): "1,2OO",
         (58, "Sale price"): "two hundred"}       # (index in the sales, column) -> text


def messy_register(n: int = 140, seed: int = 12) -> list[list]:
    """The register as a 2-D block of cells, title rows first (sheet row 1 is the title)."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1750, 380, n).round()
    age = rng.integers(1, 70, n)
    cond = rng.choice(CONDITION, n, p=[0.45, 0.3, 0.15, 0.1])
    hood = rng.choice(list(HOODS), n)
    day = rng.integers(0, 700, n)
    dates = pd.Timestamp("2024-01-02") + pd.to_timedelta(day, unit="D")
    shift = {"Average": 0.0, "Good": 0.06, "Fair": -0.08, "Excellent": 0.12}
    hshift = {"Kestrel Park": 0.1, "Sorrel Heights": 0.0, "Old Mill": -0.07}
    logp = (10.2 + 0.75 * np.log(area) - 0.003 * age + np.vectorize(shift.get)(cond)
            + np.vectorize(hshift.get)(hood) + 0.0004 * day + rng.normal(0, 0.12, n))
    price = np.round(np.exp(logp), -2)
    kind = rng.choice(["Arm's length", "Valid", "Non-arm's length"], n, p=[0.7, 0.2, 0.1])
    rows = [["Wrenfield sales register, 2024-2025", None, None, None, None, None, None, None],
            ["Prices as recorded by the county clerk; dates month/day/year", None, None, None,
             None, None, None, None],
            [None] * 8,
            ["Sale no.", "Sale price", "Living area", "Age", "Condition", "Neighbourhood",
             "Sale date", "Sale type"]]
    for i in range(n):
        spelled_c = SPELLINGS[cond[i]][i % len(SPELLINGS[cond[i]])]
        spelled_h = HOODS[hood[i]][i % len(HOODS[hood[i]])]
        shown_price = f"${price[i]:,.0f}" if i % 3 else float(price[i])
        rows.append([f"W-{1000 + i}", shown_price, float(area[i]), int(age[i]), spelled_c,
                     spelled_h, f"{dates[i].month}/{dates[i].day}/{dates[i].year}", kind[i]])
    for (i, col), text in TYPOS.items():
        rows[4 + i][rows[3].index(col)] = text
    rows.append(list(rows[4 + 20]))                  # the same sale pasted twice
    rows.append(["Total", float(price.sum()), float(area.sum()), None, None, None, None, None])
    return rows


SETTINGS = {
    "response": "Sale price", "predictors": "Living area,Age,Condition,Neighbourhood",
    "categorical": "Condition,Neighbourhood", "log_response": True,
    "log_predictors": "Living area", "date_column": "Sale date", "id_column": "Sale no.",
    "level_map": "Condition: Avg=Average", "keep_only": "Sale type=Arm's length|Valid",
    "holdout": 0.25, "folds": 4, "seed": 3,
}


def _sheet_row(i: int) -> int:
    return 5 + i          # title, note, blank, header; the first sale is on sheet row 5


def test_every_unreadable_cell_is_found_in_one_pass_with_its_id():
    with pytest.raises(CellErrors) as caught:
        analyze(messy_register(), SETTINGS)
    err = caught.value
    got = sorted((p.row, p.column, p.id, p.value) for p in err.problems)
    want = sorted((_sheet_row(i), col, f"W-{1000 + i}", f"'{text}'")
                  for (i, col), text in TYPOS.items())
    assert got == want
    assert str(err).startswith("3 cells cannot be read; nothing was written.")
    assert err.lines()[0] == "3 cells cannot be read; nothing was written."
    assert err.lines()[1].startswith("  Column 'Sale price', row 14 (ID W-1009): '$24S,000' "
                                     "is not a number.")


def test_the_command_line_lists_them_and_json_carries_them(tmp_path, capsys):
    path = tmp_path / "wrenfield.csv"
    pd.DataFrame(messy_register()).to_csv(path, header=False, index=False)
    flags = [f"--{k.replace('_', '-')}={v}" for k, v in SETTINGS.items()
             if k not in ("log_response",)] + ["--log-response"]
    assert main(["fit", str(path), *flags, "--json"]) == 2
    out, err = capsys.readouterr()
    assert err.splitlines()[0] == "plumbrule: 3 cells cannot be read; nothing was written."
    assert len(err.splitlines()) == 4           # the summary, then one line per cell
    records = json.loads(out)["errors"]
    assert {(r["row"], r["id"], r["column"]) for r in records} == {
        (14, "W-1009", "Sale price"), (36, "W-1031", "Living area"), (63, "W-1058", "Sale price")}
    assert set(records[0]) == {"row", "id", "column", "value", "problem"}


@pytest.fixture(scope="module")
def run():
    return analyze(messy_register(), {**SETTINGS, "bad_cells": "set_aside"})


def test_with_bad_cells_set_aside_the_run_goes_on_and_says_why(run):
    dropped = run.tables.dropped_rows.set_index("row")
    for (i, _col), text in TYPOS.items():
        assert f"'{text}' is not a number" in dropped.loc[_sheet_row(i), "reason"]
        assert dropped.loc[_sheet_row(i), "id"] == f"W-{1000 + i}"


def test_spellings_are_merged_into_the_most_frequent_and_listed(run):
    merges = run.tables.level_merges
    pairs = set(zip(merges["column"], merges["spelling"], merges["merged_into"], strict=True))
    assert {("Condition", "good", "Good"), ("Condition", "GOOD", "Good"),
            ("Condition", "Avg", "Average"), ("Neighbourhood", "kestrel park", "Kestrel Park"),
            ("Neighbourhood", "old mill", "Old Mill")} <= pairs
    levels = dict(run.model.encoding.levels)
    assert set(levels["Condition"]) == {"Average", "Good", "Fair", "Excellent", "Excelent"}
    assert set(levels["Neighbourhood"]) == {"Kestrel Park", "Sorrel Heights", "Old Mill"}
    checks = run.tables.checks.set_index("check")
    note = checks.loc["Category spellings one edit apart: Condition", "note"]
    assert "'Excelent'" in note and "'Excellent'" in note and "level_map" in note


def test_non_sales_are_set_aside_with_their_rule(run):
    log = run.tables.screen_log
    rules = log.groupby("rule")["row"].apply(set)
    frame = pd.DataFrame(messy_register()[4:], columns=messy_register()[3])
    last = 4 + len(frame)                         # sheet row of the totals row
    assert rules["totals row"] == {last}
    assert rules["duplicate"] == {last - 1}
    dup = log.set_index("row").loc[last - 1]
    assert dup["reason"] == f"same as sheet row {_sheet_row(20)}"
    non_arms = {_sheet_row(i) for i, k in enumerate(frame["Sale type"][:-2])
                if k == "Non-arm's length"} - {_sheet_row(i) for i, _ in TYPOS}
    assert rules["sale filter"] == non_arms
    assert log.set_index("row").loc[min(non_arms), "reason"] == "Sale type is 'Non-arm's length'"
    assert log["id"].notna().all()        # the totals row shows its label, a copy its ID
    assert log.set_index("row").loc[last - 1, "id"] == "W-1020"


def test_us_dates_are_read_from_the_days_above_twelve(run):
    dates = run.clean.data["Sale date"]
    frame = pd.DataFrame(messy_register()[4:], columns=messy_register()[3])
    i = next(i for i, t in enumerate(frame["Sale date"]) if int(t.split("/")[1]) > 12)
    m, d, y = (int(v) for v in frame["Sale date"][i].split("/"))
    assert dates[_sheet_row(i)] == pd.Timestamp(year=y, month=m, day=d)


def test_an_inserted_sale_moves_nothing_else():
    """Insert a sale at the top and sort the rest by price: every other sale keeps its
    holdout / fold placement and a hand exclusion by ID still names the same sale."""
    block = messy_register()
    valid = next(r[0] for r in block[4:] if r[7] != "Non-arm's length")
    base = {**SETTINGS, "bad_cells": "set_aside", "exclude_ids": f"{valid}=family sale"}
    first = analyze(block, base)
    new = ["W-2000", 199000.0, 1600.0, 12, "Good", "Old Mill", "3/14/2025", "Valid"]
    body = sorted(block[4:-2], key=lambda r: str(r[1]))
    edited = analyze(block[:4] + [new] + body + block[-2:], base)

    def by_id(res):
        held = set(res.ids.reindex(res.holdout.index))
        cv = res.tables.cv_estimates
        return held, dict(zip(cv["id"], cv["fold"], strict=True))

    held1, folds1 = by_id(first)
    held2, folds2 = by_id(edited)
    common = set(first.ids) & set(edited.ids)
    assert held1 & common == held2 & common
    assert all(folds1[s] == folds2[s] for s in set(folds1) & set(folds2))
    manual = edited.tables.screen_log[edited.tables.screen_log["rule"] == "manual"]
    assert list(manual["id"]) == [valid] and list(manual["reason"]) == ["family sale"]

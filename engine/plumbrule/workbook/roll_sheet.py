"""The Roll results sheet: every parcel's value by ID from row 1 (a table that loads back as
it is, under the same column names as ``plumbrule value --roll --out``), and beside it the
roll's summary, its flags counted once, its total and the caution."""

from __future__ import annotations

from plumbrule.render.wording import CAUTION

# the values take columns A:K; the summary starts two columns to their right
SIDE_COLUMN = 13


def write_roll(ws, roll) -> None:
    """Fill ``ws`` from a :class:`plumbrule.valuation.roll.Roll`."""
    from plumbrule.workbook.cells import MONEY, put, write_frame
    from plumbrule.workbook.sheets import _widths, label
    values = roll.values.assign(flags=roll.values["flags"].astype(str))
    money = {c: MONEY for c in ("estimate", "ci_low", "ci_high", "pi_low", "pi_high",
                                "se_mean", "se_single")}
    # the values' headers are the file's column names (parcel_id, estimate, ...): the
    # table loads back into a CAMA system or a script as the --out file does
    write_frame(ws, values, 1, 1, {**money, "row": "0", "leverage": "0.0000"})
    _widths(ws, values)
    ws.freeze_panes = "B2"
    r = 1
    put(ws, r, SIDE_COLUMN, "Roll", style="plumb_title")
    put(ws, r + 1, SIDE_COLUMN, CAUTION)
    r += 3
    for heading, frame, formats in (
            ("Summary", roll.summary, {"retransform_factor": "0.00000"}),
            ("Flags, counted once for the roll", roll.flags, {"share": "0.00%"}),
            ("Total of the roll", roll.total, {c: MONEY for c in (
                "total", "se_total", "ci_low", "ci_high", "se_single_total", "pi_low",
                "pi_high", "naive_ci_low", "naive_ci_high", "naive_pi_low", "naive_pi_high",
                "independent_ci_low", "independent_ci_high")})):
        put(ws, r, SIDE_COLUMN, heading, style="plumb_header")
        if len(frame):
            r = write_frame(ws, frame, r + 1, SIDE_COLUMN, formats,
                            {c: label(c) for c in frame.columns}) + 1
        else:
            put(ws, r + 1, SIDE_COLUMN, "None.")
            r += 3

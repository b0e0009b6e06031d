"""The offline workbook: template, ``plumbrule run``, result sheets (openpyxl).

Modules (one job each)
----------------------
template.py  build the template workbook (Read me, Sales, Subjects, Comps, Settings, xlwings.conf)
safety.py    checks before anything is touched: lock file, zip/encryption, XML (defusedxml),
             parts openpyxl cannot carry through a load and save
package.py   the package read as XML (rels, content types, sheets, names, plumbrule's marks)
read.py      read Sales / Subjects / Comps / Settings / Models with python-calamine
comparison.py the Comparison sheet and the Report's candidate-models section
stamp.py     the audit stamp (:class:`~plumbrule.workbook.stamp.Stamp`)
cells.py     writing values safely (text stays text) and number formats
sheets.py    the Model, Screening, Validation and Valuation sheets
save.py      save the result book: openpyxl's package, the cell rows written in one pass (the
             same bytes)
graft.py     put the result sheets into the user's package (every other part byte for byte)
fill.py      fill a copy of the template (demo, tests, benchmark)
run.py       ``plumbrule run``: read → analyze → valuate → write → graft → atomic replace
report.py    the Report sheet with native charts
live.py      the "try a subject" live-formula block on the Valuation sheet

Interface between the writer (run.py / sheets.py) and report.py / live.py
-----------------------------------------------------------------------
The result sheets are written into a fresh openpyxl Workbook (``book``) that also
holds stand-in copies of the Subjects, Comps and Settings sheets (values only, at
their original sheet rows; no Sales sheet unless the run writes BOOK.results.xlsx).
Only the sheets named in :data:`RESULT_SHEETS` are then grafted into the user's file
(graft.py): anything written elsewhere in ``book`` is discarded, the user's active tab
is kept, and formulas may refer to the user's sheets by name. Order: the sheets of
RESULT_SHEETS are created in that order (Report first, empty); Model, Screening,
Validation and Valuation are filled; then

* ``live.write_live_block(ws, analysis, valuation, anchor_row) -> int`` is called with
  ``ws`` = the Valuation worksheet and ``anchor_row`` = the first free row below the
  valuation tables (one blank row already left). It writes the block from column A
  down and returns the next free row. ``valuation`` may be ``None`` (no subjects);
  then use the first clean sale's features as the initial subject, or write a one-line
  note. It defines ``plumb_live_estimate``, ``plumb_live_pi_low``, ``plumb_live_pi_high``
  as workbook defined names (``ws.parent.defined_names``; use :func:`cells.define_name`).
  Coefficient cells on the Model sheet are available by defined name:
  ``plumb_coef_terms`` (term labels), ``plumb_coef_estimates`` (estimates, model scale,
  same order as ``analysis.final_model.fit.names``) and ``plumb_coef_cov`` (the k×k covariance
  matrix ``analysis.final_model.cov``, same order). Values are written at full precision.
* ``report.write_report(book, analysis, valuation, stamp) -> None`` is called last and fills
  ``book["Report"]`` (already created, empty, first result sheet). Chart source data may go
  on the Report sheet itself or on a sheet named ``"Chart data"`` (listed in
  RESULT_SHEETS, so a rerun replaces it; create it with ``book.create_sheet("Chart data")``;
  hiding it is fine). Keep chart series to a few thousand points (sample evenly on large
  books: 100,000-row books must stay fast). ``stamp`` is a
  :class:`~plumbrule.workbook.stamp.Stamp`; ``stamp.rows()`` gives (label, value) pairs
  ready to write.

Both may use :mod:`plumbrule.workbook.cells` (``put`` writes text as text, never a
formula or an error value; ``MONEY``/``PERCENT``/``sig3`` number formats; ``write_frame``).
Sheets outside RESULT_SHEETS are never touched.
"""

RESULT_SHEETS = ("Report", "Model", "Screening", "Validation", "Valuation", "Comparison",
                 "Chart data")
# written only when the Models sheet lists candidate models
OPTIONAL_SHEETS = ("Comparison",)
INPUT_SHEETS = ("Sales", "Subjects", "Comps", "Settings", "Models")
# Written only when the book asks for them (the Roll sheet has parcels); replaced or removed
# by a rerun like the others.
OPTIONAL_RESULT_SHEETS = ("Roll results",)
OPTIONAL_INPUT_SHEETS = ("Roll",)

"""The one set of setting names shared by the CLI, the worksheet functions and
the workbook's Settings sheet.

Each setting is declared once in :data:`REGISTRY` with its kind, default and a
one-line help text. The CLI option is the name with dashes (``--log-response``),
the worksheet/Settings-sheet name is the name itself (``log_response``).
:func:`parse_settings` is the single place where raw values (CLI strings, cell
values, Python objects) become typed values; everything downstream trusts them.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import math
from dataclasses import dataclass, field, fields
from typing import Any, Mapping

from plumbrule.errors import SettingError
from plumbrule.cell_values import error_text, is_blank


@dataclass(frozen=True)
class Setting:
    name: str
    kind: str          # text, columns, bool, float, int, choice, percentiles, rows, pairs, date,
    #                    ids, level_map, keep_only, knots, curves
    default: Any
    help: str
    choices: tuple[str, ...] = ()
    group: str = "model"
    low: float | None = None      # inclusive bounds for numbers
    high: float | None = None
    refuse: tuple[tuple[float, str], ...] = ()   # values inside the bounds that mean nothing


def _s(*args, **kw) -> Setting:
    return Setting(*args, **kw)


REGISTRY: dict[str, Setting] = {
    s.name: s
    for s in [
        # --- the model --------------------------------------------------------
        _s("response", "text", None, "Column holding the sale price (the value to explain)."),
        _s("predictors", "columns", (), "Columns that explain the price, comma-separated."),
        _s(
            "categorical",
            "columns",
            (),
            "Predictors that are categories (neighbourhood, condition...).",
        ),
        _s(
            "reference_levels",
            "pairs",
            (),
            "Reference level per category as Column=Level, comma-separated "
            "(default: most frequent).",
        ),
        _s(
            "log_response",
            "bool",
            False,
            "Fit the logarithm of the price (effects become percentages).",
        ),
        _s(
            "log_predictors",
            "columns",
            (),
            "Predictors to enter as logarithms (values must be positive).",
        ),
        _s(
            "curves",
            "curves",
            (),
            "Effects that bend, per numeric predictor: Column=spline:N (N knots, 3-7), "
            "Column=square or Column=bands:B1,B2,... separated by ';', e.g. Age=spline:4; "
            "Lot size=bands:5000,10000.",
        ),
        _s(
            "date_column",
            "text",
            None,
            "Sale-date column: adds a market-conditions trend in months since the earliest sale.",
        ),
        _s(
            "trend",
            "choice",
            "linear",
            "Market-conditions trend over the sale dates: linear (one rate), piecewise "
            "(a rate per segment between trend_knots) or periods (a level per month/quarter).",
            choices=("linear", "piecewise", "periods"),
        ),
        _s(
            "trend_knots",
            "knots",
            None,
            "Piecewise trend: dates where the rate may change, e.g. 2024-07-01,2025-01-01, or "
            "'every 6 months'.",
        ),
        _s(
            "trend_period",
            "choice",
            "month",
            "Periods trend: one level per month or quarter (the earliest is the reference).",
            choices=("month", "quarter"),
        ),
        _s(
            "min_period_sales",
            "int",
            10,
            "A trend period or segment with fewer sales is merged with a neighbour (logged).",
            low=1,
        ),
        _s("no_intercept", "bool", False, "Fit without an intercept (rarely right for prices)."),
        _s(
            "robust_se",
            "choice",
            None,
            "Heteroscedasticity-robust standard errors.",
            choices=("HC1", "HC3"),
        ),
        _s(
            "confidence",
            "float",
            0.95,
            "Confidence level for intervals, between 0.5 and 0.999.",
            low=0.5,
            high=0.999,
        ),
        # --- reading the sales sheet ---------------------------------------------
        _s(
            "id_column",
            "text",
            None,
            "Column holding each sale's ID; tables then list sales by ID beside the sheet row.",
            group="intake",
        ),
        _s(
            "header_row",
            "int",
            None,
            "Sheet row of the column headers (default: found below any title rows).",
            group="intake",
            low=1,
        ),
        _s(
            "bad_cells",
            "choice",
            "refuse",
            "A cell that cannot be read: refuse the run (listing every such cell) or "
            "set_aside its row.",
            choices=("refuse", "set_aside"),
            group="intake",
        ),
        _s(
            "date_format",
            "choice",
            "auto",
            "Order of day, month and year in dates typed as text (auto: from a day above 12).",
            choices=("auto", "MDY", "DMY", "YMD"),
            group="intake",
        ),
        _s(
            "level_map",
            "level_map",
            (),
            "Spellings of category levels to merge, e.g. Condition: Avg=Average; Nbhd: Sorrel "
            "Hts=Sorrel Heights.",
            group="intake",
        ),
        _s(
            "min_level_sales",
            "int",
            5,
            "A category level with fewer sales raises a watch (a one-sale level fits that "
            "sale exactly).",
            group="intake",
            low=1,
        ),
        _s(
            "duplicates",
            "choice",
            "set_aside",
            "Rows identical in every used column: set_aside all but the first, keep them, or "
            "refuse the run.",
            choices=("set_aside", "keep", "refuse"),
            group="intake",
        ),
        _s(
            "keep_only",
            "keep_only",
            (),
            "Use only sales whose column holds one of the values, e.g. Sale type=Arm's "
            "length|Valid.",
            group="intake",
        ),
        _s(
            "skip_hidden_rows",
            "bool",
            False,
            "Set aside rows hidden or filtered out in the sheet (default: use them, with a "
            "watch).",
            group="intake",
        ),
        # --- screening (issue: screening and validation) ----------------------
        _s(
            "trim_percentiles",
            "percentiles",
            None,
            "Set aside rows outside LOW,HIGH percentiles (e.g. 1,99; 0,99 trims only the top).",
            group="screen",
        ),
        _s(
            "trim_columns",
            "columns",
            (),
            "Columns the trim and fence rules look at (default: price and numeric predictors).",
            group="screen",
        ),
        _s(
            "iqr_fence",
            "float",
            None,
            "Set aside rows beyond Q1-K*IQR or Q3+K*IQR (1.5 or 3 common).",
            group="screen",
            low=0.0,
        ),
        _s(
            "fence_scale",
            "choice",
            "model",
            "Scale the trim and fence read a logged column on: model (its logarithm) or raw.",
            choices=("model", "raw"),
            group="screen",
        ),
        _s(
            "influence_screen",
            "bool",
            False,
            "After a first fit, set aside sales with Cook's D > 4/n or |studentized residual| > 3.",
            group="screen",
        ),
        _s(
            "exclude_rows",
            "rows",
            (),
            "Sheet rows to set aside by hand, e.g. 12,40 or 12=family sale,40=auction.",
            group="screen",
        ),
        _s(
            "exclude_ids",
            "ids",
            (),
            "Sale IDs to set aside by hand (with id_column), e.g. Q-104,Q-233=family sale.",
            group="screen",
        ),
        _s(
            "max_excluded_share",
            "float",
            0.10,
            "A rule removing more than this share of rows raises a watch.",
            group="screen",
            low=0.0,
            high=1.0,
        ),
        # --- validation and ratio study ----------------------------------------
        _s(
            "holdout",
            "float",
            None,
            "Share of sales held out to test the model (e.g. 0.3).",
            group="validate",
            low=0.0,
            high=0.9,
        ),
        _s(
            "holdout_recent",
            "bool",
            False,
            "Hold out the most recent sales by the date column instead of a random share.",
            group="validate",
        ),
        _s(
            "final_fit",
            "choice",
            "all",
            "After validation, value subjects with the model refitted on all screened sales "
            "(all) or keep the model of the training sales (training).",
            group="validate",
            choices=("all", "training"),
        ),
        _s(
            "seed",
            "int",
            20240601,
            "Seed for the random holdout and folds (same seed, same split).",
            group="validate",
            low=0,
        ),
        _s(
            "folds",
            "int",
            5,
            "Folds for cross-validation (0 turns it off).",
            group="validate",
            low=0,
            high=100,
            refuse=((1, "1 fold is not cross-validation. Use 0 (off) or 2 or more."),),
        ),
        _s(
            "ratio_by",
            "text",
            None,
            "Column to stratify the ratio study by (e.g. neighbourhood).",
            group="validate",
        ),
        _s(
            "property_class",
            "choice",
            "residential",
            "Which COD target applies.",
            choices=("residential", "newer-residential", "other"),
            group="validate",
        ),
        _s(
            "ratio_trim",
            "bool",
            False,
            "Trim ratios beyond 3*IQR before the ratio study.",
            group="validate",
        ),
        _s(
            "assessed_column",
            "text",
            None,
            "Column of the values already on the roll: adds their ratio study (assessed / "
            "sale price) beside the model's. Never a predictor.",
            group="validate",
        ),
        _s(
            "prior_assessed_column",
            "text",
            None,
            "Column of the previous roll's values (with assessed_column): tests for sales "
            "chasing.",
            group="validate",
        ),
        _s(
            "value_strata",
            "strata",
            None,
            "Value ranges of the ratio study: a number of equal-count groups (4 = quartiles, "
            "the default with assessed_column) or break points, e.g. 200000,400000.",
            group="validate",
        ),
        _s(
            "x_column",
            "text",
            None,
            "Column of each sale's x coordinate (easting, or longitude with coordinates = "
            "degrees): adds the location check of the residuals.",
            group="validate",
        ),
        _s(
            "y_column",
            "text",
            None,
            "Column of each sale's y coordinate (northing, or latitude).",
            group="validate",
        ),
        _s(
            "coordinates",
            "choice",
            "projected",
            "projected (x, y on a flat map grid) or degrees (longitude, latitude).",
            choices=("projected", "degrees"),
            group="validate",
        ),
        _s(
            "location_surface",
            "int",
            0,
            "Model location by a smooth surface over x_column, y_column: N bumps a side "
            "(N x N, e.g. 4; 0 = off). The grid carries its effect as a location adjustment.",
            low=0,
            high=12,
        ),
        _s(
            "neighbours",
            "int",
            8,
            "Nearest neighbours per sale in the location check (Moran's I).",
            low=1,
            high=100,
            group="validate",
        ),
        # --- valuation ----------------------------------------------------------
        _s(
            "comps",
            "rows",
            (),
            "Sheet rows of comparable sales (up to 10), e.g. 12,40,57.",
            group="value",
        ),
        _s(
            "comp_ids",
            "ids",
            (),
            "Sale IDs of comparable sales (with id_column), e.g. Q-104,Q-233.",
            group="value",
        ),
        _s(
            "valuation_date",
            "date",
            None,
            "Date the value is estimated for (default: today).",
            group="value",
        ),
        _s(
            "roll_id_column",
            "text",
            None,
            "Roll: the column holding each parcel's ID (default: id_column).",
            group="value",
        ),
        _s(
            "retransform",
            "choice",
            "smearing",
            "Log models: report the mean (smearing or lognormal factor) or the median estimate.",
            choices=("smearing", "lognormal", "median"),
            group="value",
        ),
        _s(
            "comp_weights",
            "choice",
            "gross",
            "Reconciliation weights for comparables.",
            choices=("gross", "equal"),
            group="value",
        ),
        _s(
            "net_adjustment_limit",
            "float",
            0.15,
            "Flag a comparable whose net adjustment exceeds this share.",
            group="value",
            low=0.0,
        ),
        _s(
            "gross_adjustment_limit",
            "float",
            0.25,
            "Flag a comparable whose gross adjustment exceeds this share.",
            group="value",
            low=0.0,
        ),
        _s(
            "suggest_comps",
            "int",
            0,
            "Suggest this many comparables (up to 10): the sales the model adjusts least to "
            "the subject; used in the grid when no comps are given (0: off).",
            group="value",
            low=0,
            high=10,
        ),
        _s(
            "comp_same",
            "text",
            None,
            "Suggested comparables share the subject's value of this column (e.g. "
            "Neighbourhood).",
            group="value",
        ),
        _s(
            "comp_months",
            "float",
            None,
            "Suggested comparables sold at most this many months before the valuation date.",
            group="value",
            low=0.0,
            refuse=((0.0, "0 months leaves no sale. Enter e.g. 12, or leave it blank."),),
        ),
        _s(
            "comp_distance",
            "float",
            None,
            "Suggested comparables at most this far from the subject (needs x_column and "
            "y_column; in the coordinates' units, kilometres for degrees).",
            group="value",
            low=0.0,
        ),
        _s(
            "adjustment_rounding",
            "float",
            100.0,
            "Round each grid adjustment to this many units of the price (0: no rounding); the "
            "net adjustment is the sum of the rounded ones.",
            group="value",
            low=0.0,
        ),
        _s(
            "reconcile_gap",
            "float",
            0.10,
            "Say so when the comparables' value and the model's estimate differ by more than "
            "this share of the estimate (or than half the prediction interval).",
            group="value",
            low=0.0,
        ),
        _s(
            "label_column",
            "text",
            None,
            "Column that names each sale for a reader (an address); shown with the ID, price "
            "and date wherever a sale is listed.",
            group="intake",
        ),
        # --- the assignment (shown at the top of the Report) ---------------------
        _s("client", "text", None, "Who the valuation is for (shown on the Report).",
           group="assignment"),
        _s("intended_use", "text", None, "What the valuation is for (shown on the Report).",
           group="assignment"),
        _s("prepared_by", "text", None, "Who prepared it (shown on the Report).",
           group="assignment"),
        _s("property_rights", "text", None, "The interest valued, e.g. fee simple (shown on "
           "the Report). The effective date is valuation_date.", group="assignment"),
        # --- candidate models compared -----------------------------------------
        _s(
            "compare_by",
            "choice",
            "mape",
            "Candidate models (Models sheet) are ranked by: mape or rmse out of sample (the "
            "holdout, else cross-validated), cv_mape, cv_rmse, holdout_mape, holdout_rmse, "
            "adj_r_squared, aic, bic (same response only) or cod.",
            choices=("mape", "rmse", "cv_mape", "cv_rmse", "holdout_mape", "holdout_rmse",
                     "adj_r_squared", "aic", "bic", "cod"),
            group="compare",
        ),
        _s(
            "use_model",
            "text",
            None,
            "Name of the candidate (Models sheet) the results, Report and valuation follow "
            "(default: the Settings' own model).",
            group="compare",
        ),
        # --- the offline workbook ------------------------------------------------
        _s(
            "backup",
            "bool",
            True,
            "plumbrule run keeps the previous workbook as BOOK.xlsx.bak.",
            group="workbook",
        ),
    ]
}


@dataclass(frozen=True)
class Settings:
    """Typed, validated settings. Field names are the registry names."""

    response: str | None = None
    predictors: tuple[str, ...] = ()
    categorical: tuple[str, ...] = ()
    reference_levels: tuple[tuple[str, str], ...] = ()
    log_response: bool = False
    log_predictors: tuple[str, ...] = ()
    curves: tuple[tuple[str, str, tuple[float, ...]], ...] = ()   # (column, kind, params)
    date_column: str | None = None
    no_intercept: bool = False
    trend: str = "linear"
    trend_knots: tuple[_dt.date, ...] | int | None = None   # dates, or every N months
    trend_period: str = "month"
    min_period_sales: int = 10
    robust_se: str | None = None
    confidence: float = 0.95
    id_column: str | None = None
    header_row: int | None = None
    bad_cells: str = "refuse"
    date_format: str = "auto"
    level_map: tuple[tuple[str, str, str], ...] = ()
    min_level_sales: int = 5
    duplicates: str = "set_aside"
    keep_only: tuple[tuple[str, tuple[str, ...]], ...] = ()
    skip_hidden_rows: bool = False
    fence_scale: str = "model"
    trim_percentiles: tuple[float, float] | None = None
    trim_columns: tuple[str, ...] = ()
    iqr_fence: float | None = None
    influence_screen: bool = False
    exclude_rows: tuple[tuple[int, str], ...] = ()
    exclude_ids: tuple[tuple[str, str], ...] = ()
    max_excluded_share: float = 0.10
    holdout: float | None = None
    holdout_recent: bool = False
    final_fit: str = "all"
    seed: int = 20240601
    folds: int = 5
    ratio_by: str | None = None
    property_class: str = "residential"
    ratio_trim: bool = False
    assessed_column: str | None = None
    prior_assessed_column: str | None = None
    value_strata: int | tuple[float, ...] | None = None   # groups, or break points
    x_column: str | None = None
    y_column: str | None = None
    coordinates: str = "projected"
    location_surface: int = 0
    neighbours: int = 8
    comps: tuple[tuple[int, str], ...] = ()
    comp_ids: tuple[tuple[str, str], ...] = ()
    valuation_date: _dt.date | None = None
    retransform: str = "smearing"
    comp_weights: str = "gross"
    net_adjustment_limit: float = 0.15
    gross_adjustment_limit: float = 0.25
    suggest_comps: int = 0
    comp_same: str | None = None
    comp_months: float | None = None
    comp_distance: float | None = None
    backup: bool = True
    adjustment_rounding: float = 100.0
    reconcile_gap: float = 0.10
    label_column: str | None = None
    client: str | None = None
    intended_use: str | None = None
    prepared_by: str | None = None
    property_rights: str | None = None
    compare_by: str = "mape"
    use_model: str | None = None
    roll_id_column: str | None = None
    extra: tuple = field(default=(), compare=False, repr=False)

    @property
    def text_columns(self) -> tuple[str, ...]:
        """The columns these settings read as labels, IDs or dates (as the user named them):
        a hint for the CSV reader, which keeps them as text (intake.typed_csv)."""
        named = [*self.categorical, self.id_column, self.date_column, self.ratio_by,
                 self.comp_same, *(c for c, _ in self.keep_only)]
        return tuple(dict.fromkeys(c for c in named if c))

    def to_dict(self) -> dict[str, Any]:
        """Plain values, for audit stamps and JSON (dates as ISO text)."""
        out = {}
        for f in fields(self):
            if f.name == "extra":
                continue
            v = getattr(self, f.name)
            out[f.name] = v.isoformat() if isinstance(v, _dt.date) else v
            if isinstance(v, tuple) and v and isinstance(v[0], _dt.date):
                out[f.name] = tuple(d.isoformat() for d in v)
        return out

    def replace(self, **changes) -> "Settings":
        from dataclasses import replace
        return replace(self, **changes)


_TRUE = {"true", "yes", "y", "1", "on", "x"}
_FALSE = {"false", "no", "n", "0", "off", ""}


def normalise_name(name: Any) -> str:
    """'Log response ' / 'log-response' → 'log_response'."""
    return "_".join(str(name).strip().lower().replace("-", " ").split())


def parse_settings(raw: Mapping[str, Any] | None = None, **kw) -> Settings:
    """Validate raw setting values (strings, cell values or Python objects).

    Unknown names, and values a setting cannot take, raise :class:`SettingError`
    naming the setting and what it accepts. Blank values mean "use the default".
    """
    items = dict(raw or {})
    items.update(kw)
    typed: dict[str, Any] = {}
    for key, value in items.items():
        name = normalise_name(key)
        if name not in REGISTRY:
            close = difflib.get_close_matches(name, REGISTRY, n=1)
            hint = f" Did you mean '{close[0]}'?" if close else ""
            raise SettingError(
                f"Setting '{key}' is not one plumbrule knows.{hint}", setting=str(key)
            )
        if is_blank(value):
            continue
        typed[name] = _convert(REGISTRY[name], value)
    return Settings(**typed)


def _convert(s: Setting, value: Any) -> Any:
    conv = _CONVERTERS[s.kind]
    return conv(s, value)


def _text(s: Setting, v: Any) -> str:
    return str(v).strip()


def _split(v: Any) -> list[str]:
    if isinstance(v, (list, tuple)):
        parts: list[Any] = []
        for item in v:
            parts.extend(_split(item) if isinstance(item, (list, tuple)) else [item])
        return [str(p).strip() for p in parts if not is_blank(p)]
    return [p.strip() for p in str(v).split(",") if p.strip()]


def _columns(s: Setting, v: Any) -> tuple[str, ...]:
    """Column names, comma-separated; a name holding a comma is given in double quotes
    (``"Lot size, sq ft",Age``), a quote inside one doubled, as in a CSV line."""
    if isinstance(v, (list, tuple)) or '"' not in str(v):
        return tuple(_split(v))
    import csv
    row = next(csv.reader([" ".join(str(v).splitlines())], skipinitialspace=True), [])
    return tuple(p.strip() for p in row if p.strip())


def _bool(s: Setting, v: Any) -> bool:
    if isinstance(v, bool):
        return v
    if isinstance(v, (int, float)) and v in (0, 1):
        return bool(v)
    text = str(v).strip().lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False
    raise SettingError(f"Setting '{s.name}': '{v}' is not TRUE or FALSE. Enter TRUE or FALSE.",
                       setting=s.name)


def _number(s: Setting, v: Any, cast):
    try:
        if isinstance(v, bool):
            raise ValueError
        x = float(str(v).strip().rstrip("%")) / (100 if str(v).strip().endswith("%") else 1)
        if not math.isfinite(x):
            raise ValueError
        if cast is int:
            if x != int(x):
                raise ValueError
            x = int(x)
    except (TypeError, ValueError):
        kind = "a whole number" if cast is int else "a number"
        raise SettingError(f"Setting '{s.name}': '{v}' is not {kind}. {s.help}",
                           setting=s.name) from None
    lo = "" if s.low is None else s.low
    hi = "" if s.high is None else s.high
    if (s.low is not None and x < s.low) or (s.high is not None and x > s.high):
        raise SettingError(f"Setting '{s.name}': {v} is outside {lo}..{hi}. {s.help}",
                           setting=s.name)
    for value, why in s.refuse:
        if x == value:
            raise SettingError(f"Setting '{s.name}': {why}", setting=s.name)
    return x


def _float(s, v):
    return _number(s, v, float)


def _int(s, v):
    return _number(s, v, int)


def _choice(s: Setting, v: Any) -> str:
    text = str(v).strip()
    for c in s.choices:
        if c.lower() == text.lower():
            return c
    raise SettingError(f"Setting '{s.name}': '{v}' is not one of {', '.join(s.choices)}.",
                       setting=s.name)


def _percentiles(s: Setting, v: Any) -> tuple[float, float]:
    parts = _split(v)
    try:
        lo, hi = (float(p) for p in parts)
    except ValueError:
        raise SettingError(f"Setting '{s.name}': '{v}' is not two percentiles LOW,HIGH "
                           "such as 1,99.", setting=s.name) from None
    if not 0 <= lo < hi <= 100:
        raise SettingError(f"Setting '{s.name}': need 0 <= LOW < HIGH <= 100, got {lo:g},{hi:g}.",
                           setting=s.name)
    return lo, hi


def sheet_row(v: Any, first: int = 1) -> int | None:
    """A cell or text naming a sheet row (12, 12.0, ' 12 ') → 12; None when it is not a
    whole number of at least ``first`` (a boolean is not a row). The one reader of row
    references: settings, the Comps sheet, comparables given in code."""
    if isinstance(v, (tuple, list)) and v:
        v = v[0]
    if isinstance(v, bool) or v is None:
        return None
    try:
        f = float(str(v).strip()) if isinstance(v, str) else float(v)
    except (TypeError, ValueError, OverflowError):
        return None
    if not math.isfinite(f) or f != int(f) or f < first:
        return None
    return int(f)


def _rows(s: Setting, v: Any) -> tuple[tuple[int, str], ...]:
    """'12,40' or '12=family sale,40' or [12, 40] → ((12, ''), (40, ''))."""
    out = []
    for part in _split(v):
        row, _, reason = part.partition("=")
        r = sheet_row(row)
        if r is None:
            raise SettingError(f"Setting '{s.name}': '{part}' is not a sheet row number. "
                               "Enter row numbers such as 12,40.", setting=s.name)
        out.append((r, reason.strip()))
    return tuple(out)


def _pairs(s: Setting, v: Any) -> tuple[tuple[str, str], ...]:
    out = []
    for part in _split(v):
        col, eq, level = part.partition("=")
        if not eq or not col.strip() or not level.strip():
            raise SettingError(f"Setting '{s.name}': '{part}' is not Column=Level. "
                               "Enter pairs such as Neighbourhood=Old Town.", setting=s.name)
        out.append((col.strip(), level.strip()))
    return tuple(out)


def _ids(s: Setting, v: Any) -> tuple[tuple[str, str], ...]:
    """'Q-104,Q-233=family sale' or [104, 'Q-233'] → (('Q-104', ''), ('Q-233', 'family sale')).
    IDs are text, as the ID column's cells are typed (104.0 → '104')."""
    out = []
    for part in _split(v):
        ident, _, reason = part.partition("=")
        ident = ident.strip()
        if ident.endswith(".0") and ident[:-2].isdigit():
            ident = ident[:-2]
        if not ident:
            raise SettingError(f"Setting '{s.name}': '{part}' has no ID before '='. Enter IDs "
                               "such as Q-104,Q-233=family sale.", setting=s.name)
        out.append((ident, reason.strip()))
    return tuple(out)


def _level_map(s: Setting, v: Any) -> tuple[tuple[str, str, str], ...]:
    """'Condition: Avg=Average, Excelent=Excellent; Nbhd: Sorrel Hts=Sorrel Heights' →
    (('Condition', 'Avg', 'Average'), ('Condition', 'Excelent', 'Excellent'), ...)."""
    out = []
    for block in str(v).split(";"):
        if not block.strip():
            continue
        col, colon, pairs = block.partition(":")
        if not colon or not col.strip():
            raise SettingError(f"Setting '{s.name}': '{block.strip()}' does not start with a "
                               "column name and ':'. Enter e.g. Condition: Avg=Average.",
                               setting=s.name)
        for part in pairs.split(","):
            if not part.strip():
                continue
            old, eq, new = part.partition("=")
            if not eq or not old.strip() or not new.strip():
                raise SettingError(f"Setting '{s.name}': '{part.strip()}' is not "
                                   "Spelling=Level. Enter e.g. Condition: Avg=Average.",
                                   setting=s.name)
            out.append((col.strip(), " ".join(old.split()), " ".join(new.split())))
    return tuple(out)


def _keep_only(s: Setting, v: Any) -> tuple[tuple[str, tuple[str, ...]], ...]:
    """"Sale type=Arm's length|Valid; Use=Residential" → (('Sale type', ("Arm's length",
    'Valid')), ('Use', ('Residential',)))."""
    out = []
    for block in str(v).split(";"):
        if not block.strip():
            continue
        col, eq, values = block.partition("=")
        kept = tuple(" ".join(x.split()) for x in values.split("|") if x.strip())
        if not eq or not col.strip() or not kept:
            raise SettingError(f"Setting '{s.name}': '{block.strip()}' is not Column=Value|"
                               "Value. Enter e.g. Sale type=Arm's length|Valid.",
                               setting=s.name)
        out.append((col.strip(), kept))
    return tuple(out)


def _date(s: Setting, v: Any) -> _dt.date:
    if isinstance(v, _dt.datetime):
        return v.date()
    if isinstance(v, _dt.date):
        return v
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        if not 1 <= v < 2958466:   # spreadsheet serials of 1900-01-01 .. 9999-12-31
            raise SettingError(f"Setting '{s.name}': {v} is not a date. Enter YYYY-MM-DD.",
                               setting=s.name)
        return (_dt.datetime(1899, 12, 30) + _dt.timedelta(days=float(v))).date()
    try:
        return _dt.date.fromisoformat(str(v).strip()[:10])
    except ValueError:
        raise SettingError(f"Setting '{s.name}': '{v}' is not a date. Enter YYYY-MM-DD.",
                           setting=s.name) from None


def _knots(s: Setting, v: Any) -> tuple[_dt.date, ...] | int:
    """'every 6 months' → 6; '2024-07-01,2025-01-01' (or dates, serials) → sorted dates."""
    import re
    text = str(v).strip().lower() if isinstance(v, str) else ""
    hit = re.fullmatch(r"every\s+(\d+)\s*(months?|m)?", text)
    if hit:
        n = int(hit.group(1))
        if n < 1:
            raise SettingError(f"Setting '{s.name}': 'every {n} months' needs at least 1 month."
                               , setting=s.name)
        return n
    if text.startswith("every"):
        raise SettingError(f"Setting '{s.name}': '{v}' is not 'every N months'. Enter e.g. "
                           "every 6 months, or dates such as 2024-07-01,2025-01-01.",
                           setting=s.name)
    parts = v if isinstance(v, (list, tuple)) else (
        [v] if not isinstance(v, str) else _split(v))
    dates = []
    for part in parts:
        try:
            dates.append(_date(s, part))
        except SettingError:
            raise SettingError(f"Setting '{s.name}': '{part}' is not a date. Enter dates "
                               "YYYY-MM-DD separated by commas, or 'every 6 months'.",
                               setting=s.name) from None
    if not dates:
        raise SettingError(f"Setting '{s.name}': no knot given. Enter dates or "
                           "'every 6 months'.", setting=s.name)
    return tuple(sorted(set(dates)))


_CURVE_FIX = ("Enter e.g. Age=spline:4; Living area=square; Lot size=bands:5000,10000,"
              "20000.")


def _curves(s: Setting, v: Any) -> tuple[tuple[str, str, tuple[float, ...]], ...]:
    """'Age=spline:4; Living area=square; Lot size=bands:5000,10000' →
    (('Age', 'spline', (4,)), ('Living area', 'square', ()), ('Lot size', 'bands',
    (5000.0, 10000.0)))."""
    out: list[tuple[str, str, tuple[float, ...]]] = []
    seen: set[str] = set()
    for block in str(v).split(";"):
        if not block.strip():
            continue
        col, eq, shape = block.partition("=")
        col = col.strip()
        kind, _, params = shape.partition(":")
        kind = kind.strip().lower()
        where = f"Setting '{s.name}': '{block.strip()}'"
        if not eq or not col or kind not in ("spline", "square", "bands"):
            raise SettingError(f"{where} is not Column=spline:N, Column=square or "
                               f"Column=bands:B1,B2. {_CURVE_FIX}", setting=s.name)
        if col.casefold() in seen:
            raise SettingError(f"{where}: '{col}' has a curve already. Give each column one "
                               "curve.", setting=s.name)
        seen.add(col.casefold())
        if kind == "square":
            if params.strip():
                raise SettingError(f"{where}: square takes no number. Enter {col}=square.",
                                   setting=s.name)
            out.append((col, kind, ()))
            continue
        parts = [p.strip().replace("_", "") for p in params.split(",") if p.strip()]
        try:
            nums = [float(p) for p in parts]
        except ValueError:
            nums = []
        if kind == "spline":
            if len(nums) != 1 or nums[0] not in (3, 4, 5, 6, 7):
                raise SettingError(f"{where}: a spline takes a number of knots from 3 to 7 "
                                   f"(Harrell's default knot places). Enter e.g. {col}=spline:4.",
                                   setting=s.name)
            out.append((col, kind, (float(nums[0]),)))
            continue
        if not nums or len(nums) != len(parts) or not all(math.isfinite(x) for x in nums):
            raise SettingError(f"{where}: bands need break points as numbers. Enter e.g. "
                               f"{col}=bands:5000,10000,20000.", setting=s.name)
        if any(b <= a for a, b in zip(nums, nums[1:], strict=False)):
            raise SettingError(f"{where}: break points must rise, each once. Enter them in "
                               "increasing order.", setting=s.name)
        out.append((col, kind, tuple(nums)))
    return tuple(out)
def _strata(s: Setting, v: Any) -> int | tuple[float, ...]:
    """'4' or 'quartiles' → 4 equal-count groups; '200000,400000' → sorted break points."""
    text = str(v).strip().lower() if isinstance(v, str) else ""
    named = {"quartiles": 4, "quintiles": 5, "deciles": 10, "tertiles": 3}
    if text in named:
        return named[text]
    parts = list(v) if isinstance(v, (list, tuple)) else (
        [v] if not isinstance(v, str) else _split(v))
    try:
        nums = [float(str(p).replace(",", "").strip()) for p in parts]
    except ValueError:
        nums = []
    if len(nums) == 1 and float(nums[0]).is_integer() and 2 <= nums[0] <= 20:
        return int(nums[0])
    if len(nums) >= 1 and all(math.isfinite(x) and x > 0 for x in nums) and (
            len(nums) > 1 or nums[0] > 20):
        return tuple(sorted(set(nums)))
    raise SettingError(f"Setting '{s.name}': '{v}' is neither a number of groups (2 to 20, "
                       "or quartiles) nor positive break points such as 200000,400000.",
                       setting=s.name)


_CONVERTERS = {
    "text": _text, "columns": _columns, "bool": _bool, "float": _float, "int": _int,
    "choice": _choice, "percentiles": _percentiles, "rows": _rows, "pairs": _pairs,
    "date": _date, "ids": _ids, "level_map": _level_map, "keep_only": _keep_only,
    "knots": _knots, "curves": _curves, "strata": _strata,
}


_HEADER_NAMES = {"setting", "settings", "name", "option"}


def settings_from_rows(rows: list, where: str = "Settings range", first_line: int = 1
                       ) -> dict[str, Any]:
    """Rows of (setting name, value[, anything]) → raw settings {name: value}, the one parser of
    a settings block (worksheet functions' range, the workbook's Settings sheet). A header row
    ('Setting', 'Name', …) and blank lines are skipped; error values, values without a name and
    names given twice are errors naming the ``where`` and line (``first_line`` is the first
    row's number). Known names are normalised; unknown ones are kept as typed, for
    :func:`parse_settings` to reject with a suggestion."""
    raw: dict[str, Any] = {}
    for i, row in enumerate(rows, start=first_line):
        row = list(row) if row is not None else []
        name = row[0] if row else None
        value = row[1] if len(row) > 1 else None
        if is_blank(name):
            if not is_blank(value):
                raise SettingError(f"{where}, line {i}: the value '{value}' has no "
                                   "setting name. Put the name in the first column.")
            continue
        if len(row) < 2:
            raise SettingError(f"The {where.lower()} needs two columns: setting name and value. "
                               "Select both columns.")
        if error_text(name):
            raise SettingError(f"{where}, line {i}: the name cell holds the error "
                               f"value {error_text(name)}. Enter a setting name.")
        key = normalise_name(name)
        if i == first_line and key in _HEADER_NAMES:
            continue                                   # a header row above the settings
        err = error_text(value)
        if err:
            raise SettingError(f"Setting '{name}': the cell holds the error value {err}. "
                               "Enter a value or leave it blank.", setting=key)
        if key in raw:
            raise SettingError(f"Setting '{name}' appears twice in the {where.lower()}. "
                               "Keep one line for it.", setting=key)
        raw[key if key in REGISTRY else str(name).strip()] = value   # unknown: as typed
    return raw

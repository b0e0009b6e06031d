"""What to fit: the model specification, checked against the table's columns."""

from __future__ import annotations

import difflib
from dataclasses import dataclass, replace
from typing import Iterable

from plumbrule.errors import SpecError, quote_list
from plumbrule.settings import Settings


@dataclass(frozen=True)
class ModelSpec:
    """Columns and their roles, with the names matched to the table's headers."""

    response: str
    predictors: tuple[str, ...]          # user order; the date column is not repeated here
    categorical: tuple[str, ...] = ()
    reference_levels: tuple[tuple[str, str], ...] = ()
    log_response: bool = False
    log_predictors: tuple[str, ...] = ()
    date_column: str | None = None
    intercept: bool = True
    screened: tuple[str, ...] = ()       # columns the trim and fence read (matched headers)
    ratio_by: str | None = None          # the ratio study's strata column (matched header)
    id_column: str | None = None         # each sale's ID (matched header)
    level_map: tuple[tuple[str, str, str], ...] = ()       # (column, spelling, level)
    filters: tuple[tuple[str, tuple[str, ...]], ...] = ()  # keep_only: (column, values)
    date_format: str = "auto"            # order of text dates (intake.dates)
    trend: str = "linear"                # linear | piecewise | periods (model/trend.py)
    trend_knots: tuple | int | None = None   # piecewise: dates, or every N months
    trend_period: str = "month"          # periods: month | quarter
    min_period_sales: int = 10           # sparser periods/segments merge with a neighbour
    curves: tuple[tuple[str, str, tuple[float, ...]], ...] = ()   # (column, kind, params)

    def curve_for(self, column: str) -> tuple[str, tuple[float, ...]] | None:
        """(kind, params) of ``column``'s curve (model/curves.py), None when it is straight."""
        hit = [(k, p) for c, k, p in self.curves if c == column]
        return hit[0] if hit else None
    assessed_column: str | None = None   # values on the roll (never a predictor)
    prior_assessed_column: str | None = None
    x_column: str | None = None          # coordinates of each sale (matched headers)
    y_column: str | None = None
    location_surface: int = 0            # bumps a side of the location surface (0: none)
    coordinates: str = "projected"       # projected | degrees

    @property
    def logged_columns(self) -> tuple[str, ...]:
        """Columns the model takes the logarithm of (the response too, for a log model)."""
        return ((self.response,) if self.log_response else ()) + self.log_predictors

    @property
    def screens_price(self) -> bool:
        return self.response in self.screened

    @property
    def label_columns(self) -> tuple[str, ...]:
        """Columns read as text besides the categorical predictors (strata, validity codes)."""
        extra = ([self.ratio_by] if self.ratio_by else []) + [c for c, _ in self.filters]
        return tuple(c for c in dict.fromkeys(extra) if c not in self.used_columns)

    @property
    def numeric_predictors(self) -> tuple[str, ...]:
        return tuple(p for p in self.predictors if p not in self.categorical)

    @property
    def location_columns(self) -> tuple[str, ...]:
        """The coordinate columns when the model carries a location surface."""
        if self.location_surface and self.x_column and self.y_column:
            return (self.x_column, self.y_column)
        return ()

    @property
    def numeric_columns(self) -> tuple[str, ...]:
        """Columns read as numbers: the response, the numeric predictors and the
        coordinates of a location surface."""
        extra = tuple(c for c in self.location_columns if c not in self.numeric_predictors)
        return (self.response,) + self.numeric_predictors + extra

    @property
    def used_columns(self) -> tuple[str, ...]:
        cols = self.numeric_columns + self.categorical
        return cols + ((self.date_column,) if self.date_column else ())

    def reference_for(self, column: str) -> str | None:
        return dict(self.reference_levels).get(column)


def match_column(name: str, columns: Iterable[str], setting: str) -> str:
    """The header a user meant: exact, else a unique match after Unicode NFC normalisation
    ('Â' typed as one character or as A + combining circumflex look the same), else a
    unique case-insensitive one."""
    columns = list(columns)
    if name in columns:
        return name
    key = _nfc(name.strip())
    same = [c for c in columns if _nfc(c) == key]
    if len(same) == 1:
        return same[0]
    folded = [c for c in columns if _nfc(c).casefold() == key.casefold()]
    if len(folded) == 1:
        return folded[0]
    comma = _comma_header(name, columns)
    close = comma or _closest(name, columns)
    hint = f"Did you mean '{close}'?" if close else f"Columns are: {_short_list(columns)}."
    if comma:
        hint += f' A header holding a comma goes in double quotes in the list: "{comma}",...'

    raise SpecError(f"Setting '{setting}': there is no column '{name}'. {hint}",
                    setting=setting, column=name)


def _nfc(text: str) -> str:
    import unicodedata
    return unicodedata.normalize("NFC", text)


def _comma_header(name: str, columns: list[str]) -> str | None:
    """The one header with a comma of which ``name`` is a comma-separated piece (a list
    setting split it), else None."""
    key = name.strip().strip('"').strip().casefold()
    hits = [c for c in columns if "," in c and key
            and key in (p.strip().casefold() for p in c.split(","))]
    return hits[0] if len(hits) == 1 else None


def _closest(name: str, columns: list[str]) -> str | None:
    """The one header a typo or a shortened name most likely meant, else None."""
    key = " ".join(name.split()).casefold()
    folded = {c.casefold(): c for c in columns}
    close = difflib.get_close_matches(key, list(folded), n=1, cutoff=0.6)
    if close:
        return folded[close[0]]
    # 'Price' for 'Sale price': the name is a whole word of exactly one header.
    holders = [c for c in columns if key and key in c.casefold().split()]
    return holders[0] if len(holders) == 1 else None


def _short_list(columns: list[str], limit: int = 12) -> str:
    shown = quote_list(columns[:limit])
    return shown + (f" and {len(columns) - limit} more" if len(columns) > limit else "")


def build_spec(settings: Settings, columns: Iterable[str]) -> ModelSpec:
    """Check the settings' column names against the table and return the spec."""
    columns = list(columns)
    if not settings.response:
        raise SpecError("Setting 'response' is empty. Name the sale-price column.",
                        setting="response")
    response = match_column(settings.response, columns, "response")
    date = (
        match_column(settings.date_column, columns, "date_column") if settings.date_column else None
    )
    if date is not None and date == response:
        raise SpecError(f"Setting 'date_column': '{date}' is the response. Name the sale-date "
                        "column.", setting="date_column", column=date)
    preds = [match_column(p, columns, "predictors") for p in settings.predictors]
    preds = [p for p in dict.fromkeys(preds) if p != date]
    if not preds and not date:
        raise SpecError("Setting 'predictors' is empty. Name at least one column that explains "
                        "the price.", setting="predictors")
    if response in preds:
        raise SpecError(f"Setting 'predictors': '{response}' is the response; it cannot also "
                        "explain itself. Remove it from the predictors.", setting="predictors",
                        column=response)
    cats = _subset(settings.categorical, columns, preds, "categorical")
    logs = _subset(settings.log_predictors, columns, preds, "log_predictors")
    both = [c for c in logs if c in cats]
    if both:
        raise SpecError(
            f"Setting 'log_predictors': {quote_list(both)} is categorical; only numeric "
            "predictors can be logged.",
            setting="log_predictors",
            column=both[0],
        )
    refs = []
    for col, level in settings.reference_levels:
        col = match_column(col, columns, "reference_levels")
        if col not in cats:
            raise SpecError(f"Setting 'reference_levels': '{col}' is not a categorical predictor. "
                            "Add it to 'categorical' or remove the pair.",
                            setting="reference_levels", column=col)
        refs.append((col, level))
    spec = ModelSpec(response=response, predictors=tuple(preds), categorical=tuple(cats),
                     reference_levels=tuple(refs), log_response=settings.log_response,
                     log_predictors=tuple(logs), date_column=date,
                     intercept=not settings.no_intercept)
    # trim_columns and ratio_by are matched here, once, like every other column name. By
    # default the rules look at the predictors only: truncating on the price biases every
    # slope toward zero, so the price is screened only when trim_columns names it.
    screened = (tuple(dict.fromkeys(match_column(c, columns, "trim_columns")
                                    for c in settings.trim_columns))
                if settings.trim_columns else spec.numeric_predictors)
    by = match_column(settings.ratio_by, columns, "ratio_by") if settings.ratio_by else None
    ident = match_column(settings.id_column, columns, "id_column") if settings.id_column else None
    if ident is not None and ident in spec.used_columns:
        raise SpecError(f"Setting 'id_column': '{ident}' is also used by the model. Name the "
                        "column that holds each sale's ID.", setting="id_column", column=ident)
    level_map = []
    for col, old, new in settings.level_map:
        col = match_column(col, columns, "level_map")
        if col not in cats:
            raise SpecError(f"Setting 'level_map': '{col}' is not a categorical predictor. Add "
                            "it to 'categorical' or remove its spellings.", setting="level_map",
                            column=col)
        level_map.append((col, old, new))
    filters = tuple((match_column(col, columns, "keep_only"), values)
                    for col, values in settings.keep_only)
    if settings.trend != "linear" and date is None:
        raise SpecError(f"Setting 'trend': '{settings.trend}' follows the market over the sale "
                        "dates, but no date_column is set. Name the sale-date column.",
                        setting="trend")
    side: dict[str, str | None] = {}
    for name in ("assessed_column", "prior_assessed_column", "x_column", "y_column"):
        given = getattr(settings, name)
        side[name] = match_column(given, columns, name) if given else None
    for name in ("assessed_column", "prior_assessed_column"):
        judged = side[name]
        if judged is not None and judged in spec.used_columns:
            raise SpecError(f"Setting '{name}': '{judged}' is also used by the model. The "
                            "values already on the roll are judged, never used to explain the "
                            "price: take it out of 'predictors'.", setting=name, column=judged)
    if side["prior_assessed_column"] and not side["assessed_column"]:
        raise SpecError("Setting 'prior_assessed_column' needs 'assessed_column' too: name "
                        "the column of the current roll's values.",
                        setting="prior_assessed_column")
    if bool(side["x_column"]) != bool(side["y_column"]):
        missing = "y_column" if side["x_column"] else "x_column"
        raise SpecError(f"Setting '{missing}' is empty: the location check needs both "
                        "coordinate columns.", setting=missing)
    if settings.location_surface and not side["x_column"]:
        raise SpecError("Setting 'location_surface' needs the coordinates: name x_column and "
                        "y_column.", setting="location_surface")
    spec = replace(spec, assessed_column=side["assessed_column"],
                   prior_assessed_column=side["prior_assessed_column"],
                   x_column=side["x_column"], y_column=side["y_column"],
                   location_surface=settings.location_surface,
                   coordinates=settings.coordinates)
    curves = _curves(settings.curves, columns, preds, cats, logs)
    return replace(spec, screened=screened, ratio_by=by, id_column=ident, curves=curves,
                   level_map=tuple(level_map), filters=filters,
                   date_format=settings.date_format, trend=settings.trend,
                   trend_knots=settings.trend_knots, trend_period=settings.trend_period,
                   min_period_sales=settings.min_period_sales)


def _curves(curves, columns, preds, cats, logs) -> tuple:
    """The curves setting matched to the headers; each column a numeric predictor."""
    from plumbrule.errors import SettingError
    out = []
    for name, kind, params in curves:
        try:
            col = match_column(name, columns, "curves")
        except SpecError as err:
            raise SettingError(str(err), setting="curves", column=name) from None
        fix = None
        if col not in preds:
            fix = "is not among the predictors. Add it to 'predictors' too."
        elif col in cats:
            fix = ("is categorical: a curve needs numbers. Take it out of 'categorical' or "
                   "out of 'curves'.")
        elif col in logs:
            fix = ("is in 'log_predictors' already (the logarithm is a curve of its own). "
                   "Take it out of one of the two settings.")
        if fix:
            raise SettingError(f"Setting 'curves': '{col}' {fix}", setting="curves", column=col)
        out.append((col, kind, params))
    return tuple(out)


def _subset(names, columns, preds, setting) -> list[str]:
    out = []
    for name in names:
        col = match_column(name, columns, setting)
        if col not in preds:
            raise SpecError(f"Setting '{setting}': '{col}' is not among the predictors. Add it "
                            "to 'predictors' too.", setting=setting, column=col)
        out.append(col)
    return list(dict.fromkeys(out))

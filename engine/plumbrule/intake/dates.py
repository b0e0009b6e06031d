"""Typing a date column: date cells, spreadsheet serial numbers, ISO text, and dates typed as
text in a day/month order (3/14/2025, 14.03.2025, 14-03-2025, 2025/03/14).

The order of day and month in text dates is settled once per column, never per cell:

- ``date_format='auto'`` reads a four-digit first part as the year (2025/03/14 is
  year/month/day, as ISO 2025-03-14 is); for the others the column's own values decide: a
  first part above 12 (14/03/2025) can only be day/month/year, a second part above 12
  (03/14/2025) only month/day/year. Both kinds in one column is an error naming a cell of
  each; a column whose values all read both ways (03/04/2025) is an error asking for
  ``date_format``. A value whose day and month are equal (05/05/2025) reads the same
  either way and decides nothing.
- ``'MDY'``, ``'DMY'`` or ``'YMD'`` force the order; a four-digit first part is still
  the year under MDY and DMY (no day or month has four digits).
- Two-digit years are accepted: 00–68 are 2000–2068, 69–99 are 1969–1999 (the POSIX
  ``%y`` convention; common practice, no source).
- Date cells and serial numbers do not depend on the setting, and are no evidence for it.

A time after the date (``3/14/2025 10:30``, ``3/14/2025 10:30:00 PM``) is kept.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError
from plumbrule.intake.cells import (
    DATE,
    NUMBER,
    TEXT,
    _EARLIEST,
    _EXCEL_EPOCH,
    _LATEST,
    _MAX_SERIAL,
    _missing_reasons,
    _no_reason,
    _numbers_of,
    _refuse,
    _shown,
    cell_kinds,
    plain_bytes,
)

DATE_FORMATS = ("auto", "MDY", "DMY", "YMD")

_ORDER_WORDS = {"MDY": "month/day/year", "DMY": "day/month/year", "YMD": "year/month/day"}

# Three runs of digits with one separator used twice, then an optional time of day.
_TEXT_DATE_RE = (r"^(?P<a>\d{1,4})(?P<sep>[/.\-])(?P<b>\d{1,2})(?P=sep)(?P<c>\d{1,4})"
                 r"(?:[ T]+(?P<H>\d{1,2}):(?P<M>\d{2})(?::(?P<S>\d{2}))?\s*(?P<ap>[AaPp][Mm])?)?$")

_NOT_A_DATE = "is not a date. Enter a date cell or text as YYYY-MM-DD."


def to_dates(col: pd.Series, name: str, date_format: str = "auto"
             ) -> tuple[pd.Series, pd.Series]:
    """Cells → datetime64[ns]: date cells, spreadsheet serial numbers (1900 date system, also
    as text), ISO text and text dates in the order ``date_format`` gives or (``'auto'``) the
    column shows. Returns (values, missing reason per cell or NaN); a cell that is not a date
    raises :class:`CellErrors`, a column whose order cannot be settled :class:`IntakeError`."""
    if date_format not in DATE_FORMATS:
        raise IntakeError(f"date_format is '{date_format}'; use one of auto, MDY, DMY or YMD.",
                          setting="date_format")
    if isinstance(col.dtype, pd.DatetimeTZDtype):
        col = col.dt.tz_localize(None)
    if isinstance(col.dtype, np.dtype) and col.dtype.kind == "M":   # already dates
        values = col.astype("datetime64[ns]")
        return values, pd.Series("blank", index=col.index, dtype=object).where(values.isna())
    iso = _plain_iso_column(col)
    if iso is not None:     # every cell YYYY-MM-DD, a calendar date in range
        got = pd.Series(iso, index=col.index, copy=False)
        _check_span(got, name)
        return got, _no_reason(col.index)
    raw = plain_bytes(col)
    if raw is not None:     # day/month text in every cell: read once, on the uniques
        got, _ = _text_dates(col, name, date_format)
        if got.notna().all():
            _check_span(got, name)
            return got, pd.Series(np.nan, index=col.index, dtype=object)
    kinds = cell_kinds(col)
    reason, present = _missing_reasons(col, kinds)
    out = pd.Series(pd.NaT, index=col.index, dtype="datetime64[ns]")
    num = present & kinds.eq(NUMBER)
    if num.any():
        out[num] = _serial_dates(_numbers_of(col[num])).to_numpy()
    text = present & kinds.eq(TEXT)
    order = None
    if text.any():
        got, order = _text_dates(col[text], name, date_format)
        out[text] = got.to_numpy()
    dates = present & kinds.eq(DATE)
    if dates.any():
        out[dates] = _iso_dates(col[dates]).to_numpy()
    bad = present & out.isna()
    far = bad & kinds.eq(DATE)
    if far.any() and far.idxmax() == bad.idxmax():
        _refuse(far, col, f"is outside the dates plumbrule can use ({_EARLIEST.date()} to "
                     f"{_LATEST.date()}). Correct the date.", name)
    if bad.any():
        looks = bad & text
        if order is not None and looks.any():
            shaped = pd.Series(False, index=col.index)
            shaped[looks] = _stripped(col[looks]).str.fullmatch(_TEXT_DATE_RE).fillna(False)\
                .astype(bool).to_numpy()
            if shaped.any() and shaped.idxmax() == bad.idxmax():
                _refuse(shaped, col, f"is not a date read as {_ORDER_WORDS[order]}. Correct "
                             "the date, or enter it as YYYY-MM-DD.", name)
        _refuse(bad, col, _NOT_A_DATE, name)
    _check_span(out, name)
    return out, reason


def _plain_iso_column(col: pd.Series) -> np.ndarray | None:
    """datetime64[ns] of a column of text cells when every cell is YYYY-MM-DD naming a
    calendar date datetime64[ns] holds (:func:`_plain_iso_dates`), else None. A sales
    file repeats its dates (a few thousand days under a million sales): the distinct
    texts are read and spread back by their codes. Each cell is read on its own, so this
    is the cell-by-cell result."""
    if not len(col) or col.dtype != object:
        return None
    codes, uniq = pd.factorize(col.to_numpy(dtype=object))
    if len(uniq) == len(col):       # all different: no sharing to gain
        raw = plain_bytes(col)
        return None if raw is None else _plain_iso_dates(raw, len(col))
    if codes.min() < 0:             # a missing cell (NaN, None): the careful rules
        return None
    raw = plain_bytes(pd.Series(uniq, dtype=object))
    iso = None if raw is None else _plain_iso_dates(raw, len(uniq))
    return None if iso is None else iso.take(codes)


def _plain_iso_dates(raw: bytes, n: int) -> np.ndarray | None:
    """datetime64[ns] of ``n`` texts joined by NUL (``raw``, ASCII) when every one is
    YYYY-MM-DD naming a calendar date that datetime64[ns] holds, else None. The digits are
    read from the bytes: the careful rules (:func:`_text_dates`) give the same midnight for
    such a text under any ``date_format`` (a four-digit first part is the year)."""
    if len(raw) != 11 * n - 1:
        return None
    a = np.frombuffer(raw + b"\x00", dtype=np.uint8).reshape(n, 11)
    if (a[:, 10] != 0).any() or (a[:, 4] != 45).any() or (a[:, 7] != 45).any():
        return None
    digit = {k: a[:, k].astype(np.int64) - 48 for k in (0, 1, 2, 3, 5, 6, 8, 9)}
    if any(((v < 0) | (v > 9)).any() for v in digit.values()):
        return None
    year = digit[0] * 1000 + digit[1] * 100 + digit[2] * 10 + digit[3]
    month, day = digit[5] * 10 + digit[6], digit[8] * 10 + digit[9]
    if ((month < 1) | (month > 12) | (day < 1)).any():
        return None
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    if (day > _MONTH_DAYS[month] + ((month == 2) & leap)).any():
        return None
    days = _days_from_civil(year, month, day)
    if (days < _DAY_RANGE[0]).any() or (days > _DAY_RANGE[1]).any():
        return None
    return (days * 86_400_000_000_000).view("datetime64[ns]")


_MONTH_DAYS = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)


def _days_from_civil(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 of proleptic Gregorian dates (integer arrays): the era
    arithmetic of H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (2013)."""
    y = year - (month <= 2)
    era = np.floor_divide(y, 400)
    yoe = y - era * 400
    doy = (153 * (month + np.where(month > 2, -3, 9)) + 2) // 5 + day - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468


# the days since 1970-01-01 of the earliest and latest dates datetime64[ns] holds
# (1677-09-22 and 2262-04-11: cells._EARLIEST and cells._LATEST)
_DAY_RANGE = (-106751, 106751)


# Date arithmetic runs in int64 nanoseconds, which span 292 years; half of that leaves room
# for a valuation date beyond the sales. No sales file spans it: a wider one holds a typo.
_SPAN = 2 ** 62
_SPAN_YEARS = 146


def _check_span(values: pd.Series, name: str) -> None:
    """Refuse a date column whose dates lie more than :data:`_SPAN_YEARS` years apart,
    naming the earliest and the latest cell."""
    ns = values.to_numpy(dtype="datetime64[ns]")
    ok = ~np.isnat(ns)
    if ok.sum() < 2:
        return
    v = ns.view(np.int64)
    lo = int(np.argmin(np.where(ok, v, np.iinfo(np.int64).max)))
    hi = int(np.argmax(np.where(ok, v, np.iinfo(np.int64).min)))
    if int(v[hi]) - int(v[lo]) <= _SPAN:
        return
    rows = values.index
    raise IntakeError(f"Column '{name}': the dates {pd.Timestamp(ns[lo]).date()} (row "
                      f"{rows[lo]}) and {pd.Timestamp(ns[hi]).date()} (row {rows[hi]}) are "
                      f"more than {_SPAN_YEARS} years apart, which plumbrule cannot compute "
                      "with: one of them is mistyped. Correct it, or leave the cell blank.",
                      column=name, row=int(rows[lo]))


def _stripped(cells: pd.Series) -> pd.Series:
    return pd.Series(cells.to_numpy(dtype=object), index=cells.index).astype(str).str.strip()


def _text_dates(cells: pd.Series, name: str, date_format: str
                ) -> tuple[pd.Series, str | None]:
    """(timestamps of text cells, the day/month order used or None when no cell needed one).
    Works on the distinct values; NaT where a text is not a date."""
    codes, uniq = pd.factorize(cells.to_numpy(dtype=object))
    u = pd.Series(uniq, dtype=object).astype(str).str.strip()
    got = pd.Series(pd.NaT, index=u.index, dtype="datetime64[ns]")
    serial = pd.to_numeric(u, errors="coerce")
    is_serial = serial.notna().to_numpy()
    if is_serial.any():
        got[is_serial] = _serial_dates(serial[is_serial]).to_numpy()
    parts = u.str.extract(_TEXT_DATE_RE)
    shaped = parts["a"].notna().to_numpy() & ~is_serial
    order = None
    if shaped.any():
        p = parts[shaped]
        a, b = p["a"].astype(int).to_numpy(), p["b"].astype(int).to_numpy()
        year_first = p["a"].str.len().to_numpy() == 4
        day_month = ~year_first
        if day_month.any() or date_format == "YMD":
            order = _settled_order(u[shaped], a, b, day_month, date_format,
                                   lambda k: cells.index[int(np.argmax(codes == k))], name)
        got[shaped] = _assembled(p, order, year_first).to_numpy()
    rest = ~is_serial & ~shaped
    if rest.any():
        got[rest] = _iso_dates(u[rest]).to_numpy()
    return pd.Series(got.to_numpy()[codes], index=cells.index), order


def _settled_order(texts: pd.Series, a: np.ndarray, b: np.ndarray, day_month: np.ndarray,
                   date_format: str, row_of, name: str) -> str:
    """The column's order of the day/month parts: the setting, or what the values show."""
    if date_format != "auto":
        return date_format
    only_dmy = day_month & (a > 12) & (a <= 31) & (b <= 12)
    only_mdy = day_month & (b > 12) & (b <= 31) & (a <= 12)
    keys = texts.index.to_numpy()
    if only_dmy.any() and only_mdy.any():
        d, m = keys[np.argmax(only_dmy)], keys[np.argmax(only_mdy)]
        rd, rm = row_of(d), row_of(m)
        raise IntakeError(
            f"Column '{name}': {_shown(texts[d])} (row {rd}) reads only as day/month/year and "
            f"{_shown(texts[m])} (row {rm}) only as month/day/year. Correct the dates that do "
            "not follow the column's order, or set date_format (--date-format) to MDY or DMY.",
            column=name, row=min(rd, rm), setting="date_format")
    if only_dmy.any():
        return "DMY"
    if only_mdy.any():
        return "MDY"
    both = day_month & (a <= 12) & (b <= 12) & (a != b)
    if both.any():
        k = keys[np.argmax(both)]
        raise IntakeError(
            f"Column '{name}': dates such as {_shown(texts[k])} (row {row_of(k)}) could be "
            "day/month or month/day. Set date_format (--date-format) to MDY or DMY.",
            column=name, row=row_of(k), setting="date_format")
    return "MDY"    # day equals month wherever it matters: either order reads the same


def _assembled(p: pd.DataFrame, order: str | None, year_first: np.ndarray) -> pd.Series:
    """Timestamps from the extracted parts; NaT where they make no calendar date."""
    num = {k: p[k].astype(int).to_numpy(dtype=float) for k in ("a", "b", "c")}
    size = {k: p[k].str.len().to_numpy(dtype=int) for k in ("a", "b", "c")}
    ymd = {"YMD": ("a", "b", "c"), "DMY": ("c", "b", "a")}.get(order or "MDY", ("c", "a", "b"))
    # A four-digit first part is the year whatever the order of the others.
    y, m, d = (np.where(year_first, num[k0], num[k]) for k0, k in zip("abc", ymd, strict=True))
    ylen, dlen = (np.where(year_first, size[k0], size[k]) for k0, k in (("a", ymd[0]),
                                                                         ("c", ymd[2])))
    year = np.where(ylen == 2, np.where(y <= 68, 2000 + y, 1900 + y), y)
    year = np.where((ylen == 2) | (ylen == 4), year, np.nan)
    month, day = m, np.where(dlen <= 2, d, np.nan)
    hour = pd.to_numeric(p["H"], errors="coerce").fillna(0).to_numpy(dtype=float)
    minute = pd.to_numeric(p["M"], errors="coerce").fillna(0).to_numpy(dtype=float)
    second = pd.to_numeric(p["S"], errors="coerce").fillna(0).to_numpy(dtype=float)
    ap = p["ap"].fillna("").astype(str).str.upper().to_numpy(dtype=object)
    has_ap = ap != ""
    hour = np.where(has_ap & ((hour < 1) | (hour > 12)), np.nan, hour)
    hour = np.where(has_ap, hour % 12 + np.where(ap == "PM", 12, 0), hour)
    ok = (np.isfinite(year) & (month >= 1) & (month <= 12) & (day >= 1) & np.isfinite(day)
          & (hour < 24) & (minute < 60) & (second < 60) & np.isfinite(hour)
          & (year >= 1) & (year <= 9999))
    stamps = np.full(len(p), np.datetime64("NaT"), dtype="datetime64[ns]")
    if ok.any():
        months = ((year[ok] - 1970) * 12 + month[ok] - 1).astype(np.int64)
        first = months.astype("datetime64[M]").astype("datetime64[D]")
        length = ((months + 1).astype("datetime64[M]").astype("datetime64[D]") - first
                  ).astype(np.int64)
        fits = day[ok] <= length
        secs = (hour[ok] * 3600 + minute[ok] * 60 + second[ok]).astype(np.int64)
        at = first.astype("datetime64[s]") + (day[ok].astype(np.int64) - 1) * 86400 + secs
        # datetime64[ns] holds 1677-09-22 to 2262-04-11: compare in seconds before converting.
        fits &= (at >= _EARLIEST.to_datetime64()) & (at <= _LATEST.to_datetime64())
        stamps[np.flatnonzero(ok)[fits]] = at[fits].astype("datetime64[ns]")
    return pd.Series(stamps, index=p.index)


def _serial_dates(serial: pd.Series) -> pd.Series:
    """Spreadsheet serial numbers → timestamps (NaT outside 1..9999-12-31).
    Serials below 60 are shifted a day: the 1900 system counts a 29 Feb 1900."""
    s = serial.astype(float)
    good = (s >= 1) & (s < _MAX_SERIAL) & ~((s >= 60) & (s < 61))
    s = s.where(good)
    s = s.where(s >= 61, s + 1)
    days = s.to_numpy()
    stamps = np.full(len(s), np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = np.isfinite(days)
    # Serials span 1900..9999; datetime64[ns] ends in 2262, so compute in seconds first.
    secs = np.round(days[ok] * 86400.0).astype(np.int64)
    limit = (_LATEST - _EXCEL_EPOCH).total_seconds()
    fits = secs < limit
    idx = np.flatnonzero(ok)[fits]
    stamps[idx] = (np.datetime64(_EXCEL_EPOCH.to_datetime64(), "s")
                   + secs[fits].astype("timedelta64[s]")).astype("datetime64[ns]")
    return pd.Series(stamps, index=serial.index)


def _iso_dates(values: pd.Series) -> pd.Series:
    """Date objects or ISO text → naive datetime64[ns]; NaT where unusable."""
    try:
        if values.map(type).eq(str).all():
            parsed = pd.to_datetime(values, format="ISO8601", errors="coerce", utc=True)
        else:
            parsed = pd.to_datetime(values, errors="coerce", utc=True)
    except (ValueError, TypeError, OverflowError):
        return pd.Series(pd.NaT, index=values.index, dtype="datetime64[ns]")
    parsed = parsed.dt.tz_localize(None)
    inside = (parsed >= _EARLIEST) & (parsed <= _LATEST)
    return parsed.where(inside).astype("datetime64[ns]")

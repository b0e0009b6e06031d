"""The market-conditions trend over the sale dates: its design columns, fixed at fit time.

Three shapes (setting ``trend``):

- ``linear``: one column, months since the earliest sale (the rate per month);
- ``piecewise``: a continuous broken line with knots (``trend_knots``: dates, or every N
  months from the first sale's month). Column j is the months spent inside segment j,
  ``clip(m, k_{j-1}, k_j) − k_{j-1}``, with the first segment open to the past and the last
  open to the future, so each coefficient is that segment's rate per month and a date
  beyond the last sale carries the last segment's rate forward;
- ``periods``: one indicator per calendar month or quarter after the earliest (the
  reference), each coefficient that period's level against the first; a date after the
  last period takes the last period's level.

Periods and segments with fewer than ``min_period_sales`` sales are merged with their
smaller neighbour, and each merge is recorded in :attr:`TrendBasis.merges`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.errors import SpecError

DEFAULT_EVERY = 6     # piecewise without trend_knots: a knot every 6 months (our default)


@dataclass(frozen=True)
class TrendBasis:
    """A non-linear trend's columns. ``starts`` are the first days of the segments
    (piecewise: the knots, after the first segment) or of the period groups (periods: the
    reference group first); ``knots`` the piecewise knots in months since ``origin``;
    ``labels`` one per group (periods) or segment (piecewise)."""

    kind: str
    column: str
    origin: pd.Timestamp
    starts: tuple[pd.Timestamp, ...]
    knots: tuple[float, ...]
    labels: tuple[str, ...]
    merges: tuple[str, ...] = ()

    @property
    def names(self) -> list[str]:
        """The design terms' names, in column order."""
        c = self.column
        if self.kind == "periods":
            return [f"{c}: {lab}" for lab in self.labels[1:]]
        return [f"{c} (months, {lab})" for lab in self.labels]

    def columns(self, dates: pd.Series, months: np.ndarray) -> np.ndarray:
        """n × p design block (float, NaN where a date is missing). ``months`` are the
        dates as months since :attr:`origin` (``design.months_since``)."""
        if self.kind == "piecewise":
            return segment_months(months, np.asarray(self.knots))
        stamps = pd.to_datetime(dates).to_numpy(dtype="datetime64[ns]")
        bounds = np.asarray([np.datetime64(s, "ns") for s in self.starts])
        group = np.searchsorted(bounds, stamps, side="right") - 1
        group = np.maximum(group, 0)          # before the first period: the reference
        out = (group[:, None] == np.arange(1, len(bounds))[None, :]).astype(float)
        out[np.isnat(stamps)] = np.nan
        return out

    def formulas(self, months: str, date: str) -> list[str]:
        """Spreadsheet formulas of the columns for one date: ``months`` is a cell (or
        expression) holding the months since the origin, ``date`` the date cell."""
        if self.kind == "piecewise":
            k = [repr(float(v)) for v in self.knots]
            if not k:
                return [f"={months}"]
            out = [f"=MIN({months},{k[0]})"]
            out += [f"=MAX(MIN({months},{k[j]}),{k[j - 1]})-{k[j - 1]}" for j in range(1, len(k))]
            out.append(f"=MAX({months}-{k[-1]},0)")
            return out
        days = [f"DATE({s.year},{s.month},{s.day})" for s in self.starts]
        out = []
        for g in range(1, len(days)):
            if g + 1 < len(days):
                out.append(f"=IF({date}>={days[g]},IF({date}<{days[g + 1]},1,0),0)")
            else:
                out.append(f"=IF({date}>={days[g]},1,0)")
        return out


def segment_months(months: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Months spent in each segment between ``knots`` (months since the origin): an
    n × (len(knots) + 1) block whose row sums are the months themselves."""
    m = np.asarray(months, dtype=float)
    if not len(knots):
        return m[:, None].copy()
    lo = np.concatenate([[-np.inf], knots])
    hi = np.concatenate([knots, [np.inf]])
    base = np.concatenate([[0.0], knots])
    return np.clip(m[:, None], lo[None, :], hi[None, :]) - base[None, :]


def build_trend(spec, dates: pd.Series, origin: pd.Timestamp) -> TrendBasis | None:
    """The trend basis of the fitting sales' ``dates`` by ``spec.trend``; None for linear."""
    if spec.trend == "linear":
        return None
    d = pd.to_datetime(dates).dropna().sort_values().to_numpy(dtype="datetime64[ns]")
    if spec.trend == "piecewise":
        return _piecewise(spec, d, origin)
    return _periods(spec, d, origin)


def _month_start(ts) -> pd.Timestamp:
    ts = pd.Timestamp(ts)
    return pd.Timestamp(ts.year, ts.month, 1)


def _period_label(start: pd.Timestamp, unit: str) -> str:
    if unit == "quarter":
        return f"{start.year}-Q{(start.month - 1) // 3 + 1}"
    return f"{start.year}-{start.month:02d}"


def _piecewise(spec, d: np.ndarray, origin: pd.Timestamp) -> TrendBasis:
    from plumbrule.model.design import months_since
    first, last = pd.Timestamp(d[0]), pd.Timestamp(d[-1])
    knots_set = spec.trend_knots if spec.trend_knots is not None else DEFAULT_EVERY
    if isinstance(knots_set, int):
        base = _month_start(first)
        starts = []
        k = 1
        while True:
            s = base + pd.DateOffset(months=k * knots_set)
            if s >= last:
                break
            starts.append(pd.Timestamp(s))
            k += 1
    else:
        starts = [pd.Timestamp(x) for x in knots_set]
        outside = [s for s in starts if not first < s < last]
        if outside:
            raise SpecError(f"Setting 'trend_knots': {outside[0].date()} is not between the "
                            f"first and last sale used ({first.date()} to {last.date()}). "
                            "Give knots inside the sale dates.", setting="trend_knots")
    bounds = np.asarray([np.datetime64(s, "ns") for s in starts], dtype="datetime64[ns]")
    counts = np.bincount(np.searchsorted(bounds, d, side="right"), minlength=len(starts) + 1)
    keep, merges = _merge_small(list(counts), [s.date().isoformat() for s in starts],
                                spec.min_period_sales, "segment")
    starts = [starts[i - 1] for i in keep[1:]]
    knots = tuple(float(v) for v in months_since(pd.Series(starts, dtype="datetime64[ns]"),
                                                 origin))
    iso = [s.date().isoformat() for s in starts]
    if not iso:
        labels = ["whole period"]
    else:
        labels = [f"to {iso[0]}"] + [f"{a} to {b}" for a, b in zip(iso, iso[1:], strict=False)]
        labels.append(f"from {iso[-1]}")
    return TrendBasis("piecewise", spec.date_column, origin, tuple(starts), knots,
                      tuple(labels), tuple(merges))


def _periods(spec, d: np.ndarray, origin: pd.Timestamp) -> TrendBasis:
    unit = spec.trend_period
    freq = "Q" if unit == "quarter" else "M"
    per = pd.PeriodIndex(pd.DatetimeIndex(d), freq=freq)
    counts = per.value_counts().sort_index()
    starts = [p.start_time for p in counts.index]
    labels = [_period_label(s, unit) for s in starts]
    keep, merges = _merge_small(list(counts.to_numpy()), labels, spec.min_period_sales, unit)
    # a group runs from its first period's start to the next kept group's start
    ends = keep[1:] + [len(starts)]
    group_labels = [labels[a] if b - a == 1 else f"{labels[a]} to {labels[b - 1]}"
                    for a, b in zip(keep, ends, strict=False)]
    if len(keep) < 2:
        raise SpecError(f"Setting 'trend': the sales used span one {unit} (or too few sales "
                        f"per {unit} to compare, min_period_sales {spec.min_period_sales}), so "
                        "a periods trend has nothing to compare. Use trend linear, or lower "
                        "min_period_sales.", setting="trend")
    return TrendBasis("periods", spec.date_column, origin, tuple(starts[i] for i in keep), (),
                      tuple(group_labels), tuple(merges))


def _merge_small(counts: list[int], labels: list[str], minimum: int, noun: str
                 ) -> tuple[list[int], list[str]]:
    """Contiguous groups of the items (periods or segments, in date order) with at least
    ``minimum`` sales each: the smallest group below it joins its smaller neighbour (the
    earlier on a tie) until none is left or one group remains. Returns (the first item of
    each group, one sentence per merge)."""
    groups = [[i] for i in range(len(counts))]
    sizes = [int(c) for c in counts]
    merges: list[str] = []
    # a loop over periods (tens), never over sales
    while len(groups) > 1 and min(sizes) < minimum:
        i = int(np.argmin(sizes))
        left = sizes[i - 1] if i > 0 else None
        right = sizes[i + 1] if i + 1 < len(groups) else None
        j = i - 1 if right is None or (left is not None and left <= right) else i + 1
        a, b = min(i, j), max(i, j)
        what = _group_name(groups[i], labels, noun)
        merges.append(f"{noun} {what} ({sizes[i]} sales) merged with "
                      f"{_group_name(groups[j], labels, noun)} ({sizes[j]} sales)")
        groups[a:b + 1] = [groups[a] + groups[b]]
        sizes[a:b + 1] = [sizes[a] + sizes[b]]
    return [g[0] for g in groups], merges


def _group_name(group: list[int], labels: list[str], noun: str) -> str:
    if noun == "segment":      # segment i starts at knot i-1; the first has no knot
        first = "the start" if group[0] == 0 else labels[group[0] - 1]
        return f"from {first}"
    return labels[group[0]] if len(group) == 1 else f"{labels[group[0]]} to {labels[group[-1]]}"

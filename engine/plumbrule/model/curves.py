"""Effects that bend: a numeric predictor's design columns, fixed at fit time.

Three shapes (setting ``curves``, e.g. ``Age=spline:4; Living area=square; Lot size=bands:
5000,10000,20000``):

- ``spline:N``: a restricted (natural) cubic spline with N knots (3 to 7) at Harrell's
  default quantiles of the fitting sales' values (Regression Modeling Strategies, 2nd ed.,
  2015, §2.4.6: e.g. 0.05, 0.35, 0.65, 0.95 for four knots). The columns are x and the
  N − 2 truncated-power terms of Stone and Koo (1985) in the form of Durrleman and Simon
  (1989), scaled as Harrell does by (t_N − t_1)² so they keep the units of x:

      C_j(x) = [(x − t_j)₊³ − (x − t_{N−1})₊³ (t_N − t_j)/(t_N − t_{N−1})
                + (x − t_N)₊³ (t_{N−1} − t_j)/(t_N − t_{N−1})] / (t_N − t_1)²,

  j = 1 … N − 2: cubic between the knots, linear beyond the outer ones;
- ``square``: x and x²;
- ``bands:b1,b2,…``: one indicator per band [b_i, b_{i+1}) (the lowest band open below,
  the highest open above) except the reference band, the one holding the median sale.

The basis is captured in :class:`CurveBasis` (knots, breaks, reference) so subjects and
comparables get exactly the columns the sales had.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plumbrule.errors import SettingError

# Harrell (2015), Regression Modeling Strategies 2nd ed., §2.4.6, Table 2.3: default knot
# quantiles for 3..7 knots.
KNOT_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
}
SMALL_SAMPLE = 100   # below it the outer knots are the 5th smallest / largest value (Harrell's
#                      rcspline.eval; from memory)
_ROWS = 1 << 14      # rows per block of rcs_into: 4 scratch rows of 128 KiB stay in a
#                      core's L2 cache


@dataclass(frozen=True)
class CurveBasis:
    """One predictor's curve: ``kind`` spline | square | bands; ``knots`` (spline, in the
    predictor's units), ``breaks`` (bands, ascending), ``reference`` (bands: the index of
    the reference band; spline/square: unused, 0), ``centre`` the reference value of the
    effect table (the median of the fitting sales' values)."""

    kind: str
    column: str
    knots: tuple[float, ...] = ()
    breaks: tuple[float, ...] = ()
    reference: int = 0
    centre: float = 0.0

    @property
    def band_labels(self) -> list[str]:
        b = [f"{v:,.10g}" for v in self.breaks]
        return ([f"below {b[0]}"] + [f"{lo} to under {hi}" for lo, hi in zip(b, b[1:],
                                                                              strict=False)]
                + [f"{b[-1]} and above"])

    @property
    def names(self) -> list[str]:
        """The design terms' names, in column order."""
        c = self.column
        if self.kind == "spline":
            return [c] + [f"{c} (spline {j})" for j in range(1, len(self.knots) - 1)]
        if self.kind == "square":
            return [c, f"{c}²"]
        labels = self.band_labels
        return [f"{c}: {lab}" for i, lab in enumerate(labels) if i != self.reference]

    def columns(self, x: np.ndarray) -> np.ndarray:
        """n × p design block (float; NaN rows where x is NaN)."""
        x = np.asarray(x, dtype=float)
        if self.kind == "spline":
            return np.column_stack([x, rcs_terms(x, np.asarray(self.knots))])
        if self.kind == "square":
            return np.column_stack([x, x * x])
        band = np.searchsorted(np.asarray(self.breaks), x, side="right")
        keep = [i for i in range(len(self.breaks) + 1) if i != self.reference]
        out = (band[:, None] == np.asarray(keep)[None, :]).astype(float)
        out[np.isnan(x)] = np.nan
        return out

    def formulas(self, x: str) -> list[str]:
        """Spreadsheet formulas of the columns for one value held in cell ``x``: sums of
        truncated cubes MAX(x−t,0)^3 (no unary minus: spreadsheets bind it before ^)."""
        if self.kind == "square":
            return [f"={x}", f"={x}^2"]
        if self.kind == "spline":
            t = self.knots
            k = len(t)
            d = repr(float((t[-1] - t[0]) ** 2))
            cube = lambda v: f"MAX({x}-{_num(v)},0)^3"   # noqa: E731
            out = [f"={x}"]
            for j in range(k - 2):
                a = repr(float((t[-1] - t[j]) / (t[-1] - t[-2])))
                c = repr(float((t[-2] - t[j]) / (t[-1] - t[-2])))
                out.append(f"=({cube(t[j])}-{cube(t[-2])}*{a}+{cube(t[-1])}*{c})/{d}")
            return out
        b = [_num(v) for v in self.breaks]
        out = []
        for i in range(len(b) + 1):
            if i == self.reference:
                continue
            if i == 0:
                out.append(f"=IF({x}<{b[0]},1,0)")
            elif i == len(b):
                out.append(f"=IF({x}>={b[-1]},1,0)")
            else:
                out.append(f"=IF({x}>={b[i - 1]},IF({x}<{b[i]},1,0),0)")
        return out

    def describe(self) -> str:
        """The curve in words, for notes and sheets."""
        if self.kind == "spline":
            knots = ", ".join(f"{v:,.4g}" for v in self.knots)
            return f"restricted cubic spline, {len(self.knots)} knots at {knots}"
        if self.kind == "square":
            return "square term (value and value²)"
        return (f"bands between {', '.join(f'{v:,.10g}' for v in self.breaks)} "
                f"(reference: {self.band_labels[self.reference]})")


def _num(v: float) -> str:
    text = repr(float(v))
    return f"({text})" if v < 0 else text


def rcs_terms(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """The N − 2 non-linear columns of a restricted cubic spline with ``knots`` (N ≥ 3) at
    ``x``, in Harrell's scaling (units of x); see the module docstring."""
    x = np.asarray(x, dtype=float)
    out = np.empty((len(x), len(knots) - 2))
    rcs_into(x, knots, out)
    return out


def rcs_into(x: np.ndarray, knots: np.ndarray, out: np.ndarray) -> None:
    """Write :func:`rcs_terms` ``(x, knots)`` into ``out`` (n × N − 2, any layout), bit for
    bit the same numbers: one vector operation at a time, in place, over blocks of
    :data:`_ROWS` rows so the scratch stays in the core's cache (x 1-D)."""
    x = np.asarray(x, dtype=float)
    t = np.asarray(knots, dtype=float)
    k = len(t)
    gap = t[-1] - t[-2]
    scale = (t[-1] - t[0]) ** 2
    scratch = np.empty((4, min(len(x), _ROWS)))

    def cube(xs, v, d, dst):
        np.subtract(xs, v, out=d)
        np.maximum(d, 0.0, out=d)
        np.multiply(d, d, out=dst)
        dst *= d                    # products, not a float power: several times faster
        return dst

    for lo in range(0, len(x), _ROWS):
        xs = x[lo:lo + _ROWS]
        d, e, last, outer = scratch[:, :len(xs)]
        cube(xs, t[-2], d, last)
        cube(xs, t[-1], d, outer)
        for j in range(k - 2):
            o = out[lo:lo + len(xs), j]
            cube(xs, t[j], d, o)
            np.multiply(last, t[-1] - t[j], out=e)
            e /= gap
            o -= e
            np.multiply(outer, t[-2] - t[j], out=e)
            e /= gap
            o += e
            o /= scale


def default_knots(values: np.ndarray, n_knots: int, column: str) -> tuple[float, ...]:
    """Harrell's default knots of ``values`` (finite) for ``n_knots``: the quantiles of
    :data:`KNOT_QUANTILES` (numpy's default, linear interpolation, as R's quantile type 7),
    the outer ones the 5th smallest and largest value below 100 sales; taken over the
    distinct values when ties make two knots equal. Raises :class:`SettingError` when the
    values are too few or too repetitive for that many knots."""
    v = np.sort(np.asarray(values, dtype=float))
    p = np.asarray(KNOT_QUANTILES[n_knots])

    def at(w):
        knots = np.quantile(w, p)
        if len(w) < SMALL_SAMPLE and len(w) >= 10:
            knots[0], knots[-1] = w[4], w[-5]
        return knots

    knots = at(v)
    if not np.all(np.diff(knots) > 0):
        knots = at(np.unique(v))
    distinct = len(np.unique(v))
    if distinct < n_knots + 2 or not np.all(np.diff(knots) > 0):
        raise SettingError(f"Setting 'curves': '{column}' has {distinct} distinct values in the "
                           f"sales used, too few for a spline with {n_knots} knots. Use fewer "
                           "knots (spline:3), square, or bands.", setting="curves",
                           column=column)
    return tuple(float(k) for k in knots)


def build_curve(kind: str, params: tuple, column: str, values: np.ndarray) -> CurveBasis:
    """The curve of ``column`` from the fitting sales' ``values`` (finite floats)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    centre = float(np.median(v)) if len(v) else 0.0
    if kind == "spline":
        return CurveBasis("spline", column, knots=default_knots(v, int(params[0]), column),
                          centre=centre)
    if kind == "square":
        return CurveBasis("square", column, centre=centre)
    breaks = tuple(float(b) for b in params)
    counts = np.bincount(np.searchsorted(np.asarray(breaks), v, side="right"),
                         minlength=len(breaks) + 1)
    basis = CurveBasis("bands", column, breaks=breaks, centre=centre)
    empty = [basis.band_labels[i] for i in np.flatnonzero(counts == 0)]
    if empty:
        raise SettingError(f"Setting 'curves': band '{empty[0]}' of '{column}' holds no sale "
                           f"(values run {v.min():,.10g} to {v.max():,.10g}). Give break points "
                           "inside the sales' values.", setting="curves", column=column)
    ref = int(np.searchsorted(np.asarray(breaks), centre, side="right"))
    return CurveBasis("bands", column, breaks=breaks, reference=ref, centre=centre)

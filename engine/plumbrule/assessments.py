"""The assessments already on the roll: their ratio study, by value range, and sales chasing.

The assessor's own values are judged with the model's yardstick (:mod:`plumbrule.ratios`:
the same measures, intervals, targets and verdicts, IAAO Standard on Ratio Studies 2013),
ratio = assessed value / sale price. The assessed column is never a predictor.

Value ranges are cut on the *estimate* being judged (the assessed value in the assessed
study, the model's estimate in the model's): strata cut on the sale price put the sales
whose price came out high by chance in the top range, so their ratios read low there
and high in the bottom range even for a flawless roll — the same errors-in-variables
pull that PRD and PRB show (see :func:`plumbrule.ratios.value_slope`).

Sales chasing (IAAO Standard on Ratio Studies, 2013 edition, its appendix on detecting
sales chasing; the list below from memory of that appendix): the values of parcels that
sold moved toward their prices while those of parcels that did not sell stayed put. The
tests here: (1) the change prior → current of sold against unsold parcels (medians, and
a Mann–Whitney rank test of the two distributions), which needs the unsold parcels of
the roll; (2) the ratio study of the prior assessments against the same prices beside
the current one — a COD that falls far between the two while the level hardly moves
is the pattern chasing leaves; (3) a current COD below 5, which the standard says
points to chasing or to sales unlike the parcels valued.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule import ratios
from plumbrule.numbers import written

ASSESSED = "assessed"
ESTIMATE_COLUMNS = ["row", "sale_price", "assessed", "ratio", "value_range", "stratum",
                    "sale_date", "in_study"]
CHASING_COLUMNS = ["test", "sold", "unsold", "difference", "p_value", "verdict", "note"]


def value_breaks(values: np.ndarray, strata: int | tuple[float, ...]) -> np.ndarray:
    """Inner break points of the value ranges: ``strata`` equal-count groups (quantiles
    of ``values``, numpy's default rule) or the break points given, sorted."""
    if isinstance(strata, int):
        v = np.asarray(values, float)
        if len(v) == 0:
            return np.empty(0)
        return np.unique(_round3(np.quantile(v, np.arange(1, strata) / strata)))
    return np.unique(np.asarray(strata, float))


def _round3(b: np.ndarray) -> np.ndarray:
    """Break points to 3 significant figures (124,227.85 → 124,000): a reader's break; the
    groups stay near equal in count."""
    b = np.asarray(b, float)
    with np.errstate(divide="ignore"):
        digits = np.where(b > 0, np.floor(np.log10(np.abs(np.where(b > 0, b, 1.0)))), 0.0)
    scale = 10.0 ** (digits - 2)
    return np.round(b / scale) * scale


def value_labels(values: np.ndarray, breaks: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """(group number per value, label per group): group g holds breaks[g−1] < v ≤ breaks[g]."""
    g = np.searchsorted(breaks, np.asarray(values, float), side="left")
    edges = [written(b) for b in breaks]
    labels = []
    for j in range(len(breaks) + 1):
        if j == 0:
            text = f"up to {edges[0]}" if len(edges) else "all values"
        elif j == len(breaks):
            text = f"above {edges[-1]}"
        else:
            text = f"{edges[j - 1]} to {edges[j]}"
        labels.append(f"{j + 1} of {len(breaks) + 1}: {text}")
    return g, labels


def value_range_records(estimate: np.ndarray, price: np.ndarray, sample: str,
                        strata: int | tuple[float, ...], targets: ratios.RatioTargets,
                        level: float) -> list[dict]:
    """One ratio-study record per value range of ``estimate`` (the values judged)."""
    breaks = value_breaks(estimate, strata)
    g, labels = value_labels(estimate, breaks)
    recs = []
    nan = float("nan")
    for j, label in enumerate(labels):
        sel = g == j
        m = ratios.measures(estimate[sel], price[sel], level)
        # PRB and the value slope are shown but not judged inside a range: cut on the value
        # itself, a range holds too little spread of value for a slope to mean anything (a
        # stray slope of ±0.5 is common); vertical equity is read across the ranges
        judged = {**m, "prb": nan, "value_slope": nan}
        recs.append({"sample": sample, "stratum": f"value range {label}", **m,
                     **ratios.verdicts(judged, targets)})
    return recs


def with_value_ranges(study: pd.DataFrame, estimates: pd.DataFrame,
                      strata: int | tuple[float, ...], targets: ratios.RatioTargets,
                      level: float) -> pd.DataFrame:
    """A ratio study (as :func:`plumbrule.ratios.ratio_study` returns) with a record per
    value range of its estimates appended."""
    if not len(study):
        return study
    keep = estimates["in_study"].to_numpy(bool)
    est = estimates["estimate"].to_numpy(float)[keep]
    price = estimates["sale_price"].to_numpy(float)[keep]
    recs = value_range_records(est, price, study["sample"].iloc[0], strata, targets, level)
    return pd.concat([study, pd.DataFrame(recs)], ignore_index=True).reindex(
        columns=ratios.STUDY_COLUMNS)


def assessed_estimates(rows, price, assessed, stratum=None, sale_date=None,
                       strata: int | tuple[float, ...] = 4) -> pd.DataFrame:
    """One row per sale: row, sale_price, assessed, ratio (assessed / sale price),
    value_range (the label of its range of assessed value), stratum, sale_date, in_study
    (False where the assessed value is blank or not positive, or the price not positive)."""
    est = ratios.estimates_table(rows, price, assessed, stratum)
    keep = est["in_study"].to_numpy(bool)
    a = est["estimate"].to_numpy(float)
    breaks = value_breaks(a[keep], strata)
    g, labels = value_labels(np.where(keep, a, 0.0), breaks)
    vr = np.where(keep, np.asarray(labels, dtype=object)[g], None)
    n = len(est)
    return pd.DataFrame({
        "row": est["row"], "sale_price": est["sale_price"], "assessed": a,
        "ratio": est["ratio"], "value_range": vr, "stratum": est["stratum"],
        "sale_date": (pd.Series(pd.NaT, index=range(n), dtype="datetime64[ns]")
                      if sale_date is None else pd.to_datetime(np.asarray(sale_date))),
        "in_study": keep}, columns=ESTIMATE_COLUMNS)


def assessed_study(estimates: pd.DataFrame, targets: ratios.RatioTargets | None = None,
                   level: float = 0.95, by: str | None = None,
                   strata: int | tuple[float, ...] = 4,
                   model_rows: np.ndarray | None = None) -> pd.DataFrame:
    """ratio_study records whose sample is 'assessed': all sales with an assessed value,
    one per ``by`` stratum, one per value range, and (given ``model_rows``, the sheet rows
    of the model's own study) one for those same sales, to read the two side by side.

    ``estimates`` is an :func:`assessed_estimates` table. The 'all' record's note says how
    many sales were left out for a blank or unusable assessed value."""
    targets = targets or ratios.RatioTargets()
    frame = estimates.rename(columns={"assessed": "estimate"})
    study = ratios.ratio_study(frame, ASSESSED, targets, level, by)
    study = with_value_ranges(study, frame, strata, targets, level)
    keep = (frame["in_study"].to_numpy(bool) & frame["row"].isin(model_rows).to_numpy()
            if model_rows is not None else np.zeros(len(frame), bool))
    if keep.any() and keep.sum() < frame["in_study"].sum():   # not simply all of them again
        m = ratios.measures(frame["estimate"].to_numpy(float)[keep],
                            frame["sale_price"].to_numpy(float)[keep], level)
        rec = {"sample": ASSESSED, "stratum": "the sales of the model's study", **m,
               **ratios.verdicts(m, targets)}
        study = pd.concat([study, pd.DataFrame([rec])], ignore_index=True).reindex(
            columns=ratios.STUDY_COLUMNS)
    left_out = int((~frame["in_study"]).sum())
    if left_out:
        study.loc[0, "note"] = (f"{left_out} sale{'s' if left_out != 1 else ''} without a "
                                "usable assessed value (blank, or not positive) left out. "
                                + str(study.loc[0, "note"]))
    return study


# --- sales chasing -------------------------------------------------------------------

def mann_whitney(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    """(U of ``a``, two-sided p-value): the normal approximation with the tie correction
    and a continuity correction of ½ (Mann & Whitney 1947; the tie term as in Lehmann,
    *Nonparametrics*, 1975; from memory). Exact enough for the hundreds of sales and
    thousands of parcels a roll has; NaN p-value when either group is empty."""
    from plumbrule.numeric.distributions import norm_sf
    a, b = np.asarray(a, float), np.asarray(b, float)
    n1, n2 = len(a), len(b)
    if n1 == 0 or n2 == 0:
        return float("nan"), float("nan")
    both = np.concatenate([a, b])
    ranks = pd.Series(both).rank(method="average").to_numpy()   # mid-ranks for ties
    u = float(ranks[:n1].sum() - n1 * (n1 + 1) / 2.0)
    _, counts = np.unique(both, return_counts=True)
    n = n1 + n2
    ties = float(np.sum(counts.astype(float) ** 3 - counts))
    var = n1 * n2 / 12.0 * ((n + 1) - ties / (n * (n - 1)))
    if not var > 0:
        return u, float("nan")
    d = u - n1 * n2 / 2.0
    zscore = (abs(d) - 0.5) / np.sqrt(var)
    return u, float(min(1.0, 2.0 * norm_sf(zscore)))


def _change(current: np.ndarray, prior: np.ndarray) -> np.ndarray:
    """Proportional change prior → current of the parcels with both values positive."""
    c, p = np.asarray(current, float), np.asarray(prior, float)
    ok = np.isfinite(c) & np.isfinite(p) & (c > 0) & (p > 0)
    return c[ok] / p[ok] - 1.0


def chasing_table(price: np.ndarray, current: np.ndarray, prior: np.ndarray,
                  unsold_current: np.ndarray | None = None,
                  unsold_prior: np.ndarray | None = None,
                  targets: ratios.RatioTargets | None = None,
                  alpha: float = 0.05) -> pd.DataFrame:
    """sales_chasing: one row per test (see the module docstring), columns test, sold,
    unsold, difference, p_value, verdict, note. Changes are proportions (0.05 = +5 %);
    CODs percent. Without the unsold parcels the comparison row says it needs the roll.

    ``price``, ``current``, ``prior``: the sales (blank assessed values as NaN, left out
    test by test); ``unsold_*``: the roll's parcels that did not sell."""
    targets = targets or ratios.RatioTargets()
    price = np.asarray(price, float)
    current, prior = np.asarray(current, float), np.asarray(prior, float)
    sold = _change(current, prior)
    rows = []
    med_sold = float(np.median(sold)) if len(sold) else float("nan")
    if unsold_current is None or unsold_prior is None:
        rows.append({"test": "median change prior to current: sold vs unsold parcels",
                     "sold": med_sold, "unsold": np.nan, "difference": np.nan,
                     "p_value": np.nan, "verdict": "n/a",
                     "note": f"{len(sold)} sold parcels have both values. Comparing them with "
                             "the parcels that did not sell needs the roll (the unsold "
                             "parcels with their current and prior assessments)."})
    else:
        unsold = _change(unsold_current, unsold_prior)
        med_un = float(np.median(unsold)) if len(unsold) else float("nan")
        _, p = mann_whitney(sold, unsold)
        diff = med_sold - med_un
        flag = bool(np.isfinite(p) and p < alpha)
        rows.append({"test": "median change prior to current: sold vs unsold parcels",
                     "sold": med_sold, "unsold": med_un, "difference": diff, "p_value": p,
                     "verdict": "watch" if flag else "ok",
                     "note": (f"{len(sold)} sold and {len(unsold)} unsold parcels. "
                              + (f"The assessments of sold parcels moved "
                                 f"{'more' if diff > 0 else 'less'} than the others' "
                                 f"(Mann–Whitney p {p:.3g} < {alpha:g}): a sign of sales "
                                 "chasing unless the sold parcels differ in kind."
                                 if flag else "The two changes are alike (Mann–Whitney p "
                                 f"{p:.3g}): no sign of chasing in this test."))})
    both = (np.isfinite(current) & np.isfinite(prior) & (current > 0) & (prior > 0)
            & (price > 0))
    now = ratios.measures(current[both], price[both])
    then = ratios.measures(prior[both], price[both])
    drop = then["cod"] - now["cod"]
    # more than halved: our threshold (common practice, no source)
    big = bool(np.isfinite(drop) and then["cod"] > 0 and drop > 0.5 * then["cod"])
    rows.append({"test": "COD of prior vs current assessments, same sales", "sold": now["cod"],
                 "unsold": np.nan, "difference": -drop, "p_value": np.nan,
                 "verdict": "watch" if big else "ok",
                 "note": f"{int(both.sum())} sales with both values: COD {then['cod']:.1f} "
                         f"on the prior roll, {now['cod']:.1f} on the current; median ratio "
                         f"{then['median_ratio']:.3f} then, {now['median_ratio']:.3f} now. "
                         + ("The COD more than halved on the same sales: the pattern sales "
                            "chasing leaves, unless the roll was revalued throughout; compare "
                            "with unsold parcels." if big else "No sharp gain in uniformity.")})
    cur_ok = np.isfinite(current) & (current > 0) & (price > 0)
    c = ratios.cod(current[cur_ok] / price[cur_ok]) if cur_ok.any() else float("nan")
    low = bool(np.isfinite(c) and c < targets.cod_min)
    rows.append({"test": f"current COD below {targets.cod_min:g}", "sold": c, "unsold": np.nan,
                 "difference": np.nan, "p_value": np.nan, "verdict": "watch" if low else "ok",
                 "note": (f"COD {c:.1f} is below {targets.cod_min:g}: ratios this even can mean "
                          "sales chasing or sales unlike the parcels valued (IAAO Standard on "
                          "Ratio Studies, 2013)." if low else
                          f"COD {c:.1f}: not suspiciously low.")})
    return pd.DataFrame(rows, columns=CHASING_COLUMNS)


def chasing_with_roll(analysis, roll) -> pd.DataFrame:
    """sales_chasing with the roll's unsold parcels: ``roll`` (a DataFrame, SheetTable or
    path, one row per parcel) carries the ID column and the assessed and prior columns under
    the sales' headers; a parcel whose ID is among the sales' IDs counts as sold (its values
    are taken from the sales), every other as unsold. Needs id_column; parcels with a blank
    value are left out of the change test, as sales are.

    For ``plumbrule value DATA --roll ROLL`` to call; returns the table
    :func:`chasing_table` returns."""
    from plumbrule import intake
    from plumbrule.analysis import as_table
    from plumbrule.errors import SettingError
    from plumbrule.model.spec import match_column
    from plumbrule.sales import side_numbers
    spec = analysis.spec
    if not (spec.assessed_column and spec.prior_assessed_column):
        raise SettingError("Sales chasing needs assessed_column and prior_assessed_column: name "
                           "the current and the previous roll's value columns.",
                           setting="prior_assessed_column")
    if spec.id_column is None or analysis.ids is None:
        raise SettingError("Comparing sold with unsold parcels needs id_column: name the "
                           "column holding each parcel's ID in the sales and the roll.",
                           setting="id_column")
    table = as_table(roll)
    cols = {name: match_column(getattr(spec, name), table.columns, name)
            for name in ("id_column", "assessed_column", "prior_assessed_column")}
    ids, _ = intake.to_labels(table.frame[cols["id_column"]], cols["id_column"])
    unsold = ~ids.isin(set(analysis.ids.astype(str))).to_numpy()
    cur, _ = intake.to_numbers(table.frame[cols["assessed_column"]], cols["assessed_column"])
    pri, _ = intake.to_numbers(table.frame[cols["prior_assessed_column"]],
                               cols["prior_assessed_column"])
    est = analysis.tables.assessed_estimates
    rows = pd.Index(est["row"].to_numpy())
    prior = side_numbers(analysis.table, spec.prior_assessed_column, rows)
    return chasing_table(est["sale_price"].to_numpy(float), est["assessed"].to_numpy(float),
                         prior, cur.to_numpy(float)[unsold], pri.to_numpy(float)[unsold],
                         ratios.RatioTargets.for_class(analysis.settings.property_class))

"""Monte Carlo coverage study: do plumbrule's intervals cover what they claim, and how often
do the ratio study's verdicts raise a false alarm on a correctly specified model?

A hedonic market of our own invention (living area, lot size, age, a condition category, a
neighbourhood category, sale date over three years, a market trend) is simulated many times.
Each replication draws ``--sales`` sales, runs ``plumbrule.analysis.analyze`` with a 30 %
holdout (so the ratio study is out of sample) and values ``SUBJECTS`` fresh subjects with
``plumbrule.valuation.estimates.valuate`` at a fixed valuation date. Figures per scenario:

* mean CI     share of subjects whose CI of the mean contains the true E[price | x] on the
              price scale (levels: x'β; log model: exp(x'β)·E[e^u | x]; n/a for t errors in
              a log model, whose E[e^u] is infinite).
* exp(x'b) CI log models only: the same interval divided by the retransformation factor (what
              ``retransform: median`` reports) against exp(x'β), the median price when the log
              errors are symmetric.
* PI          share of subjects whose PI contains one fresh sale drawn at the subject's x.
* PI noisy 1/4  heteroscedastic scenarios only: PI coverage for the subjects whose error SD is
              in the market's upper quartile (the PI uses the pooled s², so its coverage
              averaged over subjects can look right while it is short where the noise is).
* median CI   share of replications whose ratio-study interval for the median ratio contains
              the true median ratio. True value: the median of estimate/price over a large
              fresh sample of the market (``FRESH`` sales at their own sale dates), valued by
              this replication's fitted model, i.e. the population median given the fit, which
              is what the holdout's order-statistic interval is an interval for.
* PRB CI      the PRB interval against the "true" PRB. PRB is a least-squares slope, not a
              parameter of the market: we take as true value the same regression fitted to the
              large fresh sample (the population projection slope given the fit). It is not
              0 on a correct model (the value proxy contains the sale price, whose error also
              sits in the ratio). For t errors it is n/a: in a log model the ratio ∝ e^{−u}
              has no variance; in a levels model the t tails reach sale prices near 0 whose
              ratios dominate any fresh sample, so the slope has no stable value.
* PRB excl 0  share of replications whose PRB interval excludes 0 (a naive test of "no
              price-related bias").
* verdicts    share of replications whose verdict is not "ok", for every ``*_verdict``
              column of the ratio study table (median, COD, PRD, PRB and any added later).
              On a correct model, a verdict that is not "ok" is a false alarm.

Portfolio section (valuation/portfolio.py, what PLUMB_TOTAL and ``value --json`` portfolio
report): each replication fits the model to ``--sales`` sales (no holdout) and values a
portfolio of ``PORTFOLIO`` fresh subjects at the valuation date. Figures per scenario:

* total CI    share of replications whose CI of the total contains the true total of the
              means Σ E[price | xᵢ] (price model: exact t; log model: delta method)
* total PI    share whose PI of the total contains the total of one fresh sale at each xᵢ
* naive CI / naive PI   the same for the sum of the subjects' own interval bounds (what a
              spreadsheet user gets by adding the intervals), beside the width ratio
              naive / honest
* indep. CI   the interval that treats the estimates as independent (√Σ se²), which ignores
              that they share one set of coefficients

Standard errors: binomial √(p(1 − p)/reps) for one-per-replication figures; for subject
figures, the standard error of the mean of the per-replication shares (subjects valued by the
same fit are not independent; with one subject it is the binomial one).

Run: python benchmarks/coverage.py [--reps N] [--seed S] [--sales N] [--only TEXT]
     [--section all|subjects|portfolio] [--portfolio-reps N]
"""

from __future__ import annotations

import argparse
import sys
import time
import zlib
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))

# --- the market ------------------------------------------------------------------------

START = np.datetime64("2022-01-01")
DAYS = 1096                                 # sales over 2022-01-01 .. 2024-12-31
VALUATION_DATE = "2024-06-30"
VALUATION_DAY = int((np.datetime64(VALUATION_DATE) - START).astype(int))
MONTH = 365.2425 / 12
CONDITIONS = ("Poor", "Fair", "Average", "Good", "Excellent")
CONDITION_SHARE = (0.05, 0.15, 0.45, 0.25, 0.10)
AREAS = ("Brackenside", "Millholt", "Quarry End", "Salterns", "Tollbridge")
AREA_SHARE = (0.30, 0.25, 0.20, 0.15, 0.10)

# levels model: price = b0 + b·area + b·lot + b·age + condition + area + trend·months + u
LEVELS = dict(b0=80_000.0, area=120.0, lot=2.0, age=-500.0, month=1_000.0, sigma=25_000.0,
              condition=np.array([-40e3, -20e3, 0.0, 20e3, 45e3]),
              area_effect=np.array([0.0, 25e3, -15e3, 60e3, 10e3]))
# log model: log price = b0 + b·log area + b·log lot + b·age + condition + area + trend + u
LOG = dict(b0=5.5, area=0.75, lot=0.12, age=-0.004, month=0.004, sigma=0.12,
           condition=np.array([-0.15, -0.07, 0.0, 0.06, 0.13]),
           area_effect=np.array([0.0, 0.10, -0.07, 0.22, 0.04]))
GAMMA_SHAPE = 2.0        # skewness 2/√2 ≈ 1.41
T_DF = 4.0               # heavy tails: finite variance, infinite fourth moment
HETERO_CV = 0.11         # levels: error SD proportional to the mean price
SUBJECTS = 10            # subjects valued per replication
FRESH = 20_000           # fresh sales per replication for the ratio-study truths
HOLDOUT = 0.3


def draw_features(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """n properties: area and lot (sq ft, correlated lognormals), age (years), condition and
    neighbourhood (level indices) and the sale day (days since START)."""
    z = rng.standard_normal((n, 2))
    lot_z = 0.4 * z[:, 0] + np.sqrt(1 - 0.4 ** 2) * z[:, 1]
    return {"area": np.round(1800.0 * np.exp(0.3 * z[:, 0])),
            "lot": np.round(8000.0 * np.exp(0.5 * lot_z)),
            "age": rng.integers(0, 81, n).astype(float),
            "condition": rng.choice(len(CONDITIONS), n, p=CONDITION_SHARE),
            "hood": rng.choice(len(AREAS), n, p=AREA_SHARE),
            "day": rng.integers(0, DAYS, n)}


def structural(f: dict[str, np.ndarray], log: bool) -> np.ndarray:
    """x'β: the mean price (levels) or the mean log price (log model)."""
    p = LOG if log else LEVELS
    area, lot = (np.log(f["area"]), np.log(f["lot"])) if log else (f["area"], f["lot"])
    return (p["b0"] + p["area"] * area + p["lot"] * lot + p["age"] * f["age"]
            + p["condition"][f["condition"]] + p["area_effect"][f["hood"]]
            + p["month"] * f["day"] / MONTH)


def error_sd(f: dict[str, np.ndarray], log: bool, kind: str,
             noise: float = 1.0) -> np.ndarray | float:
    """The error SD per property, times ``noise``: constant, or varying with x in the 'hetero'
    scenarios (levels: proportional to the mean price; log model: rising with age, 0.05 to
    0.19)."""
    if kind != "hetero":
        return noise * (LOG if log else LEVELS)["sigma"]
    return noise * (0.05 + 0.00175 * f["age"] if log else HETERO_CV * structural(f, log))


def draw_errors(rng: np.random.Generator, f: dict[str, np.ndarray], log: bool,
                kind: str, noise: float = 1.0) -> np.ndarray:
    """Mean-zero errors with SD ``error_sd``: normal, centred gamma (right-skewed), scaled t."""
    n, sd = len(f["age"]), error_sd(f, log, kind, noise)
    if kind == "skewed":
        g = rng.gamma(GAMMA_SHAPE, 1.0, n)
        return sd * (g - GAMMA_SHAPE) / np.sqrt(GAMMA_SHAPE)
    if kind == "heavy":
        return sd * rng.standard_t(T_DF, n) * np.sqrt((T_DF - 2) / T_DF)
    return sd * rng.standard_normal(n)


def mean_factor(f: dict[str, np.ndarray], kind: str, noise: float = 1.0) -> np.ndarray | float:
    """E[e^u | x] for the log model (NaN where it is infinite)."""
    sd = error_sd(f, True, kind, noise)
    if kind == "skewed":                    # E[e^{a(G−k)}] = e^{−ak}(1 − a)^{−k}, a = sd/√k
        a = sd / np.sqrt(GAMMA_SHAPE)
        return np.exp(-a * GAMMA_SHAPE) * (1 - a) ** -GAMMA_SHAPE
    if kind == "heavy":                     # the t distribution has no moment generating function
        return np.nan
    return np.exp(np.square(sd) / 2.0)


def true_mean(f: dict[str, np.ndarray], log: bool, kind: str, noise: float = 1.0) -> np.ndarray:
    """E[price | x] on the price scale."""
    eta = structural(f, log)
    return np.exp(eta) * mean_factor(f, kind, noise) if log else eta


def prices(rng: np.random.Generator, f: dict[str, np.ndarray], log: bool, kind: str,
           noise: float = 1.0) -> np.ndarray:
    y = structural(f, log) + draw_errors(rng, f, log, kind, noise)
    return np.exp(y) if log else y


def sales_frame(f: dict[str, np.ndarray], price: np.ndarray | None = None) -> pd.DataFrame:
    """The sales (or subjects, without price and date) as a user's sheet would hold them."""
    cols = {"Living area": f["area"], "Lot size": f["lot"], "Age": f["age"],
            "Condition": np.asarray(CONDITIONS)[f["condition"]],
            "Neighbourhood": np.asarray(AREAS)[f["hood"]]}
    if price is None:
        return pd.DataFrame(cols)
    date = pd.to_datetime(START + f["day"].astype("timedelta64[D]"))
    return pd.DataFrame({"Sale price": price, **cols, "Sale date": date})


def model_settings(log: bool) -> dict:
    base = {"response": "Sale price",
            "predictors": "Living area,Lot size,Age,Condition,Neighbourhood",
            "categorical": "Condition,Neighbourhood", "date_column": "Sale date",
            "holdout": HOLDOUT, "folds": 0, "valuation_date": VALUATION_DATE}
    if log:
        base.update(log_response=True, log_predictors="Living area,Lot size")
    return base


# --- scenarios --------------------------------------------------------------------------

NO_SCREENING = {"trim_percentiles": None, "iqr_fence": None, "influence_screen": False}


@dataclass(frozen=True)
class Scenario:
    name: str
    log: bool
    errors: str                        # normal, skewed, heavy, hetero
    settings: dict = field(default_factory=dict)
    noise: float = 1.0                 # multiplies the error SD


SCENARIOS = [
    Scenario("levels, normal", False, "normal"),
    Scenario("levels, skewed (gamma)", False, "skewed"),
    Scenario("levels, t4", False, "heavy"),
    Scenario("levels, hetero, HC3", False, "hetero", {"robust_se": "HC3"}),
    Scenario("log, normal", True, "normal"),
    Scenario("log, skewed (gamma)", True, "skewed"),
    Scenario("log, t4", True, "heavy"),
    Scenario("log, hetero, HC3", True, "hetero", {"robust_se": "HC3"}),
    # PRB's value proxy carries the sale price's own error: halve the noise to see its share
    Scenario("log, normal, half noise", True, "normal", noise=0.5),
    # The engine's defaults switch every screening rule off; the demo trims at 1,99.
    Scenario("log, normal, trim 1,99 (demo)", True, "normal", {"trim_percentiles": "1,99"}),
    Scenario("log, normal, influence screen", True, "normal", {"influence_screen": True}),
]


# --- one replication ----------------------------------------------------------------------

def replicate(sc: Scenario, rng: np.random.Generator, n_sales: int) -> dict:
    """One market, one analysis, SUBJECTS valuations: indicator shares and figures."""
    from plumbrule import ratios, validation
    from plumbrule.model.retransform import price_estimates
    from plumbrule.analysis import analyze
    from plumbrule.valuation.estimates import valuate

    f = draw_features(rng, n_sales)
    frame = sales_frame(f, prices(rng, f, sc.log, sc.errors, sc.noise))
    a = analyze(frame, {**model_settings(sc.log), **NO_SCREENING, **sc.settings})

    # subjects, valued at the valuation date; a fresh sale at each subject's x
    s = draw_features(rng, SUBJECTS)
    s["day"] = np.full(SUBJECTS, VALUATION_DAY)
    est = valuate(a, sales_frame(s)).estimates
    mu = true_mean(s, sc.log, sc.errors, sc.noise)
    fresh = prices(rng, s, sc.log, sc.errors, sc.noise)
    pi_hit = (est["pi_low"] <= fresh).to_numpy() & (fresh <= est["pi_high"]).to_numpy()
    out = {"mean CI": (_share(est["ci_low"] <= mu, mu <= est["ci_high"])
                       if np.all(np.isfinite(mu)) else np.nan),
           "PI": float(np.mean(pi_hit))}
    if sc.errors == "hetero":               # the PI uses the pooled s²: check the noisy subjects
        noisy = error_sd(s, sc.log, sc.errors) >= noisy_sd(sc.log)
        out["PI noisy hits"], out["PI noisy n"] = float(np.sum(pi_hit[noisy])), float(noisy.sum())
    if sc.log:
        factor = est["retransform_factor"].to_numpy()
        med = np.exp(structural(s, True))
        out["exp(x'b) CI"] = _share(est["ci_low"] / factor <= med, med <= est["ci_high"] / factor)

    # the ratio study (holdout) against the population given this fit
    study = a.tables.ratio_study
    row = study[study["stratum"] == "all"].iloc[0]
    g = draw_features(rng, FRESH)
    g_price = prices(rng, g, sc.log, sc.errors, sc.noise)
    g_frame = sales_frame(g, g_price)
    g_est = price_estimates(validation.predict(a.model, g_frame), sc.log,
                            a.model.retransform_factor(a.settings.retransform))
    keep = (g_price > 0) & (g_est > 0)                  # as the study's in_study rule
    true_median = float(np.median(g_est[keep] / g_price[keep]))
    out["median CI"] = float(row["median_ci_low"] <= true_median <= row["median_ci_high"])
    out["median CI level"] = float(row["median_ci_coverage"])
    if sc.errors == "heavy":
        # log model: ratio ∝ e^{−u} has no variance under t errors; levels model: the t tails
        # reach prices near 0, whose ratios dominate any fresh sample (no stable value)
        true_prb = np.nan
    else:
        true_prb = ratios.prb(g_est[keep], g_price[keep])[0]
    out["true PRB"] = true_prb
    out["PRB CI"] = (float(row["prb_ci_low"] <= true_prb <= row["prb_ci_high"])
                     if np.isfinite(true_prb) else np.nan)
    out["PRB excl 0"] = float(not row["prb_ci_low"] <= 0.0 <= row["prb_ci_high"])
    out["PRD"], out["PRB"], out["n ratio"] = row["prd"], row["prb"], row["n"]
    out["n fit"] = a.fit.n
    for col in study.columns:
        if col.endswith("_verdict"):
            out[col] = float(row[col] != ratios.OK)
    return out


PORTFOLIO = 25           # subjects in each replication's portfolio

PORTFOLIO_SCENARIOS = [
    Scenario("levels, normal", False, "normal"),
    Scenario("levels, hetero, HC3", False, "hetero", {"robust_se": "HC3"}),
    Scenario("log, normal", True, "normal"),
    Scenario("log, skewed (gamma)", True, "skewed"),
    Scenario("log, normal, lognormal factor", True, "normal", {"retransform": "lognormal"}),
]


def replicate_portfolio(sc: Scenario, rng: np.random.Generator, n_sales: int) -> dict:
    """One market, one fit on every sale, one portfolio of PORTFOLIO subjects: whether each
    interval of the total covers, and the naive interval's width over the honest one."""
    from plumbrule.analysis import analyze
    from plumbrule.valuation.estimates import valuate

    f = draw_features(rng, n_sales)
    frame = sales_frame(f, prices(rng, f, sc.log, sc.errors, sc.noise))
    settings = {**model_settings(sc.log), "holdout": None, **NO_SCREENING, **sc.settings}
    a = analyze(frame, settings)
    s = draw_features(rng, PORTFOLIO)
    s["day"] = np.full(PORTFOLIO, VALUATION_DAY)
    port = valuate(a, sales_frame(s)).portfolio.iloc[0]
    true_total = float(np.sum(true_mean(s, sc.log, sc.errors, sc.noise)))
    fresh_total = float(np.sum(prices(rng, s, sc.log, sc.errors, sc.noise)))

    def inside(low, high, value):
        return float(port[low] <= value <= port[high])
    return {"total CI": inside("ci_low", "ci_high", true_total),
            "total PI": inside("pi_low", "pi_high", fresh_total),
            "naive CI": inside("naive_ci_low", "naive_ci_high", true_total),
            "naive PI": inside("naive_pi_low", "naive_pi_high", fresh_total),
            "indep. CI": inside("independent_ci_low", "independent_ci_high", true_total),
            "naive/honest CI width": float(port["naive_ci_ratio"]),
            "naive/honest PI width": float(port["naive_pi_ratio"])}


def run_portfolio(sc: Scenario, reps: int, seed: int, n_sales: int) -> pd.DataFrame:
    rng = np.random.default_rng([seed, zlib.crc32(("portfolio " + sc.name).encode())])
    return pd.DataFrame([replicate_portfolio(sc, rng, n_sales) for _ in range(reps)])


def summarise_portfolio(sc: Scenario, res: pd.DataFrame, n_sales: int) -> dict:
    out = {"scenario": sc.name, "n_sales": n_sales, "reps": len(res), "subjects": PORTFOLIO}
    for k in ("total CI", "total PI", "naive CI", "naive PI", "indep. CI"):
        out[k] = share_and_se(res[k], False)
    for k in ("naive/honest CI width", "naive/honest PI width"):
        out[k] = f"{res[k].mean():.2f}"
    return out


@lru_cache(maxsize=None)
def noisy_sd(log: bool) -> float:
    """The upper quartile of the error SD over the market in the 'hetero' scenarios
    (a fixed large sample, so the threshold is the same in every replication)."""
    f = draw_features(np.random.default_rng(0), 100_000)
    return float(np.quantile(error_sd(f, log, "hetero"), 0.75))


def _share(low_ok, high_ok) -> float:
    return float(np.mean(np.asarray(low_ok) & np.asarray(high_ok)))


# --- the study ------------------------------------------------------------------------------

INTERVALS = ["mean CI", "exp(x'b) CI", "PI", "PI noisy 1/4", "median CI", "PRB CI",
             "PRB excl 0"]
PER_SUBJECT = {"mean CI", "exp(x'b) CI", "PI"}


def run(sc: Scenario, reps: int, seed: int, n_sales: int) -> pd.DataFrame:
    # seeded by the scenario's name, so adding a scenario leaves the others' draws alone
    rng = np.random.default_rng([seed, zlib.crc32(sc.name.encode())])
    return pd.DataFrame([replicate(sc, rng, n_sales) for _ in range(reps)])


def share_and_se(values: pd.Series, per_subject: bool) -> str:
    """'p ±se'; n/a when the true value is undefined in this scenario."""
    v = values.dropna()
    if not len(v):
        return "n/a"
    p = float(v.mean())
    se = (float(v.std(ddof=1)) / np.sqrt(len(v)) if per_subject and len(v) > 1
          else np.sqrt(p * (1 - p) / len(v)))
    return f"{p:.3f} ±{se:.3f}"


def ratio_and_se(hits: pd.Series, n: pd.Series) -> str:
    """Σhits/Σn over replications with its cluster (ratio-estimator) standard error."""
    p = hits.sum() / n.sum()
    r = len(n)
    se = np.sqrt(np.sum(np.square(hits - p * n)) * r / (r - 1)) / n.sum() if r > 1 else np.nan
    return f"{p:.3f} ±{se:.3f}"


def summarise(sc: Scenario, res: pd.DataFrame, n_sales: int) -> tuple[dict, dict]:
    head = {"scenario": sc.name, "n_sales": n_sales, "reps": len(res)}
    intervals = {**head, **{k: share_and_se(res[k], k in PER_SUBJECT) if k in res else "n/a"
                            for k in INTERVALS}}
    if "PI noisy n" in res:
        intervals["PI noisy 1/4"] = ratio_and_se(res["PI noisy hits"], res["PI noisy n"])
    verdict_cols = [c for c in res.columns if c.endswith("_verdict")]
    verdicts = {**head, "n_fit": f"{res['n fit'].mean():.0f}",
                "n_ratio": f"{res['n ratio'].mean():.0f}",
                **{c: share_and_se(res[c], False) for c in verdict_cols},
                "mean PRD": f"{res['PRD'].mean():.4f}", "mean PRB": f"{res['PRB'].mean():+.4f}",
                "true PRB": ("n/a" if res["true PRB"].isna().all()
                             else f"{res['true PRB'].mean():+.4f}"),
                "median CI level": f"{res['median CI level'].mean():.4f}"}
    return intervals, verdicts


def plain_table(records: list[dict]) -> str:
    cols = list(dict.fromkeys(k for r in records for k in r))
    cells = [[str(r.get(c, "")) for c in cols] for r in records]
    width = [max(len(c), *(len(row[j]) for row in cells)) for j, c in enumerate(cols)]

    def line(vals: list[str]) -> str:
        return "| " + " | ".join(v.ljust(w) for v, w in zip(vals, width, strict=True)) + " |"

    rule = "|" + "|".join("-" * (w + 2) for w in width) + "|"
    return "\n".join([line(cols), rule, *(line(row) for row in cells)])


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=160, help="replications per scenario (160)")
    ap.add_argument("--seed", type=int, default=20250601, help="master seed (20250601)")
    ap.add_argument("--sales", type=int, default=400,
                    help="sales per replication, 30%% of them held out (400)")
    ap.add_argument("--only", default="", help="run only scenarios whose name contains TEXT")
    ap.add_argument("--section", default="all", choices=("all", "subjects", "portfolio"))
    ap.add_argument("--portfolio-reps", type=int, default=200,
                    help="replications per portfolio scenario (200)")
    args = ap.parse_args(argv)
    if args.section in ("all", "subjects"):
        subjects_section(args)
    if args.section in ("all", "portfolio"):
        portfolio_section(args)


def portfolio_section(args) -> None:
    t0 = time.perf_counter()
    rows = []
    for sc in PORTFOLIO_SCENARIOS:
        if args.only and args.only not in sc.name:
            continue
        res = run_portfolio(sc, args.portfolio_reps, args.seed, args.sales)
        rows.append(summarise_portfolio(sc, res, args.sales))
        print(f"  portfolio {sc.name}: {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    print(f"\nPortfolio total: coverage of nominal 95 % intervals of the total of {PORTFOLIO} "
          "subjects (one portfolio per replication, all sales in the fit; value ±binomial "
          "standard error)\n")
    print(plain_table(rows))
    print("\ntotal CI / total PI: plumbrule's interval of the total (valuation/portfolio.py); "
          "naive: the sum of the subjects' own bounds; indep.: √Σse², as if the estimates were "
          "independent. Nominal 0.950.")
    print(f"wall time {time.perf_counter() - t0:.1f} s (portfolio reps {args.portfolio_reps}, "
          f"seed {args.seed}, sales {args.sales})")


def subjects_section(args) -> None:

    t0 = time.perf_counter()
    intervals, verdicts = [], []
    for sc in SCENARIOS:
        if args.only and args.only not in sc.name:
            continue
        res = run(sc, args.reps, args.seed, args.sales)
        iv, vd = summarise(sc, res, args.sales)
        intervals.append(iv)
        verdicts.append(vd)
        print(f"  {sc.name}: {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    wall = time.perf_counter() - t0

    print(f"Coverage of nominal 95 % intervals ({SUBJECTS} subjects per replication for mean "
          f"CI / exp(x'b) CI / PI; value ±standard error)\n")
    print(plain_table(intervals))
    print("\nRatio study on the holdout: share of replications whose verdict is not 'ok' "
          "(false alarms on a correct model), and mean figures\n")
    print(plain_table(verdicts))
    print("\nmedian CI level: the order-statistic interval's own coverage "
          "(median_ci_coverage), averaged; the median CI figure should be at least this.")
    print(f"wall time {wall:.1f} s (reps {args.reps}, seed {args.seed}, sales {args.sales})")


if __name__ == "__main__":
    main()

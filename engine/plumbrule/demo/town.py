"""The demo scenario: invented sales in Quillford, an invented market town.

Every number here is made up. The structure is a plausible hedonic market:
price rises with living area (less than in proportion), lot size, bathrooms and
condition, differs by neighbourhood, and falls with age, by about 0.6 % a year at
first and only 0.1 % a year past 55 years (old houses keep their value: depreciation
levels off). The market bends over the three years of sales: it rises 0.8 % a month
for 18 months, is flat for 12, then falls 0.4 % a month for the last 6, so one straight
line over the dates does not fit it (the trend check says so; ``trend`` = piecewise with
knots at 2024-07-01 and 2025-07-01, or periods, follows it). A few sales are unusual on
purpose (a small hotel, a block of flats, a family transfer) so that
screening has something to catch. The generator is seeded: the same call
gives the same sales on every platform (NumPy's PCG64).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TOWN = "Quillford"
NEIGHBOURHOODS = ("Millbank", "Old Quay", "Hollins Rise", "Tanner's Green", "Fenby Park")
_HOOD_EFFECT = {"Millbank": 0.0, "Old Quay": 0.12, "Hollins Rise": 0.22,
                "Tanner's Green": -0.08, "Fenby Park": 0.05}
_HOOD_SHARE = (0.30, 0.18, 0.16, 0.22, 0.14)
CONDITIONS = ("Poor", "Fair", "Average", "Good", "Excellent")
_CONDITION_EFFECT = {"Poor": -0.18, "Fair": -0.08, "Average": 0.0, "Good": 0.07, "Excellent": 0.15}
FIRST_SALE = pd.Timestamp("2023-01-03")
DAYS = 1096                       # three years of sales
MARKET_KNOTS = (18.0, 30.0)       # months since the first sale where the market turns
MARKET_RATES = (0.008, 0.0, -0.004)   # log price per month: rising, flat, falling
AGE_BEND, AGE_RATES = 55.0, (-0.006, -0.001)   # log price per year of age, before / after
COLUMNS = ["Sale ID", "Sale price", "Living area", "Lot size", "Age", "Bedrooms", "Bathrooms",
           "Condition", "Neighbourhood", "Sale date", "Notes", "Address"]
# invented streets, three per neighbourhood (the demo's label_column names sales by them)
_STREETS = {"Millbank": ("Mill Lane", "Weir Street", "Sluice Row"),
            "Old Quay": ("Quay Street", "Rope Walk", "Chandler's Yard"),
            "Hollins Rise": ("Hollins Way", "Beacon Hill", "Larch Crescent"),
            "Tanner's Green": ("Tanner's Walk", "Bark Lane", "Green Side"),
            "Fenby Park": ("Fenby Close", "Heron Drive", "Lantern Row")}


def _addresses(hood, start: int = 0) -> list[str]:
    """A house number and street for each sale, from its position (no random draw, so the
    sales themselves do not change)."""
    i = np.arange(start, start + len(hood))
    return [f"{1 + (k * 37) % 89} {_STREETS[h][k % 3]}" for k, h in zip(i, hood, strict=True)]


_FIRST_ID = 2400
_UNUSUAL_IDS = (9001, 9002, 9003)     # the three unusual sales' numbers (Q-9001…)


def _ordinary_ids(n: int) -> list[str]:
    """``Q-2400``, ``Q-2401``, … for ``n`` ordinary sales, stepping over the unusual sales'
    numbers so every ID stays unique at any size (below Q-9001 nothing moves: the default demo
    and every size up to 6,601 sales keep their IDs)."""
    num = _FIRST_ID + np.arange(n)
    num = num + len(_UNUSUAL_IDS) * (num >= _UNUSUAL_IDS[0])
    return [f"Q-{k:04d}" for k in num]


def demo_sales(n: int = 360, seed: int = 7) -> pd.DataFrame:
    """``n`` ordinary invented sales plus three unusual ones (last rows)."""
    rng = np.random.default_rng(seed)
    hood = rng.choice(NEIGHBOURHOODS, size=n, p=_HOOD_SHARE)
    living = np.round(np.exp(rng.normal(np.log(1650), 0.28, n)) / 10) * 10
    lot = np.round(np.exp(rng.normal(np.log(7200), 0.35, n)) / 50) * 50
    age = np.clip(np.round(rng.gamma(2.2, 14.0, n)), 0, 110).astype(int)
    bedrooms = np.clip(np.round(living / 520 + rng.normal(0, 0.6, n)), 1, 6).astype(int)
    bathrooms = np.clip(np.round(2 * (living / 900 + rng.normal(0, 0.35, n))) / 2, 1, 4.5)
    cond_p = np.array([0.05, 0.17, 0.43, 0.25, 0.10])
    condition = rng.choice(CONDITIONS, size=n, p=cond_p)
    days = np.sort(rng.integers(0, DAYS, n))
    date = FIRST_SALE + pd.to_timedelta(days, unit="D")
    months = days / (365.2425 / 12)
    log_price = (
        np.log(152_000)
        + 0.62 * np.log(living / 1650)
        + 0.11 * np.log(lot / 7200)
        + 0.045 * (bathrooms - 2)
        + age_effect(age)
        + np.vectorize(_HOOD_EFFECT.get)(hood)
        + np.vectorize(_CONDITION_EFFECT.get)(condition)
        + market_path(months)
        + rng.normal(0, 0.085, n)
    )
    price = np.round(np.exp(log_price) / 500) * 500
    frame = pd.DataFrame({
        "Sale ID": _ordinary_ids(n),
        "Sale price": price, "Living area": living, "Lot size": lot, "Age": age,
        "Bedrooms": bedrooms, "Bathrooms": bathrooms, "Condition": condition,
        "Neighbourhood": hood, "Sale date": date, "Notes": "", "Address": _addresses(hood),
    })
    unusual = pd.DataFrame([
        {"Sale ID": "Q-9001", "Sale price": 1_480_000, "Living area": 9800, "Lot size": 21000,
         "Age": 64, "Bedrooms": 14, "Bathrooms": 12, "Condition": "Average",
         "Neighbourhood": "Old Quay", "Sale date": pd.Timestamp("2024-09-12"),
         "Notes": "Small hotel (14 rooms)"},
        {"Sale ID": "Q-9002", "Sale price": 1_150_000, "Living area": 7400, "Lot size": 9000,
         "Age": 41, "Bedrooms": 12, "Bathrooms": 8, "Condition": "Fair",
         "Neighbourhood": "Millbank", "Sale date": pd.Timestamp("2025-03-20"),
         "Notes": "Block of 6 flats"},
        {"Sale ID": "Q-9003", "Sale price": 61_000, "Living area": 1720, "Lot size": 7400,
         "Age": 22, "Bedrooms": 3, "Bathrooms": 2, "Condition": "Good",
         "Neighbourhood": "Hollins Rise", "Sale date": pd.Timestamp("2025-06-02"),
         "Notes": "Transfer between relatives"},
    ])
    unusual["Address"] = ["1 Harbour Street", "2 Weir Street", "40 Hollins Way"]
    return pd.concat([frame, unusual], ignore_index=True)[COLUMNS]


def market_path(months) -> np.ndarray:
    """The invented market's log-price level ``months`` after the first sale (0 at the
    first sale): a broken line through MARKET_KNOTS with MARKET_RATES."""
    m = np.asarray(months, dtype=float)
    a, b = MARKET_KNOTS
    return (MARKET_RATES[0] * np.minimum(m, a) + MARKET_RATES[1] * (np.clip(m, a, b) - a)
            + MARKET_RATES[2] * np.maximum(m - b, 0.0))


def age_effect(age) -> np.ndarray:
    """The invented effect of age on log price: AGE_RATES[0] a year up to AGE_BEND years,
    AGE_RATES[1] a year beyond (depreciation that levels off)."""
    a = np.asarray(age, dtype=float)
    return AGE_RATES[0] * np.minimum(a, AGE_BEND) + AGE_RATES[1] * np.maximum(a - AGE_BEND, 0)


def demo_subjects() -> pd.DataFrame:
    """One invented subject property to value."""
    return pd.DataFrame([{
        "Subject": "14 Lantern Row", "Living area": 1840, "Lot size": 7600, "Age": 18,
        "Bedrooms": 3, "Bathrooms": 2.5, "Condition": "Good", "Neighbourhood": "Fenby Park",
        "Sale date": pd.NaT,
    }])


def demo_comps(sales: pd.DataFrame) -> list[int]:
    """Sheet rows (header = row 1) of four comparables near the subject in Fenby Park."""
    subj = demo_subjects().iloc[0]
    ok = sales.index[(sales["Neighbourhood"] == subj["Neighbourhood"])
                     & (sales["Notes"] == "")]
    dist = (np.abs(np.log(sales.loc[ok, "Living area"] / subj["Living area"]))
            + np.abs(sales.loc[ok, "Age"] - subj["Age"]) / 40)
    best = dist.sort_values(kind="stable").index[:4]
    return sorted(int(i) + 2 for i in best)


DEMO_SETTINGS = {
    "response": "Sale price",
    "predictors": "Living area,Lot size,Age,Bathrooms,Condition,Neighbourhood",
    "categorical": "Condition,Neighbourhood",
    "reference_levels": "Condition=Average",
    "log_response": True,
    "log_predictors": "Living area,Lot size",
    "date_column": "Sale date",
}

"""A simulated county of our own invention for the roll (mass appraisal) tests and
benchmarks/roll.py: ``n_parcels`` parcels with a parcel ID, living area, lot size, age, a
neighbourhood and a condition; ``n_sales`` of them sold over three years, at a price from a
hedonic market with a trend and lognormal noise. A few parcels lie outside the sales' range
on purpose (``outliers``: very large houses, very old ones), so the roll's flags have
something to count.

The numbers are invented; nothing here describes a real place.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

START = pd.Timestamp("2023-01-01")
DAYS = 1096
VALUATION_DATE = "2025-12-31"
HOODS = ("Ashgrove", "Bellmead", "Corran Flats", "Dunmere", "Elderholt", "Fennick")
HOOD_SHARE = (0.25, 0.2, 0.2, 0.15, 0.12, 0.08)
HOOD_EFFECT = np.array([0.0, 0.08, -0.12, 0.18, 0.05, -0.04])
CONDITIONS = ("Fair", "Average", "Good")
CONDITION_EFFECT = np.array([-0.08, 0.0, 0.07])
PREDICTORS = "Living area,Lot size,Age,Neighbourhood,Condition"


def parcels(n: int, seed: int = 11, outliers: bool = True) -> pd.DataFrame:
    """The roll: one row per parcel (ID 'P-0000001' ...), the model's columns."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1700, 400, n).clip(650, 3600).round()
    lot = rng.lognormal(np.log(6500), 0.35, n).round()
    age = rng.integers(1, 90, n).astype(float)
    hood = rng.choice(len(HOODS), n, p=HOOD_SHARE)
    cond = rng.choice(len(CONDITIONS), n, p=(0.2, 0.55, 0.25))
    if outliers and n >= 100:
        big = rng.choice(n, max(n // 200, 3), replace=False)       # 0.5 %: estates
        area[big] = rng.uniform(5000, 7000, len(big)).round()
        old = rng.choice(n, max(n // 500, 2), replace=False)       # 0.2 %: very old
        age[old] = rng.integers(140, 200, len(old)).astype(float)
    ids = np.char.add("P-", np.char.zfill(np.arange(1, n + 1).astype(str), 7))
    return pd.DataFrame({"Parcel": ids.astype(object), "Living area": area, "Lot size": lot,
                         "Age": age,
                         "Neighbourhood": np.asarray(HOODS, dtype=object)[hood],
                         "Condition": np.asarray(CONDITIONS, dtype=object)[cond]})


def log_price(roll: pd.DataFrame, months: np.ndarray) -> np.ndarray:
    """The market's expected log price (natural log) at ``months`` since START."""
    hood = pd.Categorical(roll["Neighbourhood"], categories=HOODS).codes
    cond = pd.Categorical(roll["Condition"], categories=CONDITIONS).codes
    return (10.9 + 0.00042 * roll["Living area"].to_numpy() + 0.09 * np.log(
        roll["Lot size"].to_numpy()) - 0.0035 * roll["Age"].to_numpy()
        + HOOD_EFFECT[hood] + CONDITION_EFFECT[cond] + 0.003 * months)


def sales(roll: pd.DataFrame, n: int, seed: int = 12, noise: float = 0.12) -> pd.DataFrame:
    """``n`` parcels of the roll that sold (none of the deliberate outliers), with a sale
    price and sale date."""
    rng = np.random.default_rng(seed)
    ordinary = np.flatnonzero((roll["Living area"].to_numpy() < 4000)
                              & (roll["Age"].to_numpy() < 120))
    pick = np.sort(rng.choice(ordinary, n, replace=False))
    sold = roll.iloc[pick].reset_index(drop=True)
    days = rng.integers(0, DAYS, n)
    months = days / (365.2425 / 12)
    price = np.exp(log_price(sold, months) + rng.normal(0, noise, n)).round(-2)
    return sold.assign(**{"Sale price": price,
                          "Sale date": START + pd.to_timedelta(days, unit="D")})


def settings(log: bool = True) -> dict:
    """The model's settings (CLI / Settings-sheet names)."""
    return {"response": "Sale price", "predictors": PREDICTORS,
            "categorical": "Neighbourhood,Condition", "date_column": "Sale date",
            "log_response": log, "id_column": "Parcel", "valuation_date": VALUATION_DATE}

"""Simulated sales markets with a known market-conditions path (our own invention, for the
trend tests and benchmarks/trend_check.py).

``bent_market``: the market of issue 13 — prices rise 0.8 % a month for 18 months, stay
flat for 12, then fall 0.4 % a month for 6 (on the log scale: slopes 0.008, 0, −0.004 per
mean month). ``straight_market``: one steady rate. Sale dates are uniform over the span;
the other effects and the noise are fixed numbers of our own.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

START = pd.Timestamp("2023-01-01")
DAYS_PER_MONTH = 365.2425 / 12.0
KNOTS = (18.0, 30.0)             # months since START where the rate changes
RATES = (0.008, 0.0, -0.004)     # log-price change per month in each segment
SPAN = 36.0


def bent_path(months: np.ndarray) -> np.ndarray:
    """The bent market's log-price level at ``months`` since START (0 at START)."""
    m = np.asarray(months, dtype=float)
    a, b = KNOTS
    return (RATES[0] * np.minimum(m, a) + RATES[1] * (np.clip(m, a, b) - a)
            + RATES[2] * np.maximum(m - b, 0.0))


def _sales(path, n: int, seed: int, noise: float, span: float = SPAN) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    days = np.sort(rng.integers(0, int(span * DAYS_PER_MONTH), n))
    months = days / DAYS_PER_MONTH
    area = rng.normal(1600, 350, n).clip(700, 3500).round()
    age = rng.integers(1, 80, n).astype(float)
    logp = 11.6 + 0.00045 * area - 0.003 * age + path(months) + rng.normal(0, noise, n)
    return pd.DataFrame({"Price": np.round(np.exp(logp), 0), "Living area": area, "Age": age,
                         "Sale date": START + pd.to_timedelta(days, unit="D")})


def bent_market(n: int = 600, seed: int = 1, noise: float = 0.10) -> pd.DataFrame:
    """Sales of the bent market (see the module docstring)."""
    return _sales(bent_path, n, seed, noise)


def straight_market(n: int = 600, seed: int = 1, noise: float = 0.10,
                    rate: float = 0.0046) -> pd.DataFrame:
    """Sales of a market moving at one steady ``rate`` (log price per month)."""
    return _sales(lambda m: rate * m, n, seed, noise)


SETTINGS = {"response": "Price", "predictors": "Living area,Age", "log_response": True,
            "date_column": "Sale date", "folds": 0}

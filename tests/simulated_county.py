"""A simulated county (our own invention, for the assessment and location tests and
benchmarks/location_check.py): parcels on a 20 km × 20 km projected grid (metres) with a
smooth location effect on the log price, living area and age, and an assessor's roll.

``county(n, seed)``: one row per parcel with 'Price' (what a sale would fetch), 'Living
area', 'Age', 'X', 'Y' (metres), 'Wave' (sin(X/3000) and cos(Y/2500), the form of the
location effect, for a model that carries it), 'Assessed' (the roll: the price times
a ratio of level 0.95 and 8 % scatter) and 'Prior' (last year's roll, 6 % lower on
average with its own scatter).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

SIZE = 20_000.0          # metres
LOCATION = 0.15          # amplitude of each wave of the location effect (log price)


def location_effect(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The log-price effect of location: two waves of 0.15 each, some 19 and 16 km long."""
    return LOCATION * np.sin(x / 3000.0) + LOCATION * np.cos(y / 2500.0)


def county(n: int = 600, seed: int = 1, noise: float = 0.10,
           location: float = 1.0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x, y = rng.uniform(0, SIZE, n), rng.uniform(0, SIZE, n)
    area = rng.normal(1600, 350, n).clip(700, 3500).round()
    age = rng.integers(1, 80, n).astype(float)
    logp = (11.6 + 0.00045 * area - 0.003 * age + location * location_effect(x, y)
            + rng.normal(0, noise, n))
    price = np.round(np.exp(logp), 0)
    assessed = np.round(price * 0.95 * np.exp(rng.normal(0, 0.08, n)), -2)
    prior = np.round(assessed / 1.06 * np.exp(rng.normal(0, 0.03, n)), -2)
    return pd.DataFrame({"Price": price, "Living area": area, "Age": age, "X": x, "Y": y,
                         "Wave x": np.sin(x / 3000.0), "Wave y": np.cos(y / 2500.0),
                         "Assessed": assessed, "Prior": prior})


SETTINGS = {"response": "Price", "predictors": "Living area,Age", "log_response": True,
            "folds": 0, "x_column": "X", "y_column": "Y"}
WITH_LOCATION = {**SETTINGS, "predictors": "Living area,Age,Wave x,Wave y"}

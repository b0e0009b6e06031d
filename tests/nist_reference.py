"""Reader for the NIST StRD linear least-squares files (tests/reference/nist/).

Source: NIST/ITL Statistical Reference Datasets, Linear Least Squares Regression
(public domain; provenance in tests/reference/nist/PROVENANCE.md). Each
file's header gives the line ranges of its certified values and of its data;
we read those ranges rather than fixed offsets.

Shared by tests/model/test_nist.py and benchmarks/nist_digits.py.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

NIST_DIR = Path(__file__).resolve().parent / "reference" / "nist"

# Model of each set, from the files' own "Model:" headers: polynomial degree in x,
# or None for Longley's six separate predictors; and whether there is an intercept.
MODELS = {
    "Norris": (1, True), "Pontius": (2, True), "NoInt1": (1, False), "NoInt2": (1, False),
    "Longley": (None, True), "Filip": (10, True), "Wampler1": (5, True),
    "Wampler2": (5, True), "Wampler3": (5, True), "Wampler4": (5, True),
    "Wampler5": (5, True),
}
ORDER = list(MODELS)

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


@dataclass(frozen=True)
class NistSet:
    name: str
    x: np.ndarray          # n × k design without the constant column (float64)
    y: np.ndarray
    intercept: bool
    coef: np.ndarray       # certified estimates B0.. (B1.. without intercept)
    se: np.ndarray         # certified standard deviations of the estimates
    resid_sd: float        # certified residual standard deviation
    r_squared: float       # certified R² (uncentred for the no-intercept sets)


def _line_range(header: str, label: str) -> tuple[int, int]:
    m = re.search(label + r"\s*\(lines\s+(\d+)\s+to\s+(\d+)\)", header)
    if not m:
        raise ValueError(f"no '{label}' line range in header")
    return int(m.group(1)), int(m.group(2))


def load(name: str) -> NistSet:
    lines = (NIST_DIR / f"{name}.dat").read_text().splitlines()
    header = "\n".join(lines[:15])
    c0, c1 = _line_range(header, "Certified Values")
    d0, d1 = _line_range(header, "Data")
    cert = lines[c0 - 1:c1]
    coef, se = [], []
    for line in cert:
        m = re.match(rf"\s*B\d+\s+({_NUM})\s+({_NUM})", line)
        if m:
            coef.append(float(m.group(1)))
            se.append(float(m.group(2)))
    text = "\n".join(cert)
    resid_sd = float(re.search(rf"Standard Deviation\s+({_NUM})", text).group(1))
    r2 = float(re.search(rf"R-Squared\s+({_NUM})", text).group(1))
    data = np.array([[float(v) for v in line.split()] for line in lines[d0 - 1:d1]
                     if line.strip()])
    y = data[:, 0]
    degree, intercept = MODELS[name]
    if degree is None:
        x = data[:, 1:]
    else:
        # Powers in extended precision, then one rounding to float64, so the
        # design is the correctly rounded polynomial basis (no compounded error).
        xl = data[:, 1].astype(np.longdouble)
        x = np.column_stack([xl ** j for j in range(1, degree + 1)]).astype(float)
    return NistSet(name, x, y, intercept, np.array(coef), np.array(se), resid_sd, r2)


def lre(estimate, certified) -> np.ndarray:
    """Log relative error: −log10(|est − cert| / |cert|), capped at 15 digits.

    Where the certified value is exactly 0 (Wampler1's residual SD and standard
    deviations), the log *absolute* error −log10|est| is used instead, the
    convention of McCullough (1998), "Assessing the reliability of statistical
    software", Am. Statistician 52(4).
    """
    est = np.atleast_1d(np.asarray(estimate, dtype=float))
    cert = np.atleast_1d(np.asarray(certified, dtype=float))
    err = np.abs(est - cert)
    scale = np.where(cert == 0, 1.0, np.abs(cert))
    with np.errstate(divide="ignore"):
        out = -np.log10(err / scale)
    out = np.where(np.isfinite(out), out, 15.0)
    return np.minimum(out, 15.0)


def digits(coef, se, resid_sd, r2, ref: NistSet) -> dict[str, float]:
    """Minimum LRE per quantity group against the certified values."""
    return {"coef": float(lre(coef, ref.coef).min()), "se": float(lre(se, ref.se).min()),
            "resid_sd": float(lre(resid_sd, ref.resid_sd).min()),
            "r_squared": float(lre(r2, ref.r_squared).min())}

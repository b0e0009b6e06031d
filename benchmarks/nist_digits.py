"""Print correct digits (minimum LRE over coefficients, SDs, residual SD, R²) on
the eleven NIST StRD sets: plumbrule vs numpy lstsq vs statsmodels OLS.

Run: python benchmarks/nist_digits.py
"""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from nist_reference import ORDER, digits, load  # noqa: E402
from test_nist import min_digits, numpy_lstsq, ours, statsmodels_ols  # noqa: E402


def main() -> None:
    print(f"{'dataset':10s} {'coef':>5s} {'sd':>5s} {'res sd':>6s} {'R2':>5s} | "
          f"{'ours':>5s} {'lstsq':>6s} {'statsm':>6s}")
    for name in ORDER:
        ref = load(name)
        d = digits(*ours(ref), ref)
        print(f"{name:10s} {d['coef']:5.1f} {d['se']:5.1f} {d['resid_sd']:6.1f} "
              f"{d['r_squared']:5.1f} | {min_digits(ours(ref), ref):5.1f} "
              f"{min_digits(numpy_lstsq(ref), ref):6.1f} "
              f"{min_digits(statsmodels_ols(ref), ref):6.1f}")


if __name__ == "__main__":
    main()

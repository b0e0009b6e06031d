"""The location check (Moran's I of the residuals): detection and false-alarm rates.

A simulated county (tests/simulated_county.py, our own): parcels on a 20 km square with a
smooth location effect of two waves (0.15 each on the log price). For each replication the
whole analysis runs twice on the same sales: without the location effect in the model (the
check should say "watch": detection) and with it (the check should say "ok"; "watch" is a
false alarm, expected at the nominal 5 %). With --location-terms N the second run models
location by plumbrule's own location surface (setting location_surface) instead of the true
form of the effect. Prints the rates with their binomial standard errors.

Run: PYTHONPATH=engine:tests python benchmarks/location_check.py [--reps 200] [--sizes 300,1000]
     [--neighbours 8] [--location-terms 0] [--strength 1]
"""

from __future__ import annotations

import argparse

import numpy as np

from plumbrule.analysis import analyze
from plumbrule.diagnostics.location import CHECK_NAME
from simulated_county import SETTINGS, WITH_LOCATION, county


def verdict(frame, settings) -> str:
    checks = analyze(frame, settings).tables.checks.set_index("check")
    return str(checks.loc[CHECK_NAME, "verdict"])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--reps", type=int, default=200)
    ap.add_argument("--sizes", default="300,1000")
    ap.add_argument("--neighbours", type=int, default=8)
    ap.add_argument("--location-terms", type=int, default=0)
    ap.add_argument("--strength", type=float, default=1.0,
                    help="the location effect's size, as a multiple of the county's")
    args = ap.parse_args()
    extra = {"neighbours": args.neighbours}
    modelled = {**WITH_LOCATION, **extra}
    if args.location_terms:
        modelled = {**SETTINGS, **extra, "location_surface": args.location_terms}
    how = (f"location_surface = {args.location_terms}" if args.location_terms
           else "the true form of the effect")
    print(f"k = {args.neighbours} neighbours; location effect x{args.strength:g}; modelled by "
          f"{how}; {args.reps} seeded counties per size")
    print(f"{'sales':>6} {'detected (omitted)':>19} {'false alarms (modelled)':>24} {'± se':>6}")
    for n in (int(s) for s in args.sizes.split(",")):
        hit = fa = 0
        for seed in range(args.reps):
            d = county(n, seed, location=args.strength)
            hit += verdict(d, {**SETTINGS, **extra}) == "watch"
            fa += verdict(d, modelled) == "watch"
        se = np.sqrt(0.05 * 0.95 / args.reps)
        print(f"{n:>6} {hit / args.reps:>19.3f} {fa / args.reps:>24.3f} {se:>6.3f}")


if __name__ == "__main__":
    main()

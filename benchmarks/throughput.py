"""Paths per second of the engine: a one-step European and a 252-date path.

Run: ``python benchmarks/throughput.py [--quick] [--json]``. Prints a table. No targets yet; the
performance work sets them. Timings are wall time of one ``fairpath.price`` call (after one
warm-up call), best of a few repeats.
"""

from __future__ import annotations

import argparse
import json
import platform
import time
from datetime import date

import numpy as np

import fairpath as fp
from fairpath.dates import weekdays_between
from fairpath.products.base import ControlVariate, PathSet
from fairpath.products.vanilla import European

VAL = date(2026, 12, 1)


class _AverageOfDailyCloses(European):
    """Benchmark-only payoff on a 252-weekday grid: a call on the mean of the closes."""

    kind = ""  # not registered

    def observation_dates(self):
        return weekdays_between(VAL, date(2027, 11, 19))[:252]

    def payoff(self, paths: PathSet) -> np.ndarray:
        avg = paths.levels[:, 0, :].mean(axis=1)
        return np.maximum(avg - self.strike, 0.0) * paths.df(self.expiry)

    def controls(self, market) -> list[ControlVariate]:
        return []


def market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(0.05),
                     (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), 0.02),))


def measure(product, paths, sampler, repeats):
    m = market()
    fp.price(product, m, paths=min(paths, 4096), sampler=sampler)  # warm-up
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fp.price(product, m, paths=paths, sampler=sampler)
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer paths and repeats")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    repeats = 2 if args.quick else 5
    one_step = European(asset="NORDA", right="call", strike=105.0, expiry=date(2027, 12, 1))
    daily = _AverageOfDailyCloses(asset="NORDA", right="call", strike=100.0,
                                  expiry=date(2027, 11, 19))
    cases = [("European, 1 date", one_step, 1 << (18 if args.quick else 20)),
             ("252-date path", daily, 1 << (14 if args.quick else 16))]
    rows = []
    for name, product, paths in cases:
        for sampler in ("sobol", "pseudo"):
            sec = measure(product, paths, sampler, repeats)
            steps = len(product.observation_dates())
            rows.append({"case": name, "sampler": sampler, "paths": paths, "seconds": sec,
                         "paths_per_second": paths / sec,
                         "asset_steps_per_second": paths * steps / sec})
    if args.json:
        print(json.dumps({"machine": platform.processor() or platform.machine(),
                          "python": platform.python_version(), "rows": rows}))
        return
    print(f"fairpath {fp.__version__} throughput, {date.today()}, "
          f"Python {platform.python_version()}, numpy {np.__version__}")
    head = f"{'case':<18} {'sampler':<7} {'paths':>9} {'seconds':>9} {'paths/s':>12} " \
           f"{'asset-steps/s':>14}"
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r['case']:<18} {r['sampler']:<7} {r['paths']:>9,} {r['seconds']:>9.3f} "
              f"{r['paths_per_second']:>12,.0f} {r['asset_steps_per_second']:>14,.0f}")


if __name__ == "__main__":
    main()

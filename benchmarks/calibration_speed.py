"""Time of a Heston fit (fairpath.calibration.fit_heston) to each asset's surface.

Run: ``python benchmarks/calibration_speed.py [MARKET.toml] [--repeat N] [--json]`` (default
``markets/demo_smile.toml``, 3 repeats). For each asset with a ``vol_surface`` and each weighting
(vega-weighted price errors, implied-vol errors): the median wall time of a fit from cold (the
fit cache is bypassed; the pricer's node tables stay warm after the first fit, as in a run), the
evaluations, the RMSE in vol points and the largest error.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

from fairpath.calibration import fit_heston
from fairpath.market import load_market

ROOT = Path(__file__).resolve().parents[1]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("market", nargs="?", default=str(ROOT / "markets" / "demo_smile.toml"))
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args(argv)
    market = load_market(args.market)
    rows = []
    for a in market.assets:
        if a.surface is None:
            continue
        for weights in ("vega", "vol"):
            times = []
            for _ in range(args.repeat):
                t0 = time.perf_counter()
                fit = fit_heston(market, a.name, weights=weights)
                times.append(time.perf_counter() - t0)
            rows.append({"asset": a.name, "weights": weights, "quotes": len(fit.quotes),
                         "seconds": statistics.median(times), "evaluations": fit.evaluations,
                         "rmse_vol_points": fit.rmse_vol_points,
                         "max_error_vol_points": fit.max_error_vol_points,
                         "feller": fit.feller})
    if args.json:
        print(json.dumps(rows))
        return 0
    print(f"{'asset':<8} {'weights':<7} {'quotes':>6} {'seconds':>8} {'evals':>6} "
          f"{'RMSE (vol pts)':>15} {'largest':>8} {'Feller':>7}")
    for r in rows:
        print(f"{r['asset']:<8} {r['weights']:<7} {r['quotes']:>6} {r['seconds']:>8.3f} "
              f"{r['evaluations']:>6} {r['rmse_vol_points']:>15.3f} "
              f"{r['max_error_vol_points']:>8.2f} {r['feller']:>7.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

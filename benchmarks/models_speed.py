"""The demo worst-of note under local vol, Heston and local-stochastic vol, side by side.

Targets (issue: stochastic volatility): Heston and LSV pricing of the daily-monitored demo
worst-of note (``payoffs/autocall_worst_of.toml`` on ``markets/demo_smile.toml``, the default
65,536 Sobol paths, every core) within 2x and 3x of its local-vol time, and the LSV leverage
calibration a fraction of one pricing. The Heston parameters of each asset are fitted to its
surface (the market gives none; ``fairpath calibrate``) and the leverage by the particle
method; both are timed apart, once, and the pricings then reuse them (as every pricing of a
run does). Prints the machine's load, a yardstick timed in the same run (QuantLib's
pseudo-random European, as in ``greeks_threads.py``), then ``--rounds`` rounds of the three
pricings in turn, and the median of the per-round ratios (ratios measured side by side, never
against another run's absolute times).

    .venv/bin/python benchmarks/models_speed.py [--paths N] [--rounds R] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import warnings

# before fairpath: importing it makes numba look for the code-coverage package, which finds
# coverage.py in this folder, and that script takes the folder off the import path
from benchmark_tools import timed
from greeks_threads import demo_note, yardstick

import fairpath as fp
from fairpath import calibration
from fairpath.models import lsv

TARGETS = {"heston": 2.0, "lsv": 3.0}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--paths", type=int, default=65536)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    market, note = demo_note()
    markets = {"local-vol": market, "heston": market.with_model("heston"),
               "lsv": market.with_model("lsv")}
    load = os.getloadavg()
    yard = yardstick()
    # compile the kernels, untimed
    for m in markets.values():
        fp.price(note, m, paths=256, seed=1)
    calibration._CACHE.clear()
    lsv._LEVERAGE.clear()
    fit_s, _ = timed(lambda: [calibration.heston_for(market, n) for n in market.asset_names])
    # the leverage of the note's grid: what the first LSV pricing builds before it simulates
    first_lsv_s, _ = timed(lambda: fp.price(note, markets["lsv"], paths=256, seed=1))
    rows = []
    results = {}
    for _ in range(args.rounds):
        row = {}
        for kind, m in markets.items():
            row[kind], results[kind] = timed(
                lambda m=m: fp.price(note, m, paths=args.paths, seed=1))
        rows.append(row)
    ratios = {k: statistics.median(r[k] / r["local-vol"] for r in rows) for k in TARGETS}
    out = {"load_average": load, "yardstick_s": yard, "paths": args.paths,
           "cores": os.cpu_count(), "heston_fit_s": fit_s,
           "lsv_first_pricing_256_paths_s": first_lsv_s, "rounds": rows,
           "ratios": ratios, "targets": TARGETS,
           "met": {k: ratios[k] <= TARGETS[k] for k in TARGETS},
           "prices": {k: (r.price, r.stderr) for k, r in results.items()}}
    if args.json:
        print(json.dumps(out))
        return
    print(f"machine: {out['cores']} cores, load average {load[0]:.2f} {load[1]:.2f} "
          f"{load[2]:.2f}; yardstick {yard:.3f} s")
    print(f"demo worst-of note on the smile market, {args.paths:,} Sobol paths, every core")
    print(f"Heston fit of the three surfaces: {fit_s:.2f} s; first LSV pricing at 256 paths "
          f"(the leverage calibration of the note's grid and the Heston fits from the "
          f"cache): {first_lsv_s:.2f} s")
    print(f"{'round':<7}{'local-vol s':>12}{'heston s':>10}{'ratio':>7}{'lsv s':>8}"
          f"{'ratio':>7}")
    for i, r in enumerate(rows, 1):
        lv = r["local-vol"]
        print(f"{i:<7}{lv:>12.2f}{r['heston']:>10.2f}{r['heston'] / lv:>7.2f}"
              f"{r['lsv']:>8.2f}{r['lsv'] / lv:>7.2f}")
    for k, t in TARGETS.items():
        print(f"{k} / local vol, median: {ratios[k]:.2f}x (target {t:g}x: "
              f"{'met' if out['met'][k] else 'NOT met'})")
    med_lv = statistics.median(r["local-vol"] for r in rows)
    print(f"leverage calibration / one local-vol pricing: {first_lsv_s / med_lv:.2f}")
    for k, (v, se) in out["prices"].items():
        print(f"price under {k}: {v:.3f} +- {se:.3f}")


if __name__ == "__main__":
    main()

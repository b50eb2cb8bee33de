"""The Greek set of the demo worst-of note on the smile market against its price, side by side.

Target (issue: the risk a desk reports): delta, gamma, cross-gamma, vega, rho and theta of the
demo worst-of note on ``markets/demo_smile.toml`` in at most 6x the time of its price at the
same paths (the default 65,536 Sobol paths, every core). Prints a table: the machine's load, a
yardstick timed in the same run (QuantLib's pseudo-random European, as in
``greeks_threads.py``), then, ``--rounds`` times in turn, the price and the Greek set, and the
median of the per-round ratios (ratios measured side by side, never against another run's
absolute times). The desk's whole set (with correlation and dividend sensitivities) is timed
too, for information.

    .venv/bin/python benchmarks/greeks_speed.py [--paths N] [--rounds R] [--json]
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

TARGET = 6.0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--paths", type=int, default=65536)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    market, note = demo_note()
    load = os.getloadavg()
    yard = yardstick()
    # compile the kernels, untimed (each timed call builds its own local-vol tables)
    fp.greeks(note, market, paths=256, seed=1)
    rows = []
    for _ in range(args.rounds):
        fp.models.local_vol._TABLES.clear()
        p_s, price = timed(lambda: fp.price(note, market, paths=args.paths, seed=1))
        fp.models.local_vol._TABLES.clear()
        g_s, g = timed(lambda: fp.greeks(note, market, paths=args.paths, seed=1,
                                         correlation=False, dividends=False))
        fp.models.local_vol._TABLES.clear()
        d_s, _ = timed(lambda: fp.greeks(note, market, paths=args.paths, seed=1))
        rows.append((p_s, g_s, d_s))
    ratio = statistics.median(g / p for p, g, _ in rows)
    desk = statistics.median(d / p for p, _, d in rows)
    deltas = {a: (x.value, x.stderr, x.method) for a, x in g.delta.items()}
    out = {"load_average": load, "yardstick_s": yard, "paths": args.paths,
           "rounds": [{"price_s": p, "greek_set_s": s, "desk_set_s": d} for p, s, d in rows],
           "greek_set_over_price": ratio, "desk_set_over_price": desk, "target": TARGET,
           "met": ratio <= TARGET, "price": price.price, "deltas": deltas,
           "cores": os.cpu_count()}
    if args.json:
        print(json.dumps(out))
        return
    print(f"machine: {out['cores']} cores, load average {load[0]:.2f} {load[1]:.2f} "
          f"{load[2]:.2f}; yardstick {yard:.3f} s")
    print(f"demo worst-of note on the smile market, {args.paths:,} Sobol paths, every core")
    print(f"{'round':<7}{'price s':>9}{'Greek set s':>13}{'ratio':>8}{'desk set s':>12}"
          f"{'ratio':>8}")
    for i, (p, s, d) in enumerate(rows, 1):
        print(f"{i:<7}{p:>9.2f}{s:>13.2f}{s / p:>8.2f}{d:>12.2f}{d / p:>8.2f}")
    print(f"Greek set (delta, gamma, cross-gamma, vega, rho, theta) / price, median: "
          f"{ratio:.2f}x (target {TARGET:g}x: {'met' if out['met'] else 'NOT met'}); with "
          f"correlation and dividends: {desk:.2f}x")
    for a, (v, se, how) in deltas.items():
        print(f"delta {a}: {v:.4f} +- {se:.4f} ({100 * se / abs(v):.1f}% of its value; {how})")


if __name__ == "__main__":
    main()

"""Greeks through the engine on every core: the demo worst-of note on the smile market.

Prints a table: the machine's load, a yardstick timed in the same run (QuantLib's pseudo-random
European, 2^20 paths, one step, best of three), the price of the note, and its full Greek set
(delta, gamma, cross-gamma, vega, rho, theta by bumps on common random numbers) on one thread
and on two, side by side, with the speed-up and a check that both give the same numbers.
The target (issue: one engine) is a speed-up of at least 1.6x on two cores.

    .venv/bin/python benchmarks/greeks_threads.py [--paths N] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import time
import warnings
from pathlib import Path

import QuantLib as ql

import fairpath as fp

ROOT = Path(__file__).resolve().parents[1]


def demo_note() -> tuple[fp.Market, fp.Product]:
    """The demo smile market and its worst-of note (what the Greeks benchmarks time)."""
    return (fp.load_market(ROOT / "markets" / "demo_smile.toml"),
            fp.load_product(ROOT / "payoffs" / "autocall_worst_of.toml"))


def yardstick() -> float:
    """Best of three: QuantLib's pseudo-random European Monte Carlo, 2^20 paths, one step."""
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    spot = ql.QuoteHandle(ql.SimpleQuote(100.0))
    r = ql.YieldTermStructureHandle(ql.FlatForward(today, 0.05, dc))
    q = ql.YieldTermStructureHandle(ql.FlatForward(today, 0.02, dc))
    v = ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.TARGET(), 0.25, dc))
    proc = ql.BlackScholesMertonProcess(spot, q, r, v)
    opt = ql.VanillaOption(ql.PlainVanillaPayoff(ql.Option.Call, 105.0),
                           ql.EuropeanExercise(ql.Date(1, 12, 2027)))
    best = float("inf")
    for s in range(3):
        eng = ql.MCEuropeanEngine(proc, "pseudorandom", timeSteps=1, requiredSamples=1 << 20,
                                  seed=42 + s)
        opt.setPricingEngine(eng)
        t = time.perf_counter()
        opt.NPV()
        best = min(best, time.perf_counter() - t)
    return best


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--paths", type=int, default=4096)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    market, note = demo_note()
    load = os.getloadavg()
    yard = yardstick()
    # compile, and build the local-vol tables of every bumped surface (cached), untimed
    fp.greeks(note, market, paths=256, seed=1, method="bump")
    t = time.perf_counter()
    fp.price(note, market, paths=args.paths, seed=1, threads=2)
    price_s = time.perf_counter() - t
    times, results = {}, {}
    for threads in (1, 2):
        t = time.perf_counter()
        results[threads] = fp.greeks(note, market, paths=args.paths, seed=1, threads=threads,
                                     method="bump")
        times[threads] = time.perf_counter() - t
    same = results[1].to_dict()["greeks"] == results[2].to_dict()["greeks"]
    out = {"load_average": load, "yardstick_s": yard, "paths": args.paths,
           "price_s": price_s, "greeks_1_thread_s": times[1], "greeks_2_threads_s": times[2],
           "speedup": times[1] / times[2], "greeks_over_price": times[2] / price_s,
           "same_numbers": same, "cores": os.cpu_count()}
    if args.json:
        print(json.dumps(out))
        return
    print(f"machine: {out['cores']} cores, load average {load[0]:.2f} {load[1]:.2f} "
          f"{load[2]:.2f}; yardstick {yard:.3f} s")
    print(f"demo worst-of note on the smile market, {args.paths:,} Sobol paths")
    print(f"{'what':<28}{'seconds':>10}{'yardsticks':>12}")
    for label, s in (("price (2 threads)", price_s), ("Greeks, 1 thread", times[1]),
                     ("Greeks, 2 threads", times[2])):
        print(f"{label:<28}{s:>10.2f}{s / yard:>12.1f}")
    print(f"speed-up on two cores: {out['speedup']:.2f}x (target 1.6x: "
          f"{'met' if out['speedup'] >= 1.6 else 'NOT met'}); Greeks / price "
          f"{out['greeks_over_price']:.1f}x; same numbers on 1 and 2 threads: {same}")


if __name__ == "__main__":
    main()

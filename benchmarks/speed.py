"""Time to an accurate price: fairpath against QuantLib's Monte Carlo engines, on one machine.

Run: ``python benchmarks/speed.py [--quick] [--json] [--tasks 1,3] [--profile]
[--refresh-references]``. Prints a table per task, the targets (each "met" or "NOT met") and
notes on where the time goes; ``--json`` prints one JSON object with everything instead.

Market of every task: valuation 2026-12-01, ACT/365F, r = 5%, q = 2%, vol = 25%, spot 100; the
basket and the note use three identical assets NORDA, KELPA, VIREO with pairwise correlation 0.5.

1. European call K = 105, expiry 2027-12-01.
2. Arithmetic Asian call K = 100, 52 weekly fixings from 2026-12-08, paid 2027-11-30.
3. Down-and-out call K = 100, barrier 85 (continuous monitoring), expiry 2027-12-01.
4. Worst-of put on the three assets, strike 100% of initial, notional 100, expiry 2027-12-01.
5. Daily-monitored worst-of autocallable on the three assets (semiannual for 3 years from
   2027-06-01, called at 100%, 4% memory coupon above 70%, 60% daily protection barrier,
   notional 100), pseudo-random sampler: asset-steps per second end to end (paths x grid dates
   x assets / seconds) and peak resident memory, in a fresh process.

Metric of tasks 1-4, *time to an accurate price*: the path counts N = 2^10, 2^11, ... are priced
with 8 seeds each; the answer is the first N whose RMSE of the 8 prices against the reference is
at most 1e-4, and its time the median wall time of one pricing call at that N. fairpath runs with
its defaults (Sobol, its own control variates) after a warm-up call, so imports and compilation
are not counted. QuantLib runs pseudo-random ("pr", antithetic, plus the engine's control
variate where it has one) and low-discrepancy ("ld", Brownian bridge where offered; the seed is
ignored, so its error at N is |price - reference|). A configuration stops when one call takes
about the time budget; one that has not reached 1e-4 by then is extrapolated at the N^-1/2 rate
(pr) or the N^-1 rate (ld, generous to it) and marked "extrapolated".

References: the closed form where one exists (tasks 1 and 3, with QuantLib's analytic engine
beside it); otherwise long fairpath Sobol runs with a standard error of at most 1e-5, cached in
``benchmarks/references.json`` (``--refresh-references`` recomputes), with QuantLib's largest runs
beside it as an independent check.

Notes: per-element costs of the kernels a simulation is made of (PCG64 uniforms, the engine's
inverse normal and scipy's, exp, cumulative sum) beside the engine's own cost per asset-step and
per path, the fixed cost of a small call, and with ``--profile`` a cProfile summary of one
task-5 pricing.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import os
import platform
import resource
import statistics
import subprocess
import sys
import time
from datetime import date, datetime, timedelta
from pathlib import Path

import benchmark_tools
import numpy as np
import scipy

import fairpath as fp
from fairpath import closed_form as cf
from fairpath import sobol as fp_sobol
from fairpath.dates import schedule_dates

# ---------------------------------------------------------------------------------------------
# The tasks
# ---------------------------------------------------------------------------------------------
VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
RATE, DIV, VOL, SPOT, RHO = 0.05, 0.02, 0.25, 100.0, 0.5
NAMES = ("NORDA", "KELPA", "VIREO")
ASIAN_FIXINGS = tuple(date(2026, 12, 8) + timedelta(weeks=i) for i in range(52))
ASIAN_PAY = date(2027, 11, 30)

TOL = 1e-4  # the accuracy: RMSE against the reference, on a spot or notional of 100
SEEDS = tuple(range(1, 9))  # QuantLib reads seed 0 as "seed from the clock"
RATIO_TARGETS = {1: 20.0, 2: 20.0, 3: 1000.0, 4: 20.0}
#: seconds per QuantLib call before extrapolating; --quick shortens only the pseudo-random runs
#: (8 seeds a path count), since the low-discrepancy ones are single calls and usually the best
QL_BUDGET = 1.0
QL_BUDGET_PR_QUICK = 0.25

LV_RATIO_TARGET = 3.0  # local vol within 3x of the flat-vol time (issue 11)
RATE_TARGET = 1e8  # asset-steps per second, task 5
MEMORY_TARGET_MB = 500.0  # peak resident memory of the task-5 process at 2^20 paths
TITLES = {
    1: "European call K=105, 1y",
    2: "arithmetic Asian call K=100, 52 weekly fixings",
    3: "down-and-out call K=100, barrier 85 continuous",
    4: "worst-of put on NORDA/KELPA/VIREO (rho 0.5), notional 100",
    5: "daily-monitored worst-of autocallable, 3y semiannual, pseudo-random",
}
REF_FILE = Path(__file__).resolve().with_name("references.json")
REF_PATHS = 1 << 22  # paths of one reference run
REF_STDERR = 1e-5  # reference runs are added until the standard error is at most this
REF_SEED0 = 1_000_000  # reference seeds, far from the benchmark's


def market() -> fp.Market:
    assets = tuple(fp.Asset(n, SPOT, fp.VolCurve.flat(VOL), DIV) for n in NAMES)
    matrix = tuple(tuple(1.0 if i == j else RHO for j in range(3)) for i in range(3))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE), assets, "ACT/365F",
                     fp.Correlation(NAMES, matrix))


def products() -> dict[int, fp.Product]:
    return {
        1: fp.European(asset="NORDA", right="call", strike=105.0, expiry=EXPIRY),
        2: fp.Asian(asset="NORDA", right="call", strike=100.0, fixings=ASIAN_FIXINGS,
                    expiry=ASIAN_PAY),
        3: fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY, barrier=85.0,
                      direction="down", effect="out", monitoring="continuous"),
        4: fp.Basket(assets=NAMES, combine="worst", right="put", strike_level=1.0,
                     expiry=EXPIRY, notional=100.0),
    }


def smile_market() -> fp.Market:
    """The task-5 market with every asset on a skewed implied-vol surface (SSVI, 25% at the
    money): local volatility, every weekday."""
    from fairpath.market import attach_surface
    from fairpath.surface import ssvi_surface

    base = market()
    curve = base.discount
    surface = ssvi_surface((0.25, 0.5, 1.0, 2.0, 3.0, 4.0),
                           (0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.35, 1.5), VOL, RATE, DIV)
    return dataclasses.replace(base, assets=tuple(attach_surface(a, surface, curve)
                                                  for a in base.assets))


def autocallable() -> fp.Autocallable:
    obs = schedule_dates({"first": date(2027, 6, 1), "every": "6M", "count": 6})
    return fp.Autocallable(assets=NAMES, observations=obs, notional=100.0, autocall_level=1.0,
                           coupon=0.04, coupon_barrier=0.7, memory=True,
                           protection_barrier=0.6, protection_monitoring="daily")


def progress(msg: str) -> None:
    """A line on stderr when it is a terminal (never mixed into the table or the JSON)."""
    if sys.stderr.isatty():
        print(f"  .. {msg}", file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------------------
# QuantLib: the same market and products, and its Monte Carlo configurations
# ---------------------------------------------------------------------------------------------
def quantlib_tasks(quick: bool) -> dict[int, dict]:
    """Per task: the QuantLib instrument, its analytic engine (or None) and the Monte Carlo
    configurations, each ``(name, kind, make)`` with ``make(paths, seed)`` an engine."""
    import QuantLib as ql

    today = ql.Date(VAL.day, VAL.month, VAL.year)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()

    def qd(d: date):
        return ql.Date(d.day, d.month, d.year)

    def process():
        return ql.BlackScholesMertonProcess(
            ql.QuoteHandle(ql.SimpleQuote(SPOT)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, DIV, dc)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, RATE, dc)),
            ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), VOL,
                                                               dc)))

    p = process()
    ex = ql.EuropeanExercise(qd(EXPIRY))
    corr = ql.Matrix(3, 3)
    for i in range(3):
        for j in range(3):
            corr[i][j] = 1.0 if i == j else RHO
    procs = ql.StochasticProcessArray([process() for _ in NAMES], corr)
    # pr: antithetic pairs; ``paths`` counts both members, QuantLib counts a pair as one sample
    euro = ql.VanillaOption(ql.PlainVanillaPayoff(ql.Option.Call, 105.0), ex)
    asian = ql.DiscreteAveragingAsianOption(
        ql.Average.Arithmetic, 0.0, 0, [qd(d) for d in ASIAN_FIXINGS],
        ql.PlainVanillaPayoff(ql.Option.Call, 100.0), ql.EuropeanExercise(qd(ASIAN_PAY)))
    barrier = ql.BarrierOption(ql.Barrier.DownOut, 85.0, 0.0,
                               ql.PlainVanillaPayoff(ql.Option.Call, 100.0), ex)
    basket = ql.BasketOption(ql.MinBasketPayoff(ql.PlainVanillaPayoff(ql.Option.Put, 100.0)), ex)
    out = {
        1: {"option": euro, "analytic": ql.AnalyticEuropeanEngine(p), "configs": [
            ("MCEuropeanEngine pr antithetic, 1 step", "pr", lambda n, s: ql.MCEuropeanEngine(
                p, "pr", timeSteps=1, antitheticVariate=True, requiredSamples=n // 2, seed=s)),
            ("MCEuropeanEngine ld bridge, 1 step", "ld", lambda n, s: ql.MCEuropeanEngine(
                p, "ld", timeSteps=1, brownianBridge=True, requiredSamples=n, seed=s))]},
        2: {"option": asian, "analytic": None, "configs": [
            ("MCDiscreteArithmeticAPEngine pr antithetic+control", "pr",
             lambda n, s: ql.MCDiscreteArithmeticAPEngine(
                 p, "pr", antitheticVariate=True, controlVariate=True, requiredSamples=n // 2,
                 seed=s)),
            ("MCDiscreteArithmeticAPEngine ld bridge+control", "ld",
             lambda n, s: ql.MCDiscreteArithmeticAPEngine(
                 p, "ld", brownianBridge=True, controlVariate=True, requiredSamples=n,
                 seed=s))]},
        3: {"option": barrier, "analytic": ql.AnalyticBarrierEngine(p), "configs": []},
        4: {"option": basket, "analytic": None, "configs": [
            ("MCEuropeanBasketEngine pr antithetic, 1 step", "pr",
             lambda n, s: ql.MCEuropeanBasketEngine(
                 procs, "pr", timeSteps=1, antitheticVariate=True, requiredSamples=n // 2,
                 seed=s)),
            # its low-discrepancy engine refuses a Brownian bridge ("not supported")
            ("MCEuropeanBasketEngine ld, 1 step", "ld", lambda n, s: ql.MCEuropeanBasketEngine(
                procs, "ld", timeSteps=1, requiredSamples=n, seed=s))]},
    }
    for steps in (1, 4) if quick else (1, 4, 16):
        # isBiased=False: the engine's Brownian-bridge crossing check between steps (unbiased)
        out[3]["configs"] += [
            (f"MCBarrierEngine pr antithetic, {steps} step{'s' * (steps > 1)}", "pr",
             lambda n, s, k=steps: ql.MCBarrierEngine(
                 p, "pr", timeSteps=k, antitheticVariate=True, requiredSamples=n // 2,
                 isBiased=False, seed=s)),
            (f"MCBarrierEngine ld bridge, {steps} step{'s' * (steps > 1)}", "ld",
             lambda n, s, k=steps: ql.MCBarrierEngine(
                 p, "ld", timeSteps=k, brownianBridge=True, requiredSamples=n, isBiased=False,
                 seed=s))]
    return out


def ql_price(option, make, paths: int, seed: int) -> tuple[float, float]:
    """(price, seconds) of one QuantLib pricing call (engine construction included)."""
    t0 = time.perf_counter()
    option.setPricingEngine(make(paths, seed))
    value = option.NPV()
    return value, time.perf_counter() - t0


# ---------------------------------------------------------------------------------------------
# Time to an accurate price
# ---------------------------------------------------------------------------------------------
def seed_ladder(price, ref: float, budget: float, n_max: int, n0: int = 1 << 10) -> dict:
    """Double N from ``n0``; at each N price with the 8 seeds (``price(n, seed)`` returns
    ``(value, seconds)``) and take the RMSE against ``ref`` and the median time. Stops at the
    first N with RMSE <= TOL, or when the next doubling would take well over ``budget`` per
    call; then extrapolates at the N^-1/2 rate from the RMSEs of the last three N (pooled as
    RMSE^2 * N, a steadier estimate than the last one alone)."""
    ladder = []
    n = n0
    while True:
        values, times = zip(*(price(n, s) for s in SEEDS), strict=True)
        values = np.array(values)
        rmse = float(np.sqrt(np.mean((values - ref) ** 2)))
        ladder.append({"paths": n, "rmse": rmse, "seconds": statistics.median(times),
                       "mean": float(values.mean()),
                       "stderr_of_mean": float(values.std(ddof=1) / math.sqrt(len(values)))})
        progress(f"N={n:,} RMSE={rmse:.2e} t={ladder[-1]['seconds']:.3g}s")
        if rmse <= TOL:
            last = ladder[-1]
            return {"ladder": ladder, "paths": n, "error": rmse, "seconds": last["seconds"],
                    "extrapolated": False}
        if 2 * ladder[-1]["seconds"] > 1.5 * budget or 2 * n > n_max:
            break
        n *= 2
    last = ladder[-1]
    tail = ladder[-3:]
    level = math.sqrt(sum(r["rmse"] ** 2 * r["paths"] for r in tail) / len(tail) / last["paths"])
    need = last["paths"] * (level / TOL) ** 2
    return {"ladder": ladder, "paths": need, "error": TOL, "seconds": last["seconds"] * need /
            last["paths"], "extrapolated": True, "from_paths": last["paths"],
            "from_error": level, "from_seconds": last["seconds"]}


def ld_ladder(option, make, ref: float, budget: float, n_max: int, n0: int = 1 << 10) -> dict:
    """A low-discrepancy configuration (the seed is ignored): the error |price - ref| at
    doubling N, up to about ``budget`` per call (calls under it timed three times, median).
    Reached at the first N from which every
    measured error is at most TOL (the run stops once three in a row are); otherwise
    extrapolated at the N^-1 rate from the RMS of the last three errors."""
    ladder = []
    n = n0
    while True:
        value, sec = ql_price(option, make, n, SEEDS[0])
        if sec < budget:  # the median of three calls, as steady as the pr timings
            sec = statistics.median([sec] + [ql_price(option, make, n, SEEDS[0])[1]
                                             for _ in range(2)])
        ladder.append({"paths": n, "error": abs(value - ref), "seconds": sec, "value": value})
        progress(f"N={n:,} err={abs(value - ref):.2e} t={sec:.3g}s")
        if len(ladder) >= 3 and all(r["error"] <= TOL for r in ladder[-3:]):
            break
        if 2 * sec > 1.5 * budget or 2 * n > n_max:
            break
        n *= 2
    first = len(ladder)
    while first > 0 and ladder[first - 1]["error"] <= TOL:
        first -= 1
    if first < len(ladder):
        r = ladder[first]
        return {"ladder": ladder, "paths": r["paths"], "error": r["error"],
                "seconds": r["seconds"], "extrapolated": False}
    last = ladder[-1]
    level = math.sqrt(sum(r["error"] ** 2 for r in ladder[-3:]) / len(ladder[-3:]))
    need = last["paths"] * level / TOL
    return {"ladder": ladder, "paths": need, "error": TOL,
            "seconds": last["seconds"] * need / last["paths"], "extrapolated": True,
            "from_paths": last["paths"], "from_error": level, "from_seconds": last["seconds"]}


def fairpath_ladder(product, mkt, ref: float, budget: float, n_max: int) -> dict:
    fp.price(product, mkt, paths=1024, seed=99)  # warm-up: imports, compilation, caches

    seen = {}  # paths -> (sampler, controls) of the last call

    def one(n, seed):
        t0 = time.perf_counter()
        res = fp.price(product, mkt, paths=n, seed=seed)
        sec = time.perf_counter() - t0
        seen[n] = (res.sampler, list(res.controls))
        return res.price, sec

    out = seed_ladder(one, ref, budget, n_max)
    out["sampler"], out["controls"] = seen[out["ladder"][-1]["paths"]]
    return out


# ---------------------------------------------------------------------------------------------
# References
# ---------------------------------------------------------------------------------------------
def definition(task: int) -> str:
    """What a cached reference was computed for (a changed task invalidates it)."""
    m = market()
    return repr((products()[task], m.valuation_date, m.discount, m.assets, m.correlation,
                 m.day_count))


def long_run(product, mkt, max_runs: int = 40) -> dict:
    """Independent Sobol runs of REF_PATHS paths (seeds REF_SEED0, +1, ...), averaged, until
    the standard error of the mean is at most REF_STDERR (at least 4 runs)."""
    prices, errs = [], []
    t0 = time.perf_counter()
    while len(prices) < max_runs:
        res = fp.price(product, mkt, paths=REF_PATHS, seed=REF_SEED0 + len(prices))
        prices.append(res.price)
        errs.append(res.stderr)
        se = math.sqrt(sum(e * e for e in errs)) / len(errs)
        progress(f"reference run {len(prices)}: {res.price:.7f}, stderr so far {se:.2e}")
        if len(prices) >= 4 and se <= REF_STDERR:
            break
    k = len(prices)
    return {"value": float(np.mean(prices)), "stderr": se,
            "stderr_from_spread": float(np.std(prices, ddof=1) / math.sqrt(k)),
            "paths": k * REF_PATHS, "runs": k, "seconds": round(time.perf_counter() - t0, 1),
            "method": (f"fairpath Sobol (16 scramblings, its control variates), mean of {k} "
                       f"independent runs of {REF_PATHS:,} paths (seeds {REF_SEED0}..."
                       f"{REF_SEED0 + k - 1}); stderr from the {16 * k} scramblings"),
            "date": date.today().isoformat(), "fairpath": fp.__version__,
            "commit": benchmark_tools.git_commit()}


def references(tasks, refresh: bool) -> dict[int, dict]:
    mkt = market()
    T = float(mkt.time(EXPIRY))
    out = {}
    if 1 in tasks:
        out[1] = {"value": float(cf.bsm_price(SPOT, 105.0, T, RATE, DIV, VOL, "call")),
                  "stderr": 0.0, "method": "closed form: Black-Scholes-Merton "
                  "(fairpath.closed_form.bsm_price)"}
    if 3 in tasks:
        out[3] = {"value": float(cf.barrier_price(SPOT, 100.0, 85.0, T, RATE, DIV, VOL, "call",
                                                  "down", "out")),
                  "stderr": 0.0, "method": "closed form: Reiner-Rubinstein continuous barrier "
                  "(fairpath.closed_form.barrier_price)"}
    cache = json.loads(REF_FILE.read_text()) if REF_FILE.exists() else {}
    changed = False
    for task in (2, 4):
        if task not in tasks:
            continue
        key, want = f"task{task}", definition(task)
        entry = cache.get(key)
        fresh = refresh or entry is None or entry.get("definition") != want
        if fresh:
            progress(f"computing the reference of task {task}")
            entry = dict(long_run(products()[task], mkt), definition=want)
            cache[key] = entry
            changed = True
        out[task] = {k: v for k, v in entry.items() if k != "definition"}
        out[task]["computed_now"] = fresh
    if changed:
        REF_FILE.write_text(json.dumps(cache, indent=1, sort_keys=True) + "\n")
    return out


# ---------------------------------------------------------------------------------------------
# Tasks 1-4
# ---------------------------------------------------------------------------------------------
def run_task(task: int, ref: dict, ql_task: dict, quick: bool) -> dict:
    mkt = market()
    product = products()[task]
    fp_budget, fp_max = (2.0, 1 << 22) if quick else (8.0, 1 << 24)
    pr_budget = QL_BUDGET_PR_QUICK if quick else QL_BUDGET
    progress(f"task {task}: fairpath")
    fair = fairpath_ladder(product, mkt, ref["value"], fp_budget, fp_max)
    option = ql_task["option"]
    out = {"task": task, "title": TITLES[task], "reference": ref, "fairpath": fair,
           "quantlib": []}
    if ql_task["analytic"] is not None:
        option.setPricingEngine(ql_task["analytic"])
        out["quantlib_analytic"] = option.NPV()
    for name, kind, make in ql_task["configs"]:
        progress(f"task {task}: QuantLib {name}")
        ql_price(option, make, 1024, SEEDS[0])  # warm-up
        if kind == "pr":
            res = seed_ladder(lambda n, s, make=make: ql_price(option, make, n, s),
                              ref["value"], pr_budget, 1 << 28)
        else:
            res = ld_ladder(option, make, ref["value"], QL_BUDGET, 1 << 28)
        out["quantlib"].append(dict(res, name=name, kind=kind))
    best = min(out["quantlib"], key=lambda r: r["seconds"])
    out["quantlib_best"] = best["name"]
    out["ratio"] = best["seconds"] / fair["seconds"]
    out["target"] = RATIO_TARGETS[task]
    out["met"] = out["ratio"] >= out["target"]
    # QuantLib's largest runs, an independent check of the reference
    checks = []
    for r in out["quantlib"]:
        top = r["ladder"][-1]
        if r["kind"] == "pr":
            se = math.hypot(top["stderr_of_mean"], ref.get("stderr", 0.0))
            checks.append({"name": r["name"], "paths": top["paths"], "value": top["mean"],
                           "stderr": top["stderr_of_mean"],
                           "z": (top["mean"] - ref["value"]) / se if se > 0 else None})
        else:
            checks.append({"name": r["name"], "paths": top["paths"], "value": top["value"],
                           "stderr": None, "z": None})
    out["reference_checks"] = checks
    return out


def fmt_row(label: str, r: dict) -> str:
    paths = f"{r['paths']:,.0f}"
    note = ""
    if r["extrapolated"]:
        what = "RMSE" if "rmse" in r["ladder"][0] else "error"
        note = (f"extrapolated from {r['from_paths']:,} paths ({what} {r['from_error']:.1e}, "
                f"{r['from_seconds']:.3g} s)")
    return f"  {label:<52} {paths:>14} {r['error']:>9.1e} {r['seconds']:>10.4g}  {note}"


def print_task(out: dict) -> None:
    ref = out["reference"]
    print(f"\nTask {out['task']}: {out['title']}")
    print(f"  reference {ref['value']:.7f}" + (f" +- {ref['stderr']:.1e}" if ref["stderr"] else "")
          + f": {ref['method']}")
    if "date" in ref:
        print(f"    computed {ref['date']} in {ref['seconds']} s (fairpath {ref['fairpath']}, "
              f"{ref['commit']}), cached in benchmarks/references.json; stderr from the spread "
              f"of the runs {ref['stderr_from_spread']:.1e}")
    if "quantlib_analytic" in out:
        qa = out["quantlib_analytic"]
        print(f"    QuantLib analytic engine {qa:.7f} (difference {qa - ref['value']:+.1e})")
    print("    QuantLib's largest runs (an independent check of the reference):")
    for c in out["reference_checks"]:
        extra = (f" +- {c['stderr']:.1e} (mean of 8 seeds, z = {c['z']:+.1f})"
                 if c["stderr"] is not None else f" (difference {c['value'] - ref['value']:+.1e})")
        print(f"      {c['name']} at {c['paths']:,} paths: {c['value']:.6f}{extra}")
    head = f"  {'engine, configuration':<52} {'paths':>14} {'RMSE/err':>9} {'s/call':>10}"
    print(head)
    print("  " + "-" * (len(head) - 2))
    fair = out["fairpath"]
    print(fmt_row(f" fairpath {fair['sampler']}, defaults", fair))
    for r in out["quantlib"]:
        mark = "*" if r["name"] == out["quantlib_best"] else " "
        print(fmt_row(f"{mark}QL {r['name']}", r))
    controls = ", ".join(fair["controls"]) or "none"
    print(f"  (fairpath's control variates in its last call: {controls})")
    best = next(r for r in out["quantlib"] if r["name"] == out["quantlib_best"])
    print(f"  QuantLib best (*) {best['seconds']:.4g} s"
          + (" (extrapolated)" if best["extrapolated"] else "")
          + f" / fairpath {fair['seconds']:.4g} s" + (" (extrapolated)" if fair["extrapolated"]
                                                       else "")
          + f" = {out['ratio']:,.1f}x; target >= {out['target']:g}x: "
          + ("met" if out["met"] else "NOT met"))


# ---------------------------------------------------------------------------------------------
# Task 5: throughput and peak memory, in fresh processes
# ---------------------------------------------------------------------------------------------
def child(what: str, paths: int) -> None:
    """Runs in a fresh process (``--child``): prints one JSON line."""
    out = {}
    if what in ("task5", "task5lv"):
        mkt, note = (market() if what == "task5" else smile_market()), autocallable()
        # every close simulated: the throughput of daily stepping (under Black the daily
        # watch is otherwise read from monthly dates and bridges: benchmarks/note_speed.py)
        fp.price(note, mkt, paths=4096, sampler="pseudo", seed=1, daily_closes=True)  # warm-up
        t0 = time.perf_counter()
        res = fp.price(note, mkt, paths=paths, sampler="pseudo", seed=2, daily_closes=True)
        out = {"seconds": time.perf_counter() - t0, "price": res.price, "stderr": res.stderr,
               "grid_dates": len(res.extras["dates"]), "paths": res.paths}
    out["peak_kib"], out["peak_source"] = peak_rss_kib()
    print(json.dumps(out))


def peak_rss_kib() -> tuple[int, str]:
    """This process's peak resident memory in KiB: ``VmHWM`` from ``/proc/self/status``.

    Not ``getrusage``: on Linux a child's ``ru_maxrss`` (and so the parent's
    ``RUSAGE_CHILDREN``) also counts the memory of the process it was forked from before the
    ``exec``, which here would be this benchmark's parent with QuantLib and its arrays loaded
    (measured: a 10 MB child of a 320 MB parent reports 320 MB). ``getrusage`` is the fallback
    where ``/proc`` is missing."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]), "VmHWM"
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, "ru_maxrss"


def run_child(what: str, paths: int = 0) -> dict:
    proc = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", what,
                           str(paths)], capture_output=True, text=True)
    if proc.returncode != 0:
        raise RuntimeError(f"the {what} subprocess failed: {proc.stderr.strip()[-800:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def task5_local_vol(paths: int) -> dict:
    """The same note with every asset under local volatility, against its flat-vol time at
    the same path count (target: at most LV_RATIO_TARGET times)."""
    flat = run_child("task5", paths)
    lv = run_child("task5lv", paths)
    ratio = lv["seconds"] / flat["seconds"]
    return {"paths": paths, "flat_seconds": flat["seconds"], "lv_seconds": lv["seconds"],
            "ratio": ratio, "flat_price": flat["price"], "lv_price": lv["price"],
            "lv_stderr": lv["stderr"], "target": LV_RATIO_TARGET, "met": ratio <= LV_RATIO_TARGET}


def print_task5_local_vol(t: dict) -> None:
    print("\nTask 5 under local volatility (every asset on an SSVI skew, 25% at the money), "
          f"{t['paths']:,} paths, pseudo-random")
    print(f"  flat vol {t['flat_seconds']:.3g} s (price {t['flat_price']:.4f}), local vol "
          f"{t['lv_seconds']:.3g} s (price {t['lv_price']:.4f} +- {t['lv_stderr']:.4f}): "
          f"{t['ratio']:.2f}x; target <= {t['target']:g}x: " + ("met" if t["met"] else
                                                              "NOT met"))


def task5(paths: int) -> dict:
    idle = run_child("idle")
    run = run_child("task5", paths)
    steps = run["paths"] * run["grid_dates"] * len(NAMES)
    rate = steps / run["seconds"]
    mb = run["peak_kib"] * 1024 / 1e6
    out = {"task": 5, "title": TITLES[5], "paths": run["paths"], "grid_dates": run["grid_dates"],
           "assets": len(NAMES), "seconds": run["seconds"], "asset_steps_per_second": rate,
           "price": run["price"], "stderr": run["stderr"], "peak_mb": mb,
           "idle_peak_mb": idle["peak_kib"] * 1024 / 1e6, "peak_source": run["peak_source"],
           "rate_target": RATE_TARGET, "rate_met": rate >= RATE_TARGET,
           "memory_target_mb": MEMORY_TARGET_MB, "memory_applies": run["paths"] == 1 << 20}
    out["memory_met"] = mb <= MEMORY_TARGET_MB
    return out


def print_task5(t: dict) -> None:
    print(f"\nTask 5: {t['title']}")
    print(f"  {t['paths']:,} paths x {t['grid_dates']} grid dates x {t['assets']} assets in "
          f"{t['seconds']:.3g} s (one call in a fresh process, after a warm-up call of 4,096 "
          f"paths): price {t['price']:.4f} +- {t['stderr']:.4f}")
    print(f"  throughput {t['asset_steps_per_second']:.3e} asset-steps/s; target >= "
          f"{RATE_TARGET:.0e}: " + ("met" if t["rate_met"] else "NOT met"))
    scope = "" if t["memory_applies"] else " (the target is at 2^20 paths; this run is smaller)"
    print(f"  peak resident memory of the process ({t['peak_source']}) {t['peak_mb']:.0f} MB "
          f"(10^6 bytes; an idle process that "
          f"only imported fairpath: {t['idle_peak_mb']:.0f} MB, so the simulation's share is "
          f"about {t['peak_mb'] - t['idle_peak_mb']:.0f} MB); target <= {MEMORY_TARGET_MB:.0f} "
          f"MB{scope}: " + ("met" if t["memory_met"] else "NOT met"))


# ---------------------------------------------------------------------------------------------
# Where the time goes
# ---------------------------------------------------------------------------------------------
def best_time(fn, repeats: int = 3) -> float:
    """Smallest of ``repeats`` timings; ``fn`` returns its own elapsed seconds (so set-up work
    such as refilling an input array is not timed)."""
    return min(fn() for _ in range(repeats))


def timed(fn):
    def run():
        t0 = time.perf_counter()
        fn()
        return time.perf_counter() - t0
    return run


def kernel_limits(n: int = 10_000_000) -> dict:
    """Nanoseconds per element of the kernels a simulation is made of, on one core."""
    from scipy.special import ndtri
    from scipy.stats import qmc

    from fairpath.kernels import uniforms_to_normals
    from fairpath.sampling import UNIFORM_CLIP

    rng = np.random.Generator(np.random.PCG64(7))
    u, z, out = np.empty(n), np.empty(n), np.empty(n)
    rng.random(out=u)

    def inverse_normal():
        np.copyto(z, u)
        t0 = time.perf_counter()
        uniforms_to_normals(z, UNIFORM_CLIP)
        return time.perf_counter() - t0

    uniforms_to_normals(u[:16].copy(), UNIFORM_CLIP)  # compile or load before timing
    m = int(math.log2(n))
    sobol = qmc.Sobol(1, scramble=True, seed=7)
    sv, shift = fp_sobol.scrambled(1, np.random.default_rng(7))
    fp_sobol.points(sv, shift, 0, 16)  # compile or load before timing
    ns = {
        "pcg64_uniform": best_time(timed(lambda: rng.random(out=out))) / n,
        "sobol_point_fairpath_1d": best_time(timed(lambda: fp_sobol.points(sv, shift, 0, 2**m)))
        / 2**m,
        "sobol_point_scipy_1d": best_time(timed(lambda: sobol.reset().random_base2(m))) / 2**m,
        "inverse_normal_fairpath": best_time(inverse_normal) / n,
        "inverse_normal_scipy_ndtri": best_time(timed(lambda: ndtri(u, out=out))) / n,
        "exp_numpy": best_time(timed(lambda: np.exp(z, out=out))) / n,
        "cumsum_numpy": best_time(timed(lambda: np.cumsum(z, out=out))) / n,
    }
    return {k: v * 1e9 for k, v in ns.items()}


def engine_costs(t5: dict | None, quick: bool) -> dict:
    """The engine's own cost per element: task 1 per path, task 5 per asset-step (from the
    task-5 run), and the fixed cost of a small call."""
    mkt, euro = market(), products()[1]
    fp.price(euro, mkt, paths=1024, seed=99)
    n = 1 << (18 if quick else 20)
    t1 = statistics.median(timed(lambda s=s: fp.price(euro, mkt, paths=n, seed=s))()
                           for s in SEEDS[:3])
    small = [timed(lambda s=s: fp.price(euro, mkt, paths=1024, seed=s))() for s in range(20)]
    out = {"task1_paths": n, "task1_ns_per_path": t1 / n * 1e9,
           "fixed_cost_ms": statistics.median(small) * 1e3}
    if t5 is not None:
        out["task5_ns_per_asset_step"] = 1e9 / t5["asset_steps_per_second"]
    return out


def print_costs(k: dict, e: dict, cores: int) -> None:
    print("\nWhere the time goes (per element, wall time; kernels on one core, "
          f"the engine on all {cores})")
    names = {"pcg64_uniform": "PCG64 uniform (Generator.random)",
             "sobol_point_fairpath_1d": "scrambled Sobol point (fairpath.sobol, 1-D)",
             "sobol_point_scipy_1d": "scrambled Sobol point (scipy, 1-D)",
             "inverse_normal_fairpath": "inverse normal (fairpath.kernels, AS 241)",
             "inverse_normal_scipy_ndtri": "inverse normal (scipy.special.ndtri)",
             "exp_numpy": "exp (numpy)", "cumsum_numpy": "cumulative sum (numpy)"}
    for key, label in names.items():
        print(f"  {label:<46} {k[key]:6.2f} ns")
    floor5 = k["pcg64_uniform"] + k["inverse_normal_fairpath"] + k["cumsum_numpy"]
    if "task5_ns_per_asset_step" in e:
        print(f"  engine, task 5, per asset-step                 "
              f"{e['task5_ns_per_asset_step']:6.2f} ns   (uniform + inverse normal + cumsum "
              f"on one core: {floor5:.2f} ns, over {cores} cores {floor5 / cores:.2f} ns: the "
              f"engine takes {e['task5_ns_per_asset_step'] / (floor5 / cores):.1f}x that)")
    floor1 = k["sobol_point_fairpath_1d"] + k["inverse_normal_fairpath"] + k["exp_numpy"]
    print(f"  engine, task 1, per path ({e['task1_paths']:,} paths)       "
          f"{e['task1_ns_per_path']:6.2f} ns   (Sobol point + inverse normal + exp on one "
          f"core: {floor1:.2f} ns, over {cores} cores {floor1 / cores:.2f} ns: "
          f"{e['task1_ns_per_path'] / (floor1 / cores):.1f}x that)")
    print(f"  fixed cost of one small call (European, 1,024 paths, median of 20): "
          f"{e['fixed_cost_ms']:.2f} ms")


def profile_task5(paths: int = 1 << 16, top: int = 20) -> str:
    """cProfile of one task-5 pricing on one thread (FAIRPATH_THREADS=1, so the simulation
    runs on the profiled thread; compiled kernels show as single calls)."""
    import cProfile
    import io
    import pstats

    old = os.environ.get("FAIRPATH_THREADS")
    os.environ["FAIRPATH_THREADS"] = "1"
    try:
        mkt, note = market(), autocallable()
        fp.price(note, mkt, paths=4096, sampler="pseudo", seed=1)
        prof = cProfile.Profile()
        prof.enable()
        fp.price(note, mkt, paths=paths, sampler="pseudo", seed=2)
        prof.disable()
    finally:
        if old is None:
            del os.environ["FAIRPATH_THREADS"]
        else:
            os.environ["FAIRPATH_THREADS"] = old
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).strip_dirs().sort_stats("cumulative").print_stats(top)
    text = buf.getvalue().strip()
    return text[text.find("ncalls") if "ncalls" in text else 0:]


# ---------------------------------------------------------------------------------------------
# Set-up and main
# ---------------------------------------------------------------------------------------------
def machine() -> dict:
    import numba
    import QuantLib as ql

    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return {"date": datetime.now().isoformat(timespec="seconds"), "cpu": cpu,
            "cores": os.cpu_count(), "load_average": list(os.getloadavg()),
            "python": platform.python_version(), "numpy": np.__version__,
            "scipy": scipy.__version__, "numba": numba.__version__, "quantlib": ql.__version__,
            "fairpath": fp.__version__, "commit": benchmark_tools.git_commit(),
            "fairpath_threads": os.environ.get("FAIRPATH_THREADS", "every core")}


def parse_tasks(text: str) -> list[int]:
    try:
        tasks = sorted({int(x) for x in text.split(",") if x.strip()})
    except ValueError:
        raise SystemExit(f"--tasks: expected numbers 1-5 separated by commas, got {text!r}"
                         ) from None
    if not tasks or any(t not in range(1, 6) for t in tasks):
        raise SystemExit(f"--tasks: expected numbers 1-5 separated by commas, got {text!r}")
    return tasks


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true",
                    help="a short run: QuantLib pseudo-random budget 0.25 s a call, task 5 at "
                    "2^17 paths, fairpath up to 2 s a call; its verdicts are indicative")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--tasks", default="1,2,3,4,5", help="a subset, e.g. 1,3")
    ap.add_argument("--profile", action="store_true",
                    help="add a cProfile summary of one task-5 pricing (2^16 paths)")
    ap.add_argument("--refresh-references", action="store_true",
                    help="recompute the cached references of tasks 2 and 4")
    ap.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child[0], int(args.child[1]))
        return
    tasks = parse_tasks(args.tasks)
    show = not args.json
    report = {"machine": machine(), "quick": args.quick, "tolerance": TOL, "seeds": list(SEEDS),
              "tasks": {}}
    m = report["machine"]
    if show:
        print(f"fairpath speed benchmark, {m['date']}{' (--quick)' if args.quick else ''}")
        print(f"  machine: {m['cpu']}, {m['cores']} cores, load average "
              f"{', '.join(f'{x:.2f}' for x in m['load_average'])}; fairpath threads: "
              f"{m['fairpath_threads']}")
        print(f"  Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, numba "
              f"{m['numba']}, QuantLib {m['quantlib']}, fairpath {m['fairpath']} "
              f"({m['commit']})")
        print(f"  market: valuation {VAL}, ACT/365F, r {RATE:.0%}, q {DIV:.0%}, vol {VOL:.0%}, "
              f"spot {SPOT:g}; NORDA/KELPA/VIREO identical, correlation {RHO}")
        print(f"  metric (tasks 1-4): the first N = 2^10, 2^11, ... whose RMSE over 8 seeds "
              f"against the reference is <= {TOL:g}; time = median wall time of one call at "
              "that N, after a warm-up call (imports and compilation not counted)")
    ql_tasks = quantlib_tasks(args.quick) if any(t <= 4 for t in tasks) else {}
    refs = references([t for t in tasks if t <= 4], args.refresh_references)
    targets = []
    for task in (t for t in tasks if t <= 4):
        try:
            out = run_task(task, refs[task], ql_tasks[task], args.quick)
        except Exception as exc:  # the engine is a moving target: report, go on
            out = {"task": task, "error": f"{type(exc).__name__}: {exc}", "met": False}
            if show:
                print(f"\nTask {task}: FAILED: {out['error']}")
        else:
            if show:
                print_task(out)
        report["tasks"][str(task)] = out
        ratio = out.get("ratio")
        targets.append({"target": f"task {task}: QuantLib's best / fairpath >= "
                        f"{RATIO_TARGETS[task]:g}x", "value": ratio, "met": out["met"],
                        "shown": "failed" if ratio is None else f"{ratio:,.1f}x"})
    t5 = None
    if 5 in tasks:
        paths = 1 << (17 if args.quick else 20)
        progress(f"task 5 at {paths:,} paths in a fresh process")
        try:
            t5 = task5(paths)
        except Exception as exc:
            report["tasks"]["5"] = {"task": 5, "error": f"{type(exc).__name__}: {exc}"}
            if show:
                print(f"\nTask 5: FAILED: {report['tasks']['5']['error']}")
            targets += [{"target": name, "value": None, "met": False, "shown": "failed"}
                        for name in (f"task 5: >= {RATE_TARGET:.0e} asset-steps per second",
                                     f"task 5: peak memory <= {MEMORY_TARGET_MB:g} MB")]
        else:
            report["tasks"]["5"] = t5
            if show:
                print_task5(t5)
            targets += [
                {"target": f"task 5: >= {RATE_TARGET:.0e} asset-steps per second",
                 "value": t5["asset_steps_per_second"], "met": t5["rate_met"],
                 "shown": f"{t5['asset_steps_per_second']:.3e}"},
                {"target": f"task 5: peak memory <= {MEMORY_TARGET_MB:g} MB at 2^20 paths"
                 + ("" if t5["memory_applies"] else f" (measured at {t5['paths']:,})"),
                 "value": t5["peak_mb"], "met": t5["memory_met"],
                 "shown": f"{t5['peak_mb']:.0f} MB"}]
    if 5 in tasks:
        lv_paths = 1 << (15 if args.quick else 17)
        progress(f"task 5 under local volatility at {lv_paths:,} paths")
        try:
            t5lv = task5_local_vol(lv_paths)
        except Exception as exc:
            report["tasks"]["5lv"] = {"error": f"{type(exc).__name__}: {exc}"}
            targets.append({"target": f"task 5 under local vol: <= {LV_RATIO_TARGET:g}x the "
                            "flat-vol time", "value": None, "met": False, "shown": "failed"})
        else:
            report["tasks"]["5lv"] = t5lv
            if show:
                print_task5_local_vol(t5lv)
            targets.append({"target": f"task 5 under local vol: <= {LV_RATIO_TARGET:g}x the "
                            "flat-vol time", "value": t5lv["ratio"], "met": t5lv["met"],
                            "shown": f"{t5lv['ratio']:.2f}x"})
    progress("kernel limits and engine costs")
    report["kernels_ns"] = kernel_limits()
    report["engine_costs"] = engine_costs(t5, args.quick)
    if args.profile:
        progress("profile of task 5")
        report["profile_task5"] = profile_task5()
    report["targets"] = targets
    report["load_average_at_end"] = list(os.getloadavg())
    if args.json:
        print(json.dumps(report, default=float))
        return
    print_costs(report["kernels_ns"], report["engine_costs"], m["cores"])
    if args.profile:
        print("\nProfile of one task-5 pricing, 65,536 paths, one thread (FAIRPATH_THREADS=1), "
              "top functions by cumulative time:")
        print(report["profile_task5"])
    load = ", ".join(f"{x:.2f}" for x in report["load_average_at_end"])
    print("\nNotes: fairpath runs on every core (threads), QuantLib's engines on one. "
          "QuantLib 'pr' paths count both members of an antithetic pair; its 'ld' "
          "engines ignore the seed, so their error is |price - reference| at each N, reached "
          "at the first N from which every measured error is <= 1e-4. A configuration stops "
          "once a call takes about the budget "
          f"({QL_BUDGET:g} s" + (f"; pr {QL_BUDGET_PR_QUICK:g} s with --quick" if args.quick
                                 else "") + "); extrapolated times scale the last call by "
          "N_needed / N, with N_needed = N (RMSE / 1e-4)^2 (pr; RMSE pooled over the last "
          "three N) or N (error / 1e-4) (ld; RMS error of the last three N, generous to it). "
          "Timings are wall times on a machine that may be shared "
          f"(load average at the end {load}).")
    print("\nTargets" + (" (--quick: QuantLib pr extrapolated from shorter runs and task 5 "
                         "at 2^17 paths, so these are indicative; the full run decides)"
                         if args.quick else ""))
    for t in targets:
        print(f"  {t['target']:<64} {t['shown']:>10}  " + ("met" if t["met"] else "NOT met"))


if __name__ == "__main__":
    main()

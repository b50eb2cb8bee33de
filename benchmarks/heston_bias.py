"""The discretisation bias of the Heston QE scheme, by the length of its steps.

Each grid interval of a Heston simulation is cut into steps of at most
``fairpath.models.heston.MAX_STEP_DAYS`` calendar days (Andersen's 2008 quadratic-exponential
scheme with his martingale correction). This script prices Europeans in Andersen's three
demanding test cases (vol of vol near 1, strong negative correlation, long maturities, the Feller
condition violated) with that constant patched to each of 1, 3.5, 7, 14, 30, 91, 182 and 365
days, and
compares each price with the semi-analytic one (``fairpath.fourier.heston_price``, itself
checked against QuantLib's ``AnalyticHestonEngine`` in ``tests/test_fourier.py``). The strikes
70, 100 and 140 of one case share one simulation.

Cases (spot 100, rates and dividends 0; v0 = theta): the parameters as we recall them from
Andersen (2008), section 7; Case I matches the example in PyFENG's ``HestonMcAndersen2008``
docstring (v0 = theta = 0.04, vol of vol 1, kappa 0.5, rho -0.9, 10 years: 13.085 at the money,
which the Fourier price reproduces), Cases II and III are from memory.

    I    kappa 0.5, theta 0.04, vol of vol 1.0, rho -0.9, T 10 years
    II   kappa 0.3, theta 0.04, vol of vol 0.9, rho -0.5, T 15 years
    III  kappa 1.0, theta 0.09, vol of vol 1.0, rho -0.3, T  5 years

Pseudo-random paths (PCG64), a fixed seed per case and step, and one control variate imposed:
the discounted terminal level, whose mean the martingale correction makes exact (a control whose
mean is the Fourier price itself, such as a call at the forward, would pull the estimate to the
reference and hide the scheme's bias). ``bias`` is
the Monte Carlo price less the Fourier price, ``stderr`` the run's standard error, ``z`` their
ratio; ``s`` the wall time of the case's three strikes. A run's time is about proportional to
paths / step, so steps under 1.5 days run on an eighth of ``--paths`` and steps under 5 days on
half, to keep the whole run to a few minutes (their standard errors are larger). Prints the
machine's load at the start and the end and a yardstick timed in the same run (QuantLib's
pseudo-random European, as in ``greeks_threads.py``).

A second table: a path-dependent payoff, whose steps also carry the Brownian-bridge correction of
a continuous barrier (computed with the expected variance of the step, not the path's). A 2-year
down-and-out call (strike 100, barrier 80, continuous monitoring) on Case III's parameters has no
closed form, so each step's price is compared with the one-day steps' price (independent seeds;
the difference's standard error counts both).

    .venv/bin/python benchmarks/heston_bias.py [--paths N] [--steps 1,3.5,7,...] [--seed S]
        [--json]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import time
import warnings
from datetime import date, timedelta

# before fairpath: importing it makes numba look for the code-coverage package, which finds
# coverage.py in this folder, and that script takes the folder off the import path
import benchmark_tools
from greeks_threads import yardstick

import fairpath as fp
import fairpath.models.heston as heston_module
from fairpath.fourier import heston_price
from fairpath.stochvol import HestonParams

VAL = date(2026, 12, 1)
SPOT = 100.0
STRIKES = (70.0, 100.0, 140.0)
#: name: (v0, kappa, theta, vol_of_vol, spot_vol_correlation, years)
CASES = {
    "I": (0.04, 0.5, 0.04, 1.0, -0.9, 10),
    "II": (0.04, 0.3, 0.04, 0.9, -0.5, 15),
    "III": (0.09, 1.0, 0.09, 1.0, -0.3, 5),
}
STEPS = (1.0, 3.5, 7.0, 14.0, 30.0, 91.0, 182.0, 365.0)
BARRIER_STEPS = (1.0, 7.0, 14.0, 30.0, 91.0)
BARRIER_DAYS = 730


def level_control(expiry: date) -> tuple[str, ...]:
    """The name of the engine's control variate on NORDA's discounted level on ``expiry``."""
    return (f"discounted NORDA on {expiry.isoformat()}",)


def case_market(params) -> fp.Market:
    v0, kappa, theta, xi, rho, _ = params
    asset = fp.Asset("NORDA", SPOT, fp.VolCurve.flat(math.sqrt(v0)), model="heston",
                     heston=HestonParams(v0, kappa, theta, xi, rho))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(0.0), (asset,))


def case_products(params) -> tuple[list[fp.Product], float]:
    """The three calls of a case, expiring a whole number of 365-day years away (so that the
    ACT/365F year fraction is exactly T), and T."""
    years = params[5]
    expiry = VAL + timedelta(days=365 * years)
    return [fp.European(asset="NORDA", right="call", strike=k, expiry=expiry)
            for k in STRIKES], float(years)


def paths_at(step: float, paths: int) -> int:
    """The paths of a run at ``step`` days: fewer at the shortest steps (see the notes)."""
    return paths // 8 if step < 1.5 else paths // 2 if step < 5.0 else paths


def measure(name: str, params, step: float, paths: int, seed: int) -> list[dict]:
    heston_module.MAX_STEP_DAYS = step
    market = case_market(params)
    products, T = case_products(params)
    only = level_control(products[0].expiry)
    t = time.perf_counter()
    results = fp.price_many(products, market, paths=paths, seed=seed, sampler="pseudo",
                            control_set=only)
    seconds = time.perf_counter() - t
    v0, kappa, theta, xi, rho, _ = params
    rows = []
    for k, r in zip(STRIKES, results, strict=True):
        if r.controls != only:
            raise RuntimeError(f"expected the control {only}, the run used {r.controls}")
        ref = heston_price(SPOT, k, T, 0.0, 0.0, v0, kappa, theta, xi, rho, "call")
        rows.append({"case": name, "strike": k, "step_days": step, "paths": paths,
                     "analytic": ref, "price": r.price, "bias": r.price - ref,
                     "stderr": r.stderr, "z": (r.price - ref) / r.stderr,
                     "seconds": seconds})
    return rows


def measure_barrier(step: float, paths: int, seed: int) -> dict:
    heston_module.MAX_STEP_DAYS = step
    market = case_market(CASES["III"])
    expiry = VAL + timedelta(days=BARRIER_DAYS)
    product = fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=expiry,
                         barrier=80.0, direction="down", effect="out", monitoring="continuous")
    t = time.perf_counter()
    r = fp.price_many([product], market, paths=paths, seed=seed, sampler="pseudo",
                      control_set=level_control(expiry))[0]
    return {"step_days": step, "paths": paths, "price": r.price, "stderr": r.stderr,
            "seconds": time.perf_counter() - t}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--paths", type=int, default=1 << 19)
    ap.add_argument("--steps", default=",".join(f"{s:g}" for s in STEPS))
    ap.add_argument("--seed", type=int, default=1000)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    steps = tuple(float(s) for s in args.steps.split(","))
    warnings.simplefilter("ignore")
    default_step = heston_module.MAX_STEP_DAYS
    load = os.getloadavg()
    yard = yardstick()
    # compile, untimed
    fp.price_many(case_products(CASES["III"])[0], case_market(CASES["III"]), paths=256,
                  seed=1, sampler="pseudo")
    rows = []
    t0 = time.perf_counter()
    try:
        for name, params in CASES.items():
            for i, step in enumerate(steps):
                rows.extend(measure(name, params, step, paths_at(step, args.paths),
                                    seed=args.seed + 10 * i))
        barrier = [measure_barrier(step, args.paths, seed=args.seed + 500 + 10 * i)
                   for i, step in enumerate(BARRIER_STEPS)]
    finally:
        heston_module.MAX_STEP_DAYS = default_step
    total = time.perf_counter() - t0
    load_end = os.getloadavg()
    out = {"commit": benchmark_tools.git_commit(), "cores": os.cpu_count(),
           "load_average": load, "load_average_at_end": load_end, "yardstick_s": yard,
           "default_step_days": default_step, "seconds": total, "rows": rows,
           "barrier": barrier}
    if args.json:
        print(json.dumps(out))
        return
    print(f"commit {out['commit']}; machine: {out['cores']} cores, load average {load[0]:.2f} "
          f"{load[1]:.2f} {load[2]:.2f} (at the end {load_end[0]:.2f} {load_end[1]:.2f} "
          f"{load_end[2]:.2f}); yardstick {yard:.3f} s")
    print(f"Heston QE bias against the Fourier price, pseudo-random, {args.paths:,} paths "
          f"({paths_at(3.5, args.paths):,} at steps under 5 days, "
          f"{paths_at(1.0, args.paths):,} under 1.5); default step {default_step:g} days")
    print(f"{'case':<5}{'strike':>7}{'step d':>8}{'paths':>9}{'analytic':>10}{'bias':>9}"
          f"{'stderr':>8}{'z':>7}{'s':>7}{'yardst':>8}")
    for r in rows:
        print(f"{r['case']:<5}{r['strike']:>7.0f}{r['step_days']:>8g}{r['paths']:>9,}"
              f"{r['analytic']:>10.4f}{r['bias']:>+9.4f}{r['stderr']:>8.4f}{r['z']:>+7.1f}"
              f"{r['seconds']:>7.2f}{r['seconds'] / yard:>8.1f}")
    print("per step, over the nine case-strikes:")
    print(f"{'step d':>8}{'max |bias|':>12}{'max |z|':>9}{'rms z':>8}{'beyond 3':>10}{'s':>8}")
    for step in steps:
        these = [r for r in rows if r["step_days"] == step]
        zs = [r["z"] for r in these]
        secs = sum({r["case"]: r["seconds"] for r in these}.values())
        print(f"{step:>8g}{max(abs(r['bias']) for r in these):>12.4f}"
              f"{max(abs(z) for z in zs):>9.1f}"
              f"{math.sqrt(sum(z * z for z in zs) / len(zs)):>8.2f}"
              f"{sum(abs(z) > 3 for z in zs):>10d}{secs:>8.1f}")
    ref = barrier[0]
    print(f"2-year down-and-out call 100 / barrier 80 (continuous), Case III parameters, "
          f"{args.paths:,} paths, against the {ref['step_days']:g}-day steps:")
    print(f"{'step d':>8}{'price':>10}{'stderr':>8}{'diff':>9}{'z':>7}{'s':>7}")
    for b in barrier:
        diff = b["price"] - ref["price"]
        se = math.hypot(b["stderr"], ref["stderr"])
        z = f"{diff / se:>+7.1f}" if b is not ref else f"{'':>7}"
        print(f"{b['step_days']:>8g}{b['price']:>10.4f}{b['stderr']:>8.4f}{diff:>+9.4f}{z}"
              f"{b['seconds']:>7.2f}")
    print(f"total {total:.0f} s")


if __name__ == "__main__":
    main()

"""Coverage of the Greeks' error bars: does ``value +- q * stderr`` hold the closed-form Greek
in 95% of runs, and are runs far out in the tails as rare as the interval's own law says?

Run: ``python benchmarks/coverage_greeks.py [--quick] [--seeds N] [--paths N] [--json]``.
The default (200 seeds x 4,096 paths, 4 products x 2 samplers, one ``fp.greeks`` call per seed
giving delta, vega and gamma together) took 5 s on a lightly loaded 2-core machine, ``--seeds
1000`` 21 s, ``--quick`` (40 seeds) about a second. To measure the committed library while the
working tree has uncommitted changes, export it (``git archive HEAD src | tar -x -C DIR``) and
run with ``PYTHONPATH=DIR/src``: the header then names the tree it imported.

Market: one asset, NORDA, spot 100, flat 25% vol, r 5%, dividend yield 2%, valuation
2026-12-01 (the flat Black market of ``benchmarks/coverage.py`` with one asset).
Products, all expiring 2027-12-01 (1 year, ACT/365F): European call K=105, European put K=95,
cash-or-nothing digital calls K=110 and K=130 paying 1.

Every product is run with ``fp.greeks(product, market, paths=N, sampler=..., seed=s)`` for seeds
1..S, both samplers ("sobol": 16 scramblings; "pseudo"), method "auto" (pathwise delta and vega
for the Europeans; for the digitals, likelihood-ratio delta and gamma unless they are far
noisier than the bump, and a bumped vega; gamma of the Europeans is bumped). Each run of each
Greek gives ``z = (value - reference) / stderr``.

References: closed forms, ``fairpath.closed_form.bsm_greeks`` (Black-Scholes-Merton) for the
Europeans and ``fairpath.closed_form.digital_greeks`` (cash-or-nothing) for the digitals; both
in fairpath's units (delta per unit of spot, gamma per unit of spot squared, vega per 1.00 of
vol). Bumped Greeks carry a finite-difference bias (1% spot bump, one vol point) that the
closed form does not: the ``bias/se`` column shows whether it matters at this path count.

The interval: fairpath's Greek error bar under Sobol is the spread of the 16 scramblings'
estimates over sqrt(16) (``Result.weighted`` in the engine), so the interval is
``value +- t(15, 97.5%) * stderr`` (t = 2.131): it claims 0.89% of runs beyond 3 standard
errors, 0.115% beyond 4, a z spread of 1.074. Pseudo-random: ``w' Cov w / N`` over every
path, ``value +- 1.96 * stderr``: 0.27% beyond 3, 0.006% beyond 4, spread 1.

Printed per case (product x sampler x Greek): the coverage (with its binomial standard error at
the claimed 95%), the shares beyond 3 and 4 standard errors (and the chance of at least that
many beyond 4 if the interval's law held), the largest |z|, the mean z +- its standard error,
the spread of z, the mean error over the runs' RMS stderr (bias/se), and the method fairpath
reported (with a count when it changed between seeds). A run with a zero error bar counts as
beyond 3 and 4 unless its value equals the reference.
"""

from __future__ import annotations

import sys
from pathlib import Path

import benchmark_tools  # shared helpers: imported before this folder leaves the path

# This folder holds coverage.py, which shares its name with the code-coverage package that
# numba tries to import: keep this folder off the import path, so that such an import finds
# the package (or nothing) and never that script.
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]

import argparse  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import Counter  # noqa: E402
from datetime import date, datetime  # noqa: E402

import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

import fairpath as fp  # noqa: E402
from fairpath import closed_form as cf  # noqa: E402

VAL = date(2026, 12, 1)
ONE_YEAR = date(2027, 12, 1)
ASSET = "NORDA"
RATE, DIV, VOL, SPOT = 0.05, 0.02, 0.25, 100.0
SAMPLERS = ("sobol", "pseudo")
GREEKS = ("delta", "vega", "gamma")
SEEDS, SEEDS_QUICK, PATHS = 200, 40, 4096
REPLICATES = 16
#: the law the interval claims, per sampler, and its 97.5% point
CLAIMED = {"sobol": stats.t(REPLICATES - 1), "pseudo": stats.norm()}

QUANTILE = {name: float(law.ppf(0.975)) for name, law in CLAIMED.items()}

#: name -> (kind, strike, right, title)
CASES = {
    "call K=105": ("european", 105.0, "call", "European call K=105, 1y"),
    "put K=95": ("european", 95.0, "put", "European put K=95, 1y"),
    "digital K=110": ("digital", 110.0, "call", "cash-or-nothing digital call K=110, 1y, pays 1"),
    "digital K=130": ("digital", 130.0, "call", "cash-or-nothing digital call K=130, 1y, pays 1"),
}


def black_market() -> fp.Market:
    """One asset on a flat Black market (as ``black_market()`` in coverage.py, one asset)."""
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE),
                     (fp.Asset(ASSET, SPOT, fp.VolCurve.flat(VOL), DIV),), "ACT/365F")


def make_product(name: str) -> fp.Product:
    kind, strike, right, _ = CASES[name]
    if kind == "european":
        return fp.European(asset=ASSET, right=right, strike=strike, expiry=ONE_YEAR)
    return fp.Digital(asset=ASSET, right=right, strike=strike, expiry=ONE_YEAR)


def closed_form(name: str, market: fp.Market) -> dict[str, float]:
    """Price, delta, vega and gamma from the closed form (fairpath's units)."""
    kind, strike, right, _ = CASES[name]
    t = float(market.time(ONE_YEAR))
    f = cf.bsm_greeks if kind == "european" else cf.digital_greeks
    return {k: float(v) for k, v in f(SPOT, strike, t, RATE, DIV, VOL, right).items()}


def reference_source(name: str) -> str:
    return ("closed form, Black-Scholes-Merton (closed_form.bsm_greeks)"
            if CASES[name][0] == "european" else
            "closed form, cash-or-nothing (closed_form.digital_greeks)")


def progress(msg: str) -> None:
    """A line on stderr when it is a terminal (never mixed into the table or the JSON)."""
    if sys.stderr.isatty():
        print(f"  .. {msg}", file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------------------
# The study
# ---------------------------------------------------------------------------------------------
def run_seeds(product, market, sampler: str, seeds: int, paths: int) -> dict[str, list[dict]]:
    """Per Greek, one record per seed: value, stderr, method."""
    out: dict[str, list[dict]] = {k: [] for k in GREEKS}
    for seed in range(1, seeds + 1):
        g = fp.greeks(product, market, paths=paths, sampler=sampler, seed=seed)
        for k in GREEKS:
            x = getattr(g, k)[ASSET]
            out[k].append({"seed": seed, "value": x.value, "stderr": x.stderr,
                           "method": x.method})
    return out


def case_stats(runs: list[dict], ref: float, sampler: str) -> dict:
    """Coverage and the law of z over one case's runs (``benchmark_tools.z_stats``; a run
    covers when ``value +- q stderr`` holds the closed form), and the methods reported."""
    values = np.array([r["value"] for r in runs])
    stderrs = np.array([r["stderr"] for r in runs])
    covered = np.abs(values - ref) <= QUANTILE[sampler] * stderrs
    out = benchmark_tools.z_stats(values, stderrs, covered, ref, 0.0, CLAIMED[sampler])
    out["methods"] = dict(Counter(r["method"] for r in runs))
    return out


def pooled(rows: list[dict]) -> dict[str, dict]:
    """Per sampler, the runs of every case together."""
    return benchmark_tools.pooled(rows, CLAIMED)


# ---------------------------------------------------------------------------------------------
# Printing
# ---------------------------------------------------------------------------------------------
def fmt_pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def short_method(methods: dict[str, int]) -> str:
    def short(m: str) -> str:
        m = m.replace("bump (central, common numbers)", "bump")
        m = m.replace("likelihood ratio (first step)", "LR")
        return m.replace("; the likelihood ratio was over 3x noisier", " (LR >3x noisier)")
    if len(methods) == 1:
        return short(next(iter(methods)))
    return ", ".join(f"{short(m)} x{c}" for m, c in sorted(methods.items(), key=lambda x: -x[1]))


def print_references(refs: dict[str, dict]) -> None:
    print("\nReferences (closed forms; delta per unit of spot, vega per 1.00 of vol, gamma per "
          "unit of spot squared)")
    print(f"  {'product':<14} {'price':>10} {'delta':>11} {'vega':>11} {'gamma':>11}  source")
    for name, ref in refs.items():
        print(f"  {name:<14} {ref['price']:10.6f} {ref['delta']:11.6f} {ref['vega']:11.6f} "
              f"{ref['gamma']:11.3e}  {reference_source(name)}")


def print_table(rows: list[dict]) -> None:
    print("\nCoverage (z = (value - closed form) / stderr; cover95 = share of runs with |z| <= "
          f"q, q = {QUANTILE['sobol']:.3f} Sobol, {QUANTILE['pseudo']:.2f} pseudo, +- its "
          "binomial stderr at 95%; p(>4) = chance of at least that many runs beyond 4 under "
          "the interval's own law)")
    print(f"  {'product':<14} {'sampler':<7} {'greek':<6} {'seeds':>5} {'cover95':>14} "
          f"{'>3se':>6} {'>4se':>6} {'p(>4)':>7} {'max|z|':>7} {'mean z':>13} {'z sd':>5} "
          f"{'bias/se':>13}  method")
    for r in rows:
        s = r["stats"]
        under = s["coverage"] < 0.95 - 2 * s["coverage_se"]
        cover = f"{fmt_pct(s['coverage'])} +-{fmt_pct(s['coverage_se'])}" + ("*" if under
                                                                             else " ")
        mz = "-" if s["mean_z"] is None else f"{s['mean_z']:+.2f} +-{s['mean_z_se']:.2f}"
        mx = "-" if s["max_abs_z"] is None else f"{s['max_abs_z']:.2f}"
        sd = "-" if s["z_sd"] is None else f"{s['z_sd']:.2f}"
        p4 = "" if not s["beyond4_count"] else f"{s['p_beyond4']:.2g}"
        bias = f"{s['bias']:+.2f} +-{s['bias_se']:.2f}"
        zero = (f"  ({s['zero_stderr_runs']} runs with a zero stderr)"
                if s["zero_stderr_runs"] else "")
        print(f"  {r['product']:<14} {r['sampler']:<7} {r['greek']:<6} {s['seeds']:>5} "
              f"{cover:>14} {fmt_pct(s['beyond3']):>6} {fmt_pct(s['beyond4']):>6} {p4:>7} "
              f"{mx:>7} {mz:>13} {sd:>5} {bias:>13}  {short_method(s['methods'])}{zero}")
    print("  * coverage more than 2 binomial stderrs below 95%")
    for name, p in pooled(rows).items():
        print(f"  pooled, {name} ({p['runs']:,} runs in {p['cases']} cases): cover95 "
              f"{fmt_pct(p['coverage'])} +-{fmt_pct(p['coverage_se'])}; beyond 3: "
              f"{p['beyond3']} runs, {p['claimed_beyond3']:.1f} claimed (chance of at least as "
              f"many {p['p_beyond3']:.2g}); beyond 4: {p['beyond4']}, {p['claimed_beyond4']:.2f} "
              f"claimed (chance {p['p_beyond4']:.2g})")
    print("  bias/se: (mean value - closed form) / RMS stderr of the runs, +- its own stderr; "
          "a bumped Greek's finite-difference bias shows here")
    print("  method: LR = likelihood ratio (first step); bump = central bump on common random "
          "numbers")
    for name, law in CLAIMED.items():
        what = f"Student t, {REPLICATES - 1} df" if name == "sobol" else "normal"
        print(f"  claimed by the {name} interval ({what}): beyond 3 {fmt_pct(2 * law.sf(3.0))}"
              f", beyond 4 {100 * 2 * law.sf(4.0):.3f}%, z sd {law.std():.3f}")


# ---------------------------------------------------------------------------------------------
# Main
# ---------------------------------------------------------------------------------------------
def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help=f"{SEEDS_QUICK} seeds per case")
    ap.add_argument("--seeds", type=int, help=f"seeds per case (default {SEEDS})")
    ap.add_argument("--paths", type=int, default=PATHS, help=f"paths per run (default {PATHS})")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args()
    seeds = args.seeds if args.seeds is not None else SEEDS_QUICK if args.quick else SEEDS
    if seeds < 2:
        raise SystemExit("--seeds: at least 2")
    if args.paths < 16:
        raise SystemExit("--paths: at least 16")
    warnings.simplefilter("ignore")
    t_start = time.perf_counter()
    load_start = os.getloadavg()
    stamp = datetime.now().isoformat(timespec="seconds")
    commit = benchmark_tools.git_commit()
    show = not args.json
    if show:
        print(f"fairpath Greeks coverage study, {stamp}{' (--quick)' if args.quick else ''}; "
              f"fairpath {fp.__version__} ({commit}), {os.cpu_count()} cores, load average at "
              f"start {', '.join(f'{x:.2f}' for x in load_start)}")
        print(f"  seeds 1..{seeds} per case at {args.paths:,} paths; fp.greeks defaults "
              f"(method auto, {REPLICATES} Sobol scramblings); market: {ASSET} spot {SPOT:g}, "
              f"vol {VOL:.0%}, r {RATE:.0%}, q {DIV:.0%}, valuation {VAL}")

    market = black_market()
    rows, refs = [], {}
    for name in CASES:
        product = make_product(name)
        ref = closed_form(name, market)
        value = product.reference(market)
        if value is not None and abs(float(value) - ref["price"]) > 1e-10:
            raise SystemExit(f"{name}: closed_form gives {ref['price']}, the product's "
                             f"reference {value}")
        refs[name] = ref
        fp.greeks(product, market, paths=256, sampler="pseudo", seed=0)  # warm-up
        for sampler in SAMPLERS:
            progress(f"{name} / {sampler}: {seeds} seeds")
            t0 = time.perf_counter()
            runs = run_seeds(product, market, sampler, seeds, args.paths)
            sec = time.perf_counter() - t0
            for greek in GREEKS:
                rows.append({"product": name, "title": CASES[name][3], "sampler": sampler,
                             "greek": greek, "paths": args.paths, "seconds": round(sec, 1),
                             "reference": ref[greek], "reference_source": reference_source(name),
                             "stats": case_stats(runs[greek], ref[greek], sampler),
                             "runs": runs[greek]})
    wall = time.perf_counter() - t_start
    load_end = os.getloadavg()
    if args.json:
        print(json.dumps({
            "date": stamp, "quick": args.quick, "fairpath": fp.__version__, "commit": commit,
            "cores": os.cpu_count(), "paths": args.paths, "seeds": seeds,
            "quantiles": QUANTILE, "references": refs, "cases": rows, "pooled": pooled(rows),
            "load_average_start": list(load_start), "load_average_end": list(load_end),
            "wall_seconds": round(wall, 1)}))
        return
    print_references(refs)
    print_table(rows)
    secs = {(r["product"], r["sampler"]): r["seconds"] for r in rows}
    print("\nSeconds per product and sampler (all its seeds): "
          + ", ".join(f"{p}/{s} {v:.0f}" for (p, s), v in secs.items()))
    print(f"Load average at the end {', '.join(f'{x:.2f}' for x in load_end)}; wall time "
          f"{wall:.0f} s ({wall / 60:.1f} min)")


if __name__ == "__main__":
    main()

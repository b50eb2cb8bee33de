"""Coverage of fairpath's error bars: does the reported 95% interval hold the true value in 95%
of runs, and are runs far out in the tails as rare as the interval's own law says?

Run: ``python benchmarks/coverage.py [--quick] [--seeds N] [--paths N] [--only NAMES] [--json]
[--refresh-references]``. A full run (32 cases: 200 seeds x 4,096 paths on the flat Black
market, 100 seeds on the local-vol one) takes about 4 minutes on a 2-core machine with the
references cached (3.6 min measured, the autocallable half of it); computing the references
from scratch added 17 minutes there (pseudo-random runs, capped at 10 minutes each).
``--quick`` (40 and 20 seeds, references capped at 90 s each) takes about a minute with them
cached.

Every case is a product family on a market with one sampler. It is priced with seeds 1..N at a
small path count; each run gives ``z = (price - reference) / stderr``. Printed per case: the
share of runs whose ``ci95`` holds the reference (with its binomial standard error at the
claimed 95%, so 93% can be told from 95%), the shares beyond 3 and 4 standard errors (with the
chance of seeing at least that many beyond 4 if the interval's law were right), the largest
|z|, the mean z (a bias shows there; its own standard error beside it), the spread of z, and
the mean error over the runs' RMS stderr (``bias/se``: a bias measure that, unlike the mean z,
is not moved when a run's error and its stderr rise together, as they do for skewed payoffs).
Then, per sampler, every case's runs pooled: how many lie beyond 3 and 4 standard errors
against how many the interval's law claims, and the chance of at least that many.
What the interval claims: Sobol (16 scramblings) uses Student's t with 15 degrees of freedom,
so 0.89% of runs beyond 3, 0.115% beyond 4, spread 1.074; pseudo-random uses the normal law,
0.27% beyond 3, 0.006% beyond 4, spread 1.

Families (assets NORDA, KELPA, VIREO: spot 100, r 5%, q 2%, correlation 0.5, valuation
2026-12-01): European call K=105 1y; digital call K=130 1y (pays 1); arithmetic Asian call
K=100, 52 weekly fixings; down-and-out call K=100, barrier 85 watched continuously, 1y;
up-and-out put K=100, barrier 115 watched at every weekday close, 6 months; worst-of put on
the three assets, notional 100, 1y; a 3-year worst-of autocallable (semiannual calls at 100%,
4% memory coupon above 70%, 60% protection watched daily, notional 100); a formula paying
1,000 times the growth of NORDA's quarterly average over its first fixing, floored at zero.

Markets: "black", every asset at a flat 25% vol; "local-vol", every asset on the same skewed
SSVI surface (25% at the money), local volatility by Dupire with daily log-Euler steps.

References: the closed form where one exists (flat Black market only): Black-Scholes-Merton
for the call, the cash-or-nothing formula for the digital, Reiner-Rubinstein for the
continuous barrier, the exact quadrature of the weekday-monitored barrier (not the
Broadie-Glasserman-Kou shift, which is off by about a third of a Sobol standard error here).
Otherwise a long pseudo-random fairpath run (seeds from 1,000,000 up, runs of 2^20 paths,
control variates on) extended until its standard error is at most a tenth of the smaller
median per-run standard error of the two samplers, or its time cap is spent; it is cached in
``benchmarks/coverage_references.json`` (keyed by the case's repr; extended, never recomputed,
when a later run needs it finer; ``--refresh-references`` starts afresh). Under local
volatility the reference is the same discretised model, so what is measured is the error bar
of the estimate, not the discretisation bias.
"""

from __future__ import annotations

import sys
from pathlib import Path

import benchmark_tools  # shared helpers: imported before this folder leaves the path

# This file shares its name with the code-coverage package, which numba tries to import: keep
# this folder off the import path, so that such an import finds the package (or nothing) and
# never this script.
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]

import argparse  # noqa: E402
import dataclasses  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import os  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from datetime import date, datetime, timedelta  # noqa: E402

import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

import fairpath as fp  # noqa: E402
from fairpath import closed_form as cf  # noqa: E402
from fairpath.dates import schedule_dates, weekdays_between  # noqa: E402
from fairpath.products.loader import product_from_dict  # noqa: E402

# ---------------------------------------------------------------------------------------------
# Markets and products
# ---------------------------------------------------------------------------------------------
VAL = date(2026, 12, 1)
ONE_YEAR = date(2027, 12, 1)
SIX_MONTHS = date(2027, 6, 1)
RATE, DIV, VOL, SPOT, RHO = 0.05, 0.02, 0.25, 100.0, 0.5
NAMES = ("NORDA", "KELPA", "VIREO")
SAMPLERS = ("sobol", "pseudo")
MARKETS = ("black", "local-vol")
FAMILIES = ("european", "digital", "asian", "barrier-continuous", "barrier-daily", "worst-of",
            "autocallable", "formula")
TITLES = {
    "european": "European call K=105, 1y",
    "digital": "digital call K=130, 1y, pays 1",
    "asian": "arithmetic Asian call K=100, 52 weekly fixings",
    "barrier-continuous": "down-and-out call K=100, H=85 continuous, 1y",
    "barrier-daily": "up-and-out put K=100, H=115 weekday closes, 6m",
    "worst-of": "worst-of put on NORDA/KELPA/VIREO, notional 100, 1y",
    "autocallable": "worst-of autocallable 3y, 4% memory coupon, 60% daily protection",
    "formula": "formula: 1000 x max(mean(NORDA) / NORDA[0] - 1, 0), quarterly, 1y",
}

SEEDS = {"black": 200, "local-vol": 100}
SEEDS_QUICK = {"black": 40, "local-vol": 20}
PATHS = 4096
REF_SEED0 = 1_000_000  # reference seeds, far from the study's 1..N
REF_RUN_PATHS = 1 << 20  # paths of one reference run
REF_RATIO = 0.1  # reference stderr at most this times the per-run stderr
REF_BUDGET = 600.0  # seconds a reference may take (on top of what the cache holds)
REF_BUDGET_QUICK = 90.0
REF_FILE = Path(__file__).resolve().with_name("coverage_references.json")
#: what the 95% interval claims, per sampler: P(|z| > 3), P(|z| > 4), the spread of z
CLAIMED = {"sobol": stats.t(15), "pseudo": stats.norm()}



def black_market() -> fp.Market:
    assets = tuple(fp.Asset(n, SPOT, fp.VolCurve.flat(VOL), DIV) for n in NAMES)
    matrix = tuple(tuple(1.0 if i == j else RHO for j in range(3)) for i in range(3))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE), assets, "ACT/365F",
                     fp.Correlation(NAMES, matrix))


def local_vol_market() -> fp.Market:
    """Every asset on a skewed SSVI surface (25% at the money): local volatility."""
    from fairpath.market import attach_surface
    from fairpath.surface import ssvi_surface

    base = black_market()
    surface = ssvi_surface((0.25, 0.5, 1.0, 2.0, 3.0, 4.0),
                           (0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.35, 1.5), VOL, RATE, DIV)
    return dataclasses.replace(base, assets=tuple(attach_surface(a, surface, base.discount)
                                                  for a in base.assets))


def make_market(name: str) -> fp.Market:
    return black_market() if name == "black" else local_vol_market()


def make_product(family: str) -> fp.Product:
    if family == "european":
        return fp.European(asset="NORDA", right="call", strike=105.0, expiry=ONE_YEAR)
    if family == "digital":
        return fp.Digital(asset="NORDA", right="call", strike=130.0, expiry=ONE_YEAR)
    if family == "asian":
        weekly = tuple(date(2026, 12, 8) + timedelta(weeks=i) for i in range(52))
        return fp.Asian(asset="NORDA", right="call", strike=100.0, fixings=weekly,
                        expiry=date(2027, 11, 30))
    if family == "barrier-continuous":
        return fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=ONE_YEAR,
                          barrier=85.0, direction="down", effect="out", monitoring="continuous")
    if family == "barrier-daily":
        return fp.Barrier(asset="NORDA", right="put", strike=100.0, expiry=SIX_MONTHS,
                          barrier=115.0, direction="up", effect="out", monitoring="daily")
    if family == "worst-of":
        return fp.Basket(assets=NAMES, combine="worst", right="put", strike_level=1.0,
                         expiry=ONE_YEAR, notional=100.0)
    if family == "autocallable":
        obs = schedule_dates({"first": SIX_MONTHS, "every": "6M", "count": 6})
        return fp.Autocallable(assets=NAMES, observations=obs, notional=100.0,
                               autocall_level=1.0, coupon=0.04, coupon_barrier=0.7, memory=True,
                               protection_barrier=0.6, protection_monitoring="daily")
    if family == "formula":
        return product_from_dict({
            "kind": "formula", "name": "NORDA average-growth note", "assets": ["NORDA"],
            "dates": {"first": date(2027, 3, 1), "every": "3M", "count": 4},
            "expression": "max(mean(NORDA) / NORDA[0] - 1, 0) * 1000", "pay_date": ONE_YEAR})
    raise ValueError(family)


def progress(msg: str) -> None:
    """A line on stderr when it is a terminal (never mixed into the table or the JSON)."""
    if sys.stderr.isatty():
        print(f"  .. {msg}", file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------------------
# References
# ---------------------------------------------------------------------------------------------
def exact_reference(family: str, product: fp.Product, market: fp.Market) -> dict | None:
    """The closed form (or exact quadrature) where one holds: the flat Black market only."""
    if any(a.surface is not None for a in market.assets):
        return None
    if family in ("european", "digital", "barrier-continuous"):
        value = product.reference(market)
        if value is None:
            return None
        method = {"european": "closed form, Black-Scholes-Merton",
                  "digital": "closed form, cash-or-nothing",
                  "barrier-continuous": "closed form, Reiner-Rubinstein"}[family]
        return {"value": float(value), "stderr": 0.0, "method": method, "short": "closed form"}
    if family == "barrier-daily":
        a = market.asset(product.asset)
        t = float(market.time(product.expiry))
        times = [float(market.time(d)) for d in weekdays_between(VAL, product.expiry)]
        value = cf.discrete_barrier_quadrature(
            a.spot, product.strike, product.barrier, times, t, RATE, a.dividend_yield, VOL,
            product.right, product.direction, product.effect, points=8001)
        return {"value": float(value), "stderr": 0.0, "short": "quadrature",
                "method": f"exact quadrature over the {len(times)} weekday closes "
                          "(closed_form.discrete_barrier_quadrature, 8,001 points)"}
    return None


def definition(product: fp.Product, market: fp.Market) -> str:
    """What a cached reference was computed for (a changed case invalidates it)."""
    return repr(("pseudo", "control variates on", product, market.valuation_date,
                 market.discount, market.assets, market.correlation, market.day_count))


def load_cache() -> dict:
    return json.loads(REF_FILE.read_text()) if REF_FILE.exists() else {}


def save_cache(cache: dict) -> None:
    REF_FILE.write_text(json.dumps(cache, indent=1, sort_keys=True) + "\n")


def summarize_runs(runs: list[list[float]]) -> dict:
    """Mean of equal-size independent runs ``[seed, price, stderr, seconds]`` and its error."""
    prices = np.array([r[1] for r in runs])
    errs = np.array([r[2] for r in runs])
    k = len(runs)
    out = {"value": float(prices.mean()), "stderr": float(math.sqrt(np.sum(errs**2)) / k),
           "runs": k, "paths": k * REF_RUN_PATHS, "seconds": round(sum(r[3] for r in runs), 1)}
    out["stderr_from_spread"] = (float(prices.std(ddof=1) / math.sqrt(k)) if k > 1 else None)
    return out


def long_reference(key: str, product: fp.Product, market: fp.Market, target: float,
                   budget: float, cache: dict, refresh: bool) -> dict:
    """The cached long pseudo-random run for ``key``, extended (seeds REF_SEED0, +1, ...) until
    its standard error is at most ``target`` or ``budget`` seconds are spent."""
    want = definition(product, market)
    entry = cache.get(key)
    if refresh or entry is None or entry.get("definition") != want:
        entry = {"definition": want, "runs": []}
    runs = entry["runs"]
    t0 = time.perf_counter()
    added = 0
    while True:
        if len(runs) >= 2 and summarize_runs(runs)["stderr"] <= target:
            break
        spent = time.perf_counter() - t0
        if runs and spent + runs[-1][3] > budget:
            break
        seed = REF_SEED0 + len(runs)
        t1 = time.perf_counter()
        res = fp.price(product, market, paths=REF_RUN_PATHS, sampler="pseudo", seed=seed)
        runs.append([seed, res.price, res.stderr, round(time.perf_counter() - t1, 2)])
        added += 1
        progress(f"reference {key}: run {len(runs)}, stderr so far "
                 f"{summarize_runs(runs)['stderr']:.2e} (target {target:.2e})")
    if added:
        entry.update(date=date.today().isoformat(), fairpath=fp.__version__,
                     commit=benchmark_tools.git_commit())
        cache[key] = entry
        save_cache(cache)
    out = summarize_runs(runs)
    out.update(short="long run", computed_now=added, date=entry.get("date"),
               method=f"fairpath pseudo-random, mean of {out['runs']} independent runs of "
                      f"{REF_RUN_PATHS:,} paths (seeds {REF_SEED0}...{REF_SEED0 + len(runs) - 1})"
                      ", control variates on")
    return out


# ---------------------------------------------------------------------------------------------
# The study
# ---------------------------------------------------------------------------------------------
def run_seeds(product, market, sampler: str, seeds: int, paths: int) -> list[dict]:
    out = []
    for seed in range(1, seeds + 1):
        r = fp.price(product, market, paths=paths, sampler=sampler, seed=seed)
        out.append({"seed": seed, "price": r.price, "stderr": r.stderr,
                    "lo": r.ci95[0], "hi": r.ci95[1]})
    return out


def case_stats(runs: list[dict], ref: float, ref_se: float, sampler: str) -> dict:
    """Coverage and the law of z over one case's runs (``benchmark_tools.z_stats``; a run
    covers when its ``ci95`` holds the reference)."""
    return benchmark_tools.z_stats(np.array([r["price"] for r in runs]),
                         np.array([r["stderr"] for r in runs]),
                         np.array([r["lo"] <= ref <= r["hi"] for r in runs]), ref, ref_se,
                         CLAIMED[sampler])


def pooled(rows: list[dict]) -> dict[str, dict]:
    """Per sampler, the runs of every case together: is the excess in the tails a pattern?"""
    return benchmark_tools.pooled(rows, CLAIMED)


def parse_only(text: str | None) -> dict[str, set[str]]:
    """``--only`` terms, comma-separated: alternatives within a kind (family, market,
    sampler), all kinds at once (``digital,asian,sobol`` = digital or Asian, Sobol only)."""
    kinds = {"family": FAMILIES, "market": MARKETS, "sampler": SAMPLERS}
    out = {k: set(v) for k, v in kinds.items()}
    if not text:
        return out
    chosen: dict[str, set[str]] = {}
    for term in (t.strip() for t in text.split(",") if t.strip()):
        hits = [(k, name) for k, names in kinds.items() for name in names
                if name == term or (term in name and k == "family")]
        if not hits:
            known = ", ".join(n for v in kinds.values() for n in v)
            raise SystemExit(f"--only: unknown name {term!r}; known: {known}")
        for k, name in hits:
            chosen.setdefault(k, set()).add(name)
    out.update(chosen)
    return out


# ---------------------------------------------------------------------------------------------
# Printing
# ---------------------------------------------------------------------------------------------
def fmt_pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def print_references(refs: dict, per_run: dict) -> None:
    print("\nReferences (ratio: the reference's stderr over the smaller median per-run stderr "
          "of the two samplers; at most 0.1 wanted)")
    print(f"  {'family':<19} {'market':<9} {'value':>13} {'stderr':>9} {'ratio':>6}  source")
    for (family, mkt), ref in refs.items():
        se_run = per_run.get((family, mkt))
        ratio = ref["stderr"] / se_run if se_run else None
        ratio_s = "exact" if ref["stderr"] == 0 else "-" if ratio is None else f"{ratio:.3f}"
        flag = "  (coarser than wanted)" if ratio is not None and ratio > REF_RATIO else ""
        if ref["short"] == "long run":
            spread = ref.get("stderr_from_spread")
            src = (f"long run, {ref['paths']:,} pseudo-random paths in {ref['runs']} runs, "
                   f"{ref['seconds']:.0f} s" + (f"; stderr from the runs' spread "
                                                 f"{spread:.1e}" if spread else ""))
        else:
            src = ref["method"]
        print(f"  {family:<19} {mkt:<9} {ref['value']:13.7f} {ref['stderr']:9.1e} "
              f"{ratio_s:>6}  {src}{flag}")


def print_table(rows: list[dict]) -> None:
    print("\nCoverage (z = (price - reference) / stderr; cover95 = share of runs whose ci95 "
          "holds the reference, +- its binomial stderr at 95%; p(>4) = chance of at least that "
          "many runs beyond 4 under the interval's own law)")
    head = (f"  {'family':<19} {'market':<9} {'sampler':<7} {'seeds':>5} {'paths':>6} "
            f"{'cover95':>14} {'>3se':>6} {'>4se':>6} {'p(>4)':>7} {'max|z|':>7} "
            f"{'mean z':>13} {'z sd':>5} {'bias/se':>13}")
    print(head)
    for r in rows:
        s = r["stats"]
        under = s["coverage"] < 0.95 - 2 * s["coverage_se"]
        cover = f"{fmt_pct(s['coverage'])} +-{fmt_pct(s['coverage_se'])}" + ("*" if under else
                                                                              " ")
        mz = "-" if s["mean_z"] is None else f"{s['mean_z']:+.2f} +-{s['mean_z_se']:.2f}"
        mx = "-" if s["max_abs_z"] is None else f"{s['max_abs_z']:.2f}"
        sd = "-" if s["z_sd"] is None else f"{s['z_sd']:.2f}"
        bias = f"{s['bias']:+.2f} +-{s['bias_se']:.2f}"
        p4 = "" if not s["beyond4_count"] else f"{s['p_beyond4']:.3f}"
        print(f"  {r['family']:<19} {r['market']:<9} {r['sampler']:<7} {s['seeds']:>5} "
              f"{r['paths']:>6} {cover:>14} {fmt_pct(s['beyond3']):>6} "
              f"{fmt_pct(s['beyond4']):>6} {p4:>7} {mx:>7} {mz:>13} {sd:>5} {bias:>13}"
              + (f"  ({s['zero_stderr_runs']} runs with a zero stderr)"
                 if s["zero_stderr_runs"] else ""))
    print("  * coverage more than 2 binomial stderrs below 95%")
    for name, p in pooled(rows).items():
        print(f"  pooled, {name} ({p['runs']:,} runs in {p['cases']} cases): cover95 "
              f"{fmt_pct(p['coverage'])} +-{fmt_pct(p['coverage_se'])}; beyond 3: "
              f"{p['beyond3']} runs, {p['claimed_beyond3']:.1f} claimed (chance of at least as "
              f"many {p['p_beyond3']:.2g}); beyond 4: {p['beyond4']}, {p['claimed_beyond4']:.2f} "
              f"claimed (chance {p['p_beyond4']:.2g}); largest |z| {p['max_abs_z']:.2f}")
    print("  bias/se: (mean price - reference) / RMS stderr of the runs, +- its own stderr "
          "(the runs' spread and the reference's error); unlike the mean z it is not moved "
          "by a run's error and stderr rising together")
    for name, law in CLAIMED.items():
        what = "Student t, 15 df" if name == "sobol" else "normal"
        print(f"  claimed by the {name} interval ({what}): "
              f"beyond 3 {fmt_pct(2 * law.sf(3.0))}, beyond 4 {100 * 2 * law.sf(4.0):.3f}%, "
              f"z sd {law.std():.3f}")


# ---------------------------------------------------------------------------------------------
# Main
# ---------------------------------------------------------------------------------------------
def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true",
                    help="40 seeds on the Black market, 20 under local vol; references capped "
                    f"at {REF_BUDGET_QUICK:g} s each")
    ap.add_argument("--seeds", type=int, help="seeds per case on every market (default 200 "
                    "Black, 100 local vol)")
    ap.add_argument("--paths", type=int, default=PATHS, help="paths per run (default 4096)")
    ap.add_argument("--only", help="comma-separated names: families (european, digital, asian, "
                    "barrier-continuous, barrier-daily, worst-of, autocallable, formula; "
                    "'barrier' takes both), markets (black, local-vol), samplers (sobol, pseudo)")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    ap.add_argument("--refresh-references", action="store_true",
                    help="recompute the cached long references of the cases run")
    args = ap.parse_args()
    if args.seeds is not None and args.seeds < 2:
        raise SystemExit("--seeds: at least 2")
    if args.paths < 16:
        raise SystemExit("--paths: at least 16")
    only = parse_only(args.only)
    warnings.simplefilter("ignore")
    t_start = time.perf_counter()
    load_start = os.getloadavg()
    seeds_of = dict(SEEDS_QUICK if args.quick else SEEDS)
    if args.seeds is not None:
        seeds_of = {k: args.seeds for k in seeds_of}
    budget = REF_BUDGET_QUICK if args.quick else REF_BUDGET
    show = not args.json
    if show:
        print(f"fairpath coverage study, {datetime.now().isoformat(timespec='seconds')}"
              f"{' (--quick)' if args.quick else ''}; fairpath {fp.__version__} "
              f"({benchmark_tools.git_commit()}), {os.cpu_count()} cores, load average at start "
              f"{', '.join(f'{x:.2f}' for x in load_start)}")
        print(f"  seeds 1..N per case (N: {seeds_of['black']} Black, {seeds_of['local-vol']} "
              f"local vol) at {args.paths:,} paths, default settings (16 Sobol scramblings, "
              "control variates on)")

    cache = load_cache()
    rows, refs, per_run = [], {}, {}
    for mkt_name in (m for m in MARKETS if m in only["market"]):
        market = make_market(mkt_name)
        for family in (f for f in FAMILIES if f in only["family"]):
            product = make_product(family)
            fp.price(product, market, paths=256, sampler="pseudo", seed=0)  # warm-up
            runs = {}
            for sampler in (s for s in SAMPLERS if s in only["sampler"]):
                progress(f"{family} / {mkt_name} / {sampler}: {seeds_of[mkt_name]} seeds")
                t0 = time.perf_counter()
                runs[sampler] = (run_seeds(product, market, sampler, seeds_of[mkt_name],
                                           args.paths), time.perf_counter() - t0)
            se_run = min(float(np.median([r["stderr"] for r in rr])) for rr, _ in
                         runs.values())
            per_run[(family, mkt_name)] = se_run
            ref = exact_reference(family, product, market)
            if ref is None:
                ref = long_reference(f"{family}/{mkt_name}", product, market,
                                     REF_RATIO * se_run, budget, cache,
                                     args.refresh_references)
            refs[(family, mkt_name)] = ref
            for sampler, (rr, sec) in runs.items():
                rows.append({"family": family, "market": mkt_name, "sampler": sampler,
                             "paths": args.paths, "seconds": round(sec, 1),
                             "reference": ref["value"], "reference_stderr": ref["stderr"],
                             "reference_source": ref["short"],
                             "stats": case_stats(rr, ref["value"], ref["stderr"], sampler),
                             "runs": rr})
    wall = time.perf_counter() - t_start
    load_end = os.getloadavg()
    if args.json:
        print(json.dumps({
            "date": datetime.now().isoformat(timespec="seconds"), "quick": args.quick,
            "fairpath": fp.__version__, "commit": benchmark_tools.git_commit(),
            "cores": os.cpu_count(),
            "paths": args.paths, "seeds": seeds_of,
            "references": [dict(v, family=f, market=m, ratio_to_run_stderr=(
                v["stderr"] / per_run[(f, m)] if per_run[(f, m)] else None))
                for (f, m), v in refs.items()],
            "cases": rows, "pooled": pooled(rows), "load_average_start": list(load_start),
            "load_average_end": list(load_end), "wall_seconds": round(wall, 1)}))
        return
    print_references(refs, per_run)
    print_table(rows)
    slow = [f"{r['family']}/{r['market']}/{r['sampler']} {r['seconds']:.0f} s" for r in rows
            if r["seconds"] >= 10]
    print("\nSeconds per case (its seeds, not its reference): "
          + (", ".join(slow) + "; the others" if slow else "every case") + " under 10 s")
    print(f"Load average at the end {', '.join(f'{x:.2f}' for x in load_end)}; wall time "
          f"{wall:.0f} s ({wall / 60:.1f} min)")


if __name__ == "__main__":
    main()

"""Autocallable notes (fairpath.products.autocall) against outside references.

References used here, each named again beside its check:

1. Limiting case: a note that is never called and always pays its coupon, with a maturity-only
   knock-in, is a strip of discounted coupons + a zero-coupon bond - notional / (k S0) gap puts
   (gap option: Haug, *The Complete Guide to Option Pricing Formulas*, 2nd ed. 2007, ch. 4, as
   ``fairpath.closed_form.gap_option``, itself checked here against QuantLib's ``GapPayoff`` with
   ``AnalyticEuropeanEngine``).
2. Unreachable knock-in: the same note reduces to a deterministic coupon strip + bond, and a
   callable note to the same note without protection barrier (identity on common numbers).
3. Correlation 1 with identical assets: a worst-of equals the one-asset note.
4. Independent reference implementations written below (plain numpy loops over the weekdays
   and observation dates, exact GBM steps with Cholesky-correlated normals from numpy's
   ``default_rng``) for a 3-asset worst-of note with memory, step-down and daily knock-in, and
   for a struck trade with a final knock-in.
5. Monotonicity properties on common random numbers (``fp.price_many``).
6. Consistency of the reported diagnostics (redemption, coupon and loss probabilities), with
   the closed-form risk-neutral probabilities N(-d2) of the never-called note.
7. Continuous >= daily >= final knock-in, and the continuous note against a brute-force
   simulation on a grid of 8 steps per calendar day.
8. Bad input (product files in tmp_path, through the Python API and the command line).

Monte Carlo assertions: |MC - reference| <= 4 combined standard errors (plus a stated allowance
where the reference is approximate) at fixed seeds. Every simulated step is exact (no
discretisation bias), so the only approximate reference is the fine-grid one of section 7.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest
import QuantLib as ql
from scipy.stats import norm

import fairpath as fp
from clitools import run
from fairpath import closed_form as cf

ROOT = Path(__file__).resolve().parents[1]
DEMO_MARKET = ROOT / "markets" / "demo.toml"

VAL = date(2026, 12, 1)
RATE = 0.03
NAMES = ("NORDA", "KELPA", "VIREO")
SPOTS = {"NORDA": 100.0, "KELPA": 42.5, "VIREO": 215.0}
VOLS = {"NORDA": 0.25, "KELPA": 0.30, "VIREO": 0.38}
DIVS = {"NORDA": 0.02, "KELPA": 0.01, "VIREO": 0.0}
CORR = ((1.0, 0.6, 0.4), (0.6, 1.0, 0.5), (0.4, 0.5, 1.0))
# semiannual over three years; the last date (2029-12-01, a Saturday) rolled to Monday as a
# generated schedule would be
SEMI = (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1), date(2028, 12, 1),
        date(2029, 6, 1), date(2029, 12, 3))
QUARTERLY_2Y = (date(2027, 3, 1), date(2027, 6, 1), date(2027, 9, 1), date(2027, 12, 1),
                date(2028, 3, 1), date(2028, 6, 1), date(2028, 9, 1), date(2028, 12, 1))
QUARTERLY_1Y = QUARTERLY_2Y[:4]
assert all(d.weekday() < 5 for d in SEMI + QUARTERLY_2Y)


def flat_market(names=NAMES, *, spots=None, vols=None, divs=None, corr=CORR,
                rate=RATE) -> fp.Market:
    """A flat market (one rate, flat vols, continuous dividend yields) on the named assets."""
    spots = spots or SPOTS
    vols = vols or VOLS
    divs = divs or DIVS
    assets = tuple(fp.Asset(n, spots[n], fp.VolCurve.flat(vols[n]), divs[n]) for n in names)
    correlation = None
    if len(names) > 1:
        idx = [NAMES.index(n) for n in names] if corr is CORR else range(len(names))
        correlation = fp.Correlation(tuple(names), tuple(tuple(corr[i][j] for j in idx)
                                                         for i in idx))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate), assets, correlation=correlation)


def note(assets=("NORDA",), observations=SEMI, **kw) -> fp.Autocallable:
    terms = dict(notional=1000.0, autocall_level=1.0, coupon=0.04, coupon_barrier=0.7,
                 protection_barrier=0.6)
    terms.update(kw)
    return fp.Autocallable(assets=tuple(assets), observations=tuple(observations), **terms)


def years(d: date) -> float:
    return (d - VAL).days / 365.0


def within(a: float, b: float, se: float, allowance: float = 0.0) -> bool:
    return abs(a - b) <= 4.0 * se + allowance


def combined(*ses: float) -> float:
    return math.sqrt(sum(s * s for s in ses))


def binomial_se(p: float, n: int) -> float:
    """Standard error of a frequency over n independent paths (also an upper bound, by the
    Bhatia-Davis inequality, for the mean of any per-path quantity in [0, 1] with mean p)."""
    return math.sqrt(max(p * (1.0 - p), 0.0) / n)


# ============================================================================ 1. gap puts

_QL_TODAY = ql.Date(VAL.day, VAL.month, VAL.year)


def ql_gap(spot, strike, trigger, expiry: date, r, q, vol, right) -> float:
    """Gap option from QuantLib: ``GapPayoff(type, strike, secondStrike)`` pays
    ``secondStrike - S`` if ``S < strike`` (put), so its ``strike`` is our trigger."""
    ql.Settings.instance().evaluationDate = _QL_TODAY
    dc = ql.Actual365Fixed()  # year fraction days / 365, as the market's ACT/365F
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)),
        ql.YieldTermStructureHandle(ql.FlatForward(_QL_TODAY, q, dc)),  # continuous
        ql.YieldTermStructureHandle(ql.FlatForward(_QL_TODAY, r, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_QL_TODAY, ql.NullCalendar(), vol,
                                                           dc)))
    kind = ql.Option.Put if right == "put" else ql.Option.Call
    option = ql.VanillaOption(ql.GapPayoff(kind, trigger, strike),
                              ql.EuropeanExercise(ql.Date(expiry.day, expiry.month, expiry.year)))
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return option.NPV()


@pytest.mark.parametrize("right", ["put", "call"])
@pytest.mark.parametrize("strike,trigger", [(100.0, 60.0), (100.0, 100.0), (90.0, 60.0),
                                            (90.0, 90.0), (110.0, 80.0), (80.0, 120.0)])
def test_gap_option_matches_quantlib(right, strike, trigger):
    # reference: QuantLib GapPayoff + AnalyticEuropeanEngine
    T = years(SEMI[-1])
    ours = cf.gap_option(100.0, strike, trigger, T, RATE, 0.02, 0.25, right)
    theirs = ql_gap(100.0, strike, trigger, SEMI[-1], RATE, 0.02, 0.25, right)
    assert ours == pytest.approx(theirs, rel=1e-10, abs=1e-10)


def coupon_strip_minus_gap_puts(n: fp.Autocallable, m: fp.Market) -> float:
    """Never called, coupon always paid, knock-in watched at maturity only (written here from the
    rules, not taken from fairpath.validate): the note pays ``N c`` on every date and at maturity
    ``N - N / (k S0) (k S0 - S_T) 1{S_T < min(barrier, k) S0}``, i.e. coupons + bond - N/(k S0)
    gap puts with strike ``k S0`` and trigger ``min(barrier, k) S0``."""
    a = m.assets[0]
    coupons = sum(n.coupon * n.notional * math.exp(-RATE * years(d)) for d in n.observations)
    T = years(n.maturity)
    k = n.strike_level * a.spot
    trigger = min(n.protection_barrier, n.strike_level) * a.spot
    put = cf.gap_option(a.spot, k, trigger, T, RATE, a.dividend_yield, a.vol.vols[0], "put")
    return coupons + n.notional * math.exp(-RATE * T) - n.notional / k * put


@pytest.mark.parametrize("barrier", [0.6, 1.0])
@pytest.mark.parametrize("strike_level", [1.0, 0.9])
def test_never_called_note_is_coupons_bond_minus_gap_puts(barrier, strike_level):
    # reference: Haug (2007) ch. 4 gap put (cf.gap_option, checked against QuantLib above)
    m = flat_market(("NORDA",))
    n = note(autocall_level=1e6, coupon=0.03, coupon_barrier=0.0, protection_barrier=barrier,
             strike_level=strike_level)
    ref = coupon_strip_minus_gap_puts(n, m)
    for sampler, seed in (("sobol", 41), ("pseudo", 42)):
        res = fp.price(n, m, paths=16384, sampler=sampler, seed=seed)
        assert res.stderr > 0
        assert within(res.price, ref, res.stderr), (sampler, res.price, ref, res.stderr)
        # the diagnostics of a never-called note: no redemption before maturity, every coupon
        assert all(res.diagnostics[f"autocall probability {d}"] == 0.0 for d in SEMI[:-1])
        assert all(res.diagnostics[f"expected coupon {d}"] == pytest.approx(30.0, rel=1e-12)
                   for d in SEMI)


# ============================================================================ 2. no knock-in

@pytest.mark.parametrize("monitoring", ["final", "continuous"])
def test_unreachable_knock_in_never_called_is_coupon_strip_plus_bond(monitoring):
    # reference: sum of discounted coupons + zero-coupon bond (exact; nothing is random)
    m = flat_market(("NORDA",))
    n = note(autocall_level=1e6, coupon=0.03, coupon_barrier=0.0, protection_barrier=1e-6,
             protection_monitoring=monitoring)
    ref = sum(30.0 * math.exp(-RATE * years(d)) for d in SEMI) + 1000.0 * math.exp(
        -RATE * years(SEMI[-1]))
    res = fp.price(n, m, paths=4096, sampler="sobol", seed=3)
    assert res.price == pytest.approx(ref, rel=1e-12)
    assert res.stderr <= 1e-9
    assert res.diagnostics["knock-in probability"] == 0.0


@pytest.mark.parametrize("monitoring", ["final", "daily", "continuous"])
def test_unreachable_knock_in_equals_no_protection_barrier(monitoring):
    # reference: the same note with protection_barrier 0 (never breached), same random numbers;
    # a barrier at 1e-6 of the initial level is 30+ standard deviations away over 3 years
    m = flat_market(("NORDA",))
    tiny = note(protection_barrier=1e-6, protection_monitoring=monitoring)
    none = note(protection_barrier=0.0, protection_monitoring=monitoring)
    a, b = fp.price_many([tiny, none], m, paths=4096, sampler="pseudo", seed=5)
    assert a.price == pytest.approx(b.price, rel=1e-12)
    assert a.diagnostics["knock-in probability"] == b.diagnostics["knock-in probability"] == 0.0
    # and the note with a realistic barrier is cheaper (the put it is short is worth something)
    risky = note(protection_barrier=0.6, protection_monitoring=monitoring)
    c = fp.price_many([risky, none], m, paths=4096, sampler="pseudo", seed=5)[0]
    assert c.price < b.price


# ============================================================================ 3. correlation 1

@pytest.mark.parametrize("rho", [1.0, 0.999999])
@pytest.mark.parametrize("monitoring,observations", [("final", SEMI),
                                                     ("daily", QUARTERLY_1Y[:2])])
def test_worst_of_identical_assets_at_correlation_one_equals_single(rho, monitoring,
                                                                    observations):
    # reference: the one-asset note (three copies of one asset moving together have worst = it)
    same = dict.fromkeys(NAMES, 100.0)
    m3 = flat_market(NAMES, spots=same, vols=dict.fromkeys(NAMES, 0.25),
                     divs=dict.fromkeys(NAMES, 0.02),
                     corr=tuple(tuple(1.0 if i == j else rho for j in range(3))
                                for i in range(3)))
    m1 = flat_market(("NORDA",))
    kw = dict(observations=observations, memory=True, autocall_step=-0.05,
              protection_monitoring=monitoring)
    worst = fp.price(note(NAMES, **kw), m3, paths=16384, sampler="sobol", seed=7)
    single = fp.price(note(("NORDA",), **kw), m1, paths=16384, sampler="sobol", seed=7)
    assert within(worst.price, single.price, combined(worst.stderr, single.stderr)), (
        worst.price, single.price, worst.stderr, single.stderr)
    for key, v in single.diagnostics.items():  # redemption odds agree too (binomial bound)
        if "probability" in key:
            assert abs(worst.diagnostics[key] - v) <= 4 * combined(binomial_se(v, 16384),
                                                                   binomial_se(v, 16384)), key


# ============================================================================ 4. reference MC

def weekdays(start: date, end: date) -> list[date]:
    out, d = [], start + timedelta(days=1)
    while d <= end:
        if d.weekday() < 5:
            out.append(d)
        d += timedelta(days=1)
    return out


def reference_worst_of(*, observations, initial, autocall_level, autocall_step, coupon,
                       coupon_barrier, memory, protection_barrier, monitoring, strike_level,
                       notional, coupons_owed=0, paths, seed, chunk=20000) -> dict:
    """Straightforward simulation of a worst-of autocallable on NORDA/KELPA/VIREO of the flat
    market above, written from the rules in formats.md with no fairpath code.

    Steps: every weekday after VAL to maturity when monitoring == "daily", else the future
    observation dates; each step is the exact GBM step ``x += (r - q - vol^2/2) dt +
    vol sqrt(dt) (L z)`` with ``L`` the Cholesky factor of the correlation and ``z`` from
    ``numpy.random.default_rng(seed)``. Returns the mean discounted payoff, its standard error,
    and the frequencies of each early redemption, of a knock-in and of a capital loss at
    maturity (both counted among the notes alive at maturity).
    """
    rng = np.random.default_rng(seed)
    future = [d for d in observations if d > VAL]
    grid = weekdays(VAL, observations[-1]) if monitoring == "daily" else future
    vol = np.array([VOLS[n] for n in NAMES])
    mu = RATE - np.array([DIVS[n] for n in NAMES]) - 0.5 * vol**2
    chol = np.linalg.cholesky(np.array(CORR))
    x0 = np.log(np.array([SPOTS[n] for n in NAMES]) / np.array(initial))
    last = len(observations) - 1
    values, called, knocked, lost = [], {d: 0 for d in future[:-1]}, 0, 0
    for start in range(0, paths, chunk):
        n = min(chunk, paths - start)
        x = np.tile(x0, (n, 1))
        prev = VAL
        alive = np.ones(n, dtype=bool)
        owed = np.full(n, float(coupons_owed))
        breached = np.zeros(n, dtype=bool)
        pay = np.zeros(n)
        for d in grid:
            dt = (d - prev).days / 365.0
            prev = d
            x += mu * dt + vol * math.sqrt(dt) * (rng.standard_normal((n, 3)) @ chol.T)
            worst = np.exp(x.min(axis=1))
            if monitoring == "daily":
                breached |= worst <= protection_barrier
            if d not in future:
                continue
            k = observations.index(d)  # index in the whole schedule (past dates count)
            df = math.exp(-RATE * years(d))
            hit = worst >= coupon_barrier
            if memory:
                cash = np.where(hit, coupon * (1.0 + owed), 0.0)
                owed = np.where(hit, 0.0, owed + 1.0)
            else:
                cash = np.where(hit, coupon, 0.0)
            pay += alive * cash * notional * df
            if k < last:
                c = alive & (worst >= autocall_level + k * autocall_step)
                pay += c * notional * df
                called[d] += int(c.sum())
                alive &= ~c
            else:
                if monitoring == "final":
                    breached = worst <= protection_barrier
                loss = breached & (worst < strike_level)
                redemption = np.where(loss, worst / strike_level, 1.0)
                pay += alive * redemption * notional * df
                knocked += int((alive & breached).sum())
                lost += int((alive & loss).sum())
        values.append(pay)
    v = np.concatenate(values)
    return {"price": float(v.mean()), "stderr": float(v.std(ddof=1) / math.sqrt(paths)),
            "autocall": {d: c / paths for d, c in called.items()},
            "knock-in": knocked / paths, "capital loss": lost / paths}


def assert_diagnostics_match(res, ref, n_engine, n_ref):
    d = res.diagnostics
    pairs = [(f"autocall probability {k}", p) for k, p in ref["autocall"].items()]
    pairs += [("knock-in probability", ref["knock-in"]),
              ("capital loss probability", ref["capital loss"])]
    for key, p in pairs:
        se = combined(binomial_se(p, n_engine), binomial_se(p, n_ref))
        assert within(d[key], p, se), (key, d[key], p, se)


def test_worst_of_memory_step_down_daily_knock_in_matches_reference_simulation():
    # reference: reference_worst_of above (independent simulation, 100,000 paths)
    m = flat_market()
    n = note(NAMES, QUARTERLY_2Y, autocall_level=1.0, autocall_step=-0.025, coupon=0.02,
             coupon_barrier=0.7, memory=True, protection_barrier=0.6,
             protection_monitoring="daily", strike_level=1.0)
    res = fp.price(n, m, paths=16384, sampler="pseudo", seed=2027)
    ref = reference_worst_of(observations=QUARTERLY_2Y, initial=[SPOTS[a] for a in NAMES],
                             autocall_level=1.0, autocall_step=-0.025, coupon=0.02,
                             coupon_barrier=0.7, memory=True, protection_barrier=0.6,
                             monitoring="daily", strike_level=1.0, notional=1000.0,
                             paths=100_000, seed=11)
    se = combined(res.stderr, ref["stderr"])
    assert within(res.price, ref["price"], se), (res.price, ref["price"], se)
    assert_diagnostics_match(res, ref, 16384, 100_000)


def test_struck_worst_of_final_knock_in_matches_reference_simulation():
    # reference: reference_worst_of above (400,000 paths). Struck in September 2026 at levels
    # other than today's spots, the first observation past with its coupon missed (owed).
    obs = (date(2026, 9, 1), date(2027, 3, 1), date(2027, 9, 1), date(2028, 3, 1),
           date(2028, 9, 1))
    initial = {"NORDA": 104.0, "KELPA": 40.0, "VIREO": 230.0}
    terms = dict(autocall_level=1.0, autocall_step=-0.05, coupon=0.03, coupon_barrier=0.75,
                 memory=True, protection_barrier=0.65, strike_level=0.95, notional=1000.0,
                 coupons_owed=1)
    n = fp.Autocallable(assets=NAMES, observations=obs, initial_levels=initial,
                        protection_monitoring="final", **terms)
    m = flat_market()
    res = fp.price(n, m, paths=65536, sampler="pseudo", seed=2026)
    ref = reference_worst_of(observations=obs, initial=[initial[a] for a in NAMES],
                             monitoring="final", paths=400_000, seed=12, chunk=100_000,
                             **terms)
    se = combined(res.stderr, ref["stderr"])
    assert within(res.price, ref["price"], se), (res.price, ref["price"], se)
    assert_diagnostics_match(res, ref, 65536, 400_000)
    assert f"autocall probability {obs[0]}" not in res.diagnostics  # the past date is ignored
    # the owed coupon matters: without it the note is worth less by about the first
    # observation's chance of paying (same numbers)
    lo = fp.price(dataclasses.replace(n, coupons_owed=0), m, paths=65536, sampler="pseudo",
                  seed=2026)
    assert lo.price < res.price - 4 * combined(lo.stderr, res.stderr)


# ============================================================================ 5. properties

CASES = [
    # (assets, observations, monitoring, sampler)
    (("NORDA",), SEMI, "final", "sobol"),
    (("NORDA", "KELPA"), SEMI, "final", "sobol"),
    (("NORDA", "VIREO"), QUARTERLY_1Y, "daily", "pseudo"),
]


@pytest.mark.parametrize("assets,observations,monitoring,sampler", CASES)
def test_price_is_monotone_in_coupon_and_barriers(assets, observations, monitoring, sampler):
    m = flat_market(assets)
    base = note(assets, observations, memory=True, protection_monitoring=monitoring)

    def prices(**variants):
        (key, values), = variants.items()
        res = fp.price_many([dataclasses.replace(base, **{key: v}) for v in values], m,
                            paths=8192, sampler=sampler, seed=13)
        return [r.price for r in res]

    p = prices(coupon=[0.0, 0.02, 0.04, 0.06])
    assert all(b > a for a, b in zip(p, p[1:], strict=False)), p
    p = prices(coupon_barrier=[0.9, 0.75, 0.6, 0.45])  # falling barrier: more coupons
    assert all(b > a for a, b in zip(p, p[1:], strict=False)), p
    p = prices(protection_barrier=[0.4, 0.5, 0.6, 0.7])  # rising barrier: more knock-ins
    assert all(b < a for a, b in zip(p, p[1:], strict=False)), p


def test_worst_of_is_worth_at_most_each_single_asset_note():
    m = flat_market()
    kw = dict(memory=True, autocall_step=-0.05, protection_monitoring="final")
    worst = fp.price(note(NAMES, **kw), m, paths=16384, sampler="sobol", seed=17)
    pair = fp.price(note(("KELPA", "VIREO"), **kw), m, paths=16384, sampler="sobol", seed=17)
    assert worst.price < pair.price + 4 * combined(worst.stderr, pair.stderr)
    for a in NAMES:
        single = fp.price(note((a,), **kw), m, paths=16384, sampler="sobol", seed=17)
        assert worst.price < single.price + 4 * combined(worst.stderr, single.stderr), a
        if a != "NORDA":
            assert pair.price < single.price + 4 * combined(pair.stderr, single.stderr), a


# ============================================================================ 6. diagnostics

@pytest.mark.parametrize("monitoring", ["final", "continuous"])
def test_redemption_probabilities_and_maturity_sum_to_one(monitoring):
    m = flat_market(("NORDA", "KELPA"))
    n = note(("NORDA", "KELPA"), QUARTERLY_1Y, memory=True, autocall_step=-0.05,
             protection_monitoring=monitoring)
    # a twin whose barrier is always breached: its "knock-in probability" is P(reach maturity)
    twin = dataclasses.replace(n, protection_barrier=1e6, protection_monitoring="final")
    r, t = fp.price_many([n, twin], m, paths=8192, sampler="pseudo", seed=19, control=False)
    d, dt = r.diagnostics, t.diagnostics
    calls = [d[f"autocall probability {x}"] for x in QUARTERLY_1Y[:-1]]
    assert calls == [dt[f"autocall probability {x}"] for x in QUARTERLY_1Y[:-1]]
    assert all(0.0 < c < 1.0 for c in calls)
    reach = dt["knock-in probability"]
    assert sum(calls) + reach == pytest.approx(1.0, abs=1e-12)
    assert all(d[f"expected coupon {x}"] >= 0.0 for x in QUARTERLY_1Y)
    assert 0.0 < d["capital loss probability"] <= d["knock-in probability"] <= reach
    # the price is the discounted sum of the reported cash flows (no control variate, so the
    # estimate is the plain average of the per-path values the diagnostics average)
    flows = sum(math.exp(-RATE * years(x)) * d[f"expected coupon {x}"] for x in QUARTERLY_1Y)
    flows += sum(1000.0 * math.exp(-RATE * years(x)) * c
                 for x, c in zip(QUARTERLY_1Y, calls, strict=False))
    flows += 1000.0 * math.exp(-RATE * years(QUARTERLY_1Y[-1])) * (
        reach - d["expected loss (fraction of notional)"])
    assert r.price == pytest.approx(flows, rel=1e-10)


@pytest.mark.parametrize("barrier,strike_level", [(0.6, 1.0), (0.7, 0.6), (1.0, 0.9)])
def test_final_knock_in_loss_probabilities_match_closed_form(barrier, strike_level):
    # reference: never-called one-asset note, final monitoring: knock-in = P(S_T <= b S0),
    # capital loss = P(S_T < min(b, k) S0) = N(-d2) (risk-neutral lognormal law), expected loss
    # = E[(1 - S_T/(k S0)) 1{S_T < min(b, k) S0}] = e^{rT} gap put / (k S0) (Haug ch. 4)
    m = flat_market(("NORDA",))
    n = note(autocall_level=1e6, protection_barrier=barrier, strike_level=strike_level)
    paths = 65536
    res = fp.price(n, m, paths=paths, sampler="pseudo", seed=23)
    T, s = years(SEMI[-1]), 0.25 * math.sqrt(years(SEMI[-1]))

    def below(level):  # P(S_T < level * S0)
        return float(norm.cdf((math.log(level) - (RATE - 0.02 - 0.5 * 0.25**2) * T) / s))

    trigger = min(barrier, strike_level)
    put = cf.gap_option(100.0, strike_level * 100.0, trigger * 100.0, T, RATE, 0.02, 0.25, "put")
    expected = {"knock-in probability": below(barrier),
                "capital loss probability": below(trigger),
                "expected loss (fraction of notional)": math.exp(RATE * T) * put /
                (strike_level * 100.0)}
    d = res.diagnostics
    for key, p in expected.items():
        assert within(d[key], p, binomial_se(p, paths)), (key, d[key], p)
    assert d["capital loss probability"] <= d["knock-in probability"]


# ============================================================================ 7. monitoring

def one_asset_note(monitoring, **kw):
    terms = dict(autocall_level=1.05, coupon=0.02, coupon_barrier=0.8, protection_barrier=0.8,
                 protection_monitoring=monitoring)
    terms.update(kw)
    return note(("NORDA",), QUARTERLY_1Y, **terms)


@pytest.mark.parametrize("assets", [("NORDA",), ("NORDA", "KELPA")])
def test_continuous_knock_in_at_least_daily_at_least_final(assets):
    m = flat_market(assets)
    notes = [note(assets, QUARTERLY_1Y[:2], protection_barrier=0.8, protection_monitoring=w)
             for w in ("continuous", "daily", "final")]
    cont, daily, final = fp.price_many(notes, m, paths=8192, sampler="sobol", seed=29)
    k = [r.diagnostics["knock-in probability"] for r in (cont, daily, final)]
    assert k[0] > k[1] > k[2] > 0, k
    loss = [r.diagnostics["capital loss probability"] for r in (cont, daily, final)]
    assert loss[0] >= loss[1] >= loss[2], loss
    assert cont.price < daily.price < final.price


def brute_force_continuous(paths, seed, per_day=8, chunk=25000) -> dict:
    """One-asset note of one_asset_note() watched on a fine grid: ``per_day`` exact GBM steps
    per calendar day (weekends included, as continuous monitoring is in calendar time), the
    barrier checked at every fine step; also, on the same paths, checked at every second step
    and at the weekday closes only (the engine's "daily"). Written here with no fairpath code.
    """
    rng = np.random.default_rng(seed)
    days = (QUARTERLY_1Y[-1] - VAL).days
    dt = 1.0 / (365.0 * per_day)
    drift, sd = (RATE - 0.02 - 0.5 * 0.25**2) * dt, 0.25 * math.sqrt(dt)
    h = math.log(0.8)
    at_step = {(d - VAL).days * per_day: k for k, d in enumerate(QUARTERLY_1Y)}
    close_steps = {(d - VAL).days * per_day for d in weekdays(VAL, QUARTERLY_1Y[-1])}
    grids = ("fine", "half", "daily")
    values = {g: [] for g in grids}
    hits = {g: [] for g in grids}
    for start in range(0, paths, chunk):
        n = min(chunk, paths - start)
        x = np.zeros(n)
        low = {g: np.zeros(n) for g in grids}
        alive = np.ones(n, dtype=bool)
        pay = np.zeros(n)
        for i in range(1, days * per_day + 1):
            x += drift + sd * rng.standard_normal(n)
            np.minimum(low["fine"], x, out=low["fine"])
            if i % 2 == 0:
                np.minimum(low["half"], x, out=low["half"])
            if i in close_steps:
                np.minimum(low["daily"], x, out=low["daily"])
            if i not in at_step:
                continue
            k = at_step[i]
            df = math.exp(-RATE * years(QUARTERLY_1Y[k]))
            w = np.exp(x)
            pay += alive * (w >= 0.8) * 20.0 * df
            if k < 3:
                c = alive & (w >= 1.05)
                pay += c * 1000.0 * df
                alive &= ~c
                continue
            for g in grids:
                hit = alive & (low[g] <= h)
                values[g].append(pay + alive * 1000.0 * df - hit * (w < 1.0) * (1.0 - w) *
                                 1000.0 * df)
                hits[g].append(hit)
    out = {}
    for g in grids:
        v = np.concatenate(values[g])
        out[g] = {"price": float(v.mean()), "stderr": float(v.std(ddof=1) / math.sqrt(paths)),
                  "hit": np.concatenate(hits[g])}
    return out


def test_continuous_knock_in_matches_brute_force_fine_grid():
    # reference: brute_force_continuous above, 100,000 paths of 8 steps per calendar day.
    # Allowance: a barrier watched every dt instead of continuously is hit less often, an error
    # of first order in sqrt(dt) (Broadie, Glasserman & Kou 1997); its size at 8 steps per day
    # is estimated from the same paths watched at 4 steps per day, (P_8 - P_4) / (sqrt(2) - 1),
    # and allowed on top of 4 standard errors.
    paths_bf, paths_mc = 100_000, 65536
    bf = brute_force_continuous(paths_bf, seed=31)
    fine, half, daily_bf = bf["fine"], bf["half"], bf["daily"]
    m = flat_market(("NORDA",))
    cont, daily = fp.price_many([one_asset_note("continuous"), one_asset_note("daily")], m,
                                paths=paths_mc, sampler="pseudo", seed=37)
    # the price
    allow = abs(fine["price"] - half["price"]) / (math.sqrt(2.0) - 1.0)
    se = combined(cont.stderr, fine["stderr"])
    assert within(cont.price, fine["price"], se, allow), (cont.price, fine["price"], se, allow)
    # the knock-in probability
    p_bf, p_half = float(fine["hit"].mean()), float(half["hit"].mean())
    p_mc = cont.diagnostics["knock-in probability"]
    allow_p = abs(p_bf - p_half) / (math.sqrt(2.0) - 1.0)
    se_p = combined(binomial_se(p_bf, paths_bf), binomial_se(p_mc, paths_mc))
    assert within(p_mc, p_bf, se_p, allow_p), (p_mc, p_bf, se_p, allow_p)
    # the sharper check: what continuous monitoring adds to the weekday closes. Both sides are
    # means of per-path quantities in [0, 1] (engine: bridge probability minus close hit; brute
    # force: fine-grid hit without close hit), so binomial_se bounds their standard errors.
    extra_bf = float((fine["hit"] & ~daily_bf["hit"]).mean())
    extra_mc = p_mc - daily.diagnostics["knock-in probability"]
    se_x = combined(binomial_se(extra_bf, paths_bf), binomial_se(extra_mc, paths_mc))
    assert extra_mc > 4 * binomial_se(extra_mc, paths_mc)
    assert within(extra_mc, extra_bf, se_x, allow_p), (extra_mc, extra_bf, se_x, allow_p)
    # the brute force's own weekday-close price is the engine's daily note
    assert within(daily.price, daily_bf["price"], combined(daily.stderr, daily_bf["stderr"]))


# ============================================================================ 8. bad input

BASE = """kind = "autocallable"
assets = ["NORDA", "KELPA"]
notional = 1000.0
observations = { first = 2027-06-01, every = "6M", count = 4 }
autocall_level = 1.00
coupon = 0.04
coupon_barrier = 0.70
memory = true
protection_barrier = 0.60
"""
STRUCK = 'initial_levels = { NORDA = 104.0, KELPA = 40.0 }\n'
BAD = {
    # name: (edit of BASE, key named, raised when loading (True) or when pricing (False))
    "negative protection barrier": (("protection_barrier = 0.60", "protection_barrier = -0.1"),
                                    "protection_barrier", True),
    "observations out of order": (
        ('{ first = 2027-06-01, every = "6M", count = 4 }',
         "{ dates = [2027-06-01, 2027-03-01, 2027-12-01] }"), "observations", True),
    "struck without initial levels": (("first = 2027-06-01", "first = 2026-09-01"),
                                      "initial_levels", False),
    "initial levels for some assets": (("memory = true", "initial_levels = { NORDA = 104.0 }"),
                                       "initial_levels", True),
    "coupons owed without memory": (("memory = true", "memory = false\ncoupons_owed = 1"),
                                    "coupons_owed", True),
    "knocked in with final monitoring": (("memory = true", "knocked_in = true"), "knocked_in",
                                         True),
    "every observation past": (("first = 2027-06-01", "first = 2024-06-01"), "observations",
                               False),
}


def write_product(tmp_path: Path, name: str, edit, extra: str = "") -> Path:
    old, new = edit
    assert old in BASE
    p = tmp_path / (name.replace(" ", "_") + ".toml")
    p.write_text(BASE.replace(old, new, 1) + extra, encoding="utf-8")
    return p



@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_note_is_one_line_naming_file_and_key(case, tmp_path, capsys):
    edit, key, at_load = BAD[case]
    path = write_product(tmp_path, case, edit, STRUCK if case == "every observation past" else "")
    market = fp.load_market(DEMO_MARKET)
    with pytest.raises(fp.InputError) as info:
        product = fp.load_product(path)
        assert not at_load, "loading should have failed"
        # fp.price names the file given as source= (a product object does not remember its file)
        fp.price(product, market, paths=1024, sampler="pseudo", source=str(path))
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{path}: {key}: "), msg
    assert info.value.key == key
    code, out, err = run(["price", path, "--market", DEMO_MARKET, "--paths", "1024",
                          "--sampler", "pseudo"], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0] == f"fairpath: error: {msg}"
    assert out == ""


def test_coupon_barrier_above_every_autocall_level_warns(tmp_path, capsys):
    path = write_product(tmp_path, "high coupon barrier",
                         ("coupon_barrier = 0.70", "coupon_barrier = 1.10"),
                         "autocall_step = -0.05\n")
    with pytest.warns(fp.FairpathWarning, match="coupon_barrier 1.1 is above every"):
        product = fp.load_product(path)
    assert product.coupon_barrier == 1.1  # still built and priced
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fp.load_product(write_product(tmp_path, "at the level",
                                      ("coupon_barrier = 0.70", "coupon_barrier = 1.00"),
                                      "autocall_step = -0.05\n"))  # at the first level: fine
    code, out, err = run(["price", path, "--market", DEMO_MARKET, "--paths", "1024",
                          "--sampler", "pseudo", "--json"], capsys)
    assert code == 0
    assert [ln for ln in err.splitlines() if ln.startswith("fairpath: warning:")
            and "coupon_barrier" in ln], err

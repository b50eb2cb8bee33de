"""Monte Carlo prices of barrier options (fairpath.Barrier) against outside references.

References, each named again beside its check:

* Reiner & Rubinstein (1991) for continuous monitoring with rebate, as
  ``fairpath.closed_form.barrier_price`` (itself checked against QuantLib's
  AnalyticBarrierEngine in tests/test_closed_form_exotic.py) and QuantLib 1.44's
  ``AnalyticBarrierEngine`` called directly;
* the standard barrier table of Haug, "The Complete Guide to Option Pricing Formulas",
  2nd ed. (2007), chapter 4 (recalled values, see HAUG_TABLE);
* Broadie, Glasserman & Kou (1997) for discrete monitoring, as
  ``fairpath.closed_form.discrete_barrier_price`` (an approximation: allowance
  ``fairpath.closed_form.BGK_ACCURACY``), and an independent brute-force simulation written
  here (plain numpy, exact GBM steps on the monitoring dates, pseudo-random);
* Black-Scholes-Merton for the vanilla limits; the first-passage probability of Brownian
  motion with drift (reflection principle, e.g. Shreve, "Stochastic Calculus for Finance II",
  2004, section 7.2) for the rebate legs.

Monte Carlo assertions: |MC - reference| <= 4 standard errors at a fixed seed, plus a stated
allowance where the reference is itself approximate or rounded.
"""

from __future__ import annotations

import itertools
import math
from datetime import date, timedelta

import numpy as np
import pytest
import QuantLib as ql
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm

import fairpath as fp
from fairpath import closed_form as cf
from qltools import evaluation_date

VAL = date(2026, 12, 1)
RIGHTS = ("call", "put")
KINDS = list(itertools.product(RIGHTS, ("down", "up"), ("out", "in")))


def market(spot=100.0, vol=0.25, rate=0.05, q=0.02, day_count="ACT/365F") -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate),
                     (fp.Asset("NORDA", spot, fp.VolCurve.flat(vol), q),), day_count=day_count)


def within(res, ref, k=4.0, allowance=0.0):
    return abs(res.price - ref) <= k * res.stderr + allowance


def bsm(spot, strike, T, r, q, vol, right):
    """Black-Scholes-Merton (Black & Scholes 1973, Merton 1973), written out here."""
    if T <= 0 or vol == 0:
        fwd = spot * math.exp((r - q) * T)
        return math.exp(-r * T) * max(fwd - strike if right == "call" else strike - fwd, 0.0)
    s = vol * math.sqrt(T)
    d1 = (math.log(spot / strike) + (r - q) * T) / s + 0.5 * s
    d2 = d1 - s
    if right == "call":
        return spot * math.exp(-q * T) * norm.cdf(d1) - strike * math.exp(-r * T) * norm.cdf(d2)
    return strike * math.exp(-r * T) * norm.cdf(-d2) - spot * math.exp(-q * T) * norm.cdf(-d1)


# --------------------------------------------------------------------------- QuantLib set-up
_TODAY = ql.Date(VAL.day, VAL.month, VAL.year)
_QL_BARRIER = {("down", "in"): ql.Barrier.DownIn, ("down", "out"): ql.Barrier.DownOut,
               ("up", "in"): ql.Barrier.UpIn, ("up", "out"): ql.Barrier.UpOut}
_QL_RIGHT = {"call": ql.Option.Call, "put": ql.Option.Put}


@pytest.fixture(autouse=True, scope="module")
def _ql_evaluation_date():
    with evaluation_date(_TODAY):
        yield


def ql_barrier(right, direction, effect, S, K, H, rebate, expiry, r, q, vol, dc):
    """QuantLib's AnalyticBarrierEngine (Haug's formulas; a knock-out rebate is paid at the
    hitting time, a knock-in rebate at expiry if the barrier was never hit)."""
    flat = ql.YieldTermStructureHandle
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(S)), flat(ql.FlatForward(_TODAY, q, dc)),
        flat(ql.FlatForward(_TODAY, r, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_TODAY, ql.NullCalendar(), vol, dc)))
    option = ql.BarrierOption(_QL_BARRIER[direction, effect], H, rebate,
                              ql.PlainVanillaPayoff(_QL_RIGHT[right], K),
                              ql.EuropeanExercise(ql.Date(expiry.day, expiry.month, expiry.year)))
    option.setPricingEngine(ql.AnalyticBarrierEngine(process))
    return option.NPV()


# --------------------------------------------------------------------------- 1. Haug's table
# From memory: Haug, "The Complete Guide to Option Pricing Formulas", 2nd ed., the table of
# standard barrier options: S=100, r=8%, b=4% (q=4%), T=0.5, rebate 3, barriers 95 (down) and
# 105 (up). Rows K = 90, 100, 110; each pair is (sigma=0.25, sigma=0.30). The same numbers
# are transcribed in QuantLib's test-suite/barrieroption.cpp (testHaugValues).
#   DO call H=95:  (9.0246, 8.8334), (6.7924, 7.0285), (4.8759, 5.4137)
#   UO call H=105: (2.6789, 2.6341), (2.3580, 2.4389), (2.3453, 2.4315)
#   DI call H=95:  (7.7627, 9.0093), (4.0109, 5.1370), (2.0576, 2.8517)
#   UI call H=105: (14.1112, 15.2098), (8.4482, 9.7278), (4.5910, 5.8350)
#   DI put H=95:   (2.9586, 3.8769), (6.5677, 7.7989), (11.9752, 13.3078)
#   UI put H=105:  (1.4653, 2.0658), (3.3721, 4.4226), (7.0846, 8.3686)
#   DO put H=95:   (2.2798, 2.4170), (2.2947, 2.4258), (2.6252, 2.6246)
#   UO put H=105:  (3.7760, 4.2293), (5.4932, 5.8032), (7.5187, 7.5649)
HAUG_TABLE = {
    ("call", "down", "out"): [(9.0246, 8.8334), (6.7924, 7.0285), (4.8759, 5.4137)],
    ("call", "up", "out"): [(2.6789, 2.6341), (2.3580, 2.4389), (2.3453, 2.4315)],
    ("call", "down", "in"): [(7.7627, 9.0093), (4.0109, 5.1370), (2.0576, 2.8517)],
    ("call", "up", "in"): [(14.1112, 15.2098), (8.4482, 9.7278), (4.5910, 5.8350)],
    ("put", "down", "in"): [(2.9586, 3.8769), (6.5677, 7.7989), (11.9752, 13.3078)],
    ("put", "up", "in"): [(1.4653, 2.0658), (3.3721, 4.4226), (7.0846, 8.3686)],
    ("put", "down", "out"): [(2.2798, 2.4170), (2.2947, 2.4258), (2.6252, 2.6246)],
    ("put", "up", "out"): [(3.7760, 4.2293), (5.4932, 5.8032), (7.5187, 7.5649)],
}
# The table's H=100 rows put the spot on the barrier (already breached): knock-outs are worth
# the rebate 3.0000, knock-ins the vanilla. From memory, the same source, down barrier H=100,
# rows K = 90, 100, 110, pairs (sigma=0.25, sigma=0.30):
#   DI call H=100: (13.8333, 14.8816), (7.8494, 9.2045), (3.9795, 5.3043)
#   DI put H=100:  (2.2845, 3.3328), (5.9085, ...), (11.6465, ...)
# The down-and-in put H=100 sigma=0.30 cells are not known-good (recalled values disagree
# with the vanilla put they must equal), so they are not asserted.
HAUG_AT_BARRIER = {
    ("call", "down", "out"): [(3.0, 3.0)] * 3,
    ("put", "down", "out"): [(3.0, 3.0)] * 3,
    ("call", "down", "in"): [(13.8333, 14.8816), (7.8494, 9.2045), (3.9795, 5.3043)],
    ("put", "down", "in"): [(2.2845, None), (5.9085, None), (11.6465, None)],
}
# 4-decimal values: half a unit of the last digit, plus the one-digit slips of a few recalled
# cells found in tests/test_closed_form_exotic.py (up to 6.3e-5 from the exact formula).
HAUG_TOL = 7e-5
HAUG_STRIKES = (90.0, 100.0, 110.0)
HAUG_VOLS = (0.25, 0.30)
# T must be exactly 0.5: ACT/360 and an expiry 180 days after the valuation date.
HAUG_EXPIRY = VAL + timedelta(days=180)
HAUG_R, HAUG_Q, HAUG_REBATE = 0.08, 0.04, 3.0


def haug_market(vol, spot=100.0):
    return market(spot=spot, vol=vol, rate=HAUG_R, q=HAUG_Q, day_count="ACT/360")


def test_haug_market_has_half_a_year():
    assert haug_market(0.25).time(HAUG_EXPIRY) == 0.5


@pytest.mark.parametrize("vol", HAUG_VOLS)
@pytest.mark.parametrize(("right", "direction", "effect"), KINDS)
def test_haug_barrier_table_by_monte_carlo(right, direction, effect, vol):
    m = haug_market(vol)
    H = 95.0 if direction == "down" else 105.0
    seed = 1000 + 10 * KINDS.index((right, direction, effect)) + HAUG_VOLS.index(vol)
    for row, K in enumerate(HAUG_STRIKES):
        p = fp.Barrier(asset="NORDA", right=right, strike=K, expiry=HAUG_EXPIRY, barrier=H,
                       direction=direction, effect=effect, rebate=HAUG_REBATE)
        # 64 scramblings of 256 points: with the default 16, this smooth payoff's Sobol error
        # bar is too narrow in about 1-2% of seeds (|z| > 4 seen over 100 seeds for DI calls
        # K=90 and K=110), the caution in the README's Method section
        res = fp.price(p, m, paths=16384, seed=seed + 100 * row, replicates=64)
        # (a) Reiner-Rubinstein with rebate (fairpath.closed_form.barrier_price)
        rr = cf.barrier_price(100.0, K, H, 0.5, HAUG_R, HAUG_Q, vol, right, direction, effect,
                              rebate=HAUG_REBATE)
        # (b) QuantLib's AnalyticBarrierEngine, Actual360 so that T = 180/360 = 0.5
        qlv = ql_barrier(right, direction, effect, 100.0, K, H, HAUG_REBATE, HAUG_EXPIRY,
                         HAUG_R, HAUG_Q, vol, ql.Actual360())
        # (c) Haug's table (from memory, 4 decimals: allowance HAUG_TOL)
        haug = HAUG_TABLE[right, direction, effect][row][HAUG_VOLS.index(vol)]
        info = (K, res.price, res.stderr, rr, qlv, haug)
        assert res.stderr > 0, info
        assert within(res, rr), info
        assert within(res, qlv), info
        assert within(res, haug, allowance=HAUG_TOL), info
        assert p.closed_form(m) == pytest.approx(rr, rel=1e-12)
        assert not any("already" in n for n in res.notes), res.notes


@pytest.mark.parametrize(("right", "direction", "effect"), KINDS)
def test_haug_spot_on_the_barrier_is_already_breached(right, direction, effect):
    # H = 100 = spot: already knocked in (vanilla) or out (rebate, paid now), with a note.
    for vol, (row, K) in itertools.product(HAUG_VOLS, enumerate(HAUG_STRIKES)):
        m = haug_market(vol)
        p = fp.Barrier(asset="NORDA", right=right, strike=K, expiry=HAUG_EXPIRY, barrier=100.0,
                       direction=direction, effect=effect, rebate=HAUG_REBATE)
        res = fp.price(p, m, paths=16384, seed=77 + row)
        word = "knocked in" if effect == "in" else "knocked out"
        assert any(f"already {word}" in n for n in res.notes), res.notes
        if effect == "out":
            ref = HAUG_REBATE
            assert res.price == HAUG_REBATE and res.stderr == 0.0
        else:
            ref = bsm(100.0, K, 0.5, HAUG_R, HAUG_Q, vol, right)  # BSM, written out here
            assert res.stderr > 0 and within(res, ref), (K, vol, res.price, res.stderr, ref)
        # QuantLib's AnalyticBarrierEngine at S == H (its formulas are continuous there)
        qlv = ql_barrier(right, direction, effect, 100.0, K, 100.0, HAUG_REBATE, HAUG_EXPIRY,
                         HAUG_R, HAUG_Q, vol, ql.Actual360())
        assert qlv == pytest.approx(ref, rel=1e-10)
        assert p.closed_form(m) == pytest.approx(ref, rel=1e-12)
        cells = HAUG_AT_BARRIER.get((right, direction, effect))
        if cells is not None and cells[row][HAUG_VOLS.index(vol)] is not None:
            # Haug's H=100 rows, from memory, 4 decimals
            assert within(res, cells[row][HAUG_VOLS.index(vol)], allowance=HAUG_TOL)


# --------------------------------------------------------------------------- 2. continuous grid
def test_continuous_monitoring_simulates_only_the_expiry_date():
    # Flat parameters: the Brownian-bridge crossing probability is exact, so the grid is the
    # expiry alone; reference Reiner-Rubinstein (fairpath.closed_form.barrier_price).
    m = market()
    expiry = date(2027, 12, 1)
    p = fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=expiry, barrier=85.0,
                   direction="down", effect="out")
    res = fp.price(p, m, paths=65536, seed=5)
    assert res.extras["dates"] == [expiry.isoformat()]
    ref = cf.barrier_price(100.0, 100.0, 85.0, 1.0, 0.05, 0.02, 0.25, "call", "down", "out")
    assert within(res, ref), (res.price, res.stderr, ref)
    # the same for an up-and-in put with a rebate, two years, pseudo-random
    expiry = date(2028, 11, 30)
    p = fp.Barrier(asset="NORDA", right="put", strike=110.0, expiry=expiry, barrier=125.0,
                   direction="up", effect="in", rebate=4.0)
    res = fp.price(p, m, paths=65536, sampler="pseudo", seed=6)
    assert res.extras["dates"] == [expiry.isoformat()]
    T = m.time(expiry)
    ref = cf.barrier_price(100.0, 110.0, 125.0, T, 0.05, 0.02, 0.25, "put", "up", "in", 4.0)
    assert within(res, ref), (res.price, res.stderr, ref)


# --------------------------------------------------------------------------- 3. discrete
SIX_MONTHS = date(2027, 6, 1)
WEEKLY = tuple(date(2026, 12, 8) + timedelta(weeks=i) for i in range(26))  # ends 2027-06-01


def weekdays_after(start: date, end: date) -> list[date]:
    """Every Monday-to-Friday after ``start`` up to and including ``end`` (written here)."""
    out = []
    d = start + timedelta(days=1)
    while d <= end:
        if d.weekday() < 5:
            out.append(d)
        d += timedelta(days=1)
    return out


def brute_force_barrier(*, spot, strike, barrier, right, direction, effect, rebate, r, q, vol,
                        monitoring, expiry, paths, seed, block=1 << 16):
    """Independent Monte Carlo of a discretely monitored barrier option.

    Exact GBM steps between the dates of ``monitoring`` (and the expiry), ACT/365F year
    fractions, plain numpy loops over the dates, PCG64 normals. A knock-out pays the rebate on
    the first monitoring date at or beyond the barrier; a knock-in pays it at expiry if never
    hit. Returns (mean, standard error).
    """
    dates = sorted(set(monitoring) | {expiry})
    watched = [d in set(monitoring) for d in dates]
    times = np.array([(d - VAL).days / 365.0 for d in dates])
    dt = np.diff(np.concatenate([[0.0], times]))
    drift = (r - q - 0.5 * vol * vol) * dt
    sd = vol * np.sqrt(dt)
    df_t = math.exp(-r * times[-1])
    rng = np.random.Generator(np.random.PCG64(seed))
    total = total_sq = 0.0
    for start in range(0, paths, block):
        n = min(block, paths - start)
        x = np.full(n, math.log(spot))
        alive = np.ones(n, dtype=bool)
        rebate_pv = np.zeros(n)
        for k in range(len(dates)):
            x += drift[k] + sd[k] * rng.standard_normal(n)
            if watched[k]:
                s = np.exp(x)
                hit = alive & ((s <= barrier) if direction == "down" else (s >= barrier))
                rebate_pv[hit] = math.exp(-r * times[k])
                alive &= ~hit
        s_t = np.exp(x)
        vanilla = np.maximum(s_t - strike, 0.0) if right == "call" else np.maximum(
            strike - s_t, 0.0)
        if effect == "out":
            v = vanilla * df_t * alive + rebate * rebate_pv
        else:
            v = vanilla * df_t * ~alive + rebate * df_t * alive
        total += v.sum()
        total_sq += (v * v).sum()
    mean = total / paths
    var = (total_sq - paths * mean * mean) / (paths - 1)
    return mean, math.sqrt(var / paths)


# (name, right, direction, effect, strike, barrier, rebate, monitoring, BGK reference?)
DISCRETE_CASES = [
    ("weekly down-and-out call", "call", "down", "out", 100.0, 90.0, 0.0, "weekly", True),
    ("weekly up-and-out call", "call", "up", "out", 95.0, 115.0, 0.0, "weekly", True),
    ("weekly down-and-in put", "put", "down", "in", 100.0, 90.0, 0.0, "weekly", True),
    ("daily up-and-in call", "call", "up", "in", 105.0, 115.0, 0.0, "daily", True),
    ("daily down-and-out put", "put", "down", "out", 100.0, 85.0, 0.0, "daily", True),
    # knock-in rebate paid at expiry if never hit (BGK shifts the barrier of the E term too)
    ("daily up-and-in put rebate", "put", "up", "in", 100.0, 110.0, 2.5, "daily", True),
    # knock-out rebate paid on the monitoring date of the hit: no closed form, brute force
    ("weekly down-and-out call rebate", "call", "down", "out", 100.0, 90.0, 2.0, "weekly",
     False),
    ("daily up-and-out call rebate", "call", "up", "out", 100.0, 120.0, 1.5, "daily", False),
]


@pytest.mark.parametrize("case", DISCRETE_CASES, ids=[c[0] for c in DISCRETE_CASES])
def test_discrete_monitoring(case):
    name, right, direction, effect, K, H, rebate, kind, has_bgk = case
    m = market()
    monitoring = WEEKLY if kind == "weekly" else "daily"
    p = fp.Barrier(asset="NORDA", right=right, strike=K, expiry=SIX_MONTHS, barrier=H,
                   direction=direction, effect=effect, monitoring=monitoring, rebate=rebate)
    seed = 300 + DISCRETE_CASES.index(case)
    res = fp.price(p, m, paths=65536, seed=seed)
    assert res.stderr > 0
    dates = list(WEEKLY) if kind == "weekly" else weekdays_after(VAL, SIX_MONTHS)
    assert len(dates) == (26 if kind == "weekly" else 130)
    # grid: the monitoring dates and the expiry, nothing else
    assert res.extras["dates"] == [d.isoformat() for d in sorted(set(dates) | {SIX_MONTHS})]
    # independent brute force (written above), pseudo-random, 4 combined standard errors
    bf, bf_se = brute_force_barrier(spot=100.0, strike=K, barrier=H, right=right,
                                    direction=direction, effect=effect, rebate=rebate, r=0.05,
                                    q=0.02, vol=0.25, monitoring=dates, expiry=SIX_MONTHS,
                                    paths=1 << 18, seed=seed)
    info = (name, res.price, res.stderr, bf, bf_se)
    assert abs(res.price - bf) <= 4.0 * math.hypot(res.stderr, bf_se), info
    T = m.time(SIX_MONTHS)
    if has_bgk:
        # Broadie-Glasserman-Kou shift (fairpath.closed_form.discrete_barrier_price), an
        # approximation: the project's allowance cf.BGK_ACCURACY (3%) of the price, see
        # fairpath/closed_form.py
        bgk = cf.discrete_barrier_price(100.0, K, H, T, 0.05, 0.02, 0.25, right, direction,
                                        effect, rebate, len(dates))
        assert p.closed_form(m) == pytest.approx(bgk, rel=1e-12)
        assert within(res, bgk, allowance=cf.BGK_ACCURACY * abs(bgk)), (*info, bgk)
    # discrete monitoring is not continuous monitoring: fewer chances to hit
    cont = cf.barrier_price(100.0, K, H, T, 0.05, 0.02, 0.25, right, direction, effect, rebate)
    if effect == "out" and rebate == 0.0:
        assert res.price > cont + 4.0 * res.stderr, (*info, cont)
    if effect == "in" and rebate == 0.0:
        assert res.price < cont - 4.0 * res.stderr, (*info, cont)


def test_monitoring_date_on_the_valuation_date_is_ignored():
    # a monitoring date on the valuation date itself is ignored (fairpath/products/barrier.py):
    # same price as without it, same seed
    m = market()
    base = dict(asset="NORDA", right="call", strike=100.0, expiry=SIX_MONTHS, barrier=90.0,
                direction="down", effect="out")
    with_today = fp.Barrier(**base, monitoring=(VAL, *WEEKLY))
    without = fp.Barrier(**base, monitoring=WEEKLY)
    a = fp.price(with_today, m, paths=16384, seed=8)
    b = fp.price(without, m, paths=16384, seed=8)
    assert a.price == b.price and a.stderr == b.stderr


def test_monitoring_dates_before_valuation_are_ignored():
    # A trade under way whose earlier weekly monitoring dates are past (and were not hit):
    # per the module notes of fairpath/products/barrier.py those dates are ignored, so the
    # price equals the same trade with only the future dates.
    m = market()
    base = dict(asset="NORDA", right="call", strike=100.0, expiry=SIX_MONTHS, barrier=90.0,
                direction="down", effect="out")
    past = (date(2026, 11, 17), date(2026, 11, 24))
    under_way = fp.Barrier(**base, monitoring=(*past, *WEEKLY))
    future_only = fp.Barrier(**base, monitoring=WEEKLY)
    a = fp.price(under_way, m, paths=16384, seed=8)
    b = fp.price(future_only, m, paths=16384, seed=8)
    assert a.price == b.price


# --------------------------------------------------------------------------- 4. rebates
def first_passage_probability(spot, barrier, T, r, q, vol):
    """P(the level touches ``barrier`` by T) for GBM (reflection principle for Brownian motion
    with drift nu = r - q - vol^2/2; e.g. Shreve, Stochastic Calculus for Finance II, 7.2)."""
    nu = r - q - 0.5 * vol * vol
    h = math.log(barrier / spot)
    s = vol * math.sqrt(T)
    if h < 0:  # down barrier
        return norm.cdf((h - nu * T) / s) + math.exp(2 * nu * h / vol**2) * norm.cdf(
            (h + nu * T) / s)
    return norm.cdf((-h + nu * T) / s) + math.exp(2 * nu * h / vol**2) * norm.cdf(
        (-h - nu * T) / s)


@pytest.mark.parametrize(("direction", "H"), [("down", 90.0), ("up", 115.0)])
def test_knock_out_rebate_is_paid_at_the_hit(direction, H):
    # A put struck at (almost) zero has no vanilla value: the knock-out is its rebate leg,
    # R E[exp(-r tau); tau <= T]. References: Reiner-Rubinstein (closed_form.barrier_price) and
    # QuantLib's AnalyticBarrierEngine (strike 1e-6: QuantLib needs a positive strike).
    m = market()
    expiry, R, K = date(2027, 12, 1), 5.0, 1e-6
    p = fp.Barrier(asset="NORDA", right="put", strike=K, expiry=expiry, barrier=H,
                   direction=direction, effect="out", rebate=R)
    res = fp.price(p, m, paths=16384, seed=41)
    rr = cf.barrier_price(100.0, K, H, 1.0, 0.05, 0.02, 0.25, "put", direction, "out", R)
    qlv = ql_barrier("put", direction, "out", 100.0, K, H, R, expiry, 0.05, 0.02, 0.25,
                     ql.Actual365Fixed())
    assert within(res, rr) and within(res, qlv), (res.price, res.stderr, rr, qlv)
    # paid at the hit, not at expiry: worth more than R e^{-rT} P(hit) when r > 0
    at_expiry = R * math.exp(-0.05) * first_passage_probability(100.0, H, 1.0, 0.05, 0.02, 0.25)
    assert res.price > at_expiry + 4.0 * res.stderr, (res.price, at_expiry)
    assert res.price < R * first_passage_probability(100.0, H, 1.0, 0.05, 0.02, 0.25)


@pytest.mark.parametrize(("direction", "H"), [("down", 90.0), ("up", 115.0)])
def test_knock_in_rebate_is_paid_at_expiry_if_never_hit(direction, H):
    # The rebate leg of a knock-in: R e^{-rT} P(never hit) (reflection principle, written
    # here), also Reiner-Rubinstein's E term and QuantLib's AnalyticBarrierEngine.
    m = market()
    expiry, R, K = date(2027, 12, 1), 5.0, 1e-6
    p = fp.Barrier(asset="NORDA", right="put", strike=K, expiry=expiry, barrier=H,
                   direction=direction, effect="in", rebate=R)
    res = fp.price(p, m, paths=16384, seed=42)
    ref = R * math.exp(-0.05) * (1.0 - first_passage_probability(100.0, H, 1.0, 0.05, 0.02,
                                                                 0.25))
    qlv = ql_barrier("put", direction, "in", 100.0, K, H, R, expiry, 0.05, 0.02, 0.25,
                     ql.Actual365Fixed())
    assert qlv == pytest.approx(ref, rel=1e-7)
    assert within(res, ref) and within(res, qlv), (res.price, res.stderr, ref, qlv)


# --------------------------------------------------------------------------- 5. already through
@pytest.mark.parametrize("monitoring", ["continuous", "daily", "weekly"])
@pytest.mark.parametrize(("right", "direction", "effect"), KINDS)
def test_spot_through_the_barrier(right, direction, effect, monitoring):
    # spot 90 below a down barrier of 95, or 110 above an up barrier of 105
    spot, H = (90.0, 95.0) if direction == "down" else (110.0, 105.0)
    m = market(spot=spot)
    mon = WEEKLY if monitoring == "weekly" else monitoring
    p = fp.Barrier(asset="NORDA", right=right, strike=100.0, expiry=SIX_MONTHS, barrier=H,
                   direction=direction, effect=effect, monitoring=mon, rebate=2.0)
    res = fp.price(p, m, paths=16384, seed=51)
    T = m.time(SIX_MONTHS)
    if effect == "in":
        ref = bsm(spot, 100.0, T, 0.05, 0.02, 0.25, right)  # the vanilla (BSM, written here)
        assert within(res, ref) and res.stderr > 0, (res.price, res.stderr, ref)
        assert any("already knocked in" in n for n in res.notes), res.notes
    else:
        assert res.price == 2.0 and res.stderr == 0.0  # the rebate, paid now
        assert any("already knocked out" in n and "rebate 2" in n for n in res.notes), res.notes


# --------------------------------------------------------------------------- 6. properties
def _weekly_until(expiry: date) -> tuple[date, ...]:
    out = []
    d = VAL + timedelta(weeks=1)
    while d < expiry:
        out.append(d)
        d += timedelta(weeks=1)
    return (*out, expiry)


_RATES = st.floats(-0.01, 0.08)
_VOLS = st.floats(0.1, 0.5)
_DAYS = st.integers(30, 600)


@settings(max_examples=6, deadline=None, derandomize=True)
@given(right=st.sampled_from(RIGHTS), direction=st.sampled_from(("down", "up")),
       strike=st.floats(70.0, 130.0), distance=st.floats(0.03, 0.4), vol=_VOLS, days=_DAYS,
       r=_RATES, q=st.floats(0.0, 0.05),
       monitoring=st.sampled_from(("continuous", "weekly", "daily")))
def test_knock_in_plus_knock_out_is_the_vanilla(right, direction, strike, distance, vol, days,
                                                r, q, monitoring):
    m = market(vol=vol, rate=r, q=q)
    expiry = VAL + timedelta(days=days)
    H = 100.0 * math.exp(-distance if direction == "down" else distance)
    mon = _weekly_until(expiry) if monitoring == "weekly" else monitoring
    kw = dict(asset="NORDA", right=right, strike=strike, expiry=expiry, barrier=H,
              direction=direction, monitoring=mon)
    run = dict(paths=4096, seed=61, control=False)
    ki = fp.price(fp.Barrier(**kw, effect="in"), m, **run)
    ko = fp.price(fp.Barrier(**kw, effect="out"), m, **run)
    T = m.time(expiry)
    ref = bsm(100.0, strike, T, r, q, vol, right)  # BSM, written here
    total = ki.price + ko.price
    # sd(KI + KO) <= sd(KI) + sd(KO), so this bounds 4 standard errors of the sum
    assert abs(total - ref) <= 4.0 * (ki.stderr + ko.stderr), (total, ref)
    if monitoring == "continuous":
        # same grid as the European (the expiry alone), same seed: the same paths, and
        # KI + KO = vanilla path by path
        eu = fp.price(fp.European(asset="NORDA", right=right, strike=strike, expiry=expiry), m,
                      **run)
        assert total == pytest.approx(eu.price, rel=1e-9, abs=1e-12)
        assert abs(eu.price - ref) <= 4.0 * eu.stderr


@settings(max_examples=6, deadline=None, derandomize=True)
@given(right=st.sampled_from(RIGHTS), direction=st.sampled_from(("down", "up")),
       strike=st.floats(70.0, 130.0), vol=_VOLS, days=_DAYS, r=_RATES,
       q=st.floats(0.0, 0.05), rebate=st.sampled_from((0.0, 2.0)),
       monitoring=st.sampled_from(("continuous", "daily")))
def test_barrier_far_away_is_the_vanilla(right, direction, strike, vol, days, r, q, rebate,
                                         monitoring):
    m = market(vol=vol, rate=r, q=q)
    expiry = VAL + timedelta(days=days)
    H = 1e-3 if direction == "down" else 1e5  # never reached in practice
    kw = dict(asset="NORDA", right=right, strike=strike, expiry=expiry, barrier=H,
              direction=direction, monitoring=monitoring, rebate=rebate)
    run = dict(paths=4096, seed=62)
    ko = fp.price(fp.Barrier(**kw, effect="out"), m, **run)
    ki = fp.price(fp.Barrier(**kw, effect="in"), m, **run)
    T = m.time(expiry)
    ref = bsm(100.0, strike, T, r, q, vol, right)  # BSM, written here
    assert within(ko, ref), (ko.price, ko.stderr, ref)
    # the knock-in never comes alive: worth its rebate paid at expiry
    assert ki.price == pytest.approx(rebate * math.exp(-r * T), rel=1e-9, abs=1e-9)


# --------------------------------------------------------------------------- 7. bad input
GOOD = """kind = "barrier"
asset = "NORDA"
right = "call"
strike = 100.0
expiry = 2027-12-01
barrier = 85.0
direction = "down"
effect = "out"
"""


@pytest.mark.parametrize(("change", "key", "words"), [
    ('monitoring = { dates = [2027-06-01, 2027-12-15] }', "monitoring", "after the expiry"),
    ("barrier = -85.0", "barrier", "positive"),
    ('direction = "sideways"', "direction", "sideways"),
])
def test_bad_barrier_files(tmp_path, change, key, words):
    field = change.split(" =")[0]
    lines = [ln for ln in GOOD.splitlines() if not ln.startswith(field + " ")]
    path = tmp_path / "bad_barrier.toml"
    path.write_text("\n".join([*lines, change]) + "\n")
    with pytest.raises(fp.InputError) as exc:
        fp.load_product(path)
    msg = str(exc.value)
    assert msg.startswith(f"{path}: {key}: "), msg
    assert words in msg and "\n" not in msg, msg
    # the untouched file loads
    ok = tmp_path / "good_barrier.toml"
    ok.write_text(GOOD)
    assert isinstance(fp.load_product(ok), fp.Barrier)

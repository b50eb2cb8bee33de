"""Issuer-callable autocallable notes (``issuer_call`` on ``autocallable``) by least squares.

References used here, each named again beside its check:

1. No-arbitrage bound (common practice): the issuer's call is an option of the issuer, worth
   nothing or more to it, so the callable note is worth no more than the same note without the
   call; on common random numbers, within the standard error of the difference.
2. A call price above every amount the note can still pay (price = 10 times the notional, with
   at most six 4.5% coupons and the notional left to pay) is never exercised: the note's price is
   the uncallable note's, bit for bit.
3. Exact value of a note whose cash flows are certain (coupons paid whatever the levels, never
   redeemed early, no knock-in): a fixed-coupon bond of the issuer callable at a fixed price, whose
   optimal call is found by backward induction over the call dates on the discount factors
   (dynamic programming, Bellman; the deterministic case of optimal stopping), computed here by
   hand from the discount factors written out below. On a flat curve it is the first call date on
   which the remaining flows are worth more than the call price; on a curve with high forward
   rates and then none, it is a later date than that rule gives (waiting one more period and
   calling then costs the issuer less).
4. The frozen policy does not depend on the threads: the same price, bit for bit, on one thread
   and on two (the design's requirement).
5. Bad input: one line naming the file and the key, exit status 2.

Monte Carlo assertions: within 3 standard errors at fixed seeds.
"""

from __future__ import annotations

import dataclasses
import math
from datetime import date
from pathlib import Path

import numpy as np
import pytest

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.engine import PILOT_STREAM, Simulation, make_sampler

ROOT = Path(__file__).resolve().parents[1]
DEMO_MARKET = ROOT / "markets" / "demo.toml"

VAL = date(2026, 12, 1)
# semiannual over three years (the last date, a Saturday, rolled to Monday as a generated
# schedule would be)
SEMI = (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1), date(2028, 12, 1),
        date(2029, 6, 1), date(2029, 12, 3))


def market(curve: fp.DiscountCurve | None = None) -> fp.Market:
    """Two invented assets, flat vols and dividend yields, correlation 0.5."""
    assets = (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), 0.02),
              fp.Asset("KELPA", 42.5, fp.VolCurve.flat(0.30), 0.01))
    corr = fp.Correlation(("NORDA", "KELPA"), ((1.0, 0.5), (0.5, 1.0)))
    return fp.Market(VAL, "EUR", curve or fp.DiscountCurve.flat(0.03), assets, correlation=corr)


def note(**kw) -> fp.Autocallable:
    """A two-asset worst-of phoenix: 4.5% memory coupon above 70%, 60% barrier watched daily."""
    terms = dict(assets=("NORDA", "KELPA"), observations=SEMI, notional=1000.0,
                 autocall_level=1.0, coupon=0.045, coupon_barrier=0.7, memory=True,
                 protection_barrier=0.6, protection_monitoring="daily")
    terms.update(kw)
    return fp.Autocallable(**terms)


def common_paths(product, mkt, n: int, seed: int):
    """Pricing-like paths (never the pilot stream) on which to evaluate two notes pathwise."""
    smp = make_sampler("pseudo", seed=seed, antithetic=False, stream_key=(1,))
    sim = Simulation([product], mkt, smp, [[]], None, 1)
    z = smp.normals(smp.plan(n), sim.factors, sim.sim_times)
    return sim.pathsets(sim.stepper.simulate(z).log_levels)[0]


def fitted(product, mkt, seed: int):
    """The note with its call policy fitted on its own pilot paths (as the engine does)."""
    smp = make_sampler("pseudo", seed=seed, antithetic=False, stream_key=(PILOT_STREAM,))
    sim = Simulation([product], mkt, smp, [[]], None, 1)
    z = smp.normals(smp.plan(product.pilot_paths()), sim.factors, sim.sim_times)
    return product.fit(sim.pathsets(sim.stepper.simulate(z).log_levels)[0])


# ===================================================== 1. worth no more than the uncallable note

CALLS = SEMI[:5]


@pytest.mark.parametrize("terms, valuable", [
    (dict(), False),  # autocalled at 100%: the call adds little
    (dict(autocall_level=1e6), True),  # a callable phoenix never redeemed early otherwise
    (dict(autocall_level=1e6, coupon=0.05, coupon_barrier=0.0, memory=False), True),  # callable
    # reverse convertible: certain coupons, knock-in put
])
def test_callable_note_worth_no_more_than_the_plain_note(terms, valuable):
    # reference 1: no-arbitrage bound (the issuer's option is worth >= 0 to the issuer)
    mkt = market()
    plain = note(**terms)
    callable_ = note(call_dates=CALLS, pilot=1 << 13, **terms)
    # through the engine, on common random numbers
    a, b = fp.price_many([callable_, plain], mkt, paths=1 << 13, seed=5)
    assert a.price <= b.price + 3 * math.hypot(a.stderr, b.stderr), (a.price, b.price)
    assert any("upper bound for the issuer-callable note" in n for n in a.notes)
    assert "expected life (years)" in a.diagnostics
    assert "expected life (years)" not in b.diagnostics
    # pathwise on common paths: the difference within its own standard error
    f = fitted(callable_, mkt, seed=2)
    ps = common_paths(plain, mkt, 1 << 15, seed=9)
    diff = f.payoff(ps) - plain.payoff(ps)
    mean, se = diff.mean(), diff.std(ddof=1) / math.sqrt(len(diff))
    assert mean <= 3 * se, (mean, se)
    if valuable:  # the call is worth a clearly measurable amount to the issuer
        assert mean < -10 * se, (mean, se)
    # the expected life is shorter with the call (the same paths end at the same dates or sooner)
    life_a = f.diagnostics(ps)["expected life (years)"].mean()
    ends = plain.diagnostics(ps)
    life_b = sum(ends[f"autocall probability {d}"].mean() * mkt.time(d) for d in SEMI[:-1]
                 if f"autocall probability {d}" in ends)
    alive_end = 1 - sum(ends[f"autocall probability {d}"].mean() for d in SEMI[:-1])
    life_b += alive_end * mkt.time(SEMI[-1])
    assert life_a <= life_b + 1e-12


# ============================================================== 2. a call price never reached

def test_call_price_above_every_payoff_leaves_the_note_unchanged():
    # reference 2: at most 1 + 6 * 0.045 of the notional is left to pay, far below 10
    mkt = market()
    plain = note(autocall_level=1e6, protection_monitoring="final")
    never = note(autocall_level=1e6, protection_monitoring="final", call_dates=CALLS,
                 call_price=10.0)
    a = fp.price(never, mkt, paths=1 << 13, seed=4)
    b = fp.price(plain, mkt, paths=1 << 13, seed=4)
    assert a.price == b.price and a.stderr == b.stderr
    for d in CALLS:
        assert a.diagnostics[f"issuer call probability {d}"] == 0.0
    assert a.diagnostics["expected life (years)"] == pytest.approx(mkt.time(SEMI[-1]), abs=1e-12)


# ========================================================= 3. a callable fixed-coupon bond, exact

def certain_bond(**kw) -> fp.Autocallable:
    """Coupons certain (barrier 0), never redeemed early, no knock-in: a fixed-coupon bond."""
    return note(coupon=0.03, coupon_barrier=0.0, memory=False, autocall_level=1e6,
                protection_barrier=0.0, protection_monitoring="final", **kw)


def hand_dfs(forwards: list[tuple[float, float]], times) -> np.ndarray:
    """Discount factors exp(-integral of the forward rate), the forward piecewise flat:
    ``forwards`` = [(until time, rate), ...]."""
    out = []
    for t in times:
        integral, start = 0.0, 0.0
        for end, f in forwards:
            integral += f * max(0.0, min(t, end) - start)
            start = end
        out.append(math.exp(-integral))
    return np.array(out)


def optimal_call(c: float, price: float, dfs: np.ndarray, callable_at: list[int]):
    """Backward induction of a bond paying c on each date and 1 at the last, callable after the
    coupon of the dates ``callable_at`` at ``price``: the issuer calls where holding on is worth
    more than the price. Returns (value today, index of the call date reached first or None)."""
    m = len(dfs)
    v = 1.0  # value at the last date of what is paid after its coupon
    calls = {}
    for k in range(m - 2, -1, -1):
        hold = (c + v) * dfs[k + 1] / dfs[k]  # the next date's coupon and what follows
        calls[k] = k in callable_at and hold > price
        v = price if calls[k] else hold
    first = next((k for k in range(m - 1) if calls.get(k)), None)
    stop = m - 1 if first is None else first
    value = c * dfs[:stop + 1].sum() + (price if first is not None else 1.0) * dfs[stop]
    return value, first


@pytest.mark.parametrize("case", ["flat", "humped"])
def test_callable_fixed_coupon_bond_is_called_where_backward_induction_says(case):
    # reference 3: exact value by backward induction over the call dates (hand discount factors)
    years = [(d - VAL).days / 365.0 for d in SEMI]  # ACT/365F
    if case == "flat":
        forwards, price = [(10.0, 0.03)], 1.0
        curve = fp.DiscountCurve.flat(0.03)
    else:
        # 10% a year for the first 18 months, then 0%: zero rates 10% up to 1.5y, linear in
        # t * r(t) to 0.15 at 3.5y (the curve's interpolation: piecewise-flat forwards)
        forwards, price = [(1.5, 0.10), (10.0, 0.0)], 1.05
        curve = fp.DiscountCurve((0.5, 1.0, 1.5, 3.5), (0.10, 0.10, 0.10, 0.15 / 3.5))
    dfs = hand_dfs(forwards, years)
    mkt = market(curve)
    assert np.allclose([mkt.df(d) for d in SEMI], dfs, rtol=0, atol=1e-14)
    callable_at = list(range(5))
    exact, first = optimal_call(0.03, price, dfs, callable_at)
    remaining = [(0.03 * dfs[k + 1:].sum() + dfs[-1]) / dfs[k] for k in range(5)]
    naive = next(k for k in range(5) if remaining[k] > price)
    if case == "flat":  # coupons above the rate: worth more than par at once, called at once
        assert first == naive == 0
    else:  # the remaining flows pass the price at 1.0y, but calling at 1.5y is cheaper
        assert (naive, first) == (1, 2)
    p = certain_bond(call_dates=CALLS, call_price=price)
    r = fp.price(p, mkt, paths=1 << 12, seed=3)
    assert r.price == pytest.approx(1000.0 * exact, abs=1e-9), (r.price, 1000.0 * exact)
    for k, d in enumerate(CALLS):
        assert r.diagnostics[f"issuer call probability {d}"] == (1.0 if k == first else 0.0)
    assert r.diagnostics["expected life (years)"] == pytest.approx(mkt.time(SEMI[first]))
    # and never called when the call price is above what is left to pay anywhere
    top = max(remaining) + 0.01
    r = fp.price(certain_bond(call_dates=CALLS, call_price=top), mkt, paths=1 << 12, seed=3)
    assert r.price == pytest.approx(1000.0 * (0.03 * dfs.sum() + dfs[-1]), abs=1e-9)


# ======================================================================= 4. threads, bit for bit

def test_the_same_price_on_one_thread_and_on_two():
    # reference 4: the design's requirement (the policy is fitted once, on its own stream)
    mkt = market()
    p = note(call_dates=CALLS, autocall_level=1e6, pilot=1 << 12)
    one = fp.price(p, mkt, paths=1 << 13, seed=8, threads=1, chunk_paths=1024)
    two = fp.price(p, mkt, paths=1 << 13, seed=8, threads=2, chunk_paths=1024)
    assert (one.price, one.stderr) == (two.price, two.stderr)
    assert one.diagnostics == two.diagnostics
    assert sum(v for k, v in one.diagnostics.items() if k.startswith("issuer call")) > 0.05


# ========================================================================= 5. bad input, one line

BASE = """kind = "autocallable"
assets = ["NORDA", "KELPA"]
notional = 1000.0
observations = { first = 2027-06-01, every = "6M", count = 4 }
autocall_level = 1.00
coupon = 0.04
coupon_barrier = 0.70
memory = true
protection_barrier = 0.60
issuer_call = { dates = { first = 2027-12-01, every = "6M", count = 2 }, price = 1.00 }
"""
BAD = {
    "call date not an observation": (("first = 2027-12-01, every = \"6M\", count = 2",
                                      "dates = [2027-12-01, 2028-03-01]"),
                                     "issuer_call.dates", "2028-03-01 is not an observation"),
    "call at maturity": (("count = 2 }, price", "count = 3 }, price"), "issuer_call.dates",
                         "2028-12-01 is the note's last observation"),
    "price zero": (("price = 1.00", "price = 0.0"), "issuer_call.price", "must be positive"),
    "price negative": (("price = 1.00", "price = -1.0"), "issuer_call.price",
                       "must be positive"),
    "unknown key": (("price = 1.00", "price = 1.00, prise = 1.0"), "issuer_call.prise",
                    "unknown key"),
    "no dates": (("dates = { first = 2027-12-01, every = \"6M\", count = 2 }, ", ""),
                 "issuer_call.dates", "missing required key"),
    "pilot without a call": (("issuer_call = {", "pilot_paths = 4096\n# {"), "pilot_paths",
                             "no issuer_call"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_issuer_call_is_one_line_naming_file_and_key(case, tmp_path, capsys):
    # reference 5: the command line's bad-input contract
    (old, new), key, words = BAD[case]
    assert old in BASE
    path = tmp_path / (case.replace(" ", "_") + ".toml")
    path.write_text(BASE.replace(old, new, 1), encoding="utf-8")
    with pytest.raises(fp.InputError) as info:
        fp.load_product(path)
    assert str(info.value).startswith(f"{path}: {key}: "), str(info.value)
    code, out, err = run(["price", path, "--market", DEMO_MARKET, "--paths", "1024",
                          "--sampler", "pseudo"], capsys)
    assert_bad_input(code, out, err, f"{path}: {key}: ", words)


def test_a_percentage_call_price_warns(tmp_path):
    path = tmp_path / "pct.toml"
    path.write_text(BASE.replace("price = 1.00", "price = 100.0"), encoding="utf-8")
    with pytest.warns(fp.FairpathWarning, match="issuer_call price 100 is 100 times"):
        fp.load_product(path)


def test_example_file_loads():
    # the example may have moved to the library of payoffs
    name = "autocall_issuer_callable.toml"
    path = next(f for f in (ROOT / "examples" / name, ROOT / "payoffs" / name) if f.exists())
    p = fp.load_product(path)
    assert p.call_dates == SEMI[1:5] and p.call_price == 1.0
    assert p.pilot_paths() == p.pilot and dataclasses.replace(p, call_dates=()).pilot_paths() == 0


def test_an_ill_conditioned_or_unfitted_regression_is_reported():
    # the notes the price carries (exercise.py's ILL_CONDITIONED threshold)
    from fairpath.products.autocall import MIN_ALIVE, CallPolicy
    from fairpath.products.exercise import ILL_CONDITIONED

    mkt = market()
    coef = np.zeros(8)
    pol = CallPolicy(CALLS[:2], (coef, None), (10 * ILL_CONDITIONED, 0.0),
                     ((0.0, 1.0), (0.0, 0.0)), 4096)
    notes = note(call_dates=CALLS[:2], call_policy=pol).notes(mkt)
    assert any("ill-conditioned" in n for n in notes), notes
    assert any(f"fewer than {MIN_ALIVE} pilot paths" in n and str(CALLS[1]) in n
               for n in notes), notes

"""fairpath.solve: the value of a product key that makes the price a target.

References, each named again beside its check:

* Par coupon: the price of an autocallable is linear in its coupon, so the solved coupon must
  equal the linear interpolation between two separate ``fp.price`` runs at coupon 0 and 1 on the
  same seed (written here), and reprice to the target.
* Strike of a European: the Black-Scholes-Merton price (QuantLib ``blackFormula``) at a known
  strike; the recovered strike may differ from it by the Monte Carlo error divided by the
  closed-form strike slope ``dC/dK = -e^{-rT} N(d2)`` (``dP/dK = e^{-rT} N(-d2)`` for a put).
* Barrier level: QuantLib's ``AnalyticBarrierEngine`` (Reiner-Rubinstein / Haug) price at a
  known barrier, and its slope in the barrier by central differences of QuantLib prices.
* Autocall level: a two-date autocallable (one early-redemption date, then maturity) has a
  closed form in bivariate normal probabilities, written below from the rules of formats.md
  with QuantLib's ``BivariateCumulativeNormalDistributionWe04DP``; its slope in the level by
  central differences of that formula.
* Errors: the messages and exit status of the contract (formats.md, "Command line").

Tolerance of a solved key: on the solver's fixed random numbers the price at the solved value is
the target, while the price at the true value is off by the Monte Carlo error ``eps``
(``|eps| <= 4 stderr`` at a fixed seed). To first order the solved value is off by
``eps / slope``, so ``|solved - true| <= 4 stderr / min |slope|``, the slope's minimum taken over
that interval (the slope changes by well under 1% over it).
"""

from __future__ import annotations

import dataclasses
import json
import math
import re
from datetime import date
from pathlib import Path

import pytest
import QuantLib as ql
from scipy.stats import norm

import fairpath as fp
from clitools import run

ROOT = Path(__file__).resolve().parents[1]
DEMO_MARKET = ROOT / "markets" / "demo.toml"
SINGLE = ROOT / "payoffs" / "autocall_single.toml"

VAL = date(2026, 12, 1)
R, Q, VOL = 0.03, 0.02, 0.25
EXPIRY = date(2027, 12, 1)
T = (EXPIRY - VAL).days / 365.0
_QL_TODAY = ql.Date(1, ql.December, 2026)


def flat_market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(VOL), Q),))


def recovered_within(solved: float, true: float, stderr: float, slope) -> bool:
    """|solved - true| <= 4 stderr / min |slope| over the interval (see the module notes)."""
    width = 4.0 * stderr / abs(slope(true))
    width = 4.0 * stderr / min(abs(slope(true - width)), abs(slope(true)),
                               abs(slope(true + width)))
    return abs(solved - true) <= width


# ============================================================================ 1. par coupon

@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_par_coupon_is_the_interpolation_of_two_separate_runs(sampler):
    # reference: linear interpolation between fp.price at coupon 0 and 1, same seed and paths
    market = fp.load_market(DEMO_MARKET)
    note = fp.load_product(SINGLE)
    target = 1000.0
    s = fp.solve(note, market, "coupon", target, paths=16384, sampler=sampler, seed=11)
    lo = fp.price(dataclasses.replace(note, coupon=0.0), market, paths=16384, sampler=sampler,
                  seed=11)
    hi = fp.price(dataclasses.replace(note, coupon=1.0), market, paths=16384, sampler=sampler,
                  seed=11)
    x = (target - lo.price) / (hi.price - lo.price)
    assert s.key == "coupon" and s.target == target
    assert s.value == pytest.approx(x, rel=1e-12)
    assert 0.0 < s.value < 0.2
    assert abs(s.price - target) <= 4 * s.stderr


@pytest.mark.parametrize("sampler,paths,seed", [
    ("pseudo", 16384, 11),
    ("sobol", 16384, 11),
    ("sobol", 65536, None),
])
def test_par_coupon_reprices_to_the_target(sampler, paths, seed):
    # Tolerance 1e-3 stderr: with one control set the controlled estimate is linear in the
    # payoff (the least-squares coefficient is linear in it), and the payoff is linear in the
    # coupon on fixed paths, so the repriced price is the target up to rounding; only a change
    # of the selected control set between the runs (coefficients re-estimated on another set)
    # would move it, so the solver imposes one set on every run.
    market = fp.load_market(DEMO_MARKET)
    note = fp.load_product(SINGLE)
    s = fp.solve(note, market, "coupon", 1000.0, paths=paths, sampler=sampler, seed=seed)
    # repriced with the same numbers and the control set the solver imposed
    again = fp.price_many([dataclasses.replace(note, coupon=s.value)], market, paths=paths,
                          sampler=sampler, seed=seed, control_set=s.result.controls)[0]
    assert again.price == s.price
    assert abs(s.price - 1000.0) <= 1e-3 * s.stderr, (s.price, s.stderr)


# ============================================================================ 2. other keys

def bsm(strike: float, right: str) -> float:
    # reference: QuantLib blackFormula on the forward, stdev sigma sqrt(T), discount e^{-rT}
    kind = ql.Option.Call if right == "call" else ql.Option.Put
    return ql.blackFormula(kind, strike, 100.0 * math.exp((R - Q) * T), VOL * math.sqrt(T),
                           math.exp(-R * T))


def strike_slope(right: str):
    def slope(k: float) -> float:  # dC/dK = -e^{-rT} N(d2), dP/dK = e^{-rT} N(-d2)
        d2 = (math.log(100.0 / k) + (R - Q - 0.5 * VOL**2) * T) / (VOL * math.sqrt(T))
        return -math.exp(-R * T) * (norm.cdf(d2) if right == "call" else -norm.cdf(-d2))
    return slope


@pytest.mark.parametrize("right,true_strike,sampler", [("call", 105.0, "sobol"),
                                                      ("put", 95.0, "pseudo")])
def test_strike_solved_for_bsm_price_recovers_the_strike(right, true_strike, sampler):
    m = flat_market()
    option = fp.European(asset="NORDA", right=right, strike=100.0, expiry=EXPIRY)
    s = fp.solve(option, m, "strike", bsm(true_strike, right), paths=16384, sampler=sampler,
                 seed=43)
    assert s.method.startswith("bracketing")
    assert s.stderr > 0
    assert recovered_within(s.value, true_strike, s.stderr, strike_slope(right)), (
        s.value, true_strike, s.stderr)


def ql_down_and_out_call(barrier: float) -> float:
    # reference: QuantLib BarrierOption + AnalyticBarrierEngine, continuous monitoring
    ql.Settings.instance().evaluationDate = _QL_TODAY
    dc = ql.Actual365Fixed()
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(100.0)),
        ql.YieldTermStructureHandle(ql.FlatForward(_QL_TODAY, Q, dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(_QL_TODAY, R, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_QL_TODAY, ql.NullCalendar(), VOL,
                                                           dc)))
    option = ql.BarrierOption(ql.Barrier.DownOut, barrier, 0.0,
                              ql.PlainVanillaPayoff(ql.Option.Call, 100.0),
                              ql.EuropeanExercise(ql.Date(1, ql.December, 2027)))
    option.setPricingEngine(ql.AnalyticBarrierEngine(process))
    return option.NPV()


def test_barrier_level_solved_for_quantlib_price_recovers_the_barrier():
    m = flat_market()
    option = fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY, barrier=80.0,
                        direction="down", effect="out", monitoring="continuous")
    true_h = 85.0
    s = fp.solve(option, m, "barrier", ql_down_and_out_call(true_h), paths=16384,
                 sampler="sobol", seed=47)

    def slope(h):  # central difference of QuantLib prices
        return (ql_down_and_out_call(h + 1e-3) - ql_down_and_out_call(h - 1e-3)) / 2e-3

    assert slope(true_h) < 0  # a higher barrier knocks out more often
    assert recovered_within(s.value, true_h, s.stderr, slope), (s.value, true_h, s.stderr)


TWO_DATES = (date(2027, 6, 1), date(2027, 12, 1))
TWO_DATE_TERMS = dict(coupon=0.08, coupon_barrier=0.6, protection_barrier=0.5,
                      strike_level=1.0, notional=1000.0)


def two_date_note_closed_form(level: float, *, coupon, coupon_barrier, protection_barrier,
                              strike_level, notional) -> float:
    """One asset, initial level = spot, observations t1 (call test at ``level``) and t2
    (maturity), no memory, knock-in watched at maturity. With x_i = ln(S_i / S0) bivariate
    normal (means (r - q - vol^2/2) t_i, sds vol sqrt(t_i), correlation sqrt(t1/t2)):

    V = N df1 [c P(x1 >= ln B) + P(x1 >= ln L)]
      + N df2 [c P(x1 < ln L, x2 >= ln B) + P(x1 < ln L) - P(x1 < ln L, x2 < ln h)
               + E[S2/S0 ; x1 < ln L, x2 < ln h] / k],       h = min(barrier, k),

    the last expectation being e^{(r-q) t2} Phi2(a - s1, b - s2) (the share measure shifts
    each standardised x_i by its sd s_i)."""
    t1, t2 = ((d - VAL).days / 365.0 for d in TWO_DATES)
    s1, s2 = VOL * math.sqrt(t1), VOL * math.sqrt(t2)
    mu = R - Q - 0.5 * VOL**2
    phi2 = ql.BivariateCumulativeNormalDistributionWe04DP(math.sqrt(t1 / t2))

    def z1(level_):
        return (math.log(level_) - mu * t1) / s1

    def z2(level_):
        return (math.log(level_) - mu * t2) / s2

    a, b = z1(level), z2(coupon_barrier)
    h = z2(min(protection_barrier, strike_level))
    first = coupon * norm.cdf(-z1(coupon_barrier)) + norm.cdf(-a)
    second = (coupon * (norm.cdf(a) - phi2(a, b)) + norm.cdf(a) - phi2(a, h)
              + math.exp((R - Q) * t2) * phi2(a - s1, h - s2) / strike_level)
    return notional * (math.exp(-R * t1) * first + math.exp(-R * t2) * second)


def test_two_date_note_closed_form_matches_the_engine():
    # the reference of the next test, first checked against the engine (4 stderr)
    m = flat_market()
    for level, sampler in ((0.9, "sobol"), (1.0, "pseudo"), (1.1, "sobol")):
        n = fp.Autocallable(assets=("NORDA",), observations=TWO_DATES, autocall_level=level,
                            **TWO_DATE_TERMS)
        res = fp.price(n, m, paths=65536, sampler=sampler, seed=53)
        ref = two_date_note_closed_form(level, **TWO_DATE_TERMS)
        assert abs(res.price - ref) <= 4 * res.stderr, (level, res.price, ref, res.stderr)


def test_autocall_level_solved_for_closed_form_price_recovers_the_level():
    # reference: two_date_note_closed_form at level 1.0; the price rises with the level here
    # (a note left alive earns one more 8% coupon at little knock-in risk), so the solver's
    # bracket grows monotonically from its start at 0.9
    m = flat_market()
    n = fp.Autocallable(assets=("NORDA",), observations=TWO_DATES, autocall_level=0.9,
                        **TWO_DATE_TERMS)
    s = fp.solve(n, m, "autocall_level", two_date_note_closed_form(1.0, **TWO_DATE_TERMS),
                 paths=65536, sampler="sobol", seed=59)

    def slope(level):
        f = two_date_note_closed_form
        return (f(level + 1e-4, **TWO_DATE_TERMS) - f(level - 1e-4, **TWO_DATE_TERMS)) / 2e-4

    assert slope(1.0) > 0
    assert s.method.startswith("bracketing")
    assert recovered_within(s.value, 1.0, s.stderr, slope), (s.value, s.stderr)


# ============================================================================ 3. errors

@pytest.mark.parametrize("key", ["right", "expiry", "no_such_key"])
def test_non_numeric_or_unknown_key_lists_numeric_keys(key):
    option = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY)
    with pytest.raises(fp.InputError, match=r"numeric keys: strike, quantity$") as info:
        fp.solve(option, flat_market(), key, 10.0, paths=1024, sampler="pseudo")
    assert info.value.key == "--for"
    assert repr(key) in str(info.value)


def test_assets_is_not_a_numeric_key_of_a_note():
    note = fp.load_product(SINGLE)
    with pytest.raises(fp.InputError, match="'assets' is not a numeric key") as info:
        fp.solve(note, fp.load_market(DEMO_MARKET), "assets", 1000.0, paths=1024,
                 sampler="pseudo")
    listed = str(info.value).split("numeric keys: ")[1].split(", ")
    assert "coupon" in listed and "autocall_level" in listed and "assets" not in listed
    assert "coupons_owed" not in listed  # an integer count, not a solvable level


def test_unreachable_target_states_the_reachable_range():
    # a call is worth less than the spot (100, no dividend lost below e^{-qT}) whatever the
    # strike, so a target of 150 cannot be reached
    option = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY)
    with pytest.raises(fp.InputError, match="no value of strike reaches 150") as info:
        fp.solve(option, flat_market(), "strike", 150.0, paths=1024, sampler="pseudo", seed=1)
    msg = str(info.value)
    assert "\n" not in msg and info.value.key == "--target"
    found = re.search(r"the price ranges over \[([-\d.e+]+), ([-\d.e+]+)\]", msg)
    assert found, msg
    lo, hi = map(float, found.groups())
    assert 0.0 <= lo < hi < 100.0 * math.exp(-Q * T) + 1e-6 < 150.0


def test_negative_coupon_needed_is_refused():
    market = fp.load_market(DEMO_MARKET)
    note = fp.load_product(SINGLE)
    zero = fp.price(dataclasses.replace(note, coupon=0.0), market, paths=4096, sampler="pseudo")
    assert zero.price > 600.0  # the note is worth more than the target with no coupon at all
    with pytest.raises(fp.InputError, match="no coupon >= 0 reaches 600") as info:
        fp.solve(note, market, "coupon", 600.0, paths=4096, sampler="pseudo")
    assert info.value.key == "--target"



def test_cli_solve_json_contract(capsys):
    code, out, err = run(["solve", SINGLE, "--market", DEMO_MARKET, "--for", "coupon",
                          "--target", "1000", "--json"], capsys)
    assert code == 0, err
    lines = out.strip().splitlines()
    assert len(lines) == 1
    d = json.loads(lines[0])
    assert {"key", "value", "price", "stderr", "target"} <= set(d)
    assert d["key"] == "coupon" and d["target"] == 1000.0
    assert 0.0 < d["value"] < 0.2 and d["stderr"] > 0
    assert abs(d["price"] - 1000.0) <= 4 * d["stderr"]
    # the same as the Python call with the command's defaults (65,536 Sobol paths, fixed seed)
    s = fp.solve(fp.load_product(SINGLE), fp.load_market(DEMO_MARKET), "coupon", 1000.0,
                 source=str(SINGLE))
    assert d["value"] == s.value and d["price"] == s.price


@pytest.mark.parametrize("argv_tail,words", [
    (["--for", "right", "--target", "1000"], ["--for", "'right'", "numeric keys"]),
    (["--for", "coupon", "--target", "-5", "--paths", "1024", "--sampler", "pseudo"],
     ["--target", "no coupon >= 0"]),
])
def test_cli_solve_bad_input_is_exit_2_and_one_line(argv_tail, words, capsys):
    code, out, err = run(["solve", SINGLE, "--market", DEMO_MARKET, *argv_tail], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"fairpath: error: {SINGLE}: ")
    assert all(w in lines[0] for w in words), lines[0]
    assert out == ""

"""Checks of fairpath.closed_form against references outside the project.

1. symbolic derivatives of the price formulas (sympy),
2. QuantLib's analytic European engine,
3. put-call and digital parity identities (hypothesis properties),
4. worked textbook examples,
5. edge cases (T = 0, sigma = 0, zero strike, warnings, bad input).
"""

from __future__ import annotations

import functools
import math
import warnings

import mpmath
import numpy as np
import pytest
import QuantLib as ql
import sympy as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from fairpath.closed_form import (
    asset_or_nothing_price,
    bsm_greeks,
    bsm_price,
    digital_greeks,
    digital_price,
    discount,
    forward,
)
from fairpath.errors import InputError
from qltools import evaluation_date

GREEKS = ("price", "delta", "gamma", "vega", "rho", "theta")
RIGHTS = ("call", "put")

# (spot, strike, T, r, q, sigma): ITM / ATM / OTM for calls (and the reverse for puts),
# q != 0, a negative rate, short and long expiries, low and high vol.
PARAMS = [
    (100.0, 100.0, 1.0, 0.05, 0.02, 0.20),  # ATM, q != 0
    (100.0, 80.0, 0.5, 0.03, 0.01, 0.25),  # call ITM / put OTM
    (100.0, 125.0, 2.0, 0.04, 0.03, 0.30),  # call OTM / put ITM
    (42.0, 40.0, 0.5, 0.10, 0.00, 0.20),  # q == 0
    (50.0, 52.0, 0.1, -0.01, 0.02, 0.45),  # negative rate, short expiry
    (1500.0, 1400.0, 5.0, 0.02, 0.035, 0.15),  # long expiry, large spot
    (100.0, 100.0 * math.exp(0.03 * 1.5), 1.5, 0.05, 0.02, 0.35),  # ATM forward
]


def close(actual: float, expected: float, rel: float, abs_: float) -> bool:
    return abs(actual - expected) <= max(rel * abs(expected), abs_)


# --------------------------------------------------------------------------- 1. sympy

_S, _K, _T, _r, _q, _sig, _P = sp.symbols("S K T r q sigma P", positive=True)


def _N(x: sp.Expr) -> sp.Expr:
    """Standard normal CDF written with erf."""
    return (1 + sp.erf(x / sp.sqrt(2))) / 2


def _sym_price(kind: str, right: str) -> sp.Expr:
    # Black & Scholes (1973) / Merton (1973) with dividend yield; cash-or-nothing as in
    # Reiner & Rubinstein (1991) and Haug, "The Complete Guide to Option Pricing Formulas",
    # 2nd ed. Written here independently of the module under test.
    d1 = (sp.log(_S / _K) + (_r - _q + _sig**2 / 2) * _T) / (_sig * sp.sqrt(_T))
    d2 = d1 - _sig * sp.sqrt(_T)
    Sq, Kr = _S * sp.exp(-_q * _T), _K * sp.exp(-_r * _T)
    if kind == "vanilla":
        if right == "call":
            return Sq * _N(d1) - Kr * _N(d2)
        return Kr * _N(-d2) - Sq * _N(-d1)
    sign = 1 if right == "call" else -1
    return _P * sp.exp(-_r * _T) * _N(sign * d2)


@functools.cache
def _sym_greeks(kind: str, right: str):
    """Lambdified (mpmath) price and its derivatives: theta = -dV/dT, rho = dV/dr."""
    V = _sym_price(kind, right)
    exprs = {
        "price": V,
        "delta": sp.diff(V, _S),
        "gamma": sp.diff(V, _S, 2),
        "vega": sp.diff(V, _sig),
        "rho": sp.diff(V, _r),
        "theta": -sp.diff(V, _T),
    }
    args = (_S, _K, _T, _r, _q, _sig, _P)
    return {k: sp.lambdify(args, e, modules="mpmath") for k, e in exprs.items()}


@pytest.mark.parametrize("right", RIGHTS)
@pytest.mark.parametrize("params", PARAMS)
@pytest.mark.parametrize("kind", ["vanilla", "digital"])
def test_greeks_equal_sympy_derivatives(kind, right, params):
    S, K, T, r, q, sig = params
    payout = 7.5
    funcs = _sym_greeks(kind, right)
    if kind == "vanilla":
        ours = bsm_greeks(S, K, T, r, q, sig, right)
    else:
        ours = digital_greeks(S, K, T, r, q, sig, right, payout=payout)
    scale = S if kind == "vanilla" else payout
    with mpmath.workdps(40):  # reference evaluated in 40-digit arithmetic
        for key in GREEKS:
            ref = float(funcs[key](*map(mpmath.mpf, (S, K, T, r, q, sig, payout))))
            assert close(ours[key], ref, rel=1e-11, abs_=1e-13 * scale), (key, ours[key], ref)


# --------------------------------------------------------------------------- 2. QuantLib

_TODAY = ql.Date(15, ql.January, 2024)
_DC = ql.Actual365Fixed()  # year fraction = days / 365 exactly, so T = days / 365 below


@pytest.fixture(autouse=True, scope="module")
def _ql_evaluation_date():
    with evaluation_date(_TODAY):
        yield


def _ql_option(payoff, S, days, r, q, sig):
    flat = ql.YieldTermStructureHandle
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(S)),
        flat(ql.FlatForward(_TODAY, q, _DC)),  # continuous compounding by default
        flat(ql.FlatForward(_TODAY, r, _DC)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_TODAY, ql.NullCalendar(), sig, _DC)),
    )
    option = ql.VanillaOption(payoff, ql.EuropeanExercise(_TODAY + days))
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return option


def _ql_greeks(option) -> dict[str, float]:
    # QuantLib's conventions for the analytic European engine are the same as ours:
    # vega per 1.00 of vol, rho = dV/dr per 1.00 of rate with the dividend curve fixed
    # (dV/dq is reported separately as dividendRho), theta per year as -dV/dT, and
    # delta/gamma per unit of spot.
    return {
        "price": option.NPV(),
        "delta": option.delta(),
        "gamma": option.gamma(),
        "vega": option.vega(),
        "rho": option.rho(),
        "theta": option.theta(),
    }


# (spot, strike, days, r, q, sigma)
QL_PARAMS = [
    (100.0, 100.0, 365, 0.05, 0.02, 0.20),
    (100.0, 95.0, 180, 0.05, 0.02, 0.25),
    (100.0, 120.0, 730, 0.03, 0.01, 0.30),
    (42.0, 40.0, 91, 0.10, 0.0, 0.20),
    (50.0, 55.0, 30, -0.005, 0.03, 0.45),
    (1500.0, 1300.0, 1825, 0.02, 0.035, 0.15),
]
_QL_TYPE = {"call": ql.Option.Call, "put": ql.Option.Put}


@pytest.mark.parametrize("right", RIGHTS)
@pytest.mark.parametrize("params", QL_PARAMS)
def test_bsm_against_quantlib(right, params):
    S, K, days, r, q, sig = params
    ref = _ql_greeks(_ql_option(ql.PlainVanillaPayoff(_QL_TYPE[right], K), S, days, r, q, sig))
    ours = bsm_greeks(S, K, days / 365, r, q, sig, right)
    assert close(bsm_price(S, K, days / 365, r, q, sig, right), ref["price"], 1e-10, 1e-12 * S)
    for key in GREEKS:
        assert close(ours[key], ref[key], rel=1e-10, abs_=1e-12 * S), (key, ours[key], ref[key])


@pytest.mark.parametrize("right", RIGHTS)
@pytest.mark.parametrize("params", QL_PARAMS)
def test_digital_against_quantlib(right, params):
    S, K, days, r, q, sig = params
    cash = 10.0
    payoff = ql.CashOrNothingPayoff(_QL_TYPE[right], K, cash)
    ref = _ql_greeks(_ql_option(payoff, S, days, r, q, sig))
    ours = digital_greeks(S, K, days / 365, r, q, sig, right, payout=cash)
    price = digital_price(S, K, days / 365, r, q, sig, right, payout=cash)
    assert close(price, ref["price"], 1e-10, 1e-12 * cash)
    for key in GREEKS:
        assert close(ours[key], ref[key], rel=1e-10, abs_=1e-12 * cash), (key, ours[key], ref[key])


@pytest.mark.parametrize("right", RIGHTS)
@pytest.mark.parametrize("params", QL_PARAMS)
def test_asset_or_nothing_against_quantlib(right, params):
    S, K, days, r, q, sig = params
    ref = _ql_option(ql.AssetOrNothingPayoff(_QL_TYPE[right], K), S, days, r, q, sig).NPV()
    ours = asset_or_nothing_price(S, K, days / 365, r, q, sig, right)
    assert close(ours, ref, rel=1e-10, abs_=1e-12 * S)


def test_forward_and_discount_against_quantlib():
    r, q, days = 0.037, 0.012, 400
    risk_free = ql.FlatForward(_TODAY, r, _DC)
    dividend = ql.FlatForward(_TODAY, q, _DC)
    date = _TODAY + days
    df = risk_free.discount(date)
    assert close(discount(days / 365, r), df, 1e-14, 0.0)
    assert close(forward(100.0, days / 365, r, q), 100.0 * dividend.discount(date) / df,
                 1e-14, 0.0)


# --------------------------------------------------------------------------- 3. parity

# Parity identities (Stoll 1969 for put-call parity; Haug, "The Complete Guide to Option
# Pricing Formulas", 2nd ed., for the binary ones), checked as properties.
spots = st.floats(min_value=0.01, max_value=1e4)
moneyness = st.floats(min_value=0.2, max_value=5.0)
expiries = st.floats(min_value=1e-3, max_value=30.0)
rates = st.floats(min_value=-0.05, max_value=0.20)
vols = st.floats(min_value=1e-3, max_value=3.0)
PROPERTY = settings(max_examples=200, deadline=None)


@PROPERTY
@given(spot=spots, m=moneyness, T=st.one_of(st.just(0.0), expiries), r=rates, q=rates,
       sigma=st.one_of(st.just(0.0), vols))
def test_put_call_parity(spot, m, T, r, q, sigma):
    # call - put = S e^{-qT} - K e^{-rT}; holds in the degenerate T = 0 / sigma = 0 cases too.
    K = spot * m
    c = bsm_price(spot, K, T, r, q, sigma, "call")
    p = bsm_price(spot, K, T, r, q, sigma, "put")
    expected = spot * math.exp(-q * T) - K * math.exp(-r * T)
    assert c - p == pytest.approx(expected, rel=1e-12, abs=1e-12 * (spot + K))
    gc = bsm_greeks(spot, K, T, r, q, sigma, "call")
    gp = bsm_greeks(spot, K, T, r, q, sigma, "put")
    assert gc["delta"] - gp["delta"] == pytest.approx(math.exp(-q * T), abs=1e-12)
    assert gc["gamma"] == pytest.approx(gp["gamma"], rel=1e-9, abs=1e-12)
    assert gc["vega"] == pytest.approx(gp["vega"], rel=1e-9, abs=1e-12 * spot)


@PROPERTY
@given(spot=spots, m=moneyness, T=expiries, r=rates, q=rates, sigma=vols,
       payout=st.floats(min_value=0.01, max_value=1e3))
def test_digital_parity(spot, m, T, r, q, sigma, payout):
    # digital call + digital put = payout e^{-rT} (strictly positive T and sigma: in the
    # degenerate cases both strict indicators are 0 when the forward equals the strike).
    K = spot * m
    c = digital_price(spot, K, T, r, q, sigma, "call", payout=payout)
    p = digital_price(spot, K, T, r, q, sigma, "put", payout=payout)
    assert c + p == pytest.approx(payout * math.exp(-r * T), rel=1e-12)


@PROPERTY
@given(spot=spots, m=moneyness, T=st.one_of(st.just(0.0), expiries), r=rates, q=rates,
       sigma=st.one_of(st.just(0.0), vols))
def test_asset_minus_cash_is_call(spot, m, T, r, q, sigma):
    # asset-or-nothing call - K * cash-or-nothing call = vanilla call (payoff decomposition).
    K = spot * m
    aon = asset_or_nothing_price(spot, K, T, r, q, sigma, "call")
    con = digital_price(spot, K, T, r, q, sigma, "call")
    call = bsm_price(spot, K, T, r, q, sigma, "call")
    assert aon - K * con == pytest.approx(call, rel=1e-10, abs=1e-12 * (spot + K))


# --------------------------------------------------------------------------- 4. textbooks


def test_hull_bsm_example():
    # Hull, "Options, Futures, and Other Derivatives", 8th ed. (Pearson, 2012), chapter 14
    # (The Black-Scholes-Merton model), worked example; edition and chapter from memory, not
    # re-read here: S0=42, K=40, r=10%,
    # sigma=20%, T=0.5 -> call 4.76, put 0.81 (2 decimals).
    assert bsm_price(42.0, 40.0, 0.5, 0.10, 0.0, 0.20, "call") == pytest.approx(4.76, abs=0.005)
    assert bsm_price(42.0, 40.0, 0.5, 0.10, 0.0, 0.20, "put") == pytest.approx(0.81, abs=0.005)


def test_hull_greek_letters_example():
    # Hull, "Options, Futures, and Other Derivatives", 8th ed. (Pearson, 2012), chapter 18
    # (The Greek letters), the running example; the values are those given in our issue, and
    # edition and chapter are from memory, not re-read here: S0=49, K=50, r=5%, sigma=20%,
    # T=20 weeks=0.3846 years, q=0 -> price 2.40, delta 0.522, gamma 0.066, vega 12.1
    # (per 1.00 of vol), theta -4.31 per year, rho 8.91.
    g = bsm_greeks(49.0, 50.0, 0.3846, 0.05, 0.0, 0.20, "call")
    assert g["price"] == pytest.approx(2.40, abs=0.005)
    assert g["delta"] == pytest.approx(0.522, abs=0.0005)
    assert g["gamma"] == pytest.approx(0.066, abs=0.0005)
    assert g["vega"] == pytest.approx(12.1, abs=0.05)
    assert g["theta"] == pytest.approx(-4.31, abs=0.005)
    assert g["rho"] == pytest.approx(8.91, abs=0.005)


def test_haug_generalized_bsm_example():
    # From memory: Haug, "The Complete Guide to Option Pricing Formulas", 2nd ed.
    # (generalized Black-Scholes-Merton example): S=60, K=65, T=0.25, r=8%, b=r-q=8% (q=0),
    # sigma=30% -> call 2.1334 (4 decimals).
    assert bsm_price(60.0, 65.0, 0.25, 0.08, 0.0, 0.30, "call") == pytest.approx(
        2.1334, abs=0.00005)


def test_haug_cash_or_nothing_example():
    # From memory: Haug, "The Complete Guide to Option Pricing Formulas", 2nd ed.
    # (cash-or-nothing example): S=100, K=80, T=0.75, r=6%, b=0 (so q=6%), sigma=35%,
    # cash 10 -> put 2.6710 (4 decimals).
    price = digital_price(100.0, 80.0, 0.75, 0.06, 0.06, 0.35, "put", payout=10.0)
    assert price == pytest.approx(2.6710, abs=0.00005)


# --------------------------------------------------------------------------- 5. edge cases


@pytest.fixture
def strict_numerics():
    """Fail on any numpy floating-point error or any warning inside the block."""
    with warnings.catch_warnings(), np.errstate(all="raise"):
        warnings.simplefilter("error")
        yield


SPOTS = np.array([80.0, 100.0, 120.0])


def test_expiry_gives_intrinsic(strict_numerics):
    K, r, q, sig = 100.0, 0.05, 0.02, 0.3
    for right, intrinsic, delta in [
        ("call", [0.0, 0.0, 20.0], [0.0, 0.5, 1.0]),  # 0.5: midpoint at the kink
        ("put", [20.0, 0.0, 0.0], [-1.0, -0.5, 0.0]),
    ]:
        np.testing.assert_array_equal(bsm_price(SPOTS, K, 0.0, r, q, sig, right), intrinsic)
        g = bsm_greeks(SPOTS, K, 0.0, r, q, sig, right)
        np.testing.assert_array_equal(g["price"], intrinsic)
        np.testing.assert_array_equal(g["delta"], delta)
        np.testing.assert_array_equal(g["gamma"], 0.0)
        np.testing.assert_array_equal(g["vega"], 0.0)
        np.testing.assert_array_equal(g["rho"], 0.0)
        assert all(np.isfinite(g[k]).all() for k in GREEKS)
    # digitals and asset-or-nothing at expiry: the strict indicator S > K / S < K
    np.testing.assert_array_equal(digital_price(SPOTS, K, 0.0, r, q, sig, "call", payout=3.0),
                                  [0.0, 0.0, 3.0])
    np.testing.assert_array_equal(digital_price(SPOTS, K, 0.0, r, q, sig, "put"),
                                  [1.0, 0.0, 0.0])
    np.testing.assert_array_equal(asset_or_nothing_price(SPOTS, K, 0.0, r, q, sig, "call"),
                                  [0.0, 0.0, 120.0])
    np.testing.assert_array_equal(asset_or_nothing_price(SPOTS, K, 0.0, r, q, sig, "put"),
                                  [80.0, 0.0, 0.0])
    gd = digital_greeks(SPOTS, K, 0.0, r, q, sig, "call")
    np.testing.assert_array_equal(gd["price"], [0.0, 0.0, 1.0])
    for key in ("delta", "gamma", "vega", "rho"):
        np.testing.assert_array_equal(gd[key], 0.0)
    np.testing.assert_array_equal(gd["theta"], r * gd["price"])


def test_zero_vol_gives_discounted_forward_intrinsic(strict_numerics):
    K, T, r, q = 100.0, 2.0, 0.05, 0.01
    F = SPOTS * np.exp((r - q) * T)
    df = np.exp(-r * T)
    np.testing.assert_allclose(bsm_price(SPOTS, K, T, r, q, 0.0, "call"),
                               df * np.maximum(F - K, 0.0), rtol=1e-14)
    np.testing.assert_allclose(bsm_price(SPOTS, K, T, r, q, 0.0, "put"),
                               df * np.maximum(K - F, 0.0), rtol=1e-14, atol=1e-14)
    np.testing.assert_allclose(digital_price(SPOTS, K, T, r, q, 0.0, "call"),
                               df * (F > K), rtol=1e-14)
    np.testing.assert_allclose(asset_or_nothing_price(SPOTS, K, T, r, q, 0.0, "put"),
                               SPOTS * np.exp(-q * T) * (F < K), rtol=1e-14)
    g = bsm_greeks(SPOTS, K, T, r, q, 0.0, "call")
    np.testing.assert_allclose(g["delta"], np.exp(-q * T) * (F > K))
    np.testing.assert_array_equal(g["gamma"], 0.0)
    np.testing.assert_array_equal(g["vega"], 0.0)
    # -dV/dT and dV/dr of df * (F - K) where in the money
    np.testing.assert_allclose(g["theta"], (q * SPOTS * np.exp(-q * T) - r * K * df) * (F > K))
    np.testing.assert_allclose(g["rho"], K * T * df * (F > K))


def test_small_vol_converges_to_zero_vol():
    K, T, r, q = 100.0, 2.0, 0.05, 0.01
    for right in RIGHTS:
        limit = bsm_price(SPOTS, K, T, r, q, 0.0, right)
        np.testing.assert_allclose(bsm_price(SPOTS, K, T, r, q, 1e-6, right), limit,
                                   atol=1e-9)


def test_zero_strike_call(strict_numerics):
    S, T, r, q, sig = 100.0, 1.5, 0.04, 0.02, 0.25
    assert bsm_price(S, 0.0, T, r, q, sig, "call") == pytest.approx(S * math.exp(-q * T),
                                                                    rel=1e-15)
    assert bsm_price(S, 0.0, T, r, q, sig, "put") == 0.0
    g = bsm_greeks(S, 0.0, T, r, q, sig, "call")
    assert g["delta"] == pytest.approx(math.exp(-q * T), rel=1e-15)
    assert g["gamma"] == 0.0 and g["vega"] == 0.0 and g["rho"] == 0.0
    assert g["theta"] == pytest.approx(q * S * math.exp(-q * T), rel=1e-15)
    assert digital_price(S, 0.0, T, r, q, sig, "call") == pytest.approx(math.exp(-r * T))
    assert asset_or_nothing_price(S, 0.0, T, r, q, sig, "call") == pytest.approx(
        S * math.exp(-q * T))
    # a tiny positive strike is continuous with the zero strike
    assert bsm_price(S, 1e-12, T, r, q, sig, "call") == pytest.approx(S * math.exp(-q * T))


def test_zero_spot(strict_numerics):
    K, T, r, q, sig = 100.0, 1.0, 0.05, 0.0, 0.2
    assert bsm_price(0.0, K, T, r, q, sig, "call") == 0.0
    assert bsm_price(0.0, K, T, r, q, sig, "put") == pytest.approx(K * math.exp(-r * T))
    assert digital_price(0.0, K, T, r, q, sig, "put") == pytest.approx(math.exp(-r * T))


def test_no_nan_or_warnings_on_degenerate_grid(strict_numerics):
    # every combination of zero / non-zero T, sigma, spot, strike, through every function
    S = np.array([0.0, 50.0, 100.0, 150.0])[:, None, None, None]
    K = np.array([0.0, 100.0])[None, :, None, None]
    T = np.array([0.0, 1.0])[None, None, :, None]
    sig = np.array([0.0, 0.3])[None, None, None, :]
    for right in RIGHTS:
        results = [bsm_price(S, K, T, 0.05, 0.02, sig, right),
                   digital_price(S, K, T, 0.05, 0.02, sig, right),
                   asset_or_nothing_price(S, K, T, 0.05, 0.02, sig, right),
                   *bsm_greeks(S, K, T, 0.05, 0.02, sig, right).values(),
                   *digital_greeks(S, K, T, 0.05, 0.02, sig, right).values()]
        for res in results:
            assert res.shape == (4, 2, 2, 2)
            assert np.isfinite(res).all()


def test_vectorised_matches_scalar():
    S = np.array([80.0, 100.0, 120.0])[:, None]
    sig = np.array([0.1, 0.2, 0.4, 0.0])[None, :]
    K, T, r, q = 100.0, 0.75, 0.03, 0.01
    for right in RIGHTS:
        for func in (bsm_greeks, digital_greeks):
            vec = func(S, K, T, r, q, sig, right)
            for i in range(3):
                for j in range(4):
                    one = func(float(S[i, 0]), K, T, r, q, float(sig[0, j]), right)
                    assert isinstance(one["price"], float)
                    for key in GREEKS:
                        assert vec[key][i, j] == one[key]


def test_scalar_inputs_return_floats():
    assert isinstance(bsm_price(100, 100, 1, 0.05, 0, 0.2, "call"), float)
    assert isinstance(forward(100, 1, 0.05, 0.0), float)
    assert isinstance(discount(1, 0.05), float)


@pytest.mark.parametrize("bad", ["Call", "c", "CALL", " put", "", None, 1, ["call"]])
def test_bad_right_raises(bad):
    for func in (bsm_price, bsm_greeks, digital_price, digital_greeks, asset_or_nothing_price):
        with pytest.raises(InputError, match="right"):
            func(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, bad)


@pytest.mark.parametrize("name", ["spot", "strike", "T", "sigma"])
def test_negative_argument_raises(name):
    args = {"spot": 100.0, "strike": 100.0, "T": 1.0, "r": 0.05, "q": 0.0, "sigma": 0.2}
    args[name] = np.array([0.1, -0.2]) if name == "sigma" else -1.0
    for func in (bsm_price, bsm_greeks, digital_price, digital_greeks, asset_or_nothing_price):
        with pytest.raises(InputError, match=rf"{name}: must be non-negative, got -"):
            func(**args, right="call")


def test_non_finite_argument_raises():
    with pytest.raises(InputError, match="sigma: must be finite"):
        bsm_price(100.0, 100.0, 1.0, 0.05, 0.0, float("nan"), "call")
    with pytest.raises(InputError, match="payout: must be finite"):
        digital_price(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call", payout=float("inf"))


def test_shapes_that_do_not_broadcast_raise():
    with pytest.raises(InputError, match="broadcast"):
        bsm_price(np.ones(3), np.ones(2), 1.0, 0.05, 0.0, 0.2, "call")

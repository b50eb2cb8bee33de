"""Monte Carlo prices of performance baskets (fairpath.Basket) against outside references.

References, each named again beside its check:

* QuantLib 1.44's ``MCEuropeanBasketEngine`` (``MinBasketPayoff``, ``MaxBasketPayoff``,
  ``AverageBasketPayoff`` around a ``PlainVanillaPayoff``, a ``StochasticProcessArray`` of
  Black-Scholes-Merton processes and the correlation matrix; pseudo-random, antithetic, one
  time step, fixed seed) with its own ``errorEstimate()``;
* QuantLib's ``StulzEngine`` (Stulz 1982, options on the minimum or maximum of two assets) and
  ``ChoiBasketEngine`` (Choi 2018, average baskets), semi-analytic and much tighter than the
  Monte Carlo reference;
* Black-Scholes-Merton for the one-asset and perfectly correlated limits.

QuantLib's basket payoffs are on absolute levels and fairpath's on performances: with every
spot at 100, strike_level 1.0 with notional 100 is QuantLib's strike 100.
Monte Carlo assertions: |MC - reference| <= 4 (combined) standard errors at a fixed seed, plus
a stated allowance for a semi-analytic reference.
"""

from __future__ import annotations

import math
from datetime import date

import numpy as np
import pytest
import QuantLib as ql
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm

import fairpath as fp
from qltools import evaluation_date

VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)  # T = 1 (ACT/365F)
NAMES = ("NORDA", "KELPA", "VIREO")
VOLS = (0.25, 0.30, 0.20)
DIVS = (0.02, 0.0, 0.01)
RATE = 0.03
CORR = ((1.0, 0.6, 0.3), (0.6, 1.0, 0.5), (0.3, 0.5, 1.0))


def market(names=NAMES, vols=VOLS, divs=DIVS, corr=CORR, rate=RATE, spots=None) -> fp.Market:
    spots = spots or (100.0,) * len(names)
    assets = tuple(fp.Asset(n, s, fp.VolCurve.flat(v), q)
                   for n, s, v, q in zip(names, spots, vols, divs, strict=True))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate), assets,
                     correlation=fp.Correlation(tuple(names), tuple(map(tuple, corr))))


def within(res, ref, k=4.0, ref_se=0.0, allowance=0.0):
    return abs(res.price - ref) <= k * math.hypot(res.stderr, ref_se) + allowance


def bsm(spot, strike, T, r, q, vol, right):
    """Black-Scholes-Merton (Black & Scholes 1973, Merton 1973), written out here."""
    s = vol * math.sqrt(T)
    d1 = (math.log(spot / strike) + (r - q) * T) / s + 0.5 * s
    d2 = d1 - s
    if right == "call":
        return spot * math.exp(-q * T) * norm.cdf(d1) - strike * math.exp(-r * T) * norm.cdf(d2)
    return strike * math.exp(-r * T) * norm.cdf(-d2) - spot * math.exp(-q * T) * norm.cdf(-d1)


# --------------------------------------------------------------------------- QuantLib set-up
_TODAY = ql.Date(VAL.day, VAL.month, VAL.year)
_DC = ql.Actual365Fixed()
_PAYOFF = {"worst": ql.MinBasketPayoff, "best": ql.MaxBasketPayoff,
           "average": ql.AverageBasketPayoff}


@pytest.fixture(autouse=True, scope="module")
def _ql_evaluation_date():
    with evaluation_date(_TODAY):
        yield


def ql_process(vol, q, spot=100.0, rate=RATE):
    flat = ql.YieldTermStructureHandle
    return ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)), flat(ql.FlatForward(_TODAY, q, _DC)),
        flat(ql.FlatForward(_TODAY, rate, _DC)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_TODAY, ql.NullCalendar(), vol, _DC)))


def ql_basket(combine, right, k, engine):
    vanilla = ql.PlainVanillaPayoff(ql.Option.Call if right == "call" else ql.Option.Put, 100.0)
    payoff = _PAYOFF[combine](vanilla, k) if combine == "average" else _PAYOFF[combine](vanilla)
    option = ql.BasketOption(payoff, ql.EuropeanExercise(ql.Date(1, 12, 2027)))
    option.setPricingEngine(engine)
    return option


def processes(k):
    return [ql_process(v, q) for v, q in zip(VOLS[:k], DIVS[:k], strict=True)]


def ql_corr(k):
    return ql.Matrix([list(row[:k]) for row in CORR[:k]])


# --------------------------------------------------------------------------- 1. QuantLib
QL_CASES = [(k, combine, right) for k in (2, 3) for combine in ("worst", "best", "average")
            for right in ("call", "put")]


@pytest.mark.parametrize(("k", "combine", "right"), QL_CASES)
def test_basket_against_quantlib_monte_carlo(k, combine, right):
    m = market()
    p = fp.Basket(assets=NAMES[:k], combine=combine, right=right, strike_level=1.0,
                  expiry=EXPIRY, notional=100.0)
    res = fp.price(p, m, paths=65536, seed=100 + QL_CASES.index((k, combine, right)))
    # QuantLib's MCEuropeanBasketEngine: pseudo-random, antithetic, one time step (exact for
    # a European payoff under GBM), 2^19 samples, seed 42; its error estimate is 0.005-0.017
    arr = ql.StochasticProcessArray(processes(k), ql_corr(k))
    opt = ql_basket(combine, right, k,
                    ql.MCEuropeanBasketEngine(arr, "pseudorandom", timeSteps=1,
                                              antitheticVariate=True,
                                              requiredSamples=1 << 19, seed=42))
    qlv, ql_se = opt.NPV(), opt.errorEstimate()
    assert 0 < ql_se < 0.02
    assert res.stderr > 0
    assert within(res, qlv, ref_se=ql_se), (res.price, res.stderr, qlv, ql_se)


SEMI_ANALYTIC = [(2, "worst"), (2, "best"), (2, "average"), (3, "average")]


@pytest.mark.parametrize("right", ["call", "put"])
@pytest.mark.parametrize(("k", "combine"), SEMI_ANALYTIC)
def test_basket_against_semi_analytic_quantlib_engines(k, combine, right):
    m = market()
    p = fp.Basket(assets=NAMES[:k], combine=combine, right=right, strike_level=1.0,
                  expiry=EXPIRY, notional=100.0)
    res = fp.price(p, m, paths=65536, seed=200 + 2 * SEMI_ANALYTIC.index((k, combine))
                   + (right == "put"))
    procs = processes(k)
    if combine == "average":
        # QuantLib's ChoiBasketEngine, lambda 15 (lambda 10 and 20 agree to 1e-8 here)
        engine = ql.ChoiBasketEngine(procs, ql_corr(k), 15.0)
    else:
        # QuantLib's StulzEngine: a bivariate normal CDF accurate to about 1e-6 (a direct
        # quadrature of the worst-of put agreed to 5e-6)
        engine = ql.StulzEngine(procs[0], procs[1], CORR[0][1])
    ref = ql_basket(combine, right, k, engine).NPV()
    assert within(res, ref, allowance=1e-4), (res.price, res.stderr, ref)


# --------------------------------------------------------------------------- 2. properties
_VOL = st.floats(0.05, 0.6)
_Q = st.floats(0.0, 0.05)
_R = st.floats(-0.01, 0.08)
_STRIKE = st.floats(0.7, 1.3)


class RawBasket(fp.Basket):
    """The plain payoff, without the conditional estimator (for path-by-path comparisons)."""

    kind = ""  # not registered

    def payoff(self, paths):
        return self.raw_payoff(paths)


@settings(max_examples=6, deadline=None, derandomize=True)
@given(vols=st.tuples(_VOL, _VOL, _VOL), divs=st.tuples(_Q, _Q, _Q), r=_R, strike=_STRIKE,
       rho=st.floats(-0.45, 0.95), k=st.integers(2, 3))
def test_worst_of_call_below_each_single_asset_call(vols, divs, r, strike, rho, k):
    # equicorrelated: positive definite for rho > -1/2
    corr = tuple(tuple(1.0 if i == j else rho for j in range(3)) for i in range(3))
    m = market(vols=vols, divs=divs, corr=corr, rate=r)
    names = NAMES[:k]
    run = dict(paths=4096, seed=81, control=False)
    kw = dict(assets=names, right="call", strike_level=strike, expiry=EXPIRY, notional=100.0)
    worst = fp.price(RawBasket(**kw, combine="worst"), m, **run)  # the plain payoff
    for i in range(k):
        # a unit-weight "average" basket is asset i alone, on the same simulated paths
        w = tuple(1.0 if j == i else 0.0 for j in range(k))
        single = fp.price(RawBasket(**kw, combine="average", weights=w), m, **run)
        assert worst.price <= single.price + 1e-12
        ref = 100.0 * bsm(1.0, strike, 1.0, r, divs[i], vols[i], "call")  # BSM, written here
        assert within(single, ref), (i, single.price, single.stderr, ref)


@settings(max_examples=6, deadline=None, derandomize=True)
@given(vol=_VOL, q=_Q, r=_R, strike=_STRIKE, right=st.sampled_from(["call", "put"]),
       combine=st.sampled_from(["worst", "best", "average"]), k=st.integers(2, 3))
def test_identical_assets_perfectly_correlated_give_the_single_asset_option(vol, q, r, strike,
                                                                           right, combine, k):
    corr = tuple(tuple(1.0 for _ in range(k)) for _ in range(k))  # correlation 1 (singular)
    m = market(names=NAMES[:k], vols=(vol,) * k, divs=(q,) * k, corr=corr, rate=r)
    p = fp.Basket(assets=NAMES[:k], combine=combine, right=right, strike_level=strike,
                  expiry=EXPIRY, notional=100.0)
    res = fp.price(p, m, paths=4096, seed=82, control=False)
    ref = 100.0 * bsm(1.0, strike, 1.0, r, q, vol, right)  # BSM, written here
    # every asset follows the same path, so the basket is the one-asset option path by path
    assert within(res, ref), (res.price, res.stderr, ref)


@settings(max_examples=8, deadline=None, derandomize=True)
@given(vol=_VOL, q=_Q, r=_R, strike=_STRIKE, right=st.sampled_from(["call", "put"]),
       combine=st.sampled_from(["worst", "best", "average"]), spot=st.floats(20.0, 500.0))
def test_one_asset_basket_is_bsm(vol, q, r, strike, right, combine, spot):
    m = market(names=("ORMEL",), vols=(vol,), divs=(q,), corr=((1.0,),), rate=r,
               spots=(spot,))
    p = fp.Basket(assets=("ORMEL",), combine=combine, right=right, strike_level=strike,
                  expiry=EXPIRY, notional=250.0)
    # BSM on the performance, written here: 250 * BSM(1, strike_level)
    ref = 250.0 * bsm(1.0, strike, 1.0, r, q, vol, right)
    assert p.closed_form(m) == pytest.approx(ref, rel=1e-10, abs=1e-10)
    res = fp.price(p, m, paths=4096, seed=83, control=False)
    assert within(res, ref), (res.price, res.stderr, ref)


# --------------------------------------------------------------------------- 3. bad input
BASKET = """kind = "basket"
right = "call"
strike_level = 1.0
expiry = 2027-12-01
notional = 1000.0
"""


@pytest.mark.parametrize(("body", "words"), [
    ('assets = ["NORDA", "KELPA", "VIREO"]\ncombine = "average"\nweights = [0.5, 0.5]\n',
     "2 weights for 3 assets"),
    ('assets = ["NORDA", "KELPA", "VIREO"]\ncombine = "average"\nweights = [0.5, 0.3, 0.3]\n',
     "sum to 1"),
    ('assets = ["NORDA", "KELPA"]\ncombine = "worst"\nweights = [0.5, 0.5]\n',
     "average"),
    ('assets = ["NORDA", "KELPA"]\ncombine = "best"\nweights = [0.4, 0.6]\n',
     "average"),
])
def test_bad_weights(tmp_path, body, words):
    path = tmp_path / "basket.toml"
    path.write_text(BASKET + body)
    with pytest.raises(fp.InputError) as exc:
        fp.load_product(path)
    msg = str(exc.value)
    assert msg.startswith(f"{path}: weights: ") and words in msg and "\n" not in msg, msg


def test_asset_missing_from_the_correlation_block(tmp_path):
    m = fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE),
                  tuple(fp.Asset(n, 100.0, fp.VolCurve.flat(0.2), 0.0)
                        for n in ("NORDA", "KELPA", "ORMEL")),
                  correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, 0.5), (0.5, 1.0))))
    path = tmp_path / "basket.toml"
    path.write_text(BASKET + 'assets = ["NORDA", "KELPA", "ORMEL"]\ncombine = "worst"\n')
    p = fp.load_product(path)
    with pytest.raises(fp.InputError) as exc:
        fp.price(p, m, paths=1024, source=str(path))
    msg = str(exc.value)
    assert msg.startswith(f"{path}: assets: ") and "ORMEL" in msg, msg
    # the same basket without ORMEL prices
    ok = tmp_path / "ok.toml"
    ok.write_text(BASKET + 'assets = ["NORDA", "KELPA"]\ncombine = "worst"\n')
    assert fp.price(fp.load_product(ok), m, paths=1024, source=str(ok)).price > 0


def test_good_weights_are_used():
    # weights that sum to 1 are kept, and the equally weighted default is 1/n each
    p = fp.Basket(assets=NAMES, combine="average", right="call", strike_level=1.0,
                  expiry=EXPIRY, weights=(0.5, 0.3, 0.2))
    assert p.weights == (0.5, 0.3, 0.2)
    assert np.allclose(fp.Basket(assets=NAMES, combine="average", right="call",
                                 strike_level=1.0, expiry=EXPIRY).basket_weights, (1 / 3,) * 3)

"""Greeks against closed forms, with their standard errors.

References: Black-Scholes-Merton Greeks and the cash-or-nothing digital (fairpath.closed_form,
checked in tests/test_closed_form.py against sympy derivatives, QuantLib's analytic European
engine and Hull's worked Greek-letters example); Reiner-Rubinstein barrier prices
(closed_form.barrier_price, checked against QuantLib's AnalyticBarrierEngine); QuantLib's
AnalyticDiscreteGeometricAveragePriceAsianEngine. Each Monte Carlo Greek is compared within
4 standard errors plus the bump bias, which is computed exactly by applying the same finite
difference to the closed form (|closed-form difference - analytic Greek|).
"""

from __future__ import annotations

import json
from datetime import date, timedelta

import numpy as np
import pytest
import QuantLib as ql

import fairpath as fp
from fairpath import closed_form as cf
from fairpath.cli import main
from fairpath.greeks import RATE_BUMP, SPOT_BUMP, VOL_BUMP

VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
R, Q, VOL = 0.05, 0.02, 0.25


def market(spot=100.0, vol=VOL, rate=R, q=Q) -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate),
                     (fp.Asset("NORDA", spot, fp.VolCurve.flat(vol), q),
                      fp.Asset("KELPA", 50.0, fp.VolCurve.flat(0.3), 0.0)))


def fd_reference(price_fn, s=100.0, vol=VOL, rate=R, T=1.0):
    """The bumped differences the engine takes, applied to a closed-form price function."""
    h = SPOT_BUMP * s
    dt = 1 / 365
    return {
        "delta": (price_fn(s + h, vol, rate, T) - price_fn(s - h, vol, rate, T)) / (2 * h),
        "gamma": (price_fn(s + h, vol, rate, T) - 2 * price_fn(s, vol, rate, T)
                  + price_fn(s - h, vol, rate, T)) / h**2,
        "vega": (price_fn(s, vol + VOL_BUMP, rate, T) - price_fn(s, vol - VOL_BUMP, rate, T))
        / (2 * VOL_BUMP),
        "rho": (price_fn(s, vol, rate + RATE_BUMP, T) - price_fn(s, vol, rate - RATE_BUMP, T))
        / (2 * RATE_BUMP),
        "theta": (price_fn(s, vol, rate, T - dt) - price_fn(s, vol, rate, T + dt)) / (2 * dt),
    }


def greek_of(res, name):
    if name in ("rho", "theta"):
        return getattr(res, name)
    return getattr(res, name)["NORDA"]


def check(res, analytic, fd, names):
    for name in names:
        g = greek_of(res, name)
        bias = abs(fd[name] - analytic[name])
        assert abs(g.value - analytic[name]) <= 4 * g.stderr + bias + 1e-12, \
            (name, g.value, analytic[name], g.stderr, bias, g.method)


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
@pytest.mark.parametrize("method", ["bump", "auto"])
@pytest.mark.parametrize("right,strike", [("call", 100.0), ("put", 110.0), ("call", 85.0)])
def test_european_greeks_match_bsm(sampler, method, right, strike):
    m = market()
    T = m.time(EXPIRY)
    p = fp.European(asset="NORDA", right=right, strike=strike, expiry=EXPIRY)
    res = fp.greeks(p, m, paths=32768, sampler=sampler, seed=5, method=method,
                    cross_gamma=False)
    analytic = cf.bsm_greeks(100.0, strike, T, R, Q, VOL, right)
    fd = fd_reference(lambda s, v, r, t: cf.bsm_price(s, strike, t, r, Q, v, right), T=T)
    check(res, analytic, fd, ["delta", "gamma", "vega", "rho", "theta"])
    assert abs(res.price - analytic["price"]) <= 4 * res.stderr
    if method == "auto":
        assert res.delta["NORDA"].method == "pathwise" and res.vega["NORDA"].method == "pathwise"
    # KELPA is not used: omitted with a note, not an error
    assert "KELPA" not in res.delta and any("KELPA" in n for n in res.notes)


@pytest.mark.parametrize("right", ["call", "put"])
def test_digital_delta_and_gamma_match_closed_form(right):
    m = market()
    T = m.time(EXPIRY)
    p = fp.Digital(asset="NORDA", right=right, strike=100.0, expiry=EXPIRY, payout=10.0)
    res = fp.greeks(p, m, paths=65536, seed=7)
    analytic = cf.digital_greeks(100.0, 100.0, T, R, Q, VOL, right, payout=10.0)
    fd = fd_reference(lambda s, v, r, t: cf.digital_price(s, 100.0, t, r, Q, v, right,
                                                          payout=10.0), T=T)
    check(res, analytic, fd, ["delta", "gamma", "vega", "rho"])
    # theta is left out: a one-day move flips almost no Sobol point across the strike, so the
    # bumped estimate and its error bar both miss the flips (the result carries a note)
    assert any("jumps" in n for n in res.notes)


@pytest.mark.parametrize("spot", [86.0, 88.0, 95.0])
def test_barrier_delta_gamma_near_the_barrier(spot):
    # reference: the same central differences of the Reiner-Rubinstein price; the spots come
    # close to the barrier at 85 (the lowest bumped spot, 85.14, stays above it)
    m = market(spot=spot)
    T = m.time(EXPIRY)
    p = fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY, barrier=85.0,
                   direction="down", effect="out")
    res = fp.greeks(p, m, paths=32768, seed=9, cross_gamma=False)
    fd = fd_reference(lambda s, v, r, t: cf.barrier_price(s, 100.0, 85.0, t, r, Q, v, "call",
                                                          "down", "out"), s=spot, T=T)
    for name in ("delta", "gamma", "vega", "rho", "theta"):
        g = greek_of(res, name)
        assert abs(g.value - fd[name]) <= 4 * g.stderr + 1e-9, (name, g.value, fd[name])
        assert g.stderr < 0.05 * abs(fd[name]) + 1e-4  # stable near the barrier


def test_geometric_asian_delta_against_quantlib_bumped():
    # reference: QuantLib's AnalyticDiscreteGeometricAveragePriceAsianEngine, bumped +-1%
    fixings = tuple(VAL + timedelta(weeks=i + 1) for i in range(26))
    pay = fixings[-1]
    p = fp.Asian(asset="NORDA", right="call", strike=100.0, fixings=fixings, expiry=pay,
                 average="geometric")
    res = fp.greeks(p, market(), paths=32768, seed=11, cross_gamma=False)

    def ql_price(spot):
        today = ql.Date(VAL.day, VAL.month, VAL.year)
        ql.Settings.instance().evaluationDate = today
        dc = ql.Actual365Fixed()
        proc = ql.BlackScholesMertonProcess(
            ql.QuoteHandle(ql.SimpleQuote(spot)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, Q, dc)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, R, dc)),
            ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), VOL,
                                                               dc)))
        dates = [ql.Date(d.day, d.month, d.year) for d in fixings]
        opt = ql.DiscreteAveragingAsianOption(ql.Average.Geometric, 1.0, 0, dates,
                                              ql.PlainVanillaPayoff(ql.Option.Call, 100.0),
                                              ql.EuropeanExercise(dates[-1]))
        opt.setPricingEngine(ql.AnalyticDiscreteGeometricAveragePriceAsianEngine(proc))
        return opt.NPV()

    ref = (ql_price(101.0) - ql_price(99.0)) / 2.0
    g = res.delta["NORDA"]
    assert g.method == "pathwise"
    # pathwise is unbiased for the exact delta; the QuantLib difference has a bump bias of
    # order h^2 * d3V/dS3, far below the tolerance used here (4 stderr + 2e-4)
    assert abs(g.value - ref) <= 4 * g.stderr + 2e-4


def test_arithmetic_asian_pathwise_agrees_with_bump():
    fixings = tuple(VAL + timedelta(weeks=i + 1) for i in range(52))
    p = fp.Asian(asset="NORDA", right="put", strike=100.0, fixings=fixings, expiry=fixings[-1])
    pw = fp.greeks(p, market(), paths=32768, seed=13, method="pathwise", cross_gamma=False)
    bump = fp.greeks(p, market(), paths=32768, seed=13, method="bump", cross_gamma=False)
    for name in ("delta", "vega"):
        a, b = getattr(pw, name)["NORDA"], getattr(bump, name)["NORDA"]
        assert a.method == "pathwise" and b.method.startswith("bump")
        assert abs(a.value - b.value) <= 4 * np.hypot(a.stderr, b.stderr) + 1e-3 * abs(b.value)


def test_common_random_numbers_matter():
    # the bumped difference with shared numbers against two independent runs (different seeds)
    m = market()
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY)
    shared = fp.greeks(p, m, paths=16384, sampler="pseudo", seed=1, method="bump",
                       cross_gamma=False)
    up = fp.price(p, m.with_asset(fp.Asset("NORDA", 101.0, fp.VolCurve.flat(VOL), Q)),
                  paths=16384, sampler="pseudo", seed=2, control=False)
    dn = fp.price(p, m.with_asset(fp.Asset("NORDA", 99.0, fp.VolCurve.flat(VOL), Q)),
                  paths=16384, sampler="pseudo", seed=3, control=False)
    independent_se = np.hypot(up.stderr, dn.stderr) / 2.0
    assert shared.delta["NORDA"].stderr * 10 <= independent_se


def test_basket_has_cross_gammas_and_keeps_initial_levels_fixed():
    m = fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                  (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(VOL), Q),
                   fp.Asset("KELPA", 50.0, fp.VolCurve.flat(0.3), 0.0)),
                  correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, 0.5), (0.5, 1.0))))
    p = fp.Basket(assets=("NORDA", "KELPA"), combine="worst", right="put", strike_level=1.0,
                  expiry=EXPIRY, notional=100.0)
    res = fp.greeks(p, m, paths=16384, seed=17)
    # a put on the worst performance: more spot is worth less (initial levels fixed at today's)
    assert res.delta["NORDA"].value < 0 and res.delta["KELPA"].value < 0
    assert "NORDA/KELPA" in res.cross_gamma
    bump = fp.greeks(p, m, paths=16384, seed=17, method="bump")
    for n in ("NORDA", "KELPA"):
        a, b = res.delta[n], bump.delta[n]
        assert abs(a.value - b.value) <= 4 * np.hypot(a.stderr, b.stderr) + 2e-3 * abs(b.value)


def test_low_vol_is_bumped_relative_to_its_size_and_zero_vol_is_refused():
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY)
    low = fp.greeks(p, market(vol=0.005), paths=4096, seed=3, method="bump")
    assert "0.0025" in low.bumps["vol"]  # half of the 0.5% vol, not one full vol point
    with pytest.raises(fp.InputError, match="non-positive"):
        fp.greeks(p, market(vol=0.0), paths=1024)


def test_cli_greeks_json_contract(capsys):
    code = main(["greeks", "payoffs/european_call.toml", "--market", "markets/demo.toml",
                 "--paths", "8192", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0
    assert set(out["greeks"]) >= {"delta", "gamma", "vega", "rho", "theta"}
    assert set(out["greeks"]["delta"]["NORDA"]) >= {"value", "stderr"}
    assert set(out["greeks"]["rho"]) >= {"value", "stderr"}
    assert "price" in out


def test_cli_greeks_bad_method(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["greeks", "payoffs/european_call.toml", "--market", "markets/demo.toml",
              "--method", "magic"])
    assert exc.value.code == 2


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_digital_likelihood_ratio_delta_gamma(sampler):
    # reference: cash-or-nothing closed-form delta and gamma (Reiner & Rubinstein 1991); the
    # likelihood-ratio estimator is unbiased, so no bump allowance
    m = market()
    T = m.time(EXPIRY)
    p = fp.Digital(asset="NORDA", right="put", strike=95.0, expiry=EXPIRY, payout=10.0)
    res = fp.greeks(p, m, paths=32768, sampler=sampler, seed=19, method="lr")
    ref = cf.digital_greeks(100.0, 95.0, T, R, Q, VOL, "put", payout=10.0)
    for name in ("delta", "gamma"):
        g = res.delta["NORDA"] if name == "delta" else res.gamma["NORDA"]
        assert g.method.startswith("likelihood ratio")
        assert abs(g.value - ref[name]) <= 4 * g.stderr, (name, g.value, ref[name], g.stderr)
    auto = fp.greeks(p, m, paths=32768, sampler=sampler, seed=19, method="auto")
    bump = fp.greeks(p, m, paths=32768, sampler=sampler, seed=19, method="bump")
    # auto prefers the likelihood ratio unless it is more than 3x noisier than the bump
    lr_se, bump_se = res.gamma["NORDA"].stderr, bump.gamma["NORDA"].stderr
    expect = bump_se if (bump_se > 0 and lr_se > 3 * bump_se) else lr_se
    assert auto.gamma["NORDA"].stderr == expect


def one_asset_note() -> fp.Autocallable:
    """An 18-month single-asset note: semiannual calls at 100%, 4% coupons above 80%, 60%
    protection watched at maturity."""
    obs = (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1))
    return fp.Autocallable(assets=("NORDA",), observations=obs, notional=100.0,
                           autocall_level=1.0, coupon=0.04, coupon_barrier=0.8,
                           protection_barrier=0.6)


def test_likelihood_ratio_and_bumps_agree_on_a_note():
    # an autocallable (jumping payoff): the two delta estimators agree within their errors
    m = market()
    note = one_asset_note()
    lr = fp.greeks(note, m, paths=32768, sampler="pseudo", seed=23, method="lr")
    bump = fp.greeks(note, m, paths=32768, sampler="pseudo", seed=23, method="bump")
    a, b = lr.delta["NORDA"], bump.delta["NORDA"]
    assert abs(a.value - b.value) <= 4 * np.hypot(a.stderr, b.stderr) + 0.01 * abs(b.value)
    assert any("jumps" in n for n in lr.notes)


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_daily_barrier_likelihood_ratio_greeks_match_the_exact_quadrature(sampler):
    # reference: the exact price of the weekday-monitored barrier
    # (closed_form.discrete_barrier_quadrature, 8,001 points), differenced in the spot by
    # +-0.01 (central): deterministic, far finer than the Monte Carlo errors. The likelihood
    # ratio of the first (one-day) step is unbiased for a payoff that jumps, so no allowance
    from fairpath.dates import weekdays_between

    m = market()
    expiry = date(2027, 6, 1)
    b = fp.Barrier(asset="NORDA", right="call", strike=100.0, expiry=expiry, barrier=90.0,
                   direction="down", effect="out", monitoring="daily")
    times = [float(m.time(d)) for d in weekdays_between(m.valuation_date, expiry)]
    T = float(m.time(expiry))

    def exact(s: float) -> float:
        return float(cf.discrete_barrier_quadrature(s, 100.0, 90.0, times, T, R, Q, VOL,
                                                    "call", "down", "out", points=8001))

    h = 0.01
    ref = {"delta": (exact(100 + h) - exact(100 - h)) / (2 * h),
           "gamma": (exact(100 + h) - 2 * exact(100.0) + exact(100 - h)) / h ** 2}
    res = fp.greeks(b, m, paths=65536, sampler=sampler, seed=29, method="lr",
                    correlation=False, dividends=False)
    for name in ("delta", "gamma"):
        g = getattr(res, name)["NORDA"]
        assert g.method.startswith("likelihood ratio")
        assert abs(g.value - ref[name]) <= 4 * g.stderr, (name, g.value, ref[name], g.stderr)


def test_autocall_likelihood_ratio_delta_matches_a_fine_bump_reference():
    from fairpath import bumps
    from fairpath.engine import Settings, run

    # reference: a central bump of 0.5% of spot on common random numbers with 2,097,152
    # pseudo-random paths (its own error is a fifth of the estimate's below); the note jumps
    # at its triggers, so the likelihood ratio is the estimator under test
    m = market()
    note = one_asset_note()
    struck = note.struck(m)
    fine = run([struck], [bumps.spot(m, "NORDA", 1.005), bumps.spot(m, "NORDA", 0.995)],
               Settings(paths=1 << 21, sampler="pseudo", seed=7, control=False))
    two_h = 100.0 * 1.005 - 100.0 * 0.995
    ref, ref_se = fine.weighted(0)({0: 1.0 / two_h, 1: -1.0 / two_h})
    lr = fp.greeks(note, m, paths=65536, sampler="pseudo", seed=23, method="lr",
                   correlation=False, dividends=False).delta["NORDA"]
    assert lr.method.startswith("likelihood ratio")
    assert ref_se < 0.25 * lr.stderr
    assert abs(lr.value - ref) <= 4 * np.hypot(lr.stderr, ref_se), (lr, ref, ref_se)

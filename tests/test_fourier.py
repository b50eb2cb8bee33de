"""The semi-analytic Heston price (fairpath.fourier) against QuantLib.

Reference: QuantLib's ``AnalyticHestonEngine`` with adaptive Gauss-Lobatto integration at a
relative tolerance of 1e-13 (its default Gauss-Laguerre rule is itself off by up to 5e-8 at a
vol of vol of 1.0 and strong negative correlation). Parameter sets: a moderate one, two of the
demanding kind Andersen (2008) tests his scheme on (vol of vol near 1, correlation -0.9, Feller
condition violated, as we recall them: not his exact numbers), a common calibrated-looking set,
and a positive correlation; maturities from one week to ten years; strikes 40 to 200 on a spot
of 100; calls and puts. Agreement: 1e-8 relative, or 1e-11 of the spot where a price is that
small (a one-week strike-200 call is below 1e-30).
"""

from __future__ import annotations

import math

import pytest
import QuantLib as ql

from fairpath.closed_form import bsm_price
from fairpath.errors import InputError
from fairpath.fourier import heston_price

SETS = {
    "moderate": (0.04, 1.5, 0.04, 0.6, -0.7),
    "high vol of vol": (0.09, 0.5, 0.04, 1.0, -0.9),
    "Feller violated": (0.04, 0.3, 0.04, 0.9, -0.9),
    "calibrated-looking": (0.0175, 1.5768, 0.0398, 0.5751, -0.5711),
    "positive correlation": (0.04, 3.0, 0.09, 0.2, 0.3),
}
DAYS = (7, 30, 365, 1825, 3650)
STRIKES = (40.0, 70.0, 100.0, 130.0, 200.0)
R, Q, S = 0.03, 0.01, 100.0


def quantlib_heston(params, days: int, strike: float, right: str) -> float:
    v0, kappa, theta, sigma, rho = params
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    rts = ql.YieldTermStructureHandle(ql.FlatForward(today, R, dc))
    qts = ql.YieldTermStructureHandle(ql.FlatForward(today, Q, dc))
    process = ql.HestonProcess(rts, qts, ql.QuoteHandle(ql.SimpleQuote(S)), v0, kappa, theta,
                               sigma, rho)
    engine = ql.AnalyticHestonEngine(ql.HestonModel(process), 1e-13, 1_000_000)
    kind = ql.Option.Call if right == "call" else ql.Option.Put
    option = ql.VanillaOption(ql.PlainVanillaPayoff(kind, strike),
                              ql.EuropeanExercise(today + days))
    option.setPricingEngine(engine)
    return option.NPV()


@pytest.mark.parametrize("name", SETS)
def test_heston_fourier_price_matches_quantlib(name):
    params = SETS[name]
    for days in DAYS:
        T = days / 365.0
        for strike in STRIKES:
            for right in ("call", "put"):
                ref = quantlib_heston(params, days, strike, right)
                mine = heston_price(S, strike, T, R, Q, *params, right)
                assert abs(mine - ref) <= max(1e-8 * abs(ref), 1e-11 * S), \
                    (name, days, strike, right, mine, ref)


def test_heston_without_vol_of_vol_is_black_scholes():
    # reference: Black-Scholes-Merton (closed_form.bsm_price) at the root of the integrated
    # deterministic variance theta T + (v0 - theta)(1 - e^{-kappa T}) / kappa
    v0, kappa, theta, T = 0.09, 2.0, 0.04, 1.5
    w = theta * T + (v0 - theta) * (1 - math.exp(-kappa * T)) / kappa
    for strike in (80.0, 100.0, 125.0):
        ref = float(bsm_price(S, strike, T, R, Q, math.sqrt(w / T), "call"))
        assert heston_price(S, strike, T, R, Q, v0, kappa, theta, 0.0, -0.5) == \
            pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize("key, kwargs", [
    ("v0", {"v0": -0.01}), ("spot_vol_correlation", {"spot_vol_correlation": -1.2}),
    ("vol_of_vol", {"vol_of_vol": float("nan")}), ("T", {"T": 0.0}),
])
def test_bad_heston_parameters_are_refused_naming_the_key(key, kwargs):
    args = {"spot": S, "strike": 100.0, "T": 1.0, "r": R, "q": Q, "v0": 0.04, "kappa": 1.5,
            "theta": 0.04, "vol_of_vol": 0.6, "spot_vol_correlation": -0.7}
    args.update(kwargs)
    with pytest.raises(InputError) as err:
        heston_price(**args)
    assert err.value.key == key

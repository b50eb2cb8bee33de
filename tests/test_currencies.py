"""Other currencies: exchange rates as underlyings, foreign assets under the reporting
currency's measure (the quanto drift), quanto and converted settlement.

References, named at each check:
* Haug (2007), "The Complete Guide to Option Pricing Formulas", section 5.16: the quanto call
  (S 100, K 105, half a year, domestic rate 8%, foreign 5%, dividend yield 4%, vol 20%,
  exchange-rate vol 10%, correlation 0.3, fixed rate 1.5): 5.3280 (from memory);
* QuantLib's QuantoEuropeanEngine on the same dates (the QuantoTermStructure drift);
* a converted call is today's exchange rate times the foreign Black-Scholes-Merton price
  (QuantLib's AnalyticEuropeanEngine on the foreign curve), whatever the exchange rate's vol
  and correlation;
* an option on the exchange rate: Garman and Kohlhagen (1983) (QuantLib's
  GarmanKohlagenProcess with its analytic engine);
* under Heston, with no quanto correlation: Heston's (1993) semi-analytic price in the
  asset's own currency (QuantLib's AnalyticHestonEngine), rediscounted; with one: the change
  of numeraire written out in the test (a simulation under the asset's own currency's measure,
  weighted by the density of the reporting currency's, Geman, El Karoui and Rochet 1995).
"""

from __future__ import annotations

import dataclasses
import math
from datetime import date

import numpy as np
import pytest
import QuantLib as ql

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath import closed_form as cf
from fairpath.products import product_from_dict
from qltools import evaluation_date

VAL = date(2026, 12, 1)
EXPIRY = date(2027, 6, 1)
_TODAY = ql.Date(1, 12, 2026)
_DC = ql.Actual365Fixed()

MARKET = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
rate = 0.08
[curves.USD]
rate = 0.05
[fx.USD]
spot = 0.92
vol = 0.10
[assets.SPRUCE]
currency = "USD"
spot = 100.0
vol = 0.20
dividend_yield = 0.04
[correlation]
assets = ["SPRUCE", "USD"]
matrix = [[1.0, RHO], [RHO, 1.0]]
"""


@pytest.fixture(autouse=True, scope="module")
def _ql_evaluation_date():
    with evaluation_date(_TODAY):
        yield


def market(tmp_path, rho=0.3, text=MARKET) -> fp.Market:
    path = tmp_path / f"fx_{rho}.toml"
    path.write_text(text.replace("RHO", repr(rho)))
    return fp.load_market(path)


def _flat(r):
    return ql.YieldTermStructureHandle(ql.FlatForward(_TODAY, r, _DC))


def _vol(v):
    return ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_TODAY, ql.NullCalendar(), v, _DC))


def call(asset, strike, **extra) -> dict:
    return {"kind": "european", "asset": asset, "right": "call", "strike": strike,
            "expiry": EXPIRY, **extra}


def test_haug_quanto_call_closed_form():
    # Haug (2007) section 5.16, from memory: 5.3280 at exactly half a year
    assert cf.quanto_price(100, 105, 0.5, 0.08, 0.05, 0.04, 0.2, 0.1, 0.3, "call", 1.5) == \
        pytest.approx(5.3280, abs=5e-5)


def test_quanto_call_against_quantlib_and_the_closed_form(tmp_path):
    proc = ql.BlackScholesMertonProcess(ql.QuoteHandle(ql.SimpleQuote(100.0)), _flat(0.04),
                                        _flat(0.08), _vol(0.2))
    opt = ql.QuantoVanillaOption(ql.PlainVanillaPayoff(ql.Option.Call, 105.0),
                                 ql.EuropeanExercise(ql.Date(1, 6, 2027)))
    opt.setPricingEngine(ql.QuantoEuropeanEngine(proc, _flat(0.05), _vol(0.1),
                                                 ql.QuoteHandle(ql.SimpleQuote(0.3))))
    ref = 1.5 * opt.NPV()  # QuantLib QuantoEuropeanEngine, times the fixed rate
    m = market(tmp_path)
    t = m.time(EXPIRY)
    closed = cf.quanto_price(100, 105, t, 0.08, 0.05, 0.04, 0.2, 0.1, 0.3, "call", 1.5)
    assert closed == pytest.approx(ref, rel=1e-10)
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="quanto",
                                          quanto_rate=1.5)), m, seed=1)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


@pytest.mark.parametrize("rho", [0.3, -0.6])
def test_converted_call_is_the_rate_times_the_foreign_price(tmp_path, rho):
    proc = ql.BlackScholesMertonProcess(ql.QuoteHandle(ql.SimpleQuote(100.0)), _flat(0.04),
                                        _flat(0.05), _vol(0.2))
    opt = ql.EuropeanOption(ql.PlainVanillaPayoff(ql.Option.Call, 105.0),
                            ql.EuropeanExercise(ql.Date(1, 6, 2027)))
    opt.setPricingEngine(ql.AnalyticEuropeanEngine(proc))
    ref = 0.92 * opt.NPV()  # today's rate x the USD Black-Scholes-Merton price (QuantLib)
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="converted")),
                   market(tmp_path, rho), seed=2)
    assert abs(res.price - ref) <= 4 * res.stderr, (rho, res.price, res.stderr, ref)
    assert any("converted" in n for n in res.notes)


def test_option_on_the_exchange_rate_is_garman_kohlhagen(tmp_path):
    proc = ql.GarmanKohlagenProcess(ql.QuoteHandle(ql.SimpleQuote(0.92)), _flat(0.05),
                                    _flat(0.08), _vol(0.10))
    opt = ql.EuropeanOption(ql.PlainVanillaPayoff(ql.Option.Call, 0.9),
                            ql.EuropeanExercise(ql.Date(1, 6, 2027)))
    opt.setPricingEngine(ql.AnalyticEuropeanEngine(proc))
    ref = 1000 * opt.NPV()  # Garman and Kohlhagen (QuantLib)
    res = fp.price(product_from_dict(call("USD", 0.9, quantity=1000.0)), market(tmp_path),
                   seed=3)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


FLAT_SURFACE = MARKET.replace("vol = 0.20\ndividend_yield = 0.04\n", """dividend_yield = 0.04
[assets.SPRUCE.vol_surface]
tenors = ["3M", "6M", "1Y"]
strikes = [0.6, 0.8, 1.0, 1.2, 1.5]
vols = [[0.2, 0.2, 0.2, 0.2, 0.2], [0.2, 0.2, 0.2, 0.2, 0.2], [0.2, 0.2, 0.2, 0.2, 0.2]]
""", 1)


def test_local_vol_quanto_on_a_flat_surface_is_the_closed_form(tmp_path):
    # on a flat surface the local vol is the flat vol: the quanto drift with the local vol is
    # Haug's, and the log-Euler steps are exact (closed form: Haug 2007, 5.16)
    m = market(tmp_path, text=FLAT_SURFACE)
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="quanto",
                                          quanto_rate=1.5)), m, seed=4)
    assert any("local volatility" in n for n in res.notes)
    ref = cf.quanto_price(100, 105, m.time(EXPIRY), 0.08, 0.05, 0.04, 0.2, 0.1, 0.3, "call",
                          1.5)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


SMILE = MARKET.replace("vol = 0.20\ndividend_yield = 0.04\n", """dividend_yield = 0.04
[assets.SPRUCE.vol_surface]
tenors = ["3M", "6M", "1Y"]
strikes = [0.6, 0.8, 1.0, 1.2, 1.5]
vols = [[0.34, 0.27, 0.21, 0.18, 0.19], [0.32, 0.26, 0.21, 0.185, 0.19],
        [0.30, 0.25, 0.21, 0.19, 0.19]]
""", 1)


def test_local_vol_quanto_without_correlation_is_the_foreign_price_rediscounted(tmp_path):
    # with no quanto correlation the asset drifts as in its own currency: the quanto call is
    # its price in a market whose reporting currency is USD, discounted at the EUR rate
    # instead of the USD one (same surface, same paths: local vol both times)
    m = market(tmp_path, 0.0, SMILE)
    res = fp.price(product_from_dict(call("SPRUCE", 100.0, settlement="quanto")), m, seed=5)
    usd = """valuation_date = 2026-12-01
currency = "USD"
[discount]
rate = 0.05
[assets.SPRUCE]
spot = 100.0
dividend_yield = 0.04
[assets.SPRUCE.vol_surface]
""" + SMILE.split("[assets.SPRUCE.vol_surface]\n")[1].split("[correlation]")[0]
    own = fp.price(product_from_dict(call("SPRUCE", 100.0)), market(tmp_path, 0.0, usd), seed=5)
    t = m.time(EXPIRY)
    ref = own.price * math.exp(-(0.08 - 0.05) * t)
    assert abs(res.price - ref) <= 4 * math.hypot(res.stderr, own.stderr), (res.price, ref)


#: SPRUCE's variance process (vol of vol ``{xi}``) for the Heston and LSV checks
VARIANCE = """[assets.SPRUCE.heston]
v0 = 0.04
kappa = 1.5
theta = 0.04
vol_of_vol = {xi}
spot_vol_correlation = -0.7
"""
HESTON = MARKET.replace("vol = 0.20\ndividend_yield = 0.04\n", 'model = "heston"\n'
                        "dividend_yield = 0.04\n" + VARIANCE.format(xi="XI"), 1)


def heston_market(tmp_path, xi, rho):
    return market(tmp_path, rho, HESTON.replace("XI", repr(xi)))


def test_heston_quanto_with_a_deterministic_variance_is_the_closed_form(tmp_path):
    # vol of vol 0 and v0 = theta = 0.04: a constant 20% vol, so the quanto drift with the
    # instantaneous vol is Haug's (2007, 5.16)
    m = heston_market(tmp_path, 0.0, 0.3)
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="quanto",
                                          quanto_rate=1.5)), m, seed=11)
    assert any("Heston" in n for n in res.notes)
    assert not any("Fourier" in n for n in res.notes)  # no control on its own-currency price
    ref = cf.quanto_price(100, 105, m.time(EXPIRY), 0.08, 0.05, 0.04, 0.2, 0.1, 0.3, "call",
                          1.5)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


def _ql_heston_usd(strike: float) -> float:
    """QuantLib's AnalyticHestonEngine on the USD curve (Heston 1993)."""
    proc = ql.HestonProcess(_flat(0.05), _flat(0.04), ql.QuoteHandle(ql.SimpleQuote(100.0)),
                            0.04, 1.5, 0.04, 0.8, -0.7)
    opt = ql.EuropeanOption(ql.PlainVanillaPayoff(ql.Option.Call, strike),
                            ql.EuropeanExercise(ql.Date(1, 6, 2027)))
    opt.setPricingEngine(ql.AnalyticHestonEngine(ql.HestonModel(proc)))
    return opt.NPV()


def test_heston_quanto_without_correlation_is_the_own_currency_price_rediscounted(tmp_path):
    # no quanto correlation: the share and its variance drift as in USD; the quanto call pays
    # in EUR, so it is the USD price discounted at the EUR rate instead of the USD one
    m = heston_market(tmp_path, 0.8, 0.0)
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="quanto")), m, seed=12)
    ref = _ql_heston_usd(105.0) * math.exp(-(0.08 - 0.05) * m.time(EXPIRY))
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


def _numeraire_change(rho: float, t: float, paths=200_000, steps=250, seed=7):
    """``(quanto call at rho) - (at 0)`` and its standard error, by the change of numeraire:
    full-truncation Euler paths of the USD-measure Heston model (v0 0.04, kappa 1.5, theta
    0.04, vol of vol 0.8, spot-vol correlation -0.7), each weighted by the EUR measure's
    density. With ``Y = 1/X`` (USD per EUR), ``dQ_EUR/dQ_USD = exp(sigma_X W_Y(T) -
    sigma_X^2 T / 2)``; ``W_Y = -rho W_S + sqrt(1 - rho^2) W_perp`` and integrating the
    independent ``W_perp`` out leaves ``exp(-rho sigma_X W_S(T) - rho^2 sigma_X^2 T / 2)``.
    Nothing of the model's quanto drift is used: the share's and its variance's drifts under
    EUR come out of the weight."""
    rng = np.random.default_rng(seed)
    dt = t / steps
    x, v, w = np.full(paths, math.log(100.0)), np.full(paths, 0.04), np.zeros(paths)
    for _ in range(steps):
        z1, z2 = rng.standard_normal(paths), rng.standard_normal(paths)
        vp = np.maximum(v, 0.0)
        sq = np.sqrt(vp * dt)
        x += (0.05 - 0.04 - 0.5 * vp) * dt + sq * z1
        v += 1.5 * (0.04 - vp) * dt + 0.8 * sq * (-0.7 * z1 + math.sqrt(1 - 0.49) * z2)
        w += math.sqrt(dt) * z1
    pay = math.exp(-0.08 * t) * np.maximum(np.exp(x) - 105.0, 0.0)
    d = pay * (np.exp(-rho * 0.10 * w - 0.5 * (rho * 0.10) ** 2 * t) - 1.0)
    return d.mean(), d.std() / math.sqrt(paths)


@pytest.mark.parametrize("rho", [0.5, -0.5])
def test_heston_quanto_drift_is_the_change_of_numeraire(tmp_path, rho):
    # the quanto correlation's effect on the call, against the reference above: a positive
    # correlation lowers the share's drift (-rho sigma_X sqrt(v)) and, through the spot-vol
    # correlation, raises its variance's (+0.7 rho sigma_X vol_of_vol sqrt(v))
    c = product_from_dict(call("SPRUCE", 105.0, settlement="quanto"))
    m = heston_market(tmp_path, 0.8, 0.0)
    base = fp.price(c, m, seed=13, paths=1 << 17)
    moved = fp.price(c, heston_market(tmp_path, 0.8, rho), seed=13, paths=1 << 17)
    ref, ref_se = _numeraire_change(rho, m.time(EXPIRY))
    diff = moved.price - base.price
    assert np.sign(diff) == -np.sign(rho)
    assert abs(diff - ref) <= 4 * math.hypot(base.stderr, moved.stderr, ref_se), (diff, ref)


LSV = FLAT_SURFACE.replace("dividend_yield = 0.04\n", 'model = "lsv"\ndividend_yield = 0.04\n'
                           + VARIANCE.format(xi=0.8) + "mixing = MIXING\n", 1)


def test_lsv_quanto_without_vol_of_vol_is_the_closed_form(tmp_path):
    # mixing 0: LSV is local vol, here on a flat 20% surface, so the quanto drift with the
    # leverage times the variance's root is Haug's (2007, 5.16)
    m = market(tmp_path, 0.3, LSV.replace("MIXING", "0.0"))
    res = fp.price(product_from_dict(call("SPRUCE", 105.0, settlement="quanto",
                                          quanto_rate=1.5)), m, seed=14)
    assert any("local-stochastic" in n for n in res.notes)
    ref = cf.quanto_price(100, 105, m.time(EXPIRY), 0.08, 0.05, 0.04, 0.2, 0.1, 0.3, "call",
                          1.5)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)


def test_lsv_quanto_without_correlation_is_the_foreign_price_rediscounted(tmp_path):
    # mixing 0.7, no quanto correlation: the same leverage (calibrated on the USD surface) and
    # the same paths as in a market whose reporting currency is USD, discounted at the EUR
    # rate instead; with a correlation of 0.5 the call is worth less (lower drift)
    text = LSV.replace("MIXING", "0.7")
    c = product_from_dict(call("SPRUCE", 100.0, settlement="quanto"))
    m = market(tmp_path, 0.0, text)
    res = fp.price(c, m, seed=15)
    usd = """valuation_date = 2026-12-01
currency = "USD"
[discount]
rate = 0.05
[assets.SPRUCE]
""" + text.split("[assets.SPRUCE]\n")[1].split("[correlation]")[0].replace(
        'currency = "USD"\n', "")
    own = fp.price(product_from_dict(call("SPRUCE", 100.0)), market(tmp_path, 0.0, usd),
                   seed=15)
    ref = own.price * math.exp(-(0.08 - 0.05) * m.time(EXPIRY))
    assert abs(res.price - ref) <= 4 * math.hypot(res.stderr, own.stderr), (res.price, ref)
    moved = fp.price(c, market(tmp_path, 0.5, text), seed=15)
    assert moved.price < res.price - 4 * math.hypot(res.stderr, moved.stderr)


def worst_of(assets) -> dict:
    return {"kind": "autocallable", "assets": assets, "notional": 1000.0,
            "observations": {"first": date(2027, 6, 1), "every": "6M", "count": 4},
            "autocall_level": 1.0, "coupon": 0.05, "coupon_barrier": 0.7,
            "protection_barrier": 0.6, "protection_monitoring": "daily"}


NOTE_MARKET = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
rate = 0.03
[curves.USD]
rate = 0.045
[fx.USD]
spot = 0.92
vol = 0.09
[assets.NORDA]
spot = 60.0
vol = 0.25
dividend_yield = 0.02
[assets.SPRUCE]
currency = "USD"
spot = 50.0
vol = 0.30
dividend_yield = 0.01
[correlation]
assets = ["NORDA", "SPRUCE", "USD"]
matrix = [[1.0, 0.5, 0.0], [0.5, 1.0, RHO], [0.0, RHO, 1.0]]
"""


def test_quanto_note_with_zero_correlation_is_the_note_on_domestic_shares(tmp_path):
    # the foreign share drifts at its own curve's rate: a domestic share whose dividend yield
    # is raised by the rate gap (r_EUR - r_USD) has the same forward and the same paths
    m = market(tmp_path, 0.0, NOTE_MARKET)
    res = fp.price(product_from_dict(worst_of(["NORDA", "SPRUCE"])), m, seed=6)
    # q' = q + r_EUR - r_USD = 0.01 + 0.03 - 0.045
    dom = NOTE_MARKET.replace('currency = "USD"\nspot = 50.0', "spot = 50.0").replace(
        "dividend_yield = 0.01", "dividend_yield = -0.005")
    ref = fp.price(product_from_dict(worst_of(["NORDA", "SPRUCE"])),
                   market(tmp_path, 0.0, dom), seed=6)
    assert res.price == pytest.approx(ref.price, rel=1e-9), (res.price, ref.price)


def test_quanto_note_falls_as_the_quanto_correlation_rises(tmp_path):
    # a positive correlation lowers the foreign share's drift (-rho sigma sigma_X): the note,
    # long the worst share, is worth less; on common random numbers the order is certain
    prices = [fp.price(product_from_dict(worst_of(["NORDA", "SPRUCE"])),
                       market(tmp_path, rho, NOTE_MARKET), seed=7).price
              for rho in (-0.5, 0.0, 0.5)]
    assert prices[0] > prices[1] > prices[2], prices


def test_quanto_forward_is_the_drift_in_the_model_layer(tmp_path):
    m = market(tmp_path)
    t = m.time(EXPIRY)
    # F = S e^{(r_USD - q - rho sigma sigma_X) t}
    assert m.forward("SPRUCE", t) == pytest.approx(
        100 * math.exp((0.05 - 0.04 - 0.3 * 0.2 * 0.1) * t), rel=1e-12)
    assert m.forward("USD", t) == pytest.approx(0.92 * math.exp((0.08 - 0.05) * t), rel=1e-12)
    assert dataclasses.replace(m).foreign("SPRUCE") == "USD" and m.foreign("USD") is None


BAD_MARKET = {
    "asset currency without curve": (
        MARKET.replace("[curves.USD]\nrate = 0.05\n[fx.USD]\nspot = 0.92\nvol = 0.10\n", ""),
        ("assets.SPRUCE.currency", "[curves.USD]")),
    "fx without curve": (MARKET.replace("[curves.USD]\nrate = 0.05\n", ""),
                         ("fx.USD", "[curves.USD]")),
    "curve without fx": (MARKET.replace("[fx.USD]\nspot = 0.92\nvol = 0.10\n", "").replace(
        'currency = "USD"\n', ""), ("curves.USD", "[fx.USD]")),
    "rate typed as a percentage": (MARKET.replace("rate = 0.05", "rate = 4.5"),
                                   ("curves.USD.rate", "percentage")),
    "fx vol of 8": (MARKET.replace("vol = 0.10", "vol = 8"), ("fx.USD.vol", "percentage")),
    "fx spot missing": (MARKET.replace("spot = 0.92\n", ""), ("fx.USD.spot",)),
    "reporting currency curve": (MARKET.replace("[curves.USD]", "[curves.EUR]\nrate = 0.01\n"
                                                "[curves.USD]"), ("curves.EUR", "[discount]")),
    "matrix not psd": (MARKET.replace("RHO", "1.2"), ("correlation",)),
}


@pytest.mark.parametrize("case", sorted(BAD_MARKET))
def test_bad_currency_market_is_one_line_exit_2(case, tmp_path, capsys):
    text, fragments = BAD_MARKET[case]
    (tmp_path / "m.toml").write_text(text.replace("RHO", "0.3"))
    (tmp_path / "p.toml").write_text('kind = "european"\nasset = "SPRUCE"\nright = "call"\n'
                                     'strike = 100.0\nexpiry = 2027-06-01\n'
                                     'settlement = "quanto"\n')
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, *fragments)


BAD_PRODUCT = {
    "foreign asset without settlement": ("", ("settlement", "quanto", "converted")),
    "unknown settlement": ('settlement = "cash"\n', ("settlement",)),
    "quanto rate without quanto": ('settlement = "converted"\nquanto_rate = 1.5\n',
                                   ("quanto_rate",)),
    "non-positive quanto rate": ('settlement = "quanto"\nquanto_rate = 0\n', ("quanto_rate",)),
}


@pytest.mark.parametrize("case", sorted(BAD_PRODUCT))
def test_bad_settlement_is_one_line_exit_2(case, tmp_path, capsys):
    extra, fragments = BAD_PRODUCT[case]
    (tmp_path / "m.toml").write_text(MARKET.replace("RHO", "0.3"))
    (tmp_path / "p.toml").write_text('kind = "european"\nasset = "SPRUCE"\nright = "call"\n'
                                     "strike = 100.0\nexpiry = 2027-06-01\n" + extra)
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, *fragments)


def test_settlement_on_a_note_or_a_domestic_asset_is_refused(tmp_path, capsys):
    (tmp_path / "m.toml").write_text(NOTE_MARKET.replace("RHO", "0.3"))
    (tmp_path / "p.toml").write_text(
        'kind = "autocallable"\nassets = ["NORDA", "SPRUCE"]\nnotional = 1000.0\n'
        'observations = { first = 2027-06-01, every = "6M", count = 2 }\n'
        'autocall_level = 1.0\ncoupon = 0.05\ncoupon_barrier = 0.7\n'
        'protection_barrier = 0.6\nsettlement = "quanto"\n')
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, "settlement", "quanto by construction")
    (tmp_path / "q.toml").write_text('kind = "european"\nasset = "NORDA"\nright = "call"\n'
                                     'strike = 60.0\nexpiry = 2027-06-01\n'
                                     'settlement = "quanto"\n')
    code, out, err = run(["price", tmp_path / "q.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, "settlement", "quoted in EUR")


def test_greeks_name_the_exchange_rate(tmp_path):
    # quanto call: the exchange rate is not simulated, but its vol and its correlation with
    # the share move the drift; against finite differences of Haug's closed form (5.16)
    m = market(tmp_path)
    t = m.time(EXPIRY)
    g = fp.greeks(product_from_dict(call("SPRUCE", 105.0, settlement="quanto")), m,
                  paths=16384, seed=8, dividends=False)

    def closed(sfx=0.1, rho=0.3, rf=0.05):
        return cf.quanto_price(100, 105, t, 0.08, rf, 0.04, 0.2, sfx, rho, "call")

    h = 1e-5
    for greek, ref in ((g.vega["USD"], (closed(sfx=0.1 + h) - closed(sfx=0.1 - h)) / (2 * h)),
                       (g.correlation["SPRUCE/USD"],
                        (closed(rho=0.3 + h) - closed(rho=0.3 - h)) / (2 * h)),
                       (g.rho_curves["USD"],
                        (closed(rf=0.05 + h) - closed(rf=0.05 - h)) / (2 * h))):
        assert abs(greek.value - ref) <= 4 * greek.stderr + 1e-3 * abs(ref), (greek, ref)
    assert "USD" not in g.delta  # a quanto payoff does not move with the rate's level
    # converted call: V = X x (the USD price), so delta to the rate is the USD price, and the
    # EUR curve and the correlation do not matter (QuantLib's analytic European on USD)
    c = fp.greeks(product_from_dict(call("SPRUCE", 105.0, settlement="converted")), m,
                  seed=8)
    proc = ql.BlackScholesMertonProcess(ql.QuoteHandle(ql.SimpleQuote(100.0)), _flat(0.04),
                                        _flat(0.05), _vol(0.2))
    opt = ql.EuropeanOption(ql.PlainVanillaPayoff(ql.Option.Call, 105.0),
                            ql.EuropeanExercise(ql.Date(1, 6, 2027)))
    opt.setPricingEngine(ql.AnalyticEuropeanEngine(proc))
    assert abs(c.delta["USD"].value - opt.NPV()) <= 4 * c.delta["USD"].stderr + 1e-4
    assert abs(c.rho.value) < 1e-6 and not c.correlation["SPRUCE/USD"].significant
    assert "USD" not in c.dividend
    assert set(c.to_dict()["greeks"]["rho_curves"]) == {"USD"}

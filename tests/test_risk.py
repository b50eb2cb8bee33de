"""The risk a desk reports: correlation, dividend and bucketed vega sensitivities, desk units,
and bumps that rebuild what depends on them (checked against re-loading a bumped market file).

References, named at each check: Stulz's two-asset minimum option (QuantLib's StulzEngine,
QuantLib 1.44), the bivariate normal density (the derivative of the bivariate normal CDF in its
correlation, Plackett's identity), the Black-Scholes-Merton closed form
(fairpath.closed_form.bsm_price, checked against QuantLib in test_closed_form.py). Monte Carlo
checks: |MC - reference| <= 4 standard errors at a fixed seed.
"""

from __future__ import annotations

import math
import re
from datetime import date
from pathlib import Path

import numpy as np
import pytest
import QuantLib as ql

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath import bumps
from fairpath import closed_form as cf
from fairpath.products.loader import product_from_dict

ROOT = Path(__file__).resolve().parents[1]
SMILE = ROOT / "markets" / "demo_smile.toml"
VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
R, Q1, Q2, V1, V2 = 0.03, 0.02, 0.01, 0.25, 0.30


def two_assets(rho: float, s1=100.0, s2=100.0) -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (fp.Asset("NORDA", s1, fp.VolCurve.flat(V1), Q1),
                      fp.Asset("KELPA", s2, fp.VolCurve.flat(V2), Q2)),
                     correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, rho), (rho, 1.0))))


def _stulz_min_call(rho: float, strike: float) -> float:
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()

    def proc(spot, q, vol):
        return ql.BlackScholesMertonProcess(
            ql.QuoteHandle(ql.SimpleQuote(spot)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, q, dc)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, R, dc)),
            ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol,
                                                               dc)))
    opt = ql.BasketOption(ql.MinBasketPayoff(ql.PlainVanillaPayoff(ql.Option.Call, strike)),
                          ql.EuropeanExercise(ql.Date(1, 12, 2027)))
    opt.setPricingEngine(ql.StulzEngine(proc(100.0, Q1, V1), proc(100.0, Q2, V2), rho))
    return opt.NPV()


# ---------------------------------------------------------------------------------------------
# Correlation
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("rho", [-0.3, 0.5])
def test_correlation_sensitivity_of_a_worst_of_call_against_stulz(rho):
    # reference: QuantLib's StulzEngine (Stulz 1982), central difference in rho of +-0.01 (the
    # bump fairpath uses, so the two share the same O(h^2) difference)
    m = two_assets(rho)
    basket = fp.Basket(assets=("NORDA", "KELPA"), combine="worst", right="call",
                       strike_level=0.95, expiry=EXPIRY, notional=100.0)
    g = fp.greeks(basket, m, paths=65536, seed=5, method="bump")
    ref = (_stulz_min_call(rho + 0.01, 95.0) - _stulz_min_call(rho - 0.01, 95.0)) / 0.02
    got = g.correlation["NORDA/KELPA"]
    assert abs(got.value - ref) <= 4 * got.stderr, (got, ref)
    assert "all" not in g.correlation  # one pair: no separate all-pairs shift
    assert g.to_dict()["correlation"]["NORDA/KELPA"]["value"] == got.value


def test_correlation_sensitivity_of_a_worst_of_digital_is_the_bivariate_density():
    # reference: d/drho Phi2(a, b; rho) = phi2(a, b; rho), the bivariate normal density
    # (Plackett's identity); the digital pays 1 when both assets end above their strikes
    rho = 0.4
    m = two_assets(rho)
    k1, k2 = 100.0, 95.0
    digital = product_from_dict({
        "kind": "formula", "name": "both above", "assets": ["NORDA", "KELPA"],
        "dates": {"dates": [EXPIRY]}, "pay_date": EXPIRY,
        "expression": f"where(NORDA[0] > {k1} and KELPA[0] > {k2}, 1, 0)"})
    g = fp.greeks(digital, m, paths=1 << 18, sampler="pseudo", seed=3, method="bump",
                  cross_gamma=False)
    t = 1.0
    a = (math.log(100.0 / k1) + (R - Q1 - 0.5 * V1**2) * t) / (V1 * math.sqrt(t))
    b = (math.log(100.0 / k2) + (R - Q2 - 0.5 * V2**2) * t) / (V2 * math.sqrt(t))
    dens = math.exp(-(a * a - 2 * rho * a * b + b * b) / (2 * (1 - rho * rho))) / (
        2 * math.pi * math.sqrt(1 - rho * rho))
    ref = math.exp(-R * t) * dens
    got = g.correlation["NORDA/KELPA"]
    assert abs(got.value - ref) <= 4 * got.stderr, (got, ref)


def test_a_correlation_bump_that_breaks_the_matrix_is_skipped_and_said():
    # with NORDA/KELPA at 0.99 and KELPA/VIREO at -0.99, NORDA/VIREO must lie in
    # [-1, -0.9602] (rho12 rho23 +- sqrt((1 - rho12^2)(1 - rho23^2))): -0.965 + 0.01 breaks PSD
    m = fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                  tuple(fp.Asset(n, 100.0, fp.VolCurve.flat(0.2)) for n in
                        ("NORDA", "KELPA", "VIREO")),
                  correlation=fp.Correlation(("NORDA", "KELPA", "VIREO"),
                                             ((1.0, 0.99, -0.965), (0.99, 1.0, -0.99),
                                              (-0.965, -0.99, 1.0))))
    with pytest.raises(fp.InputError, match="smallest eigenvalue"):
        bumps.correlation(m, [("NORDA", "VIREO")], 0.01)
    basket = fp.Basket(assets=("NORDA", "KELPA", "VIREO"), combine="worst", right="put",
                       strike_level=1.0, expiry=EXPIRY)
    g = fp.greeks(basket, m, paths=1024, seed=1, method="bump", cross_gamma=False)
    assert "NORDA/VIREO" not in g.correlation
    assert any("skipped" in n and "NORDA/VIREO" in n and "smallest eigenvalue" in n
               for n in g.notes), g.notes


# ---------------------------------------------------------------------------------------------
# Dividends
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("right", ["call", "put"])
def test_dividend_sensitivity_of_a_european_against_bsm(right):
    # reference: Black-Scholes-Merton, central difference in q of +-1bp (fairpath's bump)
    m = two_assets(0.0)
    opt = fp.European(asset="NORDA", right=right, strike=105.0, expiry=EXPIRY)
    g = fp.greeks(opt, m, paths=65536, seed=2, method="bump")
    ref = (cf.bsm_price(100.0, 105.0, 1.0, R, Q1 + 1e-4, V1, right)
           - cf.bsm_price(100.0, 105.0, 1.0, R, Q1 - 1e-4, V1, right)) / 2e-4
    got = g.dividend["NORDA"]
    assert abs(got.value - ref) <= 4 * got.stderr + 1e-6 * abs(ref), (got, ref)
    assert g.cash_dividend == {}


def test_cash_dividend_sensitivity_matches_reloaded_amounts(tmp_path):
    # reference: the same product priced on market files whose announced amounts are 1%
    # higher and lower (re-loaded, same seed): the engine's bump is that difference
    market = fp.load_market(SMILE)
    put = fp.European(asset="NORDA", right="put", strike=80.0, expiry=EXPIRY)
    g = fp.greeks(put, market, paths=4096, seed=4, method="bump", cross_gamma=False)
    prices = []
    for f in (1.01, 0.99):
        text = re.sub(r"amount = ([0-9.]+)",
                      lambda mt, f=f: f"amount = {float(mt[1]) * f!r}", SMILE.read_text())
        path = tmp_path / f"m{f}.toml"
        path.write_text(text)
        prices.append(fp.price(put, fp.load_market(path), paths=4096, seed=4,
                               control=False).price)
    ref = (prices[0] - prices[1]) / 0.02
    assert g.cash_dividend["NORDA"].value == pytest.approx(ref, rel=1e-9, abs=1e-9)


# ---------------------------------------------------------------------------------------------
# Vega by bucket
# ---------------------------------------------------------------------------------------------
def test_bucketed_vega_on_a_term_structure():
    # a European expiring on the 1Y pillar: its variance is vol_1Y^2 x 1 (piecewise-flat
    # forward variance), so later pillars carry nothing and the buckets add up to the parallel
    # vega (reference: the parallel bump on the same random numbers)
    m = fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                  (fp.Asset("KELPA", 50.0, fp.VolCurve((0.5, 1.0, 2.0, 3.0),
                                                       (0.28, 0.30, 0.31, 0.32),
                                                       ("6M", "1Y", "2Y", "3Y")), 0.01),))
    opt = fp.European(asset="KELPA", right="call", strike=52.0, expiry=EXPIRY)
    g = fp.greeks(opt, m, paths=16384, seed=6, method="bump", buckets="tenor")
    b = g.vega_buckets["KELPA"]
    assert list(b) == ["6M", "1Y", "2Y", "3Y"]
    for late in ("2Y", "3Y"):
        assert abs(b[late].value) <= 4 * b[late].stderr + 1e-12
        assert not b[late].significant
    total = sum(v.value for v in b.values())
    assert total == pytest.approx(g.vega["KELPA"].value, abs=4 * g.vega["KELPA"].stderr)
    assert any("add up to" in n for n in g.notes)


def test_bucketed_vega_on_a_surface_sits_around_the_expiry():
    market = fp.load_market(SMILE)
    call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY)
    g = fp.greeks(call, market, paths=8192, seed=7, method="bump", buckets="tenor",
                  cross_gamma=False)
    b = g.vega_buckets["NORDA"]
    assert list(b) == ["3M", "6M", "1Y", "2Y", "3Y"]
    assert b["1Y"].value > 0.8 * sum(v.value for v in b.values())
    assert not b["3Y"].significant
    total = sum(v.value for v in b.values())
    # the surface buckets are each rebuilt through the local-vol table: their sum matches the
    # parallel vega to within the errors and a 2% interpolation allowance
    assert abs(total - g.vega["NORDA"].value) <= 4 * g.vega["NORDA"].stderr \
        + 0.02 * abs(g.vega["NORDA"].value)


def test_strike_buckets_name_tenor_and_strike():
    market = fp.load_market(SMILE)
    call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 3, 1))
    g = fp.greeks(call, market, paths=1024, seed=7, method="bump", buckets="strike",
                  cross_gamma=False, correlation=False, dividends=False)
    b = g.vega_buckets["NORDA"]
    skipped = sum(n.count(";") + 1 for n in g.notes if n.startswith("vega buckets skipped"))
    assert len(b) + skipped == 5 * 9 and "3M/1" in b and "3Y/1.5" in b


def test_buckets_need_pillars(capsys):
    code, out, err = run(["greeks", ROOT / "payoffs" / "european_call.toml", "--market",
                          ROOT / "markets" / "demo.toml", "--buckets"], capsys)
    assert_bad_input(code, out, err, "--buckets", "vol pillars")


# ---------------------------------------------------------------------------------------------
# Every bump rebuilds what depends on it, as re-loading a bumped file would
# ---------------------------------------------------------------------------------------------
def _edited(tmp_path, name: str, edit) -> Path:
    path = tmp_path / name
    text = edit(SMILE.read_text())
    assert text != SMILE.read_text()
    path.write_text(text)
    return path


def _norda_vols(text: str, dv: float, row: int | None = None) -> str:
    head, rest = text.split("[assets.NORDA.vol_surface]", 1)
    block, tail = rest.split("[assets.KELPA]", 1)
    lines = block.splitlines()
    k = -1
    for i, line in enumerate(lines):
        if "[0." in line and ("vols" in line or line.strip().startswith("[")):
            k += 1
            if row is None or k == row:
                lines[i] = re.sub(r"0\.\d{4}", lambda mt: repr(round(float(mt[0]) + dv, 6)),
                                  line)
    return head + "[assets.NORDA.vol_surface]" + "\n".join(lines) + "\n[assets.KELPA]" + tail


BUMPED_FILES = {
    "spot": (lambda t: t.replace("spot = 100.0", "spot = 101.0", 1),
             lambda m: bumps.spot(m, "NORDA", 1.01)),
    "rates": (lambda t: t.replace("zero_rates = [0.028, 0.030, 0.031, 0.033]",
                                  "zero_rates = [0.029, 0.031, 0.032, 0.034]"),
              lambda m: bumps.rates(m, 0.001)),
    "vol (whole surface)": (lambda t: _norda_vols(t, 0.01), lambda m: bumps.vol(m, "NORDA", 0.01)),
    "vol (1Y row)": (lambda t: _norda_vols(t, 0.01, row=2),
                     lambda m: bumps.vol(m, "NORDA", 0.01, tenor=2)),
    "dividend yield": (lambda t: t.replace("dividend_yield = 0.005", "dividend_yield = 0.006"),
                       lambda m: bumps.dividend_yield(m, "KELPA", 0.001)),
    "correlation": (lambda t: t.replace("matrix = [[1.0,  0.6,  0.4,",
                                        "matrix = [[1.0,  0.61, 0.4,").replace(
                        "[0.6,  1.0,  0.5,", "[0.61, 1.0,  0.5,"),
                    lambda m: bumps.correlation(m, [("NORDA", "KELPA")], 0.01)),
    "valuation date": (lambda t: t.replace("valuation_date = 2026-12-01",
                                           "valuation_date = 2026-12-02"),
                       lambda m: bumps.valuation_date(m, 1)),
}


@pytest.mark.parametrize("what", list(BUMPED_FILES))
def test_each_bump_equals_reloading_a_bumped_file(tmp_path, what):
    edit, bump = BUMPED_FILES[what]
    market = fp.load_market(SMILE)
    reloaded = fp.load_market(_edited(tmp_path, "bumped.toml", edit))
    note = fp.Basket(assets=("NORDA", "KELPA"), combine="worst", right="put", strike_level=0.9,
                     expiry=EXPIRY, notional=100.0,
                     initial_levels=(("NORDA", 100.0), ("KELPA", 42.5)))
    a = fp.price(note, bump(market), paths=2048, seed=9)
    b = fp.price(note, reloaded, paths=2048, seed=9)
    assert a.price == pytest.approx(b.price, rel=1e-10, abs=1e-12)
    assert a.stderr == pytest.approx(b.stderr, rel=1e-8, abs=1e-12)


def test_rho_under_a_surface_and_cash_dividends_matches_reloaded_files(tmp_path):
    # the case that showed the fault: a one-year 80 put on NORDA (surface, cash dividends);
    # reference: the put priced on market files with every zero rate moved by +-10bp
    market = fp.load_market(SMILE)
    put = fp.European(asset="NORDA", right="put", strike=80.0, expiry=EXPIRY)
    g = fp.greeks(put, market, paths=16384, seed=2, method="bump", cross_gamma=False)
    prices = []
    for sign in (1, -1):
        rates = [0.028, 0.030, 0.031, 0.033]
        moved = ", ".join(repr(round(r + sign * 0.001, 6)) for r in rates)
        path = _edited(tmp_path, f"r{sign}.toml", lambda t, moved=moved: t.replace(
            "zero_rates = [0.028, 0.030, 0.031, 0.033]", f"zero_rates = [{moved}]"))
        prices.append(fp.price(put, fp.load_market(path), paths=16384, seed=2,
                               control=False).price)
    ref = (prices[0] - prices[1]) / 0.002
    # the same random numbers; 10bp against the engine's 1bp: a second-order allowance of 1%
    assert g.rho.value == pytest.approx(ref, rel=0.01), (g.rho, ref)


# ---------------------------------------------------------------------------------------------
# Desk units and the JSON contract
# ---------------------------------------------------------------------------------------------
def test_desk_units_and_significance():
    m = two_assets(0.5)
    note = fp.load_product(ROOT / "payoffs" / "autocall_worst_of.toml")
    m3 = fp.load_market(ROOT / "markets" / "demo.toml")
    g = fp.greeks(note, m3, paths=2048, seed=3, method="bump", cross_gamma=False)
    d = g.to_dict()
    delta = d["greeks"]["delta"]["NORDA"]
    assert delta["desk_value"] == pytest.approx(delta["value"] * 0.01 * 100.0)
    assert delta["desk_percent_of_notional"] == pytest.approx(
        100 * delta["desk_value"] / note.notional)
    assert d["greeks"]["rho"]["desk_value"] == pytest.approx(d["greeks"]["rho"]["value"] * 1e-4)
    assert d["greeks"]["theta"]["desk_value"] == pytest.approx(
        d["greeks"]["theta"]["value"] / 365)
    for key in ("correlation", "dividend"):
        assert key in d
    assert set(d["correlation"]) == {"NORDA/KELPA", "NORDA/VIREO", "KELPA/VIREO", "all"}
    zero = fp.greeks(fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRY),
                     m, paths=1024, seed=1, method="bump")
    assert zero.correlation == {}  # one asset: no correlation
    assert np.isfinite(zero.dividend["NORDA"].value)


def test_pathwise_delta_under_local_vol_matches_the_bump():
    # local vol from a surface quoted in fractions of spot: every level is proportional to the
    # spot (no cash dividends on VIREO), so the pathwise delta S_T/S_0 applies; reference: the
    # central spot bump on the same random numbers (its O(h^2) bias allowed for by 0.5%)
    market = fp.load_market(SMILE)
    call = fp.European(asset="VIREO", right="call", strike=220.0, expiry=EXPIRY)
    auto = fp.greeks(call, market, paths=16384, seed=12, method="auto")
    bump = fp.greeks(call, market, paths=16384, seed=12, method="bump")
    assert auto.delta["VIREO"].method == "pathwise"
    assert auto.vega["VIREO"].method.startswith("bump")  # no flat vol: vega stays bumped
    a, b = auto.delta["VIREO"], bump.delta["VIREO"]
    assert abs(a.value - b.value) <= 4 * math.hypot(a.stderr, b.stderr) + 0.005 * abs(b.value)

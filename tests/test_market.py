"""Market inputs (fairpath.market): the demo market, curves, vol term structures, forwards,
correlation blocks and the validation of market files.

References outside the project: every expected number below is a hand computation written out
in the test (day counts from the calendar, exp/sqrt of the stated formulas), and the
eigenvalues of the equicorrelation matrix are the textbook 1 + (n - 1) a and 1 - a.
"""

from __future__ import annotations

import math
import re
import warnings
from datetime import date
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import fairpath as fp
from fairpath import InputError
from fairpath.market import (
    Asset,
    Correlation,
    DiscountCurve,
    Market,
    VolCurve,
    integrate_vol_product,
    load_market,
    validate_correlation,
)

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "markets" / "demo.toml"
VAL = date(2026, 12, 1)

# Day counts from 1 Dec 2026 (calendar, hand-counted): to 1 Jun 2027 182 days, to 1 Dec 2027
# 365, to 1 Dec 2028 731 (29 Feb 2028), to 1 Dec 2029 1096, to 1 Dec 2031 1826.
T6M, T1Y, T2Y, T3Y, T5Y = 182 / 365, 1.0, 731 / 365, 1096 / 365, 1826 / 365

DEMO_MATRIX = """matrix = [[1.0, 0.6, 0.4],
          [0.6, 1.0, 0.5],
          [0.4, 0.5, 1.0]]"""


@pytest.fixture(scope="module")
def demo() -> Market:
    return load_market(DEMO)


@pytest.fixture(scope="module")
def domestic(tmp_path_factory) -> Market:
    """The demo market's three euro shares (:func:`demo_text`)."""
    p = tmp_path_factory.mktemp("demo") / "demo.toml"
    p.write_text(demo_text(), encoding="utf-8")
    return load_market(p)


def demo_text() -> str:
    """markets/demo.toml with its foreign shares, issuer, curves and exchange rates cut out,
    and the correlation block of its three euro shares (the checks below edit that block;
    the currencies have their own in tests/test_currencies.py)."""
    text = DEMO.read_text(encoding="utf-8")
    text = text[:text.index("[assets.SPRUCE]")] + text[text.index("[correlation]"):]
    return (text[:text.index("[correlation]")] + '[correlation]\nassets = ["NORDA", "KELPA", '
            '"VIREO"]\n' + DEMO_MATRIX + "\n")


def test_the_demo_market_carries_two_foreign_shares(demo):
    assert demo.asset_names == ("NORDA", "KELPA", "VIREO", "SPRUCE", "TARNO")
    assert demo.foreign("SPRUCE") == "USD" and demo.foreign("TARNO") == "CHF"
    assert demo.correlation.assets[-2:] == ("USD", "CHF")
    np.testing.assert_array_equal(demo.correlation.array()[:3, :3],
                                  [[1.0, 0.6, 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]])


def write_variant(tmp_path: Path, old: str, new: str, name: str = "market.toml") -> Path:
    """The demo market with one piece of text replaced, written to tmp_path."""
    text = demo_text()
    assert old in text, f"the demo market no longer contains {old!r}"
    p = tmp_path / name
    p.write_text(text.replace(old, new, 1), encoding="utf-8")
    return p


FLAT_MARKET = """valuation_date = 2026-12-01
currency = "EUR"
{day_count}
[discount]
rate = 0.03

[assets.ORMEL]
spot = 80.0
vol = 0.2
"""


# ---------------------------------------------------------------------------------------------
# The demo market
# ---------------------------------------------------------------------------------------------
def test_demo_market_loads(domestic):
    demo = domestic
    assert demo.valuation_date == VAL
    assert demo.currency == "EUR"
    assert demo.day_count == "ACT/365F"
    assert demo.asset_names == ("NORDA", "KELPA", "VIREO")
    norda, kelpa, vireo = demo.assets
    assert (norda.spot, norda.dividend_yield, norda.vol) == (100.0, 0.02, VolCurve.flat(0.25))
    assert (kelpa.spot, kelpa.dividend_yield) == (42.5, 0.01)
    assert kelpa.vol.vols == (0.28, 0.30, 0.31)
    assert kelpa.vol.times == pytest.approx((T6M, T1Y, T3Y), abs=1e-15)
    assert (vireo.spot, vireo.dividend_yield, vireo.vol.vols) == (215.0, 0.0, (0.38,))
    assert demo.discount.zero_rates == (0.028, 0.030, 0.031, 0.033)
    assert demo.discount.times == pytest.approx((T6M, T1Y, T2Y, T5Y), abs=1e-15)
    assert demo.correlation.assets == ("NORDA", "KELPA", "VIREO")
    np.testing.assert_array_equal(demo.correlation.array(),
                                  [[1.0, 0.6, 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]])


def test_load_market_is_exported_and_accepts_str(demo):
    assert fp.load_market(str(DEMO)) == demo


def test_market_time_and_df_to_dates(demo):
    assert demo.time(date(2027, 6, 1)) == pytest.approx(T6M, abs=1e-15)
    assert demo.time(date(2027, 12, 1)) == 1.0
    assert demo.time(VAL) == 0.0
    np.testing.assert_allclose(demo.time([date(2027, 12, 1), date(2028, 12, 1)]), [T1Y, T2Y])
    # 1Y pillar: exp(-0.03 * 1)
    assert float(demo.df(date(2027, 12, 1))) == pytest.approx(math.exp(-0.03), rel=1e-14)
    assert float(demo.df(VAL)) == 1.0


def test_unknown_asset_lookup(demo):
    with pytest.raises(InputError, match="did you mean 'NORDA'") as ei:
        demo.asset("NORDX", source="p.toml", key="asset")
    assert str(ei.value).startswith("p.toml: asset: ")
    assert "NORDA, KELPA, VIREO" in str(ei.value)


# ---------------------------------------------------------------------------------------------
# Discount curves
# ---------------------------------------------------------------------------------------------
def test_flat_curve():
    c = DiscountCurve.flat(0.03)
    assert c.is_flat
    for t in (0.0, 0.25, 1.0, 7.5, 30.0):
        assert float(c.zero(t)) == 0.03
        assert float(c.df(t)) == pytest.approx(math.exp(-0.03 * t), rel=1e-15)
    np.testing.assert_allclose(c.df(np.array([0.5, 2.0])), np.exp([-0.015, -0.06]), rtol=1e-15)
    assert DiscountCurve.flat(-0.005).df(2.0) == pytest.approx(math.exp(0.01), rel=1e-15)


def _tr_linear(t, t0, r0, t1, r1):
    """Hand formula: t * r(t) linear between the pillars (t0, r0) and (t1, r1)."""
    return t0 * r0 + (t - t0) / (t1 - t0) * (t1 * r1 - t0 * r0)


@pytest.mark.parametrize("t, expected_tr", [
    (0.0, 0.0),
    (0.25, 0.25 * 0.028),                      # before the first pillar: flat 2.8%
    (T6M, T6M * 0.028),                        # on a pillar
    (0.75, _tr_linear(0.75, T6M, 0.028, T1Y, 0.030)),
    (1.0, 0.030),
    (1.5, _tr_linear(1.5, T1Y, 0.030, T2Y, 0.031)),
    (3.0, _tr_linear(3.0, T2Y, 0.031, T5Y, 0.033)),
    (T5Y, T5Y * 0.033),
    (7.0, 7.0 * 0.033),                        # after the last pillar: flat 3.3%
    (30.0, 30.0 * 0.033),
])
def test_demo_zero_curve_by_hand(demo, t, expected_tr):
    c = demo.discount
    assert not c.is_flat
    assert float(c.df(t)) == pytest.approx(math.exp(-expected_tr), rel=1e-13)
    if t > 0:
        assert float(c.zero(t)) == pytest.approx(expected_tr / t, rel=1e-12)


def test_zero_curve_numbers_written_out(demo):
    # hand computation at t = 1.5: t r = 0.03 + 0.5 / (366/365) * (0.031 * 731/365 - 0.03)
    #                                  = 0.03 + 0.4986339 * 0.0320849 = 0.0459986
    assert float(demo.discount.df(1.5)) == pytest.approx(math.exp(-0.0459986), abs=2e-7)
    assert float(demo.discount.zero(1.5)) == pytest.approx(0.0459986 / 1.5, abs=2e-7)
    # the zero rate at t = 0 is the first pillar's
    assert float(demo.discount.zero(0.0)) == 0.028


def test_zero_curve_vectorised(demo):
    ts = np.array([0.25, 1.0, 1.5, 7.0])
    got = demo.discount.df(ts)
    assert got.shape == (4,)
    np.testing.assert_allclose(got, [float(demo.discount.df(t)) for t in ts], rtol=0, atol=0)


def test_zero_curve_shift():
    c = DiscountCurve((0.5, 2.0), (0.02, 0.03)).shifted(0.01)
    assert c.zero_rates == pytest.approx((0.03, 0.04))
    assert float(c.df(4.0)) == pytest.approx(math.exp(-0.16))


@settings(max_examples=100, deadline=None)
@given(r=st.lists(st.floats(-0.02, 0.10), min_size=2, max_size=6), frac=st.floats(0.0, 1.0))
def test_zero_curve_piecewise_linear_log_df(r, frac):
    """-log df is linear between pillars (piecewise-flat forwards) and the zero rate is flat
    outside them."""
    ts = tuple(0.5 * (i + 1) for i in range(len(r)))
    c = DiscountCurve(ts, tuple(r))
    for i in range(len(ts) - 1):
        t = ts[i] + frac * (ts[i + 1] - ts[i])
        expected = ts[i] * r[i] + frac * (ts[i + 1] * r[i + 1] - ts[i] * r[i])
        assert -math.log(float(c.df(t))) == pytest.approx(expected, rel=1e-9, abs=1e-13)
    assert float(c.zero(ts[0] * (0.001 + frac) / 1.001)) == pytest.approx(r[0], abs=1e-15)
    assert float(c.zero(ts[-1] + 10 * frac)) == pytest.approx(r[-1], abs=1e-15)


def test_zero_curve_tiny_time_no_warning(demo):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert float(demo.discount.zero(1e-320)) == 0.028


def test_day_count_act360(tmp_path):
    p = tmp_path / "m360.toml"
    p.write_text(FLAT_MARKET.format(day_count='day_count = "ACT/360"'), encoding="utf-8")
    m = load_market(p)
    assert m.day_count == "ACT/360"
    # 365 days / 360
    assert m.time(date(2027, 12, 1)) == 365 / 360
    assert float(m.df(date(2027, 12, 1))) == pytest.approx(math.exp(-0.03 * 365 / 360), rel=1e-15)
    # default is ACT/365F
    p2 = tmp_path / "m365.toml"
    p2.write_text(FLAT_MARKET.format(day_count=""), encoding="utf-8")
    assert load_market(p2).day_count == "ACT/365F"


def test_pillar_times_use_the_day_count(tmp_path):
    text = FLAT_MARKET.format(day_count='day_count = "ACT/360"').replace(
        "rate = 0.03", 'tenors = ["6M", "1Y"]\nzero_rates = [0.02, 0.03]')
    p = tmp_path / "m.toml"
    p.write_text(text, encoding="utf-8")
    assert load_market(p).discount.times == pytest.approx((182 / 360, 365 / 360), abs=1e-15)


# ---------------------------------------------------------------------------------------------
# Volatility term structures
# ---------------------------------------------------------------------------------------------
# KELPA: vols 28% / 30% / 31% at 6M / 1Y / 3Y. Total variances w_i = vol_i^2 t_i; forward
# variances: 0.28^2 up to 6M, (w_1 - w_0) / (t_1 - t_0) to 1Y, (w_2 - w_1) / (t_2 - t_1) after.
W0, W1, W2 = 0.28**2 * T6M, 0.30**2 * T1Y, 0.31**2 * T3Y
FV0 = 0.28**2
FV1 = (W1 - W0) / (T1Y - T6M)
FV2 = (W2 - W1) / (T3Y - T1Y)


@pytest.mark.parametrize("t0, t1, expected", [
    (0.0, 0.25, 0.28**2 * 0.25),                          # = 0.0196
    (0.0, T6M, W0),
    (0.0, T1Y, 0.09),
    (T6M, T1Y, 0.09 - 0.0784 * 182 / 365),
    (0.25, 0.75, FV0 * (T6M - 0.25) + FV1 * (0.75 - T6M)),
    (0.25, 2.0, FV0 * (T6M - 0.25) + FV1 * (T1Y - T6M) + FV2 * 1.0),
    (0.0, T3Y, 0.31**2 * T3Y),
    (4.0, 5.0, FV2),                                      # the last piece continues
    (1.0, 1.0, 0.0),
])
def test_vol_variance_by_hand(demo, t0, t1, expected):
    v = demo.asset("KELPA").vol
    assert float(v.variance(t0, t1)) == pytest.approx(expected, rel=1e-12, abs=1e-16)


def test_vol_forward_variances_written_out():
    # hand computation: FV1 = (0.09 - 0.0784 * 0.4986301) / 0.5013699 = 0.1015366,
    #                   FV2 = (0.0961 * 3.0027397 - 0.09) / 2.0027397 = 0.1985633 / 2.0027397
    #                       = 0.0991458
    assert math.isclose(FV1, 0.1015366, abs_tol=1e-7)
    assert math.isclose(FV2, 0.0991458, abs_tol=1e-7)


@pytest.mark.parametrize("t, expected", [
    (0.0, 0.28),
    (0.1, 0.28),
    (T6M, 0.28),
    (T1Y, 0.30),
    (2.0, math.sqrt((W1 + FV2 * 1.0) / 2.0)),
    (T3Y, 0.31),
    (5.0, math.sqrt((W2 + FV2 * (5.0 - T3Y)) / 5.0)),
])
def test_vol_implied_by_hand(demo, t, expected):
    assert float(demo.asset("KELPA").vol.implied(t)) == pytest.approx(expected, rel=1e-12)


def test_vol_vectorised(demo):
    v = demo.asset("KELPA").vol
    got = v.variance(np.zeros(3), np.array([0.25, 1.0, T3Y]))
    np.testing.assert_allclose(got, [0.0196, 0.09, W2], rtol=1e-12)
    np.testing.assert_allclose(v.implied(np.array([T1Y, T3Y])), [0.30, 0.31], rtol=1e-12)


def test_flat_vol():
    v = VolCurve.flat(0.25)
    assert v.is_flat
    assert float(v.variance(0.5, 2.0)) == pytest.approx(0.0625 * 1.5)
    assert float(v.implied(3.0)) == 0.25
    assert float(v.implied(0.0)) == 0.25
    assert v.shifted(0.01).vols == (0.26,)


def test_cross_integral_by_hand(demo):
    # integral of 0.25 * sigma_KELPA(t) over [0, 2]: forward vols sqrt(FV0), sqrt(FV1), sqrt(FV2)
    expected = 0.25 * (0.28 * T6M + math.sqrt(FV1) * (T1Y - T6M) + math.sqrt(FV2) * 1.0)
    got = integrate_vol_product(demo.asset("NORDA").vol, demo.asset("KELPA").vol, 0.0, 2.0)
    assert float(got) == pytest.approx(expected, rel=1e-12)


def test_flat_total_variance_is_allowed(tmp_path):
    # a zero forward variance between two pillars (total variance equal) is legal
    v1 = 0.30 * math.sqrt(T6M)
    p = write_variant(tmp_path, "vols = [0.28, 0.30, 0.31]", f"vols = [0.30, {v1!r}, 0.31]")
    m = load_market(p)
    assert float(m.asset("KELPA").vol.variance(T6M, T1Y)) == pytest.approx(0.0, abs=1e-15)


@settings(max_examples=100, deadline=None)
@given(vols=st.lists(st.floats(0.05, 0.8), min_size=2, max_size=5),
       a=st.floats(0.0, 8.0), b=st.floats(0.0, 8.0), c=st.floats(0.0, 8.0))
def test_vol_variance_additive(vols, a, b, c):
    """variance(a, b) + variance(b, c) == variance(a, c), and implied(t)^2 t == variance(0, t),
    for any increasing total variance."""
    ts = tuple(0.5 * (i + 1) for i in range(len(vols)))
    # make the total variance increasing: vol_i = sqrt(sum of positive forward variances / t_i)
    w = np.cumsum(np.square(vols) * 0.5)
    curve = VolCurve(ts, tuple(float(x) for x in np.sqrt(w / np.array(ts))))
    va, vb, vc = (float(curve.variance(0, x)) for x in (a, b, c))
    assert float(curve.variance(a, b)) + float(curve.variance(b, c)) == pytest.approx(
        float(curve.variance(a, c)), abs=1e-12)
    assert va <= vb + 1e-12 if a <= b else vb <= va + 1e-12
    if c > 0:
        assert float(curve.implied(c)) ** 2 * c == pytest.approx(vc, rel=1e-10, abs=1e-14)


# ---------------------------------------------------------------------------------------------
# Forwards
# ---------------------------------------------------------------------------------------------
def test_forward_by_hand(demo):
    # F = S exp(-q T) / df(T); at the 1Y pillar df = exp(-0.03): F = 100 exp(0.01) = 101.00502
    assert demo.forward("NORDA", 1.0) == pytest.approx(100 * math.exp(0.01), rel=1e-14)
    assert demo.forward("NORDA", 1.0) == pytest.approx(101.005017, abs=1e-6)
    # between pillars, from the hand-computed t r(t) at 1.5
    tr = _tr_linear(1.5, T1Y, 0.030, T2Y, 0.031)
    assert demo.forward("KELPA", 1.5) == pytest.approx(42.5 * math.exp(-0.015 + tr), rel=1e-13)
    # no dividends: S / df; at t = 0 the spot
    assert demo.forward("VIREO", 7.0) == pytest.approx(215.0 * math.exp(7 * 0.033), rel=1e-13)
    assert demo.forward("VIREO", 0.0) == 215.0
    fw = demo.forward("NORDA", np.array([0.0, 1.0]))
    np.testing.assert_allclose(fw, [100.0, 100 * math.exp(0.01)], rtol=1e-14)


def test_forward_unknown_asset(demo):
    with pytest.raises(InputError, match="unknown asset 'ORMEL'"):
        demo.forward("ORMEL", 1.0)


# ---------------------------------------------------------------------------------------------
# Correlation
# ---------------------------------------------------------------------------------------------
def test_correlation_sub_blocks(demo):
    np.testing.assert_array_equal(demo.correlation_matrix(["NORDA"]), [[1.0]])
    np.testing.assert_array_equal(demo.correlation_matrix(["ORMEL"]), [[1.0]])  # one asset
    np.testing.assert_array_equal(demo.correlation_matrix(["VIREO", "NORDA"]),
                                  [[1.0, 0.4], [0.4, 1.0]])
    np.testing.assert_array_equal(demo.correlation_matrix(("KELPA", "VIREO")),
                                  [[1.0, 0.5], [0.5, 1.0]])
    np.testing.assert_array_equal(demo.correlation_matrix(["KELPA", "VIREO", "NORDA"]),
                                  [[1.0, 0.5, 0.6], [0.5, 1.0, 0.4], [0.6, 0.4, 1.0]])


def test_correlation_matrix_errors(demo):
    with pytest.raises(InputError, match="twice") as ei:
        demo.correlation_matrix(["NORDA", "NORDA"], source="p.toml", key="assets")
    assert str(ei.value).startswith("p.toml: assets: ")
    m = Market(VAL, "EUR", DiscountCurve.flat(0.03),
               (Asset("NORDA", 100.0, VolCurve.flat(0.2)), Asset("ORMEL", 50.0,
                                                                 VolCurve.flat(0.3))))
    with pytest.raises(InputError, match=r"need a \[correlation\] block"):
        m.correlation_matrix(["NORDA", "ORMEL"])
    m2 = Market(VAL, "EUR", DiscountCurve.flat(0.03), m.assets,
                correlation=Correlation(("NORDA",), ((1.0,),)))
    with pytest.raises(InputError, match="'ORMEL' is missing from the market's correlation"):
        m2.correlation_matrix(["NORDA", "ORMEL"])


@pytest.mark.parametrize("matrix", [
    "matrix = [[1.0, 1.0], [1.0, 1.0]]",
    "matrix = [[1.0, -1.0], [-1.0, 1.0]]",
])
def test_perfect_correlation_loads(tmp_path, matrix):
    # eigenvalues 0 and 2: positive semi-definite, on the edge
    text = demo_text()
    text = text.replace('assets = ["NORDA", "KELPA", "VIREO"]', 'assets = ["NORDA", "VIREO"]')
    text = text.replace(DEMO_MATRIX, matrix)
    p = tmp_path / "m.toml"
    p.write_text(text, encoding="utf-8")
    m = load_market(p)
    assert abs(m.correlation_matrix(["VIREO", "NORDA"])[0, 1]) == 1.0


def test_perfect_correlation_three_assets_loads(tmp_path):
    # NORDA and KELPA move as one, both 0.5 with VIREO: rank 2, smallest eigenvalue 0
    p = write_variant(tmp_path, DEMO_MATRIX,
                      "matrix = [[1.0, 1.0, 0.5], [1.0, 1.0, 0.5], [0.5, 0.5, 1.0]]")
    assert load_market(p).correlation_matrix(["NORDA", "KELPA"])[0, 1] == 1.0


def test_validate_correlation_direct():
    validate_correlation(np.eye(3))
    with pytest.raises(InputError, match="positive semi-definite"):
        validate_correlation(np.array([[1.0, 0.9, 0.9], [0.9, 1.0, -0.9], [0.9, -0.9, 1.0]]))


# ---------------------------------------------------------------------------------------------
# Validation of market files: every error is a one-line InputError naming the file and the key
# ---------------------------------------------------------------------------------------------
BAD_VARIANTS = [
    # id, old text, new text, key, fragment of the message
    ("negative vol", "vol = 0.25", "vol = -0.25", "assets.NORDA.vol", "negative"),
    ("negative vol in a term structure", "vols = [0.28, 0.30, 0.31]",
     "vols = [0.28, -0.30, 0.31]", "assets.KELPA.vols[1]", "negative"),
    ("nan vol", "vol = 0.38", "vol = nan", "assets.VIREO.vol", "finite"),
    ("zero spot", "spot = 100.0", "spot = 0.0", "assets.NORDA.spot", "positive"),
    ("negative spot", "spot = 42.5", "spot = -42.5", "assets.KELPA.spot", "positive"),
    ("string spot", "spot = 42.5", 'spot = "42.5"', "assets.KELPA.spot", "expected a number"),
    ("missing spot", "spot = 215.0\n", "", "assets.VIREO.spot", "missing"),
    ("missing vol", "vol = 0.38\n", "", "assets.VIREO.vol", "missing"),
    ("vol and vol_tenors", "vol = 0.25", 'vol = 0.25\nvols = [0.2]\nvol_tenors = ["1Y"]',
     "assets.NORDA.vol", "not both"),
    ("tenors and rates of different lengths", "zero_rates = [0.028, 0.030, 0.031, 0.033]",
     "zero_rates = [0.028, 0.030, 0.031]", "discount.zero_rates", "3 values for 4 tenors"),
    ("vol tenors and vols of different lengths", "vols = [0.28, 0.30, 0.31]",
     "vols = [0.28, 0.30]", "assets.KELPA.vols", "2 values for 3 tenors"),
    ("decreasing total variance", "vols = [0.28, 0.30, 0.31]", "vols = [0.28, 0.30, 0.15]",
     "assets.KELPA.vols[2]", "total variance"),
    ("tenors not increasing", '["6M", "1Y", "2Y", "5Y"]', '["6M", "2Y", "1Y", "5Y"]',
     "discount.tenors", "strictly increasing"),
    ("bad tenor", '["6M", "1Y", "2Y", "5Y"]', '["6M", "1Y", "2Y", "5X"]', "discount.tenors[3]",
     "not a tenor"),
    ("rate and tenors", "[discount]\n", "[discount]\nrate = 0.03\n", "discount.rate", "not both"),
    ("no rate, no tenors", "tenors = [", "pillars = [", "discount.rate", "missing"),
    ("unknown key in an asset", "dividend_yield = 0.02", "dividend_yeild = 0.02",
     "assets.NORDA.dividend_yeild", "did you mean 'dividend_yield'"),
    ("unknown top-level key", 'currency = "EUR"', 'currency = "EUR"\ncurreny = "USD"',
     "curreny", "did you mean 'currency'"),
    ("unknown key in discount", "[discount]\n", "[discount]\ncompounding = \"annual\"\n",
     "discount.compounding", "unknown key"),
    ("unknown day count", 'day_count = "ACT/365F"', 'day_count = "ACT/365"', "day_count",
     "did you mean 'ACT/365F'"),
    ("day count not a string", 'day_count = "ACT/365F"', "day_count = 365", "day_count",
     "expected a string"),
    ("empty currency", 'currency = "EUR"', 'currency = " "', "currency", "must not be empty"),
    ("missing valuation date", "valuation_date = 2026-12-01\n", "", "valuation_date",
     "missing"),
    ("valuation date a datetime", "valuation_date = 2026-12-01",
     "valuation_date = 2026-12-01T09:00:00", "valuation_date", "expected a date"),
    ("correlation not symmetric", "[0.6, 1.0, 0.5]", "[0.5, 1.0, 0.5]", "correlation.matrix",
     "not symmetric"),
    ("correlation diagonal not 1", "[0.4, 0.5, 1.0]]", "[0.4, 0.5, 0.9]]",
     "correlation.matrix", "diagonal must be 1"),
    ("correlation entry outside [-1, 1]", DEMO_MATRIX,
     "matrix = [[1.0, 1.2, 0.4], [1.2, 1.0, 0.5], [0.4, 0.5, 1.0]]", "correlation.matrix",
     "outside [-1, 1]"),
    ("correlation entry not a number", DEMO_MATRIX,
     'matrix = [[1.0, "0.6", 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]]',
     "correlation.matrix[0][1]", "expected a number"),
    ("correlation wrong shape", DEMO_MATRIX, "matrix = [[1.0, 0.6], [0.6, 1.0]]",
     "correlation.matrix", "3 x 3"),
    ("correlation unknown asset", 'assets = ["NORDA", "KELPA", "VIREO"]',
     'assets = ["NORDA", "KELPA", "VIRE0"]', "correlation.assets[2]", "did you mean 'VIREO'"),
    ("correlation asset twice", 'assets = ["NORDA", "KELPA", "VIREO"]',
     'assets = ["NORDA", "KELPA", "NORDA"]', "correlation.assets", "listed twice"),
    ("unknown key in correlation", DEMO_MATRIX, DEMO_MATRIX + '\nmethod = "pearson"',
     "correlation.method", "unknown key"),
]


@pytest.mark.parametrize("old, new, key, fragment", [v[1:] for v in BAD_VARIANTS],
                         ids=[v[0] for v in BAD_VARIANTS])
def test_bad_market_files(tmp_path, old, new, key, fragment):
    p = write_variant(tmp_path, old, new)
    with pytest.raises(InputError) as ei:
        load_market(p)
    exc = ei.value
    msg = str(exc)
    assert isinstance(exc, ValueError)
    assert exc.source == str(p)
    assert exc.key == key
    assert msg.startswith(f"{p}: {key}: "), msg
    assert fragment in msg
    assert "\n" not in msg


def test_unknown_key_lists_known_keys(tmp_path):
    p = write_variant(tmp_path, "dividend_yield = 0.02", "dividend_yeild = 0.02")
    with pytest.raises(InputError) as ei:
        load_market(p)
    known = str(ei.value).split("known keys here:")[1]
    for k in ("dividend_yield", "spot", "vol", "vol_tenors", "vols"):
        assert k in known


def test_not_psd_reports_smallest_eigenvalue(tmp_path):
    # equicorrelation a = -0.6 for three assets: eigenvalues 1 + 2a = -0.2 and 1 - a = 1.6
    p = write_variant(tmp_path, DEMO_MATRIX,
                      "matrix = [[1.0, -0.6, -0.6], [-0.6, 1.0, -0.6], [-0.6, -0.6, 1.0]]")
    with pytest.raises(InputError, match="not positive semi-definite") as ei:
        load_market(p)
    msg = str(ei.value)
    assert msg.startswith(f"{p}: correlation.matrix: ")
    m = re.search(r"smallest eigenvalue (-?[0-9.eE+-]+)", msg)
    assert m, msg
    assert float(m.group(1)) == pytest.approx(-0.2, abs=1e-6)


def test_broken_toml(tmp_path):
    p = write_variant(tmp_path, "spot = 100.0", "spot = = 100.0")
    with pytest.raises(InputError, match="not valid TOML") as ei:
        load_market(p)
    msg = str(ei.value)
    assert msg.startswith(f"{p}: ")
    assert "line" in msg and "\n" not in msg


def test_missing_file(tmp_path):
    p = tmp_path / "absent.toml"
    with pytest.raises(InputError, match="file not found") as ei:
        load_market(p)
    assert str(ei.value).startswith(str(p))
    with pytest.raises(InputError, match="directory"):
        load_market(tmp_path)


def test_no_assets(tmp_path):
    p = tmp_path / "m.toml"
    p.write_text('valuation_date = 2026-12-01\ncurrency = "EUR"\n[discount]\nrate = 0.03\n'
                 "[assets]\n", encoding="utf-8")
    with pytest.raises(InputError, match="no assets") as ei:
        load_market(p)
    assert str(ei.value).startswith(f"{p}: assets: ")


def test_market_objects_validate_in_code():
    with pytest.raises(InputError, match="spot must be positive"):
        Asset("NORDA", spot=0.0, vol=VolCurve.flat(0.2))
    with pytest.raises(InputError, match="vol must not be negative"):
        Asset("NORDA", spot=100.0, vol=VolCurve.flat(-0.2))
    with pytest.raises(InputError, match="unknown day count"):
        Market(VAL, "EUR", DiscountCurve.flat(0.03), (Asset("NORDA", 100.0, VolCurve.flat(0.2)),),
               day_count="30/360")


def test_demo_smile_market_matches_its_ssvi_source():
    """markets/demo_smile.toml: every asset has a surface that passes the arbitrage checks, and
    its quotes are the SSVI surface it says it was sampled from (Gatheral and Jacquier 2014's
    power-law SSVI, rounded to 4 decimals); NORDA and KELPA pay cash dividends."""
    from fairpath.surface import ssvi_surface

    m = fp.load_market(ROOT / "markets" / "demo_smile.toml")
    params = {"NORDA": (0.25, -0.65, 1.1), "KELPA": (0.30, -0.55, 1.2),
              "VIREO": (0.38, -0.45, 1.0)}
    for name, (atm, rho, eta) in params.items():
        a = m.asset(name)
        assert a.surface is not None
        ref = ssvi_surface((0.25, 0.5, 1.0, 2.0, 3.0), a.surface.strikes, atm, 0.03, 0.0,
                           rho=rho, eta=eta)
        # tenors are dates rolled from "3M".. on the market's day count, so they are close to
        # the SSVI's times but not equal: compare the vols to 2e-3
        np.testing.assert_allclose(np.asarray(a.surface.vols), np.asarray(ref.vols), atol=2e-3)
        # a downward skew: the 0.8 strike's vol above the 1.2 strike's at every tenor
        j80, j120 = a.surface.strikes.index(0.8), a.surface.strikes.index(1.2)
        assert all(row[j80] > row[j120] for row in a.surface.vols)
    assert len(m.asset("NORDA").dividends) == 6
    assert len(m.asset("KELPA").dividends) == 3 and m.asset("KELPA").dividend_yield == 0.005
    assert m.escrowed_spot("NORDA") < 100.0

"""The issuer's funding spread: a note's cash flows discounted on the curve plus the spread,
the paths' drift risk-free (fairpath.market.Market.issuer_spread, PathSet.df).

References: a zero-coupon note is worth the notional discounted at the curve plus the spread
(the definition of a zero-coupon bond's value on a spread-adjusted zero curve); its
sensitivity to a parallel spread shift is minus its maturity times its value (the derivative
of ``exp(-(r + s) T)``); the spread curve interpolates as the discount curve does, linearly in
``t * s(t)`` between pillars, flat outside.
"""

from __future__ import annotations

import math
from datetime import date

import pytest

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.products import product_from_dict

VAL = date(2026, 12, 1)
MAT = date(2029, 12, 3)

MARKET = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
tenors = ["1Y", "2Y", "5Y"]
zero_rates = [0.030, 0.031, 0.033]
[assets.NORDA]
spot = 100.0
vol = 0.25
[issuers.HARBOUR_BANK]
spread = 0.012
[issuers.TIDEWATER]
tenors = ["1Y", "3Y", "5Y"]
spreads = [0.006, 0.010, 0.015]
"""


def zero_coupon(issuer: str | None, funding: bool = True) -> dict:
    """A note that pays its notional at maturity whatever happens: no coupon, never called,
    no protection barrier."""
    d = {"kind": "autocallable", "assets": ["NORDA"], "notional": 1000.0,
         "observations": {"dates": [date(2028, 12, 1), MAT]}, "autocall_level": 1e6,
         "coupon": 0.0, "coupon_barrier": 0.0, "protection_barrier": 0.0}
    if issuer is not None:
        d["issuer"] = issuer
    if not funding:
        d["funding"] = False
    return d


@pytest.fixture()
def market(tmp_path):
    (tmp_path / "m.toml").write_text(MARKET)
    return fp.load_market(tmp_path / "m.toml")


def test_zero_coupon_note_is_the_notional_discounted_at_curve_plus_spread(market):
    t = market.time(MAT)
    df = float(market.df(MAT))
    # flat spread: 1000 exp(-(r(T) + s) T)
    res = fp.price(product_from_dict(zero_coupon("HARBOUR_BANK")), market, seed=1)
    assert res.price == pytest.approx(1000.0 * df * math.exp(-0.012 * t), rel=1e-12)
    # tenor spreads: s(T) T linear between the 3Y (1.0%) and 5Y (1.5%) pillars
    t3 = market.time(date(2029, 12, 1))
    t5 = market.time(date(2031, 12, 1))
    st = 0.010 * t3 + (0.015 * t5 - 0.010 * t3) * (t - t3) / (t5 - t3)
    res = fp.price(product_from_dict(zero_coupon("TIDEWATER")), market, seed=1)
    assert res.price == pytest.approx(1000.0 * df * math.exp(-st), rel=1e-12)
    # the result says the price without the spread: the notional discounted on the curve
    f = res.to_dict()["funding"]
    assert f["issuer"] == "TIDEWATER" and f["spreads"] == [0.006, 0.010, 0.015]
    assert f["price_without_spread"] == pytest.approx(1000.0 * df, rel=1e-12)


def test_funding_false_and_no_issuer_give_the_same_numbers(market):
    terms = {"kind": "european", "asset": "NORDA", "right": "call", "strike": 100.0,
             "expiry": MAT}
    plain = fp.price(product_from_dict(terms), market, seed=3)
    off = fp.price(product_from_dict({**terms, "issuer": "HARBOUR_BANK", "funding": False}),
                   market, seed=3)
    on = fp.price(product_from_dict({**terms, "issuer": "HARBOUR_BANK"}), market, seed=3)
    assert off.price == plain.price and off.stderr == plain.stderr
    assert "funding" not in off.to_dict()
    # with the spread: the call's single payment discounted by exp(-s T) more, path by path
    assert on.price == pytest.approx(plain.price * math.exp(-0.012 * market.time(MAT)),
                                     rel=1e-9)


def test_spread_sensitivity_of_a_zero_coupon_note(market):
    g = fp.greeks(product_from_dict(zero_coupon("HARBOUR_BANK")), market, paths=4096, seed=1,
                  correlation=False, dividends=False)
    t = market.time(MAT)
    # d/ds of 1000 exp(-(r + s) T) = -T x value (central 1bp bump: exact to 1e-8 relative)
    assert g.spread.value == pytest.approx(-t * g.price, rel=1e-6)
    assert g.to_dict()["greeks"]["spread"]["issuer"] == "HARBOUR_BANK"
    assert g.to_dict()["greeks"]["spread"]["desk_unit"] == "per basis point"


def test_par_coupon_of_the_demo_note_rises_by_about_the_spread():
    # common practice, a rule of thumb: a note's par coupon carries its issuer's funding
    # spread, about one for one per year of coupon (the coupon and the spread both run while
    # the note is alive); here 120 bp a year, semiannual coupons
    mkt = fp.load_market("markets/demo.toml")
    note = fp.load_product("payoffs/autocall_worst_of.toml")
    import dataclasses

    from fairpath.market import DiscountCurve

    with_spread = dataclasses.replace(mkt, issuers=(("HARBOUR_BANK", DiscountCurve.flat(0.012)),))
    base = fp.solve(note, mkt, "coupon", 1000.0, paths=16384, seed=4).value
    funded = fp.solve(dataclasses.replace(note, issuer="HARBOUR_BANK"), with_spread, "coupon",
                      1000.0, paths=16384, seed=4).value
    rise_a_year = 2 * (funded - base)
    assert 0.5 * 0.012 < rise_a_year < 2.0 * 0.012, (base, funded)


BAD = {
    "unknown issuer": ('issuer = "NOBODY"\n', "", ("issuer", "NOBODY", "HARBOUR_BANK")),
    "spread in basis points": ('issuer = "HARBOUR_BANK"\n', "spread = 120\n",
                               ("issuers.HARBOUR_BANK.spread", "basis points")),
    "funding false without issuer": ("funding = false\n", "", ("funding", "no issuer")),
    "spreads length": ('issuer = "HARBOUR_BANK"\n',
                       'tenors = ["1Y", "2Y"]\nspreads = [0.01]\n',
                       ("issuers.HARBOUR_BANK.spreads", "2 tenors")),
    "spread and tenors": ('issuer = "HARBOUR_BANK"\n',
                          'spread = 0.01\ntenors = ["1Y"]\nspreads = [0.01]\n',
                          ("issuers.HARBOUR_BANK.spread", "not both")),
    "empty issuer": ('issuer = " "\n', "", ("issuer", "empty")),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_funding_input_is_one_line_exit_2(case, tmp_path, capsys):
    product_extra, issuer_block, fragments = BAD[case]
    market = MARKET.split("[issuers.HARBOUR_BANK]")[0]
    market += "[issuers.HARBOUR_BANK]\n" + (issuer_block or "spread = 0.012\n")
    (tmp_path / "m.toml").write_text(market)
    (tmp_path / "p.toml").write_text('kind = "european"\nasset = "NORDA"\nright = "call"\n'
                                     "strike = 100.0\nexpiry = 2027-12-01\n" + product_extra)
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, *fragments)

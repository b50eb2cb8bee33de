"""The smile and cash dividends: implied-volatility surfaces (fairpath.surface), local
volatility by Dupire's formula, escrowed cash dividends (fairpath.market), ``--flat-vol`` and
``--steps-per-day`` on the command line, and the Greeks under local volatility.

References outside the code under test:

* Black-Scholes-Merton (Black & Scholes 1973, Merton 1973) as implemented in
  ``fairpath.closed_form.bsm_price`` (itself checked against QuantLib in
  tests/test_closed_form.py), inverted with ``scipy.optimize.brentq`` for implied vols;
* the SSVI surface of J. Gatheral and A. Jacquier, "Arbitrage-free SVI volatility surfaces",
  Quantitative Finance 14(1), 2014: ``w(k, theta) = theta / 2 (1 + rho phi k +
  sqrt((phi k + rho)^2 + 1 - rho^2))`` with the power-law ``phi(theta) = eta / (theta^gamma
  (1 + theta)^(1 - gamma))``, free of static arbitrage when ``eta (1 + |rho|) <= 2`` and
  ``0 < gamma <= 1/2`` (their Theorem 4.2 and the power-law example of section 4); the test
  surface below (rho -0.6, eta 1.2, gamma 0.4, at-the-money vol 22%) meets both conditions;
* QuantLib 1.44: ``AnalyticDividendEuropeanEngine`` (escrowed-dividend Black-Scholes, the model
  fairpath states) and ``FdBlackScholesVanillaEngine`` with the dividends, in its escrowed model
  (the same model, a different method) and in its spot model (the level itself diffuses and
  drops by the amount: a different model, compared within a stated model tolerance);
* put-call parity with the dividends' present value, ``C - P = (S0 - PV(D)) e^{-qT} - K DF``,
  and the martingale property (the discounted level's mean is the discounted forward, so a
  zero-strike call is worth ``DF F``);
* Dupire's local variance of a surface flat in strike is the forward variance between tenors
  (``(w_2 - w_1) / (T_2 - T_1)``), and of a flat surface the flat vol itself.

Monte Carlo assertions are ``|estimate - reference| <= 4 * stderr`` plus an allowance stated
where the reference is not exactly the model simulated, at fixed seeds.
"""

from __future__ import annotations

import dataclasses
import functools
import json
import math
from datetime import date
from pathlib import Path

import numpy as np
import pytest
import QuantLib as ql
from scipy.optimize import brentq

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath import closed_form as cf
from fairpath.dates import parse_tenor, year_fraction
from fairpath.errors import InputError
from fairpath.market import attach_surface
from fairpath.registry import Capability
from fairpath.surface import VolSurface

VAL = date(2026, 12, 1)  # a Tuesday
THREE_MONTHS = date(2027, 3, 1)
SIX_MONTHS = date(2027, 6, 1)
ONE_YEAR = date(2027, 12, 1)
R, Q, S0 = 0.03, 0.01, 100.0

# the SSVI test surface (Gatheral & Jacquier 2014, power-law phi): rho < 0 is a downward skew
SSVI_RHO, SSVI_ETA, SSVI_GAMMA, SSVI_ATM = -0.6, 1.2, 0.4, 0.22
TENORS = ["3M", "6M", "9M", "1Y", "18M", "2Y", "3Y"]
STRIKES = [0.6, 0.7, 0.8, 0.85, 0.9, 0.95, 1.0, 1.05, 1.1, 1.15, 1.2, 1.3, 1.5]

#: Two cash dividends of 1.5 on a spot of 100 (both before the one-year expiry).
DIVIDENDS = ((date(2027, 3, 15), 1.5), (date(2027, 9, 15), 1.5))

#: Allowance, in price units on a spot of 100, for the daily log-Euler steps on a flat surface.
#: A log-Euler step with a constant variance is the exact lognormal transition, so the steps add
#: no bias of their own; the allowance only covers the local-variance table, equal to the flat
#: variance to ~1e-10 (checked below), and is far below the smallest standard error.
LOG_EULER_ALLOWANCE = 2e-3
#: Repricing tolerance of the vanillas under local volatility (the issue's 0.3 vol points).
REPRICE_TOL = 0.003


# ---------------------------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------------------------
def tenor_time(tenor: str) -> float:
    return year_fraction(VAL, parse_tenor(tenor).add_to(VAL), "ACT/365F")


def ssvi_total_variance(k: np.ndarray, theta: float) -> np.ndarray:
    """Gatheral & Jacquier's SSVI total variance at forward log-moneyness ``k``."""
    phi = SSVI_ETA / (theta**SSVI_GAMMA * (1.0 + theta) ** (1.0 - SSVI_GAMMA))
    return theta / 2.0 * (1.0 + SSVI_RHO * phi * k
                          + np.sqrt((phi * k + SSVI_RHO) ** 2 + 1.0 - SSVI_RHO**2))


@functools.cache
def ssvi_vols(rate: float = R, q: float = Q, strikes: tuple[float, ...] = tuple(STRIKES)
              ) -> tuple[tuple[float, ...], ...]:
    """Black vols of the SSVI surface at TENORS x strikes (fractions of the escrowed spot),
    strikes turned into forward log-moneyness ``log(m) - (r - q) T`` (flat rates)."""
    rows = []
    for tenor in TENORS:
        t = tenor_time(tenor)
        k = np.log(np.array(strikes)) - (rate - q) * t
        w = ssvi_total_variance(k, SSVI_ATM**2 * t)
        rows.append(tuple(float(v) for v in np.sqrt(w / t)))
    return tuple(rows)


def toml_value(v) -> str:
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, date):
        return v.isoformat()
    if isinstance(v, list | tuple):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(x)}" for k, x in v.items()) + " }"
    return repr(float(v)) if isinstance(v, float) else str(v)


def asset_toml(name: str, spot: float, *, q: float = Q, vol=None, surface=None,
               dividends=None, extra: str = "") -> str:
    lines = [f"[assets.{name}]", f"spot = {spot!r}", f"dividend_yield = {q!r}"]
    if vol is not None:
        lines.append(f"vol = {vol!r}")
    if dividends is not None:
        lines.append("dividends = " + toml_value(
            [{"ex_date": d, "amount": x} for d, x in dividends]))
    lines.extend(line for line in extra.splitlines() if line)
    if surface is not None:
        lines.append(f"[assets.{name}.vol_surface]")
        lines.extend(f"{k} = {toml_value(v)}" for k, v in surface.items())
    return "\n".join(lines) + "\n"


def ssvi_surface(rate: float = R, q: float = Q) -> dict:
    return {"tenors": TENORS, "strikes": STRIKES, "vols": [list(r) for r in ssvi_vols(rate, q)]}


def market_text(*assets: str, rate: float = R) -> str:
    head = (f'valuation_date = {VAL.isoformat()}\ncurrency = "EUR"\nday_count = "ACT/365F"\n\n'
            f"[discount]\nrate = {rate!r}\n\n")
    return head + "\n".join(assets)


def write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def european_toml(strike: float, expiry: date, right: str = "put", asset: str = "NORDA") -> str:
    return (f'kind = "european"\nasset = "{asset}"\nright = "{right}"\nstrike = {strike!r}\n'
            f"expiry = {expiry.isoformat()}\n")


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    """Market and product files shared by the tests (written once)."""
    d = tmp_path_factory.mktemp("smile")
    out = {
        "ssvi": write(d / "ssvi.toml", market_text(
            asset_toml("NORDA", S0, surface=ssvi_surface()))),
        "put": write(d / "put.toml", european_toml(90.0, SIX_MONTHS)),
        "put_3m": write(d / "put_3m.toml", european_toml(95.0, THREE_MONTHS)),
    }
    return out


@functools.cache
def ssvi_market(strikes: tuple[float, ...] = tuple(STRIKES), q: float = Q,
                dividends: tuple = ()) -> fp.Market:
    """NORDA with the SSVI surface (r 3%, q 1% unless told), built in code as load_market
    would (strikes as fractions of the escrowed spot when there are cash dividends)."""
    surface = VolSurface(tuple(tenor_time(t) for t in TENORS), strikes,
                         ssvi_vols(R, q, strikes))
    asset = fp.Asset("NORDA", S0, fp.VolCurve.flat(1.0), q, dividends=dividends)
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (attach_surface(asset, surface, fp.DiscountCurve.flat(R)),))


def flat_surface_market(vol: float = 0.25, *, dividends=(), q: float = Q) -> fp.Market:
    surface = VolSurface((0.25, 0.5, 1.0, 2.0), (0.5, 0.8, 1.0, 1.25, 2.0),
                         tuple((vol,) * 5 for _ in range(4)))
    asset = fp.Asset("NORDA", S0, fp.VolCurve.flat(1.0), q, dividends=dividends)
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (attach_surface(asset, surface, fp.DiscountCurve.flat(R)),))


def implied_vol(price: float, spot: float, strike: float, t: float, right: str,
                rate: float = R, q: float = Q) -> float:
    """Black-Scholes-Merton implied vol (fairpath.closed_form, brentq)."""
    return brentq(lambda s: cf.bsm_price(spot, strike, t, rate, q, s, right) - price, 1e-4, 3.0,
                  xtol=1e-12)


def within(res, ref: float, k: float = 4.0, allowance: float = 0.0) -> bool:
    return abs(res.price - ref) <= k * res.stderr + allowance



def price_json(capsys, product: Path, market: Path, *extra) -> dict:
    code, out, err = run(["price", product, "--market", market, "--json", *extra], capsys)
    assert code == 0, err
    return json.loads(out)



# ---------------------------------------------------------------------------------------------
# 0. Market files with a surface and dividends
# ---------------------------------------------------------------------------------------------
def test_market_file_with_a_surface_and_dividends(tmp_path):
    # references: present values and forwards computed here from the flat rate (q = 0)
    divs = ((date(2027, 9, 15), 1.5), (date(2027, 3, 15), 1.5))  # out of order in the file
    path = write(tmp_path / "m.toml", market_text(
        asset_toml("NORDA", S0, q=0.0, surface=ssvi_surface(R, 0.0), dividends=divs),
        asset_toml("KELPA", 40.0, vol=0.3)))
    m = fp.load_market(path)
    a = m.asset("NORDA")
    assert a.dividends == tuple(sorted(divs))
    pv = sum(x * math.exp(-R * m.time(d)) for d, x in divs)
    assert m.escrowed_spot("NORDA") == pytest.approx(S0 - pv, abs=1e-12)
    for d in (date(2027, 1, 4), date(2027, 6, 1), ONE_YEAR):
        t = m.time(d)
        to_come = sum(x * math.exp(-R * (m.time(e) - t)) for e, x in divs if e > d)
        assert m.forward("NORDA", t) == pytest.approx((S0 - pv) * math.exp(R * t) + to_come,
                                                      abs=1e-10)
        assert m.x_forward("NORDA", t) == pytest.approx((S0 - pv) * math.exp(R * t),
                                                        abs=1e-10)
    # strikes are fractions of the escrowed spot: at the escrowed forward, SSVI's 22% (up to
    # the interpolation between the quoted strikes)
    for t in a.surface.times:
        assert float(a.surface.implied(t, math.exp(R * t))) == pytest.approx(SSVI_ATM, abs=2e-4)
    assert m.local_vol(["NORDA", "KELPA"]) == ("NORDA",)
    caps = {n: fp.ModelSet.resolve(m, [n]).capabilities for n in ("NORDA", "KELPA")}
    assert Capability.LOGNORMAL not in caps["NORDA"] and Capability.LOGNORMAL in caps["KELPA"]
    assert m.asset("KELPA").surface is None and m.asset("KELPA").dividends == ()


@pytest.mark.parametrize("times, strikes, vols, key", [
    ((0.5, 1.0), (0.9, 1.0, 1.1), ((0.2, 0.2, 0.2),), "vol_surface.vols"),
    ((0.5, 1.0), (0.9, 1.0, 1.1), ((0.2, 0.0, 0.2), (0.2, 0.2, 0.2)), "vol_surface.vols"),
    ((1.0, 0.5), (0.9, 1.0, 1.1), ((0.2, 0.2, 0.2), (0.2, 0.2, 0.2)), "vol_surface.tenors"),
    ((0.5, 1.0), (1.0, 0.9, 1.1), ((0.2, 0.2, 0.2), (0.2, 0.2, 0.2)), "vol_surface.strikes"),
])
def test_surface_in_code_refuses_bad_shapes(times, strikes, vols, key):
    with pytest.raises(InputError) as info:
        VolSurface(times, strikes, vols)
    assert info.value.key == key


def test_surface_in_code_refuses_ragged_rows():
    with pytest.raises(InputError) as info:
        VolSurface((0.5, 1.0), (0.9, 1.0, 1.1), ((0.2, 0.2, 0.2), (0.2, 0.2)))
    assert info.value.key == "vol_surface.vols"


# ---------------------------------------------------------------------------------------------
# 1. A flat surface is Black-Scholes-Merton
# ---------------------------------------------------------------------------------------------
def test_local_variance_of_a_flat_surface_is_the_flat_variance():
    # reference: Dupire's formula of w(T, y) = sigma^2 T gives sigma^2 everywhere
    m = flat_surface_market(0.25)
    table = m.asset("NORDA").surface.local_variance_table(np.linspace(0.0, 1.5, 40))
    assert table.floored == 0
    assert np.max(np.abs(np.sqrt(table.variance) - 0.25)) < 1e-10


def test_local_variance_of_a_surface_flat_in_strike_is_the_forward_variance():
    # reference: with w(T, y) = w(T) (no smile), Dupire's local variance is dw/dT, the forward
    # variance between tenors (linear total variance in T: constant between tenors)
    vols = (0.30, 0.25, 0.22)
    times = (0.25, 0.5, 1.0)
    s = VolSurface(times, (0.7, 1.0, 1.3), tuple((v,) * 3 for v in vols))
    table = s.local_variance_table(np.array([0.1, 0.3, 0.7, 1.2]))
    w = [v * v * t for v, t in zip(vols, times, strict=True)]
    expected = [vols[0] ** 2, (w[1] - w[0]) / 0.25, (w[2] - w[1]) / 0.5, vols[2] ** 2]
    assert table.floored == 0
    for row, ref in zip(table.variance, expected, strict=True):
        assert np.max(np.abs(row - ref)) < 1e-10, (row[:3], ref)


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_flat_surface_prices_are_bsm(sampler):
    # reference: Black-Scholes-Merton (fairpath.closed_form) at the flat vol
    m = flat_surface_market(0.25)
    prods = [fp.European(asset="NORDA", right=right, strike=k, expiry=exp)
             for exp in (SIX_MONTHS, ONE_YEAR)
             for k, right in ((80.0, "put"), (100.0, "call"), (100.0, "put"), (120.0, "call"))]
    results = fp.price_many(prods, m, paths=32768, sampler=sampler, seed=21)
    assert any("local volatility" in n for n in results[0].notes)
    for p, res in zip(prods, results, strict=True):
        ref = cf.bsm_price(S0, p.strike, m.time(p.expiry), R, Q, 0.25, p.right)
        assert res.stderr > 0
        assert within(res, ref, allowance=LOG_EULER_ALLOWANCE), (p, res.price, ref, res.stderr)


# ---------------------------------------------------------------------------------------------
# 2. Reprice the vanillas of a skewed, arbitrage-free surface
# ---------------------------------------------------------------------------------------------
def test_ssvi_surface_passes_the_arbitrage_checks(files):
    # reference: Gatheral & Jacquier's conditions eta (1 + |rho|) <= 2, 0 < gamma <= 1/2
    assert SSVI_ETA * (1 + abs(SSVI_RHO)) <= 2 and 0 < SSVI_GAMMA <= 0.5
    m = fp.load_market(files["ssvi"])
    a = m.asset("NORDA")
    assert a.surface is not None
    a.surface.check()  # no arbitrage found
    # the at-the-money term structure is the SSVI at-the-money vol (the quotes' forward
    # moneyness is that of the market's forward)
    assert np.allclose(a.surface.atm_vols(), SSVI_ATM, atol=1e-4)
    assert a.vol.vols == a.surface.atm_vols()
    # the quotes are reproduced exactly at the pillars
    for i, t in enumerate(a.surface.times):
        assert np.allclose(a.surface.implied(t, np.array(STRIKES)), ssvi_vols()[i], atol=1e-12)


def test_reprice_the_vanillas_under_local_vol():
    # reference: implied vols by inverting Black-Scholes-Merton (fairpath.closed_form) against
    # the input surface; out-of-the-money options (puts below the spot, calls from it)
    m = ssvi_market()
    surface = m.asset("NORDA").surface
    prods = [fp.European(asset="NORDA", right="put" if k < 100 else "call", strike=k,
                         expiry=exp)
             for exp in (SIX_MONTHS, ONE_YEAR) for k in (80.0, 90.0, 100.0, 110.0, 120.0)]
    results = fp.price_many(prods, m, paths=65536, seed=11)
    diffs = []
    for p, res in zip(prods, results, strict=True):
        t = m.time(p.expiry)
        iv = implied_vol(res.price, S0, p.strike, t, p.right)
        ref = float(surface.implied(t, p.strike / S0))
        # the Monte Carlo error in vol terms stays well inside the tolerance
        vega = cf.bsm_price(S0, p.strike, t, R, Q, iv + 1e-4, p.right) - \
            cf.bsm_price(S0, p.strike, t, R, Q, iv - 1e-4, p.right)
        assert res.stderr / (vega / 2e-4) < 0.001
        diffs.append((p.expiry, p.strike, iv - ref))
    assert all(abs(d) <= REPRICE_TOL for *_, d in diffs), diffs
    # the smile is really there: 80 and 120 differ from the money by several vol points
    assert float(surface.implied(1.0, 0.8)) - float(surface.implied(1.0, 1.2)) > 0.08


#: The SSVI surface quoted on a wider strike range (the same smile, wings far from 0.7-1.2).
WIDE_STRIKES = (0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.85, 0.9, 0.95, 1.0, 1.05, 1.1, 1.15, 1.2, 1.3,
                1.5, 1.8, 2.2)


def repriced_vol_errors(m: fp.Market, strikes, expiry: date, steps_per_day: int,
                        paths: int = 65536) -> dict[float, float]:
    """Implied vol (BSM, brentq) of each Monte Carlo price less the surface's vol."""
    surface = m.asset("NORDA").surface
    prods = [fp.European(asset="NORDA", right="put" if k < 100 else "call", strike=k,
                         expiry=expiry) for k in strikes]
    results = fp.price_many(prods, m, paths=paths, seed=11, steps_per_day=steps_per_day)
    t = m.time(expiry)
    return {p.strike: implied_vol(res.price, S0, p.strike, t, p.right)
            - float(surface.implied(t, p.strike / S0))
            for p, res in zip(prods, results, strict=True)}


@pytest.mark.parametrize("steps_per_day", [1, 4])
def test_reprice_from_the_wings_in_with_finer_steps(steps_per_day):
    # reference: BSM implied vols against the input surface. Quoted on 0.3..2.2, the SSVI
    # smile reprices from 0.7 to 1.2 at one year, and finer steps do not make it worse
    errors = repriced_vol_errors(ssvi_market(WIDE_STRIKES), (70.0, 80.0, 100.0, 120.0),
                                 ONE_YEAR, steps_per_day)
    assert all(abs(e) <= REPRICE_TOL for e in errors.values()), errors


@pytest.mark.parametrize("strike, steps_per_day", [(70.0, 1), (80.0, 4)])
def test_reprice_near_the_wing_quotes(strike, steps_per_day):
    # reference: Black-Scholes-Merton implied vol against the input surface, as above
    errors = repriced_vol_errors(ssvi_market(), (strike,), ONE_YEAR, steps_per_day)
    assert abs(errors[strike]) <= REPRICE_TOL, errors


def test_validate_has_the_local_vol_rows():
    # the repricing check is also one of `fairpath validate`'s rows
    from fairpath import validate

    cases = [c for c in validate.default_cases() if "local vol" in c.name]
    assert any("flat surface" in c.name for c in cases), [c.name for c in cases]
    assert any("SSVI" in c.name for c in cases), [c.name for c in cases]
    results = validate.run(cases)
    assert all(r.ok for r in results), results


# ---------------------------------------------------------------------------------------------
# 3. Arbitrage is refused, naming where
# ---------------------------------------------------------------------------------------------
CAL_STRIKES = [0.8, 0.9, 1.0, 1.1, 1.2]
CAL_SURFACE = {"tenors": ["6M", "1Y"], "strikes": CAL_STRIKES,
               # at 1.1 the 1Y vol is so much lower that total variance falls: 0.25^2 x 0.5
               # = 0.031 at 6M, 0.17^2 x 1 = 0.029 at 1Y (the 6M row is flat: no butterfly)
               "vols": [[0.25] * 5, [0.25, 0.25, 0.25, 0.17, 0.25]]}
FLY_SURFACE = {"tenors": ["6M", "1Y"], "strikes": CAL_STRIKES,
               # a concave spike at the money in the 1Y row: w'' << 0 there, Gatheral's
               # g(k) = (1 - k w'/2w)^2 - w'^2/4 (1/w + 1/4) + w''/2 < 0
               "vols": [[0.26, 0.25, 0.24, 0.235, 0.23], [0.25, 0.24, 0.40, 0.23, 0.225]]}


def test_calendar_arbitrage_is_refused_naming_tenor_and_strike(tmp_path):
    # reference: total variance must not fall with maturity at fixed forward moneyness
    w6, w1 = 0.25**2 * tenor_time("6M"), 0.17**2 * tenor_time("1Y")
    assert w1 < w6
    path = write(tmp_path / "surface_a.toml", market_text(
        asset_toml("NORDA", S0, q=R, surface=CAL_SURFACE)))  # q = r: forward = spot
    with pytest.raises(InputError) as info:
        fp.load_market(path)
    msg = str(info.value)
    assert "\n" not in msg
    assert "calendar arbitrage" in msg, msg
    assert "surface_a.toml" in msg and "assets.NORDA.vol_surface" in msg
    assert "strike 1.1 " in msg, msg
    assert "tenor 6M to 1Y" in msg, msg  # the tenors as the file writes them


def test_butterfly_arbitrage_is_refused_naming_tenor_and_strike(tmp_path):
    # reference: Gatheral's density condition g(k) >= 0 (Gatheral & Jacquier 2014, Lemma 2.2)
    path = write(tmp_path / "surface_b.toml", market_text(
        asset_toml("NORDA", S0, q=R, surface=FLY_SURFACE)))
    with pytest.raises(InputError) as info:
        fp.load_market(path)
    msg = str(info.value)
    assert "\n" not in msg
    assert "butterfly arbitrage" in msg, msg
    assert "surface_b.toml" in msg and "assets.NORDA.vol_surface" in msg
    assert "strike 1 " in msg, msg
    assert "tenor 1Y " in msg, msg
    # the same surface without the spike is accepted
    fixed = dict(FLY_SURFACE, vols=[FLY_SURFACE["vols"][0], [0.25, 0.24, 0.235, 0.23, 0.225]])
    fp.load_market(write(tmp_path / "fixed.toml", market_text(
        asset_toml("NORDA", S0, q=R, surface=fixed))))


def test_arbitrage_through_the_cli_is_one_line(tmp_path, capsys):
    path = write(tmp_path / "surface_b.toml", market_text(
        asset_toml("NORDA", S0, q=R, surface=FLY_SURFACE)))
    prod = write(tmp_path / "put.toml", european_toml(95.0, THREE_MONTHS))
    code, out, err = run(["price", prod, "--market", path, "--json"], capsys)
    assert_bad_input(code, out, err, "surface_b.toml", "assets.NORDA.vol_surface",
                     "butterfly arbitrage", "strike 1 ")


def test_arbitrage_message_names_the_tenor_as_written(tmp_path):
    path = write(tmp_path / "surface_a.toml", market_text(
        asset_toml("NORDA", S0, q=R, surface=CAL_SURFACE)))
    with pytest.raises(InputError) as info:
        fp.load_market(path)
    assert "calendar arbitrage" in str(info.value)
    assert "6M" in str(info.value) and "1Y" in str(info.value), str(info.value)


# ---------------------------------------------------------------------------------------------
# 4. Discrete cash dividends
# ---------------------------------------------------------------------------------------------
def qdate(d: date) -> ql.Date:
    return ql.Date(d.day, d.month, d.year)


def quantlib_dividend_price(strike: float, right: str, expiry: date, *, q: float = 0.0,
                            vol: float = 0.25, engine: str = "analytic",
                            dividends=DIVIDENDS) -> float:
    """QuantLib's price of a European under cash dividends, flat r, q and vol, ACT/365F."""
    ql.Settings.instance().evaluationDate = qdate(VAL)
    dc = ql.Actual365Fixed()
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(S0)),
        ql.YieldTermStructureHandle(ql.FlatForward(qdate(VAL), q, dc, ql.Continuous)),
        ql.YieldTermStructureHandle(ql.FlatForward(qdate(VAL), R, dc, ql.Continuous)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(qdate(VAL), ql.NullCalendar(), vol,
                                                           dc)))
    divs = ql.DividendVector([qdate(d) for d, _ in dividends], [x for _, x in dividends])
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call if right == "call" else ql.Option.Put, strike),
        ql.EuropeanExercise(qdate(expiry)))
    if engine == "analytic":
        option.setPricingEngine(ql.AnalyticDividendEuropeanEngine(process, divs))
    else:
        model = (ql.FdBlackScholesVanillaEngine.Spot if engine == "fd-spot"
                 else ql.FdBlackScholesVanillaEngine.Escrowed)
        option.setPricingEngine(ql.FdBlackScholesVanillaEngine(
            process, divs, 400, 800, 0, ql.FdmSchemeDesc.Douglas(), False, -ql.nullDouble(),
            model))
    return option.NPV()


def dividend_market(*, q: float = 0.0, vol: float = 0.25, dividends=DIVIDENDS) -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (fp.Asset("NORDA", S0, fp.VolCurve.flat(vol), q, dividends=dividends),))


DIV_OPTIONS = [(k, right) for k in (90.0, 100.0, 110.0) for right in ("call", "put")]


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_dividends_against_quantlib_analytic_engine(sampler):
    # reference: QuantLib AnalyticDividendEuropeanEngine (escrowed model), q = 0
    m = dividend_market()
    prods = [fp.European(asset="NORDA", right=right, strike=k, expiry=ONE_YEAR)
             for k, right in DIV_OPTIONS]
    results = fp.price_many(prods, m, paths=65536, sampler=sampler, seed=2)
    assert any("escrowed" in n for n in results[0].notes)
    for p, res in zip(prods, results, strict=True):
        ref = quantlib_dividend_price(p.strike, p.right, ONE_YEAR)
        assert within(res, ref), (p.strike, p.right, res.price, ref, res.stderr)
        # the dividends matter: far more than the error bar
        no_div = cf.bsm_price(S0, p.strike, 1.0, R, 0.0, 0.25, p.right)
        assert abs(no_div - ref) > 20 * res.stderr


def test_dividends_under_a_flat_surface_against_quantlib():
    # reference: QuantLib AnalyticDividendEuropeanEngine; a flat surface goes through the local
    # volatility engine (daily log-Euler steps of the escrowed level) with the dividends
    m = flat_surface_market(0.25, dividends=DIVIDENDS, q=0.0)
    prods = [fp.European(asset="NORDA", right=right, strike=k, expiry=ONE_YEAR)
             for k, right in ((90.0, "put"), (100.0, "call"), (110.0, "call"))]
    results = fp.price_many(prods, m, paths=32768, seed=5)
    assert any("local volatility" in n for n in results[0].notes)
    for p, res in zip(prods, results, strict=True):
        ref = quantlib_dividend_price(p.strike, p.right, ONE_YEAR)
        assert within(res, ref, allowance=LOG_EULER_ALLOWANCE), (p, res.price, ref, res.stderr)


def test_dividends_against_quantlib_finite_differences():
    # references: QuantLib FdBlackScholesVanillaEngine with the dividends, 400 x 800 grid.
    # Escrowed model (fairpath's): within 4 standard errors plus the grid's error (measured
    # against the analytic engine at under 2e-4; allowance 1e-3).
    # Spot model (the level itself diffuses at 25% and drops by the amount): a different model.
    # Model tolerance 0.25 in price (measured differences 0.14-0.16 for two 1.5 dividends on
    # a 100 spot, 1% to 2.8% of these prices); the spot model is worth more, calls and puts
    # alike, since its vol acts on the whole level rather than on the level less the dividends.
    m = dividend_market()
    prods = [fp.European(asset="NORDA", right=right, strike=k, expiry=ONE_YEAR)
             for k, right in DIV_OPTIONS]
    results = fp.price_many(prods, m, paths=65536, seed=3)
    for p, res in zip(prods, results, strict=True):
        escrowed = quantlib_dividend_price(p.strike, p.right, ONE_YEAR, engine="fd-escrowed")
        spot = quantlib_dividend_price(p.strike, p.right, ONE_YEAR, engine="fd-spot")
        assert within(res, escrowed, allowance=1e-3), (p, res.price, escrowed, res.stderr)
        assert abs(res.price - spot) <= 4 * res.stderr + 0.25, (p, res.price, spot)
        assert spot > res.price + 4 * res.stderr


def test_dividends_with_a_yield_against_quantlib():
    # reference: QuantLib AnalyticDividendEuropeanEngine with q = 1% and the two dividends
    m = dividend_market(q=Q)
    prods = [fp.European(asset="NORDA", right=right, strike=100.0, expiry=ONE_YEAR)
             for right in ("call", "put")]
    results = fp.price_many(prods, m, paths=65536, seed=2)
    for p, res in zip(prods, results, strict=True):
        ref = quantlib_dividend_price(100.0, p.right, ONE_YEAR, q=Q)
        assert within(res, ref), (p.right, res.price, ref, res.stderr)


def pv_dividends(m: fp.Market, dividends=DIVIDENDS) -> float:
    return sum(x * math.exp(-R * m.time(d)) for d, x in dividends)


@pytest.mark.parametrize("kind", ["flat vol", "surface"])
def test_put_call_parity_with_dividends(kind):
    # reference: put-call parity, C - P = (S0 - PV(D)) e^{-qT} - K DF, with PV(D) computed here
    # (q = 0: without a yield every convention for the dividends' present value agrees)
    m = (dividend_market(q=0.0) if kind == "flat vol"
         else ssvi_market(q=0.0, dividends=DIVIDENDS))
    q = m.asset("NORDA").dividend_yield
    k = 95.0
    call, put, zero = (fp.European(asset="NORDA", right=r, strike=s, expiry=ONE_YEAR)
                       for r, s in (("call", k), ("put", k), ("call", 0.0)))
    df = math.exp(-R * m.time(ONE_YEAR))
    parity = (S0 - pv_dividends(m)) * math.exp(-q * m.time(ONE_YEAR)) - k * df
    c, p = fp.price_many([call, put], m, paths=32768, seed=9)
    assert abs(c.price - p.price - parity) <= 4 * math.hypot(c.stderr, p.stderr), \
        (c.price - p.price, parity)
    # exactly, on the same paths with the controls off: C - P = (zero-strike call) - K DF
    c0, p0, z0 = fp.price_many([call, put, zero], m, paths=8192, seed=9, control=False)
    assert abs((c0.price - p0.price) - (z0.price - k * df)) < 1e-9
    assert within(z0, (S0 - pv_dividends(m)) * math.exp(-q * m.time(ONE_YEAR)))


@pytest.mark.parametrize("kind", ["flat vol", "surface"])
def test_the_level_drops_by_the_dividend_on_its_ex_date(kind):
    # reference: the martingale property (a zero-strike call is worth DF x forward) around an
    # ex-date, and the escrowed model's floor: the level is never below the dividends to come
    ex = date(2027, 3, 15)  # a Monday
    before = date(2027, 3, 12)  # the Friday before
    after = date(2027, 3, 16)
    divs = ((ex, 2.0),)
    m = (dividend_market(q=0.0, dividends=divs) if kind == "flat vol"
         else ssvi_market(q=0.0, dividends=divs))
    f_before, f_ex = m.forward("NORDA", m.time(before)), m.forward("NORDA", m.time(ex))
    # the forward drops by the amount, less three days' carry of the level (under 0.03)
    assert abs((f_before - f_ex) - 2.0) < 0.03, f_before - f_ex
    assert m.escrow("NORDA", m.time(before)) > 1.99 and m.escrow("NORDA", m.time(ex)) == 0.0
    zeros = [fp.European(asset="NORDA", right="call", strike=0.0, expiry=d)
             for d in (before, ex, after)]
    # a put struck at the dividend still to come on the Friday: never in the money
    floor = fp.European(asset="NORDA", right="put",
                        strike=float(m.escrow("NORDA", m.time(before))), expiry=before)
    results = fp.price_many([*zeros, floor], m, paths=16384, seed=4, control=False)
    for d, res in zip((before, ex, after), results[:3], strict=True):
        ref = m.forward("NORDA", m.time(d)) * math.exp(-R * m.time(d))
        assert within(res, ref), (d, res.price, ref, res.stderr)
    undiscounted = [res.price * math.exp(R * m.time(d))
                    for d, res in zip((before, ex, after), results[:3], strict=True)]
    drop = undiscounted[0] - undiscounted[1]
    assert abs(drop - (f_before - f_ex)) <= 4 * (results[0].stderr + results[1].stderr)
    assert results[3].price == 0.0


def test_surface_is_read_on_the_escrowed_level():
    # reference: Black-Scholes-Merton implied vols on the escrowed spot S0 - PV(D): after the
    # last dividend the level is the escrowed part, whose implied vols the surface quotes at
    # strikes as fractions of the escrowed spot (q = 0 here)
    m = ssvi_market(q=0.0, dividends=DIVIDENDS)
    a = m.asset("NORDA")
    x0 = m.escrowed_spot("NORDA")
    assert abs(x0 - (S0 - pv_dividends(m))) < 1e-12
    prods = [fp.European(asset="NORDA", right="put" if k < 100 else "call", strike=k,
                         expiry=ONE_YEAR) for k in (85.0, 100.0, 115.0)]
    results = fp.price_many(prods, m, paths=32768, seed=13)
    t = m.time(ONE_YEAR)
    for p, res in zip(prods, results, strict=True):
        iv = implied_vol(res.price, x0, p.strike, t, p.right, q=0.0)
        ref = float(a.surface.implied(t, p.strike / x0))
        assert abs(iv - ref) <= REPRICE_TOL, (p.strike, iv, ref)


# ---------------------------------------------------------------------------------------------
# 5. The smile moves exotic prices the way a practitioner expects
# ---------------------------------------------------------------------------------------------
def two_asset_market() -> fp.Market:
    kelpa = fp.Asset("KELPA", 40.0, fp.VolCurve.flat(0.30), 0.0)
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (ssvi_market().asset("NORDA"), kelpa),
                     correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, 0.5), (0.5, 1.0))))


def test_down_and_in_put_is_worth_more_under_a_downward_skew():
    # property: under a downward skew (rho < 0) the vol is higher where the put knocks in and
    # pays, so the down-and-in put is worth more than with the at-the-money vols
    m = ssvi_market()
    dip = fp.Barrier(asset="NORDA", right="put", strike=100.0, expiry=ONE_YEAR, barrier=80.0,
                     direction="down", effect="in", monitoring="daily")
    skew = fp.price(dip, m, paths=16384, seed=4)
    flat = fp.price(dip, m.with_flat_vol(), paths=16384, seed=4)
    assert skew.price - flat.price > 4 * math.hypot(skew.stderr, flat.stderr), (skew, flat)


def test_worst_of_autocallable_is_worth_less_under_a_downward_skew():
    # property: the note is long the coupons and short a knock-in put on the worst; the skew
    # raises the knock-in put's value, so the note is worth less than with at-the-money vols
    m = two_asset_market()
    note = fp.Autocallable(assets=("NORDA", "KELPA"),
                           observations=(THREE_MONTHS, SIX_MONTHS, date(2027, 9, 1), ONE_YEAR),
                           autocall_level=1.0, coupon=0.02, coupon_barrier=0.7,
                           protection_barrier=0.7, protection_monitoring="daily",
                           notional=1000.0, memory=True)
    skew = fp.price(note, m, paths=16384, seed=4)
    flat = fp.price(note, m.with_flat_vol(), paths=16384, seed=4)
    assert flat.price - skew.price > 4 * math.hypot(skew.stderr, flat.stderr), (skew, flat)
    # the flat-vol market keeps KELPA as it was and NORDA's at-the-money term structure
    flat_m = m.with_flat_vol()
    assert flat_m.asset("KELPA") == m.asset("KELPA")
    assert flat_m.asset("NORDA").surface is None
    assert flat_m.asset("NORDA").vol == m.asset("NORDA").vol


# ---------------------------------------------------------------------------------------------
# 6. The command line
# ---------------------------------------------------------------------------------------------
def atm_market_text(m: fp.Market) -> str:
    """The SSVI market with the surface replaced by its at-the-money term structure."""
    vols = m.asset("NORDA").surface.atm_vols()
    return market_text(asset_toml("NORDA", S0, extra=f"vol_tenors = {toml_value(TENORS)}\n"
                                  f"vols = {toml_value([float(v) for v in vols])}"))


def test_cli_flat_vol_is_the_at_the_money_term_structure(files, tmp_path, capsys):
    atm = write(tmp_path / "atm.toml", atm_market_text(fp.load_market(files["ssvi"])))
    args = ("--paths", "16384", "--seed", "7")
    local = price_json(capsys, files["put"], files["ssvi"], *args)
    flat = price_json(capsys, files["put"], files["ssvi"], "--flat-vol", *args)
    plain = price_json(capsys, files["put"], atm, *args)
    # the 90 put (6M) sits on the skew: the smile is worth far more than the error bars
    assert local["price"] - flat["price"] > 4 * math.hypot(local["stderr"], flat["stderr"])
    assert any("local volatility" in n for n in local["notes"])
    assert not any("local volatility" in n for n in flat["notes"])
    assert flat["price"] == pytest.approx(plain["price"], rel=1e-12, abs=1e-12)
    assert flat["stderr"] == pytest.approx(plain["stderr"], rel=1e-9, abs=1e-12)


def test_cli_steps_per_day(files, capsys):
    args = ("--paths", "16384", "--seed", "7")
    one = price_json(capsys, files["put_3m"], files["ssvi"], *args)
    four = price_json(capsys, files["put_3m"], files["ssvi"], "--steps-per-day", "4", *args)
    assert any("4 per day" in n for n in four["notes"]), four["notes"]
    assert not any("per day" in n for n in one["notes"])
    # finer steps change the discretisation only: the prices agree within their errors plus
    # an allowance of 0.02 (a fifth of a vol point of this put's vega, about 0.19 per point)
    assert abs(one["price"] - four["price"]) <= \
        4 * math.hypot(one["stderr"], four["stderr"]) + 0.02
    code, out, err = run(["price", files["put_3m"], "--market", files["ssvi"],
                          "--steps-per-day", "0"], capsys)
    assert code == 2 and "--steps-per-day" in err and "Traceback" not in err


def test_cli_check_adds_the_flat_vol_price(files, tmp_path, capsys):
    prod = write(tmp_path / "put.toml", european_toml(95.0, THREE_MONTHS))
    quotes = write(tmp_path / "quotes.csv", "product,quote\nput.toml,3.10\n")
    code, out, err = run(["check", quotes, "--market", files["ssvi"], "--paths", "8192",
                          "--seed", "3", "--json"], capsys)
    assert code == 0, err
    rows = json.loads(out)
    assert len(rows) == 1 and rows[0]["status"] == "ok", rows
    row = rows[0]
    assert "flat_vol_price" in row
    flat = fp.price(fp.load_product(prod), fp.load_market(files["ssvi"]).with_flat_vol(),
                    paths=8192, seed=3)
    assert row["flat_vol_price"] == pytest.approx(flat.price, rel=1e-12)
    assert row["price"] > row["flat_vol_price"]  # a 95 put on a downward skew
    # a market without a surface has no such column
    plain = write(tmp_path / "plain.toml", market_text(asset_toml("NORDA", S0, vol=0.22)))
    code, out, err = run(["check", quotes, "--market", plain, "--paths", "4096", "--json"],
                         capsys)
    assert code == 0, err
    assert "flat_vol_price" not in json.loads(out)[0]


def bad_surface(**change) -> dict:
    s = {"tenors": ["6M", "1Y"], "strikes": [0.8, 1.0, 1.2],
         "vols": [[0.26, 0.24, 0.23], [0.25, 0.23, 0.22]]}
    s.update(change)
    return s


BAD_INPUTS = {
    "surface and vol": (asset_toml("NORDA", S0, vol=0.2, surface=bad_surface()),
                        "assets.NORDA", "vol_surface"),
    "surface and vol_tenors": (asset_toml("NORDA", S0, surface=bad_surface(), extra=(
        'vol_tenors = ["1Y"]\nvols = [0.2]')), "assets.NORDA", "vol_surface"),
    "row too short": (asset_toml("NORDA", S0, surface=bad_surface(
        vols=[[0.26, 0.24, 0.23], [0.25, 0.23]])), "assets.NORDA.vol_surface.vols[1]"),
    "too few rows": (asset_toml("NORDA", S0, surface=bad_surface(vols=[[0.26, 0.24, 0.23]])),
                     "assets.NORDA.vol_surface.vols"),
    "zero vol": (asset_toml("NORDA", S0, surface=bad_surface(
        vols=[[0.26, 0.24, 0.23], [0.25, 0.0, 0.22]])), "assets.NORDA.vol_surface.vols[1][1]"),
    "negative vol": (asset_toml("NORDA", S0, surface=bad_surface(
        vols=[[0.26, -0.24, 0.23], [0.25, 0.23, 0.22]])),
        "assets.NORDA.vol_surface.vols[0][1]"),
    "unsorted tenors": (asset_toml("NORDA", S0, surface=bad_surface(tenors=["1Y", "6M"])),
                        "assets.NORDA.vol_surface.tenors"),
    "unsorted strikes": (asset_toml("NORDA", S0, surface=bad_surface(
        strikes=[0.8, 1.2, 1.0])), "assets.NORDA.vol_surface.strikes"),
    "dividend above the spot": (asset_toml("NORDA", S0, vol=0.2, dividends=(
        (date(2027, 3, 15), 60.0), (date(2027, 9, 15), 45.0))), "assets.NORDA.dividends"),
    "zero dividend": (asset_toml("NORDA", S0, vol=0.2, dividends=((date(2027, 3, 15), 0.0),)),
                      "assets.NORDA.dividends[0].amount"),
    "negative dividend": (asset_toml("NORDA", S0, vol=0.2, dividends=(
        (date(2027, 3, 15), -1.0),)), "assets.NORDA.dividends[0].amount"),
    "two dividends on one date": (asset_toml("NORDA", S0, vol=0.2, dividends=(
        (date(2027, 3, 15), 1.0), (date(2027, 3, 15), 0.5))), "assets.NORDA.dividends"),
}


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_cli_bad_market_input(case, files, tmp_path, capsys):
    text, *fragments = BAD_INPUTS[case]
    path = write(tmp_path / "bad_market.toml", market_text(text))
    code, out, err = run(["price", files["put_3m"], "--market", path, "--json"], capsys)
    assert_bad_input(code, out, err, "bad_market.toml", *fragments)


def test_dividend_outside_the_product_is_ignored_with_a_note(files, tmp_path, capsys):
    # an ex-date before the valuation date and one after the product's expiry: accepted,
    # ignored, each with a note; the price is that of the market without them
    divs = ((date(2026, 11, 2), 1.0), (date(2027, 2, 15), 1.5), (date(2027, 6, 15), 2.0))
    with_divs = write(tmp_path / "divs.toml", market_text(
        asset_toml("NORDA", S0, vol=0.25, dividends=divs)))
    inside = write(tmp_path / "inside.toml", market_text(
        asset_toml("NORDA", S0, vol=0.25, dividends=divs[1:2])))
    d = price_json(capsys, files["put_3m"], with_divs, "--paths", "8192", "--seed", "1")
    ref = price_json(capsys, files["put_3m"], inside, "--paths", "8192", "--seed", "1")
    for ex in ("2026-11-02", "2027-06-15"):
        assert any(ex in n and "ignored" in n for n in d["notes"]), (ex, d["notes"])
    assert not any("2027-02-15" in n for n in d["notes"])
    assert any("escrowed" in n for n in d["notes"])
    assert d["price"] == pytest.approx(ref["price"], rel=1e-12)
    # in code: the same notes on the result
    res = fp.price(fp.load_product(files["put_3m"]), fp.load_market(with_divs), paths=4096)
    assert sum("ignored" in n for n in res.notes) == 2


# ---------------------------------------------------------------------------------------------
# 7. Greeks under local volatility
# ---------------------------------------------------------------------------------------------
def shifted_market(m: fp.Market, dv: float) -> fp.Market:
    a = m.asset("NORDA")
    return m.with_asset(dataclasses.replace(a, surface=a.surface.shifted(dv),
                                            vol=a.vol.shifted(dv)))


def test_vega_bumps_the_whole_surface():
    # reference: a central finite difference of two prices with every quote of the surface
    # moved by +-0.01, on the same random numbers (controls off, as the Greeks' scenarios)
    m = ssvi_market()
    put = fp.European(asset="NORDA", right="put", strike=95.0, expiry=SIX_MONTHS)
    g = fp.greeks(put, m, paths=16384, seed=8, cross_gamma=False)
    up = fp.price(put, shifted_market(m, 0.01), paths=16384, seed=8, control=False)
    down = fp.price(put, shifted_market(m, -0.01), paths=16384, seed=8, control=False)
    fd = (up.price - down.price) / 0.02
    vega = g.vega["NORDA"]
    assert vega.method.startswith("bump")
    assert vega.value == pytest.approx(fd, rel=1e-9)
    assert vega.value > 10 * vega.stderr
    # it is the surface that moves the price: the at-the-money vol curve kept beside it (used
    # by --flat-vol) bumped alone, the surface unchanged, leaves a European's price as it was
    a = m.asset("NORDA")
    vol_only = [fp.price(put, m.with_asset(dataclasses.replace(a, vol=a.vol.shifted(dv))),
                         paths=16384, seed=8, control=False).price for dv in (0.01, -0.01)]
    assert vol_only[0] == pytest.approx(vol_only[1], abs=1e-12)
    # and it is a plausible vega: a Black-Scholes-Merton vega at the put's implied vol
    t = m.time(SIX_MONTHS)
    iv = float(m.asset("NORDA").surface.implied(t, 0.95))
    bsm_vega = (cf.bsm_price(S0, 95.0, t, R, Q, iv + 1e-4, "put")
                - cf.bsm_price(S0, 95.0, t, R, Q, iv - 1e-4, "put")) / 2e-4
    assert 0.8 * bsm_vega < vega.value < 1.2 * bsm_vega, (vega.value, bsm_vega)


@pytest.mark.parametrize("method", ["pathwise", "lr", "auto"])
def test_greeks_under_local_vol(method):
    # local vol from a surface quoted in fractions of spot, no cash dividends: every level is
    # proportional to the spot, so the pathwise delta applies; vega (no flat vol) and gamma are
    # bumped, and the likelihood ratio (no normal first step in the spot) is not used
    m = ssvi_market()
    put = fp.European(asset="NORDA", right="put", strike=95.0, expiry=THREE_MONTHS)
    g = fp.greeks(put, m, paths=4096, seed=8, method=method, cross_gamma=False)
    for greek in (g.gamma["NORDA"], g.vega["NORDA"]):
        assert greek.method.startswith("bump"), greek
    assert any("local volatility" in n for n in g.notes), g.notes
    if method in ("pathwise", "auto"):
        assert g.delta["NORDA"].method == "pathwise"
        assert any("pathwise vega" in n for n in g.notes), g.notes
        # reference: the central bump on the same numbers (allowance 0.5% for its O(h^2) bias)
        b = fp.greeks(put, m, paths=4096, seed=8, method="bump", cross_gamma=False)
        d, e = g.delta["NORDA"], b.delta["NORDA"]
        assert abs(d.value - e.value) <= 4 * math.hypot(d.stderr, e.stderr) \
            + 0.005 * abs(e.value)
    else:
        assert g.delta["NORDA"].method.startswith("bump")
        assert any("likelihood-ratio" in n and "bumped" in n for n in g.notes), g.notes


def test_digital_greeks_under_local_vol_do_not_use_the_likelihood_ratio():
    m = ssvi_market()
    dig = fp.Digital(asset="NORDA", right="put", strike=95.0, expiry=THREE_MONTHS)
    g = fp.greeks(dig, m, paths=4096, seed=8, method="auto", cross_gamma=False)
    assert g.delta["NORDA"].method.startswith("bump")
    assert g.gamma["NORDA"].method.startswith("bump")


@pytest.mark.parametrize("method", ["auto", "lr"])
def test_notes_say_the_surface_turns_off_the_likelihood_ratio(method):
    m = ssvi_market()
    dig = fp.Digital(asset="NORDA", right="put", strike=95.0, expiry=THREE_MONTHS)
    g = fp.greeks(dig, m, paths=4096, seed=8, method=method, cross_gamma=False)
    assert any("likelihood" in n and ("surface" in n or "local vol" in n) for n in g.notes), \
        g.notes

"""Heston Monte Carlo (``model = "heston"``: Andersen's QE scheme with his martingale correction,
:mod:`fairpath.models.heston`) against references, and the refusals of bad Heston input.

References:
* The semi-analytic Heston price, :func:`fairpath.fourier.heston_price` (Lewis's single integral
  of the "little Heston trap" characteristic function), checked against QuantLib's
  ``AnalyticHestonEngine`` to 1e-8 relative in ``tests/test_fourier.py``. Digitals are its
  central difference in the strike (-dC/dK; the truncation error is far below the tolerances).
* Andersen (2008), "Simple and efficient simulation of the Heston stochastic volatility model",
  his three demanding test cases (spot 100, zero rates, v0 = theta, strikes 70/100/140). Case I
  is as in the example of PyFENG's ``HestonMcAndersen2008`` (v0 = theta = 0.04, vol of vol 1,
  kappa 0.5, rho -0.9, 10 years; its quoted at-the-money value 13.085 is what the Fourier price
  gives); Cases II and III are from memory.
* Closed forms of the forward: with cash dividends under the escrowed model (formats.md; the
  level grows at r - q and drops by D_i on each ex-date t_i) the discounted expected level at t
  is ``S0 e^{-qt} - sum over t_i <= t of D_i e^{-r t_i - q (t - t_i)}``, and a European after the
  last ex-date is the Heston price on the escrowed spot ``S0 - sum D_i e^{-(r - q) t_i}``.
* Independence: two Heston assets whose spot shocks are uncorrelated are independent (each
  variance shock is tied to its own spot only), so a dual digital is the product of the two
  digitals (times the inverse of the discount factor).

Every Monte Carlo check is ``|MC - reference| <= 4 standard errors (+ a stated discretisation
allowance)`` at a fixed seed. The allowances come from ``benchmarks/heston_bias.py`` (output in
``docs/heston_bias.md``), measured at the default step of at most 7 days on 524,288
pseudo-random paths: there no bias stood out of the noise in any of Andersen's nine
case-strikes (nor at any step up to 91 days), and the allowance is the measured |MC - Fourier|
of the case-strike, or of the nearest case.
"""

from __future__ import annotations

import math
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest

import fairpath as fp
import fairpath.models.heston as heston_module
from clitools import assert_bad_input, run
from fairpath.fourier import heston_price

VAL = date(2026, 12, 1)
STRIKES = (70.0, 100.0, 140.0)
#: Andersen (2008)'s cases: (v0, kappa, theta, vol_of_vol, spot_vol_correlation, years)
CASES = {
    "I": (0.04, 0.5, 0.04, 1.0, -0.9, 10),
    "II": (0.04, 0.3, 0.04, 0.9, -0.5, 15),   # from memory
    "III": (0.09, 1.0, 0.09, 1.0, -0.3, 5),   # from memory
}
#: |MC - Fourier| measured by benchmarks/heston_bias.py at the default step (7 days), 524,288
#: pseudo-random paths, per case and strike 70/100/140 (docs/heston_bias.md; stderr there
#: 0.003-0.037 and none beyond 2 standard errors of zero: these bound the bias, not resolve it)
ALLOWANCE = {
    "I": (0.0169, 0.0236, 0.0048),
    "II": (0.0014, 0.0258, 0.0454),
    "III": (0.0180, 0.0121, 0.0138),
}


def expiry_in(years: float) -> date:
    """A date a whole number of 365-day years away, so that the ACT/365F time is exactly T."""
    return VAL + timedelta(days=round(365 * years))


def heston_lines(name: str, params, spot: float = 100.0, extra: str = "") -> str:
    v0, kappa, theta, xi, rho = params[:5]
    return (f"[assets.{name}]\nspot = {spot!r}\nmodel = \"heston\"\n{extra}"
            f"[assets.{name}.heston]\nv0 = {v0!r}\nkappa = {kappa!r}\ntheta = {theta!r}\n"
            f"vol_of_vol = {xi!r}\nspot_vol_correlation = {rho!r}\n")


def write_market(folder: Path, body: str, rate: float = 0.0, name: str = "market.toml"
                 ) -> Path:
    f = folder / name
    f.write_text(f"valuation_date = {VAL.isoformat()}\ncurrency = \"EUR\"\n[discount]\n"
                 f"rate = {rate!r}\n{body}")
    return f


def write_product(folder: Path, name: str, body: str) -> Path:
    f = folder / name
    f.write_text(body)
    return f


def european(folder: Path, asset: str, right: str, strike: float, expiry: date,
             name: str | None = None) -> fp.Product:
    body = (f"kind = \"european\"\nasset = \"{asset}\"\nright = \"{right}\"\n"
            f"strike = {strike!r}\nexpiry = {expiry.isoformat()}\n")
    return fp.load_product(write_product(folder, name or f"{asset}_{right}_{strike:g}.toml",
                                         body))


def level_at(folder: Path, asset: str, when: date) -> fp.Product:
    """Pays the asset's level on ``when``, on that date (a forward bought for nothing)."""
    body = (f"kind = \"formula\"\nassets = [\"{asset}\"]\ndates = {{ dates = "
            f"[{when.isoformat()}] }}\nexpression = \"{asset}[0]\"\n"
            f"pay_date = {when.isoformat()}\n")
    return fp.load_product(write_product(folder, f"level_{asset}_{when}.toml", body))


def fourier(params, spot, strike, T, r, q, right="call") -> float:
    v0, kappa, theta, xi, rho = params[:5]
    return heston_price(spot, strike, T, r, q, v0, kappa, theta, xi, rho, right)


def fourier_digital(params, spot, strike, T, r) -> float:
    """The discounted probability of ending above ``strike``: -dC/dK by a central difference
    (the price's error of 1e-8 relative divided by the step stays below 1e-6)."""
    h = 1e-3 * strike
    return (fourier(params, spot, strike - h, T, r, 0.0)
            - fourier(params, spot, strike + h, T, r, 0.0)) / (2 * h)


# ---------------------------------------------------------------------------------------------
# Andersen's cases
# ---------------------------------------------------------------------------------------------
def level_control(asset: str, when: date) -> tuple[str, ...]:
    """The name of the engine's control variate on the discounted level (its mean, the
    discounted forward, is exact under the scheme by the martingale correction). Tests of the
    scheme impose it alone: a control whose mean is the Fourier price (a call at the forward,
    fairpath.models.heston) would pull the estimate to the reference and hide the bias."""
    return (f"discounted {asset} on {when.isoformat()}",)


@pytest.mark.parametrize("case", CASES)
def test_andersen_cases_against_the_fourier_price(case, tmp_path):
    params = CASES[case]
    T = params[5]
    market = fp.load_market(write_market(tmp_path, heston_lines("NORDA", params)))
    calls = [european(tmp_path, "NORDA", "call", k, expiry_in(T)) for k in STRIKES]
    only = level_control("NORDA", expiry_in(T))
    results = fp.price_many(calls, market, paths=1 << 16, seed=18, sampler="sobol",
                            control_set=only)
    assert "Feller condition" in " ".join(results[0].notes)  # every case violates it
    for k, r, allow in zip(STRIKES, results, ALLOWANCE[case], strict=True):
        assert r.controls == only
        ref = fourier(params, 100.0, k, T, 0.0, 0.0)
        assert abs(r.price - ref) <= 4 * r.stderr + allow, (case, k, r.price, r.stderr, ref)


def test_default_controls_with_rates_and_a_yield(tmp_path):
    # what a user gets (every control variate the engine offers), with r and q not zero so that
    # the controls' known means depend on the forward: Case III's parameters
    params = CASES["III"]
    r, q, T = 0.03, 0.01, 5.0
    market = fp.load_market(write_market(
        tmp_path, heston_lines("NORDA", params, extra=f"dividend_yield = {q!r}\n"), rate=r))
    calls = [european(tmp_path, "NORDA", "call", k, expiry_in(T)) for k in STRIKES]
    results = fp.price_many(calls, market, paths=1 << 15, seed=21)
    for k, res, allow in zip(STRIKES, results, ALLOWANCE["III"], strict=True):
        ref = fourier(params, 100.0, k, T, r, q)
        assert abs(res.price - ref) <= 4 * res.stderr + allow, (k, res.price, res.stderr, ref)


def test_richardson_removes_the_bias_of_coarse_steps(tmp_path, monkeypatch):
    # Case I at the money with yearly steps: the plain price (no control variates, as
    # Richardson's) is biased by many standard errors (benchmark: +0.22, 20 stderr at 2^19
    # paths); Richardson's extrapolation from half-year steps on the same Brownian paths comes
    # back to the Fourier price, and the bias it reports is the plain run's error
    monkeypatch.setattr(heston_module, "MAX_STEP_DAYS", 365.0)
    params = CASES["I"]
    market = fp.load_market(write_market(tmp_path, heston_lines("NORDA", params)))
    call = european(tmp_path, "NORDA", "call", 100.0, expiry_in(10))
    ref = fourier(params, 100.0, 100.0, 10.0, 0.0, 0.0)
    plain = fp.price(call, market, paths=1 << 16, seed=7, control=False)
    rich = fp.price(call, market, paths=1 << 16, seed=7, richardson=True)
    assert "at most 365 days" in " ".join(plain.notes)
    assert abs(plain.price - ref) > 5 * plain.stderr, (plain.price, plain.stderr, ref)
    assert abs(rich.price - ref) <= 4 * rich.stderr, (rich.price, rich.stderr, ref)
    assert abs(rich.price - ref) < abs(plain.price - ref)
    # the bias it reports, 2 (coarse - fine) on the same paths, is the error of the plain run
    # without control variates (to first order in the step: QE's bias is not exactly linear in
    # it, so within the two error bars only)
    bias = rich.extras["discretisation_bias"]
    err = plain.price - ref
    assert abs(bias["estimate"] - err) <= 4 * math.hypot(bias["stderr"], plain.stderr), \
        (bias, err)


# With --richardson the result says "the plain price ... was X, and its steps' bias is measured
# at B": X must be the price B describes, the plain run without control variates (with them, a
# Heston European sits on the Fourier price itself, which carries no such bias).
def test_richardson_reports_the_bias_of_the_plain_price_it_names(tmp_path, monkeypatch):
    monkeypatch.setattr(heston_module, "MAX_STEP_DAYS", 365.0)
    params = CASES["I"]
    market = fp.load_market(write_market(tmp_path, heston_lines("NORDA", params)))
    call = european(tmp_path, "NORDA", "call", 100.0, expiry_in(10))
    ref = fourier(params, 100.0, 100.0, 10.0, 0.0, 0.0)
    bias = fp.price(call, market, paths=1 << 16, seed=7, richardson=True
                    ).extras["discretisation_bias"]
    err = bias["plain_price"] - ref
    assert abs(err - bias["estimate"]) <= 4 * math.hypot(bias["stderr"], bias["plain_stderr"]), \
        (bias, err)


# ---------------------------------------------------------------------------------------------
# The forward: cash dividends, and the martingale correction under a huge vol of vol
# ---------------------------------------------------------------------------------------------
def test_cash_dividends_keep_the_forward_and_the_escrowed_price(tmp_path):
    params = (0.09, 1.0, 0.09, 1.0, -0.3)
    r, q = 0.03, 0.01
    divs = ((date(2027, 6, 15), 2.0), (date(2027, 12, 15), 2.5), (date(2028, 6, 15), 2.0),
            (date(2028, 12, 15), 2.5))
    div_line = ("dividends = [" + ", ".join(f"{{ ex_date = {d.isoformat()}, amount = {a!r} }}"
                                            for d, a in divs) + "]\n"
                f"dividend_yield = {q!r}\n")
    market = fp.load_market(write_market(tmp_path, heston_lines("NORDA", params, extra=div_line),
                                         rate=r))
    dates = (date(2027, 6, 14), date(2027, 6, 16), date(2028, 1, 5), date(2029, 6, 1))
    products = [level_at(tmp_path, "NORDA", d) for d in dates]
    res = fp.price_many(products, market, paths=1 << 15, seed=3, control=False)
    for d, x in zip(dates, res, strict=True):
        t = (d - VAL).days / 365.0
        paid = sum(a * math.exp(-r * ti - q * (t - ti)) for ti, a in
                   (((e - VAL).days / 365.0, a) for e, a in divs) if ti <= t)
        ref = 100.0 * math.exp(-q * t) - paid
        assert abs(x.price - ref) <= 4 * x.stderr, (d, x.price, x.stderr, ref)
    # a call after every ex-date: the Heston price of the escrowed level (spot less the present
    # value of the dividends, each discounted at r and grown back at the yield's rate q)
    T = (dates[-1] - VAL).days / 365.0
    x0 = 100.0 - sum(a * math.exp(-r * (e - VAL).days / 365.0 + q * (e - VAL).days / 365.0)
                     for e, a in divs)
    call = european(tmp_path, "NORDA", "call", 95.0, dates[-1])
    c = fp.price(call, market, paths=1 << 15, seed=4)
    ref = fourier(params, x0, 95.0, T, r, q)
    # allowance: Case III's (the same parameters, 5 years) largest measured |bias| at 7 days
    assert abs(c.price - ref) <= 4 * c.stderr + max(ALLOWANCE["III"]), (c.price, c.stderr, ref)


@pytest.mark.parametrize("step", [None, 91.0])
@pytest.mark.parametrize("xi", [5.0, 2.0])
def test_martingale_correction_under_a_huge_vol_of_vol(xi, step, tmp_path, monkeypatch):
    # the discounted level has the spot's mean (less the yield) whatever the step: Andersen's
    # martingale correction makes E[X(t + D) | X(t), v(t)] exact in every step; at 91-day steps
    # the scheme's variance law is at its crudest, so this is the correction's doing
    if step is not None:
        monkeypatch.setattr(heston_module, "MAX_STEP_DAYS", step)
    kappa, rho = 0.5, -0.9
    # at this correlation the level's moments up to the fourth stay finite at every horizon
    # (no moment explosion: b = kappa - 4 rho xi > 0 and b^2 >= 12 xi^2), so the sample's
    # standard error measures its error; at rho >= 0 and such vols of vol the second moment
    # explodes within a few years and no error bar could be trusted
    b = kappa - 4 * rho * xi
    assert b > 0 and b * b >= 12 * xi * xi
    params = (0.04, kappa, 0.04, xi, rho)
    r, q = 0.05, 0.02
    market = fp.load_market(write_market(
        tmp_path, heston_lines("NORDA", params, extra=f"dividend_yield = {q!r}\n"), rate=r))
    res = fp.price(level_at(tmp_path, "NORDA", expiry_in(10)), market, paths=1 << 15, seed=11,
                   sampler="pseudo", control=False)
    ref = 100.0 * math.exp(-q * 10.0)
    assert abs(res.price - ref) <= 4 * res.stderr, (res.price, res.stderr, ref)
    assert 4 * res.stderr < 0.01 * ref  # the check would see a drift error of 1%


# ---------------------------------------------------------------------------------------------
# Two Heston assets
# ---------------------------------------------------------------------------------------------
def test_two_independent_heston_assets(tmp_path):
    norda = (0.09, 1.0, 0.09, 1.0, -0.3)
    kelpa = (0.0625, 2.0, 0.05, 0.7, -0.7)
    r, T = 0.02, 3.0
    body = (heston_lines("NORDA", norda) + heston_lines("KELPA", kelpa, spot=50.0)
            + "[correlation]\nassets = [\"NORDA\", \"KELPA\"]\n"
            "matrix = [[1.0, 0.0], [0.0, 1.0]]\n")
    market = fp.load_market(write_market(tmp_path, body, rate=r))
    when = expiry_in(T)
    k1, k2 = 105.0, 48.0
    payoffs = {  # each on both assets, so that one simulation prices them all
        "dual": f"where(NORDA[0] > {k1!r} and KELPA[0] > {k2!r}, 100, 0)",
        "norda_digital": f"where(NORDA[0] > {k1!r}, 100, 0)",
        "kelpa_digital": f"where(KELPA[0] > {k2!r}, 100, 0)",
        "norda_call": f"max(NORDA[0] - {k1!r}, 0)",
        "kelpa_put": f"max({k2!r} - KELPA[0], 0)",
    }
    products = [fp.load_product(write_product(tmp_path, f"{name}.toml", (
        "kind = \"formula\"\nassets = [\"NORDA\", \"KELPA\"]\n"
        f"dates = {{ dates = [{when.isoformat()}] }}\nexpression = \"{expr}\"\n"
        f"pay_date = {when.isoformat()}\n"))) for name, expr in payoffs.items()]
    # no control variates: the scheme's own prices (see level_control)
    res = fp.price_many(products, market, paths=1 << 16, seed=5, control=False)
    d1 = fourier_digital(norda, 100.0, k1, T, r)
    d2 = fourier_digital(kelpa, 50.0, k2, T, r)
    refs = [100.0 * d1 * d2 * math.exp(r * T), 100.0 * d1, 100.0 * d2,
            fourier(norda, 100.0, k1, T, r, 0.0), fourier(kelpa, 50.0, k2, T, r, 0.0, "put")]
    for name, x, ref in zip(payoffs, res, refs, strict=True):
        assert abs(x.price - ref) <= 4 * x.stderr, (name, x.price, x.stderr, ref)
    # the test tells independence from perfectly correlated levels (which would give the
    # smaller digital) by many standard errors
    assert 100.0 * min(d1, d2) * math.exp(r * T) - refs[0] > 8 * res[0].stderr


# ---------------------------------------------------------------------------------------------
# Bad input: one line, exit 2, the key named
# ---------------------------------------------------------------------------------------------
GOOD = {"v0": "0.04", "kappa": "0.5", "theta": "0.04", "vol_of_vol": "1.0",
        "spot_vol_correlation": "-0.9"}


def heston_block(**changes) -> str:
    """The NORDA heston block with keys changed (None: left out) or added."""
    keys = {**GOOD, **changes}
    return "[assets.NORDA.heston]\n" + "".join(f"{k} = {v}\n" for k, v in keys.items()
                                                if v is not None)


def price_cli(tmp_path, capsys, asset_lines: str, block: str, days: int = 3650):
    market = write_market(tmp_path, "[assets.NORDA]\nspot = 100.0\n" + asset_lines + block,
                          name="bad.toml")
    product = write_product(tmp_path, "call.toml", (
        "kind = \"european\"\nasset = \"NORDA\"\nright = \"call\"\nstrike = 100.0\n"
        f"expiry = {(VAL + timedelta(days=days)).isoformat()}\n"))
    return run(["price", product, "--market", market, "--paths", "1024"], capsys)


HESTON = "model = \"heston\"\n"


@pytest.mark.parametrize("asset_lines, block, fragments", [
    (HESTON, heston_block(v0="-0.04"), ("assets.NORDA.heston.v0", "negative")),
    (HESTON, heston_block(theta="-0.01"), ("assets.NORDA.heston.theta", "negative")),
    (HESTON, heston_block(spot_vol_correlation="-1.2"),
     ("assets.NORDA.heston.spot_vol_correlation", "between -1 and 1")),
    (HESTON, heston_block(spot_vol_correlation="-90"),
     ("assets.NORDA.heston.spot_vol_correlation", "write -0.9")),
    (HESTON, heston_block(vol_of_vol="60"), ("assets.NORDA.heston.vol_of_vol", "write 0.6")),
    (HESTON, heston_block(kappa="-0.5"), ("assets.NORDA.heston.kappa", "negative")),
    (HESTON, heston_block(kappa="80"), ("assets.NORDA.heston.kappa", "half-life")),
    (HESTON, heston_block(theta=None), ("assets.NORDA.heston.theta", "missing")),
    (HESTON, heston_block(v0="\"0.04\""), ("assets.NORDA.heston.v0",)),
    (HESTON, heston_block(calibrate="true"), ("assets.NORDA.heston", "calibrate", "not both")),
    (HESTON, heston_block(mixing="0.5"), ("assets.NORDA.heston.mixing", "lsv")),
    (HESTON + "vol = 0.2\n", "", ("assets.NORDA.model", "[assets.NORDA.heston]")),
])
def test_bad_heston_input_is_refused_naming_the_key(tmp_path, capsys, asset_lines, block,
                                                    fragments):
    assert_bad_input(*price_cli(tmp_path, capsys, asset_lines, block), *fragments)


# A vol in percent typed as a variance (v0 = 20 for a 20% vol, i.e. 0.04) is refused naming
# the key, short or long maturity alike.
@pytest.mark.parametrize("key", ["v0", "theta"])
@pytest.mark.parametrize("days", [7, 3650])
def test_a_vol_in_percent_typed_as_a_variance_is_refused(tmp_path, capsys, key, days):
    code, out, err = price_cli(tmp_path, capsys, HESTON, heston_block(**{key: "20"}), days)
    assert_bad_input(code, out, err, f"assets.NORDA.heston.{key}", "0.04")


# model = "heston" with neither a heston block nor a surface (nor a vol) names the missing
# heston block, not a missing vol.
def test_heston_without_parameters_or_surface_names_the_heston_block(tmp_path, capsys):
    assert_bad_input(*price_cli(tmp_path, capsys, HESTON, ""), "[assets.NORDA.heston]")


def test_heston_notes_name_the_model_and_its_steps(tmp_path):
    params = CASES["III"]
    market = fp.load_market(write_market(tmp_path, heston_lines("NORDA", params)))
    r = fp.price(european(tmp_path, "NORDA", "call", 100.0, expiry_in(1)), market,
                 paths=1 << 12, seed=1, steps_per_day=2)
    notes = " ".join(r.notes)
    assert "Andersen's QE scheme" in notes
    assert f"at most {heston_module.MAX_STEP_DAYS / 2:g} days" in notes
    assert np.isfinite(r.price)

"""Early exercise (American and Bermudan options and Bermudan baskets by least squares,
fairpath.products.exercise; the duality bounds of fairpath.duality) against outside references.

References, each named again beside its check:

* QuantLib 1.44's ``FdBlackScholesVanillaEngine`` (Crank-Nicolson, 1,000 time steps a year,
  800 space points: within 2e-5 of a grid four times finer on Longstaff and Schwartz's cases)
  on a ``VanillaOption`` with a ``BermudanExercise`` on exactly the product's dates;
* QuantLib's ``Fd2dBlackScholesVanillaEngine`` (Hundsdorfer, 200 x 200 x 100) on a
  ``BasketOption`` with a ``MaxBasketPayoff`` and the same ``BermudanExercise`` (within 0.004 of
  a 600 x 600 x 300 grid, measured on the three cases below: 8.0726, 13.9016, 21.3437);
* Longstaff and Schwartz (2001), "Valuing American options by simulation: a simple
  least-squares approach", Review of Financial Studies 14(1), Table 1: finite-difference values
  (a 50-dates-a-year Bermudan), their least-squares estimates and standard errors. FROM MEMORY
  (no copy of the table was found by search); QuantLib's Bermudan reproduces the memory's
  finite-difference column to within 0.006 at every one of the 20 cases (the test allows 0.01);
* Andersen and Broadie (2004), "Primal-dual simulation algorithm for pricing multidimensional
  American options", Management Science 50(9): the two-asset Bermudan max-call's reference
  values 8.075, 13.902, 21.345 (S0 = 90, 100, 110). FROM MEMORY (not found by search);
  QuantLib's 2D finite differences agree to within 0.005;
* Black-Scholes-Merton (QuantLib's ``AnalyticEuropeanEngine``) for the European bounds, and
  Merton (1973) for the call on a non-dividend asset that is never exercised early.

Monte Carlo assertions are a few standard errors at a fixed seed. A least-squares price is a
lower bound for the holder (its policy is frozen on pilot paths independent of the pricing
paths), so the Bermudan checks are one-sided with a stated allowance for the policy's loss.

Runtime: all 20 cases of Table 1 at the default 65,536 Sobol paths (about 1-2 s each on 2
cores); the whole file about 55 s on this 2-core machine (load average 1.3), the duality of the
weekly put 9 s of it.
"""

from __future__ import annotations

import functools
import math
from datetime import date, timedelta

import pytest
import QuantLib as ql

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.products import product_from_dict
from qltools import evaluation_date

VAL = date(2026, 12, 1)
_TODAY = ql.Date(VAL.day, VAL.month, VAL.year)
_DC = ql.Actual365Fixed()


@pytest.fixture(autouse=True, scope="module")
def _ql_evaluation_date():
    with evaluation_date(_TODAY):
        yield


def qdate(d: date) -> ql.Date:
    return ql.Date(d.day, d.month, d.year)


def ql_process(spot, vol, rate, div=0.0):
    flat = ql.YieldTermStructureHandle
    return ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)), flat(ql.FlatForward(_TODAY, div, _DC)),
        flat(ql.FlatForward(_TODAY, rate, _DC)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(_TODAY, ql.NullCalendar(), vol, _DC)))


def market(spot, vol, rate, div=0.0) -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate),
                     (fp.Asset("NORDA", spot, fp.VolCurve.flat(vol), div),))


def bounds_of(res) -> dict:
    """The JSON contract's bounds (``fairpath price --dual --json``)."""
    b = res.to_dict()["bounds"]
    assert set(b) >= {"lower", "upper"}
    assert set(b["lower"]) >= {"value", "stderr"} and set(b["upper"]) >= {"value", "stderr"}
    return b


# --------------------------------------------------------------------------- Longstaff-Schwartz
def ls_dates(years: int) -> tuple[date, ...]:
    """50 exercise dates a year, as in Longstaff and Schwartz's Table 1: the k-th on day
    round(365 k / 50) (ACT/365F, so the dates sit within half a day of k / 50 years); the
    last is the expiry."""
    return tuple(VAL + timedelta(days=round(365 * k / 50)) for k in range(1, 50 * years + 1))


def ls_put(years: int):
    dates = ls_dates(years)
    return product_from_dict({"kind": "american", "asset": "NORDA", "right": "put",
                              "strike": 40.0, "expiry": dates[-1],
                              "exercise_dates": {"dates": list(dates)}})


@functools.cache
def ql_fd_bermudan_put(spot, vol, years, rate=0.06, strike=40.0) -> float:
    """QuantLib's finite differences on the same Bermudan dates (the reference)."""
    opt = ql.VanillaOption(ql.PlainVanillaPayoff(ql.Option.Put, strike),
                           ql.BermudanExercise([qdate(d) for d in ls_dates(years)]))
    opt.setPricingEngine(ql.FdBlackScholesVanillaEngine(
        ql_process(spot, vol, rate), 1000 * years, 800, 0, ql.FdmSchemeDesc.CrankNicolson()))
    return opt.NPV()


# Longstaff and Schwartz (2001), Table 1 (K = 40, r = 6%, no dividends), FROM MEMORY:
# (S, vol, years) -> (finite-difference value, least-squares estimate, its standard error)
LS_TABLE1 = {
    (36, 0.2, 1): (4.478, 4.472, 0.010), (36, 0.2, 2): (4.840, 4.821, 0.012),
    (36, 0.4, 1): (7.101, 7.091, 0.020), (36, 0.4, 2): (8.508, 8.488, 0.024),
    (38, 0.2, 1): (3.250, 3.244, 0.009), (38, 0.2, 2): (3.745, 3.735, 0.011),
    (38, 0.4, 1): (6.148, 6.139, 0.019), (38, 0.4, 2): (7.670, 7.669, 0.022),
    (40, 0.2, 1): (2.314, 2.313, 0.009), (40, 0.2, 2): (2.885, 2.879, 0.010),
    (40, 0.4, 1): (5.312, 5.308, 0.018), (40, 0.4, 2): (6.920, 6.921, 0.022),
    (42, 0.2, 1): (1.617, 1.617, 0.007), (42, 0.2, 2): (2.212, 2.206, 0.010),
    (42, 0.4, 1): (4.582, 4.588, 0.017), (42, 0.4, 2): (6.248, 6.243, 0.021),
    (44, 0.2, 1): (1.110, 1.118, 0.007), (44, 0.2, 2): (1.690, 1.675, 0.009),
    (44, 0.4, 1): (3.948, 3.957, 0.017), (44, 0.4, 2): (5.647, 5.622, 0.021),
}


@pytest.mark.parametrize(("spot", "vol", "years"), sorted(LS_TABLE1))
def test_longstaff_schwartz_table1_against_quantlib_fd(spot, vol, years):
    # all 20 cases at the default 65,536 Sobol paths and the default policy (32,768 pilot
    # paths, powers of S/K up to 3)
    ref = ql_fd_bermudan_put(spot, vol, years)  # QuantLib FdBlackScholesVanillaEngine
    res = fp.price(ls_put(years), market(spot, vol, 0.06), seed=2001)
    diff = res.price - ref
    # a lower bound for the holder: at most 3 stderr plus 0.02 (the frozen policy's loss)
    # below QuantLib's finite-difference Bermudan, never more than 3 stderr above it
    assert diff >= -(3 * res.stderr + 0.02), (res.price, res.stderr, ref)
    assert diff <= 3 * res.stderr, (res.price, res.stderr, ref)

    fd_pub, lsm_pub, se_pub = LS_TABLE1[(spot, vol, years)]  # Longstaff-Schwartz Table 1
    # the reference is the table's own: QuantLib's Bermudan against their finite-difference
    # column (their grid, 40,000 steps a year, differs by up to 0.006 at 2 years and 40% vol)
    assert abs(ref - fd_pub) <= 0.01, (ref, fd_pub)
    # and our estimate against theirs, within 3 combined standard errors
    assert abs(res.price - lsm_pub) <= 3 * math.hypot(res.stderr, se_pub), \
        (res.price, res.stderr, lsm_pub, se_pub)


# Duality on one case, the table's first. The nested simulation's time goes as the outer paths
# times the inner paths times the dates squared: at fp.price(dual=True)'s 512 outer paths it
# takes about 100 s of CPU over 50 dates, so this check asks fairpath.duality.dual_bounds (what
# dual=True runs) for 64 outer paths with the default 1,024 inner ones (about 12 s): the gap,
# which the inner paths set, is the same; its standard error is wider.
LS_DUAL = [(36, 0.2, 1)]


@pytest.mark.parametrize(("spot", "vol", "years"), LS_DUAL)
def test_longstaff_schwartz_duality_brackets_quantlib_fd(spot, vol, years):
    from fairpath.duality import dual_bounds

    ref = ql_fd_bermudan_put(spot, vol, years)  # QuantLib FdBlackScholesVanillaEngine
    res = fp.price(ls_put(years), market(spot, vol, 0.06), seed=2004)
    product, mkt = res.context[0], res.context[1]  # the fitted product, as dual=True uses
    b = dual_bounds(product, mkt, res.price, res.stderr, seed=2004, outer=64).to_dict()
    lo, up = b["lower"], b["upper"]
    # Andersen and Broadie (2004): the lower bound (the price) and the duality upper bound
    # bracket the finite-difference value, each within 3 of its standard errors
    assert lo["value"] - 3 * lo["stderr"] <= ref <= up["value"] + 3 * up["stderr"], (b, ref)
    # and the gap is under 0.05
    assert up["value"] - lo["value"] < 0.05, b


# Duality under local volatility: the inner paths restart from each outer path's level through
# the local-vol stepper (fairpath.models.local_vol.LocalSteps.restart). On a flat surface the
# local vol is the flat vol and the log-Euler steps are exact, so the bounds must bracket the
# same QuantLib finite-difference value as under Black.
FLAT_SURFACE_TOML = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
tenors = ["1Y", "2Y"]
zero_rates = [0.06, 0.06]
[assets.NORDA]
spot = 36.0
[assets.NORDA.vol_surface]
tenors = ["6M", "1Y", "2Y"]
strikes = [0.5, 0.8, 1.0, 1.25, 1.6]
vols = [[0.2, 0.2, 0.2, 0.2, 0.2], [0.2, 0.2, 0.2, 0.2, 0.2], [0.2, 0.2, 0.2, 0.2, 0.2]]
"""


def test_duality_under_local_vol_brackets_quantlib_fd(tmp_path):
    from fairpath.duality import dual_bounds

    path = tmp_path / "flat_surface.toml"
    path.write_text(FLAT_SURFACE_TOML)
    mkt = fp.load_market(path)
    ref = ql_fd_bermudan_put(36, 0.2, 1)  # QuantLib FdBlackScholesVanillaEngine
    res = fp.price(ls_put(1), mkt, seed=2004)
    assert any("local volatility" in n for n in res.notes)  # priced under local vol
    product, m = res.context[0], res.context[1]
    b = dual_bounds(product, m, res.price, res.stderr, seed=2004, outer=64).to_dict()
    lo, up = b["lower"], b["upper"]
    # Andersen and Broadie (2004): the bounds bracket the finite-difference value, each
    # within 3 of its standard errors, and the gap stays under 0.05 as under Black
    assert lo["value"] - 3 * lo["stderr"] <= ref <= up["value"] + 3 * up["stderr"], (b, ref)
    assert up["value"] - lo["value"] < 0.05, b


@pytest.mark.parametrize("model", ["local-vol", "black"])
def test_restarted_paths_keep_the_forward_with_cash_dividends(model):
    # the inner paths of the duality restart from a level; restarted from today's escrowed
    # spot, their mean level on each later date must be the market's forward (the escrowed
    # part a martingale after its drift, plus the dividends to come): 4 standard errors
    import numpy as np

    from fairpath.engine import Simulation
    from fairpath.sampling import make_sampler

    mkt = fp.load_market("markets/demo_smile.toml")
    mkt = mkt.with_model(model)
    prod = product_from_dict({"kind": "european", "asset": "NORDA", "right": "call",
                              "strike": 60.0, "expiry": date(2028, 6, 1)})
    sim = Simulation([prod], mkt, make_sampler("pseudo", seed=1), [[]], None, 1)
    st = sim.stepper
    assert st.escrow is not None  # NORDA pays cash dividends on this market
    n = 20000
    x0 = np.tile(st.log_start, (n, 1))
    last = len(sim.grid_dates) - 1
    x = st.restart(x0, -1, last, np.random.default_rng(7))
    for col in (last // 3, last):
        level = np.exp(x[:, 0, col]) + st.escrow[0, col]
        fwd = float(mkt.forward("NORDA", mkt.time(sim.grid_dates[col])))
        se = level.std(ddof=1) / math.sqrt(n)
        assert abs(level.mean() - fwd) <= 4 * se, (col, level.mean(), fwd, se)


# --------------------------------------------------------------------------- Andersen-Broadie
AB_DATES = tuple(VAL + timedelta(days=round(365 * k / 3)) for k in range(1, 10))
# Andersen and Broadie (2004), two-asset max-call (r 5%, q 10%, vol 20%, rho 0, K 100, 3y,
# 9 dates), FROM MEMORY: S0 -> reference value
AB_PUBLISHED = {90: 8.075, 100: 13.902, 110: 21.345}


def ab_market(spot) -> fp.Market:
    names = ("NORDA", "KELPA")
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(0.05),
                     tuple(fp.Asset(n, spot, fp.VolCurve.flat(0.2), 0.10) for n in names),
                     correlation=fp.Correlation(names, ((1.0, 0.0), (0.0, 1.0))))


def ab_max_call():
    """max(S1, S2) - 100 on any of the nine dates: performances on initial levels of 100,
    strike level 1, notional 100 (a Bermudan basket: kind = "basket" with exercise_dates)."""
    return product_from_dict({
        "kind": "basket", "assets": ["NORDA", "KELPA"], "combine": "best", "right": "call",
        "strike_level": 1.0, "notional": 100.0,
        "initial_levels": {"NORDA": 100.0, "KELPA": 100.0}, "expiry": AB_DATES[-1],
        "exercise_dates": {"dates": list(AB_DATES)}})


@functools.cache
def ql_fd2d_max_call(spot) -> float:
    """QuantLib's 2D finite differences on the same nine dates (the reference)."""
    p = [ql_process(spot, 0.2, 0.05, 0.10) for _ in range(2)]
    opt = ql.BasketOption(ql.MaxBasketPayoff(ql.PlainVanillaPayoff(ql.Option.Call, 100.0)),
                          ql.BermudanExercise([qdate(d) for d in AB_DATES]))
    opt.setPricingEngine(ql.Fd2dBlackScholesVanillaEngine(p[0], p[1], 0.0, 200, 200, 100))
    return opt.NPV()


@pytest.mark.parametrize("spot", sorted(AB_PUBLISHED))
def test_andersen_broadie_max_call_against_quantlib_fd2d(spot):
    ref = ql_fd2d_max_call(spot)  # QuantLib Fd2dBlackScholesVanillaEngine
    # the reference against Andersen and Broadie's published value (FD grid error <= 0.005)
    assert abs(ref - AB_PUBLISHED[spot]) <= 0.01, (ref, AB_PUBLISHED[spot])
    res = fp.price(ab_max_call(), ab_market(spot), seed=2004)
    # the least-squares lower bound within 0.5% (plus 3 stderr) below the 2D finite
    # differences, and not above them by more than 3 stderr plus the FD grid's 0.005
    assert res.price >= ref * (1 - 0.005) - 3 * res.stderr, (res.price, res.stderr, ref)
    assert res.price <= ref + 3 * res.stderr + 0.005, (res.price, res.stderr, ref)


@pytest.mark.parametrize("spot", sorted(AB_PUBLISHED))
def test_andersen_broadie_duality_gap(spot):
    ref = ql_fd2d_max_call(spot)  # QuantLib Fd2dBlackScholesVanillaEngine
    res = fp.price(ab_max_call(), ab_market(spot), seed=2004, dual=True)
    b = bounds_of(res)
    lo, up = b["lower"], b["upper"]
    # Andersen and Broadie (2004): the bounds bracket the 2D finite-difference value (3
    # stderr each, plus the grid's 0.005) and the duality gap is under 1% of the value
    assert lo["value"] - 3 * lo["stderr"] - 0.005 <= ref <= \
        up["value"] + 3 * up["stderr"] + 0.005, (b, ref)
    assert up["value"] - lo["value"] < 0.01 * ref, (b, ref)


# --------------------------------------------------------------------------- American vs European
def ql_european(spot, strike, vol, rate, expiry: date, right: str) -> float:
    """Black-Scholes-Merton, QuantLib's AnalyticEuropeanEngine."""
    opt = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call if right == "call" else ql.Option.Put, strike),
        ql.EuropeanExercise(qdate(expiry)))
    opt.setPricingEngine(ql.AnalyticEuropeanEngine(ql_process(spot, vol, rate)))
    return opt.NPV()


def american(right: str, expiry: date):
    """Exercisable on every weekday close up to expiry (no exercise_dates)."""
    return product_from_dict({"kind": "american", "asset": "NORDA", "right": right,
                              "strike": 40.0, "expiry": expiry})


def test_american_put_at_negative_rate_is_at_least_the_european():
    # A put on a non-dividend asset at a negative rate is never worth exercising early
    # (K - S < K e^{-r tau} - S <= the European put of the remaining life), so the American is
    # the European (Black-Scholes-Merton, QuantLib AnalyticEuropeanEngine): American >= European
    # within 3 stderr, and no more than 3 stderr above it. Exercisable on every weekday close
    # (16,384 paths: the time goes to the pilot fit over 261 dates). Before 3a94ef3 the policy
    # stopped 39% of the paths early here, 3.3803 +- 0.0034 at 65,536 paths (8 stderr low).
    expiry = date(2027, 12, 1)
    euro = ql_european(40.0, 40.0, 0.2, -0.01, expiry, "put")
    res = fp.price(american("put", expiry), market(40.0, 0.2, -0.01), seed=1, paths=16384)
    assert res.price >= euro - 3 * res.stderr, (res.price, res.stderr, euro)
    assert res.price <= euro + 3 * res.stderr, (res.price, res.stderr, euro)


def test_american_call_without_dividends_is_the_european():
    # Merton (1973): a call on a non-dividend asset is never exercised early, so the American
    # is the European (Black-Scholes-Merton, QuantLib AnalyticEuropeanEngine) within 3 stderr.
    # Before 3a94ef3: 4.3903 +- 0.0010 against 4.3958 at 65,536 paths, 15% exercised early.
    expiry = date(2027, 12, 1)
    euro = ql_european(40.0, 40.0, 0.2, 0.06, expiry, "call")
    res = fp.price(american("call", expiry), market(40.0, 0.2, 0.06), seed=1, paths=16384)
    assert abs(res.price - euro) <= 3 * res.stderr, (res.price, res.stderr, euro)


def test_american_put_is_worth_more_than_the_european_at_a_positive_rate():
    # American >= European (Black-Scholes-Merton, QuantLib AnalyticEuropeanEngine), and by the
    # early-exercise premium of QuantLib's finite-difference Bermudan on the same 50 dates:
    # Longstaff and Schwartz's S = 36, vol 20%, one year (premium 0.63)
    expiry = ls_dates(1)[-1]
    euro = ql_european(36.0, 40.0, 0.2, 0.06, expiry, "put")
    premium = ql_fd_bermudan_put(36, 0.2, 1) - euro
    res = fp.price(ls_put(1), market(36.0, 0.2, 0.06), seed=3)
    assert res.price - euro >= premium - 3 * res.stderr - 0.02, (res.price, euro, premium)


# --------------------------------------------------------------------------- reproducibility
@pytest.mark.parametrize("case", ["bermudan put", "bermudan max-call"])
@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_same_price_bit_for_bit_on_any_threads_and_chunk(case, sampler):
    # The policy is fitted once on its own pilot stream and frozen: neither the threads nor
    # the number of paths simulated at once may change a single bit
    if case == "bermudan put":
        product, mkt = ls_put(1), market(36.0, 0.2, 0.06)
    else:
        product, mkt = ab_max_call(), ab_market(100.0)
    kw = dict(paths=32768, seed=11, sampler=sampler)
    one = fp.price(product, mkt, threads=1, **kw)
    two = fp.price(product, mkt, threads=2, **kw)
    chunk = fp.price(product, mkt, threads=2, chunk_paths=1000, **kw)
    for other in (two, chunk):
        assert other.price == one.price
        assert other.stderr == one.stderr
        assert other.exercise == one.exercise
        assert other.diagnostics == one.diagnostics


# --------------------------------------------------------------------------- bad input
MARKET_TOML = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
tenors = ["1Y", "2Y"]
zero_rates = [0.06, 0.06]
[assets.NORDA]
spot = 36.0
vol = 0.2
[assets.KELPA]
spot = 36.0
vol = 0.2
[correlation]
assets = ["NORDA", "KELPA"]
matrix = [[1.0, 0.0], [0.0, 1.0]]
"""

AMERICAN = """kind = "american"
asset = "NORDA"
right = "put"
expiry = 2027-12-01
"""
BASKET = """kind = "basket"
assets = ["NORDA", "KELPA"]
combine = "best"
right = "call"
strike_level = 1.0
expiry = 2027-12-01
"""

BAD = {
    "exercise date after expiry": (
        AMERICAN + 'strike = 40.0\nexercise_dates = { dates = [2027-06-01, 2027-12-08] }\n',
        ("exercise_dates", "2027-12-08", "after the expiry")),
    "weekly schedule running past expiry": (
        AMERICAN + 'strike = 40.0\n'
        'exercise_dates = { first = 2026-12-08, every = "1W", count = 60 }\n',
        ("exercise_dates", "after the expiry")),
    "exercise date on the valuation date": (
        AMERICAN + 'strike = 40.0\nexercise_dates = { dates = [2026-12-01, 2027-06-01] }\n',
        ("exercise_dates", "2026-12-01", "valuation date")),
    "exercise date before the valuation date": (
        AMERICAN + 'strike = 40.0\nexercise_dates = { dates = [2026-11-02, 2027-06-01] }\n',
        ("exercise_dates", "2026-11-02", "valuation date")),
    "zero strike": (AMERICAN + "strike = 0.0\n", ("strike",)),
    "negative strike": (AMERICAN + "strike = -40.0\n", ("strike",)),
    "pilot_paths 255": (AMERICAN + "strike = 40.0\npilot_paths = 255\n", ("pilot_paths", "256")),
    "pilot_paths 0": (AMERICAN + "strike = 40.0\npilot_paths = 0\n", ("pilot_paths",)),
    "basis_degree 0": (AMERICAN + "strike = 40.0\nbasis_degree = 0\n", ("basis_degree",)),
    "basis_degree 9": (AMERICAN + "strike = 40.0\nbasis_degree = 9\n", ("basis_degree",)),
    "basket exercise date after expiry": (
        BASKET + "exercise_dates = { dates = [2027-06-01, 2028-01-04] }\n",
        ("exercise_dates", "after the expiry")),
    "basket exercise date before the valuation date": (
        BASKET + "exercise_dates = { dates = [2026-06-01, 2027-06-01] }\n",
        ("exercise_dates", "valuation date")),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_input_is_one_line_exit_2(case, tmp_path, capsys):
    text, fragments = BAD[case]
    (tmp_path / "m.toml").write_text(MARKET_TOML)
    (tmp_path / "p.toml").write_text(text)
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096"], capsys)
    assert_bad_input(code, out, err, *fragments)


DUAL_REFUSED = {
    # --dual on a product with no exercise decision
    "european": ('kind = "european"\nasset = "NORDA"\nright = "put"\nstrike = 40.0\n'
                 "expiry = 2027-12-01\n", [], ("--dual", "American options")),
    # Heston's state is the level and the variance: its paths cannot restart from a level
    "heston": (AMERICAN + 'strike = 40.0\nexercise_dates = { dates = [2027-06-01, 2027-12-01] }\n',
               [], ("--dual", "heston", "black and local-vol")),
    # every weekday: more exercise dates than the nested simulation takes
    "every weekday": (AMERICAN + "strike = 40.0\n", [], ("--dual", "exercise_dates")),
}

HESTON_TOML = MARKET_TOML.replace("vol = 0.2\n", "vol = 0.2\nmodel = \"heston\"\n"
                                  "[assets.NORDA.heston]\n"
                                  "v0 = 0.04\ntheta = 0.04\nkappa = 1.5\nvol_of_vol = 0.3\n"
                                  "spot_vol_correlation = -0.5\n", 1)


@pytest.mark.parametrize("case", sorted(DUAL_REFUSED))
def test_dual_where_it_cannot_apply_is_one_line_exit_2(case, tmp_path, capsys):
    text, extra, fragments = DUAL_REFUSED[case]
    (tmp_path / "m.toml").write_text(HESTON_TOML if case == "heston" else MARKET_TOML)
    (tmp_path / "p.toml").write_text(text)
    code, out, err = run(["price", tmp_path / "p.toml", "--market", tmp_path / "m.toml",
                          "--paths", "4096", "--dual", *extra], capsys)
    assert_bad_input(code, out, err, *fragments)

"""The duality bound of an issuer-callable note (fairpath.duality.issuer_bounds) against an
outside reference.

The issuer minimises the note's value, so the price under the frozen least-squares call policy
is an upper bound and Andersen and Broadie's (2004) duality, mirrored for a minimisation, gives
the lower one. The reference is the note's value by backward induction on a fine grid of the
log-level with the exact lognormal transition between observation dates (Black-Scholes-Merton
dynamics: a quadrature lattice, written here independently of fairpath's simulation): on each
observation date the coupon is paid where the level is at or above the coupon barrier, and on a
call date the issuer redeems at the call price where that is below the value of holding on.
Single asset, no automatic early redemption, barrier watched at maturity only, no memory: the
state is the level alone, so the lattice's value is exact up to its grid (halving the grid moves
it by 0.014 per 1,000 of notional, against Monte Carlo errors of about 0.2).
"""

from __future__ import annotations

import math
from datetime import date

import numpy as np
import pytest

import fairpath as fp
from fairpath.duality import dual_bounds
from fairpath.products.autocall import Autocallable

VAL = date(2026, 12, 1)
OBS = (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1), date(2028, 12, 1),
       date(2029, 6, 1), date(2029, 12, 3))
SPOT, VOL, RATE, DIV = 100.0, 0.25, 0.03, 0.01


def market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE),
                     (fp.Asset("NORDA", SPOT, fp.VolCurve.flat(VOL), DIV),))


def note(call_price: float) -> Autocallable:
    return Autocallable(assets=("NORDA",), observations=OBS, notional=1000.0,
                        autocall_level=1e6, coupon=0.04, coupon_barrier=0.7,
                        protection_barrier=0.6, protection_monitoring="final",
                        strike_level=1.0, call_dates=OBS[1:-1], call_price=call_price)


def lattice_value(call_price: float | None, points: int = 2001) -> float:
    """The note's value by backward induction on ``points`` log-levels (see the module
    docstring); ``call_price`` None: not callable."""
    m = market()
    times = np.array([m.time(d) for d in OBS])
    width = 8 * VOL * math.sqrt(times[-1])
    x = np.linspace(math.log(SPOT) - width, math.log(SPOT) + width, points)
    s = np.exp(x)
    h = x[1] - x[0]
    w = np.full(points, h)
    w[0] = w[-1] = h / 2  # trapezoid weights
    n = 1000.0
    coupon = np.where(s >= 0.7 * SPOT, 40.0, 0.0)
    redemption = np.where(s <= 0.6 * SPOT, n * s / SPOT, n)
    value = coupon + redemption  # on the last date
    for k in range(len(OBS) - 2, -1, -1):
        dt = times[k + 1] - times[k]
        mean = x + (RATE - DIV - 0.5 * VOL ** 2) * dt
        sd = VOL * math.sqrt(dt)
        dens = np.exp(-0.5 * ((x[None, :] - mean[:, None]) / sd) ** 2) \
            / (sd * math.sqrt(2 * math.pi))
        hold = math.exp(-RATE * dt) * (dens * w[None, :]) @ value
        if call_price is not None and OBS[k] in OBS[1:-1]:
            hold = np.minimum(hold, call_price * n)
        value = coupon + hold
    dt0 = times[0]
    mean0 = math.log(SPOT) + (RATE - DIV - 0.5 * VOL ** 2) * dt0
    sd0 = VOL * math.sqrt(dt0)
    dens0 = np.exp(-0.5 * ((x - mean0) / sd0) ** 2) / (sd0 * math.sqrt(2 * math.pi))
    return float(math.exp(-RATE * dt0) * (dens0 * w) @ value)


def test_lattice_is_converged_and_matches_the_uncallable_monte_carlo():
    # the reference itself: halving the grid moves it by under 0.05 per 1,000, and without
    # the call it agrees with fairpath's plain Monte Carlo price within 4 standard errors
    fine, coarse = lattice_value(1.0, 2001), lattice_value(1.0, 1001)
    assert abs(fine - coarse) < 0.05, (fine, coarse)
    plain = fp.price(note(1.0).__class__(**{**_terms(), "call_dates": ()}), market(), seed=5)
    ref = lattice_value(None)
    assert abs(plain.price - ref) <= 4 * plain.stderr, (plain.price, plain.stderr, ref)


def _terms() -> dict:
    n = note(1.0)
    return {f: getattr(n, f) for f in ("assets", "observations", "notional", "autocall_level",
                                       "coupon", "coupon_barrier", "protection_barrier",
                                       "protection_monitoring", "strike_level")}


@pytest.mark.parametrize("call_price", [1.0, 0.9, 5.0])
def test_issuer_bounds_bracket_the_lattice_value(call_price):
    # par, below par (the issuer calls at the first call date on most paths) and 5x par (it
    # never calls: the callable note is the plain one)
    ref = lattice_value(call_price)
    res = fp.price(note(call_price), market(), seed=2004)
    product, mkt = res.context[0], res.context[1]  # the fitted note, as dual=True uses
    b = dual_bounds(product, mkt, res.price, res.stderr, seed=2004)
    # the price is the issuer's upper bound, duality the lower one: they bracket the value,
    # each within 3 of its standard errors (Andersen and Broadie 2004, mirrored)
    assert b.upper == res.price
    assert b.lower - 3 * b.lower_se <= ref <= b.upper + 3 * b.upper_se, (b, ref)
    # and the gap is under 1% of the value, as Andersen and Broadie's max-call check asks of a
    # holder's option (measured: 1.5 at par and 5.0 at 0.9, where the frozen policy's price is
    # 0.9 and 2.3 above the lattice; 0 at 5x par, where the issuer never calls)
    assert b.gap < 0.01 * ref, b


def test_issuer_bounds_under_local_vol_with_daily_barrier_and_memory():
    # the demo market's smile, a daily-watched barrier and memory coupons: the nested paths
    # restart under local vol with the coupons owed and the barrier state of each outer path;
    # the bounds must still be ordered and close (no outside value for this case)
    mkt = fp.load_market("markets/demo_smile.toml")
    n = fp.load_product("payoffs/autocall_issuer_callable.toml")
    res = fp.price(n, mkt, seed=11, paths=16384)
    product, m = res.context[0], res.context[1]
    b = dual_bounds(product, m, res.price, res.stderr, seed=11, outer=64, inner=256)
    assert b.lower <= b.upper + 3 * b.lower_se, b
    assert b.gap < 0.01 * 1000.0, b


def test_dual_refuses_a_continuously_watched_barrier(tmp_path, capsys):
    # the nested paths restart from closes, and a continuous watch also reads the crossings
    # between them: one line, exit 2
    from pathlib import Path

    from clitools import assert_bad_input, run

    text = Path("payoffs/autocall_issuer_callable.toml").read_text().replace(
        'protection_monitoring = "daily"', 'protection_monitoring = "continuous"')
    (tmp_path / "p.toml").write_text(text)
    code, out, err = run(["price", tmp_path / "p.toml", "--market", "markets/demo.toml",
                          "--paths", "4096", "--dual"], capsys)
    assert_bad_input(code, out, err, "--dual", "continuous")

"""A fast version of the coverage study (``benchmarks/coverage.py``): do the 95% intervals hold
the closed-form value about as often as they claim?

References: Black-Scholes-Merton for the call and the put, the cash-or-nothing formula for the
digital (``Product.reference``, checked against QuantLib elsewhere in the suite). A flat 25% vol,
r 5%, q 2%, spot 100, one year, 4,096 Sobol paths (16 scramblings of 256), seeds 1-60. The
full study uses 200 seeds and asks 92-98%; with 60 seeds the binomial error of a coverage is 2.8
points, so the bound here is looser (88%), and at most one run of the 60 may lie beyond 4
standard errors (Student's t with 15 degrees of freedom puts 0.1% of runs there). While the
controls were chosen as the smallest of several spreads of the 16 scramblings, the digital
covered 90.0% over 200 seeds with 3.5% of runs beyond 4 standard errors, two of them with a
zero error bar.
"""

from __future__ import annotations

import math
import warnings
from datetime import date

import numpy as np
import pytest

import fairpath as fp

VAL, EXPIRY = date(2026, 12, 1), date(2027, 12, 1)
SEEDS = range(1, 61)


def market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(0.05),
                     (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), 0.02),))


PRODUCTS = {
    "call K=105": fp.European(asset="NORDA", right="call", strike=105.0, expiry=EXPIRY),
    "put K=90": fp.European(asset="NORDA", right="put", strike=90.0, expiry=EXPIRY),
    "digital K=130": fp.Digital(asset="NORDA", right="call", strike=130.0, expiry=EXPIRY),
}


@pytest.mark.parametrize("name", PRODUCTS)
def test_sobol_intervals_cover_the_closed_form(name):
    product, m = PRODUCTS[name], market()
    ref = product.reference(m)
    z, covered = [], 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in SEEDS:
            r = fp.price(product, m, paths=4096, seed=seed)
            assert r.stderr > 0, f"seed {seed}: a zero error bar"
            z.append((r.price - ref) / r.stderr)
            covered += r.ci95[0] <= ref <= r.ci95[1]
    z = np.abs(np.array(z))
    share = covered / len(SEEDS)
    assert share >= 0.88, f"{name}: the 95% interval held the closed form in {share:.1%} of runs"
    assert np.sum(z > 4) <= 1, f"{name}: {int(np.sum(z > 4))} runs beyond 4 standard errors"


def test_scramblings_that_agree_give_the_pseudo_random_error_bar_and_say_so():
    """Seed 90: all 16 scramblings of the digital give the same estimate (each counts the same
    paying points of its 256), so their spread is zero. The error bar is then the pseudo-random
    one over the 4,096 paths, and its interval holds the cash-or-nothing value."""
    product, m = PRODUCTS["digital K=130"], market()
    r = fp.price(product, m, paths=4096, seed=90)
    assert any("gave the same estimate" in n for n in r.notes), r.notes
    p = product.reference(m)
    df = float(m.df(EXPIRY))
    mc = df * np.sqrt(p / df * (1 - p / df) / 4096)  # pseudo-random stderr, before controls
    assert 0.5 * mc < r.stderr <= 1.0001 * mc
    assert r.ci95[0] <= p <= r.ci95[1]


# -- discretisation under local volatility ------------------------------------------------------
def _local_vol_market(surface_kind: str) -> fp.Market:
    from fairpath.market import attach_surface
    from fairpath.surface import VolSurface, ssvi_surface

    r, q = 0.03, 0.01
    curve = fp.DiscountCurve.flat(r)
    tenors = (0.25, 0.5, 1.0, 2.0, 3.0)
    strikes = (0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.35, 1.5)
    surface = VolSurface(tenors, strikes, tuple((0.25,) * len(strikes) for _ in tenors)) \
        if surface_kind == "flat" else ssvi_surface(tenors, strikes, 0.22, r, q)
    base = fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), q)
    return fp.Market(VAL, "EUR", curve, (attach_surface(base, surface, curve),))


def test_richardson_on_a_flat_surface_finds_no_step_bias_and_prices_bsm():
    """On a flat surface the local vol is constant and log-Euler steps are exact: the coarse
    and fine paths of the Richardson run end at the same level, so the measured bias is zero
    to rounding, and the price is Black-Scholes-Merton's (reference: closed_form.bsm_price)."""
    from fairpath import closed_form as cf

    m = _local_vol_market("flat")
    put = fp.European(asset="NORDA", right="put", strike=90.0, expiry=EXPIRY)
    r = fp.price(put, m, paths=8192, seed=4, richardson=True)
    bias = r.to_dict()["discretisation_bias"]
    assert abs(bias["estimate"]) < 1e-6 and bias["stderr"] < 1e-6
    ref = float(cf.bsm_price(100.0, 90.0, m.time(EXPIRY), 0.03, 0.01, 0.25, "put"))
    assert abs(r.price - ref) < 4 * r.stderr
    assert any("Richardson" in n for n in r.notes)


def test_local_vol_prices_say_their_error_bar_leaves_out_the_step_bias():
    """A plain local-vol price says that its interval is sampling error alone; with
    --richardson the skewed surface's 80 put is repriced within its error bar plus the local-vol
    table's allowance of 0.3 vol points (reference: Black-Scholes-Merton at the surface's own
    implied vol, as in fairpath validate)."""
    from fairpath import closed_form as cf

    m = _local_vol_market("skew")
    put = fp.European(asset="NORDA", right="put", strike=80.0, expiry=EXPIRY)
    plain = fp.price(put, m, paths=16384, seed=2)
    assert any("sampling error alone" in n for n in plain.notes)
    t = m.time(EXPIRY)
    vol = float(m.assets[0].surface.implied(t, 0.8))
    ref = float(cf.bsm_price(100.0, 80.0, t, 0.03, 0.01, vol, "put"))
    vega = float(cf.bsm_greeks(100.0, 80.0, t, 0.03, 0.01, vol, "put")["vega"])
    r = fp.price(put, m, paths=16384, seed=2, richardson=True)
    assert abs(r.price - ref) < 4 * r.stderr + 0.003 * vega
    # the bias is that of the plain price without control variates, on the Richardson run's
    # own paths: within its errors of the plain run's price
    d = r.to_dict()["discretisation_bias"]
    assert abs(d["plain_price"] - plain.price) < 4 * math.hypot(d["plain_stderr"], plain.stderr)

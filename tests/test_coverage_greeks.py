"""A fast version of the Greeks' coverage study (``benchmarks/coverage_greeks.py``): do the
Greeks' 95% intervals ``value +- q * stderr`` hold the closed-form Greek about as often as they
claim?

One asset, NORDA: spot 100, flat 25% vol, r 5%, q 2%, one year; 4,096 paths per run. Under
Sobol (16 scramblings of 256) a Greek's error bar is the spread of the 16 scramblings' estimates,
so the interval uses Student's t with 15 degrees of freedom (q = 2.131): it claims 0.116% of
runs beyond 4 standard errors and 0.0024% beyond 6. With 40 seeds the binomial error of a 95%
coverage is 3.4 points, so the bound is 85%, and at most one run of the 40 may lie beyond 4
standard errors (at least two happen with a chance of 0.1% if the interval's law holds).

A strict xfail records what the study measured and is not fixed (docs/accuracy_greeks.md): under
Sobol the pathwise and likelihood-ratio deltas have tails far heavier than Student's t. The
bumped vega of a digital whose strike moves few paths across it used to get a zero error bar in
many Sobol runs; it now gets the pseudo-random one.
"""

from __future__ import annotations

import warnings
from datetime import date

import numpy as np
import pytest
from scipy import stats

import fairpath as fp
from fairpath import closed_form as cf

VAL, EXPIRY = date(2026, 12, 1), date(2027, 12, 1)
SPOT, VOL, RATE, DIV, T = 100.0, 0.25, 0.05, 0.02, 1.0
PATHS = 4096
Q_SOBOL = float(stats.t(15).ppf(0.975))  # 2.131
Q_PSEUDO = float(stats.norm.ppf(0.975))  # 1.960


def market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(RATE),
                     (fp.Asset("NORDA", SPOT, fp.VolCurve.flat(VOL), DIV),), "ACT/365F")


def call() -> fp.Product:
    return fp.European(asset="NORDA", right="call", strike=105.0, expiry=EXPIRY)


def digital(strike: float) -> fp.Product:
    return fp.Digital(asset="NORDA", right="call", strike=strike, expiry=EXPIRY)


def runs(product: fp.Product, greek: str, seeds: range, sampler: str = "sobol"):
    """``(value, stderr, method)`` of one Greek of NORDA for each seed."""
    m = market()
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in seeds:
            g = getattr(fp.greeks(product, m, paths=PATHS, sampler=sampler, seed=seed),
                        greek)["NORDA"]
            out.append((g.value, g.stderr, g.method))
    return out


def check_coverage(name: str, rr, ref: float, q: float) -> None:
    """Coverage at least 85% and at most one run beyond 4 standard errors; a zero error bar
    counts as beyond 4 (its interval is a point)."""
    covered = sum(abs(v - ref) <= q * se for v, se, _ in rr)
    beyond4 = sum(se <= 0 or abs(v - ref) > 4 * se for v, se, _ in rr)
    share = covered / len(rr)
    zero = sum(se <= 0 for _, se, _ in rr)
    assert share >= 0.85, (f"{name}: the 95% interval held the closed form in {share:.1%} of "
                           f"{len(rr)} runs ({zero} with a zero error bar)")
    assert beyond4 <= 1, f"{name}: {beyond4} runs of {len(rr)} beyond 4 standard errors"


# Reference: Black-Scholes-Merton closed form (closed_form.bsm_greeks), delta per unit of spot.
def test_call_delta_sobol_intervals_cover_the_closed_form():
    ref = cf.bsm_greeks(SPOT, 105.0, T, RATE, DIV, VOL, "call")["delta"]
    rr = runs(call(), "delta", range(1, 41))
    assert {m for _, _, m in rr} == {"pathwise"}
    check_coverage("call K=105 delta", rr, ref, Q_SOBOL)


# Reference: Black-Scholes-Merton closed form (closed_form.bsm_greeks), vega per 1.00 of vol.
def test_call_vega_sobol_intervals_cover_the_closed_form():
    ref = cf.bsm_greeks(SPOT, 105.0, T, RATE, DIV, VOL, "call")["vega"]
    rr = runs(call(), "vega", range(1, 41))
    assert {m for _, _, m in rr} == {"pathwise"}
    check_coverage("call K=105 vega", rr, ref, Q_SOBOL)


# Reference: cash-or-nothing closed form (closed_form.digital_greeks), delta per unit of spot.
def test_digital_delta_sobol_intervals_cover_the_closed_form():
    ref = cf.digital_greeks(SPOT, 130.0, T, RATE, DIV, VOL, "call")["delta"]
    rr = runs(digital(130.0), "delta", range(1, 41))
    assert {m for _, _, m in rr} == {"likelihood ratio (first step)"}
    check_coverage("digital K=130 delta", rr, ref, Q_SOBOL)


# Reference: cash-or-nothing closed form (closed_form.digital_greeks), vega per 1.00 of vol.
def test_digital_k110_vega_sobol_intervals_cover_the_closed_form():
    # reference: the cash-or-nothing closed form's vega (closed_form.digital_greeks). The bump
    # (1 vol point, central) moves about 16 of the 4,096 paths across the strike, so the 16
    # scramblings' values take a few values, all equal in 42% of runs (coverage was 58.5% over
    # 200 seeds). Such a spread is no error bar: the pseudo-random one over every path is
    # reported instead (conservative: 100% over 200 seeds, z spread 0.23).
    ref = cf.digital_greeks(SPOT, 110.0, T, RATE, DIV, VOL, "call")["vega"]
    rr = runs(digital(110.0), "vega", range(1, 41))
    assert all(se > 0 for _, se, _ in rr)
    check_coverage("digital K=110 vega", rr, ref, Q_SOBOL)


def far_runs(rr, ref: float, limit: float) -> list[float]:
    return [(v - ref) / se for v, se, _ in rr if se <= 0 or abs(v - ref) > limit * se]


# References: Black-Scholes-Merton closed form for the call's delta, cash-or-nothing closed form
# for the digital's delta (closed_form.bsm_greeks, closed_form.digital_greeks).
@pytest.mark.xfail(strict=True, reason=(
    "measured at 4,096 Sobol paths, seeds 1-200: the call's pathwise delta reaches z = 8.82 "
    "(seed 160) and the K=130 digital's likelihood-ratio delta z = -8.94 (seed 161); over "
    "1,000 seeds each has 0.9% of runs beyond 4 standard errors against 0.116% claimed by "
    "Student's t with 15 df (largest |z| 10.3 and 8.9). Likely cause: both per-path "
    "estimators jump at the strike, and with one Sobol stratum of 256 straddling the jump the "
    "16 scramblings' estimates are far from normal; when nearly all fall on the same side of "
    "the jump their spread is small and the error is not"))
def test_sobol_delta_tails_are_as_thin_as_student_t_says():
    # Student's t with 15 df puts 2.4e-5 of runs beyond 6 standard errors: among these 400
    # runs, at least one beyond 6 has a chance of about 1% if the interval's law holds.
    far = far_runs(runs(call(), "delta", range(1, 201)),
                   cf.bsm_greeks(SPOT, 105.0, T, RATE, DIV, VOL, "call")["delta"], 6.0)
    far += far_runs(runs(digital(130.0), "delta", range(1, 201)),
                    cf.digital_greeks(SPOT, 130.0, T, RATE, DIV, VOL, "call")["delta"], 6.0)
    assert not far, f"runs beyond 6 standard errors, z = {np.round(far, 2).tolist()}"


# References: as above (Black-Scholes-Merton delta, cash-or-nothing delta). The same 400 runs
# with pseudo-random numbers, whose error bar is the spread of all 4,096 paths: the normal law
# puts 2e-9 of runs beyond 6 standard errors.
def test_pseudo_random_delta_tails_are_as_thin_as_the_normal_law_says():
    far = far_runs(runs(call(), "delta", range(1, 201), "pseudo"),
                   cf.bsm_greeks(SPOT, 105.0, T, RATE, DIV, VOL, "call")["delta"], 6.0)
    far += far_runs(runs(digital(130.0), "delta", range(1, 201), "pseudo"),
                    cf.digital_greeks(SPOT, 130.0, T, RATE, DIV, VOL, "call")["delta"], 6.0)
    assert not far, f"runs beyond 6 standard errors, z = {np.round(far, 2).tolist()}"

"""The Monte Carlo engine against closed forms, and its reproducibility.

References: Black-Scholes-Merton (Black & Scholes 1973, Merton 1973) and the cash-or-nothing
digital (Reiner & Rubinstein 1991), as implemented in fairpath.closed_form, which
tests/test_closed_form.py checks against QuantLib's analytic European engine, sympy derivatives and
textbook worked examples. Monte Carlo assertions: |MC - reference| <= 4 standard errors at a fixed
seed (no discretisation bias: every step is sampled exactly).
"""

from __future__ import annotations

import warnings
from datetime import date

import numpy as np
import pytest

import fairpath as fp
from fairpath import closed_form as cf
from fairpath.estimate import Moments, merge_all
from fairpath.market import Asset, DiscountCurve, Market, VolCurve
from fairpath.models import ModelSet, psd_cholesky
from fairpath.sampling import BrownianBridge, PseudoSampler, SobolSampler

VAL = date(2026, 12, 1)


def market(spot=100.0, vol=0.25, rate=0.05, q=0.02, **kw) -> Market:
    return Market(VAL, "EUR", DiscountCurve.flat(rate), (Asset("NORDA", spot, VolCurve.flat(vol),
                                                               q),), **kw)


def within(res, ref, k=4.0):
    return abs(res.price - ref) <= k * res.stderr


EXPIRIES = {"3M": date(2027, 3, 1), "1Y": date(2027, 12, 1), "2Y": date(2028, 12, 1)}


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
@pytest.mark.parametrize("antithetic", [False, True])
@pytest.mark.parametrize("control", [True, False])
@pytest.mark.parametrize("right", ["call", "put"])
def test_european_matches_bsm(sampler, antithetic, control, right):
    # reference: Black-Scholes-Merton closed form
    seed = 101
    for (strike, tenor, q) in [(80.0, "1Y", 0.02), (100.0, "3M", 0.0), (125.0, "2Y", 0.04)]:
        m = market(q=q)
        p = fp.European(asset="NORDA", right=right, strike=strike, expiry=EXPIRIES[tenor])
        ref = cf.bsm_price(100.0, strike, m.time(p.expiry), 0.05, q, 0.25, right)
        res = fp.price(p, m, paths=16384, sampler=sampler, seed=seed, antithetic=antithetic,
                       control=control)
        assert res.stderr > 0
        assert within(res, ref), (strike, tenor, res.price, ref, res.stderr)
        seed += 1


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
@pytest.mark.parametrize("antithetic", [False, True])
@pytest.mark.parametrize("right", ["call", "put"])
def test_digital_matches_closed_form(sampler, antithetic, right):
    # reference: cash-or-nothing closed form (Reiner & Rubinstein 1991)
    for i, (strike, tenor, payout) in enumerate([(90.0, "1Y", 1.0), (100.0, "3M", 10.0),
                                                 (115.0, "2Y", 100.0)]):
        m = market(vol=0.3, q=0.01)
        p = fp.Digital(asset="NORDA", right=right, strike=strike, expiry=EXPIRIES[tenor],
                       payout=payout)
        ref = cf.digital_price(100.0, strike, m.time(p.expiry), 0.05, 0.01, 0.3, right,
                               payout=payout)
        res = fp.price(p, m, paths=16384, sampler=sampler, seed=200 + i, antithetic=antithetic)
        assert within(res, ref), (strike, tenor, res.price, ref, res.stderr)


def test_sobol_stderr_small_for_atm_call():
    # acceptance: Sobol standard error at 65,536 paths for an ATM one-year call below 0.01
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRIES["1Y"])
    res = fp.price(p, market(), paths=65536, sampler="sobol")
    assert res.stderr < 0.01
    assert res.paths == 65536 and res.replicates == 16


def test_term_structures_match_bsm_with_integrated_inputs():
    # reference: BSM with the zero rate to expiry and the root-mean-square vol to expiry, computed
    # here by hand from the pillars (piecewise-flat forward variance, linear t*r(t))
    t1, t2 = 0.5, 2.0
    vols = VolCurve((t1, t2), (0.20, 0.30))
    curve = DiscountCurve((t1, t2), (0.02, 0.04))
    m = Market(VAL, "EUR", curve, (Asset("NORDA", 100.0, vols, 0.01),))
    expiry = date(2028, 6, 1)
    T = m.time(expiry)
    w = 0.2**2 * t1 + (0.3**2 * t2 - 0.2**2 * t1) * (T - t1) / (t2 - t1)
    rt = 0.02 * t1 + (0.04 * t2 - 0.02 * t1) * (T - t1) / (t2 - t1)
    ref = cf.bsm_price(100.0, 100.0, T, rt / T, 0.01, np.sqrt(w / T), "call")
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=expiry)
    res = fp.price(p, m, paths=65536, seed=3)
    assert within(res, ref)
    assert abs(p.closed_form(m) - ref) < 1e-12


def test_same_seed_same_numbers_and_chunk_size_does_not_matter():
    p = fp.European(asset="NORDA", right="put", strike=95.0, expiry=EXPIRIES["1Y"])
    m = market()
    for sampler in ("sobol", "pseudo"):
        a = fp.price(p, m, paths=32768, sampler=sampler, seed=9)
        b = fp.price(p, m, paths=32768, sampler=sampler, seed=9)
        c = fp.price(p, m, paths=32768, sampler=sampler, seed=9, chunk_paths=1000)
        d = fp.price(p, m, paths=32768, sampler=sampler, seed=9, chunk_paths=1 << 20)
        assert a.price == b.price == c.price == d.price
        assert a.stderr == c.stderr == d.stderr
        e = fp.price(p, m, paths=32768, sampler=sampler, seed=10)
        assert e.price != a.price


def test_chunk_size_does_not_matter_on_a_multi_date_multi_asset_grid():
    m = Market(VAL, "EUR", DiscountCurve.flat(0.03),
               (Asset("NORDA", 100.0, VolCurve.flat(0.25), 0.02),
                Asset("KELPA", 50.0, VolCurve((0.5, 1.0), (0.3, 0.35)), 0.0)),
               correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, 0.6), (0.6, 1.0))))
    times = np.array([0.1, 0.35, 0.6, 1.0])
    steps = ModelSet.resolve(m, ["NORDA", "KELPA"]).stepper(times)
    for smp in (SobolSampler(4), PseudoSampler(4)):
        blocks = smp.plan(8192)
        whole = steps.simulate(smp.normals(blocks, 2, times)).log_levels
        parts = [steps.simulate(smp.normals([b], 2, times)).log_levels for b in blocks]
        assert np.array_equal(whole, np.concatenate(parts))


def test_simulated_forward_and_correlation():
    # the discounted level is a martingale: E[S_T] = forward; the log-return covariance is
    # rho * int sigma_a sigma_b dt (exact for piecewise-flat vols)
    m = Market(VAL, "EUR", DiscountCurve((0.5, 2.0), (0.02, 0.035)),
               (Asset("NORDA", 100.0, VolCurve.flat(0.25), 0.02),
                Asset("KELPA", 50.0, VolCurve((0.5, 1.0), (0.3, 0.35)), 0.0)),
               correlation=fp.Correlation(("NORDA", "KELPA"), ((1.0, -0.4), (-0.4, 1.0))))
    times = np.array([0.25, 1.0, 1.5])
    steps = ModelSet.resolve(m, ["NORDA", "KELPA"]).stepper(times)
    smp = PseudoSampler(12)
    x = steps.simulate(smp.normals(smp.plan(200_000), 2, times)).log_levels
    s = np.exp(x[:, :, -1])
    for a, name in enumerate(["NORDA", "KELPA"]):
        fwd = m.forward(name, 1.5)
        se = s[:, a].std() / np.sqrt(len(s))
        assert abs(s[:, a].mean() - fwd) < 4 * se
    r = x[:, :, -1] - np.log(np.array([100.0, 50.0]))
    var_k = 0.3**2 * 0.5 + (0.35**2 * 1.0 - 0.3**2 * 0.5) / 0.5 * 1.0  # forward var after 0.5
    cov_ref = -0.4 * (0.25 * 0.3 * 0.5 + 0.25 * np.sqrt((0.35**2 - 0.3**2 * 0.5) / 0.5) * 1.0)
    assert np.isclose(np.var(r[:, 1]), var_k, rtol=0.02)
    assert np.isclose(np.cov(r.T)[0, 1], cov_ref, rtol=0.03)


def test_brownian_bridge_has_brownian_covariance():
    # the bridge is linear: W = A z; Brownian motion needs A A^T = min(t_i, t_j)
    t = np.array([0.1, 0.25, 0.3, 0.7, 1.0, 1.6, 2.0])
    br = BrownianBridge(t)
    n = len(t)
    eye = np.eye(n).reshape(n, 1, n)  # n "paths", each a unit vector in construction order
    inc = br.increments(eye)[:, 0, :]  # (n unit inputs, n steps) normalised increments
    w = np.cumsum(inc * np.sqrt(np.diff(np.concatenate([[0.0], t]))), axis=1)
    cov = w.T @ w
    assert np.allclose(cov, np.minimum.outer(t, t), atol=1e-12)
    assert br.order[0] == n  # the terminal point is built first


def test_sobol_puts_every_assets_terminal_value_first():
    # with 3 assets, the first 3 Sobol coordinates drive the terminal values of the 3 assets
    smp = SobolSampler(5)
    t = np.array([0.25, 0.5, 0.75, 1.0])
    z = smp.normals(smp.plan(64)[:1], 3, t)
    terminal = z.sum(axis=2) * 0.5  # W(1) / sqrt(1) from the normalised increments (dt=0.25)
    from scipy.special import ndtri

    from fairpath import sobol
    from fairpath.sampling import _scrambled
    sv, shift = _scrambled(smp.seed, (0,), 12)  # scrambling 0 of the 12-dimensional sequence
    u = sobol.points(sv, shift, 0, 4).T
    assert np.allclose(terminal, ndtri(u[:, :3]))


def test_power_of_two_warning_and_dimension_limit():
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRIES["1Y"])
    with pytest.warns(fp.SamplingWarning, match="power of two"):
        fp.price(p, market(), paths=16 * 1000)
    with pytest.raises(fp.InputError, match="multiple of 16"):
        fp.price(p, market(), paths=1000)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fp.price(p, market(), paths=1000, sampler="pseudo")
    with pytest.raises(fp.InputError, match="exceeds the generator's limit"):
        SobolSampler(1).normals(SobolSampler(1).plan(32)[:1], 3, np.linspace(0.01, 80, 8000))


def test_sobol_dimension_above_limit_falls_back_to_pseudo():
    class ManyDates(fp.European):
        kind = ""

        def observation_dates(self):
            from fairpath.dates import weekdays_between
            return weekdays_between(VAL, self.expiry)

    # 21,600+ weekdays (83 years, within the 100-year horizon): above the Sobol direction
    # numbers' 21,201 dimensions; a 5% vol keeps 64 paths enough for the forward over 83 years
    p = ManyDates(asset="NORDA", right="call", strike=100.0, expiry=date(2110, 1, 5))
    with pytest.warns(fp.SamplingWarning, match="fell back to the pseudo-random"):
        res = fp.price(p, market(vol=0.05), paths=64, sampler="sobol", chunk_paths=64)
    assert res.sampler == "pseudo" and any("fell back" in n for n in res.notes)


def test_expiry_today_is_intrinsic():
    m = market(spot=110.0)
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=VAL, quantity=2.0)
    res = fp.price(p, m)
    assert res.price == 20.0 and res.stderr == 0.0 and res.paths == 0
    with pytest.raises(fp.InputError, match="before the valuation date"):
        fp.price(fp.European(asset="NORDA", right="call", strike=1.0,
                             expiry=date(2026, 11, 30)), m)


def test_target_stderr_doubles_paths_until_reached():
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRIES["1Y"])
    res = fp.price(p, market(), paths=4096, sampler="pseudo", target_stderr=0.05, seed=1)
    assert res.stderr <= 0.05 and res.paths > 4096
    capped = fp.price(p, market(), paths=4096, sampler="pseudo", target_stderr=1e-6,
                      max_paths=16384)
    assert capped.paths == 16384 and any("not reached" in n for n in capped.notes)


def test_control_variate_reports_its_variance_reduction():
    # a deep in-the-money call is almost linear in S_T: the control removes most variance
    p = fp.European(asset="NORDA", right="call", strike=60.0, expiry=EXPIRIES["1Y"])
    res = fp.price(p, market(), sampler="pseudo", paths=16384)
    plain = fp.price(p, market(), sampler="pseudo", paths=16384, control=False)
    assert res.variance_reduction is not None and res.variance_reduction > 10
    assert res.stderr < plain.stderr / 3
    assert plain.controls == () and plain.variance_reduction is None


def test_moments_merge_matches_direct_computation():
    rng = np.random.default_rng(0)
    v = rng.normal(size=(1000, 3)) * [1.0, 5.0, 0.1] + [100.0, -2.0, 0.0]
    merged = merge_all([Moments.of(v[:123]), Moments.of(v[123:600]), Moments.of(v[600:])])
    assert np.allclose(merged.mean, v.mean(axis=0))
    assert np.allclose(merged.cov(), np.cov(v.T))


def test_psd_cholesky_accepts_singular_matrices():
    c = np.array([[1.0, 1.0, 0.5], [1.0, 1.0, 0.5], [0.5, 0.5, 1.0]])
    L = psd_cholesky(c)
    assert np.allclose(L @ L.T, c)
    assert np.allclose(np.tril(L), L)


def test_zero_vol_gives_discounted_forward_intrinsic():
    m = market(vol=0.0)
    p = fp.European(asset="NORDA", right="call", strike=95.0, expiry=EXPIRIES["1Y"])
    res = fp.price(p, m, paths=1024)
    fwd = m.forward("NORDA", 1.0)
    assert np.isclose(res.price, np.exp(-0.05) * (fwd - 95.0), rtol=1e-12)


def test_result_json_contract_and_html():
    p = fp.European(asset="NORDA", right="call", strike=100.0, expiry=EXPIRIES["1Y"])
    res = fp.price(p, market(), paths=4096)
    d = res.to_dict()
    assert list(d)[:8] == ["price", "stderr", "ci95", "paths", "currency", "sampler", "seed",
                           "seconds"]
    assert d["ci95"][0] < d["price"] < d["ci95"][1]
    assert "<table>" in res._repr_html_() and "not advice" in res._repr_html_()

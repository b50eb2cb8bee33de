"""A daily-watched protection barrier read from bridges between monthly dates (Black).

Under Black the engine simulates an autocallable with a daily knock-in on its observation
dates and every 21st weekday only, and reads the closes in between from each asset's
Brownian-bridge crossing probability, the barrier shifted for daily closes (Broadie, Glasserman
and Kou 1997) and the assets combined as independent given the simulated dates (see
``fairpath.products.autocall``). The reference here is every weekday close simulated: the same
paths, priced once with the knock-in read from all their closes and once from the monthly
dates and the bridges, so the difference of the two is measured path by path (its error bar
is far narrower than either price's). The check: that difference is within 4 of its standard
errors, for the demo note on the demo market, at a correlation of 0.9 (where combining the
assets as independent errs most) and of -0.3, for one asset, and for a barrier at 50%; and
where the range the combination leaves on the price is too wide (identical assets at
correlation 1), the pricing falls back to every close.

Measured while building it (six seeds of 32,768 paths each, pooled, per 1,000 of notional):
the shift with the closes' mean spacing left the bridged note 0.10 +- 0.04 low at -0.3,
0.05 +- 0.02 at 0.9 and 0.17 +- 0.06 with the barrier at 50%; weighting the 1- and 3-day gaps
by their length (``closes_survival``) gives +0.02 +- 0.04, -0.02 +- 0.02 and +0.02 +- 0.06.
"""

from __future__ import annotations

import dataclasses
import math
from datetime import date
from pathlib import Path

import numpy as np
import pytest

import fairpath as fp
from clitools import run
from fairpath.engine import Simulation
from fairpath.products import load_product
from fairpath.sampling import make_sampler

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "markets" / "demo.toml"
NOTE = ROOT / "payoffs" / "autocall_worst_of.toml"


def _closes_and_bridge(note, market, paths: int, seed: int) -> tuple[float, float]:
    """(mean, stderr) of (bridged payoff) - (payoff from every close) on the same paths."""
    smp = make_sampler("pseudo", seed=seed)
    daily = Simulation([note], market, smp, [[]], None, 1)
    z = smp.normals(smp.plan(paths), daily.factors, daily.sim_times)
    ps = daily.pathsets(daily.stepper.simulate(z).log_levels)[0]
    bridged = note.for_models(daily.capabilities, False)
    assert bridged.daily_bridge
    coarse = Simulation([bridged], market, smp, [[]], None, 1).grid_dates
    idx = np.array([daily.grid_dates.index(d) for d in coarse])
    acc = np.cumsum(ps.variance, axis=1)[:, idx]
    variance = np.diff(np.concatenate([np.zeros((acc.shape[0], 1)), acc], axis=1), axis=1)
    ps_coarse = dataclasses.replace(ps, grid_dates=coarse, grid_times=ps.grid_times[idx],
                                    grid_log_levels=ps.grid_log_levels[:, :, idx],
                                    variance=variance)
    d = bridged.payoff(ps_coarse) - note.payoff(ps)
    return float(d.mean()), float(d.std(ddof=1) / math.sqrt(len(d)))


def _with_correlation(m: fp.Market, rho: float) -> fp.Market:
    names = ("NORDA", "KELPA", "VIREO")
    matrix = tuple(tuple(1.0 if i == j else rho for j in range(3)) for i in range(3))
    return dataclasses.replace(m, correlation=fp.Correlation(names, matrix))


@pytest.mark.parametrize("case", ["demo", "rho 0.9", "rho -0.3", "one asset", "barrier 0.5"])
def test_bridged_daily_watch_equals_every_close(case):
    m = fp.load_market(DEMO)
    note = load_product(NOTE)
    if case.startswith("rho"):
        m = _with_correlation(m, float(case.split()[1]))
    elif case == "one asset":
        note = dataclasses.replace(note, assets=("VIREO",))
    elif case == "barrier 0.5":  # far: a larger share of the knock-ins between the dates
        note = dataclasses.replace(note, protection_barrier=0.5)
    bias, se = _closes_and_bridge(note, m, 1 << 15, seed=3)
    assert abs(bias) <= 4 * se, (case, bias, se)
    assert se < 0.2  # per 1,000 of notional: the paired comparison is sharp


def test_bridge_is_used_under_black_only_and_can_be_switched_off():
    note = load_product(NOTE)
    flat = fp.price(note, fp.load_market(DEMO), paths=4096, seed=1)
    assert any("Brownian-bridge crossing probability" in n for n in flat.notes)
    closes = fp.price(note, fp.load_market(DEMO), paths=4096, seed=1, daily_closes=True)
    assert not any("Brownian-bridge crossing probability" in n for n in closes.notes)
    assert abs(closes.price - flat.price) <= 4 * math.hypot(closes.stderr, flat.stderr)
    smile = fp.price(note, fp.load_market(ROOT / "markets" / "demo_smile.toml"), paths=4096,
                     seed=1)
    assert not any("Brownian-bridge crossing probability" in n for n in smile.notes)


def test_wide_combination_range_falls_back_to_every_close():
    # three identical assets at correlation 1, a 70% barrier over nine months: the independent
    # combination of their bridges would overstate the knock-in (the three crossings are one;
    # 3 per 1,000 of notional), the range the pricing reports is wider than half the error bar,
    # and every close is simulated. Reference: the one-asset note (the worst of three identical
    # assets is that asset), whose bridge is exact
    names = ("NORDA", "KELPA", "VIREO")
    assets = tuple(fp.Asset(n, 100.0, fp.VolCurve.flat(0.3), 0.0) for n in names)
    m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.02), assets, "ACT/365F",
                  fp.Correlation(names, tuple(tuple(1.0 for _ in names) for _ in names)))
    kw = dict(observations=(date(2027, 3, 1), date(2027, 6, 1), date(2027, 9, 1)),
              autocall_level=1.0, coupon=0.02, coupon_barrier=0.8, protection_barrier=0.7,
              protection_monitoring="daily", notional=100.0)
    worst = fp.price(fp.Autocallable(assets=names, **kw), m, paths=16384, seed=9)
    assert any("every weekday close simulated" in n for n in worst.notes), worst.notes
    alone = fp.price(fp.Autocallable(assets=("NORDA",), **kw), m, paths=16384, seed=10)
    assert any("Brownian-bridge" in n for n in alone.notes)
    assert alone.diagnostics["bridge combination range"] == 0.0
    assert abs(worst.price - alone.price) <= 4 * math.hypot(worst.stderr, alone.stderr)


def test_daily_closes_flag(capsys):
    code, out, _ = run(["price", NOTE, "--market", DEMO, "--paths", "4096",
                        "--daily-closes"], capsys)
    assert code == 0 and "Brownian-bridge" not in out


def test_duality_simulates_every_close(monkeypatch):
    # the bounds restart from each outer path's closes and breach state: with --dual the price
    # (the issuer's upper bound) is computed on every close too, not through the bridge
    import fairpath.duality as duality

    seen = []

    def bounds(res, **_):
        seen.append(res.context[0])
        return res

    monkeypatch.setattr(duality, "with_bounds", bounds)
    callable_note = load_product(ROOT / "payoffs" / "autocall_issuer_callable.toml")
    res = fp.price(callable_note, fp.load_market(DEMO), paths=4096, seed=1, dual=True)
    assert seen and not seen[0].daily_bridge
    assert not any("Brownian-bridge" in n for n in res.notes)

"""The model layer and the engine's shape: models as objects with declared capabilities,
shortcuts registered per product family, one engine for prices and Greeks, the pilot phase.

References: a model written here (GBM stepped naively in numpy, declaring no capability) is
priced against fairpath's exact Black engine on the same market, within 4 combined standard
errors at fixed seeds; the pilot test's reference is the Black-Scholes-Merton formula
(closed_form.bsm_price, itself checked against QuantLib in test_closed_form.py).
"""

from __future__ import annotations

import ast
import dataclasses
import math
import warnings
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import ClassVar

import numpy as np
import pytest

import fairpath as fp
from clitools import run
from fairpath import closed_form as cf
from fairpath.models import Model, ModelSet, PathState, Stepper, psd_cholesky
from fairpath.registry import Capability

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "markets" / "demo.toml"
SMILE = ROOT / "markets" / "demo_smile.toml"
LAWS = ROOT / "markets" / "demo_laws.toml"
PAYOFFS = sorted((ROOT / "payoffs").glob("*.toml"))


# ---------------------------------------------------------------------------------------------
# A model written outside the package, declaring no capability
# ---------------------------------------------------------------------------------------------
class NaiveSteps(Stepper):
    """Plain numpy: each step's log-return is drift + sd * (L z), L the Cholesky factor of the
    correlation, sd the root of the Black variance over the step (no cash dividends)."""

    def __init__(self, models, correlation, times):
        market = models[0].market
        self.times = self.sim_times = np.asarray(times, dtype=float)
        self.factors = len(models)
        t0 = np.concatenate([[0.0], self.times[:-1]])
        self.variance = np.stack([m.asset.vol.variance(t0, self.times) for m in models])
        grid = np.concatenate([[0.0], self.times])
        logf = np.stack([np.log(market.forward(m.name, grid)) for m in models])
        self.drift = np.diff(logf, axis=1) - 0.5 * self.variance
        self.chol = psd_cholesky(correlation)
        self.start = np.log([m.asset.spot for m in models])
        self.notes = ()

    def simulate(self, z):
        shocks = np.einsum("ab,pbs->pas", self.chol, z)
        x = self.start[None, :, None] + np.cumsum(
            self.drift[None] + np.sqrt(self.variance)[None] * shocks, axis=2)
        return PathState(x)


@dataclass(frozen=True, slots=True)
class NaiveGBM(Model):
    kind: ClassVar[str] = "test-naive-gbm"

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return NaiveSteps(models, correlation, times)


@pytest.mark.parametrize("path", PAYOFFS, ids=lambda p: p.stem)
def test_a_model_without_capabilities_prices_every_demo_product_like_black(path):
    market = fp.load_market(DEMO)
    naive = market.with_model("test-naive-gbm")
    product = fp.load_product(path)
    if product.settlement == "converted":  # the exchange rate is simulated beside the share
        pytest.skip("an exchange rate is always a Black underlying: no other model to host it")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        black = fp.price(product, market, paths=16384, seed=21)
        plain = fp.price(product, naive, paths=16384, seed=22)
    assert ModelSet.resolve(naive, product.underlyings()).capabilities == frozenset()
    assert plain.controls == ()  # no capability, no control variate: the plain payoff
    tol = 4 * math.hypot(black.stderr, plain.stderr)
    assert abs(black.price - plain.price) <= tol, (black.price, plain.price, tol)


# ---------------------------------------------------------------------------------------------
# Resolution from the market file
# ---------------------------------------------------------------------------------------------
def test_default_models_and_capabilities_of_the_demo_markets():
    demo, smile, laws = (fp.load_market(p) for p in (DEMO, SMILE, LAWS))
    assert [m.kind for m in ModelSet.resolve(demo, demo.asset_names).models] == \
        ["black"] * len(demo.asset_names)
    assert ModelSet.resolve(demo, ["NORDA"]).has(Capability.LOGNORMAL)
    smile_kinds = {n: ModelSet.resolve(smile, [n]).models[0].kind for n in smile.asset_names}
    assert "local-vol" in smile_kinds.values()
    assert not ModelSet.resolve(smile, smile.asset_names).has(Capability.LOGNORMAL)
    law_caps = ModelSet.resolve(laws, ["NORDA"]).capabilities
    assert Capability.FORWARD in law_caps and Capability.LOGNORMAL not in law_caps


def _with_model_line(tmp_path, source: Path, asset: str, line: str) -> Path:
    text = source.read_text().replace(f"[assets.{asset}]", f"[assets.{asset}]\n{line}", 1)
    out = tmp_path / "market.toml"
    out.write_text(text)
    if (source.parent / "kelpa_closes.csv").exists():
        (tmp_path / "kelpa_closes.csv").write_text((source.parent / "kelpa_closes.csv")
                                                   .read_text())
    return out


def test_model_key_black_on_a_surface_is_the_flat_vol_price(tmp_path, capsys):
    path = _with_model_line(tmp_path, SMILE, "NORDA", 'model = "black"')
    market = fp.load_market(path)
    call = fp.load_product(ROOT / "payoffs" / "european_call.toml")
    named = fp.price(call, market, paths=4096, seed=3)
    flat = fp.price(call, fp.load_market(SMILE).with_flat_vol(), paths=4096, seed=3)
    assert (named.price, named.stderr) == (flat.price, flat.stderr)
    code, out, err = run(["price", str(ROOT / "payoffs" / "european_call.toml"),
                              "--market", str(SMILE), "--model", "black", "--paths", "4096",
                              "--seed", "3", "--json"], capsys)
    assert code == 0, err
    assert '"price": ' + repr(flat.price) in out


@pytest.mark.parametrize("line, key, words", [
    ('model = "hestn"', "assets.NORDA.model", "unknown model 'hestn'"),
    ("model = 3", "assets.NORDA.model", "expected a string"),
])
def test_bad_model_key_is_one_line_naming_file_and_key(tmp_path, capsys, line, key, words):
    path = _with_model_line(tmp_path, DEMO, "NORDA", line)
    code, out, err = run(["price", str(ROOT / "payoffs" / "european_call.toml"),
                              "--market", str(path)], capsys)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1
    assert str(path) in err and key in err and words in err


def test_local_vol_without_a_surface_is_refused_before_pricing(tmp_path, capsys):
    path = _with_model_line(tmp_path, DEMO, "NORDA", 'model = "local-vol"')
    code, out, err = run(["price", str(ROOT / "payoffs" / "european_call.toml"),
                              "--market", str(path)], capsys)
    assert code == 2 and out == ""
    assert "assets.NORDA.model" in err and "needs a vol_surface" in err
    code, out, err = run(["greeks", str(ROOT / "payoffs" / "european_call.toml"),
                              "--market", str(DEMO), "--model", "local-vol"], capsys)
    assert code == 2 and "--model" in err and "needs a vol_surface" in err


def test_models_that_no_class_can_host_together_are_refused():
    smile = fp.load_market(SMILE)
    lv = [n for n in smile.asset_names if smile.asset(n).surface is not None][0]
    other = [n for n in smile.asset_names if n != lv][0]
    mixed = smile.with_law(fp.StudentT(5.0), [other]).with_flat_vol([other])
    ms = ModelSet.resolve(mixed, [lv, other])
    with pytest.raises(fp.InputError, match="cannot be simulated together"):
        ms.stepper(np.array([0.1, 0.2]))


# ---------------------------------------------------------------------------------------------
# The pilot phase
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class MedianStrike(fp.European):
    """A call whose strike is fitted on pilot paths: the median simulated level at expiry."""

    fitted: bool = False

    def pilot_paths(self) -> int:
        return 0 if self.fitted else 4096

    def fit(self, pilot):
        k = float(np.median(pilot.levels[:, 0, -1]))
        return dataclasses.replace(self, strike=k, fitted=True)


def test_pilot_phase_fits_once_and_prices_alike_on_any_threads_and_batches():
    market = fp.load_market(DEMO)
    prod = MedianStrike(asset="NORDA", right="call", strike=1.0, expiry=date(2027, 12, 1))
    runs = [fp.price(prod, market, paths=16384, seed=4, threads=t, chunk_paths=c)
            for t, c in ((1, None), (2, None), (2, 1000))]
    assert len({(r.price, r.stderr) for r in runs}) == 1
    # the fitted strike is near the median of the lognormal level, S F/S exp(-sigma^2 T / 2)
    from fairpath.engine import Settings, fit_products
    fitted = fit_products([prod], market, Settings(seed=4), None)[0]
    t = market.time(date(2027, 12, 1))
    median = market.forward("NORDA", t) * math.exp(-0.5 * 0.25**2 * t)
    assert abs(fitted.strike / median - 1) < 0.02
    ref = cf.bsm_price(100.0, fitted.strike, t, float(market.discount.zero(t)), 0.02, 0.25,
                       "call")
    assert abs(runs[0].price - ref) <= 4 * runs[0].stderr
    # the pilot stream is not the pricing stream: another seed moves the strike
    other = fit_products([prod], market, Settings(seed=5), None)[0]
    assert other.strike != fitted.strike


# ---------------------------------------------------------------------------------------------
# Greeks through the engine
# ---------------------------------------------------------------------------------------------
def test_greeks_do_not_depend_on_threads():
    market = fp.load_market(DEMO)
    note = fp.load_product(ROOT / "payoffs" / "autocall_worst_of.toml")
    one = fp.greeks(note, market, paths=2048, seed=8, threads=1, method="bump")
    two = fp.greeks(note, market, paths=2048, seed=8, threads=2, method="bump")
    assert one.to_dict()["greeks"] == two.to_dict()["greeks"]


@pytest.mark.parametrize("market_file", [DEMO, SMILE], ids=["black", "local-vol"])
def test_a_bump_of_one_asset_simulates_that_asset_alone_with_the_same_paths(market_file):
    """A vol (or dividend) bump of one asset re-simulates that asset only: the others' paths
    are the base scenario's, and every path equals a full simulation of the bumped market
    from the same normals, bit for bit (the reuse is exact, not an approximation)."""
    from fairpath import bumps
    from fairpath.engine import Simulation
    from fairpath.sampling import make_sampler

    market = fp.load_market(market_file)
    note = fp.load_product(ROOT / "payoffs" / "autocall_worst_of.toml").struck(market)
    up = bumps.vol(market, "VIREO", 0.01)
    rate = bumps.rates(market, 1e-4)
    sim = Simulation([note], [market, up, rate], make_sampler("pseudo", seed=4), [[]])
    assert sim.setups[1].keep.tolist() == [True, True, False]
    assert sim.setups[2].keep is None  # a rate moves every forward: all simulated again
    rng = np.random.default_rng(5)
    z = rng.standard_normal((64, sim.factors, sim.steps))
    base = sim.setups[0].stepper.simulate(z.copy())
    reused = sim.setups[1].stepper.simulate_changed(z.copy(), base, sim.setups[1].keep)
    full = sim.setups[1].stepper.simulate(z.copy())
    assert np.array_equal(reused.log_levels, full.log_levels)
    assert not np.array_equal(full.log_levels[:, 2], base.log_levels[:, 2])


def test_greeks_fall_back_from_sobol_like_prices():
    market = fp.load_market(DEMO)
    note = fp.Autocallable(assets=("NORDA", "KELPA", "VIREO"), notional=1000.0,
                           observations=tuple(date(2027 + k, 12, 1) for k in range(30)),
                           autocall_level=1.0, coupon=0.04, coupon_barrier=0.7,
                           protection_barrier=0.6, protection_monitoring="daily")
    with pytest.warns(fp.SamplingWarning, match="fell back to the pseudo-random"):
        # every close simulated (under Black the daily watch is otherwise read from monthly
        # dates, far below the Sobol limit)
        g = fp.greeks(note, market, paths=1024, seed=2, cross_gamma=False, method="bump",
                      daily_closes=True)
    assert g.sampler == "pseudo"
    assert any("fell back" in n for n in g.notes)
    assert math.isfinite(g.delta["NORDA"].value)


# ---------------------------------------------------------------------------------------------
# Clean edges
# ---------------------------------------------------------------------------------------------
def _import_graph() -> dict[str, set[str]]:
    src = ROOT / "src"
    mods = {}
    for f in (src / "fairpath").rglob("*.py"):
        name = ".".join(f.relative_to(src).with_suffix("").parts)
        mods[name.removesuffix(".__init__")] = f
    graph = {m: set() for m in mods}
    for m, f in mods.items():
        for node in ast.walk(ast.parse(f.read_text())):  # function-level imports count too
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("fairpath"):
                for a in node.names:
                    if f"{node.module}.{a.name}" in mods:
                        graph[m].add(f"{node.module}.{a.name}")
                if node.module in mods:
                    graph[m].add(node.module)
        graph[m].discard("fairpath")
    return graph


def test_no_import_cycles_in_the_package():
    graph = _import_graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(v, stack):
        state[v] = 1
        for w in sorted(graph[v]):
            if state.get(w) == 1:
                cycles.append(stack[stack.index(w):] + [w])
            elif w not in state:
                visit(w, [*stack, w])
        state[v] = 2

    for v in sorted(graph):
        if v not in state:
            visit(v, [v])
    assert not cycles, cycles


def test_results_are_a_leaf_and_models_know_no_products():
    graph = _import_graph()
    assert graph["fairpath.results"] <= {"fairpath.errors"}
    for m, deps in graph.items():
        if m.startswith("fairpath.models"):
            assert not any(d.startswith(("fairpath.products", "fairpath.engine",
                                         "fairpath.estimate")) for d in deps), (m, deps)


def test_autocallable_warnings_fire_once_per_load_not_on_replace(tmp_path):
    text = (ROOT / "payoffs" / "autocall_single.toml").read_text()
    import re
    text = re.sub(r"coupon_barrier = [0-9.]+", "coupon_barrier = 1.10", text)
    path = tmp_path / "note.toml"
    path.write_text(text)
    with pytest.warns(fp.FairpathWarning, match="coupon_barrier 1.1") as rec:
        note = fp.load_product(path)
    assert len([w for w in rec if "coupon_barrier" in str(w.message)]) == 1
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        dataclasses.replace(note, coupon=0.05)

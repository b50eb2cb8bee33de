"""The engine: every computation (a price, Greeks, a quote band, a solve, a book) is one
:func:`run` of products under scenarios with one set of settings.

A *scenario* is a market (a bumped one, or one whose assets have another model); all scenarios
of a run are simulated from the same random numbers (common random numbers) on the grid of the
first, on every core, in memory-bounded batches, with the Sobol fallback and the models'
numerical checks. A run returns per-block moments; :func:`combine` turns them into a price and
its error, and the callers (:mod:`fairpath.estimate`, :mod:`fairpath.greeks`) into results.

Accumulation is per *block* (see :mod:`fairpath.sampling`): each block keeps its sample count,
mean vector and centred cross-product matrix of ``[payoff, control_1, ..., control_m]`` (with
several scenarios: each scenario's payoff, then any extra per-path estimators such as pathwise
derivatives); blocks are merged in a fixed order (Chan et al.'s pairwise update), so the result
does not depend on how many blocks were simulated together.

Standard errors:

* pseudo-random: the sample standard deviation of the (controlled) per-path values over
  ``sqrt(N)``; the 95% interval uses the normal quantile;
* Sobol (randomized QMC): the spread of the ``R`` independent scramblings' estimates,
  ``std / sqrt(R)``; the 95% interval uses Student's t with ``R - 1`` degrees of freedom;
* antithetic pairs count as one sample (the mean of the pair).

Control variates: the coefficient ``b`` is the least-squares slope of the payoff on the controls
from the same run (pooled over all samples); the controlled estimate is
``mean(Y) - b . (mean(X) - E[X])``. Every usable control is kept (on every path least squares
never leaves more variance with more controls); under Sobol one control alone replaces them when
the scramblings' spread is narrower with it beyond the 75% point of the F law, none only beyond
the 99% point: never on a difference chance explains, since picking the smallest of several
noisy spreads reports too narrow an interval (measured by ``benchmarks/coverage.py``). The
variance reduction factor is the ratio of the uncontrolled to the controlled variance.
A control is used only where every model of the product's assets declares the capabilities its
known mean rests on (``ControlVariate.requires``).

When every Sobol scrambling gives the same estimate (a payoff taking few values), their zero
spread is no error bar: the pseudo-random one over every path is reported, with a note; when
they take only a few distinct values, the result says its interval rests on weak ground.

Two phases: a product that needs pilot paths (``Product.pilot_paths() > 0``, e.g. to fit an
exercise policy) is handed them from a random stream of their own before pricing, returns a
frozen product (``Product.fit``), and that product is what every thread and scenario prices.
"""

from __future__ import annotations

import dataclasses
import math
import os
import threading
import warnings
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import date

import numpy as np
from scipy import stats

from fairpath.dates import weekdays_between
from fairpath.errors import FairpathError, InputError, SamplingWarning
from fairpath.kernels import merge_moments, moments
from fairpath.market import Market
from fairpath.models import ModelSet
from fairpath.products.base import ControlVariate, PathSet, Product
from fairpath.registry import Capability
from fairpath.results import Estimate
from fairpath.sampling import (
    DEFAULT_REPLICATES,
    SOBOL_MAX_DIM,
    Block,
    Sampler,
    make_sampler,
)

#: Under Sobol one control alone replaces all usable ones only when its scramblings' spread
#: is narrower by more than this quantile of the F law of two spreads (measured on the demo
#: worst-of put: a stricter level kept all six controls where one Stulz control halves the
#: error); no control at all only beyond OFF_LEVEL (a control that does nothing costs little,
#: and a switch on noise narrows the interval: the digital of the coverage study)
SWITCH_LEVEL = 0.75
OFF_LEVEL = 0.99
#: A Sobol interval rests on weak ground (and says so) when the R scramblings' estimates take
#: at most ``R // FEW_DISTINCT`` distinct values
FEW_DISTINCT = 4
#: Bytes of simulated state per chunk (normals, log levels); keeps memory flat in the path count.
CHUNK_BYTES = 32 * 1024 * 1024
#: Paths simulated together at most (cache-friendly batches), unless chunk_paths says otherwise
MAX_BATCH = 1 << 17
#: Default and maximum path counts.
DEFAULT_PATHS = 65536
DEFAULT_MAX_PATHS = 1 << 22
#: The extra key of the pilot paths' random stream (never a block index of a pricing run)
PILOT_STREAM = 0x7FFFFFFF
#: Pilot paths handed to a product that asks for them without saying how many
DEFAULT_PILOT_PATHS = 1 << 14


@dataclass(frozen=True, slots=True)
class Settings:
    """Everything about a run that is not the products or the market: one frozen value.

    ``threads`` and ``chunk_paths`` never change a number; ``stream`` is an extra key of every
    random stream (a book gives each trade its own numbers this way)."""

    paths: int = DEFAULT_PATHS
    sampler: str = "sobol"
    seed: int | None = None
    antithetic: bool = False
    replicates: int = DEFAULT_REPLICATES
    control: bool = True
    threads: int | None = None
    steps_per_day: int = 1
    chunk_paths: int | None = None
    stream: tuple[int, ...] = ()
    progress: bool = False
    #: simulate every weekday close of a daily watch, even where the models' bridges would
    #: read it from the observation dates alone (:meth:`Product.for_models`)
    daily_closes: bool = False

    def make_sampler(self) -> Sampler:
        return make_sampler(self.sampler, seed=self.seed, antithetic=self.antithetic,
                            replicates=self.replicates, stream_key=self.stream)


#: Below this many simulated numbers (paths x assets x steps) a run stays on one thread: the
#: pool's coordination would cost more than it saves (measured: a 1,024-path European took
#: 5 ms on two threads and 2 ms on one).
THREAD_WORK = 1 << 17
_POOLS: dict[int, ThreadPoolExecutor] = {}
_POOLS_LOCK = threading.Lock()


def _pool(workers: int) -> ThreadPoolExecutor:
    """A long-lived pool of ``workers`` threads (created once; threads are daemons)."""
    with _POOLS_LOCK:
        pool = _POOLS.get(workers)
        if pool is None:
            pool = _POOLS[workers] = ThreadPoolExecutor(max_workers=workers,
                                                        thread_name_prefix="fairpath")
        return pool


def engine_threads(threads: int | None = None) -> int:
    """Threads for a simulation: the argument, else the ``FAIRPATH_THREADS`` environment
    variable, else every core. Results never depend on it."""
    if threads is None:
        env = os.environ.get("FAIRPATH_THREADS", "").strip()
        if env:
            try:
                threads = int(env)
            except ValueError:
                raise InputError(f"must be a positive integer, got {env!r}",
                                 key="FAIRPATH_THREADS") from None
        else:
            threads = os.cpu_count() or 1
    if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise InputError(f"must be a positive integer, got {threads!r}", key="threads")
    return threads


# ---------------------------------------------------------------------------------------------
# Per-block statistics
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Moments:
    """Count, mean vector and centred cross-products of a set of samples."""

    n: int
    mean: np.ndarray
    m2: np.ndarray

    @classmethod
    def of(cls, v: np.ndarray) -> Moments:
        # a compiled two-pass loop in row order: the same arithmetic for any chunking
        mean, m2 = moments(v)
        return cls(v.shape[0], mean, m2)

    def merge(self, other: Moments) -> Moments:
        n = self.n + other.n
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.n / n)
        m2 = self.m2 + other.m2 + np.outer(delta, delta) * (self.n * other.n / n)
        return Moments(n, mean, m2)

    def cov(self) -> np.ndarray:
        return self.m2 / max(self.n - 1, 1)


def merge_all(parts: list[Moments]) -> Moments:
    """The moments of the union of ``parts``, merged in their order (a compiled loop)."""
    if len(parts) == 1:
        return parts[0]
    n, mean, m2 = merge_moments(np.array([p.n for p in parts], dtype=np.int64),
                                np.stack([p.mean for p in parts]),
                                np.stack([p.m2 for p in parts]))
    return Moments(n, mean, m2)


# ---------------------------------------------------------------------------------------------
# Simulation of products under scenarios on shared random numbers
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class BlockResult:
    """One block's moments per product, and the sums of each product's diagnostics."""

    moments: tuple[Moments, ...]
    diagnostics: tuple[dict[str, float], ...]
    #: per product, the number of paths whose discounted payoff is not zero
    paying: tuple[int, ...] = ()


#: ``extras(j, pathset, payoff, stepper) -> list of per-path arrays``: further estimators
#: accumulated beside product ``j``'s values under the first scenario (pathwise derivatives,
#: likelihood-ratio weights); they must be the same number of columns on every batch
Extras = Callable[[int, PathSet, np.ndarray, object], list]


@dataclass(frozen=True, slots=True)
class ScenarioSetup:
    """One scenario's market, models, grid times and stepper."""

    market: Market
    models: ModelSet
    times: np.ndarray
    stepper: object | None
    #: differs from the first scenario by its spots only: its paths may be the first
    #: scenario's rescaled (``Stepper.respot``), with no new simulation
    spots_only: bool = False
    #: per asset: is its path the first scenario's (the same inputs: a bump of another
    #: asset's vol or dividends)? None when every asset is simulated again
    keep: np.ndarray | None = None

    @property
    def spots(self) -> np.ndarray:
        return self.models.spots

    @property
    def capabilities(self) -> frozenset[Capability]:
        return self.models.capabilities


class Simulation:
    """Everything fixed for products under scenarios: grid, models, steppers, controls.

    Several products on the same assets share the grid (the union of their dates) and the random
    numbers, so their prices are evaluated on common paths (used by the solver); several
    scenarios (bumped markets) share the first scenario's grid dates and normals (Greeks,
    quote bands).
    """

    def __init__(self, products: list[Product], market, sampler: Sampler,
                 controls: list[list[ControlVariate]], source: str | None = None,
                 steps_per_day: int = 1, extras: Extras | None = None):
        self.products = list(products)
        scenarios = list(market) if isinstance(market, list | tuple) else [market]
        self.market = market = scenarios[0]
        self.sampler = sampler
        self.controls = controls
        self.extras = extras
        self.names = self.products[0].underlyings()
        for p in self.products[1:]:
            if p.underlyings() != self.names:
                raise InputError("products priced together must use the same assets")
        self.models = ModelSet.resolve(market, self.names, source=source)
        val = market.valuation_date
        future: set[date] = set()
        for p in self.products:
            future.update(d for d in p.observation_dates() if d > val)
            daily = p.daily_until()
            if daily is not None:
                stride = p.daily_stride()
                future.update(weekdays_between(val, daily)[stride - 1::stride])
        if future and self.models.daily:
            # a law of daily shocks, a local vol that moves with the level: every weekday
            future.update(weekdays_between(val, max(future)))
        self.grid_dates = tuple(sorted(future))
        pos = {d: i for i, d in enumerate(self.grid_dates)}
        # per product: its dates and their grid columns (-1 = on the valuation date: the spot)
        self.dates = [tuple(p.observation_dates()) for p in self.products]
        self.obs_index = [np.array([pos.get(d, -1) for d in ds], dtype=int) for ds in self.dates]
        self.steps_per_day = steps_per_day
        self.setups: list[ScenarioSetup] = []
        for i, m in enumerate(scenarios):
            self.setups.append(self._setup(m, i == 0, source))
        base = self.setups[0]
        if base.stepper is not None and any(s.spots_only for s in self.setups[1:]):
            base.stepper.for_respot = True
        self.grid_times = base.times
        self.stepper = base.stepper
        #: the times the sampler draws for (finer than the grid under local volatility)
        self.sim_times = self.stepper.sim_times if self.stepper is not None else self.grid_times
        self.spots = base.spots
        self.factors = self.models.factors

    def _setup(self, m: Market, first: bool, source: str | None) -> ScenarioSetup:
        dates = self.grid_dates
        if first:
            times = np.atleast_1d(m.time(dates)).astype(float) if dates else np.zeros(0)
            models = self.models
        else:
            times = np.array([max(m.time(d), 0.0) for d in dates]) if dates else np.zeros(0)
            models = ModelSet.resolve(m, self.names, source=source)
            if self._spots_only(m):
                base = self.setups[0]
                return ScenarioSetup(m, models, base.times, base.stepper, True)
        stepper = models.stepper(times, self.steps_per_day) if len(dates) else None
        keep = None
        if not first and stepper is not None and self.setups[0].stepper is not None:
            keep = stepper.unchanged(self.setups[0].stepper)
            if keep is not None and not keep.any():
                keep = None
        return ScenarioSetup(m, models, times, stepper, keep=keep)

    def _spots_only(self, m: Market) -> bool:
        """Does ``m`` differ from the first scenario's market in its spots alone?"""
        base = self.setups[0].market
        if len(m.assets) != len(base.assets):
            return False
        same = dataclasses.replace(m, assets=tuple(
            dataclasses.replace(a, spot=b.spot) for a, b in zip(m.assets, base.assets,
                                                                strict=True)))
        return same == base

    @property
    def steps(self) -> int:
        """Simulated steps (the grid's dates, or more under local volatility)."""
        return len(self.sim_times)

    @property
    def capabilities(self) -> frozenset[Capability]:
        return self.models.capabilities

    def pathsets(self, log_levels: np.ndarray, setup: ScenarioSetup | None = None
                 ) -> list[PathSet]:
        s = setup or self.setups[0]
        var = s.stepper.variance if s.stepper is not None else np.zeros((len(self.names), 0))
        return [PathSet.from_log_levels(s.market, self.names, dates, index, s.spots,
                                        self.grid_dates, s.times, log_levels, var,
                                        s.capabilities, p.funding_curve(s.market))
                for p, dates, index in zip(self.products, self.dates, self.obs_index,
                                           strict=True)]

    @staticmethod
    def sample_values(product: Product, controls: list[ControlVariate], ps: PathSet,
                      payoff: np.ndarray | None = None) -> np.ndarray:
        """(paths, 1 + controls): discounted payoff, then each control's value."""
        if payoff is None:
            payoff = product.payoff(ps)
        v = np.empty((ps.n, 1 + len(controls)))
        v[:, 0] = payoff
        for i, c in enumerate(controls, start=1):
            v[:, i] = c.values(ps)
        finite = np.isfinite(v)
        if not finite.all():
            col = int(np.argmin(finite.all(axis=0)))
            what = "payoff" if col == 0 else f"control variate '{controls[col - 1].name}'"
            raise FairpathError(f"non-finite values in the {what} of {product.label()} on "
                                f"{int((~finite[:, col]).sum())} of {len(v)} paths (check the "
                                "product's terms and the market inputs)")
        return v

    def values(self, z: np.ndarray) -> list[tuple[np.ndarray, dict]]:
        """Per product: its per-path values (paths, columns) and diagnostics, from normals
        ``z``: the first scenario's payoff and controls, each further scenario's payoff, then
        the extras."""
        many = len(self.setups) > 1
        cols: list[list[np.ndarray]] = [[] for _ in self.products]
        diags: list[dict] = [{} for _ in self.products]
        base_state = None

        def own(stepper) -> np.ndarray:
            """The normals for one scenario: a copy when the stepper overwrites them and
            another scenario still needs them."""
            return z.copy() if many and not stepper.keeps_normals else z

        for k, setup in enumerate(self.setups):  # one scenario's paths in memory at a time
            state = None
            if setup.spots_only and base_state is not None:
                state = setup.stepper.respot(base_state, setup.market)
            elif setup.keep is not None and base_state is not None:
                # only some assets' inputs moved: the others' paths are the base's
                state = base_state if setup.keep.all() else \
                    setup.stepper.simulate_changed(own(setup.stepper), base_state, setup.keep)
            if state is None:
                state = setup.stepper.simulate(own(setup.stepper))
            if k == 0:
                base_state = state
            for j, (prod, ps) in enumerate(zip(self.products,
                                               self.pathsets(state.log_levels, setup),
                                               strict=True)):
                if k == 0:
                    pay, diags[j] = prod.evaluate(ps)
                    cols[j].append(self.sample_values(prod, self.controls[j], ps, pay))
                    if self.extras is not None:
                        extra = self.extras(j, ps, cols[j][0][:, 0], setup.stepper)
                        if extra:
                            e = np.stack(extra, axis=1)
                            if not np.all(np.isfinite(e)):
                                raise FairpathError(f"non-finite values in an estimator of "
                                                    f"{prod.label()}")
                            cols[j].append(e)
                    continue
                y = np.asarray(prod.payoff(ps), dtype=float)
                if not np.all(np.isfinite(y)):
                    raise FairpathError(f"a bumped scenario gave non-finite values for "
                                        f"{prod.label()}")
                cols[j].insert(k, y[:, None])
        return [(c[0] if len(c) == 1 else np.concatenate(c, axis=1), d)
                for c, d in zip(cols, diags, strict=True)]

    progress: bool = False
    #: threads for the blocks (None: ``FAIRPATH_THREADS`` or every core)
    threads: int | None = None

    def apply(self, settings: Settings) -> str | None:
        """Take the run's progress bar and threads from ``settings``, and fall back to the
        pseudo-random sampler where the Sobol dimension exceeds the generator's limit; the
        fallback's message, or None."""
        self.progress = settings.progress
        self.threads = None if settings.threads is None else engine_threads(settings.threads)
        dim = self.factors * self.steps
        if self.sampler.name != "sobol" or dim <= SOBOL_MAX_DIM:
            return None
        self.sampler = make_sampler("pseudo", seed=self.sampler.seed,
                                    antithetic=settings.antithetic, stream_key=settings.stream)
        return (f"the Sobol dimension {dim} ({self.steps} dates x {self.factors} factors) "
                f"exceeds the generator's limit of {SOBOL_MAX_DIM}: fell back to the "
                "pseudo-random sampler")
    def run_blocks(self, blocks: list[Block], chunk_paths: int | None = None
                   ) -> dict[Block, BlockResult]:
        """Simulate ``blocks``; return each block's moments for every product.

        Work goes to a pool of threads (the compiled kernels and numpy release the GIL) in
        units: one Sobol scrambling's blocks in order (its generator runs forward), or a run of
        pseudo-random blocks. Within a unit, paths are simulated in batches of at most
        ``chunk_paths`` (memory): small blocks are batched together, a large block is split
        into pieces. A block's moments are taken once all its paths are in, so neither the
        batch size nor the number of threads changes a number.
        """
        n_a = self.factors
        per_path = max(1, n_a * max(self.steps, 1) * 8 * 3)
        chunk_paths_given = chunk_paths
        if chunk_paths is None:
            chunk_paths = max(64, CHUNK_BYTES // per_path)
        piece = max(2, int(chunk_paths))
        if chunk_paths_given is None:
            piece = min(piece, MAX_BATCH)
        work = sum(b.size for b in blocks) * n_a * max(self.steps, 1)
        workers = engine_threads(self.threads) if work >= THREAD_WORK else 1
        # units: runs of whole scramblings (Sobol) or of blocks (pseudo), about two per thread
        # so the threads stay busy, and as few as that so each batch is large
        streams: list[list[Block]] = []  # a Sobol scrambling's blocks stay together, in order
        for b in blocks:
            if (self.sampler.replicates is not None and streams
                    and streams[-1][-1].stream == b.stream):
                streams[-1].append(b)
            else:
                streams.append([b])
        n_units = min(len(streams), 2 * workers if workers > 1 else 1)
        per = -(-len(streams) // n_units)
        units = [[b for run in streams[i:i + per] for b in run]
                 for i in range(0, len(streams), per)]
        bar = None
        if self.progress and len(blocks) > 1:
            from tqdm.auto import tqdm
            bar = tqdm(total=sum(b.size for b in blocks), unit="path", leave=False,
                       desc=self.products[0].label()[:30])

        def run_unit(unit: list[Block]) -> dict[Block, BlockResult]:
            return self._run_unit(unit, piece)

        out: dict[Block, BlockResult] = {}
        workers = min(workers, len(units))
        try:
            if workers > 1:
                for done in _pool(workers).map(run_unit, units):
                    out.update(done)
                    if bar is not None:
                        bar.update(sum(b.size for b in done))
            else:
                for unit in units:
                    done = run_unit(unit)
                    out.update(done)
                    if bar is not None:
                        bar.update(sum(b.size for b in done))
        finally:
            if bar is not None:
                bar.close()
        return out

    def _run_unit(self, unit: list[Block], piece: int) -> dict[Block, BlockResult]:
        """The blocks of one unit, simulated in batches of at most ``piece`` paths."""
        n_p = len(self.products)
        anti = self.sampler.antithetic
        # per block and product: the per-path values and diagnostics of its pieces, draws
        # and mirrors apart, to be joined in the order of the whole block
        parts: dict[Block, list] = {b: [[[], [], [], []] for _ in range(n_p)] for b in unit}
        left = {b: (b.size // 2 if anti else b.size) for b in unit}
        out: dict[Block, BlockResult] = {}

        def pieces():
            for drawn in self.sampler.unit_pieces(unit, self.factors, self.sim_times,
                                                  piece):
                yield from drawn

        batch: list[tuple[Block, np.ndarray, int]] = []

        def flush():
            z = batch[0][1] if len(batch) == 1 else np.concatenate([p[1] for p in batch])
            for j, (v, diag) in enumerate(self.values(z)):
                off = 0
                for b, zb, k in batch:
                    m = zb.shape[0]
                    vb = v[off:off + m]
                    db = {n: a[off:off + m] for n, a in diag.items()}
                    slot = parts[b][j]
                    if anti:  # draws first, then their mirrors, as in the whole block
                        slot[0].append(vb[:k])
                        slot[1].append(vb[k:])
                        slot[2].append({n: a[:k] for n, a in db.items()})
                        slot[3].append({n: a[k:] for n, a in db.items()})
                    else:
                        slot[0].append(vb)
                        slot[2].append(db)
                    off += m
            for b, _, k in batch:
                left[b] -= k
                if left[b] == 0:
                    out[b] = self._finish_block(b, parts.pop(b))
            batch.clear()

        size = 0
        for b, z, k in pieces():
            if batch and size + z.shape[0] > piece:
                flush()
                size = 0
            batch.append((b, z, k))
            size += z.shape[0]
        if batch:
            flush()
        return out

    def _finish_block(self, b: Block, slots: list) -> BlockResult:
        moments, dsum, paying = [], [], []
        for draws, mirrors, d_draws, d_mirrors in slots:
            v = np.concatenate(draws + mirrors)
            paying.append(int(np.count_nonzero(v[:, 0])))
            if self.sampler.antithetic:
                h = b.size // 2
                v = 0.5 * (v[:h] + v[h:])
            moments.append(Moments.of(v))
            ds = d_draws + d_mirrors
            dsum.append({n: float(np.sum(np.concatenate([p[n] for p in ds])))
                         for n in (ds[0] if ds else {})})
        return BlockResult(tuple(moments), tuple(dsum), tuple(paying))

    def payoff_samples(self, blocks: list[Block]) -> np.ndarray:
        """The first product's discounted payoff on every path of ``blocks``."""
        out = []
        for b in blocks:
            z = self.sampler.normals([b], self.factors, self.sim_times)
            ps = self.pathsets(self.stepper.simulate(z).log_levels)[0]
            out.append(np.asarray(self.products[0].payoff(ps), dtype=float))
        return np.concatenate(out)

    def level_samples(self, block: Block) -> np.ndarray:
        """Levels on the grid of one block's paths, (paths, assets, grid dates)."""
        z = self.sampler.normals([block], self.factors, self.sim_times)
        return np.exp(self.stepper.simulate(z).log_levels)

    def deterministic_values(self) -> list[np.ndarray]:
        """Payoff and controls of each product when nothing is left to simulate."""
        x = np.zeros((1, len(self.names), 0))
        return [self.sample_values(p, c, ps)[0]
                for p, c, ps in zip(self.products, self.controls, self.pathsets(x), strict=True)]


def replicate_means(moments: dict[Block, Moments], blocks: list[Block]) -> np.ndarray:
    """(scramblings, columns): the mean of each Sobol scrambling's blocks, in scrambling order
    (randomized QMC: their spread is the error)."""
    reps: dict[int, list[Moments]] = {}
    for blk in blocks:
        reps.setdefault(blk.replicate, []).append(moments[blk])
    return np.array([merge_all(v).mean for _, v in sorted(reps.items())])


def quantile95(replicates: int | None) -> float:
    """The 95% interval's half-width in standard errors: Student's t with ``replicates - 1``
    degrees of freedom for randomized QMC (the spread of that many scramblings), else the
    normal law."""
    if replicates is None:
        return float(stats.norm.ppf(0.975))
    return float(stats.t.ppf(0.975, replicates - 1))


def combine(moments: dict[Block, Moments], blocks: list[Block], controls: list[ControlVariate],
            sampler: Sampler, force: tuple[str, ...] | None = None) -> Estimate:
    """Price, standard error and interval from the blocks' moments (see the module notes).

    Candidate control sets are: none, all usable controls together, and each usable control
    alone; the set with the smallest estimated variance is kept. ``force`` imposes a set by
    name instead (those that are usable), so that estimates of products whose payoffs are
    linear in a term stay exactly linear in it.
    """
    pooled = merge_all([moments[b] for b in blocks])
    cov = pooled.cov()
    mu = np.array([c.mean for c in controls])
    notes: list[str] = []
    # a control that does not vary (e.g. a date on the valuation date) cannot help
    var_x = np.diag(cov)[1:]
    scale = 1.0 + np.abs(pooled.mean[1:]) ** 2
    usable = [i for i in range(len(controls)) if var_x[i] > 1e-13 * scale[i]]

    groups = replicate_means(moments, blocks) if sampler.replicates is not None else None
    quant = quantile95(None if groups is None else len(groups))

    def slope(subset: list[int]) -> tuple[np.ndarray, np.ndarray]:
        """The columns of the controls in ``subset`` and the least-squares slope of the
        payoff on them over every path."""
        idx = np.array(subset, dtype=int) + 1
        coef = np.linalg.lstsq(cov[np.ix_(idx, idx)], cov[idx, 0], rcond=None)[0] \
            if subset else np.zeros(0)
        return idx, coef

    def residual_variance(idx: np.ndarray, coef: np.ndarray) -> float:
        """The price's variance with those controls as if the paths were independent."""
        return max(float(cov[0, 0] - cov[idx, 0] @ coef), 0.0) / pooled.n

    def pooled_variance(subset: list[int]) -> float:
        """The price's variance as if the paths were independent (pseudo-random)."""
        return residual_variance(*slope(subset))

    def estimate(subset: list[int]) -> tuple[float, float]:
        """(price, variance of the price) with the controls in ``subset``."""
        idx, coef = slope(subset)
        if groups is not None:  # randomized QMC: spread of the scramblings' estimates
            est = groups[:, 0] - (groups[:, idx] - mu[subset]) @ coef if subset else groups[:, 0]
            return float(est.mean()), float(np.var(est, ddof=1)) / len(est)
        price = float(pooled.mean[0] - coef @ (pooled.mean[idx] - mu[subset])) if subset \
            else float(pooled.mean[0])
        return price, residual_variance(idx, coef)

    # Which controls. Every usable one by default: least squares on every path never leaves
    # more variance with more controls, and for pseudo-random numbers that variance is known
    # precisely. Under Sobol the set that leaves least variance path by path need not leave
    # the least spread of the scramblings (several correlated controls can integrate worse than
    # one: the demo worst-of put's one Stulz control has half the error bar of all six at 2^20
    # paths), so the other sets (none, each alone) are compared on spreads too; but the
    # smallest of several spreads of 16 numbers is small partly by chance, and choosing it
    # reported too narrow intervals (93.2% coverage in the study, the digital 91% with 2.5% of
    # runs beyond 4 standard errors). So another set replaces all of them only when its spread
    # is smaller beyond chance: one control alone beyond the SWITCH_LEVEL point of the F law of
    # two spreads, none at all beyond the OFF_LEVEL point.
    raw = estimate([])
    var_raw = raw[1]
    chosen = list(usable) if force is None else [i for i in usable if controls[i].name in force]
    price, var = estimate(chosen) if chosen else raw
    if force is None and groups is not None and usable and len(groups) > 2:
        dof = len(groups) - 1
        others = [[]] + ([[i] for i in usable] if len(usable) > 1 else [])
        res = [raw if not c else estimate(c) for c in others]
        # dropping every control needs stronger evidence than keeping one of them
        limits = [float(stats.f.ppf(OFF_LEVEL if not c else SWITCH_LEVEL, dof, dof))
                  for c in others]
        k = min(range(len(others)), key=lambda k: res[k][1] * limits[k])
        if res[k][1] * limits[k] < var:
            chosen, (price, var) = others[k], res[k]
            if not chosen:
                notes.append("control variates switched off: the Sobol scramblings' spread "
                             "was clearly narrower without them")
    vrf = None
    if chosen:
        vrf = var_raw / var if var > 0 else None
        if var == 0:
            notes.append("the control variate explains the payoff exactly (zero variance)")
    if groups is not None and cov[0, 0] > 0:
        # A payoff taking few values (a digital, few paying paths) can give scramblings whose
        # estimates take only a handful of values. All equal: their spread (zero) is no measure
        # of the error, and the error bar is the pseudo-random one over every path instead
        # (wider, honest). A few values: the interval stands but rests on weak ground.
        distinct = len(np.unique(groups[:, 0]))
        if distinct == 1:
            mc = pooled_variance(chosen)
            if mc > var:
                var, quant = mc, quantile95(None)
                notes.append(f"the {len(groups)} Sobol scramblings gave the same estimate, so "
                             "their spread is no measure of the error: the error bar is the "
                             "pseudo-random one over every path (conservative)")
        elif distinct <= len(groups) // FEW_DISTINCT:
            notes.append(f"the {len(groups)} Sobol scramblings' estimates took only {distinct} "
                         "distinct values (a payoff taking few values): the interval rests "
                         "on weak ground; confirm with --sampler pseudo or more paths")
    se = math.sqrt(max(var, 0.0))
    return Estimate(price, se, (price - quant * se, price + quant * se), pooled.n,
                    tuple(controls[i].name for i in chosen), vrf, tuple(notes))




def last_date(products: list[Product], market: Market) -> date:
    """The last date any of the products needs (observations, daily monitoring)."""
    dates = [market.valuation_date]
    for p in products:
        dates.extend(p.observation_dates())
        daily = p.daily_until()
        if daily is not None:
            dates.append(daily)
    return max(dates)


# ---------------------------------------------------------------------------------------------
# One run
# ---------------------------------------------------------------------------------------------
@dataclass
class Run:
    """What a run produced: the simulation, the sampler used (after any fallback), the blocks
    of the final path count with their results, and the notes every result of the run shares."""

    sim: Simulation
    sampler: Sampler
    products: list[Product]
    controls: list[list[ControlVariate]]
    blocks: list[Block] = field(default_factory=list)
    cache: dict = field(default_factory=dict)
    paths: int = 0
    notes: list[str] = field(default_factory=list)
    #: per product, the notes on controls switched off for the model
    control_notes: list[list[str]] = field(default_factory=list)

    def moments(self, j: int = 0) -> dict[Block, Moments]:
        return {b: self.cache[b].moments[j] for b in self.blocks}

    def weighted(self, j: int = 0) -> Callable[[dict[int, float]], tuple[float, float]]:
        """``combo(weights) -> (value, stderr)``: a weighted sum of product ``j``'s columns (a
        Greek, a change between scenarios), its error from the spread of the sum itself:
        across the Sobol scramblings, or ``w' Cov w / N`` for pseudo-random numbers; never
        from the columns' own errors."""
        moments = self.moments(j)
        pooled = merge_all([moments[b] for b in self.blocks])
        groups = replicate_means(moments, self.blocks) \
            if self.sampler.replicates is not None else None
        width = pooled.mean.shape[0]

        def combo(weights: dict[int, float]) -> tuple[float, float]:
            w = np.zeros(width)
            for i, c in weights.items():
                w[i] += c
            var = max(float(w @ pooled.cov() @ w) / pooled.n, 0.0)
            if groups is not None:
                est = groups @ w
                se = float(np.std(est, ddof=1) / math.sqrt(len(est)))
                # a bump that moves a handful of paths across a jump (a digital's vega): the
                # scramblings can all count the same paths, and a zero spread is no error bar;
                # the pseudo-random one over every path is (as for prices)
                if len(np.unique(est)) == 1:
                    se = max(se, math.sqrt(var))
                return float(est.mean()), se
            return float(pooled.mean @ w), math.sqrt(var)

        return combo


def prepare(products: list[Product], market: Market, source: str | None = None
            ) -> tuple[Market, list[str]]:
    """Check the products against the market and drop cash dividends outside the products'
    horizon; the market to simulate and the notes saying what was dropped."""
    for p in products:
        p.check(market, source or p.source)
        p.funding_curve(market, source or p.source)  # an issuer the market does not know
    names = products[0].underlyings()
    return market.dividend_horizon(names, last_date(products, market))


def usable_controls(controls: list[ControlVariate], capabilities: frozenset[Capability]
                    ) -> tuple[list[ControlVariate], list[str]]:
    """The controls whose known means the models guarantee, and the names of the others."""
    keep = [c for c in controls if c.requires <= capabilities]
    return keep, [c.name for c in controls if not c.requires <= capabilities]


def fit_products(products: list[Product], market: Market, settings: Settings,
                 source: str | None) -> list[Product]:
    """Phase one: each product that asks for pilot paths gets them, from a stream of their own
    (pseudo-random, never any pricing path), and returns the frozen product to price."""
    out = []
    for p in products:
        n = p.pilot_paths()
        if not n:
            out.append(p)
            continue
        smp = make_sampler("pseudo", seed=settings.seed, antithetic=False,
                           stream_key=(*settings.stream, PILOT_STREAM))
        sim = Simulation([p], market, smp, [[]], source, settings.steps_per_day)
        if sim.steps == 0:
            out.append(p)
            continue
        blocks = smp.plan(n)
        z = smp.normals(blocks, sim.factors, sim.sim_times)
        ps = sim.pathsets(sim.stepper.simulate(z).log_levels)[0]
        out.append(p.fit(ps))
    return out


#: Controls are switched off when more than this share of an asset's forward sits in moves
#: rarer than one path in the run: their known means count a tail the paths do not draw
UNSEEN_CONTROL = 0.01


def unseen_tail_controls(sim: Simulation, controls: list[list[ControlVariate]], paths: int
                         ) -> list[str]:
    """Switch off (in place) the controls of a run whose assets' forwards lean on moves no path
    draws. A control's known mean (a forward, a vanilla) counts that tail, its sample mean
    cannot, and the correction would carry the gap into the price with an error bar that does
    not show it. The note says why; empty when nothing was switched off."""
    from fairpath.models.black import unseen_forward_share

    if not any(controls):
        return []
    shares = {n: unseen_forward_share(float(np.sum(sim.stepper.variance[i])), paths)
              for i, n in enumerate(sim.names)}
    name, share = max(shares.items(), key=lambda kv: kv[1])
    if share <= UNSEEN_CONTROL:
        return []
    for c in controls:
        c.clear()
    return [f"control variates switched off: {share:.1%} of {name}'s forward sits in moves "
            f"rarer than one path in {paths:,}, which a control's known mean counts and no "
            "path draws (the error bar would not show the gap)"]


#: Stream key of a Richardson run's paths (never a block of the plain run)
RICHARDSON_STREAM = 0x7FFFFFFD


def richardson(products: list[Product], market: Market, settings: Settings, paths: int,
               source: str | None = None
               ) -> list[tuple[float, ...]] | None:
    """Prices with the bias of discretised steps removed to first order, and that bias.

    Every path is simulated twice on one Brownian path: with twice the run's steps a day, and
    with the run's own steps fed the sums of pairs of the fine normals (:class:`Coarsened`).
    For a scheme of weak order one (log-Euler) the bias is about proportional to the step, so
    ``2 V_fine - V_coarse`` has none to first order (Richardson extrapolation) and the run's
    own bias is about ``2 (V_coarse - V_fine)``; each error bar comes from the spread of that
    combination itself (common random numbers). No control variates. None when the models'
    steps are exact. Returns per product ``(price, stderr, the 95% interval's quantile, bias,
    bias stderr, the plain price on the run's own steps, its stderr)`` (that plain price is
    the coarse twin's, without control variates: the price whose bias is measured).
    """
    from fairpath.models.base import Coarsened

    spd = settings.steps_per_day
    fine = dataclasses.replace(settings, paths=paths, control=False, steps_per_day=2 * spd,
                               stream=(*settings.stream, RICHARDSON_STREAM))
    sim = Simulation(products, [market], fine.make_sampler(), [[] for _ in products], source,
                     2 * spd)
    if sim.stepper is None or not sim.stepper.discretised:
        return None
    sim.apply(fine)
    smp = sim.sampler
    # the twin: the run's own steps, fed the fine normals summed in pairs
    coarse = Coarsened(sim.models.stepper(sim.grid_times, spd), sim.sim_times, 2)
    sim.setups.append(ScenarioSetup(market, sim.models, sim.grid_times, coarse))
    blocks = smp.plan(paths)
    out = Run(sim, smp, products, [[] for _ in products], blocks=blocks,
              cache=sim.run_blocks(blocks, settings.chunk_paths), paths=paths)
    result = []
    quant = quantile95(smp.replicates)
    for j in range(len(products)):
        combo = out.weighted(j)
        value, se = combo({0: 2.0, 1: -1.0})
        bias, bias_se = combo({1: 2.0, 0: -2.0})
        result.append((value, se, quant, bias, bias_se, *combo({1: 1.0})))
    return result


def run(products: list[Product], scenarios: list[Market], settings: Settings, *,
        source: str | None = None, extras: Extras | None = None,
        control_set: tuple[str, ...] | None = None, target_stderr: float | None = None,
        max_paths: int = DEFAULT_MAX_PATHS) -> Run:
    """Simulate ``products`` under every market of ``scenarios`` on common random numbers.

    The first scenario sets the grid. Controls are the first scenario's, kept where the models
    declare what their means need (with ``settings.control``); ``extras`` adds estimators beside
    the first scenario's payoff. ``target_stderr`` doubles the paths until the first product's
    standard error is at or below it, up to ``max_paths``. The products are expected to have
    been checked and the markets trimmed by :func:`prepare`.
    """
    smp = settings.make_sampler()
    paths = settings.paths
    if target_stderr is not None and not (math.isfinite(target_stderr) and target_stderr > 0):
        raise InputError(f"must be a positive number, got {target_stderr}", key="target_stderr")
    if target_stderr is not None and (isinstance(max_paths, bool) or not isinstance(
            max_paths, int) or max_paths < paths):
        raise InputError(f"must be an integer at least the path count, got {max_paths!r}",
                         key="max_paths")
    market = scenarios[0]
    names = products[0].underlyings()
    models = ModelSet.resolve(market, names, source=source)
    caps = models.capabilities
    if not settings.daily_closes:
        products = [p.for_models(caps, models.daily) for p in products]
    products = fit_products(products, market, settings, source)
    controls, control_notes = [], []
    for p in products:
        keep, dropped = usable_controls(p.controls(market) if settings.control else [], caps)
        if settings.control:
            keep = [*keep, *(ControlVariate(name, fn, mean, model_free=True)
                             for name, fn, mean in models.controls(p))]
        controls.append(keep)
        control_notes.append([] if not dropped else [
            "control variates whose known means this model does not guarantee switched off "
            f"({'; '.join(sorted(dropped))})"])
    sim = Simulation(products, list(scenarios), smp, controls, source, settings.steps_per_day,
                     extras)
    notes = [*models.notes(settings.steps_per_day)]
    if sim.stepper is not None:
        notes.extend(sim.stepper.notes)
    fallback = sim.apply(settings)
    if sim.stepper is not None:
        models.check_run(sim.stepper.variance, paths)
        tail_notes = unseen_tail_controls(sim, controls, paths)
        for c in control_notes:
            c.extend(tail_notes)
    if fallback is not None:
        warnings.warn(fallback, SamplingWarning, stacklevel=3)
        notes.append(fallback)
        smp = sim.sampler
    out = Run(sim, smp, products, controls, notes=notes, control_notes=control_notes)
    if sim.steps == 0:
        return out
    n = paths
    while True:
        blocks = smp.plan(n)
        todo = [b for b in blocks if b not in out.cache]
        if todo:
            out.cache.update(sim.run_blocks(todo, settings.chunk_paths))
        out.blocks, out.paths = blocks, n
        if target_stderr is None:
            break
        first = combine(out.moments(0), blocks, controls[0], smp, control_set)
        if first.stderr <= target_stderr:
            break
        if n * 2 > max_paths:
            notes.append(f"target standard error {target_stderr:g} not reached at the cap of "
                         f"{max_paths:,} paths")
            break
        n *= 2
    return out



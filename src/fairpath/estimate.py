"""The Monte Carlo driver: grid, chunks, accumulation, control variates, the result.

Accumulation is per *block* (see :mod:`fairpath.sampling`): each block keeps its sample count,
mean vector and centred cross-product matrix of ``[payoff, control_1, ..., control_m]``; blocks
are merged in a fixed order (Chan et al.'s pairwise update), so the result does not depend on how
many blocks were simulated together.

Standard errors:

* pseudo-random: the sample standard deviation of the (controlled) per-path values over
  ``sqrt(N)``; the 95% interval uses the normal quantile;
* Sobol (randomized QMC): the spread of the ``R`` independent scramblings' estimates,
  ``std / sqrt(R)``; the 95% interval uses Student's t with ``R - 1`` degrees of freedom;
* antithetic pairs count as one sample (the mean of the pair).

Control variates: the coefficient ``b`` is the least-squares slope of the payoff on the controls
from the same run (pooled over all samples); the controlled estimate is
``mean(Y) - b . (mean(X) - E[X])``. The variance reduction factor is the ratio of the uncontrolled
to the controlled variance; a control that does not reduce the variance is switched off and the
result says so.
"""

from __future__ import annotations

import html
import json
import math
import os
import threading
import time
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import date

import numpy as np
from scipy import stats

from fairpath.dates import weekdays_between
from fairpath.errors import FairpathError, InputError, SamplingWarning
from fairpath.kernels import merge_moments, moments
from fairpath.market import Market
from fairpath.models import GBM, simulate_log_levels
from fairpath.products.base import ControlVariate, PathSet, Product
from fairpath.sampling import (
    DEFAULT_REPLICATES,
    SOBOL_MAX_DIM,
    Block,
    Sampler,
    make_sampler,
)

#: Bytes of simulated state per chunk (normals, log levels); keeps memory flat in the path count.
CHUNK_BYTES = 32 * 1024 * 1024
#: Paths simulated together at most (cache-friendly batches), unless chunk_paths says otherwise
MAX_BATCH = 1 << 17
#: Default and maximum path counts.
DEFAULT_PATHS = 65536
#: Below this fraction of paying paths a Sobol result warns that its error bar may be too
#: narrow (measured: a 1-month put paid by 1-2% of paths had z-scores spread 1.2-1.3x too wide
#: over 200 seeds).
FEW_PAYING = 0.02
DEFAULT_MAX_PATHS = 1 << 22

CAUTION = ("Model estimate under the stated assumptions (risk-neutral dynamics on the given "
           "market inputs); not advice, and not a substitute for an institution's approved "
           "valuation models and controls.")


# ---------------------------------------------------------------------------------------------
# The result
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class PriceResult:
    """A Monte Carlo price with its error bar and the settings that produced it."""

    price: float
    stderr: float
    ci95: tuple[float, float]
    paths: int
    currency: str
    sampler: str
    seed: int
    seconds: float
    product: str = ""
    antithetic: bool = False
    replicates: int | None = None
    controls: tuple[str, ...] = ()
    variance_reduction: float | None = None
    notes: tuple[str, ...] = ()
    extras: dict = field(default_factory=dict, compare=False)
    #: (product, market, settings) that produced the result, for plots
    context: tuple = field(default=(), compare=False, repr=False)

    def plot(self, kind: str = "convergence", **kwargs):
        """A picture of the result: ``"convergence"`` (the estimate and its 95% band as paths
        grow), ``"distribution"`` (the discounted payoffs) or ``"paths"`` (a fan of sample paths
        with the product's dates and barriers). Returns a matplotlib figure."""
        from fairpath import plots

        if not self.context:
            raise InputError("this result carries no product and market to plot")
        product, market, settings = self.context
        return plots.plot_result(kind, product, market, settings, self, **kwargs)

    def to_dict(self) -> dict:
        """The JSON contract of ``fairpath price --json`` (contract keys first)."""
        d = {"price": self.price, "stderr": self.stderr, "ci95": list(self.ci95),
             "paths": self.paths, "currency": self.currency, "sampler": self.sampler,
             "seed": self.seed, "seconds": round(self.seconds, 6)}
        d.update({"product": self.product, "antithetic": self.antithetic,
                  "replicates": self.replicates, "controls": list(self.controls),
                  "variance_reduction": self.variance_reduction, "notes": list(self.notes)})
        if self.diagnostics:
            d["diagnostics"] = self.diagnostics
        return d

    @property
    def diagnostics(self) -> dict[str, float]:
        """Averages over the paths of the product's diagnostics (e.g. redemption odds)."""
        return dict(self.extras.get("diagnostics", {}))

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def _rows(self) -> list[tuple[str, str]]:
        lo, hi = self.ci95
        rows = [("price", f"{self.price:.6f} {self.currency}"),
                ("standard error", f"{self.stderr:.6f}"),
                ("95% interval", f"[{lo:.6f}, {hi:.6f}]"),
                ("paths", f"{self.paths:,}"),
                ("sampler", self.sampler + (f" ({self.replicates} scramblings)"
                                            if self.replicates else "")
                 + (", antithetic" if self.antithetic else "")),
                ("seed", str(self.seed)),
                ("controls", ", ".join(self.controls) or "none")]
        if self.variance_reduction is not None:
            rows.append(("variance reduction", f"x{self.variance_reduction:.3g}"))
        rows.append(("seconds", f"{self.seconds:.3f}"))
        rows.extend((k, f"{v:.6g}") for k, v in self.diagnostics.items())
        rows.extend(("note", n) for n in self.notes)
        return rows

    def __str__(self) -> str:
        w = max(len(k) for k, _ in self._rows())
        head = f"{self.product}\n" if self.product else ""
        return head + "\n".join(f"  {k:<{w}}  {v}" for k, v in self._rows())

    def _repr_html_(self) -> str:
        body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                       f"<td style='text-align:left'>{html.escape(v)}</td></tr>"
                       for k, v in self._rows())
        title = f"<caption>{html.escape(self.product)}</caption>" if self.product else ""
        return f"<table>{title}{body}</table><p><small>{html.escape(CAUTION)}</small></p>"


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
# Simulation of one or several products on shared random numbers
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class BlockResult:
    """One block's moments per product, and the sums of each product's diagnostics."""

    moments: tuple[Moments, ...]
    diagnostics: tuple[dict[str, float], ...]
    #: per product, the number of paths whose discounted payoff is not zero
    paying: tuple[int, ...] = ()


class Simulation:
    """Everything fixed for products on one market: grid, step parameters, controls.

    Several products on the same assets share the grid (the union of their dates) and the random
    numbers, so their prices are evaluated on common paths (used by the solver and by bumps).
    """

    def __init__(self, products: list[Product], market: Market, sampler: Sampler,
                 controls: list[list[ControlVariate]], source: str | None = None,
                 steps_per_day: int = 1):
        self.products = list(products)
        self.market = market
        self.sampler = sampler
        self.controls = controls
        self.names = self.products[0].underlyings()
        for p in self.products[1:]:
            if p.underlyings() != self.names:
                raise InputError("products priced together must use the same assets")
        self.model = GBM.from_market(market, self.names, source=source)
        val = market.valuation_date
        future: set[date] = set()
        for p in self.products:
            future.update(d for d in p.observation_dates() if d > val)
            daily = p.daily_until()
            if daily is not None:
                future.update(weekdays_between(val, daily))
        if future and (not self.model.normal or market.local_vol(self.names)):
            # a non-normal law is a law of daily shocks, and local volatility moves with the
            # level: step on every weekday
            future.update(weekdays_between(val, max(future)))
        self.grid_dates = tuple(sorted(future))
        self.grid_times = np.atleast_1d(market.time(self.grid_dates)).astype(float) \
            if self.grid_dates else np.zeros(0)
        pos = {d: i for i, d in enumerate(self.grid_dates)}
        # per product: its dates and their grid columns (-1 = on the valuation date: the spot)
        self.dates = [tuple(p.observation_dates()) for p in self.products]
        self.obs_index = [np.array([pos.get(d, -1) for d in ds], dtype=int) for ds in self.dates]
        self.params = self.model.steps(self.grid_times, steps_per_day) \
            if self.grid_dates else None
        #: the times the sampler draws for (finer than the grid under local volatility)
        self.sim_times = self.params.fine_times if self.params is not None else self.grid_times
        self.spots = self.model.spots

    @property
    def steps(self) -> int:
        """Simulated steps (the grid's dates, or more under local volatility)."""
        return len(self.sim_times)

    def pathsets(self, log_levels: np.ndarray) -> list[PathSet]:
        var = self.params.variance if self.params is not None else np.zeros((len(self.names), 0))
        return [PathSet.from_log_levels(self.market, self.names, dates, index, self.spots,
                                        self.grid_dates, self.grid_times, log_levels, var)
                for dates, index in zip(self.dates, self.obs_index, strict=True)]

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

    progress: bool = False
    #: threads for the blocks (None: ``FAIRPATH_THREADS`` or every core)
    threads: int | None = None

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
        n_a = len(self.names)
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
            for drawn in self.sampler.unit_pieces(unit, len(self.names), self.sim_times,
                                                  piece):
                yield from drawn

        batch: list[tuple[Block, np.ndarray, int]] = []

        def flush():
            z = batch[0][1] if len(batch) == 1 else np.concatenate([p[1] for p in batch])
            x = simulate_log_levels(self.params, self.spots, z)
            for j, (prod, ctl, ps) in enumerate(zip(self.products, self.controls,
                                                    self.pathsets(x), strict=True)):
                pay, diag = prod.evaluate(ps)
                v = self.sample_values(prod, ctl, ps, pay)
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
            z = self.sampler.normals([b], len(self.names), self.sim_times)
            x = simulate_log_levels(self.params, self.spots, z)
            ps = self.pathsets(x)[0]
            out.append(np.asarray(self.products[0].payoff(ps), dtype=float))
        return np.concatenate(out)

    def level_samples(self, block: Block) -> np.ndarray:
        """Levels on the grid of one block's paths, (paths, assets, grid dates)."""
        z = self.sampler.normals([block], len(self.names), self.sim_times)
        return np.exp(simulate_log_levels(self.params, self.spots, z))

    def deterministic_values(self) -> list[np.ndarray]:
        """Payoff and controls of each product when nothing is left to simulate."""
        x = np.zeros((1, len(self.names), 0))
        return [self.sample_values(p, c, ps)[0]
                for p, c, ps in zip(self.products, self.controls, self.pathsets(x), strict=True)]


@dataclass(frozen=True, slots=True)
class Estimate:
    price: float
    stderr: float
    ci95: tuple[float, float]
    samples: int
    controls: tuple[str, ...]
    variance_reduction: float | None
    notes: tuple[str, ...]


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

    if sampler.replicates is not None:
        reps: dict[int, list[Moments]] = {}
        for blk in blocks:
            reps.setdefault(blk.replicate, []).append(moments[blk])
        groups = np.array([merge_all(v).mean for _, v in sorted(reps.items())])
        quant = float(stats.t.ppf(0.975, len(groups) - 1))
    else:
        groups = None
        quant = float(stats.norm.ppf(0.975))

    def estimate(subset: list[int]) -> tuple[float, float]:
        """(price, variance of the price) with the controls in ``subset``."""
        idx = np.array(subset, dtype=int) + 1
        if subset:
            coef = np.linalg.lstsq(cov[np.ix_(idx, idx)], cov[idx, 0], rcond=None)[0]
        if groups is not None:  # randomized QMC: spread of the scramblings' estimates
            est = groups[:, 0] - (groups[:, idx] - mu[subset]) @ coef if subset else groups[:, 0]
            return float(est.mean()), float(np.var(est, ddof=1)) / len(est)
        if not subset:
            return float(pooled.mean[0]), float(cov[0, 0]) / pooled.n
        price = float(pooled.mean[0] - coef @ (pooled.mean[idx] - mu[subset]))
        return price, max(float(cov[0, 0] - cov[idx, 0] @ coef), 0.0) / pooled.n

    candidates: list[list[int]] = [[]]
    if force is not None:
        candidates = [[i for i in usable if controls[i].name in force]]
    elif usable:
        candidates.append(usable)
        if len(usable) > 1:
            candidates.extend([i] for i in usable)
    results = [estimate(c) for c in candidates]
    best = min(range(len(candidates)), key=lambda k: (results[k][1], len(candidates[k])))
    price, var = results[best]
    var_raw = estimate([])[1]
    chosen = candidates[best]
    vrf = None
    if chosen:
        vrf = var_raw / var if var > 0 else None
        if var == 0:
            notes.append("the control variate explains the payoff exactly (zero variance)")
    elif usable and force is None:
        notes.append("control variates switched off: none reduced the variance")
    se = math.sqrt(max(var, 0.0))
    return Estimate(price, se, (price - quant * se, price + quant * se), pooled.n,
                    tuple(controls[i].name for i in chosen), vrf, tuple(notes))


#: A run is refused when more than this share of an asset's forward at the last date lies in
#: terminal moves rarer than one path in the run (its price would come out low: a 500% vol
#: over a year with 8,192 paths priced an at-the-money call 10 standard errors low).
MAX_UNSEEN_FORWARD = 0.2


def check_lognormal_tails(market: Market, names, variance: np.ndarray, paths: int) -> None:
    """Refuse a run whose normal-shock assets have so much variance to the last date that the
    forward is carried by moves no path draws (share ``Phi(sqrt(w) - z)``, ``z`` the normal
    level exceeded once in ``paths`` draws)."""
    z = float(stats.norm.isf(1.0 / max(paths, 2)))
    for i, n in enumerate(names):
        if not market.asset(n).law.is_normal:
            continue
        w = float(np.sum(variance[i]))
        share = float(stats.norm.cdf(math.sqrt(max(w, 0.0)) - z))
        if share > MAX_UNSEEN_FORWARD:
            need = float(stats.norm.sf(math.sqrt(w) + stats.norm.isf(MAX_UNSEEN_FORWARD)))
            paths_needed = f"{1.0 / need:,.0f}" if need > 1e-15 else "more than 1e15"
            raise InputError(
                f"the vol of {n} is too high for {paths:,} paths: the total variance to the "
                f"last date is {w:.3g} (sigma sqrt(T) = {math.sqrt(w):.2f}), so {share:.0%} of "
                f"its forward sits in moves rarer than one path in {paths:,} and the price "
                f"would come out low; use about {paths_needed} paths or check the vol",
                source=market.source, key=f"assets.{n}.vol")


def check_law_tails(market: Market, names, variance: np.ndarray, paths: int) -> None:
    """Refuse a run whose non-normal shock laws put more than ``MAX_UNSEEN`` of a forward in
    moves it is unlikely to draw (rarer than one in ``paths x steps``): its forwards, and so
    its prices, would come out biased (see :mod:`fairpath.laws`)."""
    from fairpath.laws import MAX_UNSEEN, SEEN_DRAWS

    steps = variance.shape[1]
    p_seen = SEEN_DRAWS / (max(paths, 1) * max(steps, 1))
    for i, n in enumerate(names):
        law = market.asset(n).law
        if law.is_normal:
            continue
        sd = np.sqrt(variance[i])
        keys, counts = np.unique(np.round(sd, 12), return_counts=True)
        unseen = sum(c * law.unseen_tail(float(k), p_seen) for k, c in zip(keys, counts,
                                                                           strict=True))
        if not unseen <= MAX_UNSEEN:
            vol = float(np.sqrt(np.sum(variance[i]) / max(float(np.sum(variance[i] > 0)), 1)
                                * 261))
            raise InputError(
                f"the {law.describe()} law is too heavy-tailed at {n}'s vol (about {vol:.0%}): "
                + (f"{unseen:.2%} of the forward sits in" if unseen < 1 else
                   "the forward is dominated by") + " one-day moves rarer than one "
                f"in {1 / p_seen:,.0f}, which a run of {paths:,} paths x {steps} steps hardly "
                "ever draws, so prices would come out low; use more degrees of freedom, a "
                "lower vol or more paths", source=market.source, key=f"assets.{n}.law")


def last_date(products: list[Product], market: Market) -> date:
    """The last date any of the products needs (observations, daily monitoring)."""
    dates = [market.valuation_date]
    for p in products:
        dates.extend(p.observation_dates())
        daily = p.daily_until()
        if daily is not None:
            dates.append(daily)
    return max(dates)


def model_notes(market: Market, names, steps_per_day: int = 1) -> list[str]:
    """What a result says about local volatility and cash dividends (empty without)."""
    out = []
    lv = market.local_vol(names)
    if lv:
        out.append(f"local volatility from the implied-vol surface of {', '.join(lv)} "
                   "(Dupire, total-variance form): log-Euler steps on every weekday"
                   + (f", {steps_per_day} per day" if steps_per_day > 1 else ""))
    divs = [n for n in names if market.dividend_times(n)]
    if divs:
        out.append(f"cash dividends of {', '.join(divs)}: escrowed model (the level is the "
                   "diffusing part plus the value of the dividends to come, so it drops by the "
                   "amount on each ex-date)")
    return out


def law_notes_for(market: Market, names) -> list[str]:
    """What a result says when some of its assets' shocks are not normal (empty otherwise)."""
    odd = market.non_normal(names)
    if not odd:
        return []
    from fairpath.laws import LAW_CLIP

    laws = "; ".join(f"{n}: {market.asset(n).law.describe()}" for n in odd)
    return [f"return laws: {laws}; daily (weekday) steps, each shock scaled to the asset's vol "
            f"with its own martingale correction so forwards are the market's; tails clipped at "
            f"probability {LAW_CLIP:g} each side"
            + ("; assets correlated through a Gaussian copula" if len(names) > 1 else "")]


# ---------------------------------------------------------------------------------------------
# Public entry point
# ---------------------------------------------------------------------------------------------
def price(product: Product, market: Market, *, paths: int = DEFAULT_PATHS,
          sampler: str = "sobol", seed: int | None = None, antithetic: bool = False,
          control: bool = True, target_stderr: float | None = None,
          max_paths: int = DEFAULT_MAX_PATHS, replicates: int = DEFAULT_REPLICATES,
          chunk_paths: int | None = None, source: str | None = None,
          progress: bool = False, threads: int | None = None,
          stream: tuple[int, ...] = (), steps_per_day: int = 1) -> PriceResult:
    """Monte Carlo price of ``product`` on ``market``.

    Parameters
    ----------
    paths : int
        Number of simulated paths (antithetic mirrors included). For Sobol, a multiple of
        ``replicates`` whose quotient is a power of two keeps the sequence balanced.
    sampler : {"sobol", "pseudo"}
        Scrambled Sobol (randomized QMC) or PCG64 pseudo-random uniforms.
    seed : int, optional
        Seed of every random stream; a fixed default makes results reproducible.
    antithetic : bool
        Pair every draw with its mirror image.
    control : bool
        Use the product's control variates (kept only if they reduce the variance).
    target_stderr : float, optional
        Double the path count until the standard error is at or below this, up to
        ``max_paths``.
    chunk_paths : int, optional
        Paths simulated at once (memory); never changes the result.
    progress : bool
        Show a progress bar (tqdm; notebook-aware) while simulating.
    threads : int, optional
        Threads to simulate with (default: ``FAIRPATH_THREADS`` or every core); never changes
        the result.
    steps_per_day : int
        Under local volatility, log-Euler steps per weekday (default 1).
    stream : tuple of int
        Extra key of every random stream (``SeedSequence(seed, spawn_key=(*stream, ...))``):
        a book gives each trade its own numbers this way.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    >>> r = fp.price(call, m, paths=4096, seed=1)
    >>> abs(r.price - 10.4506) < 4 * r.stderr  # BSM value of this call
    True
    """
    return price_many([product], market, paths=paths, sampler=sampler, seed=seed,
                      antithetic=antithetic, control=control, target_stderr=target_stderr,
                      max_paths=max_paths, replicates=replicates, chunk_paths=chunk_paths,
                      source=source, progress=progress, threads=threads, stream=stream,
                      steps_per_day=steps_per_day)[0]


def price_many(products: list[Product], market: Market, *, paths: int = DEFAULT_PATHS,
               sampler: str = "sobol", seed: int | None = None, antithetic: bool = False,
               control: bool = True, target_stderr: float | None = None,
               max_paths: int = DEFAULT_MAX_PATHS, replicates: int = DEFAULT_REPLICATES,
               chunk_paths: int | None = None, source: str | None = None,
               control_set: tuple[str, ...] | None = None, progress: bool = False,
               threads: int | None = None, stream: tuple[int, ...] = (),
               steps_per_day: int = 1) -> list[PriceResult]:
    """Price several products on the same assets with the same random numbers.

    Arguments as for :func:`price`; ``target_stderr`` applies to the first product;
    ``control_set`` imposes the control variates by name on every product. The
    products share one simulation (the union of their dates), so differences between their
    prices carry far less noise than independent runs.
    """
    t_start = time.perf_counter()
    smp = make_sampler(sampler, seed=seed, antithetic=antithetic, replicates=replicates,
                       stream_key=stream)
    if target_stderr is not None and not (math.isfinite(target_stderr) and target_stderr > 0):
        raise InputError(f"must be a positive number, got {target_stderr}", key="target_stderr")
    if target_stderr is not None and (isinstance(max_paths, bool) or not isinstance(
            max_paths, int) or max_paths < paths):
        raise InputError(f"must be an integer at least the path count, got {max_paths!r}",
                         key="max_paths")
    if source is None:
        source = products[0].source
    for p in products:
        p.check(market, source or p.source)
    names = products[0].underlyings()
    market, div_notes = market.dividend_horizon(names, last_date(products, market))
    controls = [p.controls(market) if control else [] for p in products]
    law_notes = [*div_notes, *law_notes_for(market, names),
                 *model_notes(market, names, steps_per_day)]
    if not market.lognormal(names):
        dropped = {c.name for cs in controls for c in cs if not c.model_free}
        controls = [[c for c in cs if c.model_free] for cs in controls]
        if dropped:
            law_notes.append("closed-form control variates that assume lognormal levels "
                             f"switched off ({'; '.join(sorted(dropped))})")
    sim = Simulation(products, market, smp, controls, source, steps_per_day)
    if sim.params is not None and sim.params.local is not None and sim.params.local.floored:
        lp = sim.params.local
        law_notes.append(f"local variance floored at a 1% vol at {lp.floored} of {lp.points} "
                         "points of the table (where Dupire's formula is not positive: the "
                         "surface is close to an arbitrage there)")
    sim.progress = progress
    sim.threads = None if threads is None else engine_threads(threads)
    notes: list[str] = list(law_notes)
    if sim.params is not None:
        check_lognormal_tails(market, sim.names, sim.params.variance, paths)
    if market.non_normal(names) and sim.params is not None:
        check_law_tails(market, sim.names, sim.params.variance,
                        paths)
    dim = len(sim.names) * sim.steps
    if smp.name == "sobol" and dim > SOBOL_MAX_DIM:
        msg = (f"the Sobol dimension {dim} ({sim.steps} dates x {len(sim.names)} assets) exceeds "
               f"the generator's limit of {SOBOL_MAX_DIM}: fell back to the pseudo-random sampler")
        warnings.warn(msg, SamplingWarning, stacklevel=3)
        notes.append(msg)
        smp = make_sampler("pseudo", seed=smp.seed, antithetic=antithetic, stream_key=stream)
        sim.sampler = smp
    currency = market.currency

    if sim.steps == 0:
        out = []
        for p, v in zip(products, sim.deterministic_values(), strict=True):
            val = float(v[0])
            extra = (*p.notes(market), "nothing left to simulate: every level the payoff "
                     "needs is known")
            out.append(PriceResult(val, 0.0, (val, val), 0, currency, smp.name, smp.seed,
                                   time.perf_counter() - t_start, p.label(), smp.antithetic,
                                   smp.replicates, (), None, (*notes, *extra)))
        return out

    cache: dict[Block, BlockResult] = {}
    n = paths
    while True:
        blocks = smp.plan(n)
        todo = [b for b in blocks if b not in cache]
        if todo:
            cache.update(sim.run_blocks(todo, chunk_paths))
        first = combine({b: cache[b].moments[0] for b in blocks}, blocks, controls[0], smp,
                        control_set)
        if target_stderr is None or first.stderr <= target_stderr:
            break
        if n * 2 > max_paths:
            notes.append(f"target standard error {target_stderr:g} not reached at the cap of "
                         f"{max_paths:,} paths")
            break
        n *= 2
    seconds = time.perf_counter() - t_start
    total = sum(b.size for b in blocks)
    out = []
    for j, p in enumerate(products):
        est = first if j == 0 else combine({b: cache[b].moments[j] for b in blocks}, blocks,
                                           controls[j], smp, control_set)
        diag: dict[str, float] = {}
        for b in blocks:
            for k, v in cache[b].diagnostics[j].items():
                diag[k] = diag.get(k, 0.0) + v
        diag = {k: v / total for k, v in diag.items()}
        if not (math.isfinite(est.price) and math.isfinite(est.stderr)):
            raise FairpathError(f"the estimate of {p.label()} is not a finite number (price "
                                f"{est.price}, standard error {est.stderr}): the payoff's "
                                "values are too large to average (check the quantity or "
                                "notional)")
        these = [*notes, *p.notes(market), *est.notes]
        exact = any("explains the payoff exactly" in n for n in these)
        paying_now = sum(cache[b].paying[j] for b in blocks)
        if est.stderr == 0 and not exact and paying_now and smp.replicates is not None:
            these.append("every Sobol scrambling gave the same estimate, so the error bar "
                         "is 0; that is not a measure of the error (a payoff taking few "
                         "values): confirm with --sampler pseudo")
        paying = sum(cache[b].paying[j] for b in blocks) / total
        if paying == 0 and est.stderr == 0:
            these.append(f"no path pays: the value is below what {total:,} paths can resolve, "
                         "and its zero error bar says nothing about it")
        elif smp.replicates is not None and 0 < paying < FEW_PAYING:
            these.append(f"only {paying:.2%} of the paths pay: a Sobol error bar resting on so "
                         "few paths per scrambling can be too narrow; confirm with "
                         "--sampler pseudo or more paths")
        if est.variance_reduction is not None:
            these.append(f"control variate ({'; '.join(est.controls)}): variance reduced "
                         f"x{est.variance_reduction:.3g}")
        ctx = (p, market, {"paths": n, "sampler": sampler, "seed": seed,
                           "antithetic": antithetic, "control": control,
                           "replicates": replicates})
        out.append(PriceResult(est.price, est.stderr, est.ci95, n, currency, smp.name,
                               smp.seed, seconds, p.label(), smp.antithetic, smp.replicates,
                               est.controls, est.variance_reduction, tuple(these),
                               {"dates": [d.isoformat() for d in sim.grid_dates],
                                "diagnostics": diag}, ctx))
    return out

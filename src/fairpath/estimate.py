"""Prices: :func:`price` and :func:`price_many`, the public entry points of one pricing, built
on the engine (:mod:`fairpath.engine`), with the notes a practitioner needs beside a number.
"""

from __future__ import annotations

import dataclasses
import math
import time

from fairpath.engine import (  # noqa: F401  (re-exported: the engine's names as used before)
    CHUNK_BYTES,
    DEFAULT_MAX_PATHS,
    DEFAULT_PATHS,
    MAX_BATCH,
    THREAD_WORK,
    Moments,
    Settings,
    Simulation,
    combine,
    engine_threads,
    last_date,
    merge_all,
    prepare,
    richardson,
    run,
)
from fairpath.errors import FairpathError
from fairpath.market import Market
from fairpath.products.autocall import BRIDGE_BOUND
from fairpath.products.base import Product
from fairpath.products.currency import settle
from fairpath.results import CAUTION, Estimate, PriceResult  # noqa: F401
from fairpath.sampling import DEFAULT_REPLICATES

#: Below this fraction of paying paths a Sobol result warns that its error bar may be too
#: narrow (measured: a 1-month put paid by 1-2% of paths had z-scores spread 1.2-1.3x too wide
#: over 200 seeds).
FEW_PAYING = 0.02


# ---------------------------------------------------------------------------------------------
# Public entry point
# ---------------------------------------------------------------------------------------------
def price(product: Product, market: Market, *, paths: int = DEFAULT_PATHS,
          sampler: str = "sobol", seed: int | None = None, antithetic: bool = False,
          control: bool = True, target_stderr: float | None = None,
          max_paths: int = DEFAULT_MAX_PATHS, replicates: int = DEFAULT_REPLICATES,
          chunk_paths: int | None = None, source: str | None = None,
          progress: bool = False, threads: int | None = None,
          stream: tuple[int, ...] = (), steps_per_day: int = 1,
          daily_closes: bool = False,
          richardson: bool = False, dual: bool = False) -> PriceResult:
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
    richardson : bool
        Under local volatility, remove the bias of the steps to first order (Richardson
        extrapolation from twice the steps on the same Brownian paths) and report it; about
        four times the time, no control variates.
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
                      steps_per_day=steps_per_day, daily_closes=daily_closes,
                      richardson=richardson, dual=dual)[0]


def price_many(products: list[Product], market: Market, *, paths: int = DEFAULT_PATHS,
               sampler: str = "sobol", seed: int | None = None, antithetic: bool = False,
               control: bool = True, target_stderr: float | None = None,
               max_paths: int = DEFAULT_MAX_PATHS, replicates: int = DEFAULT_REPLICATES,
               chunk_paths: int | None = None, source: str | None = None,
               control_set: tuple[str, ...] | None = None, progress: bool = False,
               threads: int | None = None, stream: tuple[int, ...] = (),
               steps_per_day: int = 1, daily_closes: bool = False, richardson: bool = False,
               dual: bool = False) -> list[PriceResult]:
    """Price several products on the same assets with the same random numbers.

    Arguments as for :func:`price`; ``target_stderr`` applies to the first product;
    ``control_set`` imposes the control variates by name on every product. The
    products share one simulation (the union of their dates), so differences between their
    prices carry far less noise than independent runs.
    """
    t_start = time.perf_counter()
    # duality restarts from each outer path's closes and breach state: every close simulated,
    # for the price (its lower or upper bound) as for the bounds
    settings = Settings(paths=paths, sampler=sampler, seed=seed, antithetic=antithetic,
                        replicates=replicates, control=control, threads=threads,
                        steps_per_day=steps_per_day, daily_closes=daily_closes or dual,
                        chunk_paths=chunk_paths, stream=stream,
                        progress=progress)
    if dual:
        from fairpath.duality import check_dual

        for p in products:
            check_dual(p, market, source or p.source)
    out = price_run(products, market, settings, source=source, control_set=control_set,
                    target_stderr=target_stderr, max_paths=max_paths, t_start=t_start,
                    richardson_steps=richardson)
    if dual:
        from fairpath.duality import with_bounds

        out = [with_bounds(res, seed=seed, steps_per_day=steps_per_day, source=source)
               for res in out]
    return out


#: A bridged daily watch is kept when the range its assets' combination leaves on the price
#: (``BRIDGE_BOUND``) is at most this share of the error bar; else every close is simulated
BRIDGE_SHARE = 0.5


def price_run(products: list[Product], market: Market, settings: Settings, *,
              source: str | None = None, control_set: tuple[str, ...] | None = None,
              target_stderr: float | None = None, max_paths: int = DEFAULT_MAX_PATHS,
              t_start: float | None = None, richardson_steps: bool = False
              ) -> list[PriceResult]:
    """:func:`price_many` with its settings as one value (what the other commands call).
    ``richardson_steps``: under discretised models (local vol), remove the steps' bias to
    first order and measure it (:func:`fairpath.engine.richardson`).

    A product discounted at its issuer's funding spread is priced beside its twin without the
    spread, on the same paths: the result says the spread and the price without it
    (:func:`with_funding`)."""
    source = source if source is not None else products[0].source
    products = settle(products, market, source)
    funded = [j for j, p in enumerate(products)
              if p.funding_curve(market, source or p.source) is not None]
    twins = [dataclasses.replace(products[j], funding=False) for j in funded]
    kw = dict(source=source, control_set=control_set, target_stderr=target_stderr,
              max_paths=max_paths, t_start=t_start, richardson_steps=richardson_steps)
    out = _price_run(products + twins, market, settings, **kw)
    wide = [r for r in out if r.diagnostics.get(BRIDGE_BOUND, 0.0) > BRIDGE_SHARE * r.stderr]
    if wide:  # a bridged daily watch whose assets' combination could move it too far
        r = max(wide, key=lambda r: r.diagnostics[BRIDGE_BOUND] / max(r.stderr, 1e-300))
        why = (f"every weekday close simulated: read from monthly dates and bridges, the "
               f"knock-in's combination of the assets could move {r.product} by up to "
               f"{r.diagnostics[BRIDGE_BOUND]:.3g}, more than {BRIDGE_SHARE:g} of its error "
               f"bar ({r.stderr:.3g})")
        out = _price_run(products + twins, market, dataclasses.replace(
            settings, daily_closes=True), **kw)
        out = [dataclasses.replace(x, notes=(*x.notes, why)) for x in out]
    res, rest = out[:len(products)], out[len(products):]
    for j, twin in zip(funded, rest, strict=True):
        res[j] = with_funding(res[j], twin, market)
    return res


def with_funding(res: PriceResult, twin: PriceResult, market: Market) -> PriceResult:
    """The result of a product discounted at its issuer's funding spread, saying the spread
    and the price without it (``twin``: the same product on the same paths, discounted on the
    curve), in a note and under ``funding`` in its extras."""
    product = res.context[0] if res.context else None
    issuer = product.issuer if product is not None else None
    curve = market.issuer_spread(issuer)
    spread = {"spread": curve.zero_rates[0]} if curve.is_flat else {
        "tenors_years": list(curve.times), "spreads": list(curve.zero_rates)}
    said = (f"{curve.zero_rates[0] * 1e4:.4g} bp" if curve.is_flat else
            "from " + ", ".join(f"{s * 1e4:.4g} bp at {t:.3g}y"
                                for t, s in zip(curve.times, curve.zero_rates, strict=True)))
    note = (f"cash flows discounted at {issuer}'s funding spread over the discount curve "
            f"({said}; the paths' drift stays risk-free): without the spread the price is "
            f"{twin.price:.6g} (stderr {twin.stderr:.2g}), so the spread is worth "
            f"{res.price - twin.price:+.6g}")
    extras = {**res.extras, "funding": {"issuer": issuer, **spread,
                                        "price_without_spread": twin.price,
                                        "stderr_without_spread": twin.stderr}}
    return dataclasses.replace(res, notes=(*res.notes, note), extras=extras)


def _price_run(products: list[Product], market: Market, settings: Settings, *,
               source: str | None = None, control_set: tuple[str, ...] | None = None,
               target_stderr: float | None = None, max_paths: int = DEFAULT_MAX_PATHS,
               t_start: float | None = None, richardson_steps: bool = False
               ) -> list[PriceResult]:
    t_start = time.perf_counter() if t_start is None else t_start
    settings.make_sampler()  # refuse bad sampler settings before anything else
    if source is None:
        source = products[0].source
    market, div_notes = prepare(products, market, source)
    r = run(products, [market], settings, source=source, control_set=control_set,
            target_stderr=target_stderr, max_paths=max_paths)
    sim, smp = r.sim, r.sampler
    notes = [*div_notes, *r.notes]
    currency = market.currency
    if sim.steps == 0:
        out = []
        for p, v in zip(r.products, sim.deterministic_values(), strict=True):
            val = float(v[0])
            extra = (*p.notes(market), "nothing left to simulate: every level the payoff "
                     "needs is known")
            out.append(PriceResult(val, 0.0, (val, val), 0, currency, smp.name, smp.seed,
                                   time.perf_counter() - t_start, p.label(), smp.antithetic,
                                   smp.replicates, (), None, (*notes, *extra)))
        return out
    seconds = time.perf_counter() - t_start
    blocks, n = r.blocks, r.paths
    total = sum(b.size for b in blocks)
    caps = sim.capabilities
    out = []
    for j, p in enumerate(r.products):
        est = combine(r.moments(j), blocks, r.controls[j], smp, control_set)
        diag: dict[str, float] = {}
        for b in blocks:
            for k, v in r.cache[b].diagnostics[j].items():
                diag[k] = diag.get(k, 0.0) + v
        diag = {k: v / total for k, v in diag.items()}
        if not (math.isfinite(est.price) and math.isfinite(est.stderr)):
            raise FairpathError(f"the estimate of {p.label()} is not a finite number (price "
                                f"{est.price}, standard error {est.stderr}): the payoff's "
                                "values are too large to average (check the quantity or "
                                "notional)")
        these = [*notes, *r.control_notes[j], *p.model_notes(caps), *p.notes(market),
                 *est.notes]
        exact = any("explains the payoff exactly" in n for n in these)
        paying_now = sum(r.cache[b].paying[j] for b in blocks)
        if est.stderr == 0 and not exact and paying_now and smp.replicates is not None:
            these.append("every Sobol scrambling gave the same estimate, so the error bar "
                         "is 0; that is not a measure of the error (a payoff taking few "
                         "values): confirm with --sampler pseudo")
        paying = paying_now / total
        if paying == 0 and est.stderr == 0:
            these.append(f"no path pays: the value is below what {total:,} paths can resolve, "
                         "and its zero error bar says nothing about it")
        elif smp.replicates is not None and 0 < paying < FEW_PAYING:
            these.append(f"only {paying:.2%} of the paths pay: a Sobol error bar resting on so "
                         "few paths per scrambling can be too narrow; confirm with "
                         "--sampler pseudo or more paths")
        if est.variance_reduction is not None and est.variance_reduction >= 1:
            these.append(f"control variate ({'; '.join(est.controls)}): variance reduced "
                         f"x{est.variance_reduction:.3g}")
        elif est.variance_reduction is not None:
            these.append(f"control variate ({'; '.join(est.controls)}): kept, though the "
                         f"scramblings' spread came out x{1 / est.variance_reduction:.3g} "
                         "wider with it (within chance; it reduces the variance path by path)")
        ctx = (p, market, dataclasses.replace(settings, paths=n, progress=False))
        out.append(PriceResult(est.price, est.stderr, est.ci95, n, currency, smp.name,
                               smp.seed, seconds, p.label(), smp.antithetic, smp.replicates,
                               est.controls, est.variance_reduction, tuple(these),
                               {"dates": [d.isoformat() for d in sim.grid_dates],
                                "diagnostics": diag}, ctx))
    discretised = sim.stepper is not None and sim.stepper.discretised
    if richardson_steps and not discretised:
        out = [dataclasses.replace(res, notes=(
            *res.notes, "--richardson: these models' steps are exact (no discretisation "
            "bias), so the price is the plain one")) for res in out]
    if discretised:
        if richardson_steps:
            extrapolated = richardson(r.products, market, settings, n, source)
            if extrapolated is not None:
                label = sim.stepper.describe_steps(settings.steps_per_day)
                out = [with_richardson(res, *x, settings.steps_per_day,
                                       time.perf_counter() - t_start, label)
                       for res, x in zip(out, extrapolated, strict=True)]
                return out
        out = [dataclasses.replace(res, notes=(
            *res.notes, f"discretisation: the error bar is the sampling error alone; the "
            f"{sim.stepper.describe_steps(settings.steps_per_day)} add a bias of the order of "
            "the step, not in it; --richardson removes it to first order and measures it, in "
            "about four times the time"))
            for res in out]
    return out


def per_day(steps_per_day: int) -> str:
    """``"a day"`` or ``"N a day"``: the steps of a discretised model, in a note."""
    return "a day" if steps_per_day == 1 else f"{steps_per_day} a day"


def with_richardson(res: PriceResult, value: float, se: float, quant: float, bias: float,
                    bias_se: float, plain: float, plain_se: float, steps_per_day: int,
                    seconds: float, steps: str | None = None) -> PriceResult:
    """The result with its price replaced by the Richardson extrapolation of the steps (no
    control variates), its error bar from the spread of the extrapolated values, and the
    measured bias of the plain run (``plain``: the run's own steps without control variates,
    on the same paths) said in a note and under ``discretisation_bias``."""
    steps = steps or per_day(steps_per_day)
    note = (f"discretisation removed to first order (Richardson: 2 x the price on steps half "
            f"as long - the price on the {steps}, on the same Brownian "
            f"paths, no control variates): the plain price on the {steps} (no control "
            f"variates) was {plain:.6g} (stderr {plain_se:.2g}), and its steps' bias is "
            f"measured at {bias:+.4g} (stderr {bias_se:.2g})")
    extras = {**res.extras, "discretisation_bias": {
        "estimate": bias, "stderr": bias_se, "steps_per_day": steps_per_day,
        "plain_price": plain, "plain_stderr": plain_se}}
    return dataclasses.replace(res, price=value, stderr=se,
                               ci95=(value - quant * se, value + quant * se), controls=(),
                               variance_reduction=None, seconds=seconds,
                               notes=(*res.notes, note), extras=extras)

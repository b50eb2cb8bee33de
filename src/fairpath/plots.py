"""Pictures of results (matplotlib): convergence, payoff distribution, sample paths, Greeks.

Every function returns a matplotlib ``Figure``; in a notebook it shows inline. They are model
estimates under stated assumptions, like the numbers they draw.
"""

from __future__ import annotations

import numpy as np

from fairpath.errors import InputError
from fairpath.estimate import Simulation, price
from fairpath.market import Market
from fairpath.products.base import Product
from fairpath.sampling import make_sampler

KINDS = ("convergence", "distribution", "paths")


def _axes(ax=None, figsize=(7, 4)):
    if ax is not None:
        return ax.figure, ax
    from matplotlib import pyplot as plt

    fig, ax = plt.subplots(figsize=figsize)
    plt.close(fig)  # shown by the notebook's display of the returned figure, not twice
    return fig, ax


def plot_result(kind: str, product: Product, market: Market, settings: dict, result,
                **kwargs):
    if kind == "convergence":
        return convergence(product, market, settings, **kwargs)
    if kind == "distribution":
        return distribution(product, market, settings, result, **kwargs)
    if kind == "paths":
        return sample_paths(product, market, **kwargs)
    raise InputError(f"unknown plot {kind!r}; known: {', '.join(KINDS)}", key="kind")


def convergence(product: Product, market: Market, settings: dict, *, start: int = 1024,
                ax=None):
    """The estimate and its 95% interval at path counts doubling up to the run's."""
    fig, ax = _axes(ax)
    counts, est, lo, hi = [], [], [], []
    n = start
    top = settings.get("paths", 65536)
    replicates = settings.get("replicates", 16)
    while n <= top:
        r = price(product, market, paths=n, sampler=settings.get("sampler", "sobol"),
                  seed=settings.get("seed"), antithetic=settings.get("antithetic", False),
                  control=settings.get("control", True), replicates=replicates)
        counts.append(n)
        est.append(r.price)
        lo.append(r.ci95[0])
        hi.append(r.ci95[1])
        n *= 2
    ax.fill_between(counts, lo, hi, alpha=0.3, label="95% interval")
    ax.plot(counts, est, marker="o", label="estimate")
    ref = product.closed_form(market)
    if ref is not None:
        ax.axhline(ref, color="k", linestyle="--", label="closed form")
    ax.set_xscale("log", base=2)
    ax.set_xlabel("paths")
    ax.set_ylabel(f"price ({market.currency})")
    ax.set_title(f"{product.label()}: convergence")
    ax.legend()
    return fig


def distribution(product: Product, market: Market, settings: dict, result=None, *,
                 paths: int = 16384, bins: int = 60, ax=None):
    """Histogram of the discounted payoffs of ``paths`` pseudo-random paths."""
    fig, ax = _axes(ax)
    smp = make_sampler("pseudo", seed=settings.get("seed"))
    sim = Simulation([product], market, smp, [[]])
    if sim.steps == 0:
        raise InputError("nothing to simulate: the payoff is already known")
    values = sim.payoff_samples(smp.plan(paths))
    ax.hist(values, bins=bins, color="#4a7ab5", alpha=0.85)
    mean = result.price if result is not None else float(values.mean())
    ax.axvline(mean, color="k", linestyle="--", label=f"price {mean:.4g}")
    ax.set_xlabel(f"discounted payoff ({market.currency})")
    ax.set_ylabel("paths")
    ax.set_title(f"{product.label()}: payoff distribution ({paths:,} paths)")
    ax.legend()
    return fig


def sample_paths(product: Product, market: Market, *, n: int = 100, seed: int | None = None,
                 ax=None):
    """A fan of ``n`` sample paths (as performances for several assets) with the product's
    observation dates and barriers drawn on it."""
    fig, ax = _axes(ax, figsize=(8, 4.5))
    smp = make_sampler("pseudo", seed=seed)
    sim = Simulation([product], market, smp, [[]])
    if sim.steps == 0:
        raise InputError("nothing to simulate: the payoff is already known")
    block = smp.plan(max(n, 2))[0]
    levels = sim.level_samples(block)[:n]
    dates = [market.valuation_date, *sim.grid_dates]
    several = len(sim.names) > 1
    init = getattr(product, "initial", None)
    base = init(market) if callable(init) else sim.spots
    for i, name in enumerate(sim.names):
        y = np.concatenate([np.full((levels.shape[0], 1), sim.spots[i]), levels[:, i, :]],
                           axis=1)
        if several:
            y = y / base[i]
        ax.plot(dates, y.T, linewidth=0.6, alpha=0.35, color=f"C{i}")
        ax.plot([], [], color=f"C{i}", label=name)
    obs = [d for d in product.observation_dates() if d > market.valuation_date]
    if len(obs) <= 60:
        for d in obs:
            ax.axvline(d, color="grey", linewidth=0.5, linestyle=":")
    for label, level in _barriers(product, several, base):
        ax.axhline(level, color="#b3261e", linewidth=1.2, linestyle="--")
        ax.text(dates[0], level, f" {label}", color="#b3261e", va="bottom", fontsize=8)
    ax.set_ylabel("performance" if several else "level")
    ax.set_title(f"{product.label()}: {levels.shape[0]} sample paths")
    ax.legend(loc="upper left", fontsize=8)
    fig.autofmt_xdate()
    return fig


def _barriers(product: Product, several: bool, base) -> list[tuple[str, float]]:
    out = []
    if getattr(product, "barrier", None) is not None:
        out.append(("barrier", float(product.barrier)))
    if product.kind == "autocallable":
        scale = 1.0 if several else float(base[0])
        out.append(("protection", product.protection_barrier * scale))
        out.append(("coupon", product.coupon_barrier * scale))
        out.append(("autocall", product.autocall_level * scale))
    return out


def greek_profile(profile, greek: str = "delta", asset: str | None = None, ax=None):
    """Plot one Greek (with its 95% band) over the spots of :func:`fairpath.greek_profile`."""
    fig, ax = _axes(ax)
    spots = [s for s, _ in profile]
    vals, errs = [], []
    for _, g in profile:
        item = getattr(g, greek)
        if isinstance(item, dict):
            item = item[asset or next(iter(item))]
        vals.append(item.value)
        errs.append(item.stderr)
    vals, errs = np.array(vals), np.array(errs)
    ax.fill_between(spots, vals - 1.96 * errs, vals + 1.96 * errs, alpha=0.3,
                    label="95% interval")
    ax.plot(spots, vals, marker="o", label=greek)
    ax.set_xlabel("spot")
    ax.set_ylabel(greek)
    ax.set_title(f"{greek} over spot")
    ax.legend()
    return fig

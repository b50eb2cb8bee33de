"""Pictures of results (matplotlib): convergence, payoff distribution, sample paths, Greeks,
and the laws of return shocks.

Every function returns a matplotlib ``Figure``; in a notebook it shows inline. They are model
estimates under stated assumptions, like the numbers they draw.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from fairpath.engine import Settings, Simulation
from fairpath.errors import InputError
from fairpath.estimate import price_run
from fairpath.market import Market
from fairpath.products.base import Product
from fairpath.results import PLOTTERS
from fairpath.sampling import make_sampler

KINDS = ("convergence", "distribution", "paths")


def new_axes(ax=None, figsize=(7, 4)):
    """``(figure, axes)``: the given axes' figure, or a new figure closed to pyplot (every
    plotting function in fairpath draws on this)."""
    if ax is not None:
        return ax.figure, ax
    from matplotlib import pyplot as plt

    fig, ax = plt.subplots(figsize=figsize)
    plt.close(fig)  # shown by the notebook's display of the returned figure, not twice
    return fig, ax


def plot_result(result, kind: str = "convergence", **kwargs):
    """A picture of a price result (``PriceResult.plot`` calls this): ``"convergence"``,
    ``"distribution"`` or ``"paths"``, re-simulated with the result's own product, market and
    settings (the same sampler, seed, controls and steps per day)."""
    product, market, settings = result.context
    if kind == "convergence":
        return convergence(product, market, settings, **kwargs)
    if kind == "distribution":
        return distribution(product, market, settings, result, **kwargs)
    if kind == "paths":
        return sample_paths(product, market, steps_per_day=settings.steps_per_day, **kwargs)
    raise InputError(f"unknown plot {kind!r}; known: {', '.join(KINDS)}", key="kind")


PLOTTERS["result"] = plot_result


def convergence(product: Product, market: Market, settings: Settings, *, start: int = 1024,
                ax=None):
    """The estimate and its 95% interval at path counts doubling up to the run's."""
    fig, ax = new_axes(ax)
    counts, est, lo, hi = [], [], [], []
    n = start
    top = settings.paths
    while n <= top:
        r = price_run([product], market, dataclasses.replace(settings, paths=n))[0]
        counts.append(n)
        est.append(r.price)
        lo.append(r.ci95[0])
        hi.append(r.ci95[1])
        n *= 2
    ax.fill_between(counts, lo, hi, alpha=0.3, label="95% interval")
    ax.plot(counts, est, marker="o", label="estimate")
    ref = product.reference(market)
    if ref is not None:
        ax.axhline(ref, color="k", linestyle="--", label="closed form")
    ax.set_xscale("log", base=2)
    ax.set_xlabel("paths")
    ax.set_ylabel(f"price ({market.currency})")
    ax.set_title(f"{product.label()}: convergence")
    ax.legend()
    return fig


def distribution(product: Product, market: Market, settings: Settings, result=None, *,
                 paths: int = 16384, bins: int = 60, ax=None):
    """Histogram of the discounted payoffs of ``paths`` pseudo-random paths."""
    fig, ax = new_axes(ax)
    smp = make_sampler("pseudo", seed=settings.seed)
    sim = Simulation([product], market, smp, [[]], steps_per_day=settings.steps_per_day)
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
                 steps_per_day: int = 1, ax=None):
    """A fan of ``n`` sample paths (as performances for several assets) with the product's
    observation dates and barriers drawn on it."""
    fig, ax = new_axes(ax, figsize=(8, 4.5))
    smp = make_sampler("pseudo", seed=seed)
    sim = Simulation([product], market, smp, [[]], steps_per_day=steps_per_day)
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
    fig, ax = new_axes(ax)
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


def shock_densities(laws, ax=None, *, labels=None, normal: bool = True, xmax: float = 8.0,
                    log: bool = True, floor: float = 1e-6, width: float = 0.25,
                    points: int = 801):
    """Densities of several laws' one-day shocks, each scaled to unit variance, on one axis.

    Parameters
    ----------
    laws : sequence of Law
        The laws to draw (:class:`~fairpath.laws.NormalLaw`, :class:`~fairpath.laws.StudentT`,
        :class:`~fairpath.laws.EmpiricalLaw`, ...). Each curve is the density of the shock the
        engine samples (clipped and standardised), labelled with ``law.describe()``.
    ax : matplotlib Axes, optional
        Draw on this axis instead of a new figure.
    labels : sequence of str, optional
        Legend labels instead of the laws' descriptions.
    normal : bool
        Also draw the standard normal density (dashed) for reference.
    xmax : float
        Draw shocks in ``[-xmax, xmax]`` standard deviations.
    log : bool
        Logarithmic density axis, which shows the tails; ``floor`` is its lower limit.
    width : float
        Each curve is the law's probability of a window of this width (in standard deviations)
        around each point, divided by the width: an average density that smooths the spikes an
        empirical law has where order statistics lie close together. ``0`` draws the exact
        density of the sampled shock.
    points : int
        Points per curve.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Only the shape of a law is drawn: the engine scales every shock to the asset's own vol, so
    two laws with the same vol differ in their tails and shoulders, not in their spread. The
    clipped probability at each end (see :mod:`fairpath.laws`) is a point mass, not drawn.

    Examples
    --------
    In a notebook, ``shock_densities([fp.NormalLaw(), fp.StudentT(4.0)])`` shows the normal
    and the Student-t shock on a log scale, with the standard normal dashed behind them.
    """
    from scipy import stats

    laws = list(laws)
    if not laws:
        raise InputError("no laws to draw", key="laws")
    if labels is not None and len(labels) != len(laws):
        raise InputError(f"{len(labels)} labels for {len(laws)} laws", key="labels")
    fig, ax = new_axes(ax)
    x = np.linspace(-xmax, xmax, points)
    if normal:
        ax.plot(x, stats.norm.pdf(x), color="k", linestyle="--", linewidth=1.0,
                label="standard normal")
    for i, law in enumerate(laws):
        if width > 0:
            y = (law.cdf(x + 0.5 * width) - law.cdf(x - 0.5 * width)) / width
        else:
            y = np.asarray(law.density(x), dtype=float)
        y = np.where(y > 0, y, np.nan)  # outside the clip: nothing to draw on a log scale
        ax.plot(x, y, color=f"C{i}", linewidth=1.4,
                label=labels[i] if labels is not None else law.describe())
    if log:
        ax.set_yscale("log")
        ax.set_ylim(floor, 10.0)  # headroom above the peak for the legend
    ax.set_xlim(-xmax, xmax)
    ax.set_xlabel("one-day shock (standard deviations)")
    ax.set_ylabel("density")
    ax.set_title("Laws of daily return shocks, scaled to unit variance")
    ax.legend(fontsize=8)
    return fig


def horizon_returns(markets, asset: str, horizon, *, paths: int = 16384,
                    seed: int | None = None, bins: int = 60, ax=None):
    """Simulated log-returns of ``asset`` from the valuation date to ``horizon``, one curve per
    market, each standardised by its own sample mean and standard deviation.

    Parameters
    ----------
    markets : sequence of Market
        Markets that differ in the asset's law (for example ``m.with_law(...)``); each curve
        is labelled with the asset's ``law.describe()`` and the sample's excess kurtosis.
    asset : str
        The asset whose log-return is drawn.
    horizon : datetime.date
        The end of the return; under a non-normal law the path steps on every weekday.
    paths : int
        Pseudo-random paths per market (the same seed for all).
    bins : int
        Histogram bins between -6 and 6 standard deviations.
    ax : matplotlib Axes, optional
        Draw on this axis instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Daily shocks add up: over ``n`` independent days the excess kurtosis of the sum is that of
    one day divided by ``n``, so fat daily tails matter most for short horizons. The histogram
    of a few thousand paths is itself noisy in the far tails.

    Examples
    --------
    In a notebook, ``horizon_returns([m, m.with_law(fp.StudentT(4.0), ["NORDA"])], "NORDA",
    date(2027, 1, 4))`` compares one month of NORDA under the normal and the Student-t law.
    """
    from scipy import stats

    from fairpath.products import European

    markets = list(markets)
    if not markets:
        raise InputError("no markets to draw", key="markets")
    fig, ax = new_axes(ax)
    edges = np.linspace(-6.0, 6.0, bins + 1)
    centres = 0.5 * (edges[:-1] + edges[1:])
    ax.plot(centres, stats.norm.pdf(centres), color="k", linestyle="--", linewidth=1.0,
            label="standard normal")
    for i, market in enumerate(markets):
        if horizon <= market.valuation_date:
            raise InputError(f"horizon {horizon} is not after the valuation date "
                             f"{market.valuation_date}", key="horizon")
        spot = market.asset(asset).spot
        probe = European(asset=asset, right="call", strike=spot, expiry=horizon)
        smp = make_sampler("pseudo", seed=seed)
        sim = Simulation([probe], market, smp, [[]])
        r = np.concatenate([np.log(sim.level_samples(b)[:, 0, -1] / spot)
                            for b in smp.plan(paths)])
        z = (r - r.mean()) / r.std()
        counts, _ = np.histogram(z, bins=edges)
        h = counts / (len(z) * np.diff(edges))  # paths beyond the edges still count
        label = (f"{market.asset(asset).law.describe()}, "
                 f"excess kurtosis {stats.kurtosis(r):.2f}")
        ax.plot(centres, np.where(h > 0, h, np.nan), drawstyle="steps-mid", color=f"C{i}",
                linewidth=1.2, label=label)
    ax.set_yscale("log")
    # down to a twentieth of one path in a bin; headroom above the peak for the legend
    ax.set_ylim(0.05 / (paths * (edges[1] - edges[0])), 300.0)
    ax.set_xlabel("log-return, standardised")
    ax.set_ylabel("density")
    ax.set_title(f"{asset}: log-return to {horizon} ({paths:,} paths each)")
    ax.legend(fontsize=8, loc="upper center")
    return fig

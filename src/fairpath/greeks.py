"""Greeks with standard errors: bump-and-revalue on common random numbers, and pathwise.

Bump-and-revalue. Every bumped market (spot up/down per asset, both spots of a pair for the
cross-gammas, vol up/down per asset, the zero curve up/down, the valuation date one day later) is
simulated in the same pass from the same normals (common random numbers: the same Sobol points
and scramblings, or the same PCG64 streams). The discounted payoffs of all scenarios are
accumulated jointly per block, so a Greek, a linear combination ``w . V`` of scenario values, gets
its standard error from the spread of the combination itself: across the Sobol scramblings, or
from ``w' Cov w / N`` for pseudo-random numbers. Never from the price's error.

* delta_i = (V(S_i + h_i) - V(S_i - h_i)) / (2 h_i), gamma_i = (V+ - 2 V + V-) / h_i^2,
  ``h_i = SPOT_BUMP * S_i``; cross-gamma_ij from the four corners (+-h_i, +-h_j);
* vega_i = (V(vol_i + dv) - V(vol_i - dv)) / (2 dv), every pillar of the asset moved by
  ``dv = VOL_BUMP`` (one vol point, or half the lowest pillar vol when that is smaller);
* rho = (V(r + dr) - V(r - dr)) / (2 dr), a parallel shift ``dr = RATE_BUMP`` of the zero curve;
* theta = (V(valuation + 1 day) - V(valuation - 1 day)) / (2 days in years): the value change
  as the valuation date moves forward, per year, with the product's dates (and the simulation
  grid's dates) kept; a central difference, so its bias is of second order in the day.

Near a continuously monitored barrier the payoff handed to the bumps is already smooth in the
spot (each path is weighted by its Brownian-bridge survival probability instead of a 0/1
knock-out), so central bumps stay stable as the spot approaches the barrier (tested at 1% of
spot from it). Payoffs that jump (digitals, discrete triggers) are bumped too, with a note: a
small move can cross too few paths for the estimate and its error bar to be reliable.

Before bumping, levels the trade fixes from today's spots (a basket's or a note's initial
levels) are fixed explicitly (:meth:`Product.struck`), so a spot bump moves the asset and not
the terms.

Pathwise (Lipschitz payoffs: European, Asian, basket): products that implement
``pathwise(paths)`` return the derivative of each path's discounted payoff with respect to every
asset's spot and (flat vol) vol, computed in the same run; ``dS_t/dS_0 = S_t/S_0`` and, for a flat
vol, ``dS_t/dsigma = S_t (W_t - sigma t)`` with ``W_t`` recovered from the path.
"""

from __future__ import annotations

import dataclasses
import json
import math
import time
from dataclasses import dataclass, field
from datetime import timedelta

import numpy as np

from fairpath.dates import year_fraction
from fairpath.engine import DEFAULT_PATHS, Settings, merge_all, prepare, run
from fairpath.errors import InputError
from fairpath.market import Market
from fairpath.models import ModelSet
from fairpath.products.base import PathSet, Product
from fairpath.registry import Capability, Shortcut, usable
from fairpath.results import CAUTION
from fairpath.sampling import DEFAULT_REPLICATES

#: Relative spot bump (1% of spot), absolute vol bump (one vol point), rate bump (one basis
#: point); theta moves the valuation date by one calendar day.
SPOT_BUMP = 0.01
VOL_BUMP = 0.01
RATE_BUMP = 1e-4
METHODS = ("bump", "pathwise", "lr", "auto")
#: ``auto`` keeps a bump over the likelihood ratio only when the latter is this much noisier.
LR_NOISE = 3.0


@dataclass(frozen=True, slots=True)
class Greek:
    value: float
    stderr: float
    method: str

    def to_dict(self) -> dict:
        return {"value": self.value, "stderr": self.stderr, "method": self.method}


@dataclass(frozen=True, slots=True)
class GreeksResult:
    """Price and Greeks; per-asset Greeks are dicts keyed by asset name."""

    price: float
    stderr: float
    currency: str
    delta: dict[str, Greek]
    gamma: dict[str, Greek]
    vega: dict[str, Greek]
    cross_gamma: dict[str, Greek]
    rho: Greek | None
    theta: Greek | None
    paths: int
    sampler: str
    seed: int
    seconds: float
    bumps: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        g = {"delta": {k: v.to_dict() for k, v in self.delta.items()},
             "gamma": {k: v.to_dict() for k, v in self.gamma.items()},
             "vega": {k: v.to_dict() for k, v in self.vega.items()}}
        if self.rho is not None:
            g["rho"] = self.rho.to_dict()
        if self.theta is not None:
            g["theta"] = self.theta.to_dict()
        if self.cross_gamma:
            g["cross_gamma"] = {k: v.to_dict() for k, v in self.cross_gamma.items()}
        return {"price": self.price, "stderr": self.stderr, "greeks": g,
                "currency": self.currency, "paths": self.paths, "sampler": self.sampler,
                "seed": self.seed, "seconds": round(self.seconds, 6), "bumps": self.bumps,
                "units": "delta per 1 unit of spot, gamma per unit^2, vega per 1.00 of vol, "
                         "rho per 1.00 of rate, theta per year",
                "notes": list(self.notes)}

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def rows(self) -> list[tuple[str, str, Greek]]:
        out = [("delta", k, v) for k, v in self.delta.items()]
        out += [("gamma", k, v) for k, v in self.gamma.items()]
        out += [("cross-gamma", k, v) for k, v in self.cross_gamma.items()]
        out += [("vega", k, v) for k, v in self.vega.items()]
        if self.rho is not None:
            out.append(("rho", "", self.rho))
        if self.theta is not None:
            out.append(("theta", "", self.theta))
        return out

    def __str__(self) -> str:
        lines = [f"price {self.price:.6f} {self.currency} (stderr {self.stderr:.6f}); "
                 f"{self.paths:,} {self.sampler} paths, seed {self.seed}",
                 f"{'greek':<12} {'asset':<14} {'value':>14} {'stderr':>12}  method"]
        for name, asset, g in self.rows():
            lines.append(f"{name:<12} {asset:<14} {g.value:>14.6f} {g.stderr:>12.6f}  "
                         f"{g.method}")
        lines.append("units: delta per 1 unit of spot, gamma per unit^2, vega per 1.00 of vol, "
                     "rho per 1.00 of rate, theta per year")
        lines.extend(f"note: {n}" for n in self.notes)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        import html
        body = "".join(f"<tr><td>{html.escape(n)}</td><td>{html.escape(a)}</td>"
                       f"<td>{g.value:.6f}</td><td>{g.stderr:.6f}</td>"
                       f"<td>{html.escape(g.method)}</td></tr>" for n, a, g in self.rows())
        return (f"<p>price {self.price:.6f} {html.escape(self.currency)} (stderr "
                f"{self.stderr:.6f})</p><table><tr><th>greek</th><th>asset</th><th>value</th>"
                f"<th>stderr</th><th>method</th></tr>{body}</table>"
                f"<p><small>{html.escape(CAUTION)}</small></p>")


# ---------------------------------------------------------------------------------------------
# Scenario markets
# ---------------------------------------------------------------------------------------------
def _bump_spot(market: Market, name: str, factor: float) -> Market:
    a = market.asset(name)
    return market.with_asset(dataclasses.replace(a, spot=a.spot * factor))


def vol_bump(market: Market, name: str) -> float:
    """The vega bump of an asset: one vol point, or half its lowest pillar vol when that is
    below two points (so a low vol is bumped relative to its size, never through zero); a
    surface is moved in parallel, every quote by the bump."""
    a = market.asset(name)
    low = min(a.vol.vols) if a.surface is None else min(min(r) for r in a.surface.vols)
    return min(VOL_BUMP, 0.5 * low)


def _bump_vol(market: Market, name: str, dv: float) -> Market:
    a = market.asset(name)
    vol = a.vol.shifted(dv)
    lowest = min(vol.vols) if a.surface is None else min(min(r) for r in a.surface.vols) + dv
    if not lowest > 0:
        raise InputError(f"a vega bump would make {name}'s vol non-positive: its vol is "
                         f"{lowest - dv:g}", source=market.source, key=f"assets.{name}.vol")
    surface = a.surface.shifted(dv) if a.surface is not None else None
    return market.with_asset(dataclasses.replace(a, vol=vol, surface=surface))


def likelihood_ratio(y: np.ndarray, x1: np.ndarray, spots: np.ndarray, mean: np.ndarray,
                     cov: np.ndarray, names: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Likelihood-ratio (score) weights for delta and gamma from the first simulation step.

    The spots enter the path's density only through the first step's log-return, normal with
    mean ``mu`` and covariance ``C``. With ``a = C^{-1} (x_1 - log S_0 - mu)``:
    ``d/dS_i log p = a_i / S_i`` and ``d2p / (p dS_i dS_j) = (a_i a_j - C^{-1}_ij - delta_ij a_i)
    / (S_i S_j)`` (Broadie & Glasserman 1996; Glasserman, "Monte Carlo Methods in Financial
    Engineering", 2004, section 7.3). Unbiased for any payoff, jumps included; the variance grows
    as the first step shrinks.
    """
    inv = np.linalg.pinv(cov)
    xi = x1 - np.log(spots)[None, :] - mean[None, :]
    a = xi @ inv.T
    out = {}
    n = len(names)
    for i in range(n):
        out[f"lr delta {names[i]}"] = y * a[:, i] / spots[i]
        out[f"lr gamma {names[i]}"] = y * (a[:, i] ** 2 - inv[i, i] - a[:, i]) / spots[i] ** 2
        for k in range(i + 1, n):
            out[f"lr cross {names[i]}/{names[k]}"] = \
                y * (a[:, i] * a[:, k] - inv[i, k]) / (spots[i] * spots[k])
    return out


# ---------------------------------------------------------------------------------------------
# Entry point
# ---------------------------------------------------------------------------------------------
def greeks(product: Product, market: Market, *, paths: int = DEFAULT_PATHS,
           sampler: str = "sobol", seed: int | None = None, method: str = "auto",
           antithetic: bool = False, replicates: int = DEFAULT_REPLICATES,
           cross_gamma: bool = True, source: str | None = None,
           stream: tuple[int, ...] = (), steps_per_day: int = 1,
           threads: int | None = None) -> GreeksResult:
    """Delta, gamma (and cross-gammas), vega per asset, rho and theta, each with its error.

    Parameters
    ----------
    method : {"auto", "bump", "pathwise"}
        ``bump``: central differences on common random numbers for every Greek. ``pathwise``:
        the pathwise estimator for delta and vega where the product offers one (bumps for the
        rest). ``auto``: pathwise where offered, else bumps; each Greek says which it used.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    >>> g = fp.greeks(call, m, paths=16384, seed=3)
    >>> abs(g.delta["NORDA"].value - 0.6368) < 4 * g.delta["NORDA"].stderr + 1e-3
    True
    """
    t0 = time.perf_counter()
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; known: {', '.join(METHODS)}",
                         key="--method")
    source = source or product.source
    settings = Settings(paths=paths, sampler=sampler, seed=seed, antithetic=antithetic,
                        replicates=replicates, control=False, threads=threads,
                        steps_per_day=steps_per_day, stream=stream)
    settings.make_sampler()  # refuse bad sampler settings before anything else
    product.check(market, source)
    product = product.struck(market)
    market, div_notes = prepare([product], market, source)
    names = product.underlyings()
    notes: list[str] = []
    unused = [n for n in market.asset_names if n not in names]
    if unused:
        notes.append(f"no Greeks for {', '.join(unused)}: not used by the product")

    if product.payoff_jumps:
        notes.append(f"the {product.kind} payoff jumps: bumped Greeks count the paths that cross "
                     "a trigger, and for small moves (theta's one day, above all) a Sobol run "
                     "may see too few crossings for the estimate or its error bar to be "
                     "reliable; delta and gamma also have likelihood-ratio estimates where "
                     "the levels are lognormal, which 'auto' prefers unless they are far "
                     "noisier")
    # scenario list: (label, market)
    scen: list[tuple[str, Market]] = [("base", market)]
    bumps = {"spot": f"{SPOT_BUMP:.0%} of spot, central", "vol": f"{VOL_BUMP:g} absolute, central",
             "rate": f"{RATE_BUMP:g} parallel, central", "theta": "valuation date +-1 day, central"}
    for n in names:
        scen.append((f"S+ {n}", _bump_spot(market, n, 1 + SPOT_BUMP)))
        scen.append((f"S- {n}", _bump_spot(market, n, 1 - SPOT_BUMP)))
    pairs = [(a, b) for i, a in enumerate(names) for b in names[i + 1:]] if cross_gamma else []
    for a, b in pairs:
        for sa in (1, -1):
            for sb in (1, -1):
                m2 = _bump_spot(_bump_spot(market, a, 1 + sa * SPOT_BUMP), b, 1 + sb * SPOT_BUMP)
                scen.append((f"S{sa:+d}{sb:+d} {a}/{b}", m2))
    dvs = {n: vol_bump(market, n) for n in names}
    for n in names:
        scen.append((f"v+ {n}", _bump_vol(market, n, dvs[n])))
        scen.append((f"v- {n}", _bump_vol(market, n, -dvs[n])))
    if any(dv < VOL_BUMP for dv in dvs.values()):
        bumps["vol"] = (f"{VOL_BUMP:g} absolute, central; half the lowest vol where that is "
                        f"smaller ({', '.join(f'{n}: {dv:g}' for n, dv in dvs.items())})")
    scen.append(("r+", dataclasses.replace(market, discount=market.discount.shifted(RATE_BUMP))))
    scen.append(("r-", dataclasses.replace(market, discount=market.discount.shifted(-RATE_BUMP))))
    later = dataclasses.replace(market, valuation_date=market.valuation_date + timedelta(days=1))
    earlier = dataclasses.replace(market,
                                  valuation_date=market.valuation_date - timedelta(days=1))
    theta_ok = True
    try:
        product.check(later, source)
    except InputError:
        theta_ok = False
        notes.append("theta omitted: the product's first date is within a day")
    if theta_ok:
        scen.append(("t+1d", later))
        scen.append(("t-1d", earlier))
    index = {lab: i for i, (lab, _) in enumerate(scen)}

    models = ModelSet.resolve(market, names, source=source)
    caps = models.capabilities
    use_pathwise = method in ("pathwise", "auto") and product.has_pathwise(market)
    want_lr = method == "lr" or (method == "auto" and product.payoff_jumps)
    lr_ok = usable(product.kind, Shortcut.LIKELIHOOD_RATIO, caps) and product.score_safe()
    if use_pathwise and not usable(product.kind, Shortcut.PATHWISE, caps):
        use_pathwise = False
        notes.append("pathwise estimators need levels proportional to the spot and a flat "
                     "vol (no surface, no cash dividends): delta and vega are bumped")
    elif use_pathwise and Capability.FLAT_VOL not in caps:
        notes.append("pathwise vega needs normal shocks and a flat vol: vega is bumped")
    if method == "pathwise" and not use_pathwise:
        notes.append(f"no pathwise estimator for {product.kind}: bump-and-revalue used")

    def lr_applies(stepper) -> bool:
        """The likelihood ratio from the first step: asked for, registered for the product
        under these models, and the first step has variance in every asset."""
        return (want_lr and lr_ok and stepper is not None and stepper.first_step() is not None
                and bool(np.all(stepper.variance[:, 0] > 0)))

    holder: dict = {}

    def extras(j: int, ps: PathSet, payoff: np.ndarray, stepper) -> list[np.ndarray]:
        """Pathwise derivatives and likelihood-ratio weights beside the base payoff, in a
        fixed order of their names (the same on every batch and thread)."""
        cols: dict[str, np.ndarray] = {}
        if use_pathwise:
            cols.update(product.pathwise(ps))
        if lr_applies(stepper):
            mean, cov = stepper.first_step()
            first = ps.grid_log_levels[:, :, 0]
            cols.update(likelihood_ratio(payoff, first, ps.spots, mean, cov, names))
        keys = sorted(cols)
        holder["names"] = keys
        return [cols[k] for k in keys]

    res = run([product], [m for _, m in scen], settings, source=source,
              extras=extras if (use_pathwise or want_lr) else None)
    if res.sim.steps == 0:
        raise InputError("nothing left to simulate: every level the payoff needs is known, so "
                         "the Greeks are those of a fixed amount", source=source)
    if want_lr and not lr_applies(res.sim.stepper):
        if Capability.SCORE not in caps:
            why = ("the model does not give the first step's law in today's spot (a "
                   "volatility surface, cash dividends, or shocks that are not normal), so "
                   "the likelihood ratio's normal score does not apply")
        else:
            why = ("the first step has no variance or the payoff uses today's spot directly, "
                   "so the normal score does not apply")
        notes.append(f"no likelihood-ratio estimator here ({why}): delta and gamma are bumped")
    notes.extend(div_notes)
    notes.extend(res.notes)
    smp = res.sampler
    blocks = res.blocks
    moments = res.moments(0)
    pw_names: list[str] = list(holder.get("names", []))

    pooled = merge_all([moments[b] for b in blocks])
    if smp.replicates is not None:
        reps: dict[int, list] = {}
        for b in blocks:
            reps.setdefault(b.replicate, []).append(moments[b])
        groups = np.array([merge_all(v).mean for _, v in sorted(reps.items())])
    else:
        groups = None
    width = pooled.mean.shape[0]

    def combo(weights: dict[int, float], label: str) -> Greek:
        w = np.zeros(width)
        for i, c in weights.items():
            w[i] += c
        if groups is not None:
            est = groups @ w
            return Greek(float(est.mean()), float(np.std(est, ddof=1) / math.sqrt(len(est))),
                         label)
        var = float(w @ pooled.cov() @ w) / pooled.n
        return Greek(float(pooled.mean @ w), math.sqrt(max(var, 0.0)), label)

    base = combo({0: 1.0}, "")
    delta, gamma, vega, cross = {}, {}, {}, {}
    n_scen = len(scen)
    pw_index = {k: n_scen + i for i, k in enumerate(pw_names)}
    def pick(bumped: Greek, lr_key: str) -> Greek:
        """``lr``: the likelihood-ratio estimate. ``auto`` (payoffs that jump): the likelihood
        ratio, whose error bar is trustworthy, unless it is more than LR_NOISE times noisier
        than a bump whose error bar is not zero (a bump of a jumping payoff can show an error
        of exactly zero when no scrambling sees a path cross the trigger)."""
        if lr_key not in pw_index:
            return bumped
        lr = combo({pw_index[lr_key]: 1.0}, "likelihood ratio (first step)")
        if method == "lr":
            return lr
        if bumped.stderr > 0 and lr.stderr > LR_NOISE * bumped.stderr:
            return dataclasses.replace(bumped, method=bumped.method + f"; the likelihood ratio "
                                       f"was over {LR_NOISE:g}x noisier")
        return lr

    for n in names:
        s = market.asset(n).spot
        h = SPOT_BUMP * s
        up, dn = index[f"S+ {n}"], index[f"S- {n}"]
        if f"delta {n}" in pw_index:
            delta[n] = combo({pw_index[f"delta {n}"]: 1.0}, "pathwise")
        else:
            delta[n] = pick(combo({up: 0.5 / h, dn: -0.5 / h}, "bump (central, common numbers)"),
                            f"lr delta {n}")
        gamma[n] = pick(combo({up: 1 / h**2, 0: -2 / h**2, dn: 1 / h**2},
                              "bump (central, common numbers)"), f"lr gamma {n}")
        if f"vega {n}" in pw_index:
            vega[n] = combo({pw_index[f"vega {n}"]: 1.0}, "pathwise")
        else:
            vega[n] = combo({index[f"v+ {n}"]: 0.5 / dvs[n], index[f"v- {n}"]: -0.5 / dvs[n]},
                            "bump (central, common numbers)")
    for a, b in pairs:
        ha, hb = SPOT_BUMP * market.asset(a).spot, SPOT_BUMP * market.asset(b).spot
        c = 1.0 / (4 * ha * hb)
        cross[f"{a}/{b}"] = pick(combo({index[f"S+1+1 {a}/{b}"]: c,
                                        index[f"S+1-1 {a}/{b}"]: -c,
                                        index[f"S-1+1 {a}/{b}"]: -c,
                                        index[f"S-1-1 {a}/{b}"]: c},
                                       "bump (four corners, common numbers)"),
                                 f"lr cross {a}/{b}")
    rho = combo({index["r+"]: 0.5 / RATE_BUMP, index["r-"]: -0.5 / RATE_BUMP},
                "bump (central, common numbers)")
    theta = None
    if theta_ok:
        dt = year_fraction(market.valuation_date, later.valuation_date, market.day_count)
        theta = combo({index["t+1d"]: 0.5 / dt, index["t-1d"]: -0.5 / dt},
                      "bump (valuation date +-1 day, common numbers)")
    if product.payoff_jumps:
        def flag(g: Greek | None) -> Greek | None:
            """A bump of a jumping payoff whose error bar is exactly zero saw no path cross a
            trigger in any scrambling or batch: the zero says nothing."""
            if g is None or g.stderr > 0 or not g.method.startswith("bump"):
                return g
            return dataclasses.replace(g, method=g.method + "; error bar unreliable: no path "
                                       "crossed a trigger between the bumped runs")
        delta, gamma, vega, cross = ({k: flag(v) for k, v in d.items()}
                                     for d in (delta, gamma, vega, cross))
        rho, theta = flag(rho), flag(theta)
    return GreeksResult(base.value, base.stderr, market.currency, delta, gamma, vega, cross,
                        rho, theta, paths, smp.name, smp.seed, time.perf_counter() - t0, bumps,
                        tuple(notes))


def greek_profile(product: Product, market: Market, asset: str | None = None,
                  spots=None, **kwargs) -> GreekProfile:
    """The Greeks over a range of spots of one asset (default: 70% to 130% of spot, 13 points),
    each on the same random numbers; keyword arguments go to :func:`greeks`.

    Returns a :class:`GreekProfile`: a list of ``(spot, GreeksResult)`` pairs that renders as a
    table in a notebook and draws one Greek over spot with ``.plot("delta")``.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> put = fp.European(asset="NORDA", right="put", strike=100.0, expiry=date(2027, 12, 1))
    >>> prof = greek_profile(put, m, spots=[80.0, 120.0], paths=4096)
    >>> prof[0][1].delta["NORDA"].value < prof[1][1].delta["NORDA"].value
    True
    """
    asset = asset or product.underlyings()[0]
    base = market.asset(asset).spot
    if spots is None:
        spots = np.linspace(0.7, 1.3, 13) * base
    product = product.struck(market)
    out = []
    for s in spots:
        if not s > 0:
            raise InputError(f"spots must be positive, got {s}", key="spots")
        m = _bump_spot(market, asset, float(s) / base)
        out.append((float(s), greeks(product, m, **kwargs)))
    return GreekProfile(out, asset=asset)


class GreekProfile(list):
    """``(spot, GreeksResult)`` pairs over spots of one asset (:func:`greek_profile`).

    A plain list of tuples in every other respect; in a notebook it renders as a table of the
    price, delta, gamma and vega of ``asset`` at each spot (value and standard error), and
    :meth:`plot` draws one Greek with its 95% band.
    """

    def __init__(self, items=(), *, asset: str | None = None):
        super().__init__(items)
        self.asset = asset

    def _asset(self) -> str | None:
        if self.asset is not None or not self:
            return self.asset
        return next(iter(self[0][1].delta), None)

    def _repr_html_(self) -> str:
        import html

        asset = self._asset()

        def cell(d: dict) -> str:
            g = d.get(asset)
            return "<td></td>" if g is None else (
                f"<td>{g.value:.6g} <small>({g.stderr:.2g})</small></td>")

        body = "".join(f"<tr><td>{s:.6g}</td><td>{r.price:.6g} <small>({r.stderr:.2g})"
                       f"</small></td>{cell(r.delta)}{cell(r.gamma)}{cell(r.vega)}</tr>"
                       for s, r in self)
        name = html.escape(asset or "")
        return (f"<table><caption>Greeks of {name} over its spot (value, standard error in "
                f"brackets)</caption><tr><th>spot of {name}</th><th>price</th><th>delta</th>"
                f"<th>gamma</th><th>vega</th></tr>{body}</table>"
                f"<p><small>{html.escape(CAUTION)}</small></p>")

    def plot(self, greek: str = "delta", ax=None):
        """One Greek of the profile's asset over spot, with its 95% band (a matplotlib
        figure; see :func:`fairpath.plots.greek_profile`)."""
        from fairpath import plots

        return plots.greek_profile(self, greek, asset=self._asset(), ax=ax)

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
import time
from dataclasses import dataclass, field

import numpy as np

from fairpath import bumps as bump
from fairpath.dates import year_fraction
from fairpath.engine import DEFAULT_PATHS, Settings, prepare, run
from fairpath.errors import InputError
from fairpath.market import Market
from fairpath.models import ModelSet
from fairpath.products.base import PathSet, Product
from fairpath.products.currency import settle
from fairpath.registry import LIKELIHOOD_RATIO, PATHWISE, Capability, Estimator, Shortcut, usable
from fairpath.results import CAUTION
from fairpath.sampling import DEFAULT_REPLICATES

#: Relative spot bump (1% of spot), absolute vol bump (one vol point), rate bump (one basis
#: point); theta moves the valuation date by one calendar day.
SPOT_BUMP = 0.01
VOL_BUMP = 0.01
RATE_BUMP = 1e-4
#: Correlation bump (absolute), dividend-yield bump (absolute), cash-dividend bump (relative).
CORR_BUMP = 0.01
DIV_BUMP = 1e-4
CASH_DIV_BUMP = 0.01
#: ``--buckets``: by tenor (vol pillars or surface rows), or by tenor and strike (each quote).
BUCKETS = ("tenor", "strike")
METHODS = ("bump", "pathwise", "lr", "auto")
#: ``auto`` keeps a bump over the likelihood ratio only when the latter is this much noisier.
LR_NOISE = 3.0


#: z-score below which a Greek is marked not significant (its 95% error bar covers zero)
SIGNIFICANT_Z = 1.96


@dataclass(frozen=True, slots=True)
class Greek:
    value: float
    stderr: float
    method: str

    @property
    def significant(self) -> bool:
        """Is zero outside the Greek's 95% error bar?"""
        return abs(self.value) > SIGNIFICANT_Z * self.stderr

    def to_dict(self) -> dict:
        return {"value": self.value, "stderr": self.stderr, "method": self.method,
                "significant": self.significant}


#: per kind of Greek: (factor to the desk's unit given the spot, the unit's name)
def desk_units(kind: str, spot: float | None) -> tuple[float, str] | None:
    """The unit a desk reads for a kind of Greek, as ``(factor, name)``: the raw value times
    ``factor`` is the desk figure."""
    if kind == "delta" and spot:
        return 0.01 * spot, "value change for a 1% spot move (cash delta)"
    if kind == "gamma" and spot:
        return 1e-4 * spot * spot, "change of the cash delta for a 1% spot move (1% gamma)"
    if kind == "cross_gamma" and spot:
        return 1e-4 * spot, "change of the first asset's cash delta for a 1% move of the second"
    if kind in ("vega", "vega_buckets"):
        return 0.01, "per vol point"
    if kind in ("rho", "spread"):
        return 1e-4, "per basis point"
    if kind == "theta":
        return 1.0 / 365.0, "per calendar day"
    if kind in ("correlation",):
        return 0.01, "per correlation point (0.01)"
    if kind == "dividend":
        return 1e-4, "per basis point of dividend yield"
    if kind == "cash_dividend":
        return 0.01, "per 1% of the announced amounts"
    return None


@dataclass(frozen=True, slots=True)
class GreeksResult:
    """Price and Greeks; per-asset Greeks are dicts keyed by asset name (pairs ``"A/B"``)."""

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
    #: per pair ``"A/B"`` (and ``"all"``: every pair of the product's assets together)
    correlation: dict[str, Greek] = field(default_factory=dict)
    #: per asset: per 1.00 of dividend yield
    dividend: dict[str, Greek] = field(default_factory=dict)
    #: per asset with cash dividends: per 100% of the announced amounts
    cash_dividend: dict[str, Greek] = field(default_factory=dict)
    #: per asset, per bucket (a vol tenor, a surface tenor, or ``"tenor/strike"``)
    vega_buckets: dict[str, dict[str, Greek]] = field(default_factory=dict)
    #: the spots (for the desk's units) and the note's notional, if any
    spots: dict[str, float] = field(default_factory=dict)
    notional: float | None = None
    #: per 1.00 of the issuer's funding spread (a parallel shift), where the product has one
    spread: Greek | None = None
    issuer: str | None = None
    #: per other currency in play: per 1.00 of a parallel shift of its zero curve
    rho_curves: dict[str, Greek] = field(default_factory=dict)

    def _per_asset(self) -> list[tuple[str, dict]]:
        return [("delta", self.delta), ("gamma", self.gamma), ("vega", self.vega),
                ("cross_gamma", self.cross_gamma), ("correlation", self.correlation),
                ("dividend", self.dividend), ("cash_dividend", self.cash_dividend)]

    def _desk(self, kind: str, key: str, g: Greek) -> dict:
        """The desk's figure of one Greek (and as a share of notional for a note)."""
        spot = self.spots.get(key.split("/")[-1] if kind == "cross_gamma" else key)
        unit = desk_units(kind, spot)
        if unit is None:
            return {}
        f, name = unit
        d = {"desk_value": g.value * f, "desk_stderr": g.stderr * f, "desk_unit": name}
        if self.notional:
            d["desk_percent_of_notional"] = 100.0 * g.value * f / self.notional
        return d

    def to_dict(self) -> dict:
        g: dict = {}
        for kind, table in self._per_asset():
            if table or kind in ("delta", "gamma", "vega"):
                g[kind] = {k: {**v.to_dict(), **self._desk(kind, k, v)}
                           for k, v in table.items()}
        for kind, v in (("rho", self.rho), ("theta", self.theta), ("spread", self.spread)):
            if v is not None:
                g[kind] = {**v.to_dict(), **self._desk(kind, "", v)}
        if self.spread is not None:
            g["spread"]["issuer"] = self.issuer
        if self.rho_curves:
            g["rho_curves"] = {c: {**v.to_dict(), **self._desk("rho", "", v)}
                               for c, v in self.rho_curves.items()}
        out = {"price": self.price, "stderr": self.stderr, "greeks": g,
               "currency": self.currency, "paths": self.paths, "sampler": self.sampler,
               "seed": self.seed, "seconds": round(self.seconds, 6), "bumps": self.bumps,
               "units": UNITS, "notes": list(self.notes)}
        if self.vega_buckets:
            out["greeks"]["vega_buckets"] = {
                a: {b: {**v.to_dict(), **self._desk("vega_buckets", a, v)}
                    for b, v in buckets.items()} for a, buckets in self.vega_buckets.items()}
            out["vega_buckets"] = out["greeks"]["vega_buckets"]
        for kind in ("correlation", "dividend"):
            if kind in g:
                out[kind] = g[kind]
        return out

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def rows(self) -> list[tuple[str, str, Greek]]:
        out = [("delta", k, v) for k, v in self.delta.items()]
        out += [("gamma", k, v) for k, v in self.gamma.items()]
        out += [("cross-gamma", k, v) for k, v in self.cross_gamma.items()]
        out += [("vega", k, v) for k, v in self.vega.items()]
        for a, buckets in self.vega_buckets.items():
            out += [("vega bucket", f"{a} {b}", v) for b, v in buckets.items()]
        if self.rho is not None:
            out.append(("rho", "", self.rho))
        out += [("rho", c, v) for c, v in self.rho_curves.items()]
        if self.theta is not None:
            out.append(("theta", "", self.theta))
        if self.spread is not None:
            out.append(("funding spread", self.issuer or "", self.spread))
        out += [("correlation", k, v) for k, v in self.correlation.items()]
        out += [("dividend", k, v) for k, v in self.dividend.items()]
        out += [("cash dividend", k, v) for k, v in self.cash_dividend.items()]
        return out

    def _desk_row(self, name: str, asset: str, g: Greek) -> str:
        kind = {"cross-gamma": "cross_gamma", "vega bucket": "vega_buckets",
                "cash dividend": "cash_dividend", "funding spread": "spread"}.get(name, name)
        key = asset.split(" ")[0] if kind == "vega_buckets" else asset
        d = self._desk(kind, key, g)
        if not d:
            return ""
        txt = f"{d['desk_value']:.6g}"
        if "desk_percent_of_notional" in d:
            txt += f" ({d['desk_percent_of_notional']:.4g}% of notional)"
        return txt

    def __str__(self) -> str:
        lines = [f"price {self.price:.6f} {self.currency} (stderr {self.stderr:.6f}); "
                 f"{self.paths:,} {self.sampler} paths, seed {self.seed}",
                 f"{'greek':<14} {'asset':<16} {'value':>14} {'stderr':>12}  "
                 f"{'desk units':<34} method"]
        for name, asset, g in self.rows():
            flag = "" if g.significant else "  (not significant)"
            lines.append(f"{name:<14} {asset:<16} {g.value:>14.6f} {g.stderr:>12.6f}  "
                         f"{self._desk_row(name, asset, g):<34} {g.method}{flag}")
        lines.append(f"units: {UNITS}")
        lines.append(f"desk units: {DESK_UNITS}")
        lines.extend(f"note: {n}" for n in self.notes)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        import html
        body = "".join(f"<tr><td>{html.escape(n)}</td><td>{html.escape(a)}</td>"
                       f"<td>{g.value:.6f}</td><td>{g.stderr:.6f}</td>"
                       f"<td>{html.escape(self._desk_row(n, a, g))}</td>"
                       f"<td>{html.escape(g.method)}"
                       f"{'' if g.significant else ' (not significant)'}</td></tr>"
                       for n, a, g in self.rows())
        return (f"<p>price {self.price:.6f} {html.escape(self.currency)} (stderr "
                f"{self.stderr:.6f})</p><table><tr><th>greek</th><th>asset</th><th>value</th>"
                f"<th>stderr</th><th>desk units</th><th>method</th></tr>{body}</table>"
                f"<p><small>{html.escape(DESK_UNITS)}</small></p>"
                f"<p><small>{html.escape(CAUTION)}</small></p>")


UNITS = ("delta per 1 unit of spot, gamma per unit^2, vega per 1.00 of vol, rho per 1.00 of "
         "rate, theta per year, correlation per 1.00 of correlation, dividend per 1.00 of "
         "dividend yield, cash dividend per 100% of the announced amounts, funding spread per "
         "1.00 of spread")
DESK_UNITS = ("cash delta = value change for a 1% spot move; 1% gamma = change of the cash "
              "delta for a 1% move; vega per vol point; rho per basis point; theta per day; "
              "correlation per 0.01; dividend per basis point of yield; cash dividend per 1% "
              "of the amounts; funding spread per basis point; for a note also as a "
              "percentage of notional")


# ---------------------------------------------------------------------------------------------
# Scenario markets
# ---------------------------------------------------------------------------------------------
def vol_buckets(market: Market, name: str, by: str) -> list[tuple[str, int | None, int | None]]:
    """``(label, tenor index, strike index)`` of each vega bucket of an asset: its vol pillars
    or surface tenors (``by="tenor"``), or every surface quote (``by="strike"``); a flat vol is
    one bucket ``("flat", None, None)``."""
    a = market.asset(name)
    if a.surface is not None:
        s = a.surface
        tenors = s.tenor_names or tuple(f"{t:.4g}y" for t in s.times)
        if by == "tenor":
            return [(t, i, None) for i, t in enumerate(tenors)]
        return [(f"{t}/{k:g}", i, j) for i, t in enumerate(tenors)
                for j, k in enumerate(s.strikes)]
    if a.vol.is_flat:
        return [("flat", None, None)]
    names = a.vol.names or tuple(f"{t:.4g}y" for t in a.vol.times)
    return [(t, i, None) for i, t in enumerate(names)]


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
        out[Estimator(LIKELIHOOD_RATIO, "delta", names[i])] = y * a[:, i] / spots[i]
        out[Estimator(LIKELIHOOD_RATIO, "gamma", names[i])] = \
            y * (a[:, i] ** 2 - inv[i, i] - a[:, i]) / spots[i] ** 2
        for k in range(i + 1, n):
            out[Estimator(LIKELIHOOD_RATIO, "cross", f"{names[i]}/{names[k]}")] = \
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
           daily_closes: bool = False,
           threads: int | None = None, correlation: bool = True, dividends: bool = True,
           buckets: str | None = None, progress: bool = False) -> GreeksResult:
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
                        steps_per_day=steps_per_day, daily_closes=daily_closes, stream=stream,
                        progress=progress)
    settings.make_sampler()  # refuse bad sampler settings before anything else
    product.check(market, source)
    product = settle([product.struck(market)], market, source)[0]
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
    # scenario list: (label, market); every bump rebuilds what depends on it (fairpath.bumps)
    scen: list[tuple[str, Market]] = [("base", market)]
    bumps = {"spot": f"{SPOT_BUMP:.0%} of spot, central", "vol": f"{VOL_BUMP:g} absolute, central",
             "rate": f"{RATE_BUMP:g} parallel, central", "theta": "valuation date +-1 day, central"}
    for n in names:
        scen.append((f"S+ {n}", bump.spot(market, n, 1 + SPOT_BUMP)))
        scen.append((f"S- {n}", bump.spot(market, n, 1 - SPOT_BUMP)))
    pairs = [(a, b) for i, a in enumerate(names) for b in names[i + 1:]] if cross_gamma else []
    for a, b in pairs:
        for sa in (1, -1):
            for sb in (1, -1):
                m2 = bump.spot(bump.spot(market, a, 1 + sa * SPOT_BUMP), b, 1 + sb * SPOT_BUMP)
                scen.append((f"S{sa:+d}{sb:+d} {a}/{b}", m2))
    # the exchange rates in play: simulated (a converted payoff, an option on the rate), or
    # only in a foreign asset's quanto drift (their vol and correlation move it)
    codes = market.rates_in_play(names)
    drift_only = [c for c in codes if c not in names]
    dvs = {n: bump.vol_bump_size(market, n, VOL_BUMP) for n in (*names, *drift_only)}
    for n in (*names, *drift_only):
        scen.append((f"v+ {n}", bump.vol(market, n, dvs[n])))
        scen.append((f"v- {n}", bump.vol(market, n, -dvs[n])))
    if any(dv < VOL_BUMP for dv in dvs.values()):
        bumps["vol"] = (f"{VOL_BUMP:g} absolute, central; half the lowest vol where that is "
                        f"smaller ({', '.join(f'{n}: {dv:g}' for n, dv in dvs.items())})")
    scen.append(("r+", bump.rates(market, RATE_BUMP)))
    scen.append(("r-", bump.rates(market, -RATE_BUMP)))
    for c in codes:  # each other currency's curve
        scen.append((f"r+ {c}", bump.curve_rates(market, c, RATE_BUMP)))
        scen.append((f"r- {c}", bump.curve_rates(market, c, -RATE_BUMP)))
    funding = product.funding_curve(market, source)
    if funding is not None:  # the issuer's funding spread, a parallel shift
        for label, dr in (("f+", RATE_BUMP), ("f-", -RATE_BUMP)):
            scen.append((label, market.with_issuer_spread(product.issuer,
                                                          funding.shifted(dr))))
        bumps["spread"] = f"{RATE_BUMP:g} parallel on {product.issuer}'s spread, central"
    later = bump.valuation_date(market, 1)
    earlier = bump.valuation_date(market, -1)
    theta_ok = True
    try:
        product.check(later, source)
    except InputError:
        theta_ok = False
        notes.append("theta omitted: the product's first date is within a day")
    if theta_ok:
        scen.append(("t+1d", later))
        scen.append(("t-1d", earlier))
    # correlation: each pair of the product's assets, and every pair together
    corr_pairs = [*((a, b) for i, a in enumerate(names) for b in names[i + 1:]),
                  *((n, market.foreign(n)) for n in names if market.foreign(n) in drift_only)] \
        if correlation else []
    corr_done: list[str] = []
    skipped: list[str] = []
    groups_c = [(f"{a}/{b}", [(a, b)]) for a, b in corr_pairs]
    if len(corr_pairs) > 1:
        groups_c.append(("all", corr_pairs))
    for label, group in groups_c:
        try:
            up = bump.correlation(market, group, CORR_BUMP)
            dn = bump.correlation(market, group, -CORR_BUMP)
        except InputError as exc:
            skipped.append(f"{label} ({exc.problem})")
            continue
        scen.append((f"c+ {label}", up))
        scen.append((f"c- {label}", dn))
        corr_done.append(label)
    if corr_done:
        bumps["correlation"] = f"{CORR_BUMP:g} absolute, central"
    if skipped:
        notes.append("correlation sensitivity skipped where a bump breaks the matrix: "
                     + "; ".join(skipped))
    # dividends: the yield of each asset; the announced cash amounts where there are some
    cash = [n for n in names if market.dividend_times(n)] if dividends else []
    yields = [n for n in names if not market.is_fx(n)] if dividends else []  # a rate pays none
    for n in yields:
        scen.append((f"q+ {n}", bump.dividend_yield(market, n, DIV_BUMP)))
        scen.append((f"q- {n}", bump.dividend_yield(market, n, -DIV_BUMP)))
    for n in cash:
        scen.append((f"D+ {n}", bump.cash_dividends(market, n, 1 + CASH_DIV_BUMP)))
        scen.append((f"D- {n}", bump.cash_dividends(market, n, 1 - CASH_DIV_BUMP)))
    if dividends:
        bumps["dividend"] = f"{DIV_BUMP:g} of yield, central" + (
            f"; cash amounts +-{CASH_DIV_BUMP:.0%}, central" if cash else "")
    # vega by bucket: one pillar (a vol tenor, a surface row) or one surface quote at a time
    bucket_labels: dict[str, list[tuple[str, int | None, int | None]]] = {}
    bucket_dv: dict[tuple[str, str], float] = {}
    if buckets is not None:
        if buckets not in BUCKETS:
            raise InputError(f"unknown buckets {buckets!r}; known: {', '.join(BUCKETS)}",
                             key="--buckets")
        for n in names:
            bucket_labels[n] = vol_buckets(market, n, buckets)
        if not any(len(v) > 1 or v[0][1] is not None for v in bucket_labels.values()):
            raise InputError("vega by bucket needs vol pillars (vol_tenors or a vol_surface), "
                             f"and {', '.join(names)} "
                             f"{'has' if len(names) == 1 else 'have'} a flat vol",
                             source=market.source, key="--buckets")
        refused: list[str] = []
        for n, labels in bucket_labels.items():
            for label, ti, ki in labels:
                if ti is None and ki is None:
                    continue  # a flat vol: its bucket is the parallel vega
                # one quote moved alone can make a steep smile arbitrageable: a tenth of the
                # bump then, else the bucket is skipped and said
                for dv in (dvs[n], 0.1 * dvs[n]):
                    try:
                        up = bump.vol(market, n, dv, tenor=ti, strike=ki)
                        dn = bump.vol(market, n, -dv, tenor=ti, strike=ki)
                    except InputError as exc:
                        why = exc.problem
                        continue
                    scen.append((f"b+ {n} {label}", up))
                    scen.append((f"b- {n} {label}", dn))
                    bucket_dv[(n, label)] = dv
                    break
                else:
                    refused.append(f"{n} {label} ({why})")
        smaller = [f"{n} {lab}" for (n, lab), dv in bucket_dv.items() if dv < dvs[n]]
        if smaller:
            notes.append(f"vega buckets bumped by a tenth of {VOL_BUMP:g} where a full bump "
                         f"of one quote breaks the surface's arbitrage checks: "
                         f"{', '.join(smaller)}")
        if refused:
            notes.append("vega buckets skipped (even a small bump breaks the surface's "
                         f"arbitrage checks): {'; '.join(refused)}")
        bumps["vega_buckets"] = f"{VOL_BUMP:g} absolute per bucket, central; by {buckets}"
    index = {lab: i for i, (lab, _) in enumerate(scen)}

    models = ModelSet.resolve(market, names, source=source)
    caps = models.capabilities
    use_pathwise = method in ("pathwise", "auto") and product.has_pathwise(market)
    want_lr = method == "lr" or (method == "auto" and product.payoff_jumps)
    lr_ok = usable(product.kind, Shortcut.LIKELIHOOD_RATIO, caps) and product.score_safe()
    if use_pathwise and not usable(product.kind, Shortcut.PATHWISE, caps):
        use_pathwise = False
        notes.append("pathwise estimators need levels proportional to the spot (no cash "
                     "dividends): delta and vega are bumped")
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
        keys = sorted(cols, key=lambda e: e.label)
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
    if getattr(res.products[0], "policy", None) is not None:  # early exercise
        notes.append("early exercise: every bumped scenario exercises by the policy fitted on "
                     "the base market's pilot paths, held fixed (Greeks through the frozen "
                     "policy, the standard practice)")
    smp = res.sampler
    pw_names: list[Estimator] = list(holder.get("names", []))

    weighted = res.weighted(0)

    def combo(weights: dict[int, float], label: str) -> Greek:
        return Greek(*weighted(weights), label)

    base = combo({0: 1.0}, "")
    delta, gamma, vega, cross = {}, {}, {}, {}
    n_scen = len(scen)
    pw_index = {k: n_scen + i for i, k in enumerate(pw_names)}
    def pick(bumped: Greek, lr_key: Estimator) -> Greek:
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
        if Estimator(PATHWISE, "delta", n) in pw_index:
            delta[n] = combo({pw_index[Estimator(PATHWISE, "delta", n)]: 1.0}, "pathwise")
        else:
            delta[n] = pick(combo({up: 0.5 / h, dn: -0.5 / h}, "bump (central, common numbers)"),
                            Estimator(LIKELIHOOD_RATIO, "delta", n))
        gamma[n] = pick(combo({up: 1 / h**2, 0: -2 / h**2, dn: 1 / h**2},
                              "bump (central, common numbers)"),
                        Estimator(LIKELIHOOD_RATIO, "gamma", n))
        if Estimator(PATHWISE, "vega", n) in pw_index:
            vega[n] = combo({pw_index[Estimator(PATHWISE, "vega", n)]: 1.0}, "pathwise")
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
                                 Estimator(LIKELIHOOD_RATIO, "cross", f"{a}/{b}"))
    rho = combo({index["r+"]: 0.5 / RATE_BUMP, index["r-"]: -0.5 / RATE_BUMP},
                "bump (central, common numbers)")
    rho_curves = {c: combo({index[f"r+ {c}"]: 0.5 / RATE_BUMP, index[f"r- {c}"]: -0.5 / RATE_BUMP},
                           "bump (central, common numbers)") for c in codes}
    for c in drift_only:  # the quanto drift's exchange-rate vol
        vega[c] = combo({index[f"v+ {c}"]: 0.5 / dvs[c], index[f"v- {c}"]: -0.5 / dvs[c]},
                        "bump (central, common numbers); the exchange rate's vol in the "
                        "quanto drift")
    spread = None if funding is None else \
        combo({index["f+"]: 0.5 / RATE_BUMP, index["f-"]: -0.5 / RATE_BUMP},
              "bump (central, common numbers)")
    theta = None
    if theta_ok:
        dt = year_fraction(market.valuation_date, later.valuation_date, market.day_count)
        theta = combo({index["t+1d"]: 0.5 / dt, index["t-1d"]: -0.5 / dt},
                      "bump (valuation date +-1 day, common numbers)")
    central = "bump (central, common numbers)"
    corr = {lab: combo({index[f"c+ {lab}"]: 0.5 / CORR_BUMP, index[f"c- {lab}"]: -0.5 / CORR_BUMP},
                       central + ("; every pair together" if lab == "all" else ""))
            for lab in corr_done}
    divs = {n: combo({index[f"q+ {n}"]: 0.5 / DIV_BUMP, index[f"q- {n}"]: -0.5 / DIV_BUMP},
                     central) for n in yields}
    cash_divs = {n: combo({index[f"D+ {n}"]: 0.5 / CASH_DIV_BUMP,
                           index[f"D- {n}"]: -0.5 / CASH_DIV_BUMP}, central) for n in cash}
    vega_b: dict[str, dict[str, Greek]] = {}
    for n, labels in bucket_labels.items():
        vega_b[n] = {}
        for label, ti, ki in labels:
            if ti is None and ki is None:
                vega_b[n][label] = dataclasses.replace(vega[n], method=vega[n].method
                                                       + "; a flat vol: one bucket")
                continue
            if (n, label) not in bucket_dv:
                continue
            dv = bucket_dv[(n, label)]
            vega_b[n][label] = combo({index[f"b+ {n} {label}"]: 0.5 / dv,
                                      index[f"b- {n} {label}"]: -0.5 / dv}, central)
        w: dict[int, float] = {}
        for label, _, _ in labels:
            if (n, label) not in bucket_dv:
                continue
            dv = bucket_dv[(n, label)]
            w[index[f"b+ {n} {label}"]] = 0.5 / dv
            w[index[f"b- {n} {label}"]] = -0.5 / dv
        if w:
            total = combo(w, "")
            notes.append(f"vega buckets of {n} add up to {total.value:.6g} (stderr "
                         f"{total.stderr:.2g}) against a parallel vega of {vega[n].value:.6g}")
    if product.payoff_jumps:
        def flag(g: Greek | None) -> Greek | None:
            """A bump of a jumping payoff whose error bar is exactly zero saw no path cross a
            trigger in any scrambling or batch: the zero says nothing."""
            if g is None or g.stderr > 0 or not g.method.startswith("bump"):
                return g
            return dataclasses.replace(g, method=g.method + "; error bar unreliable: no path "
                                       "crossed a trigger between the bumped runs")
        delta, gamma, vega, cross, corr, divs, cash_divs = (
            {k: flag(v) for k, v in d.items()}
            for d in (delta, gamma, vega, cross, corr, divs, cash_divs))
        vega_b = {a: {k: flag(v) for k, v in d.items()} for a, d in vega_b.items()}
        rho, theta, spread = flag(rho), flag(theta), flag(spread)
        rho_curves = {k: flag(v) for k, v in rho_curves.items()}
    return GreeksResult(base.value, base.stderr, market.currency, delta, gamma, vega, cross,
                        rho, theta, paths, smp.name, smp.seed, time.perf_counter() - t0, bumps,
                        tuple(notes), corr, divs, cash_divs, vega_b,
                        {n: market.asset(n).spot for n in names},
                        getattr(product, "notional", None), spread,
                        product.issuer if funding is not None else None, rho_curves)


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
        m = bump.spot(market, asset, float(s) / base)
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

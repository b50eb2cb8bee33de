"""Performance baskets: worst-of, best-of and weighted-average calls and puts.

Each asset's performance is ``S_i(T) / S_i(0)`` (its level at expiry over its level on the
valuation date). The basket level is the smallest (``worst``), the largest (``best``) or the
weighted sum (``average``, ``weights`` summing to 1, equal by default) of the performances. A call
pays ``notional * max(B - strike_level, 0)``, a put ``notional * max(strike_level - B, 0)``, at
expiry.

Control variates offered to the estimator (it keeps the set that reduces the variance most):
the same option on the geometric basket ``prod P_i^{w_i}`` (lognormal, closed form under the
model), each asset's own vanilla option, each asset's discounted terminal level, and for a
worst-of or best-of of three or more assets the same option on each pair (Stulz's formula).

With two or more assets and normal shocks, each path contributes the option's expectation given
all assets but the last: the last asset's log-performance is then normal, and the option on the
worst, best or average has a lognormal closed form in it (conditional Monte Carlo: the same
expectation, less variance, and a smoother integrand for Sobol points). ``raw_payoff`` keeps
the plain discounted payoff.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np
from scipy.special import ndtr

from fairpath import closed_form as cf
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT
from fairpath.kernels import extreme_given_last
from fairpath.market import Market, integrate_vol_product
from fairpath.products.base import (
    ControlVariate,
    PathSet,
    Product,
    asset_list,
    pathwise_from_gradient,
    read_asset_names,
    read_initial_levels,
)
from fairpath.products.vanilla import RIGHTS, intrinsic
from fairpath.registry import Capability, Estimator, Shortcut, register_shortcut

COMBINES = ("worst", "best", "average")
#: Strikes (as multiples of the basket's) of the pair controls when the last asset is
#: integrated analytically (measured on the benchmark's worst-of put: one pair at three strikes
#: halved the RMSE over 8 seeds at 32,768 paths, against one strike; five did no better).
PAIR_MONEYNESS = (0.85, 1.0, 1.2)
#: Largest ``strike_level`` a product file may give: a larger one is a percentage typed as a
#: number (105 for 105%).
MAX_STRIKE_LEVEL = 5.0


@dataclass(frozen=True, slots=True)
class Basket(Product):
    """Option on a basket of performances.

    Examples
    --------
    >>> from datetime import date
    >>> Basket(assets=("NORDA", "KELPA"), combine="worst", right="put", strike_level=1.0,
    ...        expiry=date(2027, 12, 1), notional=1000.0).basket_weights
    (0.5, 0.5)
    """

    kind: ClassVar[str] = "basket"

    assets: tuple[str, ...] = field(kw_only=True)
    combine: str = field(kw_only=True)
    right: str = field(kw_only=True)
    strike_level: float = field(kw_only=True)
    expiry: date = field(kw_only=True)
    weights: tuple[float, ...] | None = field(default=None, kw_only=True)
    notional: float = field(default=1.0, kw_only=True)
    #: absolute initial level per asset for a basket already struck (else today's spots)
    initial_levels: tuple[tuple[str, float], ...] = field(default=(), kw_only=True)

    def __post_init__(self):
        assets = asset_list(self.assets)
        object.__setattr__(self, "assets", assets)
        if self.combine not in COMBINES:
            raise InputError(f"must be one of {', '.join(COMBINES)}, got {self.combine!r}",
                             key="combine")
        if self.right not in RIGHTS:
            raise InputError(f"must be 'call' or 'put', got {self.right!r}", key="right")
        if not (math.isfinite(self.strike_level) and self.strike_level >= 0):
            raise InputError(f"must be a non-negative fraction, got {self.strike_level}",
                             key="strike_level")
        if not math.isfinite(self.notional):
            raise InputError(f"must be a finite number, got {self.notional}", key="notional")
        if self.weights is not None:
            if self.combine != "average":
                raise InputError(f"weights apply to combine = \"average\" only, not "
                                 f"{self.combine!r}", key="weights")
            w = tuple(float(x) for x in self.weights)
            if len(w) != len(assets):
                raise InputError(f"{len(w)} weights for {len(assets)} assets", key="weights")
            if any(not (math.isfinite(x) and x >= 0) for x in w):
                raise InputError(f"weights must be non-negative numbers, got {list(w)}",
                                 key="weights")
            if abs(sum(w) - 1.0) > 1e-9:
                raise InputError(f"weights must sum to 1, they sum to {sum(w):.10g}",
                                 key="weights")
            object.__setattr__(self, "weights", w)
        init = self.initial_levels
        if isinstance(init, dict):
            init = tuple(init.items())
        init = tuple((str(k), float(v)) for k, v in init)
        object.__setattr__(self, "initial_levels", init)
        for k, v in init:
            if k not in assets:
                raise InputError(f"{k!r} is not one of the basket's assets {list(assets)}",
                                 key=f"initial_levels.{k}")
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"must be a positive level, got {v}", key=f"initial_levels.{k}")
        if init and {k for k, _ in init} != set(assets):
            missing = [a for a in assets if a not in dict(init)]
            raise InputError(f"give an initial level for every asset; missing "
                             f"{', '.join(missing)}", key="initial_levels")

    @classmethod
    def from_table(cls, tab) -> dict:
        assets = read_asset_names(tab)
        weights = tab.list("weights", None)
        if weights is not None:
            weights = tuple(tab.check_number(f"weights[{i}]", x, nonnegative=True)
                            for i, x in enumerate(weights))
        levels = read_initial_levels(tab, assets, "basket")
        notional = tab.number("notional", 1.0, limit=MAX_AMOUNT)
        quantity = tab.number("quantity", 1.0, limit=MAX_AMOUNT)
        strike_level = tab.number("strike_level", nonnegative=True)
        if strike_level > MAX_STRIKE_LEVEL:
            raise tab.error("strike_level", f"{strike_level:g} is not a fraction of the initial "
                            f"levels (1.00 = 100%); a percentage? write {strike_level / 100:g} "
                            f"for {strike_level:g}%")
        return dict(assets=tuple(assets), combine=tab.string("combine", choices=COMBINES),
                    right=tab.string("right", choices=RIGHTS),
                    strike_level=strike_level,
                    expiry=tab.date("expiry"), weights=weights, notional=notional * quantity,
                    initial_levels=levels,
                    name=tab.string("name", None))

    def underlyings(self) -> tuple[str, ...]:
        return self.assets

    def observation_dates(self) -> tuple[date, ...]:
        return (self.expiry,)

    def check(self, market: Market, source: str | None = None) -> None:
        Product.check(self, market, source)
        market.correlation_matrix(self.assets, source=source, key="assets")

    def _option(self, level: np.ndarray) -> np.ndarray:
        return intrinsic(self.right, self.strike_level, level)

    def combined(self, perf: np.ndarray) -> np.ndarray:
        """The basket's level from the performances (paths, assets): worst, best or the
        weighted average."""
        if self.combine == "worst":
            return perf.min(axis=1)
        if self.combine == "best":
            return perf.max(axis=1)
        return perf @ np.asarray(self.basket_weights)

    @property
    def basket_weights(self) -> tuple[float, ...]:
        """The weights in use: as given, else equal."""
        if self.weights is not None:
            return self.weights
        return tuple(1.0 / len(self.assets) for _ in self.assets)

    def initial(self, market: Market) -> np.ndarray:
        if self.initial_levels:
            d = dict(self.initial_levels)
            return np.array([d[a] for a in self.assets])
        return np.array([market.asset(a).spot for a in self.assets])

    def struck(self, market: Market) -> Basket:
        """The same basket with its initial levels fixed at today's spots (for bumps)."""
        if self.initial_levels:
            return self
        return dataclasses.replace(self, initial_levels=tuple(
            zip(self.assets, self.initial(market).tolist(), strict=True)))

    def performances(self, ps: PathSet) -> np.ndarray:
        return ps.levels[:, :, -1] / self.initial(ps.market)

    def raw_payoff(self, paths: PathSet) -> np.ndarray:
        level = self.combined(self.performances(paths))
        return self._option(level) * (paths.df(self.expiry) * self.notional)

    def payoff(self, paths: PathSet) -> np.ndarray:
        law = _terminal_law(self, paths.market) if paths.allows(self, Shortcut.CONDITIONAL) \
            else None
        if law is None:
            return self.raw_payoff(paths)
        return self._conditional(paths, *law) * (paths.df(self.expiry) * self.notional)

    def log_performance_law(self, market: Market, t: float) -> tuple[np.ndarray, np.ndarray]:
        """Mean and covariance of the log-performances ``log(S_i(t) / S_i(0))`` at time ``t``
        under lognormal levels: ``log(F_i(t) / S_i(0)) - cov_ii / 2`` and ``rho_ij int
        sigma_i sigma_j``."""
        corr = market.correlation_matrix(self.assets)
        assets = [market.asset(a) for a in self.assets]
        n = len(assets)
        cov = np.empty((n, n))
        for i in range(n):
            for j in range(n):
                cov[i, j] = corr[i, j] * integrate_vol_product(assets[i].vol, assets[j].vol,
                                                               0.0, t)
        init = self.initial(market)
        mean = np.array([math.log(market.forward(a.name, t) / init[i]) - 0.5 * cov[i, i]
                         for i, a in enumerate(assets)])
        return mean, cov

    def terminal_law(self, market: Market):
        """Mean and covariance of the log-performances at expiry (jointly normal under lognormal
        levels: used only where the models declare it), or None when the last asset cannot be
        integrated analytically (one asset, nothing left to simulate, or no variance left to
        integrate)."""
        n = len(self.assets)
        t = market.time(self.expiry)
        if n < 2 or t <= 0:
            return None
        if self.combine == "average" and not self.basket_weights[-1] > 0:
            return None  # the last asset does not enter the basket
        mean, cov = self.log_performance_law(market, t)
        o = list(range(n - 1))
        beta = np.linalg.pinv(cov[np.ix_(o, o)]) @ cov[o, n - 1]
        var = float(cov[n - 1, n - 1] - cov[n - 1, o] @ beta)
        if not var > 1e-14 * max(cov[n - 1, n - 1], 1e-300):
            return None
        return mean, beta, var

    def _conditional(self, ps: PathSet, mean: np.ndarray, beta: np.ndarray, var: float
                     ) -> np.ndarray:
        """``E[option | the other assets]`` per path: given the other assets' performances,
        the last asset's log-performance is normal (mean ``mu``, variance ``var``), so the
        option on the worst, best or average has a lognormal closed form in it (conditional
        Monte Carlo; the same expectation as the payoff, less variance, smoother for Sobol)."""
        init = self.initial(ps.market)
        y = ps.log_levels_at(self.expiry) - np.log(init)[None, :]  # log-performances
        others = y[:, :-1]
        mu = mean[-1] + (others - mean[:-1]) @ beta
        s = math.sqrt(var)
        k = self.strike_level
        fwd = np.exp(mu + 0.5 * var)  # E[X] given the others

        def above(level):  # P(X > level), E[X 1{X > level}]
            with np.errstate(divide="ignore"):
                d = (mu - np.log(level)) / s
            return ndtr(d), fwd * ndtr(d + s)

        if self.combine == "average":
            w = np.asarray(self.basket_weights)
            rest = np.exp(others) @ w[:-1]
            strike = (k - rest) / w[-1]  # X level at which the basket meets the strike
            pos = strike > 0
            p, ex = above(np.where(pos, strike, 1.0))
            call = np.where(pos, w[-1] * (ex - strike * p), rest + w[-1] * fwd - k)
            if self.right == "call":
                return call
            return call - (rest + w[-1] * fwd - k)  # put-call parity, given the others
        return extreme_given_last(others, mu, var, k, self.combine == "worst",
                                  self.right == "put")

    # -- controls ------------------------------------------------------------------------
    def _geometric(self, ps: PathSet) -> np.ndarray:
        perf = self.performances(ps)
        g = np.exp(np.log(perf) @ np.asarray(self.basket_weights))
        return self._option(g) * ps.df(self.expiry)

    def geometric_value(self, market: Market) -> float:
        """Exact value (unit notional) of the option on the geometric basket under the model."""
        t = market.time(self.expiry)
        w = np.asarray(self.basket_weights)
        mean, cov = self.log_performance_law(market, t)
        mean_log = sum(w[i] * mean[i] for i in range(len(mean)))
        var = float(w @ cov @ w)
        df = float(market.discount.df(t))
        return float(cf.black_lognormal(math.exp(mean_log + 0.5 * var), self.strike_level,
                                        var, df, self.right))

    def controls(self, market: Market) -> list[ControlVariate]:
        t = market.time(self.expiry)
        if t <= 0:
            return []
        df = float(market.discount.df(t))
        r = float(market.discount.zero(t))
        init = self.initial(market)
        if self.combine != "average" and len(self.assets) >= 3 \
                and _terminal_law(self, market) is not None:
            # the last asset is integrated analytically: the pairs of the others track what
            # is left far better than single vanillas, at a fraction of the work
            return self._pair_controls(market, t, r, df, init, skip=self.assets[-1],
                                       moneyness=PAIR_MONEYNESS) + \
                Product.controls(self, market)
        out = [ControlVariate("geometric basket", self._geometric, self.geometric_value(market))]
        for i, name in enumerate(self.assets):
            a = market.asset(name)
            mean = float(cf.bsm_price(a.spot / init[i], self.strike_level, t, r,
                                      a.dividend_yield, float(a.vol.implied(t)), self.right))

            def single(ps: PathSet, i=i, df=df, i0=init[i]):
                return self._option(ps.levels[:, i, -1] / i0) * df
            out.append(ControlVariate(f"{name} vanilla", single, mean))
        if self.combine != "average" and len(self.assets) >= 3:
            out.extend(self._pair_controls(market, t, r, df, init))
        return out + Product.controls(self, market)

    def _pair_controls(self, market: Market, t: float, r: float, df: float,
                       init: np.ndarray, skip: str | None = None,
                       moneyness: tuple[float, ...] = (1.0,)) -> list[ControlVariate]:
        """The same option on the worst (best) of each pair of assets (not ``skip``), struck at
        ``moneyness`` times the strike level: Stulz's formula gives each mean (two lognormal
        terminal levels; term structures enter through the integrated variances and
        covariance), and they track the basket far more closely than one asset; several
        strikes of one pair let the regression follow the option's curvature."""
        corr = market.correlation_matrix(self.assets)
        assets = [market.asset(n) for n in self.assets]
        out = []
        for i in range(len(assets)):
            for j in range(i + 1, len(assets)):
                if skip in (self.assets[i], self.assets[j]):
                    continue
                a, b = assets[i], assets[j]
                wa = float(a.vol.variance(0.0, t))
                wb = float(b.vol.variance(0.0, t))
                if not (wa > 0 and wb > 0):
                    continue
                rho = corr[i, j] * float(integrate_vol_product(a.vol, b.vol, 0.0, t)) \
                    / math.sqrt(wa * wb)
                if 1.0 - abs(rho) < 1e-9 and abs(wa - wb) < 1e-14:
                    continue  # the pair moves as one: Stulz's ratio has no variance
                last: list = [None]  # the pair's level on the latest path set, shared

                def level(ps: PathSet, i=i, j=j, i0=init[i], j0=init[j], last=last):
                    seen = last[0]
                    if seen is not None and seen[0] is ps:
                        return seen[1]
                    x, y = ps.levels[:, i, -1] / i0, ps.levels[:, j, -1] / j0
                    lv = np.minimum(x, y) if self.combine == "worst" else np.maximum(x, y)
                    last[0] = (ps, lv)
                    return lv

                for mk in moneyness:
                    k = self.strike_level * mk
                    mean = cf.two_asset_min_max(a.spot / init[i], b.spot / init[j], k, t, r,
                                                a.dividend_yield, b.dividend_yield,
                                                math.sqrt(wa / t), math.sqrt(wb / t),
                                                float(np.clip(rho, -1, 1)), self.right,
                                                "min" if self.combine == "worst" else "max")

                    def pair(ps: PathSet, df=df, k=k, level=level):
                        lv = level(ps)
                        pay = np.maximum(lv - k, 0.0) if self.right == "call" else \
                            np.maximum(k - lv, 0.0)
                        return pay * df
                    strike = "" if mk == 1.0 else f" at {mk:g} x strike"
                    out.append(ControlVariate(f"{a.name}/{b.name} {self.combine}-of (Stulz)"
                                              f"{strike}", pair, mean))
        return out

    def has_pathwise(self, market: Market) -> bool:
        return True

    def pathwise(self, paths: PathSet) -> dict[Estimator, np.ndarray]:
        ps = paths
        init = self.initial(ps.market)
        perf = self.performances(ps)
        n, k = perf.shape
        dlevel = np.zeros((n, k))
        if self.combine == "average":
            level = perf @ np.asarray(self.basket_weights)
            dlevel[:] = np.asarray(self.basket_weights) / init
        else:
            pick = perf.argmin(axis=1) if self.combine == "worst" else perf.argmax(axis=1)
            level = perf[np.arange(n), pick]
            dlevel[np.arange(n), pick] = 1.0 / init[pick]
        k_ = self.strike_level
        ind = (level > k_) if self.right == "call" else -(level < k_).astype(float)
        grad = np.zeros_like(ps.levels)
        grad[:, :, -1] = dlevel * (ind * ps.df(self.expiry) * self.notional)[:, None]
        return pathwise_from_gradient(ps, grad)

    def closed_form(self, market: Market) -> float | None:
        if len(self.assets) == 1:
            return self.geometric_value(market) * self.notional
        return None


@functools.lru_cache(maxsize=64)
def _terminal_law(basket: Basket, market: Market):
    """:meth:`Basket.terminal_law`, kept per basket and market (both frozen values)."""
    return basket.terminal_law(market)


register_shortcut(Basket.kind, Shortcut.CONDITIONAL, {Capability.LOGNORMAL})
register_shortcut(Basket.kind, Shortcut.CLOSED_FORM, {Capability.LOGNORMAL})
register_shortcut(Basket.kind, Shortcut.PATHWISE, {Capability.SPOT_SCALING})

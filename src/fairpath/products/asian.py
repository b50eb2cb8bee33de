"""Asian options: arithmetic or geometric average of fixings, fixed or floating strike.

Rules (see docs/products.md):

* ``fixings`` is the whole schedule. Fixings before the valuation date are past: their levels
  are ``past_fixings``, in order. A fixing on the valuation date is past if ``past_fixings``
  covers it, otherwise it fixes at today's spot.
* Fixed strike: ``max(A - K, 0)`` (call) or ``max(K - A, 0)`` (put). Floating strike (average
  strike): ``max(S_T - A, 0)`` or ``max(A - S_T, 0)`` with ``S_T`` the level on ``expiry``.
* Paid on ``expiry`` (on or after the last fixing), discounted from there.
* A trade whose every fixing is past (fixed strike) is priced without simulation.

The geometric average of lognormal levels is lognormal, so the geometric option has a closed
form under the engine's model (Kemna & Vorst 1990 for the continuous average; the discrete form
follows from the covariance ``Cov(log S_i, log S_j) = w(min(t_i, t_j))``, ``w`` the integrated
variance). It prices geometric Asians exactly and is the control variate of arithmetic ones.

A fixed-strike arithmetic Asian under normal shocks is estimated by conditional Monte Carlo:
each path contributes the option's expected value given its shape, integrating the direction
of the geometric average analytically (see :meth:`Asian._conditional_payoff`); the expectation
is the price itself, and the error bar shrinks about tenfold at equal paths. ``raw_payoff``
keeps the plain discounted payoff (for pictures of the payoff distribution).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath import closed_form as cf
from fairpath.dates import schedule_dates
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, did_you_mean, show
from fairpath.kernels import average_option_given_shape
from fairpath.market import Market
from fairpath.products.base import (
    ControlVariate,
    PathSet,
    Product,
    check_horizon,
    pathwise_from_gradient,
    single_asset_quantity,
)
from fairpath.products.vanilla import RIGHTS
from fairpath.registry import Capability, Estimator, Shortcut, register_shortcut

AVERAGES = ("arithmetic", "geometric")


@dataclass(frozen=True, slots=True)
class Asian(Product):
    """Average-price (fixed strike) or average-strike (``strike="floating"``) option.

    Examples
    --------
    >>> from datetime import date, timedelta
    >>> fix = tuple(date(2026, 12, 8) + timedelta(weeks=i) for i in range(52))
    >>> Asian(asset="NORDA", right="call", strike=100.0, fixings=fix,
    ...       expiry=date(2027, 11, 30)).average
    'arithmetic'
    """

    kind: ClassVar[str] = "asian"

    asset: str = field(kw_only=True)
    right: str = field(kw_only=True)
    strike: float | str = field(kw_only=True)
    fixings: tuple[date, ...] = field(kw_only=True)
    expiry: date = field(kw_only=True)
    average: str = field(default="arithmetic", kw_only=True)
    past_fixings: tuple[float, ...] = field(default=(), kw_only=True)
    quantity: float = field(default=1.0, kw_only=True)

    def __post_init__(self):
        if self.right not in RIGHTS:
            raise InputError(f"must be 'call' or 'put', got {self.right!r}", key="right")
        if self.average not in AVERAGES:
            raise InputError(f"must be 'arithmetic' or 'geometric', got {self.average!r}",
                             key="average")
        if isinstance(self.strike, str):
            if self.strike != "floating":
                raise InputError(f"must be a number or \"floating\", got {self.strike!r}",
                                 key="strike")
        elif not (math.isfinite(self.strike) and self.strike >= 0):
            raise InputError(f"must be a non-negative number, got {self.strike}", key="strike")
        fix = tuple(self.fixings)
        object.__setattr__(self, "fixings", fix)
        object.__setattr__(self, "past_fixings", tuple(float(x) for x in self.past_fixings))
        if not fix:
            raise InputError("must hold at least one date", key="fixings")
        if any(b <= a for a, b in zip(fix, fix[1:], strict=False)):
            raise InputError("dates must be strictly increasing", key="fixings")
        if fix[-1] > self.expiry:
            raise InputError(f"the last fixing {fix[-1]} is after the payment date "
                             f"(expiry) {self.expiry}", key="fixings")
        if len(self.past_fixings) > len(fix):
            raise InputError(f"{len(self.past_fixings)} levels for {len(fix)} fixing dates",
                             key="past_fixings")
        for i, x in enumerate(self.past_fixings):
            if not (math.isfinite(x) and x > 0):
                raise InputError(f"levels must be positive, got {x}", key=f"past_fixings[{i}]")
        if not math.isfinite(self.quantity):
            raise InputError(f"must be a finite number, got {self.quantity}", key="quantity")

    @classmethod
    def from_table(cls, tab) -> dict:
        strike = tab.raw("strike")
        if isinstance(strike, str):
            if strike != "floating":
                raise tab.error("strike", f"expected a number or \"floating\", got {show(strike)}"
                                f"{did_you_mean(strike, ['floating'])}")
        else:
            strike = tab.number("strike", nonnegative=True, limit=MAX_AMOUNT)
        past = tab.list("past_fixings", [], nonempty=False)
        return dict(
            asset=tab.string("asset"),
            right=tab.string("right", choices=RIGHTS),
            average=tab.string("average", "arithmetic", choices=AVERAGES),
            strike=strike,
            fixings=schedule_dates(tab.raw("fixings"), source=tab.source, key="fixings"),
            expiry=tab.date("expiry"),
            past_fixings=tuple(tab.check_number(f"past_fixings[{i}]", x, positive=True,
                                                   limit=MAX_AMOUNT)
                               for i, x in enumerate(past)),
            quantity=single_asset_quantity(tab),
            name=tab.string("name", None),
        )

    # -- engine hooks ----------------------------------------------------------------------
    @property
    def floating(self) -> bool:
        return self.strike == "floating"

    @property
    def future_fixings(self) -> tuple[date, ...]:
        return self.fixings[len(self.past_fixings):]

    def underlyings(self) -> tuple[str, ...]:
        return (self.asset,)

    def observation_dates(self) -> tuple[date, ...]:
        dates = set(self.future_fixings)
        if self.floating:
            dates.add(self.expiry)
        return tuple(sorted(dates))

    def date_key(self) -> str:
        return "fixings"

    def check(self, market: Market, source: str | None = None) -> None:
        market.asset(self.asset, source=source, key="asset")
        val = market.valuation_date
        if self.expiry < val:
            raise InputError(f"{self.expiry} is before the valuation date {val}", source=source,
                             key="expiry")
        check_horizon(market, (*self.fixings, self.expiry), source=source, key="expiry")
        before = sum(d < val for d in self.fixings)
        through = sum(d <= val for d in self.fixings)
        if not before <= len(self.past_fixings) <= through:
            want = str(before) if before == through else f"{before} or {through}"
            raise InputError(f"{before} fixing date(s) fall before the valuation date {val}, "
                             f"so {want} past level(s) are needed; got {len(self.past_fixings)}",
                             source=source, key="past_fixings")

    def _average(self, fut: np.ndarray, geometric: bool) -> np.ndarray:
        n = len(self.fixings)
        past = np.asarray(self.past_fixings)
        if geometric:
            return np.exp((np.log(past).sum() + np.log(fut).sum(axis=1)) / n)
        return (past.sum() + fut.sum(axis=1)) / n

    def _payoff(self, ps: PathSet, geometric: bool) -> np.ndarray:
        nf = len(self.future_fixings)
        cols = [ps.dates.index(d) for d in self.future_fixings]
        fut = ps.levels[:, 0, cols] if nf else np.zeros((ps.n, 0))
        avg = self._average(fut, geometric)
        if self.floating:
            s_t = ps.level(self.asset, self.expiry)
            intrinsic = s_t - avg if self.right == "call" else avg - s_t
        else:
            intrinsic = avg - self.strike if self.right == "call" else self.strike - avg
        return np.maximum(intrinsic, 0.0) * ps.df(self.expiry)

    def payoff(self, paths: PathSet) -> np.ndarray:
        if self.conditional(paths):
            return self._conditional_payoff(paths) * self.quantity
        return self._payoff(paths, self.average == "geometric") * self.quantity

    def raw_payoff(self, paths: PathSet) -> np.ndarray:
        return self._payoff(paths, self.average == "geometric") * self.quantity

    def conditional(self, paths: PathSet) -> bool:
        """Is the arithmetic average integrated along the geometric average analytically?
        (Fixed strike, lognormal levels, some future fixing with variance.)"""
        market = paths.market
        if self.average != "arithmetic" or self.floating or \
                not paths.allows(self, Shortcut.CONDITIONAL):
            return False
        t = [market.time(d) for d in self.future_fixings]
        return bool(t) and max(t) > 0 and float(market.asset(self.asset).vol.variance(
            0.0, max(t))) > 0

    def _conditional_payoff(self, ps: PathSet) -> np.ndarray:
        """``E[payoff | path shape]``: the log-levels of the future fixings are jointly normal
        (mean ``log F(t_i) - w(t_i)/2``, covariance ``w(min(t_i, t_j))``); given everything but
        their mean ``Y`` (the log geometric average of the future fixings), the arithmetic
        average is a sum of exponentials of ``Y``, and the option's conditional value is a sum
        of normal CDFs at the root of ``A = K`` (conditioning on the geometric mean, Curran
        1994). Same expectation as the payoff, far less variance; exact, not an approximation."""
        market = ps.market
        fut = self.future_fixings
        n = len(self.fixings)
        t = np.array([max(market.time(d), 0.0) for d in fut])
        w = market.asset(self.asset).vol.variance(0.0, t)
        cov = np.minimum.outer(w, w)
        m = np.log(market.forward(self.asset, t)) - 0.5 * w
        yw = np.full(len(fut), 1.0 / len(fut))
        v_y = float(yw @ cov @ yw)
        beta = cov @ yw / v_y
        k_eff = float(self.strike) - float(np.sum(self.past_fixings)) / n
        x = ps.log_levels(self.asset, fut)
        value = average_option_given_shape(x, np.full(len(fut), 1.0 / n), beta, yw,
                                           float(yw @ m), v_y, k_eff, self.right == "put")
        return value * ps.df(self.expiry)

    def controls(self, market: Market) -> list[ControlVariate]:
        out = []
        if self.average == "arithmetic" and self.future_fixings:
            out.append(ControlVariate("geometric-average counterpart",
                                      lambda ps: self._payoff(ps, True),
                                      self.geometric_value(market)))
        return out + Product.controls(self, market)

    def geometric_value(self, market: Market) -> float:
        """Exact value (unit quantity) of the geometric-average version under the model."""
        a = market.asset(self.asset)
        n = len(self.fixings)
        t = np.array([max(market.time(d), 0.0) for d in self.future_fixings])
        w = a.vol.variance(0.0, t) if len(t) else np.zeros(0)
        log_f = np.log(market.forward(self.asset, t)) if len(t) else np.zeros(0)
        mu = (np.log(np.asarray(self.past_fixings)).sum() + np.sum(log_f - 0.5 * w)) / n
        var = float(np.sum(np.minimum.outer(w, w))) / n**2
        mean_g = math.exp(mu + 0.5 * var)
        t_pay = market.time(self.expiry)
        df = float(market.discount.df(t_pay))
        if not self.floating:
            return float(cf.black_lognormal(mean_g, self.strike, var, df, self.right))
        w_t = float(a.vol.variance(0.0, t_pay))
        cov_tg = float(np.sum(w)) / n
        var_ratio = max(w_t - 2.0 * cov_tg + var, 0.0)
        return float(cf.exchange_lognormal(market.forward(self.asset, t_pay), mean_g, var_ratio,
                                           df, self.right))

    def closed_form(self, market: Market) -> float | None:
        if self.average != "geometric":
            return None
        return self.geometric_value(market) * self.quantity

    def has_pathwise(self, market: Market) -> bool:
        return not self.floating and bool(self.future_fixings)

    def pathwise(self, paths: PathSet) -> dict[Estimator, np.ndarray]:
        ps = paths
        n = len(self.fixings)
        cols = [ps.dates.index(d) for d in self.future_fixings]
        fut = ps.levels[:, 0, cols]
        geometric = self.average == "geometric"
        avg = self._average(fut, geometric)
        ind = (avg > self.strike) if self.right == "call" else -(avg < self.strike).astype(float)
        da = (avg[:, None] / (n * fut)) if geometric else np.full_like(fut, 1.0 / n)
        grad = np.zeros_like(ps.levels)
        grad[:, 0, cols] = da * (ind * ps.df(self.expiry) * self.quantity)[:, None]
        return pathwise_from_gradient(ps, grad)

    def notes(self, market: Market) -> tuple[str, ...]:
        if self.past_fixings:
            return (f"{len(self.past_fixings)} of {len(self.fixings)} fixings already set",)
        return ()


register_shortcut(Asian.kind, Shortcut.CONDITIONAL, {Capability.LOGNORMAL})
register_shortcut(Asian.kind, Shortcut.CLOSED_FORM, {Capability.LOGNORMAL})
register_shortcut(Asian.kind, Shortcut.PATHWISE, {Capability.SPOT_SCALING})

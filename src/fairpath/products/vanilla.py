"""European calls and puts, and cash-or-nothing digitals, on one asset."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath import closed_form as cf
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT
from fairpath.market import Market
from fairpath.products.base import (
    PathSet,
    Product,
    pathwise_from_gradient,
    single_asset_quantity,
)
from fairpath.registry import Capability, Estimator, Shortcut, register_shortcut

RIGHTS = ("call", "put")


def intrinsic(right: str, strike: float, s: np.ndarray) -> np.ndarray:
    """``max(s - strike, 0)`` for a call, ``max(strike - s, 0)`` for a put."""
    if right == "call":
        return np.maximum(s - strike, 0.0)
    return np.maximum(strike - s, 0.0)


@dataclass(frozen=True, slots=True)
class OneAssetAtExpiry(Product):
    """Shared terms of a payoff on one asset's level at expiry (``right``, ``strike``)."""

    asset: str = field(kw_only=True)
    right: str = field(kw_only=True)
    strike: float = field(kw_only=True)
    expiry: date = field(kw_only=True)
    quantity: float = field(default=1.0, kw_only=True)

    def __post_init__(self):
        _check_common(self)

    @classmethod
    def from_table(cls, tab) -> dict:
        return _vanilla_from_table(cls, tab)

    def underlyings(self) -> tuple[str, ...]:
        return (self.asset,)

    def observation_dates(self) -> tuple[date, ...]:
        return (self.expiry,)


@dataclass(frozen=True, slots=True)
class European(OneAssetAtExpiry):
    """European call or put paying ``max(S_T - K, 0)`` (call) at expiry, times ``quantity``.

    Examples
    --------
    >>> from datetime import date
    >>> European(asset="NORDA", right="call", strike=105.0, expiry=date(2027, 12, 1)).kind
    'european'
    """

    kind: ClassVar[str] = "european"

    def intrinsic(self, s: np.ndarray) -> np.ndarray:
        return intrinsic(self.right, self.strike, s)

    def payoff(self, paths: PathSet) -> np.ndarray:
        s = paths.levels[:, 0, 0]
        return self.intrinsic(s) * (paths.df(self.expiry) * self.quantity)

    def closed_form(self, market: Market) -> float | None:
        args = _bsm_args(self, market)
        if args is None:
            return None
        return float(cf.bsm_price(*args, self.right)) * self.quantity

    def has_pathwise(self, market: Market) -> bool:
        return True

    def pathwise(self, paths: PathSet) -> dict[Estimator, np.ndarray]:
        s = paths.levels[:, 0, :]
        ind = (s > self.strike) if self.right == "call" else -(s < self.strike).astype(float)
        grad = (ind * (paths.df(self.expiry) * self.quantity))[:, None, :]
        return pathwise_from_gradient(paths, grad)


@dataclass(frozen=True, slots=True)
class Digital(OneAssetAtExpiry):
    """Cash-or-nothing digital: pays ``payout`` at expiry if ``S_T > K`` (call) or ``S_T < K``
    (put), times ``quantity``."""

    kind: ClassVar[str] = "digital"
    payoff_jumps: ClassVar[bool] = True

    payout: float = field(default=1.0, kw_only=True)

    def __post_init__(self):
        _check_common(self)
        if not np.isfinite(self.payout):
            raise InputError(f"must be a finite number, got {self.payout}", key="payout")

    def payoff(self, paths: PathSet) -> np.ndarray:
        s = paths.levels[:, 0, 0]
        hit = s > self.strike if self.right == "call" else s < self.strike
        return hit * (self.payout * paths.df(self.expiry) * self.quantity)

    def closed_form(self, market: Market) -> float | None:
        args = _bsm_args(self, market)
        if args is None:
            return None
        return float(cf.digital_price(*args, self.right, payout=self.payout)) * self.quantity


def _check_common(p) -> None:
    if p.right not in RIGHTS:
        raise InputError(f"must be 'call' or 'put', got {p.right!r}", key="right")
    if not (np.isfinite(p.strike) and p.strike >= 0):
        raise InputError(f"must be a non-negative number, got {p.strike}", key="strike")
    if not isinstance(p.expiry, date):
        raise InputError(f"must be a date, got {p.expiry!r}", key="expiry")
    if not np.isfinite(p.quantity):
        raise InputError(f"must be a finite number, got {p.quantity}", key="quantity")


def _bsm_args(p, market: Market):
    """(spot, strike, T, r, q, sigma) when the market is flat enough for the closed form."""
    a = market.asset(p.asset)
    t = market.time(p.expiry)
    if t < 0:
        return None
    # zero rate and Black vol to expiry: exact for term structures too, since only the
    # integrated rate and variance to expiry matter for a European payoff
    r = float(market.discount.zero(t)) if t > 0 else float(market.discount.zero(1e-8))
    sigma = float(a.vol.implied(t))
    return a.spot, p.strike, t, r, a.dividend_yield, sigma


def _vanilla_from_table(cls, tab):
    kwargs = dict(
        asset=tab.string("asset"),
        right=tab.string("right", choices=RIGHTS),
        strike=tab.number("strike", nonnegative=True, limit=MAX_AMOUNT),
        expiry=tab.date("expiry"),
        quantity=single_asset_quantity(tab),
        name=tab.string("name", None),
    )
    if cls is Digital:
        kwargs["payout"] = tab.number("payout", 1.0, limit=MAX_AMOUNT)
    return kwargs


register_shortcut(European.kind, Shortcut.CLOSED_FORM, {Capability.LOGNORMAL})
register_shortcut(European.kind, Shortcut.PATHWISE, {Capability.SPOT_SCALING})
register_shortcut(Digital.kind, Shortcut.CLOSED_FORM, {Capability.LOGNORMAL})

"""Single-barrier calls and puts: up/down, knock-in/knock-out, with rebate.

Monitoring:

* ``"continuous"``: the barrier is watched at every instant. Between two grid dates the log-level
  is a Brownian bridge given its end points, so the probability that it crossed the barrier
  ``h = log H`` in a step of integrated variance ``v`` is ``exp(-2 (x0 - h)(x1 - h) / v)`` when both
  ends are on the safe side (1 otherwise). The payoff is weighted by the survival probability
  (a conditional expectation, no fine grid): exact under flat parameters, and within a step of a
  term structure the drift's variation is neglected.
* ``"daily"``: the close of every weekday after the valuation date up to and including expiry.
* ``{ dates = [...] }``: exactly those dates (those on or before the valuation date are ignored).

A level at or beyond the barrier is a hit (``S <= H`` for a down barrier, ``S >= H`` up).

Rebate: a knock-out pays it when hit (continuous: at the hitting time, whose conditional law
given the step's end points is an inverse Gaussian after a time change, integrated by
Gauss-Legendre quadrature; discrete: on the monitoring date of the hit); a knock-in pays it at
expiry if never hit.

A spot already through the barrier: a knock-in is a vanilla, a knock-out is worth its rebate
(paid now); the result carries a note.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np
from scipy.special import ndtri
from scipy.stats import invgauss

from fairpath import closed_form as cf
from fairpath.dates import schedule_dates, weekdays_between
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, show
from fairpath.laws import BRIDGE_UNDER_LAW
from fairpath.market import Market
from fairpath.products.base import ControlVariate, PathSet, check_horizon
from fairpath.products.vanilla import OneAssetAtExpiry, _bsm_args
from fairpath.registry import Capability, Shortcut, register_shortcut

DIRECTIONS = ("down", "up")
EFFECTS = ("out", "in")
MONITORINGS = ("continuous", "daily")
#: Gauss-Legendre nodes on (0, 1) for the expected discount factor at the hitting time.
_GL_X, _GL_W = np.polynomial.legendre.leggauss(8)
_GL_P = 0.5 * (_GL_X + 1.0)
_GL_Z = ndtri(_GL_P)
_GL_W = 0.5 * _GL_W


@dataclass(frozen=True, slots=True)
class Barrier(OneAssetAtExpiry):
    """Barrier call or put on one asset.

    Examples
    --------
    >>> from datetime import date
    >>> b = Barrier(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1),
    ...             barrier=85.0, direction="down", effect="out")
    >>> b.monitoring
    'continuous'
    """

    kind: ClassVar[str] = "barrier"
    payoff_jumps: ClassVar[bool] = True

    barrier: float = field(kw_only=True)
    direction: str = field(kw_only=True)
    effect: str = field(kw_only=True)
    monitoring: str | tuple[date, ...] = field(default="continuous", kw_only=True)
    rebate: float = field(default=0.0, kw_only=True)

    def __post_init__(self):
        OneAssetAtExpiry.__post_init__(self)
        if not (math.isfinite(self.barrier) and self.barrier > 0):
            raise InputError(f"must be a positive number, got {self.barrier}", key="barrier")
        if self.direction not in DIRECTIONS:
            raise InputError(f"must be 'down' or 'up', got {self.direction!r}", key="direction")
        if self.effect not in EFFECTS:
            raise InputError(f"must be 'out' or 'in', got {self.effect!r}", key="effect")
        if not (math.isfinite(self.rebate) and self.rebate >= 0):
            raise InputError(f"must be a non-negative number, got {self.rebate}", key="rebate")
        mon = self.monitoring
        if isinstance(mon, str):
            if mon not in ("continuous", "daily"):
                raise InputError(f"must be \"continuous\", \"daily\" or {{ dates = [...] }}, got "
                                 f"{mon!r}", key="monitoring")
        else:
            mon = tuple(mon)
            object.__setattr__(self, "monitoring", mon)
            if not mon:
                raise InputError("must hold at least one date", key="monitoring")
            if any(b <= a for a, b in zip(mon, mon[1:], strict=False)):
                raise InputError("dates must be strictly increasing", key="monitoring")
            if mon[-1] > self.expiry:
                raise InputError(f"monitoring date {mon[-1]} is after the expiry {self.expiry}",
                                 key="monitoring")

    @classmethod
    def from_table(cls, tab) -> dict:
        kw = OneAssetAtExpiry.from_table.__func__(cls, tab)
        mon = tab.raw("monitoring", "continuous")
        if isinstance(mon, str):
            mon = tab.string("monitoring", "continuous", choices=MONITORINGS)
        elif isinstance(mon, dict | list):
            mon = schedule_dates(mon, source=tab.source, key="monitoring")
        else:
            raise tab.error("monitoring", f"expected \"continuous\", \"daily\" or a schedule "
                            f"{{ dates = [...] }}, got {show(mon)}")
        kw.update(barrier=tab.number("barrier", positive=True),
                  direction=tab.string("direction", choices=DIRECTIONS),
                  effect=tab.string("effect", choices=EFFECTS),
                  monitoring=mon,
                  rebate=tab.number("rebate", 0.0, nonnegative=True, limit=MAX_AMOUNT))
        return kw

    def check(self, market: Market, source: str | None = None) -> None:
        market.asset(self.asset, source=source, key="asset")
        if self.expiry < market.valuation_date:
            raise InputError(f"{self.expiry} is before the valuation date "
                             f"{market.valuation_date}", source=source, key="expiry")
        check_horizon(market, (self.expiry,), source=source, key="expiry")

    # -- state -----------------------------------------------------------------------------
    def breached(self, spot: float) -> bool:
        """Is ``spot`` at or beyond the barrier?"""
        return spot <= self.barrier if self.direction == "down" else spot >= self.barrier

    def _hit(self, s: np.ndarray) -> np.ndarray:
        return s <= self.barrier if self.direction == "down" else s >= self.barrier

    def notes(self, market: Market) -> tuple[str, ...]:
        spot = market.asset(self.asset).spot
        if not self.breached(spot):
            return ()
        side = "at or below" if self.direction == "down" else "at or above"
        if self.effect == "in":
            return (f"spot {spot:g} is {side} the barrier {self.barrier:g}: already knocked in, "
                    "priced as the vanilla",)
        return (f"spot {spot:g} is {side} the barrier {self.barrier:g}: already knocked out, "
                f"worth its rebate {self.rebate:g} paid now",)

    def model_notes(self, capabilities) -> tuple[str, ...]:
        if self.monitoring == "continuous" and Capability.EXACT_BRIDGE not in capabilities:
            return (BRIDGE_UNDER_LAW,)
        return ()

    def score_safe(self) -> bool:
        return self.monitoring != "continuous"  # the first bridge step starts from the spot

    def daily_until(self) -> date | None:
        return self.expiry if self.monitoring == "daily" else None

    def observation_dates(self) -> tuple[date, ...]:
        if isinstance(self.monitoring, tuple):
            return tuple(sorted(set(self.monitoring) | {self.expiry}))
        return (self.expiry,)

    def monitored(self, ps: PathSet) -> np.ndarray:
        """Grid columns watched by a discrete monitoring."""
        val = ps.market.valuation_date
        if self.monitoring == "daily":
            days = set(weekdays_between(val, self.expiry))
        else:
            days = {d for d in self.monitoring if d > val}
        return np.array([i for i, d in enumerate(ps.grid_dates) if d in days], dtype=int)

    # -- payoff ----------------------------------------------------------------------------
    def vanilla(self, ps: PathSet) -> np.ndarray:
        s = ps.level(self.asset, self.expiry)
        k = self.strike
        pay = np.maximum(s - k, 0.0) if self.right == "call" else np.maximum(k - s, 0.0)
        return pay * ps.df(self.expiry)

    def payoff(self, paths: PathSet) -> np.ndarray:
        ps = paths
        van = self.vanilla(ps)
        if self.breached(float(ps.spots[0])):
            if self.effect == "in":
                return van * self.quantity
            return np.full(ps.n, self.rebate * self.quantity)
        df_t = ps.df(self.expiry)
        if self.monitoring == "continuous":
            survive, rebate_pv = self._continuous(ps)
        else:
            survive, rebate_pv = self._discrete(ps)
        if self.effect == "out":
            value = van * survive + self.rebate * rebate_pv
        else:
            value = van * (1.0 - survive) + self.rebate * survive * df_t
        return value * self.quantity

    def _discrete(self, ps: PathSet):
        cols = self.monitored(ps)
        if not len(cols):
            return np.ones(ps.n), np.zeros(ps.n)
        hit = self._hit(ps.grid_levels[:, 0, cols])
        any_hit = hit.any(axis=1)
        first = np.argmax(hit, axis=1)
        dfs = ps.df_times(ps.grid_times[cols])
        rebate_pv = np.where(any_hit, dfs[first], 0.0)
        return (~any_hit).astype(float), rebate_pv

    def _continuous(self, ps: PathSet):
        """Survival probability and the discounted value of 1 paid at the hitting time."""
        cols = ps.grid_columns(ps.market.valuation_date, self.expiry)
        if not len(cols):  # expiring today, not breached: nothing can cross any more
            return np.ones(ps.n), np.zeros(ps.n)
        h = math.log(self.barrier)
        sign = 1.0 if self.direction == "down" else -1.0
        x = np.log(ps.grid_levels[:, 0, cols])
        x_prev = np.concatenate([np.full((ps.n, 1), math.log(ps.spots[0])), x[:, :-1]], axis=1)
        a = sign * (x_prev - h)  # distance to the barrier at the step's start (> 0 if alive)
        b = sign * (x - h)
        v = ps.variance[0, cols]
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            p_cross = np.where((a > 0) & (b > 0),
                               np.exp(-2.0 * np.maximum(a, 0) * np.maximum(b, 0) /
                                      np.where(v > 0, v, 1.0)), 1.0)
        p_cross = np.where(v > 0, p_cross, (b <= 0).astype(float))
        survive_each = 1.0 - p_cross
        alive_before = np.cumprod(np.concatenate([np.ones((ps.n, 1)), survive_each[:, :-1]],
                                                 axis=1), axis=1)
        survive = alive_before[:, -1] * survive_each[:, -1]
        if self.rebate == 0.0 or self.effect == "in":
            return survive, np.zeros(ps.n)
        times = ps.grid_times[cols]
        t_prev = np.concatenate([[0.0], times[:-1]])
        df_prev = ps.df_times(t_prev)
        dt = times - t_prev
        fwd_rate = np.log(df_prev / ps.df_times(times)) / dt
        weight = alive_before * p_cross
        disc = np.ones_like(weight)
        live = weight > 1e-300
        if live.any():
            k = np.nonzero(live)[1]
            disc[live] = expected_discount_at_hit(a[live], np.abs(b[live]), v[k],
                                                  fwd_rate[k] * dt[k])
        return survive, np.sum(weight * disc * df_prev, axis=1)

    # -- controls and closed form ------------------------------------------------------
    def controls(self, market: Market) -> list[ControlVariate]:
        args = _bsm_args(self, market)
        out = []
        if args is not None and not self.breached(args[0]):
            mean = float(cf.bsm_price(*args, self.right))
            out.append(ControlVariate("matching vanilla", self.vanilla, mean))
        return out + OneAssetAtExpiry.controls(self, market)

    def closed_form(self, market: Market) -> float | None:
        """Reiner-Rubinstein (continuous) or its Broadie-Glasserman-Kou shift (discrete), for
        flat rate and vol; None otherwise."""
        a = market.asset(self.asset)
        if not (a.vol.is_flat and market.discount.is_flat):
            return None
        t = market.time(self.expiry)
        r, q, sigma = market.discount.zero_rates[0], a.dividend_yield, a.vol.vols[0]
        common = (a.spot, self.strike, self.barrier, t, r, q, sigma, self.right,
                  self.direction, self.effect)
        if self.monitoring == "continuous":
            return float(cf.barrier_price(*common, rebate=self.rebate)) * self.quantity
        if self.rebate and self.effect == "out":
            return None  # the shifted formula pays the rebate at a continuous hitting time
        if self.monitoring == "daily":
            m = len(weekdays_between(market.valuation_date, self.expiry))
        else:
            m = sum(d > market.valuation_date for d in self.monitoring)
        return float(cf.discrete_barrier_price(*common, rebate=self.rebate,
                                               monitoring_count=m)) * self.quantity


#: Below this squared coefficient of variation the hitting time is taken as normal.
_NEAR_NORMAL = 1e-4


def expected_discount_at_hit(a: np.ndarray, b: np.ndarray, v: np.ndarray,
                             rate_dt: np.ndarray) -> np.ndarray:
    """E[exp(-r * tau)] for the hitting time tau of a Brownian bridge, given that it hits.

    The log-level starts at distance ``a > 0`` from the barrier and ends at distance ``b`` (on
    either side) after integrated variance ``v``; ``rate_dt`` is the step's forward rate times
    its length. Writing the bridge as ``X(u) = ((v-u)/v) (a + B(s)) + (u/v) b`` with
    ``s = u v / (v - u)`` turns the hit into a Brownian motion with drift ``b / v`` reaching 0 from
    ``a``, whose hitting time (given a hit) is inverse Gaussian with mean ``a v / b`` and shape
    ``a**2``; then ``u = s v / (v + s)`` and the calendar time is ``u / v`` of the step (constant
    vol within the step). The expectation is an 8-point Gauss-Legendre rule in probability.
    """
    a, b, v = np.broadcast_arrays(np.asarray(a, dtype=float),
                                  np.maximum(np.asarray(b, dtype=float), 1e-300),
                                  np.asarray(v, dtype=float))
    # the hitting time s is inverse Gaussian with mean a v / b and squared coefficient of
    # variation v / (a b); when that is small, s is nearly normal (its quantiles mean (1 + cv
    # z)), and when it vanishes the bridge crosses where its straight line does
    cv2 = np.where(a * b > 0, v / np.where(a * b > 0, a * b, 1.0), np.inf)
    mean = a * v / b
    frac = np.ones((len(_GL_P), a.size))
    near = cv2 <= _NEAR_NORMAL
    if near.any():
        s = mean[near][None, :] * (1.0 + np.sqrt(cv2[near])[None, :] * _GL_Z[:, None])
        frac[:, near] = np.clip(s / (v[near][None, :] + s), 0.0, 1.0)
    rest = ~near & (a > 0) & (v > 0)
    if rest.any():
        shape = a[rest] * a[rest]
        # boost's quantile warns (and returns inf) when the mean is huge (an end point on the
        # barrier): the hit is then at the end of the step
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"), \
                warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            s = invgauss.ppf(_GL_P[:, None], (mean[rest] / shape)[None, :],
                             scale=shape[None, :])
            frac[:, rest] = np.where(np.isfinite(s), s / (v[rest][None, :] + s), 1.0)
    frac = np.where(a[None, :] > 0, np.nan_to_num(frac, nan=1.0), 0.0)
    steady = (v == 0) & (a > 0)
    frac[:, steady] = (a / (a + b))[steady]
    return _GL_W @ np.exp(-np.asarray(rate_dt)[None, :] * frac)


register_shortcut(Barrier.kind, Shortcut.CLOSED_FORM, {Capability.LOGNORMAL})
register_shortcut(Barrier.kind, Shortcut.EXACT_BRIDGE, {Capability.EXACT_BRIDGE})

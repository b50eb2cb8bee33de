"""Autocallable notes on one asset or the worst of several.

Rules (also in docs/products.md):

* Performance = level / initial level; the worst performer counts.
* At observation ``k`` (``k = 0`` the first of the whole schedule, past ones included) the
  early-redemption level is ``autocall_level + k * autocall_step``; the last observation is
  maturity and has no early-redemption test.
* On every observation the coupon ``coupon * notional`` is paid when the worst performance is at
  or above ``coupon_barrier``; with ``memory`` the coupons missed so far are paid with it. This
  holds on the date of an early redemption too.
* Early redemption pays the notional. At maturity the note pays the notional, or
  ``notional * worst / strike_level`` when the protection barrier was breached and the worst final
  performance is below ``strike_level``.
* Protection barrier (a breach is a worst performance at or below it): ``final`` watches the
  maturity level only; ``daily`` every weekday close after the valuation date up to maturity;
  ``continuous`` the weekday closes plus, between two closes, each asset's Brownian-bridge crossing
  probability. Several assets are combined as if their bridges were independent given the
  closes: ``P(no breach in a step) = prod_i (1 - p_i)``. That is exact for one asset; for
  positively correlated assets it slightly overstates the breach probability (the bridges are in
  fact correlated), an error of second order in the one-day step.
* Every payment is made on its observation date.

Already-struck trades: ``initial_levels`` (every asset), observations on or before the valuation
date are past and ignored, ``coupons_owed`` memory coupons missed so far, ``knocked_in`` when the
protection barrier was already breached.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath.dates import schedule_dates
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, show
from fairpath.laws import BRIDGE_UNDER_LAW
from fairpath.market import Market
from fairpath.products.base import (
    PathSet,
    Product,
    asset_list,
    check_horizon,
    read_asset_names,
    read_initial_levels,
)
from fairpath.registry import Capability, Shortcut, register_shortcut

#: Levels between this and 1000 are refused as not fractions of the initial level (a
#: percentage typed as 70); a huge level (1e6) is the way to write "never" or "always".
MAX_LEVEL = 5.0
MONITORINGS = ("final", "daily", "continuous")
#: Largest ``coupon`` a product file may give (100% of the notional per observation): a larger
#: one is a percentage typed as a number (4 for 4%).
MAX_COUPON = 1.0


@dataclass(frozen=True, slots=True)
class Autocallable(Product):
    """Autocallable note (single asset or worst-of).

    Examples
    --------
    >>> from datetime import date
    >>> obs = (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1))
    >>> n = Autocallable(assets=("NORDA",), observations=obs, notional=1000.0,
    ...                  autocall_level=1.0, coupon=0.04, coupon_barrier=0.7,
    ...                  protection_barrier=0.6)
    >>> n.autocall_levels()
    (1.0, 1.0)
    """

    kind: ClassVar[str] = "autocallable"
    payoff_jumps: ClassVar[bool] = True

    assets: tuple[str, ...] = field(kw_only=True)
    observations: tuple[date, ...] = field(kw_only=True)
    autocall_level: float = field(kw_only=True)
    coupon: float = field(kw_only=True)
    coupon_barrier: float = field(kw_only=True)
    protection_barrier: float = field(kw_only=True)
    notional: float = field(default=1.0, kw_only=True)
    autocall_step: float = field(default=0.0, kw_only=True)
    memory: bool = field(default=False, kw_only=True)
    protection_monitoring: str = field(default="final", kw_only=True)
    strike_level: float = field(default=1.0, kw_only=True)
    initial_levels: tuple[tuple[str, float], ...] = field(default=(), kw_only=True)
    coupons_owed: int = field(default=0, kw_only=True)
    knocked_in: bool = field(default=False, kw_only=True)

    def __post_init__(self):
        assets = asset_list(self.assets)
        object.__setattr__(self, "assets", assets)
        obs = tuple(self.observations)
        object.__setattr__(self, "observations", obs)
        init = self.initial_levels
        if isinstance(init, dict):
            init = tuple(init.items())
        object.__setattr__(self, "initial_levels", tuple((str(k), float(v)) for k, v in init))
        if not obs:
            raise InputError("must hold at least one date", key="observations")
        if any(b <= a for a, b in zip(obs, obs[1:], strict=False)):
            raise InputError("dates must be strictly increasing", key="observations")
        for key in ("autocall_level", "strike_level"):
            v = getattr(self, key)
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"must be a positive fraction of the initial level, got {v}",
                                 key=key)
        for key in ("coupon_barrier", "protection_barrier"):
            v = getattr(self, key)
            if not (math.isfinite(v) and v >= 0):
                raise InputError(f"must be a non-negative fraction of the initial level (0 for "
                                 f"none), got {v}", key=key)
        for key in ("strike_level", "coupon_barrier", "protection_barrier"):
            v = getattr(self, key)
            if MAX_LEVEL < v < 1000:  # 1e6 and the like: deliberately never / always
                raise InputError(f"{v:g} is not a fraction of the initial level (1.00 = 100%); "
                                 f"a percentage? write {v / 100:g} for {v:g}%", key=key)
        for key in ("coupon", "notional", "autocall_step"):
            v = getattr(self, key)
            if not math.isfinite(v):
                raise InputError(f"must be a finite number, got {v}", key=key)
        if self.coupon < 0:
            raise InputError(f"must not be negative, got {self.coupon}", key="coupon")
        levels = self.autocall_levels()
        for k, lv in enumerate(levels):
            if not lv > 0:
                raise InputError(f"the early-redemption level at observation {k} "
                                 f"({obs[k]}) is {lv:g}; it must stay positive",
                                 key="autocall_step")
        if self.protection_monitoring not in MONITORINGS:
            raise InputError(f"must be one of {', '.join(MONITORINGS)}, got "
                             f"{self.protection_monitoring!r}", key="protection_monitoring")
        if isinstance(self.coupons_owed, bool) or not isinstance(self.coupons_owed, int) \
                or self.coupons_owed < 0:
            raise InputError(f"must be a non-negative integer, got {self.coupons_owed!r}",
                             key="coupons_owed")
        if self.coupons_owed and not self.memory:
            raise InputError("coupons can only be owed on a note with memory = true",
                             key="coupons_owed")
        if self.knocked_in and self.protection_monitoring == "final":
            raise InputError("a barrier watched at maturity only cannot have been breached "
                             "before maturity", key="knocked_in")
        names = [k for k, _ in self.initial_levels]
        for k, v in self.initial_levels:
            if k not in assets:
                raise InputError(f"{k!r} is not one of the note's assets {list(assets)}",
                                 key=f"initial_levels.{k}")
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"must be a positive level, got {v}", key=f"initial_levels.{k}")
        if names and set(names) != set(assets):
            missing = [a for a in assets if a not in names]
            raise InputError(f"a struck trade needs an initial level for every asset; missing "
                             f"{', '.join(missing)}", key="initial_levels")

    def warnings(self) -> tuple[str, ...]:
        """Legal but doubtful terms (said once, when the note is loaded)."""
        out = []
        if MAX_LEVEL < self.autocall_level < 1000:
            out.append(f"autocall_level {self.autocall_level:g} is {self.autocall_level:g} "
                       "times the initial level, so the note is never called early; if it "
                       f"is a percentage, write {self.autocall_level / 100:g}")
        if self.protection_barrier > 1.0 and self.protection_monitoring != "final":
            out.append(f"protection_barrier {self.protection_barrier:g} is above the initial "
                       "level: the note is knocked in from its first close")
        levels = self.autocall_levels()
        if levels and self.coupon_barrier > max(levels) + 1e-12:
            out.append(f"coupon_barrier {self.coupon_barrier:g} is above every early-"
                       f"redemption level (at most {max(levels):g}): coupons would be paid "
                       "only when the note is called; is that a typo?")
        return tuple(out)

    @classmethod
    def from_table(cls, tab) -> dict:
        assets = read_asset_names(tab)
        levels = read_initial_levels(tab, assets, "note")
        coupon = tab.number("coupon", nonnegative=True)
        observations = schedule_dates(tab.raw("observations"), source=tab.source,
                                      key="observations")
        owed = tab.integer("coupons_owed", 0, minimum=0)
        if owed >= len(observations):
            raise tab.error("coupons_owed", f"{show(owed)} coupons owed on a note of "
                            f"{len(observations)} observation(s): at most "
                            f"{len(observations) - 1} can be past (the last is maturity)")
        if coupon > MAX_COUPON:
            raise tab.error("coupon", f"{coupon:g} is {coupon:.0%} of the notional per "
                            f"observation; a percentage? write {coupon / 100:g} for {coupon:g}%")
        return dict(
            assets=tuple(assets),
            observations=observations,
            notional=tab.number("notional", 1.0, limit=MAX_AMOUNT)
            * tab.number("quantity", 1.0, limit=MAX_AMOUNT),
            autocall_level=tab.number("autocall_level", positive=True),
            autocall_step=tab.number("autocall_step", 0.0),
            coupon=coupon,
            coupon_barrier=tab.number("coupon_barrier", nonnegative=True),
            memory=tab.boolean("memory", False),
            protection_barrier=tab.number("protection_barrier", nonnegative=True),
            protection_monitoring=tab.string("protection_monitoring", "final",
                                             choices=MONITORINGS),
            strike_level=tab.number("strike_level", 1.0, positive=True),
            initial_levels=levels,
            coupons_owed=owed,
            knocked_in=tab.boolean("knocked_in", False),
            name=tab.string("name", None),
        )

    # -- schedule --------------------------------------------------------------------------
    def autocall_levels(self) -> tuple[float, ...]:
        """Early-redemption level of every observation but the last (maturity)."""
        return tuple(self.autocall_level + k * self.autocall_step
                     for k in range(len(self.observations) - 1))

    @property
    def maturity(self) -> date:
        return self.observations[-1]

    def underlyings(self) -> tuple[str, ...]:
        return self.assets

    def date_key(self) -> str:
        return "observations"

    def _future(self, market: Market) -> list[int]:
        return [k for k, d in enumerate(self.observations) if d > market.valuation_date]

    def observation_dates(self) -> tuple[date, ...]:
        return self.observations  # past ones (on or before valuation) come back as spots

    def score_safe(self) -> bool:
        return self.protection_monitoring != "continuous"  # bridge from today's spot

    def daily_until(self) -> date | None:
        return None if self.protection_monitoring == "final" else self.maturity

    def initial(self, market: Market) -> np.ndarray:
        if self.initial_levels:
            d = dict(self.initial_levels)
            return np.array([d[a] for a in self.assets])
        return np.array([market.asset(a).spot for a in self.assets])

    def struck(self, market: Market) -> Autocallable:
        """The same note with its initial levels fixed at today's spots (for bumps)."""
        if self.initial_levels:
            return self
        return dataclasses.replace(self, initial_levels=tuple(
            zip(self.assets, self.initial(market).tolist(), strict=True)))

    def check(self, market: Market, source: str | None = None) -> None:
        for a in self.assets:
            market.asset(a, source=source, key="assets")
        market.correlation_matrix(self.assets, source=source, key="assets")
        val = market.valuation_date
        check_horizon(market, self.observations, source=source, key="observations")
        past = [d for d in self.observations if d <= val]
        if len(past) == len(self.observations):
            raise InputError(f"every observation is on or before the valuation date {val}: the "
                             f"note matured on {self.maturity}", source=source,
                             key="observations")
        if past and not self.initial_levels:
            raise InputError(f"{len(past)} observation(s) are already past, so this is a struck "
                             "trade: give initial_levels for every asset", source=source,
                             key="initial_levels")
        if self.coupons_owed > len(past):
            raise InputError(f"{self.coupons_owed} coupons owed but only {len(past)} "
                             "observation(s) are past", source=source, key="coupons_owed")
        worst_now = float(np.min(self.spot_performance(market)))
        if past and past[-1] == val:
            k = len(past) - 1
            if k < len(self.observations) - 1 and worst_now >= self.autocall_levels()[k]:
                raise InputError(f"today ({val}) is an observation and the worst performance "
                                 f"{worst_now:.4g} is at or above its early-redemption level "
                                 f"{self.autocall_levels()[k]:g}: the note has been redeemed",
                                 source=source, key="observations")

    def spot_performance(self, market: Market) -> np.ndarray:
        spots = np.array([market.asset(a).spot for a in self.assets])
        return spots / self.initial(market)

    def breached_now(self, market: Market) -> bool:
        """Already knocked in: flagged, or today's worst level on a watched barrier."""
        if self.knocked_in:
            return True
        if self.protection_monitoring == "final":
            return False
        return float(np.min(self.spot_performance(market))) <= self.protection_barrier

    def notes(self, market: Market) -> tuple[str, ...]:
        out = []
        past = len(self.observations) - len(self._future(market))
        if past:
            out.append(f"struck trade: {past} of {len(self.observations)} observations past"
                       + (f", {self.coupons_owed} coupon(s) owed" if self.coupons_owed else ""))
        if self.breached_now(market):
            out.append("the protection barrier is already breached (knocked in)")
        return tuple(out)

    def model_notes(self, capabilities) -> tuple[str, ...]:
        if self.protection_monitoring == "continuous" and \
                Capability.EXACT_BRIDGE not in capabilities:
            return (BRIDGE_UNDER_LAW,)
        return ()

    # -- payoff ----------------------------------------------------------------------------
    def _evaluate(self, ps: PathSet, want_diagnostics: bool):
        market = ps.market
        init = self.initial(market)
        future = self._future(market)
        n = ps.n
        cols = [ps.dates.index(self.observations[k]) for k in future]
        worst = (ps.levels[:, :, cols] / init[None, :, None]).min(axis=1)  # (paths, future obs)
        alive = np.ones(n)
        owed = np.full(n, float(self.coupons_owed))
        value = np.zeros(n)
        diag: dict[str, np.ndarray] = {}
        last = len(self.observations) - 1
        levels = self.autocall_levels()
        for j, k in enumerate(future):
            d = self.observations[k]
            df = ps.df(d)
            w = worst[:, j]
            hit = w >= self.coupon_barrier
            if self.memory:
                paid = np.where(hit, self.coupon * (1.0 + owed), 0.0)
                owed = np.where(hit, 0.0, owed + 1.0)
            else:
                paid = np.where(hit, self.coupon, 0.0)
            cash = alive * paid * self.notional
            value += cash * df
            if want_diagnostics:
                diag[f"expected coupon {d}"] = cash
            if k < last:
                called = alive * (w >= levels[k])
                value += called * (self.notional * df)
                if want_diagnostics:
                    diag[f"autocall probability {d}"] = called
                alive = alive - called
            else:
                p_ki = self._knock_in_probability(ps, worst[:, j], init)
                below = w < self.strike_level
                loss = p_ki * below * (1.0 - w / self.strike_level)
                value += alive * (1.0 - loss) * (self.notional * df)
                if want_diagnostics:
                    diag["knock-in probability"] = alive * p_ki
                    diag["capital loss probability"] = alive * p_ki * below
                    diag["expected loss (fraction of notional)"] = alive * loss
        return value, diag

    def _knock_in_probability(self, ps: PathSet, worst_final: np.ndarray, init: np.ndarray
                              ) -> np.ndarray:
        n = ps.n
        if self.breached_now(ps.market):
            return np.ones(n)
        pb = self.protection_barrier
        if self.protection_monitoring == "final":
            return (worst_final <= pb).astype(float)
        lo, hi = ps.grid_range(ps.market.valuation_date, self.maturity)
        if pb <= 0:
            return np.zeros(n)
        # in logs: the lowest close of each asset, then the worst performance among them
        log_init = np.log(init)
        lowest = ps.grid_log_levels[:, :, lo:hi].min(axis=2) - log_init[None, :]
        grid_hit = lowest.min(axis=1) <= math.log(pb)
        if self.protection_monitoring == "daily":
            return grid_hit.astype(float)
        # continuous: Brownian-bridge crossing probability per asset and step (see module notes)
        cols = np.arange(lo, hi)
        x = ps.grid_log_levels[:, :, lo:hi] - log_init[None, :, None]
        x0 = np.log(ps.spots / init)[None, :, None]
        prev = np.concatenate([np.broadcast_to(x0, (n, len(init), 1)), x[:, :, :-1]], axis=2)
        h = math.log(pb)
        a = prev - h
        b = x - h
        v = ps.variance[:, cols][None, :, :]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            p = np.where((a > 0) & (b > 0) & (v > 0),
                         np.exp(-2.0 * np.maximum(a, 0) * np.maximum(b, 0) /
                                np.where(v > 0, v, 1.0)), 0.0)
        survive = np.prod(1.0 - p, axis=(1, 2))
        return np.where(grid_hit, 1.0, 1.0 - survive)

    def payoff(self, paths: PathSet) -> np.ndarray:
        return self._evaluate(paths, False)[0]

    def evaluate(self, paths: PathSet) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        return self._evaluate(paths, True)

    def diagnostics(self, paths: PathSet) -> dict[str, np.ndarray]:
        return self._evaluate(paths, True)[1]


register_shortcut(Autocallable.kind, Shortcut.EXACT_BRIDGE, {Capability.EXACT_BRIDGE})

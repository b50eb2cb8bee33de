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
* A daily watch under Black (every asset lognormal, no cash dividends: the crossing law
  between two simulated dates is exact) is priced on the observation dates and every
  ``BRIDGE_STRIDE``-th weekday (about a month) alone: between two simulated dates, each
  asset's probability that a weekday close lies at or below the barrier is the Brownian-bridge
  crossing probability of a barrier lowered by ``0.5826 sigma sqrt(one close's step)``
  (Broadie, Glasserman and Kou 1997: a barrier watched at evenly spaced closes is, to first
  order in the spacing, a continuous one shifted by that much), combined over the assets as
  above (over a month that combination's error is measured against every close simulated, in
  the tests and ``benchmarks/note_speed.py``). The knock-in is then a probability (the payoff's
  conditional expectation given the simulated dates): fewer steps and a smoother payoff.
  Whatever the assets' joint law between two dates, no breach there is between ``1 - sum_i
  p_i`` and ``1 - max_i p_i``: the diagnostic ``BRIDGE_BOUND`` is the range this leaves on the
  price, and :func:`fairpath.estimate.price_run` simulates every close instead when it exceeds
  half the error bar (highly correlated assets near the barrier: the independent combination
  overstates the breach, 3 per 1,000 for three identical assets at correlation 1).
  ``Settings(daily_closes=True)`` (``--daily-closes``) always simulates every close.
* Every payment is made on its observation date.

Already-struck trades: ``initial_levels`` (every asset), observations on or before the valuation
date are past and ignored, ``coupons_owed`` memory coupons missed so far, ``knocked_in`` when the
protection barrier was already breached.

Issuer call (``issuer_call = { dates, price }``): on each call date (an observation date before
maturity), after that date's coupon and early-redemption test, the issuer may redeem the note at
``price * notional`` and does so when that lowers the note's value, i.e. when the value of the
note's remaining cash flows to the holder exceeds the call price. That value is estimated by least
squares (Longstaff and Schwartz 2001, as :mod:`fairpath.products.exercise` does for a holder's
option): on pilot paths of their own stream, from the last call date backwards, the cash flows a
path still alive there receives later (coupons, early redemptions, the final redemption with the
knock-in, and the calls already fitted for the later dates), discounted to the date, are regressed
on a basis of the state at the date (:func:`call_basis`). The coefficients are frozen
(:class:`CallPolicy`) and the independent pricing paths are called by them. A policy short of the
issuer's best can only leave the note worth more to the holder, so the price estimates an upper
bound of the issuer-callable note (the mirror of a holder's lower bound).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath.dates import schedule_dates, weekdays_between
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, show
from fairpath.kernels import bridge_survival
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
from fairpath.products.exercise import DEFAULT_PILOT, ILL_CONDITIONED
from fairpath.registry import Capability, Shortcut, register_shortcut

#: Levels between this and 1000 are refused as not fractions of the initial level (a
#: percentage typed as 70); a huge level (1e6) is the way to write "never" or "always".
MAX_LEVEL = 5.0
MONITORINGS = ("final", "daily", "continuous")
#: Largest ``coupon`` a product file may give (100% of the notional per observation): a larger
#: one is a percentage typed as a number (4 for 4%).
MAX_COUPON = 1.0
#: Fewest pilot paths still alive at a call date for a regression there (below it, the issuer
#: does not call on that date)
MIN_ALIVE = 32


@dataclass(frozen=True, slots=True)
class NoteState:
    """A note's state on a date after today, where paths restart (the duality bound of an
    issuer-callable note): the observations up to ``start`` are past, each path is alive and
    owes ``owed`` memory coupons, and ``breached`` says whether its barrier was breached on a
    watched close up to ``start``."""

    start: date
    owed: np.ndarray
    breached: np.ndarray


@dataclass(frozen=True, slots=True)
class CallPolicy:
    """The issuer's frozen call policy: per call date, the regression coefficients of the
    continuation value (a fraction of the notional) on :func:`call_basis`, None where too few
    pilot paths were alive to fit (the issuer does not call there), and each fit's condition
    number (of the scaled columns)."""

    dates: tuple[date, ...]
    coefs: tuple[np.ndarray | None, ...]
    conditions: tuple[float, ...]
    #: per date, the lowest and highest value regressed on (the fit is kept within them)
    ranges: tuple[tuple[float, float], ...]
    pilot: int

    def calls(self, d: date, x: np.ndarray, price: float) -> np.ndarray:
        """Does the issuer call, per path of basis ``x``, on ``d`` at ``price``? Where the
        fitted continuation value, kept within the range of the values it was fitted to (a
        polynomial's extrapolation to a state the pilot paths hardly reached does not decide),
        exceeds the price."""
        try:
            k = self.dates.index(d)
        except ValueError:
            return np.zeros(x.shape[0], dtype=bool)
        c = self.coefs[k]
        if c is None:
            return np.zeros(x.shape[0], dtype=bool)
        lo, hi = self.ranges[k]
        return np.clip(x @ c, lo, hi) > price

    @property
    def worst_condition(self) -> float:
        return max(self.conditions, default=0.0)

    @property
    def unfitted(self) -> tuple[date, ...]:
        return tuple(d for d, c in zip(self.dates, self.coefs, strict=True) if c is None)


def call_basis(perf: np.ndarray, owed: np.ndarray | None, breached: np.ndarray | None
               ) -> np.ndarray:
    """Regression basis of the note's state on a call date, (paths, columns), from the
    performances ``perf`` (paths, assets): a constant, the performances sorted from the worst and
    their squares, the worst's cube, the coupons owed (memory notes: ``owed``) and whether the
    protection barrier has been breached so far (daily or continuous watch: ``breached``).

    Measured (pilot and pricing paths of their own, three callable two-asset notes on the demo
    market): the cube and the other performances' squares lower the callable price, i.e. improve
    the issuer's policy, by 0.3 to 0.6 per 1,000 of notional (3 to 8 standard errors of the
    difference) over the performances, the worst's square, the coupons owed and the breach alone;
    a breach-times-worst column raised it by 0.3 to 0.5, and is left out.
    """
    s = np.sort(perf, axis=1)
    w = s[:, 0]
    cols = [np.ones(len(w)), *(s[:, i] for i in range(s.shape[1])),
            *(s[:, i] ** 2 for i in range(s.shape[1])), w ** 3]
    if owed is not None:
        cols.append(owed)
    if breached is not None:
        cols.append(breached)
    return np.stack(cols, axis=1)


def fit_call(b: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, float]:
    """Least-squares coefficients of ``y`` on the columns of ``b`` and the condition number of
    the fit. Columns scaled to unit size; a column that does not vary over these paths (coupons
    never owed yet, no path breached yet) says nothing the constant does not and gets a zero
    coefficient rather than a singular design."""
    keep = np.ones(b.shape[1], dtype=bool)
    keep[1:] = np.ptp(b[:, 1:], axis=0) > 0
    bk = b[:, keep]
    scale = np.maximum(np.abs(bk).max(axis=0), 1e-300)
    sol, _, _, sv = np.linalg.lstsq(bk / scale, y, rcond=None)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    coef = np.zeros(b.shape[1])
    coef[keep] = sol / scale
    return coef, cond


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
    #: issuer call: the dates (observation dates before maturity; none: not callable), the
    #: price (a fraction of the notional), the pilot paths of the policy's regressions
    call_dates: tuple[date, ...] = field(default=(), kw_only=True)
    call_price: float = field(default=1.0, kw_only=True)
    pilot: int = field(default=DEFAULT_PILOT, kw_only=True)
    call_policy: CallPolicy | None = field(default=None, kw_only=True, compare=False,
                                           repr=False)
    #: the daily watch read from bridge crossing probabilities between the simulated dates
    #: (set by :meth:`for_models` where the models make the bridge exact; see the module notes)
    daily_bridge: bool = field(default=False, kw_only=True)

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
        self._check_issuer_call()

    def _check_issuer_call(self) -> None:
        calls = tuple(self.call_dates)
        object.__setattr__(self, "call_dates", calls)
        key = "issuer_call.dates"
        if any(not isinstance(d, date) for d in calls):
            raise InputError(f"must be dates, got {list(calls)}", key=key)
        if any(b <= a for a, b in zip(calls, calls[1:], strict=False)):
            raise InputError("dates must be strictly increasing", key=key)
        obs = set(self.observations)
        for d in calls:
            if d not in obs:
                near = min(self.observations, key=lambda o: abs((o - d).days))
                raise InputError(f"{d} is not an observation date of the note (the nearest is "
                                 f"{near}); the issuer may call only on an observation date",
                                 key=key)
            if d == self.maturity:
                raise InputError(f"{d} is the note's last observation (maturity), when it is "
                                 "redeemed anyway; the issuer may call on the observation "
                                 "dates before it", key=key)
        price = self.call_price
        if isinstance(price, bool) or not isinstance(price, int | float) or \
                not (math.isfinite(price) and price > 0):
            raise InputError(f"must be a positive fraction of the notional (1.00 = par), got "
                             f"{price!r}", key="issuer_call.price")
        if isinstance(self.pilot, bool) or not isinstance(self.pilot, int) or self.pilot < 256:
            raise InputError(f"must be an integer of at least 256, got {self.pilot!r}",
                             key="pilot_paths")

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
        if self.call_dates and MAX_LEVEL < self.call_price < 1000:
            out.append(f"issuer_call price {self.call_price:g} is {self.call_price:g} times the "
                       "notional, so the issuer never calls; if it is a percentage, write "
                       f"{self.call_price / 100:g}")
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
        call: dict = {}
        spec = tab.table("issuer_call", None)
        if spec is not None:
            call["call_dates"] = schedule_dates(spec.raw("dates"), source=tab.source,
                                                key=spec.key("dates"))
            call["call_price"] = spec.number("price", 1.0, positive=True, limit=MAX_AMOUNT)
            spec.finish()
        if tab.has("pilot_paths"):
            if spec is None:
                raise tab.error("pilot_paths", "pilot paths fit an issuer call policy; this "
                                "note has no issuer_call")
            call["pilot"] = tab.integer("pilot_paths", minimum=256)
        return call | dict(
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

    def daily_stride(self) -> int:
        return BRIDGE_STRIDE if self.daily_bridge else 1

    def for_models(self, capabilities, daily_grid: bool) -> Autocallable:
        """A daily watch through the bridge between the observation dates (see the module
        notes) where every model's bridge is exact and no model needs every weekday anyway."""
        if self.protection_monitoring != "daily" or self.protection_barrier <= 0 \
                or self.knocked_in or daily_grid or self.daily_bridge \
                or Capability.EXACT_BRIDGE not in capabilities:
            return self
        return dataclasses.replace(self, daily_bridge=True)

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
        if self.call_dates and not self._future_calls(market):
            out.append("every issuer call date is past: the note is priced as not callable")
        elif self.call_policy is not None:
            pol = self.call_policy
            out.append(f"issuer call by least squares (Longstaff-Schwartz): the issuer's policy "
                       f"fitted on {pol.pilot:,} pilot paths of their own stream, then frozen "
                       "and applied to independent pricing paths; a policy short of the "
                       "issuer's best only leaves the note worth more, so the price is an upper "
                       "bound for the issuer-callable note (the mirror of a holder's lower "
                       "bound); Greeks through the frozen policy")
            if pol.worst_condition > ILL_CONDITIONED:
                out.append(f"a regression of the issuer call policy is ill-conditioned "
                           f"(condition number {pol.worst_condition:.2g}): the policy may be "
                           "poor at some call dates")
            if pol.unfitted:
                out.append(f"fewer than {MIN_ALIVE} pilot paths still alive on "
                           f"{', '.join(str(d) for d in pol.unfitted)}: the issuer does not "
                           "call there")
        return tuple(out)

    def model_notes(self, capabilities) -> tuple[str, ...]:
        if self.protection_monitoring == "continuous" and \
                Capability.EXACT_BRIDGE not in capabilities:
            return (BRIDGE_UNDER_LAW,)
        if self.daily_bridge:
            return (DAILY_BRIDGE_NOTE,)
        return ()

    # -- payoff ----------------------------------------------------------------------------
    def _evaluate(self, ps: PathSet, want_diagnostics: bool, record: dict | None = None,
                  state: NoteState | None = None):
        """Discounted cash per path and the diagnostics. A callable note is called by its
        frozen policy; with ``record`` (a dict, filled in: fitting) it is never called, and the
        record gets each future observation's cash flows in notional units discounted to
        today (``"flows"``, (paths, dates)) and, per call date, the paths alive after that
        date's early-redemption test and the regression basis (``"calls"``). With ``state``
        the paths start later than today, alive, from that state (:class:`NoteState`)."""
        market = ps.market
        init = self.initial(market)
        future = self._future(market) if state is None else \
            [k for k, d in enumerate(self.observations) if d > state.start]
        n = ps.n
        cols = [ps.dates.index(self.observations[k]) for k in future]
        worst = (ps.levels[:, :, cols] / init[None, :, None]).min(axis=1)  # (paths, future obs)
        alive = np.ones(n)
        owed = np.full(n, float(self.coupons_owed)) if state is None else \
            state.owed.astype(float)
        value = np.zeros(n)
        diag: dict[str, np.ndarray] = {}
        last = len(self.observations) - 1
        levels = self.autocall_levels()
        calls = self._future_calls(market)
        if calls and record is None and self.call_policy is None:
            raise InputError("an issuer-callable note must have its call policy fitted (on "
                             "pilot paths) before pricing")
        watch = _BreachWatch(self, ps, init, state) if calls else None
        life = np.zeros(n) if calls and want_diagnostics else None
        if record is not None:
            record["flows"] = np.zeros((n, len(future)))
            record["calls"] = {}
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
                if record is not None:
                    record["flows"][:, j] = (alive * paid + called) * df
                alive = alive - called
                ended = called
                if d in calls:
                    breached = watch.breached(d)
                    x = call_basis(ps.levels[:, :, cols[j]] / init[None, :],
                                   owed if self.memory else None, breached)
                    if record is not None:
                        record["calls"][j] = (d, df, alive.copy(), x, owed.copy(), breached)
                    else:
                        icalled = alive * self.call_policy.calls(d, x, self.call_price)
                        value += icalled * (self.call_price * self.notional * df)
                        if want_diagnostics:
                            diag[f"issuer call probability {d}"] = icalled
                        alive = alive - icalled
                        ended = called + icalled
                if life is not None:
                    life += ended * market.time(d)
            else:
                spread: list = []
                p_ki = self._knock_in_probability(ps, worst[:, j], init, state,
                                                  spread if want_diagnostics else None)
                below = w < self.strike_level
                loss = p_ki * below * (1.0 - w / self.strike_level)
                if spread:  # how far the combination of the assets' bridges can move it
                    diag[BRIDGE_BOUND] = alive * below * (1.0 - w / self.strike_level) * \
                        np.abs(spread[0]) * (self.notional * df)
                value += alive * (1.0 - loss) * (self.notional * df)
                if want_diagnostics:
                    diag["knock-in probability"] = alive * p_ki
                    diag["capital loss probability"] = alive * p_ki * below
                    diag["expected loss (fraction of notional)"] = alive * loss
                if record is not None:
                    record["flows"][:, j] = (alive * paid + alive * (1.0 - loss)) * df
                if life is not None:
                    life += alive * market.time(d)
        if life is not None:
            diag["expected life (years)"] = life
        return value, diag

    # -- issuer call -----------------------------------------------------------------------
    def _future_calls(self, market: Market) -> frozenset[date]:
        return frozenset(d for d in self.call_dates if d > market.valuation_date)

    def pilot_paths(self) -> int:
        """Pilot paths to fit the issuer's call policy on (0: not callable, or fitted)."""
        return self.pilot if self.call_dates and self.call_policy is None else 0

    def fit(self, pilot: PathSet) -> Autocallable:
        """The note with its issuer call policy fitted backwards on ``pilot`` paths and frozen
        (Longstaff and Schwartz 2001): at each call date, over the paths alive there, the
        value of the later cash flows (under the calls already fitted for the later dates),
        discounted to the date, regressed on :func:`call_basis`; the issuer calls where the
        fitted value exceeds the call price."""
        if not self.call_dates:
            return self
        rec: dict = {}
        self._evaluate(pilot, False, record=rec)
        flows = rec["flows"]
        cont = np.zeros(pilot.n)  # the later cash flows in notional units, discounted to today
        fitted: dict[date, tuple] = {}
        for j in range(flows.shape[1] - 1, -1, -1):
            if j in rec["calls"]:
                d, df, alive, x, _, _ = rec["calls"][j]
                idx = np.flatnonzero(alive > 0)
                if len(idx) < MIN_ALIVE:
                    fitted[d] = (None, 0.0, (0.0, 0.0))
                else:
                    y = cont[idx] / df
                    coef, cond = fit_call(x[idx], y)
                    fitted[d] = (coef, cond, (float(y.min()), float(y.max())))
                    one = CallPolicy((d,), (coef,), (cond,), (fitted[d][2],), pilot.n)
                    go = idx[one.calls(d, x[idx], self.call_price)]
                    cont[go] = self.call_price * df
            cont += flows[:, j]
        dates = tuple(sorted(fitted))
        policy = CallPolicy(dates, *(tuple(fitted[d][i] for d in dates) for i in range(3)),
                            pilot.n)
        return dataclasses.replace(self, call_policy=policy)

    def _knock_in_probability(self, ps: PathSet, worst_final: np.ndarray, init: np.ndarray,
                              state: NoteState | None = None,
                              bounds: list | None = None) -> np.ndarray:
        n = ps.n
        if self.breached_now(ps.market):
            return np.ones(n)
        pb = self.protection_barrier
        if self.protection_monitoring == "final":
            return (worst_final <= pb).astype(float)
        lo, hi = ps.grid_range(ps.market.valuation_date if state is None else state.start,
                               self.maturity)
        if pb <= 0:
            return np.zeros(n)
        if self.daily_bridge:
            survive, low, high, lowest = closes_survival(ps, lo, hi, init, math.log(pb))
            grid_hit = lowest <= math.log(pb)
            if state is not None:
                grid_hit |= state.breached
            if bounds is not None:  # the knock-in's range whatever the assets' joint law
                bounds.append(np.where(grid_hit, 0.0, low - high))
            return np.where(grid_hit, 1.0, 1.0 - survive)
        # in logs: the lowest close of each asset, then the worst performance among them
        log_init = np.log(init)
        lowest = ps.grid_log_levels[:, :, lo:hi].min(axis=2) - log_init[None, :]
        grid_hit = lowest.min(axis=1) <= math.log(pb)
        if state is not None:
            grid_hit |= state.breached
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


class _BreachWatch:
    """Whether the protection barrier has been breached by each call date, from the worst
    performance's running minimum over the grid's closes (daily or continuous watch; for a
    continuous one the crossings between closes are left to the final knock-in). ``breached``
    gives None where it is no state: a barrier watched at maturity only, no barrier, or one
    breached already."""

    def __init__(self, note: Autocallable, ps: PathSet, init: np.ndarray,
                 state: NoteState | None = None):
        self.ps = ps
        self.on = note.protection_monitoring != "final" and note.protection_barrier > 0 \
            and not note.breached_now(ps.market)
        self.level = math.log(note.protection_barrier) if self.on else 0.0
        self.log_init = np.log(init)[None, :]
        self.low = np.full(ps.n, np.inf)
        self.since = ps.market.valuation_date
        if state is not None:
            self.low[state.breached] = -np.inf
            self.since = state.start
        #: with the bridged daily watch, the probability of no close between the simulated
        #: dates at or below the barrier so far (the state is then a probability)
        self.survive = np.ones(ps.n) if note.daily_bridge else None

    def breached(self, d: date) -> np.ndarray | None:
        if not self.on:
            return None
        lo, hi = self.ps.grid_range(self.since, d)
        if hi > lo:
            seg = (self.ps.grid_log_levels[:, :, lo:hi].min(axis=2) - self.log_init).min(axis=1)
            np.minimum(self.low, seg, out=self.low)
            if self.survive is not None:
                self.survive *= closes_survival(self.ps, lo, hi, np.exp(self.log_init[0]),
                                                self.level)[0]
        self.since = d
        hit = (self.low <= self.level).astype(float)
        return hit if self.survive is None else np.where(hit > 0, 1.0, 1.0 - self.survive)


#: With the bridged daily watch, every this many weekdays is simulated (besides the
#: observation dates): about a month, where combining the assets' bridges as independent moves
#: the demo note by less than 0.1 per 1,000 at its correlations and at 0.9 (measured against
#: every close simulated; over whole half-years it moved 1.0 per 1,000 at 0.9)
BRIDGE_STRIDE = 21

#: Broadie, Glasserman and Kou's (1997) constant, -zeta(1/2) / sqrt(2 pi): a barrier watched
#: at closes ``dt`` apart prices, to first order in ``dt``, as a continuous one moved away from
#: the level by ``BGK_SHIFT sigma sqrt(dt)``
BGK_SHIFT = 0.5826

#: The diagnostic of a bridged daily watch: per path, the width of the range of its
#: discounted redemption over every joint law of the assets' crossings between the dates
BRIDGE_BOUND = "bridge combination range"

DAILY_BRIDGE_NOTE = (
    "daily protection barrier watched on the observation dates and every 21st weekday, the "
    "closes in between read from each asset's Brownian-bridge crossing probability, the "
    "barrier shifted by 0.5826 sigma sqrt(gap) for daily closes (Broadie, Glasserman and Kou "
    "1997), the assets combined as independent given those dates (exact for one asset); "
    "whatever their joint law the price moves by at most the 'bridge combination range', and "
    "every close is simulated when that exceeds half the error bar (--daily-closes always)")


def closes_survival(ps: PathSet, lo: int, hi: int, init: np.ndarray, h: float
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per path, the probability that no weekday close strictly between the grid dates of
    columns ``lo - 1 .. hi - 1`` (the valuation date before column 0) has an asset's log
    performance at or below ``h``, given the simulated levels: per asset and grid step, the
    bridge crossing probability ``exp(-2 a b / v)`` of the barrier lowered by ``BGK_SHIFT``
    times the standard deviation over the gap between closes (the gaps of 1 and 3 calendar
    days weighted by their length), 0 for a step of one close; the product over assets and
    steps (the module notes). Returns ``(survival, low, high, lowest)``: ``low`` and ``high``
    bound the survival whatever the assets' joint law between the dates (per step, no breach
    at all is at least ``1 - sum_i p_i`` and at most ``1 - max_i p_i``; the steps are
    independent given the simulated dates, so the bounds multiply); ``lowest`` is the worst
    log performance on the grid dates themselves."""
    n, n_a = ps.n, len(init)
    log_init = np.log(init)
    g = ps.grid_log_levels
    x0 = np.broadcast_to(np.log(ps.spots) - log_init, (n, n_a)) if lo == 0 else \
        g[:, :, lo - 1] - log_init[None, :]
    var = ps.variance[:, lo:hi]
    shifted = np.full(var.shape, h)
    use = np.zeros(hi - lo, dtype=bool)
    val = ps.market.valuation_date
    for j, col in enumerate(range(lo, hi)):
        start = ps.grid_dates[col - 1] if col > 0 else val
        closes = weekdays_between(start, ps.grid_dates[col])
        if len(closes) <= 1:
            continue
        use[j] = True
        # the closes are 1 or 3 calendar days apart: the shift is the gaps' sqrt weighted by
        # their length (each gap misses crossings in proportion to its time and its sd)
        gaps = np.diff([start.toordinal(), *(d.toordinal() for d in closes)]).astype(float)
        shifted[:, j] = h - BGK_SHIFT * np.sqrt(var[:, j] / gaps.sum()) * \
            (gaps ** 1.5).sum() / gaps.sum()
    return bridge_survival(g, lo, log_init, x0, shifted, var, use)


register_shortcut(Autocallable.kind, Shortcut.EXACT_BRIDGE, {Capability.EXACT_BRIDGE})

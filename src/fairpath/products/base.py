"""The product interface, the registry of product kinds, and what the engine hands a payoff.

A product never generates randomness. It declares the assets it uses and the dates on which it
needs their levels; the engine simulates those levels and calls :meth:`Product.payoff` with a
:class:`PathSet`, and the product returns the discounted cash of every path (quantity included).
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, did_you_mean, show
from fairpath.market import DiscountCurve, Market
from fairpath.registry import PATHWISE, Capability, Estimator, Shortcut, usable

#: kind name -> product class
REGISTRY: dict[str, type[Product]] = {}
#: Variants of a kind picked by a key of its file: (kind, key) -> class (a basket with
#: exercise_dates is a Bermudan basket)
VARIANTS: dict[tuple[str, str], type[Product]] = {}
#: Latest date a product may use, in years after the valuation date: a later one is a typo
#: (9999-12-01), and a daily grid out to it would not fit in memory.
MAX_YEARS = 100


@dataclass(frozen=True, slots=True)
class PathSet:
    """Simulated levels handed to a payoff, for one chunk of paths.

    Attributes
    ----------
    market : Market
    names : tuple of str
        The product's assets, in the order of axis 1 of ``levels``.
    dates : tuple of date
        The product's observation dates, in the order of axis 2 of ``levels``.
    levels : ndarray, shape (paths, assets, dates)
        Levels on the observation dates (the spot on a date equal to the valuation date).
    spots : ndarray, shape (assets,)
        Levels on the valuation date.
    grid_dates : tuple of date
        The engine's simulation grid (every date after the valuation date on which levels are
        simulated: the observation dates, plus the weekdays of any daily monitoring).
    grid_times : ndarray
        Year fractions of ``grid_dates`` (all > 0).
    grid_log_levels : ndarray, shape (paths, assets, grid dates)
        Natural logs of the levels on the whole grid (for monitoring between observation
        dates); ``grid_levels`` gives the levels themselves (computed on each call).
    variance : ndarray, shape (assets, grid dates)
        Integrated variance of each asset's log-level over each grid step (the first step starts
        on the valuation date): exact where ``capabilities`` has ``EXACT_BRIDGE``, else the
        model's approximation.
    capabilities : frozenset of Capability
        What every model of these assets declares about the paths (see
        :mod:`fairpath.registry`); a payoff uses a shortcut only where :meth:`allows` says so.
    """

    market: Market
    names: tuple[str, ...]
    dates: tuple[date, ...]
    levels: np.ndarray
    spots: np.ndarray
    grid_dates: tuple[date, ...]
    grid_times: np.ndarray
    grid_log_levels: np.ndarray
    variance: np.ndarray
    capabilities: frozenset[Capability] = frozenset()
    #: the issuer's funding spread over the discount curve (a zero curve of spreads) for the
    #: product's cash flows, or None: discounted on the curve
    funding: DiscountCurve | None = None

    @property
    def n(self) -> int:
        return self.levels.shape[0]

    @classmethod
    def from_log_levels(cls, market: Market, names, dates, obs_index, spots, grid_dates,
                        grid_times, log_levels: np.ndarray, variance: np.ndarray,
                        capabilities: frozenset[Capability] = frozenset(),
                        funding: DiscountCurve | None = None) -> PathSet:
        """A path set from simulated log-levels on the grid; ``obs_index`` gives each
        observation date's grid column (-1: the valuation date, at the spots)."""
        n = log_levels.shape[0]
        levels = np.empty((n, len(names), len(dates)))
        for k, g in enumerate(obs_index):
            if g < 0:
                levels[:, :, k] = spots
            else:
                np.exp(log_levels[:, :, g], out=levels[:, :, k])
        return cls(market, tuple(names), tuple(dates), levels, spots, tuple(grid_dates),
                   grid_times, log_levels, variance, frozenset(capabilities), funding)

    def allows(self, product: Product, shortcut: Shortcut) -> bool:
        """May ``product`` use ``shortcut`` on these paths (registered for its kind, and every
        capability it needs declared by the models)?"""
        return usable(product.kind, shortcut, self.capabilities)

    @property
    def grid_levels(self) -> np.ndarray:
        """Levels on the whole grid, (paths, assets, grid dates) (a new array each call)."""
        return np.exp(self.grid_log_levels)

    def df(self, d: date) -> float:
        """Discount factor from the valuation date to ``d`` of a cash flow the product pays
        (on the curve plus the issuer's funding spread, if any)."""
        return float(self.df_times(self.market.time(d)))

    def df_times(self, t) -> float | np.ndarray:
        """:meth:`df` at times ``t`` (years)."""
        out = self.market.discount.df(t)
        return out if self.funding is None else out * self.funding.df(t)

    def level(self, name: str, d: date) -> np.ndarray:
        """Levels of one asset on one observation date, shape (paths,)."""
        return self.levels[:, self.names.index(name), self.dates.index(d)]

    def log_levels(self, name: str, dates) -> np.ndarray:
        """Natural logs of one asset's levels on ``dates`` (each a grid date or the valuation
        date), shape (paths, dates), read from the simulated log-levels."""
        i = self.names.index(name)
        out = np.empty((self.n, len(dates)))
        for k, d in enumerate(dates):
            if d == self.market.valuation_date:
                out[:, k] = math.log(self.spots[i])
            else:
                g = bisect.bisect_left(self.grid_dates, d)
                if g >= len(self.grid_dates) or self.grid_dates[g] != d:
                    raise ValueError(f"{d} is not on the simulation grid")
                out[:, k] = self.grid_log_levels[:, i, g]
        return out

    def log_levels_at(self, d: date) -> np.ndarray:
        """Natural logs of every asset's level on one observation date, shape (paths, assets)."""
        if d == self.market.valuation_date:
            return np.broadcast_to(np.log(self.spots), (self.n, len(self.names)))
        g = bisect.bisect_left(self.grid_dates, d)
        if g >= len(self.grid_dates) or self.grid_dates[g] != d:
            raise ValueError(f"{d} is not on the simulation grid")
        return self.grid_log_levels[:, :, g]

    def grid_columns(self, start: date, end: date) -> np.ndarray:
        """Indices of the grid dates ``d`` with ``start < d <= end`` (a contiguous range: the
        grid is sorted)."""
        return np.arange(*self.grid_range(start, end))

    def grid_range(self, start: date, end: date) -> tuple[int, int]:
        """``(lo, hi)`` with ``grid_dates[lo:hi]`` the grid dates in ``(start, end]``."""
        return (bisect.bisect_right(self.grid_dates, start),
                bisect.bisect_right(self.grid_dates, end))


@dataclass(frozen=True, slots=True)
class ControlVariate:
    """A quantity with a known mean, simulated beside the payoff to reduce its variance."""

    name: str
    values: Callable[[PathSet], np.ndarray]
    mean: float
    #: is the known mean right under any model that reprices the forward (a discounted
    #: forward), not only under lognormal levels (a closed form)?
    model_free: bool = False

    @property
    def requires(self) -> frozenset[Capability]:
        """The capabilities the known mean rests on: the engine keeps the control only where
        every model of the product's assets declares them."""
        return frozenset({Capability.FORWARD} if self.model_free else {Capability.LOGNORMAL})


@dataclass(frozen=True, slots=True)
class Product:
    """Base class of every product. Subclasses set ``kind`` and implement the hooks."""

    kind: ClassVar[str] = ""

    name: str | None = field(default=None, kw_only=True)
    #: the file the product was read from (named in errors found when it is priced)
    source: str | None = field(default=None, kw_only=True, compare=False, repr=False)
    #: the issuer whose funding spread (the market's ``[issuers]``) discounts the cash flows,
    #: unless ``funding`` is False (an option that carries no issuer risk)
    issuer: str | None = field(default=None, kw_only=True)
    funding: bool = field(default=True, kw_only=True)
    #: how a payoff on an asset quoted in another currency is paid: "quanto" (the amount in
    #: reporting units, times ``quanto_rate``) or "converted" (:mod:`fairpath.products.currency`)
    settlement: str | None = field(default=None, kw_only=True)
    quanto_rate: float = field(default=1.0, kw_only=True)

    def __init_subclass__(cls, **kwargs):
        super(Product, cls).__init_subclass__(**kwargs)
        # (twice for a slotted dataclass: the slotted class replaces the first); a variant of
        # a kind (VARIANTS) leaves the kind's class registered
        if cls.__dict__.get("kind") and not cls.__dict__.get("variant"):
            REGISTRY[cls.kind] = cls

    @classmethod
    def for_terms(cls, tab) -> type[Product]:
        """The class a file of this ``kind`` builds, given its table: a variant registered in
        :data:`VARIANTS` for a key the file gives (a basket with exercise dates), else the
        class itself."""
        for (kind, key), variant in VARIANTS.items():
            if kind == cls.kind and tab.has(key):
                return variant
        return cls

    @classmethod
    def from_table(cls, tab) -> dict:
        """Constructor keywords read from a product file's table (``fairpath.inputs.Table``)."""
        raise NotImplementedError

    # -- what the engine asks ------------------------------------------------------------
    def underlyings(self) -> tuple[str, ...]:
        """Assets whose levels the payoff needs, in the order of ``PathSet.levels`` axis 1."""
        raise NotImplementedError

    def observation_dates(self) -> tuple[date, ...]:
        """Strictly increasing dates on which the payoff needs levels (may be empty when
        everything is already fixed)."""
        raise NotImplementedError

    def daily_until(self) -> date | None:
        """Last date of a daily (weekday) monitoring, if the product monitors daily: the engine
        then adds every weekday after the valuation date up to this date to its grid."""
        return None

    def check(self, market: Market, source: str | None = None) -> None:
        """Raise :class:`InputError` if the product cannot be priced on this market."""
        key = "assets" if len(self.underlyings()) > 1 else "asset"
        for n in self.underlyings():
            market.asset(n, source=source, key=key)
        dates = self.observation_dates()
        if dates and dates[0] < market.valuation_date:
            raise InputError(f"{dates[0]} is before the valuation date {market.valuation_date}",
                             source=source, key=self.date_key())
        check_horizon(market, (*dates, self.daily_until()), source=source, key=self.date_key())

    def date_key(self) -> str:
        """The product key holding its dates (for error messages)."""
        return "expiry"

    def evaluate(self, paths: PathSet) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        """Payoff and diagnostics together (override when they share work)."""
        return self.payoff(paths), self.diagnostics(paths)

    #: does the payoff jump as a function of the levels (digitals, triggers, discrete barriers)?
    payoff_jumps: ClassVar[bool] = False

    def score_safe(self) -> bool:
        """Does the payoff depend on today's spots only through the simulated levels? Then the
        likelihood-ratio weights are valid (a Brownian-bridge weight from today's spot is not)."""
        return True

    def has_pathwise(self, market: Market) -> bool:
        """Does :meth:`pathwise` give estimators for this product on this market?"""
        return False

    def pathwise(self, paths: PathSet) -> dict[Estimator, np.ndarray]:
        """Per-path derivatives of the discounted payoff, keyed by
        ``Estimator(PATHWISE, "delta", NAME)`` and, where the vol is flat,
        ``Estimator(PATHWISE, "vega", NAME)`` (see :func:`level_sensitivities`)."""
        return {}

    def funding_curve(self, market: Market, source: str | None = None
                      ) -> DiscountCurve | None:
        """The issuer's funding spread curve its cash flows are discounted with (on top of
        the discount curve), or None (no issuer, or ``funding = false``)."""
        if self.issuer is None or not self.funding:
            return None
        return market.issuer_spread(self.issuer, source=source or self.source)

    def struck(self, market: Market) -> Product:
        """The product with every level that is fixed from today's spots fixed explicitly, so
        a spot bump moves the asset and not the trade's terms (e.g. a basket's initial levels)."""
        return self

    def diagnostics(self, paths: PathSet) -> dict[str, np.ndarray]:
        """Per-path quantities whose averages are reported beside the price (e.g. the
        probability of an early redemption); none by default."""
        return {}

    def notes(self, market: Market) -> tuple[str, ...]:
        """Remarks on the trade's state to show beside its price (e.g. a barrier already hit)."""
        return ()

    def warnings(self) -> tuple[str, ...]:
        """Legal but doubtful terms, warned about once when the product is loaded."""
        return ()

    def daily_stride(self) -> int:
        """Of the weekdays up to :meth:`daily_until`, the engine simulates every this many
        (1: every weekday; more where the product reads the closes in between from a bridge)."""
        return 1

    def for_models(self, capabilities: frozenset[Capability], daily_grid: bool) -> Product:
        """The product as the engine prices it under models with these ``capabilities``
        (``daily_grid``: they step every weekday anyway): a cheaper but equivalent reading of
        its terms where the models allow one (a daily watch through exact bridges between the
        observation dates); itself by default."""
        return self

    def model_notes(self, capabilities: frozenset[Capability]) -> tuple[str, ...]:
        """Remarks on how the product is priced under models with these capabilities (e.g. an
        approximate Brownian bridge)."""
        return ()

    # -- two phases (early exercise and other fitted policies) ---------------------------
    def pilot_paths(self) -> int:
        """Paths this product needs, before pricing, to fit what it decides on the paths (an
        exercise policy); 0: none (the default)."""
        return 0

    def fit(self, pilot: PathSet) -> Product:
        """The product with its policy fitted on ``pilot`` paths (drawn from a stream of their
        own) and frozen: every thread and scenario of the run prices the returned product."""
        return self

    def payoff(self, paths: PathSet) -> np.ndarray:
        """Discounted cash of every path, shape (paths,), quantity included."""
        raise NotImplementedError

    def controls(self, market: Market) -> list[ControlVariate]:
        """Control variates with known means; by default the discounted level of every asset
        on the last observation date, whose mean is its discounted forward."""
        dates = self.observation_dates()
        if not dates:
            return []
        last = dates[-1]
        t = market.time(last)
        df = float(market.discount.df(t))
        out = []
        for n in self.underlyings():
            mean = market.forward(n, t) * df

            def values(ps: PathSet, n=n, last=last, df=df):
                return ps.level(n, last) * df
            out.append(ControlVariate(f"discounted {n} on {last}", values, mean,
                                      model_free=True))
        return out

    def closed_form(self, market: Market) -> float | None:
        """Closed-form price under flat Black-Scholes-Merton inputs, when one exists."""
        return None

    def reference(self, market: Market) -> float | None:
        """The closed form when it applies to this market: registered for the product's kind
        and every model of its assets declaring what it needs (lognormal levels)."""
        from fairpath.models import ModelSet

        caps = ModelSet.resolve(market, self.underlyings()).capabilities
        if not usable(self.kind, Shortcut.CLOSED_FORM, caps) or \
                self.funding_curve(market) is not None:  # the closed forms know no spread
            return None
        return self.closed_form(market)

    def label(self) -> str:
        return self.name or self.kind


def level_sensitivities(ps: PathSet) -> tuple[np.ndarray, np.ndarray | None]:
    """Derivatives of the levels on the observation dates, shape (paths, assets, dates).

    ``dS_t/dS_0 = S_t / S_0`` where the models declare ``SPOT_SCALING`` (any vol term structure
    or shock law); where they also declare ``FLAT_VOL`` and ``LOGNORMAL``,
    ``dS_t/dsigma = S_t (W_t - sigma t)`` with ``W_t = (log S_t - log F_t + sigma^2 t / 2) / sigma``
    recovered from the path (else None).
    """
    d_spot = ps.levels / ps.spots[None, :, None]
    vols = [ps.market.asset(n).vol for n in ps.names]
    if not {Capability.FLAT_VOL, Capability.LOGNORMAL} <= ps.capabilities:
        return d_spot, None
    t = np.array([max(ps.market.time(d), 0.0) for d in ps.dates])
    sig = np.array([v.vols[0] for v in vols])[None, :, None]
    log_f = np.stack([np.log(ps.market.forward(n, t)) for n in ps.names])[None, :, :]
    w = (np.log(ps.levels) - log_f + 0.5 * sig**2 * t) / sig
    return d_spot, ps.levels * (w - sig * t)


def pathwise_from_gradient(ps: PathSet, grad: np.ndarray) -> dict[Estimator, np.ndarray]:
    """Pathwise delta and vega of every asset from d payoff / d level, (paths, assets, dates)."""
    d_spot, d_vol = level_sensitivities(ps)
    out = {}
    for i, n in enumerate(ps.names):
        out[Estimator(PATHWISE, "delta", n)] = np.sum(grad[:, i, :] * d_spot[:, i, :], axis=1)
        if d_vol is not None:
            out[Estimator(PATHWISE, "vega", n)] = np.sum(grad[:, i, :] * d_vol[:, i, :], axis=1)
    return out


def check_horizon(market: Market, dates, *, source: str | None, key: str) -> None:
    """Refuse a date more than MAX_YEARS after the valuation date (``None`` entries skipped)."""
    dates = [d for d in dates if d is not None]
    if not dates:
        return
    last = max(dates)
    years = (last - market.valuation_date).days / 365.25
    if years > MAX_YEARS:
        raise InputError(f"{last} is {years:,.0f} years after the valuation date "
                         f"{market.valuation_date}; at most {MAX_YEARS} years are priced",
                         source=source, key=key)


def asset_list(assets) -> tuple[str, ...]:
    """A product's ``assets`` as a tuple of distinct names (InputError otherwise)."""
    assets = tuple(assets)
    if not assets or not all(isinstance(a, str) for a in assets):
        raise InputError("must be a non-empty list of asset names", key="assets")
    if len(set(assets)) != len(assets):
        raise InputError(f"an asset is listed twice in {list(assets)}", key="assets")
    return assets


def read_asset_names(tab) -> tuple[str, ...]:
    """The ``assets`` list of a product file."""
    assets = tab.list("assets")
    for i, a in enumerate(assets):
        if not isinstance(a, str):
            raise tab.error(f"assets[{i}]", f"expected an asset name, got {show(a)}")
    if len(set(assets)) != len(assets):
        twice = next(a for a in assets if assets.count(a) > 1)
        raise tab.error("assets", f"{twice!r} is listed twice")
    return tuple(assets)


def read_initial_levels(tab, assets, what: str) -> tuple[tuple[str, float], ...]:
    """The optional ``initial_levels`` table of a product on ``assets`` (``what``: "note",
    "basket", for the message): each key one of the assets, each level positive."""
    init = tab.table("initial_levels", None)
    if init is None:
        return ()
    for k in init.data:
        if k not in assets:
            raise init.error(k, f"{show(k)} is not one of the {what}'s assets "
                             f"{list(assets)}{did_you_mean(k, assets)}")
    return tuple((k, init.number(k, positive=True, limit=MAX_AMOUNT)) for k in list(init.data))


def single_asset_quantity(tab) -> float:
    """``quantity`` of a single-asset product; ``notional`` is refused with a pointer to it."""
    if "notional" in tab.data:
        raise tab.error("notional", "a single-asset option takes 'quantity' (the number of "
                        "units), not 'notional'")
    return tab.number("quantity", 1.0, limit=MAX_AMOUNT)


def product_class(kind: object, *, source: str | None = None) -> type[Product]:
    """The class registered for a ``kind``; an unknown name lists the known ones."""
    if not isinstance(kind, str) or kind not in REGISTRY:
        known = sorted(REGISTRY)
        raise InputError(f"unknown product kind {show(kind)}{did_you_mean(str(kind), known)}; "
                         f"known: {', '.join(known)}", source=source, key="kind")
    return REGISTRY[kind]

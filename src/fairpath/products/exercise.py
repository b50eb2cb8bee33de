"""Early exercise: American and Bermudan options by least-squares Monte Carlo.

A holder who may exercise on several dates exercises when the payoff of exercising now exceeds
the value of holding on. That value (the continuation value) is estimated by regression
(Longstaff and Schwartz 2001): on *pilot* paths of their own random stream, from the last
exercise date backwards, the cash each path receives later (under the policy already fitted for
the later dates), discounted to the date, is regressed on a basis of the state at the date, over
the paths in the money there. The fitted coefficients are then frozen (:class:`ExercisePolicy`)
and the pricing paths, independent of the pilot ones, exercise by them: a policy that is not the
optimal one can only lose value, so the price is an unbiased estimate of a lower bound for the
holder (the other bound comes from duality, :mod:`fairpath.duality`). The same frozen policy
serves every thread, batch and bumped scenario (Greeks through the frozen policy: the standard
practice), so a result depends neither on the threads nor on the batch size.

The basis (the state's normalised levels ``x = S / K``): for one asset the powers of ``x`` up to
``basis_degree`` (3 by default, as Longstaff and Schwartz's three Laguerre polynomials plus a
constant); for several assets, the levels sorted from the highest, their squares and the product
of the two highest, and the cube of the highest (Andersen and Broadie's 2004 max-call basis is
of this kind). The payoff of exercising now is a linear function of these on the paths in the
money for the calls, puts and baskets here, so it adds nothing to the basis. Each regression is
solved by least squares on columns scaled to unit size; a design whose condition number exceeds
:data:`ILL_CONDITIONED` is reported with the price, not ignored.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath.dates import schedule_dates
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT
from fairpath.products.base import VARIANTS, PathSet, Product, single_asset_quantity
from fairpath.products.basket import Basket
from fairpath.products.vanilla import intrinsic

#: Pilot paths of the regression when the product does not say (measured: see docs/products.md)
DEFAULT_PILOT = 1 << 15
#: Highest power of the one-asset basis
DEFAULT_DEGREE = 3
#: A regression design whose condition number (of the scaled columns) exceeds this is reported
ILL_CONDITIONED = 1e10
#: Fewest in-the-money pilot paths for a regression at a date (below it the date holds on)
MIN_ITM = 32


@dataclass(frozen=True, slots=True)
class ExercisePolicy:
    """Regression coefficients of the continuation value per exercise date (None: the date
    had too few pilot paths in the money to fit, and the holder holds on), and each fit's
    condition number."""

    dates: tuple[date, ...]
    coefs: tuple[np.ndarray | None, ...]
    conditions: tuple[float, ...]
    pilot: int
    degree: int

    def coef(self, d: date) -> np.ndarray | None:
        try:
            return self.coefs[self.dates.index(d)]
        except ValueError:
            return None

    @property
    def worst_condition(self) -> float:
        return max(self.conditions, default=0.0)


def basis(x: np.ndarray, degree: int, extra: np.ndarray | None = None) -> np.ndarray:
    """The regression basis of the normalised levels ``x`` (paths, assets), with the
    product's ``extra`` columns (paths, k) appended."""
    n, a = x.shape
    if extra is not None:
        return np.concatenate([basis(x, degree), extra], axis=1)
    if a == 1:
        return np.stack([x[:, 0] ** p for p in range(degree + 1)], axis=1)
    s = -np.sort(-x, axis=1)
    cols = [np.ones(n)]
    cols += [s[:, i] for i in range(a)]
    cols += [s[:, i] ** 2 for i in range(a)]
    cols += [s[:, 0] * s[:, 1], s[:, 0] ** 3]
    return np.stack(cols, axis=1)


def fit_policy(dates: tuple[date, ...], levels: np.ndarray, values: np.ndarray,
               dfs: np.ndarray, degree: int, extra: np.ndarray | None = None,
               floor: np.ndarray | None = None) -> ExercisePolicy:
    """Backward induction on pilot paths: ``levels`` (paths, assets, dates) normalised,
    ``values`` (paths, dates) the payoff of exercising on each date, ``dfs`` (dates,) the
    discount factors to each date, ``extra`` (paths, k, dates) more basis columns, ``floor``
    (paths, dates) a value holding on is known to be worth at least (no exercise below it).
    The last date exercises whenever in the money."""
    n, _, m = levels.shape
    cash = values[:, -1] * dfs[-1]  # each path's discounted cash under the later policy
    coefs: list[np.ndarray | None] = [None] * m
    conds = [0.0] * m
    for k in range(m - 2, -1, -1):
        ev = values[:, k]
        itm = ev > 0
        if np.count_nonzero(itm) < MIN_ITM:
            continue
        b = basis(levels[itm, :, k], degree, None if extra is None else extra[itm, :, k])
        scale = np.maximum(np.abs(b).max(axis=0), 1e-300)
        y = cash[itm] / dfs[k]
        sol, _, rank, sv = np.linalg.lstsq(b / scale, y, rcond=None)
        conds[k] = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
        c = sol / scale
        coefs[k] = c
        go = ev[itm] >= b @ c
        if floor is not None:
            go &= ev[itm] > floor[itm, k]
        idx = np.flatnonzero(itm)[go]
        cash[idx] = ev[idx] * dfs[k]
    return ExercisePolicy(tuple(dates), tuple(coefs), tuple(conds), n, degree)


def exercised(policy: ExercisePolicy, d: date, last: bool, ev: np.ndarray, x: np.ndarray,
              extra: np.ndarray | None, floor: np.ndarray | None,
              cand: np.ndarray) -> np.ndarray:
    """The indices among the paths ``cand`` (bool: in the money, not yet exercised) where the
    frozen policy exercises on date ``d``, given that date's payoffs ``ev``, normalised levels
    ``x`` (paths, assets), extra columns (paths, k) and floor (paths,): all of them on the last
    date, none where the date has no fit, else where the payoff beats the fitted continuation
    value (and the floor)."""
    idx = np.flatnonzero(cand)
    if last:
        return idx
    c = policy.coef(d)
    if c is None:
        return idx[:0]
    go = ev[idx] >= basis(x[idx], policy.degree, None if extra is None else extra[idx]) @ c
    if floor is not None:
        go &= ev[idx] > floor[idx]
    return idx[go]


def apply_policy(policy: ExercisePolicy, dates: tuple[date, ...], levels: np.ndarray,
                 values: np.ndarray, dfs: np.ndarray, extra: np.ndarray | None = None,
                 floor: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Forward on pricing paths: the discounted cash of each path and the index of the date it
    exercises on (-1: never, out of the money at the last date)."""
    n, _, m = levels.shape
    cash = np.zeros(n)
    when = np.full(n, -1)
    alive = np.ones(n, dtype=bool)
    for k, d in enumerate(dates):
        ev = values[:, k]
        idx = exercised(policy, d, k == m - 1, ev, levels[:, :, k],
                        None if extra is None else extra[:, :, k],
                        None if floor is None else floor[:, k], alive & (ev > 0))
        cash[idx] = ev[idx] * dfs[k]
        when[idx] = k
        alive[idx] = False
    return cash, when


@dataclass(frozen=True, slots=True)
class EarlyExercise(Product):
    """What every early-exercise product shares: the exercise dates (``exercise_dates``, else
    every weekday close up to ``expiry``), the pilot size and basis degree, and the frozen
    policy once :meth:`fit` has run."""

    expiry: date = field(kw_only=True)
    exercise_dates: tuple[date, ...] | None = field(default=None, kw_only=True)
    pilot: int = field(default=DEFAULT_PILOT, kw_only=True)
    basis_degree: int = field(default=DEFAULT_DEGREE, kw_only=True)
    policy: ExercisePolicy | None = field(default=None, kw_only=True, compare=False,
                                          repr=False)

    def _check_exercise(self) -> None:
        if not isinstance(self.expiry, date):
            raise InputError(f"must be a date, got {self.expiry!r}", key="expiry")
        late = [d for d in self.exercise_dates or () if d > self.expiry]
        if late:
            raise InputError(f"{late[0]} is after the expiry {self.expiry}",
                             key="exercise_dates")
        if isinstance(self.pilot, bool) or not isinstance(self.pilot, int) or self.pilot < 256:
            raise InputError(f"must be an integer of at least 256, got {self.pilot!r}",
                             key="pilot_paths")
        if isinstance(self.basis_degree, bool) or self.basis_degree not in (1, 2, 3, 4, 5):
            raise InputError(f"must be 1 to 5, got {self.basis_degree!r}", key="basis_degree")

    def observation_dates(self) -> tuple[date, ...]:
        if self.exercise_dates is None:
            return (self.expiry,)
        return tuple(sorted({*self.exercise_dates, self.expiry}))

    def daily_until(self) -> date | None:
        return self.expiry if self.exercise_dates is None else None

    def date_key(self) -> str:
        return "exercise_dates" if self.exercise_dates is not None else "expiry"

    def check(self, market, source=None) -> None:
        if self.exercise_dates is not None and self.exercise_dates and \
                self.exercise_dates[0] <= market.valuation_date:
            raise InputError(f"{self.exercise_dates[0]} is not after the valuation date "
                             f"{market.valuation_date}", source=source, key="exercise_dates")
        super(EarlyExercise, self).check(market, source)

    def decision_dates(self, paths: PathSet) -> tuple[date, ...]:
        """The dates the holder may exercise on, among those the paths carry."""
        if self.exercise_dates is None:
            val = paths.market.valuation_date
            return tuple(d for d in paths.grid_dates if val < d <= self.expiry)
        return tuple(d for d in self.observation_dates() if d > paths.market.valuation_date)

    # the exercise value and the normalisation, per family
    def exercise_values(self, levels: np.ndarray, market) -> np.ndarray:
        """Payoff of exercising, (paths, dates), from levels (paths, assets, dates)."""
        raise NotImplementedError

    def normalise(self, levels: np.ndarray, market) -> np.ndarray:
        """The levels (paths, assets, dates) as the basis reads them (over a strike, or over
        the initial levels)."""
        raise NotImplementedError

    def features(self, levels: np.ndarray, dates, market) -> np.ndarray | None:
        """More basis columns, (paths, k, dates), beside the levels' powers; none by
        default."""
        return None

    def _state(self, paths: PathSet):
        dates = self.decision_dates(paths)
        levels = np.stack([np.exp(paths.log_levels_at(d)) for d in dates], axis=2)
        dfs = np.array([paths.df(d) for d in dates])
        return dates, levels, self.exercise_values(levels, paths.market), dfs

    def floor(self, levels: np.ndarray, dates, market) -> np.ndarray | None:
        """(paths, dates): a value holding on is known to be worth at least, on each date (no
        exercise where the payoff does not beat it); none by default."""
        return None

    def regressors(self, levels: np.ndarray, dates, market):
        """The normalised levels, the extra basis columns and the floor the policy reads."""
        return (self.normalise(levels, market), self.features(levels, dates, market),
                self.floor(levels, dates, market))

    def pilot_paths(self) -> int:
        return self.pilot if self.policy is None else 0

    def fit(self, pilot: PathSet) -> Product:
        import dataclasses

        dates, levels, values, dfs = self._state(pilot)
        x, extra, floor = self.regressors(levels, dates, pilot.market)
        policy = fit_policy(dates, x, values, dfs, self.basis_degree, extra, floor)
        return dataclasses.replace(self, policy=policy)

    def evaluate(self, paths: PathSet) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        if self.policy is None:
            raise InputError("an early-exercise product must be fitted before pricing")
        dates, levels, values, dfs = self._state(paths)
        x, extra, floor = self.regressors(levels, dates, paths.market)
        cash, when = apply_policy(self.policy, dates, x, values, dfs, extra, floor)
        diag: dict[str, np.ndarray] = {}
        t = np.array([paths.market.time(d) for d in dates])
        life = np.where(when >= 0, t[np.maximum(when, 0)], t[-1] if len(t) else 0.0)
        diag["expected life (years)"] = life
        early = when < len(dates) - 1
        diag["exercised before expiry"] = (early & (when >= 0)).astype(float)
        for k, d in enumerate(dates):
            diag[f"exercise {d.isoformat()}"] = (when == k).astype(float)
        return cash * self.size, diag

    def payoff(self, paths: PathSet) -> np.ndarray:
        return self.evaluate(paths)[0]

    def diagnostics(self, paths: PathSet) -> dict[str, np.ndarray]:
        return self.evaluate(paths)[1]

    def notes(self, market) -> tuple[str, ...]:
        out = []
        if self.policy is not None:
            out.append(f"early exercise by least squares (Longstaff-Schwartz): the policy fitted "
                       f"on {self.policy.pilot:,} pilot paths of their own stream, then frozen "
                       "and applied to independent pricing paths, so the price is a lower bound "
                       "for the holder (--dual gives the upper one); Greeks through the frozen "
                       "policy")
            if self.policy.worst_condition > ILL_CONDITIONED:
                out.append(f"a regression of the exercise policy is ill-conditioned (condition "
                           f"number {self.policy.worst_condition:.2g}): the policy may be poor "
                           "at some dates; a lower basis_degree may help")
        return tuple(out)


@dataclass(frozen=True, slots=True)
class American(EarlyExercise):
    """A call or put on one asset the holder may exercise on every weekday close up to expiry
    (American), or only on ``exercise_dates`` and at expiry (Bermudan).

    Examples
    --------
    >>> from datetime import date
    >>> American(asset="NORDA", right="put", strike=40.0, expiry=date(2027, 12, 1)).kind
    'american'
    """

    kind: ClassVar[str] = "american"

    asset: str = field(kw_only=True)
    right: str = field(kw_only=True)
    strike: float = field(kw_only=True)
    quantity: float = field(default=1.0, kw_only=True)

    def __post_init__(self):
        if self.right not in ("call", "put"):
            raise InputError(f"must be 'call' or 'put', got {self.right!r}", key="right")
        if not (np.isfinite(self.strike) and self.strike > 0):
            raise InputError(f"must be a positive number, got {self.strike}", key="strike")
        if not np.isfinite(self.quantity):
            raise InputError(f"must be a finite number, got {self.quantity}", key="quantity")
        self._check_exercise()

    @classmethod
    def from_table(cls, tab) -> dict:
        kw = dict(asset=tab.string("asset"), right=tab.string("right", choices=("call", "put")),
                  strike=tab.number("strike", positive=True, limit=MAX_AMOUNT),
                  expiry=tab.date("expiry"), quantity=single_asset_quantity(tab),
                  name=tab.string("name", None))
        kw.update(exercise_keys(tab))
        return kw

    def underlyings(self) -> tuple[str, ...]:
        return (self.asset,)

    @property
    def size(self) -> float:
        return self.quantity

    def exercise_values(self, levels: np.ndarray, market) -> np.ndarray:
        return intrinsic(self.right, self.strike, levels[:, 0, :])

    def normalise(self, levels: np.ndarray, market) -> np.ndarray:
        return levels / self.strike

    def regressors(self, levels: np.ndarray, dates, market):
        """The levels over the strike, and the European to expiry (see :meth:`features`) as
        the extra column and, times the strike, the floor: holding on is worth at least the
        European option (the holder may always wait), so the policy exercises only where the
        payoff beats it (never, for a call without dividends or a put at a negative rate)."""
        extra = self.features(levels, dates, market)
        return self.normalise(levels, market), extra, extra[:, 0, :] * self.strike

    def features(self, levels: np.ndarray, dates, market) -> np.ndarray:
        """The value of the same option exercisable at expiry only, from each date (Black's
        formula on the asset's term structure and forwards), over the strike, on the paths in
        the money (the only ones the policy decides on; 0 elsewhere): holding on is worth at
        least that, and where early exercise is worth nothing (a call without dividends) it is
        the continuation value itself."""
        from fairpath.closed_form import black_lognormal

        vol = market.asset(self.asset).vol
        big_t = market.time(self.expiry)
        fwd_t = float(market.forward(self.asset, big_t))
        w_t = float(vol.implied(big_t)) ** 2 * big_t
        out = np.zeros((levels.shape[0], 1, len(dates)))
        s = levels[:, 0, :]
        itm = s > self.strike if self.right == "call" else s < self.strike
        for k, d in enumerate(dates):
            t = market.time(d)
            if not t < big_t:
                continue
            idx = np.flatnonzero(itm[:, k])
            w = w_t - float(vol.implied(t)) ** 2 * t if t > 0 else w_t
            growth = fwd_t / float(market.forward(self.asset, t)) if t > 0 else \
                fwd_t / market.asset(self.asset).spot
            df = float(market.df(self.expiry)) / float(market.df(d))
            out[idx, 0, k] = np.asarray(black_lognormal(s[idx, k] * growth, self.strike,
                                                        max(w, 1e-12), df, self.right)) / \
                self.strike
        return out


@dataclass(frozen=True, slots=True)
class BermudanBasket(EarlyExercise):
    """A basket option (:class:`fairpath.products.basket.Basket`'s terms) whose holder may take
    the basket payoff on any of ``exercise_dates`` or at expiry: ``kind = "basket"`` with
    ``exercise_dates`` (e.g. a Bermudan max-call, ``combine = "best"``)."""

    #: a "basket" with exercise_dates (a variant: the registry keeps Basket for the kind)
    kind: ClassVar[str] = "basket"
    variant: ClassVar[bool] = True

    assets: tuple[str, ...] = field(kw_only=True)
    combine: str = field(kw_only=True)
    right: str = field(kw_only=True)
    strike_level: float = field(kw_only=True)
    weights: tuple[float, ...] | None = field(default=None, kw_only=True)
    notional: float = field(default=1.0, kw_only=True)
    initial_levels: tuple[tuple[str, float], ...] = field(default=(), kw_only=True)

    def __post_init__(self):
        if self.exercise_dates is None:
            raise InputError("a Bermudan basket needs its exercise_dates", key="exercise_dates")
        terms = self.terms()  # the basket's own checks, and its normalised terms
        for k in ("assets", "weights", "initial_levels"):
            object.__setattr__(self, k, getattr(terms, k))
        self._check_exercise()

    def terms(self):
        """The same basket exercised only at expiry (its terms checked)."""
        return Basket(assets=self.assets, combine=self.combine, right=self.right,
                      strike_level=self.strike_level, expiry=self.expiry, weights=self.weights,
                      notional=self.notional, initial_levels=self.initial_levels)

    @classmethod
    def from_table(cls, tab) -> dict:
        return {**Basket.from_table(tab), **exercise_keys(tab)}

    @property
    def size(self) -> float:
        return self.notional

    def label(self) -> str:
        return self.name or "basket (Bermudan)"

    def underlyings(self) -> tuple[str, ...]:
        return self.assets

    def check(self, market, source=None) -> None:
        EarlyExercise.check(self, market, source)
        market.correlation_matrix(self.assets, source=source, key="assets")

    def struck(self, market):
        import dataclasses

        if self.initial_levels:
            return self
        return dataclasses.replace(self, initial_levels=self.terms().struck(market)
                                   .initial_levels)

    def normalise(self, levels: np.ndarray, market) -> np.ndarray:
        return levels / self.terms().initial(market)[None, :, None]

    def exercise_values(self, levels: np.ndarray, market) -> np.ndarray:
        terms = self.terms()
        perf = self.normalise(levels, market)
        return np.stack([terms._option(terms.combined(perf[:, :, k]))
                         for k in range(perf.shape[2])], axis=1)


def exercise_keys(tab) -> dict:
    """The optional early-exercise keys of a product file: ``exercise_dates`` (a schedule),
    ``pilot_paths`` and ``basis_degree``."""
    out: dict = {}
    if tab.has("exercise_dates"):
        out["exercise_dates"] = schedule_dates(tab.raw("exercise_dates"), source=tab.source,
                                               key=tab.key("exercise_dates"))
    if tab.has("pilot_paths"):
        out["pilot"] = tab.integer("pilot_paths", minimum=256)
    if tab.has("basis_degree"):
        out["basis_degree"] = tab.integer("basis_degree", minimum=1)
    return out


VARIANTS[(Basket.kind, "exercise_dates")] = BermudanBasket

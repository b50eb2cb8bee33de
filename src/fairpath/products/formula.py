"""A payoff written as an expression of observed levels (see :mod:`fairpath.formula`).

``kind = "formula"``: ``assets``, observation ``dates`` (a schedule), ``expression``, the
``pay_date`` (on or after the last observation; discounting is from there), optional
``[constants]`` (numbers the expression may name), ``quantity`` (default 1) and, for a trade
already under way, ``past_levels = { NAME = [...] }``: the levels of every asset on the
observation dates before the valuation date, in order (an observation on the valuation date
takes today's spot).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import ClassVar

import numpy as np

from fairpath.dates import schedule_dates
from fairpath.errors import InputError
from fairpath.formula import CompiledFormula, compile_formula
from fairpath.market import Market
from fairpath.products.base import PathSet, Product, asset_list, read_asset_names


@dataclass(frozen=True, slots=True)
class Formula(Product):
    """A payoff given by an expression of the assets' levels on observation dates.

    Examples
    --------
    >>> from datetime import date
    >>> q = (date(2027, 3, 1), date(2027, 6, 1), date(2027, 9, 1), date(2027, 12, 1))
    >>> f = Formula(assets=("NORDA",), dates=q, pay_date=date(2027, 12, 1),
    ...             expression="max(mean(NORDA) / NORDA[0] - 1, 0) * 1000")
    >>> f.compiled.n_dates
    4
    """

    kind: ClassVar[str] = "formula"

    assets: tuple[str, ...] = field(kw_only=True)
    dates: tuple[date, ...] = field(kw_only=True)
    expression: str = field(kw_only=True)
    pay_date: date = field(kw_only=True)
    constants: tuple[tuple[str, float], ...] = field(default=(), kw_only=True)
    quantity: float = field(default=1.0, kw_only=True)
    past_levels: tuple[tuple[str, tuple[float, ...]], ...] = field(default=(), kw_only=True)
    compiled: CompiledFormula = field(init=False, compare=False, repr=False)

    def __post_init__(self):
        assets = asset_list(self.assets)
        object.__setattr__(self, "assets", assets)
        dates = tuple(self.dates)
        object.__setattr__(self, "dates", dates)
        if not dates:
            raise InputError("must hold at least one date", key="dates")
        if any(b <= a for a, b in zip(dates, dates[1:], strict=False)):
            raise InputError("dates must be strictly increasing", key="dates")
        if self.pay_date < dates[-1]:
            raise InputError(f"{self.pay_date} is before the last observation {dates[-1]}",
                             key="pay_date")
        if not math.isfinite(self.quantity):
            raise InputError(f"must be a finite number, got {self.quantity}", key="quantity")
        consts = self.constants
        if isinstance(consts, dict):
            consts = tuple(consts.items())
        consts = tuple((str(k), float(v)) for k, v in consts)
        for k, v in consts:
            if not math.isfinite(v):
                raise InputError(f"must be a finite number, got {v}", key=f"constants.{k}")
        object.__setattr__(self, "constants", consts)
        past = self.past_levels
        if isinstance(past, dict):
            past = tuple(past.items())
        past = tuple((str(k), tuple(float(x) for x in v)) for k, v in past)
        lengths = {len(v) for _, v in past}
        for k, v in past:
            if k not in assets:
                raise InputError(f"{k!r} is not one of the assets {list(assets)}",
                                 key=f"past_levels.{k}")
            if any(not (math.isfinite(x) and x > 0) for x in v):
                raise InputError("levels must be positive numbers", key=f"past_levels.{k}")
        if past and (len(lengths) != 1 or {k for k, _ in past} != set(assets)):
            raise InputError("give the same number of past levels for every asset",
                             key="past_levels")
        object.__setattr__(self, "past_levels", past)
        object.__setattr__(self, "compiled", compile_formula(self.expression, assets,
                                                             len(dates), dict(consts)))

    @classmethod
    def from_table(cls, tab) -> dict:
        consts = tab.table("constants", None)
        constants = ()
        if consts is not None:
            constants = tuple((k, consts.number(k)) for k in list(consts.data))
        past = tab.table("past_levels", None)
        past_levels = ()
        if past is not None:
            past_levels = tuple(
                (k, tuple(past.check_number(f"{k}[{i}]", x, positive=True)
                          for i, x in enumerate(past.list(k)))) for k in list(past.data))
        return dict(
            assets=read_asset_names(tab),
            dates=schedule_dates(tab.raw("dates"), source=tab.source, key="dates"),
            expression=tab.string("expression"),
            pay_date=tab.date("pay_date"),
            constants=constants,
            quantity=tab.number("quantity", 1.0),
            past_levels=past_levels,
            name=tab.string("name", None),
        )

    # -- engine hooks ----------------------------------------------------------------------
    @property
    def payoff_jumps(self) -> bool:  # type: ignore[override]
        return self.compiled.jumps

    def underlyings(self) -> tuple[str, ...]:
        return self.assets

    def date_key(self) -> str:
        return "dates"

    def _n_past(self) -> int:
        return len(self.past_levels[0][1]) if self.past_levels else 0

    def observation_dates(self) -> tuple[date, ...]:
        return self.dates[self._n_past():]

    def check(self, market: Market, source: str | None = None) -> None:
        for a in self.assets:
            market.asset(a, source=source, key="assets")
        if len(self.assets) > 1:
            market.correlation_matrix(self.assets, source=source, key="assets")
        val = market.valuation_date
        before = sum(d < val for d in self.dates)
        through = sum(d <= val for d in self.dates)
        if not before <= self._n_past() <= through:
            want = str(before) if before == through else f"{before} or {through}"
            raise InputError(f"{before} observation date(s) fall before the valuation date "
                             f"{val}, so {want} past level(s) per asset are needed in "
                             f"past_levels; got {self._n_past()}", source=source,
                             key="past_levels")
        if self.pay_date < val:
            raise InputError(f"{self.pay_date} is before the valuation date {val}",
                             source=source, key="pay_date")

    def payoff(self, paths: PathSet) -> np.ndarray:
        n_past = self._n_past()
        levels = paths.levels
        if n_past:
            past = np.array([dict(self.past_levels)[a] for a in self.assets])
            levels = np.concatenate([np.broadcast_to(past[None], (paths.n, *past.shape)),
                                     levels], axis=2)
        with np.errstate(all="ignore"):
            amount = self.compiled(levels)
        bad = ~np.isfinite(amount)
        if bad.any():
            raise InputError(f"gives a value that is not a finite number on "
                             f"{int(bad.sum())} of {paths.n} paths (a log or square root of "
                             "a negative number, a division by zero?)", source=self.source,
                             key="expression")
        return amount * (paths.df(self.pay_date) * self.quantity)

    def __reduce__(self):
        # the compiled function is rebuilt where the product is unpickled (e.g. on a worker)
        return (_rebuild, (self.assets, self.dates, self.expression, self.pay_date,
                           self.constants, self.quantity, self.past_levels, self.name,
                           self.source))

    def notes(self, market: Market) -> tuple[str, ...]:
        n = self._n_past()
        return (f"{n} of {len(self.dates)} observations already fixed",) if n else ()


def _rebuild(assets, dates, expression, pay_date, constants, quantity, past_levels, name,
             source) -> Formula:
    return Formula(assets=assets, dates=dates, expression=expression, pay_date=pay_date,
                   constants=constants, quantity=quantity, past_levels=past_levels, name=name,
                   source=source)

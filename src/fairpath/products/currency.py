"""How a payoff on an asset quoted in another currency is paid (``settlement``).

An asset quoted in another currency (``currency = "USD"`` in the market) is simulated under the
reporting currency's measure: it drifts at its own curve's rate less its dividends less the
quanto term ``rho(asset, fx) sigma_asset sigma_fx`` (the model layer: :mod:`fairpath.market`,
:mod:`fairpath.models`). What its payoff is worth then depends on how it is paid:

* ``settlement = "quanto"``: the payoff's amount, computed in the asset's currency, is paid as the
  same number of reporting-currency units times ``quanto_rate`` (default 1): the amount scaled;
* ``settlement = "converted"``: paid in the asset's currency and converted at the exchange rate
  on the payment date: the payoff times the simulated exchange rate then
  (:class:`Converted`; worth today's rate times the payoff's price in its own currency,
  whatever the exchange rate's vol and correlation).

Single-asset products and formula payoffs on such an asset must say which; an autocallable or
a basket works on performances, which have no currency, and is quanto by construction (its
notional is in the reporting currency). :func:`settle` checks this against the market and
returns the products to simulate.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from datetime import date

from fairpath.errors import InputError
from fairpath.market import Market
from fairpath.products.base import PathSet, Product

SETTLEMENTS = ("quanto", "converted")
#: kinds that work on performances (quanto by construction)
PERFORMANCE_KINDS = ("autocallable", "basket")


def settle(products: list[Product], market: Market, source: str | None = None
           ) -> list[Product]:
    """The products as they are simulated on ``market``: a quanto payoff scaled by its rate,
    a converted one wrapped (:class:`Converted`); refused with one line where the settlement
    is missing, not needed or cannot apply."""
    out = []
    for p in products:
        if isinstance(p, Converted):
            out.append(p)
            continue
        src = source or p.source
        codes = sorted({c for c in (market.foreign(n) for n in p.underlyings()) if c})
        if p.kind in PERFORMANCE_KINDS:
            if p.settlement is not None:
                raise InputError(f"an {p.kind} works on performances, which have no currency: "
                                 "it is quanto by construction (its notional is in "
                                 f"{market.currency}); remove settlement", source=src,
                                 key="settlement")
            out.append(p)
            continue
        if not codes:
            if p.settlement is not None:
                raise InputError(f"settlement applies to a payoff on an asset quoted in another "
                                 f"currency, and {', '.join(p.underlyings())} "
                                 f"{'is' if len(p.underlyings()) == 1 else 'are'} quoted in "
                                 f"{market.currency}", source=src, key="settlement")
            out.append(p)
            continue
        names = ", ".join(n for n in p.underlyings() if market.foreign(n))
        if p.settlement is None:
            raise InputError(f"{names} is quoted in {codes[0]}: say how the payoff is paid in "
                             f"{market.currency}, settlement = \"quanto\" (the amount paid as "
                             f"{market.currency} units, times quanto_rate) or \"converted\" "
                             f"(paid in {codes[0]} and converted at the exchange rate)",
                             source=src, key="settlement")
        if p.settlement == "quanto":
            out.append(_scaled(p, p.quanto_rate))
            continue
        if len(codes) > 1:
            raise InputError(f"a converted payoff is paid in one currency, and these assets are "
                             f"quoted in {', '.join(codes)}", source=src, key="settlement")
        if p.pilot_paths() or getattr(p, "policy", None) is not None:
            raise InputError("a converted early-exercise payoff would be converted on the "
                             "exercise date: not supported; use settlement = \"quanto\"",
                             source=src, key="settlement")
        if getattr(p, "rebate", 0.0):
            raise InputError("a rebate paid when the barrier is hit would be converted on "
                             "that date: not supported with settlement = \"converted\"",
                             source=src, key="settlement")
        out.append(Converted(inner=p, code=codes[0], name=p.name, issuer=p.issuer,
                             funding=p.funding, source=p.source))
    return out


def _scaled(p: Product, rate: float) -> Product:
    """The product with its amounts times ``rate`` (a quanto payment in reporting units)."""
    if rate == 1.0:
        return p
    for key in ("quantity", "notional"):
        if hasattr(p, key):
            return dataclasses.replace(p, **{key: getattr(p, key) * rate})
    raise InputError(f"quanto_rate on a {p.kind} has no amount to scale", source=p.source,
                     key="quanto_rate")


def pay_date(p: Product) -> date:
    """The date a single-payment product pays (its ``pay_date``, else its expiry)."""
    return getattr(p, "pay_date", None) or p.expiry


@dataclass(frozen=True, slots=True)
class Converted(Product):
    """``inner``'s payoff, in the currency ``code``, converted at the exchange rate of its
    payment date: the simulation carries the exchange rate beside the inner product's assets."""

    inner: Product = field(kw_only=True)
    code: str = field(kw_only=True)

    @property
    def payoff_jumps(self) -> bool:
        return self.inner.payoff_jumps

    def underlyings(self) -> tuple[str, ...]:
        return (*self.inner.underlyings(), self.code)

    def observation_dates(self) -> tuple[date, ...]:
        return tuple(sorted({*self.inner.observation_dates(), pay_date(self.inner)}))

    def daily_until(self) -> date | None:
        return self.inner.daily_until()

    def check(self, market: Market, source: str | None = None) -> None:
        self.inner.check(market, source)

    def date_key(self) -> str:
        return self.inner.date_key()

    def score_safe(self) -> bool:
        return self.inner.score_safe()

    def struck(self, market: Market) -> Converted:
        return dataclasses.replace(self, inner=self.inner.struck(market))

    def notes(self, market: Market) -> tuple[str, ...]:
        return (*self.inner.notes(market),
                f"converted: paid in {self.code} and converted into {market.currency} at the "
                f"exchange rate on {pay_date(self.inner)}")

    def warnings(self) -> tuple[str, ...]:
        return self.inner.warnings()

    def model_notes(self, capabilities) -> tuple[str, ...]:
        return self.inner.model_notes(capabilities)

    def controls(self, market: Market):
        return self.inner.controls(market)

    def label(self) -> str:
        return self.inner.label()

    def _own(self, ps: PathSet) -> PathSet:
        """The path set as the inner product sees it (its assets and dates)."""
        idx = [ps.names.index(n) for n in self.inner.underlyings()]
        dates = self.inner.observation_dates()
        didx = [ps.dates.index(d) for d in dates]
        return dataclasses.replace(ps, names=self.inner.underlyings(), dates=tuple(dates),
                                   levels=ps.levels[:, idx][:, :, didx], spots=ps.spots[idx],
                                   grid_log_levels=ps.grid_log_levels[:, idx],
                                   variance=ps.variance[idx])

    def _rate(self, ps: PathSet):
        return ps.level(self.code, pay_date(self.inner))

    def payoff(self, paths: PathSet):
        return self.inner.payoff(self._own(paths)) * self._rate(paths)

    def evaluate(self, paths: PathSet):
        pay, diag = self.inner.evaluate(self._own(paths))
        return pay * self._rate(paths), diag

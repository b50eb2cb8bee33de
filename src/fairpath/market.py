"""Market inputs: valuation date, discount curve, assets, correlation. Frozen and validated.

A market is built from a TOML file by :func:`load_market` (format in docs/models.md) or in code::

    >>> from datetime import date
    >>> m = Market(valuation_date=date(2026, 12, 1), currency="EUR",
    ...            discount=DiscountCurve.flat(0.03),
    ...            assets=(Asset("NORDA", spot=100.0, vol=VolCurve.flat(0.25),
    ...                          dividend_yield=0.02),))
    >>> round(m.forward("NORDA", 1.0), 4)
    101.005
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

import numpy as np

from fairpath.dates import DAY_COUNTS, parse_tenor, year_fraction
from fairpath.errors import InputError
from fairpath.inputs import MAX_AMOUNT, Table, did_you_mean, read_toml, show
from fairpath.laws import NORMAL, Law, parse_law
from fairpath.registry import known_models
from fairpath.stochvol import HestonParams, parse_heston
from fairpath.surface import VolSurface, parse_surface

#: Tolerance on the smallest eigenvalue of a correlation matrix (rounding in hand-typed files).
PSD_TOLERANCE = 1e-10
#: Largest absolute rate or dividend yield a market file may give (100%, continuously
#: compounded): a larger one is a percentage typed as a number.
MAX_RATE = 1.0
#: Largest funding spread (either sign) an issuer may have: 20% a year; more is basis points
#: or a percentage typed as a number.
MAX_SPREAD = 0.2
#: Where an asset given by its Heston parameters alone gets its Black term structure (the root
#: of the mean expected variance; Brownian-bridge corrections and tail checks read it)
HESTON_VOL_TIMES = (0.25, 0.5, 1.0, 2.0, 3.0, 5.0, 10.0, 30.0)


# ---------------------------------------------------------------------------------------------
# Discount curve
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class DiscountCurve:
    """Continuously compounded zero curve.

    Flat (one pillar) or pillars ``times`` / ``zero_rates``: linear in ``t * r(t)`` between
    pillars (piecewise-flat instantaneous forward rates), the zero rate flat outside.
    """

    times: tuple[float, ...]
    zero_rates: tuple[float, ...]

    def __post_init__(self):
        if not all(math.isfinite(r) for r in self.zero_rates) or \
                not all(math.isfinite(t) and t > 0 for t in self.times):
            raise InputError(f"rates must be finite numbers and pillars positive, got "
                             f"{self.zero_rates} at {self.times}", key="discount")

    @classmethod
    def flat(cls, rate: float) -> DiscountCurve:
        return cls((1.0,), (float(rate),))

    @property
    def is_flat(self) -> bool:
        return len(self.zero_rates) == 1

    def zero(self, t):
        """Zero rate r(t) at times ``t`` (years)."""
        t = np.asarray(t, dtype=float)
        if self.is_flat:
            return np.full_like(t, self.zero_rates[0])
        ts = np.asarray(self.times)
        rs = np.asarray(self.zero_rates)
        rt = np.interp(t, ts, ts * rs)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            inner = np.where(t > 0, rt / np.where(t > 0, t, 1.0), rs[0])
        return np.where(t <= ts[0], rs[0], np.where(t >= ts[-1], rs[-1], inner))

    def df(self, t):
        """Discount factor exp(-r(t) t)."""
        t = np.asarray(t, dtype=float)
        return np.exp(-self.zero(t) * t)

    def shifted(self, dr: float) -> DiscountCurve:
        """Parallel shift of every zero rate (used for rho)."""
        return DiscountCurve(self.times, tuple(r + dr for r in self.zero_rates))


# ---------------------------------------------------------------------------------------------
# Volatility term structure
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class VolCurve:
    """Black volatility by expiry, piecewise-flat forward variance between pillars.

    Total variance ``w(t_i) = vol_i**2 * t_i`` at the pillars; the forward variance is constant
    between pillars, equal to ``vol_0**2`` before the first and to the last piece's after the
    last pillar.
    """

    times: tuple[float, ...]
    vols: tuple[float, ...]
    #: the tenors as the market file writes them ("6M"), for vega buckets and messages
    names: tuple[str, ...] = field(default=(), compare=False)

    @classmethod
    def flat(cls, vol: float) -> VolCurve:
        return cls((1.0,), (float(vol),))

    @property
    def is_flat(self) -> bool:
        return len(self.vols) == 1

    def pieces(self) -> tuple[np.ndarray, np.ndarray]:
        """Breakpoints (starting at 0, last one +inf) and the forward vol on each piece."""
        ts = np.asarray(self.times, dtype=float)
        vs = np.asarray(self.vols, dtype=float)
        if self.is_flat:
            return np.array([0.0, np.inf]), vs.copy()
        w = vs**2 * ts
        fwd_var = np.empty(len(ts) + 1)
        fwd_var[0] = vs[0] ** 2
        fwd_var[1:-1] = np.diff(w) / np.diff(ts)
        fwd_var[-1] = fwd_var[-2]
        edges = np.concatenate([[0.0], ts, [np.inf]])
        # pieces: [0, t0), [t0, t1), ..., [t_{n-1}, inf); the first two share vol_0
        fwd = np.concatenate([[fwd_var[0]], fwd_var[1:-1], [fwd_var[-1]]])
        return edges, np.sqrt(np.maximum(fwd, 0.0))

    def variance(self, t0, t1):
        """Integrated variance between ``t0`` and ``t1`` (vectorised)."""
        return integrate_vol_product(self, self, t0, t1)

    def implied(self, t):
        """Black vol to expiry ``t`` (root mean forward variance)."""
        t = np.asarray(t, dtype=float)
        if self.is_flat:
            return np.full_like(t, self.vols[0])
        with np.errstate(divide="ignore", invalid="ignore"):
            v = np.sqrt(self.variance(0.0, t) / t)
        return np.where(t > 0, v, self.vols[0])

    def shifted(self, dv: float) -> VolCurve:
        """Every pillar vol moved by ``dv`` (used for vega and vol bands)."""
        return VolCurve(self.times, tuple(v + dv for v in self.vols), self.names)


def integrate_vol_product(a: VolCurve, b: VolCurve, t0, t1):
    """Integral of sigma_a(t) * sigma_b(t) dt between ``t0`` and ``t1`` (vectorised over times).

    Exact for piecewise-flat forward vols: the covariance of two log-returns over a step is this
    integral times their correlation.
    """
    t0 = np.asarray(t0, dtype=float)
    t1 = np.asarray(t1, dtype=float)
    if a.is_flat and b.is_flat:
        return a.vols[0] * b.vols[0] * (t1 - t0)
    ea, va = a.pieces()
    eb, vb = b.pieces()
    edges = np.union1d(ea, eb)
    left = edges[:-1]
    right = edges[1:]
    mid = np.where(np.isfinite(right), 0.5 * (left + right), left + 1.0)
    sa = va[np.searchsorted(ea, mid, side="right") - 1]
    sb = vb[np.searchsorted(eb, mid, side="right") - 1]
    prod = sa * sb
    lo = np.clip(t0[..., None], left, right)
    hi = np.clip(t1[..., None], left, right)
    return np.sum(prod * (hi - lo), axis=-1)


# ---------------------------------------------------------------------------------------------
# Assets, correlation, market
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Asset:
    """One underlying: spot, Black vol term structure, continuous dividend yield, and the law
    of its one-step log-return shocks (normal by default; see :mod:`fairpath.laws`)."""

    name: str
    spot: float
    vol: VolCurve
    dividend_yield: float = 0.0
    law: Law = NORMAL
    #: an implied-volatility surface (local volatility): ``vol`` is then its at-the-money term
    #: structure (see :mod:`fairpath.surface`)
    surface: VolSurface | None = None
    #: discrete cash dividends ``(ex_date, amount)``, escrowed (see :class:`Market`)
    dividends: tuple[tuple[date, float], ...] = ()
    #: the model of its dynamics named by the file or a what-if (:mod:`fairpath.models`);
    #: None: the default (local vol with a surface, Black otherwise)
    model: str | None = None
    #: the variance process of the heston and lsv models (:mod:`fairpath.stochvol`), None
    #: when the file gives none (or asks for it to be fitted: ``heston_calibrate``)
    heston: HestonParams | None = None
    #: ``calibrate = true`` in the heston block: fitted to the surface when the market loads
    heston_calibrate: bool = False
    #: lsv: the share of the vol of vol kept (None: not given)
    mixing: float | None = None
    #: the currency the asset is quoted in (None: the market's reporting currency)
    currency: str | None = None

    def __post_init__(self):
        divs = tuple(sorted((d, float(x)) for d, x in self.dividends))
        object.__setattr__(self, "dividends", divs)
        for d, x in divs:
            if not (math.isfinite(x) and x > 0):
                raise InputError(f"a dividend amount must be positive, got {x} on {d}",
                                 key=f"assets.{self.name}.dividends")
        if not (np.isfinite(self.spot) and self.spot > 0):
            raise InputError(f"spot must be positive, got {self.spot}",
                             key=f"assets.{self.name}.spot")
        if any(not (np.isfinite(v) and v >= 0) for v in self.vol.vols):
            raise InputError(f"vol must not be negative, got {self.vol.vols}",
                             key=f"assets.{self.name}.vol")
        if not np.isfinite(self.dividend_yield):
            raise InputError(f"dividend_yield must be a finite number, got {self.dividend_yield}",
                             key=f"assets.{self.name}.dividend_yield")


@dataclass(frozen=True, slots=True)
class FxRate:
    """An exchange rate: the value of one unit of ``code`` in the reporting currency, and its
    Black vol. It is an underlying in its own right under its code (Garman and Kohlhagen:
    it drifts at the reporting currency's rate less ``code``'s)."""

    code: str
    spot: float
    vol: VolCurve


@dataclass(frozen=True, slots=True)
class Correlation:
    """Correlation block: asset names and a symmetric positive semi-definite matrix."""

    assets: tuple[str, ...]
    matrix: tuple[tuple[float, ...], ...]

    def array(self) -> np.ndarray:
        return np.array(self.matrix, dtype=float)


@dataclass(frozen=True, slots=True)
class Market:
    """Everything the model needs, as of the valuation date."""

    valuation_date: date
    currency: str
    discount: DiscountCurve
    assets: tuple[Asset, ...]
    day_count: str = "ACT/365F"
    correlation: Correlation | None = None
    source: str | None = field(default=None, compare=False)
    #: issuers' funding spreads over the discount curve, ``(name, zero-spread curve)``
    issuers: tuple[tuple[str, DiscountCurve], ...] = ()
    #: other currencies' zero curves ``(code, curve)`` and exchange rates
    curves: tuple[tuple[str, DiscountCurve], ...] = ()
    fx: tuple[FxRate, ...] = ()

    def __post_init__(self):
        if self.day_count not in DAY_COUNTS:
            raise InputError(f"unknown day count {self.day_count!r}; known: "
                             f"{', '.join(DAY_COUNTS)}", source=self.source, key="day_count")

    # -- lookups -------------------------------------------------------------------------
    @property
    def asset_names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.assets)

    def asset(self, name: str, *, source: str | None = None, key: str | None = None) -> Asset:
        """The asset ``name``, or the exchange rate of currency ``name`` as an asset (its
        spot and vol; its forward carries the two currencies' rates: :meth:`carry_df`)."""
        for a in self.assets:
            if a.name == name:
                return a
        for x in self.fx:
            if x.code == name:
                return Asset(x.code, x.spot, x.vol)
        raise InputError(f"unknown asset {name!r}{did_you_mean(name, self.asset_names)}; the "
                         f"market has {', '.join(self.asset_names) or 'no assets'}",
                         source=source, key=key)

    def time(self, d):
        """Year fraction from the valuation date (scalar date or a sequence of dates)."""
        if isinstance(d, date):
            return year_fraction(self.valuation_date, d, self.day_count)
        return np.array([year_fraction(self.valuation_date, x, self.day_count) for x in d])

    def df(self, d) -> float | np.ndarray:
        """Discount factor to a date (or dates)."""
        return self.discount.df(self.time(d))

    # -- currencies ----------------------------------------------------------------------
    def is_fx(self, name: str) -> bool:
        """Is ``name`` an exchange rate (a currency code with an ``[fx.CODE]`` block)?"""
        return any(x.code == name for x in self.fx)

    def curve(self, code: str | None) -> DiscountCurve:
        """The zero curve of currency ``code`` (None or the reporting currency: the discount
        curve)."""
        if code is None or code == self.currency:
            return self.discount
        for c, curve in self.curves:
            if c == code:
                return curve
        raise InputError(f"no zero curve for {code}: give [curves.{code}]", source=self.source,
                         key=f"curves.{code}")

    def foreign(self, name: str) -> str | None:
        """The currency an asset is quoted in when it is not the reporting one, else None (an
        exchange rate is worth reporting-currency units: None)."""
        a = next((a for a in self.assets if a.name == name), None)
        if a is None:  # an exchange rate, or a name the product's check refuses
            return None
        c = a.currency
        return None if c is None or c == self.currency else c

    def rates_in_play(self, names) -> tuple[str, ...]:
        """The exchange rates the named underlyings depend on, by code: those among them (an
        option on a rate, a converted payoff) and those of the foreign assets' quanto drifts."""
        return tuple(sorted({c for c in (self.foreign(n) for n in names) if c}
                            | {n for n in names if self.is_fx(n)}))

    def carry_df(self, name: str, t):
        """The discount factor whose inverse the asset's level grows at, before its dividend
        yield: its own currency's curve; for an exchange rate the reporting curve over the
        foreign one (``F = X0 DF_for / DF_dom``, Garman and Kohlhagen)."""
        if self.is_fx(name):
            return self.discount.df(t) / self.curve(name).df(t)
        c = self.foreign(name)
        return self.discount.df(t) if c is None else self.curve(c).df(t)

    def quanto_correlation(self, name: str) -> float:
        """The correlation of a foreign asset with its currency's exchange rate (the
        ``[correlation]`` block must name both)."""
        c = self.foreign(name)
        if self.correlation is None or name not in self.correlation.assets \
                or c not in self.correlation.assets:
            raise InputError(f"{name} is quoted in {c}: its drift in {self.currency} needs its "
                             f"correlation with the exchange rate {c}; name both in "
                             "[correlation]", source=self.source, key="correlation")
        m = self.correlation
        return float(m.matrix[m.assets.index(name)][m.assets.index(c)])

    def quanto_factor(self, name: str, t):
        """``exp(-rho int_0^t sigma_S sigma_X)``: a foreign asset's forward under the reporting
        currency's measure over its own (the quanto drift, with the asset's Black vols); 1
        for a domestic asset or an exchange rate."""
        c = self.foreign(name)
        if c is None:
            return 1.0
        fx = next(x for x in self.fx if x.code == c)
        rho = self.quanto_correlation(name)
        return np.exp(-rho * integrate_vol_product(self.asset(name).vol, fx.vol, 0.0, t))

    def issuer_spread(self, name: str, *, source: str | None = None,
                      key: str | None = "issuer") -> DiscountCurve:
        """An issuer's funding spread over the discount curve, as a zero curve of spreads
        (``exp(-s(t) t)`` multiplies the discount factor of a cash flow the issuer pays)."""
        for n, curve in self.issuers:
            if n == name:
                return curve
        known = [n for n, _ in self.issuers]
        raise InputError(f"unknown issuer {name!r}{did_you_mean(name, known)}; the market's "
                         f"[issuers] {'has ' + ', '.join(known) if known else 'block is missing'}",
                         source=source or self.source, key=key)

    def with_issuer_spread(self, name: str, curve: DiscountCurve) -> Market:
        """The market with issuer ``name``'s spread curve replaced (or added)."""
        rest = tuple((n, c) for n, c in self.issuers if n != name)
        return dataclasses.replace(self, issuers=(*rest, (name, curve)))

    def forward(self, name: str, t) -> float | np.ndarray:
        """Forward level of an asset at time ``t`` (years): the escrowed level's forward plus
        the value at ``t`` of the cash dividends still to come (see :meth:`escrow`)."""
        f = np.asarray(self.x_forward(name, t)) + np.asarray(self.escrow(name, t))
        return float(f) if f.ndim == 0 else f

    def dividend_times(self, name: str) -> list[tuple[float, float]]:
        """``(t, amount)`` of the asset's cash dividends with an ex-date after the valuation
        date (earlier ones are past and ignored)."""
        a = self.asset(name)
        return [(self.time(d), x) for d, x in a.dividends if d > self.valuation_date]

    def escrow(self, name: str, t) -> float | np.ndarray:
        """``D(t) = sum over ex-dates t_i > t of amount_i DF(t_i) / DF(t) e^{q (t_i - t)}``:
        the cash dividends still to come, discounted at the rate less the asset's dividend
        yield ``q``. Escrowed-dividend model: the level is ``S(t) = X(t) + D(t)`` with ``X`` the
        diffusing (escrowed) part; both parts grow at ``r - q`` between ex-dates, so the
        forward is ``S(0) e^{(r-q)T} - sum amount_i e^{(r-q)(T - t_i)}`` (a level that grows at
        ``r - q`` and drops by exactly the amount on each ex-date; the convention of QuantLib's
        analytic dividend European engine), and the level never goes below ``D(t)``."""
        t = np.asarray(t, dtype=float)
        out = np.zeros_like(t)
        divs = self.dividend_times(name)
        if divs:
            q = self.asset(name).dividend_yield
            df_t = self.carry_df(name, t)
            for ti, x in divs:
                out = out + np.where(ti > t, x * float(self.carry_df(name, ti)) / df_t
                                     * np.exp(q * (ti - t)), 0.0)
        return float(out) if out.ndim == 0 else out

    def escrowed_spot(self, name: str) -> float:
        """``X(0) = S(0) - D(0)``: the spot less the present value of the dividends to come."""
        return self.asset(name).spot - float(self.escrow(name, 0.0))

    def x_forward(self, name: str, t, *, quanto: bool = True) -> float | np.ndarray:
        """Forward of the escrowed level ``X`` (the whole level without cash dividends), under
        the reporting currency's measure: a foreign asset's includes the quanto drift
        (:meth:`quanto_factor`) unless ``quanto`` is False (its own currency's forward)."""
        a = self.asset(name)
        t = np.asarray(t, dtype=float)
        f = self.escrowed_spot(name) * np.exp(-a.dividend_yield * t) / self.carry_df(name, t)
        if quanto and self.foreign(name) is not None:
            f = f * self.quanto_factor(name, t)
        return float(f) if f.ndim == 0 else f

    def local_vol(self, names) -> tuple[str, ...]:
        """The named assets that have an implied-volatility surface."""
        return tuple(n for n in names if self.asset(n).surface is not None)

    def with_flat_vol(self, names=None) -> Market:
        """The market with each surface replaced by its at-the-money term structure (and the
        model of those assets the default for what is left: Black)."""
        names = self.asset_names if names is None else tuple(names)
        return dataclasses.replace(self, assets=tuple(
            dataclasses.replace(a, surface=None,
                                model=None if a.model == "local-vol" else a.model)
            if a.name in names else a for a in self.assets))

    def with_model(self, kind: str, names=None, *, key: str = "--model") -> Market:
        """The market with every asset's (or the named assets') model replaced (a what-if)."""
        check_model_kind(kind, key=key)
        names = self.asset_names if names is None else tuple(names)
        for n in names:
            self.asset(n)
        return dataclasses.replace(self, assets=tuple(
            dataclasses.replace(a, model=kind) if a.name in names else a for a in self.assets))

    def dividend_horizon(self, names, last: date) -> tuple[Market, list[str]]:
        """The market with the named assets' cash dividends outside ``(valuation, last]``
        dropped (past, or after the last date a product needs), and notes saying so."""
        notes, assets = [], []
        for a in self.assets:
            if a.name not in names or not a.dividends:
                assets.append(a)
                continue
            keep = []
            for d, x in a.dividends:
                if d <= self.valuation_date:
                    notes.append(f"{a.name}'s dividend of {x:g} on {d} is on or before the "
                                 f"valuation date: ignored")
                elif d > last:
                    notes.append(f"{a.name}'s dividend of {x:g} on {d} is after the last date "
                                 f"the product needs ({last}): ignored")
                else:
                    keep.append((d, x))
            assets.append(dataclasses.replace(a, dividends=tuple(keep)))
        if not notes:
            return self, []
        return dataclasses.replace(self, assets=tuple(assets)), notes

    def correlation_matrix(self, names, *, source: str | None = None,
                           key: str | None = None) -> np.ndarray:
        """Correlation of the named assets (identity for one asset)."""
        names = tuple(names)
        if len(names) == 1:
            return np.ones((1, 1))
        if len(set(names)) != len(names):
            raise InputError(f"an asset appears twice in {list(names)}", source=source, key=key)
        if self.correlation is None:
            where = f" ({self.source})" if self.source else ""
            raise InputError(f"assets {', '.join(names)} need a [correlation] block in the "
                             f"market{where}", source=source, key=key)
        idx = []
        for n in names:
            if n not in self.correlation.assets:
                where = f" in {self.source}" if self.source else ""
                raise InputError(f"asset {n!r} is missing from the market's correlation block"
                                 f"{where} ({', '.join(self.correlation.assets)})",
                                 source=source, key=key)
            idx.append(self.correlation.assets.index(n))
        return self.correlation.array()[np.ix_(idx, idx)]

    # -- bumps (value semantics: a new market each time) -------------------------------
    def with_asset(self, asset: Asset) -> Market:
        """The market with ``asset`` replaced (an exchange rate's code: its spot and vol)."""
        if self.is_fx(asset.name):
            return dataclasses.replace(self, fx=tuple(
                FxRate(x.code, asset.spot, asset.vol) if x.code == asset.name else x
                for x in self.fx))
        return dataclasses.replace(
            self, assets=tuple(asset if a.name == asset.name else a for a in self.assets))

    def with_curve(self, code: str, curve: DiscountCurve) -> Market:
        """The market with currency ``code``'s zero curve replaced (not the reporting one)."""
        return dataclasses.replace(self, curves=tuple(
            (c, curve if c == code else k) for c, k in self.curves))

    def with_law(self, law: Law, names=None) -> Market:
        """The market with every asset's (or the named assets') shock law replaced."""
        names = self.asset_names if names is None else tuple(names)
        for n in names:
            self.asset(n)
        return dataclasses.replace(self, assets=tuple(
            dataclasses.replace(a, law=law) if a.name in names else a for a in self.assets))


# ---------------------------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------------------------
def load_market(path: str | Path) -> Market:
    """Read and validate a market file.

    Raises
    ------
    InputError
        With one line naming the file, the key and the problem.
    """
    src = str(path)
    top = Table(read_toml(path), src)
    valuation = top.date("valuation_date")
    currency = top.string("currency")
    if not currency.strip():
        raise top.error("currency", "must not be empty")
    day_count = top.string("day_count", "ACT/365F", choices=DAY_COUNTS)

    def tenor_times(tab: Table, key: str) -> list[float]:
        tenors = tab.list(key)
        out = []
        for i, t in enumerate(tenors):
            ten = parse_tenor(t, source=src, key=tab.key(f"{key}[{i}]"))
            try:
                out.append(year_fraction(valuation, ten.add_to(valuation), day_count))
            except InputError as exc:
                raise tab.error(f"{key}[{i}]", exc.problem) from None
        if any(b <= a for a, b in zip(out, out[1:], strict=False)):
            raise tab.error(key, "tenors must be strictly increasing")
        return out

    def zero_curve(tab: Table, flat: str, many: str, check) -> DiscountCurve:
        """``flat`` (one number) or ``tenors`` + ``many`` (one per tenor), each read by
        ``check(tab, key, value)``."""
        if tab.has(flat):
            if tab.has("tenors") or tab.has(many):
                raise tab.error(flat, f"give either '{flat}' or 'tenors' + '{many}', not both")
            out = DiscountCurve.flat(check(tab, flat, tab.raw(flat)))
        else:
            if not tab.has("tenors"):
                raise tab.error(flat, f"missing: give '{flat}' or 'tenors' + '{many}'")
            times = tenor_times(tab, "tenors")
            values = tab.list(many)
            if len(values) != len(times):
                raise tab.error(many, f"has {len(values)} values for {len(times)} tenors")
            values = [check(tab, f"{many}[{i}]", r) for i, r in enumerate(values)]
            out = DiscountCurve(tuple(times), tuple(values))
        tab.finish()
        return out

    curve = zero_curve(top.table("discount"), "rate", "zero_rates", _rate)
    issuers = []
    itab = top.table("issuers", None)
    if itab is not None:
        for name in list(itab.data):
            if not name.strip() or not name.isprintable() or name != name.strip():
                raise itab.error(None, f"issuer name {show(name)} must be printable, not "
                                 "blank, without leading or trailing spaces")
            issuers.append((name, zero_curve(itab.table(name), "spread", "spreads", _spread)))
    curves, fxs = [], []
    ctab_all = top.table("curves", None)
    for code in list(ctab_all.data) if ctab_all is not None else []:
        if code == currency:
            raise ctab_all.error(code, f"{code} is the reporting currency: its curve is "
                                 "[discount]")
        curves.append((code, zero_curve(ctab_all.table(code), "rate", "zero_rates", _rate)))
    ftab_all = top.table("fx", None)
    for code in list(ftab_all.data) if ftab_all is not None else []:
        f = ftab_all.table(code)
        if code == currency:
            raise ftab_all.error(code, f"{code} is the reporting currency: its exchange rate "
                                 "is 1")
        if code not in dict(curves):
            raise ftab_all.error(code, f"an exchange rate needs its currency's zero curve: "
                                 f"give [curves.{code}]")
        spot = f.number("spot", positive=True, limit=MAX_AMOUNT)
        if f.has("vol"):
            if f.has("vol_tenors") or f.has("vols"):
                raise f.error("vol", "give either 'vol' or 'vol_tenors' + 'vols', not both")
            fvol = VolCurve.flat(f.check_vol("vol", f.raw("vol")))
        else:
            if not f.has("vol_tenors"):
                raise f.error("vol", "missing required key (or 'vol_tenors' + 'vols')")
            times = tenor_times(f, "vol_tenors")
            vols = f.list("vols")
            if len(vols) != len(times):
                raise f.error("vols", f"has {len(vols)} values for {len(times)} tenors")
            fvol = VolCurve(tuple(times), tuple(f.check_vol(f"vols[{i}]", v)
                                                for i, v in enumerate(vols)),
                            tuple(str(x) for x in f.list("vol_tenors")))
        f.finish()
        fxs.append(FxRate(code, spot, fvol))
    for code, _ in curves:
        if not any(x.code == code for x in fxs):
            raise ctab_all.error(code, f"a curve for {code} but no exchange rate: give "
                                 f"[fx.{code}] (the value of 1 {code} in {currency})")

    assets_tab = top.table("assets")
    if not assets_tab.data:
        raise assets_tab.error(None, "the market has no assets")
    assets = []
    for name in list(assets_tab.data):
        if not name.strip() or not name.isprintable() or name != name.strip():
            raise assets_tab.error(None, f"asset name {show(name)} must be printable, not "
                                   "blank, without leading or trailing spaces")
        a = assets_tab.table(name)
        if any(x.code == name for x in fxs):
            raise assets_tab.error(name, f"{name} is a currency with an exchange rate [fx."
                                   f"{name}]: an asset needs another name")
        spot = a.number("spot", positive=True, limit=MAX_AMOUNT)
        ccy = a.string("currency", None)
        if ccy == currency:
            ccy = None
        if ccy is not None and not any(x.code == ccy for x in fxs):
            raise a.error("currency", f"{ccy} needs its zero curve and exchange rate: give "
                          f"[curves.{ccy}] and [fx.{ccy}]")
        heston, calibrate, mixing = (parse_heston(a.table("heston")) if a.has("heston")
                                     else (None, False, None))
        model = a.string("model", None)
        if model is not None:
            check_model_kind(model, source=src, key=a.key("model"))
        if model in ("heston", "lsv") and heston is None and not calibrate:
            raise a.error("model", f"the {model} model needs its variance process: give "
                          f"[assets.{name}.heston] (v0, kappa, theta, vol_of_vol, "
                          "spot_vol_correlation, or calibrate = true)")
        surface = None
        if a.has("vol_surface"):
            if a.has("vol") or a.has("vol_tenors") or a.has("vols"):
                raise a.error("vol_surface", "give either a vol_surface or 'vol' ('vol_tenors' "
                              "+ 'vols'), not both: the surface replaces the vol")
            surface = parse_surface(a.table("vol_surface"), valuation, day_count)
            vol = VolCurve.flat(1.0)  # replaced below by the surface's at-the-money vols
        elif a.has("vol"):
            if a.has("vol_tenors") or a.has("vols"):
                raise a.error("vol", "give either 'vol' or 'vol_tenors' + 'vols', not both")
            vol = VolCurve.flat(a.check_vol("vol", a.raw("vol")))
        elif a.has("vol_tenors"):
            times = tenor_times(a, "vol_tenors")
            vols = a.list("vols")
            if len(vols) != len(times):
                raise a.error("vols", f"has {len(vols)} values for {len(times)} tenors")
            vols = [a.check_vol(f"vols[{i}]", v) for i, v in enumerate(vols)]
            w = [v * v * t for v, t in zip(vols, times, strict=True)]
            for i in range(1, len(w)):
                if w[i] < w[i - 1] - 1e-14:
                    raise a.error(f"vols[{i}]", "total variance vol^2 * t decreases between "
                                  f"tenors {i - 1} and {i} (negative forward variance)")
            vol = VolCurve(tuple(times), tuple(vols), tuple(str(x) for x in a.list("vol_tenors")))
        elif heston is not None:  # Heston alone: the vol is its mean expected variance's root
            vol = VolCurve(HESTON_VOL_TIMES, heston.term_vols(HESTON_VOL_TIMES))
        else:
            raise a.error("vol", "missing required key (or 'vol_tenors' + 'vols'"
                          + (", or the heston block's five parameters)" if calibrate else ")"))
        if calibrate and surface is None:
            raise a.error("heston", "calibrate = true fits the Heston parameters to the "
                          "asset's vol_surface, and it has none")
        q = _rate(a, "dividend_yield", a.raw("dividend_yield", 0.0))
        law = NORMAL
        if a.has("law"):
            law = parse_law(a.raw("law"), base_dir=Path(src).parent, source=src,
                            key=a.key("law"))
        dividends = _dividends(a, valuation)
        a.finish()
        if surface is not None and not law.is_normal:
            raise a.error("law", "a non-normal law and a volatility surface cannot be combined "
                          "(local volatility steps with normal shocks)")
        if mixing is not None and model != "lsv":
            raise a.error("heston.mixing", "mixing applies to model = \"lsv\" only")
        asset = Asset(name, spot, vol, q, law, dividends=dividends, model=model,
                      heston=heston, heston_calibrate=calibrate, mixing=mixing, currency=ccy)
        if surface is not None:
            own = curve if ccy is None else dict(curves)[ccy]  # quoted in its own currency
            asset = attach_surface(asset, surface, own, source=src, key=a.key("vol_surface"))
        assets.append(asset)

    corr = None
    ctab = top.table("correlation", None)
    if ctab is not None:
        names = ctab.list("assets")
        for i, n in enumerate(names):
            if not isinstance(n, str):
                raise ctab.error(f"assets[{i}]", f"expected an asset name, got {n!r}")
            known = [*assets_tab.data, *(x.code for x in fxs)]
            if n not in known:
                raise ctab.error(f"assets[{i}]", f"unknown asset {n!r}"
                                 f"{did_you_mean(n, known)}")
        if len(set(names)) != len(names):
            raise ctab.error("assets", "an asset is listed twice")
        rows = ctab.list("matrix")
        k = len(names)
        for i, r in enumerate(rows):
            if not isinstance(r, list):
                raise ctab.error(f"matrix[{i}]", f"expected a row (a list of numbers), got "
                                 f"{show(r)}")
        if len(rows) != k or any(len(r) != k for r in rows):
            shape = f"{len(rows)} rows of {', '.join(sorted({str(len(r)) for r in rows}))}"
            raise ctab.error("matrix", f"must be {k} x {k} to match 'assets', got {shape}")
        mat = np.array([[ctab.check_number(f"matrix[{i}][{j}]", v) for j, v in enumerate(r)]
                        for i, r in enumerate(rows)])
        validate_correlation(mat, source=src, key="correlation.matrix")
        corr = Correlation(tuple(names), tuple(tuple(float(x) for x in r) for r in mat))
        ctab.finish()
    top.finish()
    market = Market(valuation_date=valuation, currency=currency, discount=curve,
                    assets=tuple(assets), day_count=day_count, correlation=corr, source=src,
                    issuers=tuple(issuers), curves=tuple(curves), fx=tuple(fxs))
    for a in market.assets:
        if market.dividend_times(a.name) and not market.escrowed_spot(a.name) > 0:
            raise InputError(f"the dividends to come are worth {market.escrow(a.name, 0.0):g} "
                             f"today, not less than the spot {a.spot:g}: a dividend larger than "
                             "the level it applies to", source=src,
                             key=f"assets.{a.name}.dividends")
    if any(a.heston_calibrate for a in market.assets):
        from fairpath.calibration import calibrate_on_load  # a local import: no cycle

        market = calibrate_on_load(market)
    return market


def check_model_kind(kind: object, *, source: str | None = None, key: str | None = None) -> None:
    """Refuse a model name that no model module registered (listing the known ones)."""
    known = known_models()
    if not isinstance(kind, str) or kind not in known:
        raise InputError(f"unknown model {show(kind)}{did_you_mean(str(kind), known)}; known: "
                         f"{', '.join(known)}", source=source, key=key)


def _rate(tab: Table, name: str, value) -> float:
    """A rate or a yield: a finite number, at most MAX_RATE in size (else a percentage)."""
    v = tab.check_number(name, value)
    if abs(v) > MAX_RATE:
        raise tab.error(name, f"{v:g} is {v:.0%} continuously compounded; a percentage? write "
                        f"{v / 100:g} for {v:g}%")
    return v


def _spread(tab: Table, name: str, value) -> float:
    """A funding spread: a finite number within MAX_SPREAD either side of zero (a larger one
    is basis points or a percentage typed as a number)."""
    v = tab.check_number(name, value)
    if abs(v) > MAX_SPREAD:
        raise tab.error(name, f"{v:g} is a spread of {v:.0%} a year; in basis points? write "
                        f"{v / 1e4:g} for {v:g} bp (or {v / 100:g} for {v:g}%)")
    return v


def validate_correlation(mat: np.ndarray, *, source: str | None = None,
                         key: str | None = None) -> None:
    """Symmetric, unit diagonal, entries in [-1, 1], positive semi-definite; no repair."""
    if not np.allclose(mat, mat.T, atol=1e-12, rtol=0):
        i, j = np.unravel_index(np.argmax(np.abs(mat - mat.T)), mat.shape)
        raise InputError(f"not symmetric: [{i}][{j}] = {mat[i, j]:g} but [{j}][{i}] = "
                         f"{mat[j, i]:g}", source=source, key=key)
    if not np.allclose(np.diag(mat), 1.0, atol=1e-12, rtol=0):
        raise InputError(f"diagonal must be 1, got {np.diag(mat).tolist()}", source=source,
                         key=key)
    if np.any(np.abs(mat) > 1.0):
        i, j = np.unravel_index(np.argmax(np.abs(mat)), mat.shape)
        raise InputError(f"entry [{i}][{j}] = {mat[i, j]:g} is outside [-1, 1]", source=source,
                         key=key)
    smallest = float(np.linalg.eigvalsh(mat).min())
    if smallest < -PSD_TOLERANCE:
        raise InputError(f"not positive semi-definite (smallest eigenvalue {smallest:.6g})",
                         source=source, key=key)


def _dividends(a: Table, valuation: date) -> tuple[tuple[date, float], ...]:
    """``dividends = [{ ex_date = ..., amount = ... }, ...]`` of one asset."""
    raw = a.raw("dividends", None)
    if raw is None:
        return ()
    if not isinstance(raw, list) or not raw:
        raise a.error("dividends", "expected a list of { ex_date = ..., amount = ... }")
    out = []
    for i, item in enumerate(raw):
        if not isinstance(item, dict):
            raise a.error(f"dividends[{i}]", f"expected {{ ex_date = ..., amount = ... }}, got "
                          f"{show(item)}")
        t = Table(item, a.source, a.key(f"dividends[{i}]"))
        d = t.date("ex_date")
        x = t.number("amount", positive=True, limit=MAX_AMOUNT)
        t.finish()
        out.append((d, x))
    dates = [d for d, _ in out]
    if len(set(dates)) != len(dates):
        dup = next(d for d in dates if dates.count(d) > 1)
        raise a.error("dividends", f"two dividends on {dup}: give their sum once")
    return tuple(sorted(out))


def attach_surface(asset: Asset, surface: VolSurface, curve: DiscountCurve, *,
                   source: str | None = None, key: str | None = None) -> Asset:
    """The asset with a surface: moneyness against the escrowed level's forward, arbitrage
    checked (refused naming where), and ``vol`` set to the at-the-money term structure."""
    q = asset.dividend_yield
    s = surface.attach(lambda t: math.exp(-q * t) / float(curve.df(t)))
    try:
        s.check(source=source, key=key)
    except InputError as exc:
        raise InputError(exc.problem, source=source, key=key) from None
    atm = s.atm_vols()
    w = [v * v * t for v, t in zip(atm, s.times, strict=True)]
    if any(b < a - 1e-14 for a, b in zip(w, w[1:], strict=False)):
        raise InputError("calendar arbitrage at the money: total variance falls between tenors",
                         source=source, key=key)
    return dataclasses.replace(asset, surface=s, vol=VolCurve(tuple(s.times), atm))

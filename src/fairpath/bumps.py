"""Bumped markets that rebuild what depends on the bumped input, as loading a bumped market file
would (value semantics: every bump returns a new market).

* a spot: strikes of a surface are fractions of the (escrowed) spot, so the surface moves with it;
* a vol: the flat vol, one pillar of a term structure, or a surface's quotes (all, one tenor row or
  one strike column), re-attached and re-checked (arbitrage) so its at-the-money term structure
  and local-vol table follow;
* the zero curve: every surface re-attached to the new forwards (its moneyness is against the
  forward), cash dividends re-discounted;
* a dividend yield: that asset's surface re-attached; cash dividends scaled as announced amounts;
* a correlation: one pair, or every off-diagonal entry of a set of assets, refused when the matrix
  would no longer be positive semi-definite (naming the smallest eigenvalue);
* the valuation date: moved with every date of the products kept (theta).
"""

from __future__ import annotations

import dataclasses
import math
from datetime import timedelta

import numpy as np

from fairpath.errors import InputError
from fairpath.market import (
    PSD_TOLERANCE,
    Correlation,
    DiscountCurve,
    Market,
    attach_surface,
)


def _reattach(market: Market, asset, curve: DiscountCurve | None = None, surface=None):
    """The asset with its surface attached again on ``curve`` (the market's by default)."""
    surface = asset.surface if surface is None else surface
    if surface is None:
        return asset
    return attach_surface(asset, surface, curve or market.curve(asset.currency),
                          source=market.source, key=f"assets.{asset.name}.vol_surface")


def spot(market: Market, name: str, factor: float) -> Market:
    """The spot of ``name`` times ``factor`` (refused when it would fall to or below the value
    of the asset's cash dividends to come, as loading such a file is)."""
    a = market.asset(name)
    out = market.with_asset(dataclasses.replace(a, spot=a.spot * factor))
    if out.dividend_times(name) and not out.escrowed_spot(name) > 0:
        raise InputError(f"a spot move leaves {name}'s spot {out.asset(name).spot:g} below the "
                         f"value of its cash dividends to come "
                         f"({float(out.escrow(name, 0.0)):g})", source=market.source,
                         key=f"assets.{name}.spot")
    return out


def lowest_vol(market: Market, name: str) -> float:
    """The lowest vol the asset is quoted at (its term structure's, or its surface's)."""
    a = market.asset(name)
    return min(a.vol.vols) if a.surface is None else min(min(r) for r in a.surface.vols)


def vol_bump_size(market: Market, name: str, dv: float) -> float:
    """``dv``, or half the lowest quoted vol of the asset when that is smaller (so a low vol is
    bumped relative to its size, never through zero)."""
    return min(dv, 0.5 * lowest_vol(market, name))


def vol(market: Market, name: str, dv: float, *, tenor: int | None = None,
        strike: int | None = None) -> Market:
    """Vols of ``name`` moved by ``dv``: every quote, or only the pillar / surface row
    ``tenor``, or only the surface column ``strike``; a surface is re-attached and re-checked."""
    a = market.asset(name)
    if a.model == "heston" and a.heston is not None and not a.heston.calibrated:
        return market.with_asset(_heston_vol(market, a, dv, tenor is None and strike is None))
    if a.heston is not None and a.heston.calibrated and a.surface is not None:
        # fitted to the surface on load: fitted again to the bumped one
        a = dataclasses.replace(a, heston=None)
    if a.surface is None:
        if strike is not None:
            raise InputError(f"{name} has no vol surface, so no strike buckets",
                             source=market.source, key="--buckets")
        vols = tuple(v + dv if tenor is None or i == tenor else v
                     for i, v in enumerate(a.vol.vols))
        if not min(vols) > 0:
            raise InputError(f"a vega bump would make {name}'s vol non-positive: its vol is "
                             f"{min(a.vol.vols):g}", source=market.source,
                             key=f"assets.{name}.vol")
        return market.with_asset(dataclasses.replace(a, vol=dataclasses.replace(a.vol, vols=vols)))
    s = a.surface
    rows = tuple(tuple(x + dv if (tenor is None or i == tenor) and (strike is None or j == strike)
                       else x for j, x in enumerate(row)) for i, row in enumerate(s.vols))
    if not min(min(r) for r in rows) > 0:
        raise InputError(f"a vega bump would make {name}'s vol non-positive: its lowest quote "
                         f"is {min(min(r) for r in s.vols):g}", source=market.source,
                         key=f"assets.{name}.vol_surface")
    moved = dataclasses.replace(s, vols=rows)
    return market.with_asset(_reattach(market, a, surface=moved))


def _heston_vol(market: Market, a, dv: float, parallel: bool):
    """A Heston asset given by its five parameters: the roots of ``v0`` and ``theta`` (its
    vol today and in the long run) moved by ``dv``; no buckets (the surface does not drive
    it)."""
    if not parallel:
        raise InputError(f"{a.name}'s Heston model takes its variance from the five numbers "
                         "of its heston block, not from vol pillars: no vega buckets (calibrate"
                         " = true fits them to the surface, whose buckets then apply)",
                         source=market.source, key="--buckets")
    h = a.heston
    r0, rt = math.sqrt(h.v0) + dv, math.sqrt(h.theta) + dv
    if not (r0 > 0 and rt > 0):
        raise InputError(f"a vega bump would make {a.name}'s Heston vol non-positive: the roots "
                         f"of v0 and theta are {math.sqrt(h.v0):g} and {math.sqrt(h.theta):g}",
                         source=market.source, key=f"assets.{a.name}.heston")
    return dataclasses.replace(a, heston=dataclasses.replace(h, v0=r0 * r0, theta=rt * rt))


def rates(market: Market, dr: float) -> Market:
    """Every zero rate of the reporting currency moved by ``dr``; its assets' surfaces
    re-attached to the new forwards (an asset quoted in another currency keeps its own)."""
    curve = market.discount.shifted(dr)
    assets = tuple(_reattach(market, a, curve) if market.foreign(a.name) is None else a
                   for a in market.assets)
    return dataclasses.replace(market, discount=curve, assets=assets)


def curve_rates(market: Market, code: str, dr: float) -> Market:
    """Every zero rate of currency ``code``'s curve moved by ``dr`` (its exchange rate's
    forward moves, and the surfaces of the assets quoted in it are re-attached)."""
    curve = market.curve(code).shifted(dr)
    out = market.with_curve(code, curve)
    return dataclasses.replace(out, assets=tuple(
        _reattach(out, a, curve) if market.foreign(a.name) == code else a
        for a in market.assets))


def dividend_yield(market: Market, name: str, dq: float) -> Market:
    """The dividend yield of ``name`` moved by ``dq`` (surface re-attached)."""
    a = market.asset(name)
    moved = dataclasses.replace(a, dividend_yield=a.dividend_yield + dq)
    return market.with_asset(_reattach(market, moved))


def cash_dividends(market: Market, name: str, factor: float) -> Market:
    """Every announced cash dividend of ``name`` times ``factor`` (surface re-attached)."""
    a = market.asset(name)
    moved = dataclasses.replace(a, dividends=tuple((d, x * factor) for d, x in a.dividends))
    out = market.with_asset(moved)
    if not out.escrowed_spot(name) > 0:
        raise InputError(f"a dividend bump would make {name}'s dividends worth more than its "
                         "spot", source=market.source, key=f"assets.{name}.dividends")
    return out


def correlation(market: Market, pairs, d: float) -> Market:
    """Correlation of every pair in ``pairs`` (``(a, b)`` asset names) moved by ``d``.

    Refused, naming the smallest eigenvalue, when the matrix would not be positive
    semi-definite or an entry would leave [-1, 1]."""
    c = market.correlation
    if c is None:
        raise InputError("the market has no [correlation] block", source=market.source,
                         key="correlation")
    m = c.array()
    for a, b in pairs:
        i, j = c.assets.index(a), c.assets.index(b)
        m[i, j] += d
        m[j, i] += d
    what = ", ".join(f"{a}/{b}" for a, b in pairs)
    if np.any(np.abs(m) > 1.0 + 1e-12):
        raise InputError(f"moving the correlation of {what} by {d:+g} leaves [-1, 1]",
                         source=market.source, key="correlation.matrix")
    smallest = float(np.linalg.eigvalsh(m).min())
    if smallest < -PSD_TOLERANCE:
        raise InputError(f"moving the correlation of {what} by {d:+g} breaks positive "
                         f"semi-definiteness (smallest eigenvalue {smallest:.3g})",
                         source=market.source, key="correlation.matrix")
    return dataclasses.replace(market, correlation=Correlation(
        c.assets, tuple(tuple(float(x) for x in row) for row in m)))


def valuation_date(market: Market, days: int) -> Market:
    """The valuation date moved by ``days`` calendar days (every other input as given)."""
    return dataclasses.replace(market, valuation_date=market.valuation_date
                               + timedelta(days=days))

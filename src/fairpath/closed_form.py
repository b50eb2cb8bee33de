"""Closed-form European prices and Greeks in the Black-Scholes-Merton model.

These are the analytic references for checking Monte Carlo prices. Everything is vectorised:
every numeric argument may be a scalar or a numpy array, and the arguments broadcast against
each other.

Conventions (the project's contract)
------------------------------------
* ``r`` continuously compounded risk-free rate, ``q`` continuous dividend yield, so the
  forward is ``F = spot * exp((r - q) * T)`` and the discount factor ``exp(-r * T)``.
* ``sigma`` Black (lognormal) volatility, ``T`` time to expiry in years.
* ``right`` is the string ``"call"`` or ``"put"``.
* Greeks: delta per 1 unit of spot, gamma per unit of spot squared, vega per 1.00 of vol
  (not per 1 %), rho per 1.00 of rate (``dV/dr`` with ``q`` held fixed), and theta per year of
  calendar time as the change in value when the valuation date moves forward,
  ``theta = -dV/dT``.

Degenerate inputs
-----------------
When ``sigma * sqrt(T) == 0`` (``T == 0`` or ``sigma == 0``), or ``spot == 0`` or
``strike == 0``, the terminal price is known for sure relative to the strike, and every
function returns the discounted payoff at the forward instead of evaluating ``log(0)`` or
``0 / 0``. For ``T == 0`` this is the intrinsic value. The Greeks are then those of that
deterministic value: gamma and vega are 0; at the kink of a vanilla (``F == K``) the delta,
rho and theta are the midpoint of the one-sided derivatives; digitals use the strict
indicator (``S_T > K`` for a call, ``S_T < K`` for a put), so both pay nothing at the kink.

References
----------
.. [BS73] F. Black and M. Scholes, "The Pricing of Options and Corporate Liabilities",
   Journal of Political Economy 81(3), 1973, 637-654.
.. [M73] R. C. Merton, "Theory of Rational Option Pricing", Bell Journal of Economics and
   Management Science 4(1), 1973, 141-183 (continuous dividend yield).
.. [H07] E. G. Haug, "The Complete Guide to Option Pricing Formulas", 2nd ed., McGraw-Hill,
   2007: chapter 1 (Black-Scholes-Merton and the generalized model with cost of carry
   ``b = r - q``), chapter 2 (Black-Scholes-Merton Greeks), chapter 4 (exotic options on a
   single asset, including cash-or-nothing and asset-or-nothing binaries).
.. [RR91] E. Reiner and M. Rubinstein, "Unscrambling the Binary Code", Risk 4(9), 1991
   (cash-or-nothing and asset-or-nothing options).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import ndtr

from fairpath.errors import InputError

__all__ = [
    "asset_or_nothing_price",
    "bsm_greeks",
    "bsm_price",
    "digital_greeks",
    "digital_price",
    "discount",
    "forward",
]

_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
# |d| beyond this gives N(d) in {0, 1} and n(d) == 0 in double precision anyway; clipping
# keeps d * d finite for absurdly small (but positive) sigma * sqrt(T).
_D_CLIP = 1.0e6

FloatOrArray = float | NDArray[np.float64]


# --------------------------------------------------------------------------- input checks


class _Inputs(NamedTuple):
    spot: NDArray[np.float64]
    strike: NDArray[np.float64]
    T: NDArray[np.float64]
    r: NDArray[np.float64]
    q: NDArray[np.float64]
    sigma: NDArray[np.float64]
    payout: NDArray[np.float64]


def _as_float_array(value: ArrayLike, name: str, source: str) -> NDArray[np.float64]:
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"must be a real number or array of them, got {value!r}",
                         source=source, key=name) from None
    if not np.all(np.isfinite(arr)):
        bad = arr[~np.isfinite(arr)].flat[0]
        raise InputError(f"must be finite, got {bad}", source=source, key=name)
    return arr


def _check_non_negative(arr: NDArray[np.float64], name: str, source: str) -> None:
    if np.any(arr < 0):
        bad = arr[arr < 0].flat[0]
        raise InputError(f"must be non-negative, got {bad}", source=source, key=name)


def _phi(right: object, source: str) -> float:
    """+1 for a call, -1 for a put."""
    if isinstance(right, str):
        if right == "call":
            return 1.0
        if right == "put":
            return -1.0
    raise InputError(f"must be 'call' or 'put', got {right!r}", source=source, key="right")


def _inputs(source: str, spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
            q: ArrayLike, sigma: ArrayLike, payout: ArrayLike = 1.0) -> _Inputs:
    names = ("spot", "strike", "T", "r", "q", "sigma", "payout")
    values = (spot, strike, T, r, q, sigma, payout)
    arrays = [_as_float_array(v, n, source) for n, v in zip(names, values, strict=True)]
    for name, arr in zip(names, arrays, strict=True):
        if name in ("spot", "strike", "T", "sigma"):
            _check_non_negative(arr, name, source)
    try:
        arrays = np.broadcast_arrays(*arrays)
    except ValueError:
        shapes = ", ".join(f"{n}{a.shape}" for n, a in zip(names, arrays, strict=True))
        raise InputError(f"arguments do not broadcast together: {shapes}",
                         source=source) from None
    return _Inputs(*arrays)


def _out(x: NDArray[np.float64]) -> FloatOrArray:
    """Return a Python float for 0-d results, else the array."""
    x = np.asarray(x, dtype=np.float64)
    return float(x) if x.ndim == 0 else x


# --------------------------------------------------------------------------- building blocks


def _npdf(x: NDArray[np.float64]) -> NDArray[np.float64]:
    return _INV_SQRT_2PI * np.exp(-0.5 * x * x)


class _Core(NamedTuple):
    """Shared intermediate values.

    ``deg`` marks the degenerate entries; in those entries the ``*_s`` fields hold harmless
    substitutes (1.0) so that the regular formulas evaluate without warnings, and the regular
    results there are discarded.
    """

    deg: NDArray[np.bool_]
    df_r: NDArray[np.float64]  # exp(-r T)
    df_q: NDArray[np.float64]  # exp(-q T)
    S_s: NDArray[np.float64]
    K_s: NDArray[np.float64]
    T_s: NDArray[np.float64]
    sig_s: NDArray[np.float64]
    sT_s: NDArray[np.float64]  # sigma * sqrt(T)
    d1: NDArray[np.float64]
    d2: NDArray[np.float64]


def _core(x: _Inputs) -> _Core:
    sT = x.sigma * np.sqrt(x.T)
    deg = (sT == 0.0) | (x.spot == 0.0) | (x.strike == 0.0)
    one = np.ones_like(sT)
    S_s = np.where(deg, one, x.spot)
    K_s = np.where(deg, one, x.strike)
    T_s = np.where(deg, one, x.T)
    sig_s = np.where(deg, one, x.sigma)
    sT_s = np.where(deg, one, sT)
    with np.errstate(over="ignore"):
        d1 = (np.log(S_s / K_s) + (x.r - x.q) * T_s) / sT_s + 0.5 * sT_s
    d1 = np.clip(d1, -_D_CLIP, _D_CLIP)
    d2 = np.clip(d1 - sT_s, -_D_CLIP, _D_CLIP)
    return _Core(deg, np.exp(-x.r * x.T), np.exp(-x.q * x.T), S_s, K_s, T_s, sig_s, sT_s,
                 d1, d2)


# --------------------------------------------------------------------------- forward, discount


def forward(spot: ArrayLike, T: ArrayLike, r: ArrayLike, q: ArrayLike) -> FloatOrArray:
    """Forward price of an asset paying a continuous dividend yield.

    ``F = spot * exp((r - q) * T)`` (cost-of-carry relation, Merton 1973; Haug 2007 [H07]
    chapter 1 with ``b = r - q``).

    Parameters
    ----------
    spot : array_like
        Current price of the asset, >= 0.
    T : array_like
        Time to delivery in years, >= 0.
    r, q : array_like
        Continuously compounded rate and dividend yield.

    Returns
    -------
    float or ndarray

    Examples
    --------
    >>> round(forward(100.0, 1.0, 0.05, 0.02), 6)
    103.045453
    """
    x = _inputs("forward", spot, 0.0, T, r, q, 0.0)
    return _out(x.spot * np.exp((x.r - x.q) * x.T))


def discount(T: ArrayLike, r: ArrayLike) -> FloatOrArray:
    """Discount factor ``exp(-r * T)`` for a continuously compounded rate.

    Parameters
    ----------
    T : array_like
        Time in years, >= 0.
    r : array_like
        Continuously compounded rate.

    Returns
    -------
    float or ndarray

    Examples
    --------
    >>> round(discount(2.0, 0.05), 6)
    0.904837
    """
    x = _inputs("discount", 0.0, 0.0, T, r, 0.0, 0.0)
    return _out(np.exp(-x.r * x.T))


# --------------------------------------------------------------------------- vanilla


def _bsm(x: _Inputs, phi: float, greeks: bool) -> dict[str, NDArray[np.float64]]:
    c = _core(x)
    # Regular case: Black & Scholes (1973), Merton (1973); Haug 2007 [H07] chapter 1.
    #   V = phi * (S e^{-qT} N(phi d1) - K e^{-rT} N(phi d2))
    Sq = c.S_s * c.df_q
    Kr = c.K_s * c.df_r
    Nd1 = ndtr(phi * c.d1)
    Nd2 = ndtr(phi * c.d2)
    price = phi * (Sq * Nd1 - Kr * Nd2)

    # Degenerate case: discounted payoff at the forward, phi * (S e^{-qT} - K e^{-rT})^+.
    Sq0 = x.spot * c.df_q
    Kr0 = x.strike * c.df_r
    gap = phi * (Sq0 - Kr0)
    price0 = np.maximum(gap, 0.0)
    out = {"price": np.where(c.deg, price0, price)}
    if not greeks:
        return out

    # Greeks of the generalized BSM model, Haug 2007 [H07] chapter 2 (b = r - q):
    nd1 = _npdf(c.d1)
    delta = phi * c.df_q * Nd1
    gamma = c.df_q * nd1 / (c.S_s * c.sT_s)
    vega = Sq * nd1 * np.sqrt(c.T_s)
    rho = phi * c.T_s * Kr * Nd2
    theta = -Sq * nd1 * c.sT_s / (2.0 * c.T_s) - phi * x.r * Kr * Nd2 + phi * x.q * Sq * Nd1

    # Derivatives of the deterministic value; midpoint of the one-sided ones at the kink.
    ind = np.where(gap > 0.0, 1.0, np.where(gap == 0.0, 0.5, 0.0))
    zero = np.zeros_like(price0)
    out["delta"] = np.where(c.deg, phi * c.df_q * ind, delta)
    out["gamma"] = np.where(c.deg, zero, gamma)
    out["vega"] = np.where(c.deg, zero, vega)
    out["rho"] = np.where(c.deg, phi * x.T * Kr0 * ind, rho)
    out["theta"] = np.where(c.deg, phi * (x.q * Sq0 - x.r * Kr0) * ind, theta)
    return out


def bsm_price(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike, q: ArrayLike,
              sigma: ArrayLike, right: str) -> FloatOrArray:
    """Black-Scholes-Merton price of a European call or put on a dividend-paying asset.

    ``call = S e^{-qT} N(d1) - K e^{-rT} N(d2)``,
    ``put = K e^{-rT} N(-d2) - S e^{-qT} N(-d1)``, with
    ``d1 = (ln(S/K) + (r - q + sigma^2/2) T) / (sigma sqrt(T))`` and
    ``d2 = d1 - sigma sqrt(T)``.
    Black & Scholes (1973) [BS73]; dividend yield from Merton (1973) [M73]; Haug (2007)
    [H07] chapter 1 (generalized model with ``b = r - q``).

    Parameters
    ----------
    spot, strike : array_like
        Spot and strike, >= 0 (a zero strike call is worth ``spot * exp(-q T)``).
    T : array_like
        Time to expiry in years, >= 0 (``T == 0`` gives the intrinsic value).
    r, q : array_like
        Continuously compounded rate and dividend yield.
    sigma : array_like
        Black volatility, >= 0 (``sigma == 0`` gives the discounted intrinsic value of the
        forward).
    right : {"call", "put"}

    Returns
    -------
    float or ndarray
        The price, broadcast over the arguments.

    Raises
    ------
    InputError
        If ``right`` is not "call"/"put", or an argument is negative where it must not be,
        not finite, or the arguments do not broadcast.

    Examples
    --------
    >>> round(bsm_price(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call"), 4)
    10.4506
    >>> bsm_price([90.0, 110.0], 100.0, 0.0, 0.05, 0.0, 0.2, "put")
    array([10.,  0.])
    """
    phi = _phi(right, "bsm_price")
    x = _inputs("bsm_price", spot, strike, T, r, q, sigma)
    return _out(_bsm(x, phi, greeks=False)["price"])


def bsm_greeks(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike, q: ArrayLike,
               sigma: ArrayLike, right: str) -> dict[str, FloatOrArray]:
    """Black-Scholes-Merton price and Greeks of a European call or put.

    With ``phi = +1`` for a call and ``-1`` for a put, ``n`` the standard normal density
    (Haug 2007 [H07] chapter 2, generalized model with ``b = r - q``):

    * delta ``= phi e^{-qT} N(phi d1)``
    * gamma ``= e^{-qT} n(d1) / (S sigma sqrt(T))``
    * vega ``= S e^{-qT} n(d1) sqrt(T)`` (per 1.00 of vol)
    * rho ``= phi K T e^{-rT} N(phi d2)`` (``dV/dr``, ``q`` fixed, per 1.00 of rate)
    * theta ``= -S e^{-qT} n(d1) sigma / (2 sqrt(T)) - phi r K e^{-rT} N(phi d2)
      + phi q S e^{-qT} N(phi d1)`` (``-dV/dT``, per year)

    Parameters
    ----------
    spot, strike, T, r, q, sigma, right
        As for :func:`bsm_price`.

    Returns
    -------
    dict
        Keys "price", "delta", "gamma", "vega", "rho", "theta"; floats for scalar inputs,
        else arrays of the broadcast shape. For degenerate inputs (``T == 0``,
        ``sigma == 0``, zero spot or strike) these are the derivatives of the deterministic
        value, with gamma = vega = 0 (see the module docstring).

    Raises
    ------
    InputError
        As for :func:`bsm_price`.

    Examples
    --------
    >>> g = bsm_greeks(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call")
    >>> round(g["delta"], 4), round(g["vega"], 4)
    (0.6368, 37.524)
    """
    phi = _phi(right, "bsm_greeks")
    x = _inputs("bsm_greeks", spot, strike, T, r, q, sigma)
    return {k: _out(v) for k, v in _bsm(x, phi, greeks=True).items()}


# --------------------------------------------------------------------------- digitals


def _digital(x: _Inputs, phi: float, greeks: bool) -> dict[str, NDArray[np.float64]]:
    c = _core(x)
    # Cash-or-nothing: V = P e^{-rT} N(phi d2); Reiner & Rubinstein (1991) [RR91],
    # Haug 2007 [H07] chapter 4.
    D = x.payout * c.df_r
    price = D * ndtr(phi * c.d2)

    # Degenerate case: strict indicator of the payoff at the forward.
    gap = phi * (x.spot * c.df_q - x.strike * c.df_r)
    price0 = np.where(gap > 0.0, D, 0.0)
    out = {"price": np.where(c.deg, price0, price)}
    if not greeks:
        return out

    # Derivatives of P e^{-rT} N(phi d2), using dd2/dS = 1/(S sigma sqrt(T)),
    # dd2/dsigma = -d1/sigma, dd2/dr = sqrt(T)/sigma,
    # dd2/dT = (r - q - sigma^2/2)/(sigma sqrt(T)) - d2/(2T) and n'(x) = -x n(x).
    nd2 = _npdf(c.d2)
    Dn = phi * D * nd2
    delta = Dn / (c.S_s * c.sT_s)
    gamma = -Dn * c.d1 / (c.S_s * c.S_s * c.sT_s * c.sT_s)
    vega = -Dn * c.d1 / c.sig_s
    rho = -c.T_s * price + Dn * c.T_s / c.sT_s
    dd2_dT = (x.r - x.q - 0.5 * c.sig_s * c.sig_s) / c.sT_s - c.d2 / (2.0 * c.T_s)
    theta = x.r * price - Dn * dd2_dT

    zero = np.zeros_like(price0)
    out["delta"] = np.where(c.deg, zero, delta)
    out["gamma"] = np.where(c.deg, zero, gamma)
    out["vega"] = np.where(c.deg, zero, vega)
    out["rho"] = np.where(c.deg, -x.T * price0, rho)
    out["theta"] = np.where(c.deg, x.r * price0, theta)
    return out


def digital_price(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
                  q: ArrayLike, sigma: ArrayLike, right: str,
                  payout: ArrayLike = 1.0) -> FloatOrArray:
    """Price of a European cash-or-nothing digital.

    Pays ``payout`` at ``T`` if ``S_T > K`` (call) or ``S_T < K`` (put):
    ``call = payout e^{-rT} N(d2)``, ``put = payout e^{-rT} N(-d2)``
    (Reiner & Rubinstein 1991 [RR91]; Haug 2007 [H07] chapter 4).

    Parameters
    ----------
    spot, strike, T, r, q, sigma, right
        As for :func:`bsm_price`.
    payout : array_like, default 1.0
        Cash amount paid at expiry.

    Returns
    -------
    float or ndarray
        For ``T == 0`` the indicator times ``payout``; for ``sigma == 0`` the discounted
        indicator of the forward.

    Raises
    ------
    InputError
        As for :func:`bsm_price`.

    Examples
    --------
    >>> round(digital_price(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call", payout=10.0), 4)
    5.3232
    """
    phi = _phi(right, "digital_price")
    x = _inputs("digital_price", spot, strike, T, r, q, sigma, payout)
    return _out(_digital(x, phi, greeks=False)["price"])


def digital_greeks(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
                   q: ArrayLike, sigma: ArrayLike, right: str,
                   payout: ArrayLike = 1.0) -> dict[str, FloatOrArray]:
    """Price and Greeks of a European cash-or-nothing digital.

    With ``phi = +1`` for a call, ``-1`` for a put and ``D = payout e^{-rT}``
    (derivatives of the formula in Haug 2007 [H07] chapter 4):

    * delta ``= phi D n(d2) / (S sigma sqrt(T))``
    * gamma ``= -phi D n(d2) d1 / (S^2 sigma^2 T)``
    * vega ``= -phi D n(d2) d1 / sigma``
    * rho ``= -T V + phi D n(d2) sqrt(T) / sigma``
    * theta ``= r V - phi D n(d2) ((r - q - sigma^2/2) / (sigma sqrt(T)) - d2 / (2 T))``

    Units as in :func:`bsm_greeks`.

    Parameters
    ----------
    spot, strike, T, r, q, sigma, right, payout
        As for :func:`digital_price`.

    Returns
    -------
    dict
        Keys "price", "delta", "gamma", "vega", "rho", "theta". For degenerate inputs
        delta = gamma = vega = 0, rho = -T V and theta = r V.

    Raises
    ------
    InputError
        As for :func:`bsm_price`.

    Examples
    --------
    >>> g = digital_greeks(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call")
    >>> round(g["delta"], 6)
    0.018762
    """
    phi = _phi(right, "digital_greeks")
    x = _inputs("digital_greeks", spot, strike, T, r, q, sigma, payout)
    return {k: _out(v) for k, v in _digital(x, phi, greeks=True).items()}


def asset_or_nothing_price(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
                           q: ArrayLike, sigma: ArrayLike, right: str) -> FloatOrArray:
    """Price of a European asset-or-nothing digital.

    Delivers one unit of the asset at ``T`` if ``S_T > K`` (call) or ``S_T < K`` (put):
    ``call = S e^{-qT} N(d1)``, ``put = S e^{-qT} N(-d1)``
    (Reiner & Rubinstein 1991 [RR91]; Haug 2007 [H07] chapter 4).

    Parameters
    ----------
    spot, strike, T, r, q, sigma, right
        As for :func:`bsm_price`.

    Returns
    -------
    float or ndarray
        For degenerate inputs ``S e^{-qT}`` times the strict indicator of the payoff at the
        forward (at ``T == 0``: ``S`` if in the money, else 0).

    Raises
    ------
    InputError
        As for :func:`bsm_price`.

    Examples
    --------
    >>> round(asset_or_nothing_price(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call"), 4)
    63.6831
    """
    phi = _phi(right, "asset_or_nothing_price")
    x = _inputs("asset_or_nothing_price", spot, strike, T, r, q, sigma)
    c = _core(x)
    price = c.S_s * c.df_q * ndtr(phi * c.d1)
    Sq0 = x.spot * c.df_q
    gap = phi * (Sq0 - x.strike * c.df_r)
    price0 = np.where(gap > 0.0, Sq0, 0.0)
    return _out(np.where(c.deg, price0, price))

"""Closed-form prices in the Black-Scholes-Merton model: European options and Greeks, and
exotics with exact or near-exact formulas.

These are the analytic references for checking Monte Carlo prices. Everything is vectorised:
every numeric argument may be a scalar or a numpy array, and the arguments broadcast against
each other.

* European: :func:`bsm_price`, :func:`bsm_greeks`, :func:`digital_price`,
  :func:`digital_greeks`, :func:`asset_or_nothing_price`.
* Lognormal building blocks: :func:`black_lognormal`, :func:`exchange_lognormal`.
* Geometric-average Asians: :func:`geometric_asian_discrete`,
  :func:`geometric_asian_continuous`.
* Gap options: :func:`gap_option` (the capital-at-risk leg of a note with a knock-in at maturity).
* Single barriers: :func:`barrier_price` (continuous monitoring),
  :func:`discrete_barrier_price` and :func:`bgk_barrier` (continuity correction), and
  :func:`discrete_barrier_quadrature`, the exact price under discrete monitoring on given dates
  by repeated Gaussian quadrature (the reference for the correction's accuracy).
* Two assets: :func:`bivariate_normal_cdf`, :func:`two_asset_min_max` (Stulz's options on the
  minimum or maximum of two assets).

Conventions (the project's contract)
------------------------------------
* ``r`` continuously compounded risk-free rate, ``q`` continuous dividend yield, so the
  forward is ``F = spot * exp((r - q) * T)`` and the discount factor ``exp(-r * T)``.
* ``sigma`` Black (lognormal) volatility, ``T`` time to expiry in years.
* ``right`` is the string ``"call"`` or ``"put"``; for barriers ``direction`` is ``"down"``
  or ``"up"`` and ``effect`` is ``"in"`` or ``"out"``.
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
   single asset, including cash-or-nothing and asset-or-nothing binaries, standard barrier
   options and geometric average-rate options), chapter 5 (exchange-one-asset-for-another
   options).
.. [RR91] E. Reiner and M. Rubinstein, "Unscrambling the Binary Code", Risk 4(9), 1991
   (cash-or-nothing and asset-or-nothing options).
.. [RR91b] E. Reiner and M. Rubinstein, "Breaking Down the Barriers", Risk 4(8), 1991
   (the eight standard single-barrier options with rebate).
.. [B76] F. Black, "The Pricing of Commodity Contracts", Journal of Financial Economics 3,
   1976, 167-179.
.. [M78] W. Margrabe, "The Value of an Option to Exchange One Asset for Another", Journal of
   Finance 33(1), 1978, 177-186.
.. [KV90] A. G. Z. Kemna and A. C. F. Vorst, "A Pricing Method for Options Based on Average
   Asset Values", Journal of Banking and Finance 14(1), 1990, 113-129.
.. [TW91] S. M. Turnbull and L. M. Wakeman, "A Quick Algorithm for Pricing European Average
   Options", Journal of Financial and Quantitative Analysis 26(3), 1991, 377-389.
.. [BGK97] M. Broadie, P. Glasserman and S. Kou, "A Continuity Correction for Discrete Barrier
   Options", Mathematical Finance 7(4), 1997, 325-349.
.. [S82] R. M. Stulz, "Options on the Minimum or the Maximum of Two Risky Assets", Journal of
   Financial Economics 10, 1982, 161-185 (in [H07], chapter 5).
.. [AWDN03] A. D. Andricopoulos, M. Widdicks, P. W. Duck and D. P. Newton, "Universal Option
   Valuation Using Quadrature Methods", Journal of Financial Economics 67, 2003, 447-471.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import erfcx, log_ndtr, ndtr

from fairpath.errors import InputError

__all__ = [
    "BGK_BETA",
    "asset_or_nothing_price",
    "barrier_price",
    "bgk_barrier",
    "black_lognormal",
    "bsm_greeks",
    "bsm_price",
    "digital_greeks",
    "digital_price",
    "discount",
    "discrete_barrier_price",
    "exchange_lognormal",
    "forward",
    "gap_option",
    "geometric_asian_continuous",
    "geometric_asian_discrete",
    "quanto_price",
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


def _arrays(source: str, names: tuple[str, ...], values: tuple[ArrayLike, ...],
            non_negative: tuple[str, ...]) -> list[NDArray[np.float64]]:
    """Convert, check (finite; non-negative where named) and broadcast the arguments."""
    arrays = [_as_float_array(v, n, source) for n, v in zip(names, values, strict=True)]
    for name, arr in zip(names, arrays, strict=True):
        if name in non_negative:
            _check_non_negative(arr, name, source)
    try:
        return np.broadcast_arrays(*arrays)
    except ValueError:
        shapes = ", ".join(f"{n}{a.shape}" for n, a in zip(names, arrays, strict=True))
        raise InputError(f"arguments do not broadcast together: {shapes}",
                         source=source) from None


def _inputs(source: str, spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
            q: ArrayLike, sigma: ArrayLike, payout: ArrayLike = 1.0) -> _Inputs:
    names = ("spot", "strike", "T", "r", "q", "sigma", "payout")
    values = (spot, strike, T, r, q, sigma, payout)
    return _Inputs(*_arrays(source, names, values, ("spot", "strike", "T", "sigma")))


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


def quanto_price(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r_dom: ArrayLike,
                 r_for: ArrayLike, q: ArrayLike, sigma: ArrayLike, sigma_fx: ArrayLike,
                 rho: ArrayLike, right: str, quanto_rate: ArrayLike = 1.0) -> FloatOrArray:
    """A quanto European: the payoff on a foreign asset, computed in its currency, paid as the
    same number of domestic units times ``quanto_rate``.

    Under the domestic measure the asset's forward is ``S e^{(r_for - q - rho sigma
    sigma_fx) T}`` (the quanto drift), and the option is a Black-Scholes-Merton one on that
    forward discounted at ``r_dom``: ``quanto_rate x bsm(S, K, T, r_dom, q', sigma)`` with
    ``q' = r_dom - r_for + q + rho sigma sigma_fx``. Haug (2007) [H07] section 5.16
    ("fixed exchange rate foreign equity options"); ``sigma_fx`` is the vol of the exchange
    rate in domestic units per foreign unit, ``rho`` its correlation with the asset.
    """
    q_eff = (np.asarray(r_dom, dtype=float) - np.asarray(r_for, dtype=float)
             + np.asarray(q, dtype=float)
             + np.asarray(rho, dtype=float) * np.asarray(sigma, dtype=float)
             * np.asarray(sigma_fx, dtype=float))
    return _out(np.asarray(quanto_rate, dtype=float)
                * np.asarray(bsm_price(spot, strike, T, r_dom, q_eff, sigma, right)))


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


# --------------------------------------------------------------------------- lognormal


def _black(F: NDArray[np.float64], K: NDArray[np.float64], v: NDArray[np.float64],
           df: NDArray[np.float64], phi: float) -> NDArray[np.float64]:
    """``df * E[(phi (X - K))^+]`` for lognormal ``X`` with mean ``F``, log-variance ``v``."""
    deg = (v == 0.0) | (F == 0.0) | (K == 0.0)
    one = np.ones_like(v)
    F_s = np.where(deg, one, F)
    K_s = np.where(deg, one, K)
    sv = np.sqrt(np.where(deg, one, v))
    with np.errstate(over="ignore"):
        d1 = np.log(F_s / K_s) / sv + 0.5 * sv
    d1 = np.clip(d1, -_D_CLIP, _D_CLIP)
    d2 = np.clip(d1 - sv, -_D_CLIP, _D_CLIP)
    price = df * phi * (F_s * ndtr(phi * d1) - K_s * ndtr(phi * d2))
    # Degenerate case: X is known for sure (v == 0), or one side of the payoff vanishes.
    price0 = df * np.maximum(phi * (F - K), 0.0)
    return np.where(deg, price0, price)


def black_lognormal(forward: ArrayLike, strike: ArrayLike, total_var: ArrayLike,
                    df: ArrayLike, right: str) -> FloatOrArray:
    """Discounted expected payoff of a call or put on a lognormal variable (Black 1976).

    For ``X`` lognormal with ``E[X] = forward`` and ``Var(log X) = total_var``:
    ``call = df * E[(X - K)^+] = df (F N(d1) - K N(d2))``,
    ``put = df * E[(K - X)^+] = df (K N(-d2) - F N(-d1))``, with
    ``d1 = (ln(F/K) + v/2) / sqrt(v)``, ``d2 = d1 - sqrt(v)`` (Black 1976 [B76]; Haug 2007
    [H07] chapter 1). With ``F = S e^{(r-q)T}``, ``v = sigma^2 T`` and ``df = e^{-rT}`` this
    is :func:`bsm_price`.

    Parameters
    ----------
    forward : array_like
        Mean of ``X``, >= 0.
    strike : array_like
        Strike, >= 0 (a zero strike call is worth ``df * forward``).
    total_var : array_like
        Variance of ``log X``, >= 0 (0 gives the discounted intrinsic value of the forward).
    df : array_like
        Discount factor to the payment date, >= 0.
    right : {"call", "put"}

    Returns
    -------
    float or ndarray

    Raises
    ------
    InputError
        If ``right`` is not "call"/"put", or an argument is negative, not finite, or the
        arguments do not broadcast.

    Examples
    --------
    >>> round(black_lognormal(105.127110, 100.0, 0.04, 0.951229, "call"), 4)
    10.4506
    >>> black_lognormal([90.0, 110.0], 100.0, 0.0, 0.5, "call")
    array([0., 5.])
    """
    source = "black_lognormal"
    phi = _phi(right, source)
    names = ("forward", "strike", "total_var", "df")
    F, K, v, d = _arrays(source, names, (forward, strike, total_var, df), names)
    return _out(_black(F, K, v, d, phi))


def exchange_lognormal(mean_x: ArrayLike, mean_y: ArrayLike, var_log_ratio: ArrayLike,
                       df: ArrayLike, right: str) -> FloatOrArray:
    """Discounted value of the option to exchange one lognormal variable for another.

    For jointly lognormal ``X``, ``Y`` with means ``mean_x``, ``mean_y`` and
    ``v = Var(log X - log Y)``: ``call = df * E[(X - Y)^+] = df (E[X] N(d1) - E[Y] N(d2))``
    and ``put = df * E[(Y - X)^+] = df (E[Y] N(-d2) - E[X] N(-d1))``, with
    ``d1 = (ln(E[X]/E[Y]) + v/2) / sqrt(v)``, ``d2 = d1 - sqrt(v)`` (Margrabe 1978 [M78];
    Haug 2007 [H07] chapter 5, exchange-one-asset-for-another options). Only the
    distribution of ``X / Y`` under the measure with numeraire ``Y`` matters, so the value is
    that of :func:`black_lognormal` with ``forward = mean_x`` and ``strike = mean_y``.

    Parameters
    ----------
    mean_x, mean_y : array_like
        Means of ``X`` and ``Y``, >= 0.
    var_log_ratio : array_like
        ``Var(log X - log Y)``, >= 0 (0 gives ``df * max(+-(E[X] - E[Y]), 0)``).
    df : array_like
        Discount factor to the payment date, >= 0.
    right : {"call", "put"}
        "call" receives ``X - Y``, "put" receives ``Y - X`` (when positive).

    Returns
    -------
    float or ndarray

    Raises
    ------
    InputError
        As for :func:`black_lognormal`.

    Examples
    --------
    >>> round(exchange_lognormal(102.0, 100.0, 0.05, 0.97, "call"), 4)
    9.7254
    """
    source = "exchange_lognormal"
    phi = _phi(right, source)
    names = ("mean_x", "mean_y", "var_log_ratio", "df")
    X, Y, v, d = _arrays(source, names, (mean_x, mean_y, var_log_ratio, df), names)
    return _out(_black(X, Y, v, d, phi))


# --------------------------------------------------------------------------- geometric Asian


def geometric_asian_discrete(spot: ArrayLike, strike: ArrayLike, times: ArrayLike,
                             r: ArrayLike, q: ArrayLike, sigma: ArrayLike,
                             right: str) -> FloatOrArray:
    """Fixed-strike option on the discrete geometric average, flat Black-Scholes-Merton.

    Pays ``(G - K)^+`` (call) or ``(K - G)^+`` (put) at the last fixing time ``t_n``, where
    ``G = (prod_i S(t_i))^(1/n)``. Under the model ``log G`` is normal with
    ``mean = log S + (r - q - sigma^2/2) sum_i t_i / n`` and
    ``var = sigma^2 / n^2 sum_{i,j} min(t_i, t_j)``, so the value is
    :func:`black_lognormal` with ``forward = exp(mean + var/2)``, ``total_var = var`` and
    ``df = exp(-r t_n)``. This is the discrete-fixing form of the argument of Kemna & Vorst
    (1990) [KV90] (continuous average, :func:`geometric_asian_continuous`); see Haug 2007
    [H07] chapter 4 (geometric average-rate options) and, for discrete averaging,
    Turnbull & Wakeman (1991) [TW91].

    Parameters
    ----------
    spot, strike : array_like
        Spot and strike, >= 0.
    times : array_like
        One-dimensional, non-decreasing fixing times in years, all > 0 (a repeated time
        counts twice in the average). The payment is at ``times[-1]``.
    r, q : array_like
        Continuously compounded rate and dividend yield.
    sigma : array_like
        Black volatility, >= 0.
    right : {"call", "put"}

    Returns
    -------
    float or ndarray
        Broadcast over ``spot``, ``strike``, ``r``, ``q`` and ``sigma``.

    Raises
    ------
    InputError
        If ``right`` is not "call"/"put", ``times`` is empty, not one-dimensional, not
        positive or not non-decreasing, or another argument is invalid.

    Examples
    --------
    >>> round(geometric_asian_discrete(100.0, 100.0, [0.25, 0.5, 0.75, 1.0], 0.05, 0.0, 0.2,
    ...                                "call"), 4)
    6.7335
    """
    source = "geometric_asian_discrete"
    phi = _phi(right, source)
    t = _as_float_array(times, "times", source)
    if t.ndim != 1 or t.size == 0:
        raise InputError(f"must be a non-empty 1-d array, got shape {t.shape}",
                         source=source, key="times")
    if np.any(t <= 0.0):
        raise InputError(f"must be positive, got {t[t <= 0.0][0]}", source=source, key="times")
    if np.any(np.diff(t) < 0.0):
        raise InputError("must be non-decreasing", source=source, key="times")
    names = ("spot", "strike", "r", "q", "sigma")
    S, K, r_, q_, sig = _arrays(source, names, (spot, strike, r, q, sigma),
                                ("spot", "strike", "sigma"))
    n = t.size
    # sum_{i,j} min(t_i, t_j) for sorted t: t_k is the minimum of 2 (n - k) - 1 ordered pairs
    # (k = 0, ..., n - 1).
    sum_min = float(np.sum(t * (2.0 * (n - np.arange(n)) - 1.0)))
    var = sig * sig * (sum_min / (n * n))
    with np.errstate(over="ignore"):
        F = S * np.exp((r_ - q_ - 0.5 * sig * sig) * float(np.mean(t)) + 0.5 * var)
    return _out(_black(F, K, var, np.exp(-r_ * t[-1]), phi))


def geometric_asian_continuous(spot: ArrayLike, strike: ArrayLike, T: ArrayLike, r: ArrayLike,
                               q: ArrayLike, sigma: ArrayLike, right: str) -> FloatOrArray:
    """Fixed-strike option on the continuous geometric average (Kemna & Vorst 1990).

    Pays ``(G - K)^+`` (call) or ``(K - G)^+`` (put) at ``T``, with
    ``G = exp((1/T) int_0^T log S(t) dt)``. The value is the generalized Black-Scholes-Merton
    price with volatility ``sigma_A = sigma / sqrt(3)`` and cost of carry
    ``b_A = (b - sigma^2/6) / 2`` (``b = r - q``), discounted at ``r`` over ``T``:
    ``call = S e^{(b_A - r)T} N(d1) - K e^{-rT} N(d2)`` with
    ``d1 = (ln(S/K) + (b_A + sigma_A^2/2) T) / (sigma_A sqrt(T))`` (Kemna & Vorst 1990
    [KV90]; Haug 2007 [H07] chapter 4, geometric average-rate options).

    Parameters
    ----------
    spot, strike, T, r, q, sigma, right
        As for :func:`bsm_price` (``T == 0`` gives the intrinsic value).

    Returns
    -------
    float or ndarray

    Raises
    ------
    InputError
        As for :func:`bsm_price`.

    Examples
    --------
    >>> round(geometric_asian_continuous(100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "call"), 4)
    5.5468
    """
    source = "geometric_asian_continuous"
    phi = _phi(right, source)
    x = _inputs(source, spot, strike, T, r, q, sigma)
    b_A = 0.5 * (x.r - x.q - x.sigma * x.sigma / 6.0)
    with np.errstate(over="ignore"):
        F = x.spot * np.exp(b_A * x.T)
    return _out(_black(F, x.strike, x.sigma * x.sigma * x.T / 3.0, np.exp(-x.r * x.T), phi))


# --------------------------------------------------------------------------- barriers

BGK_BETA = 0.5826
"""Broadie-Glasserman-Kou constant ``-zeta(1/2) / sqrt(2 pi)`` (to 4 decimals)."""

_SQRT_HALF = np.sqrt(0.5)
_TINY = np.finfo(np.float64).tiny
#: Barrier options are priced on the deterministic forward path below this sigma sqrt(T).
_DET_VOL = 1e-7
_DIRECTION = {"down": 1.0, "up": -1.0}  # Haug's eta

# Haug 2007 [H07] chapter 4, standard barrier options: coefficients of the terms (A, B, C, D)
# for strike >= barrier and for strike < barrier; knock-ins add E, knock-outs add F.
_BARRIER_TERMS = {
    ("call", "down", "in"): ((0, 0, 1, 0), (1, -1, 0, 1)),
    ("call", "up", "in"): ((1, 0, 0, 0), (0, 1, -1, 1)),
    ("call", "down", "out"): ((1, 0, -1, 0), (0, 1, 0, -1)),
    ("call", "up", "out"): ((0, 0, 0, 0), (1, -1, 1, -1)),
    ("put", "down", "in"): ((0, 1, -1, 1), (1, 0, 0, 0)),
    ("put", "up", "in"): ((1, -1, 0, 1), (0, 0, 1, 0)),
    ("put", "down", "out"): ((1, -1, 1, -1), (0, 0, 0, 0)),
    ("put", "up", "out"): ((0, 1, 0, -1), (1, 0, -1, 0)),
}


class _BarrierInputs(NamedTuple):
    spot: NDArray[np.float64]
    strike: NDArray[np.float64]
    barrier: NDArray[np.float64]
    T: NDArray[np.float64]
    r: NDArray[np.float64]
    q: NDArray[np.float64]
    sigma: NDArray[np.float64]
    rebate: NDArray[np.float64]


def _check_direction(direction: object, source: str) -> None:
    if not (isinstance(direction, str) and direction in _DIRECTION):
        raise InputError(f"must be 'down' or 'up', got {direction!r}", source=source,
                         key="direction")


def _barrier_kind(source: str, right: object, direction: object, effect: object) -> None:
    _phi(right, source)
    _check_direction(direction, source)
    if not (isinstance(effect, str) and effect in ("in", "out")):
        raise InputError(f"must be 'in' or 'out', got {effect!r}", source=source, key="effect")


def _barrier_inputs(source: str, spot: ArrayLike, strike: ArrayLike, barrier: ArrayLike,
                    T: ArrayLike, r: ArrayLike, q: ArrayLike, sigma: ArrayLike,
                    rebate: ArrayLike) -> _BarrierInputs:
    names = ("spot", "strike", "barrier", "T", "r", "q", "sigma", "rebate")
    values = (spot, strike, barrier, T, r, q, sigma, rebate)
    non_negative = ("spot", "strike", "barrier", "T", "sigma")
    return _BarrierInputs(*_arrays(source, names, values, non_negative))


def _tilted_ndtr(kh: NDArray, w: NDArray, gauss: NDArray) -> NDArray:
    """``exp(kh) * N(w)`` where ``gauss == kh - w**2 / 2``, given in a form free of cancellation.

    For ``Re(w) < 0`` it uses ``N(w) = erfcx(-w / sqrt(2)) exp(-w^2 / 2) / 2``, so that the two
    large exponents of the reflection terms never have to be added. Works for complex
    ``kh`` and ``w`` (``gauss`` real).
    """
    neg = np.real(w) < 0.0
    direct = np.exp(kh + log_ndtr(np.where(neg, 0.0, w)))
    mills = np.exp(gauss) * (0.5 * erfcx(-_SQRT_HALF * np.where(neg, w, 0.0)))
    return np.where(neg, mills, direct)


def _barrier(x: _BarrierInputs, right: str, direction: str, effect: str,
             breach_level: NDArray[np.float64] | None = None) -> NDArray[np.float64]:
    """Standard barrier price; ``breach_level`` (default: the barrier) decides the breach."""
    phi = 1.0 if right == "call" else -1.0
    eta = _DIRECTION[direction]
    knock_in = effect == "in"
    S, X, H, T, r, q, sig, R = x
    level = H if breach_level is None else breach_level
    b = r - q
    df = np.exp(-r * T)
    breached = np.less_equal(S, level) if eta > 0 else np.greater_equal(S, level)
    # below sigma sqrt(T) ~ 1e-7 the formulas lose digits to cancellation (3e-4 of a rebate at
    # 1e-8) while the deterministic path is exact to about 1e-9: use the latter there
    det = ~breached & ((T == 0.0) | (sig * np.sqrt(np.maximum(T, 0.0)) < _DET_VOL)
                       | (S == 0.0))
    never = ~breached & ~det & (H == 0.0)  # a down barrier at 0 is never reached
    reg = ~(breached | det | never)
    vanilla = _bsm(_Inputs(S, X, T, r, q, sig, np.ones_like(S)), phi, greeks=False)["price"]

    # Deterministic path S(t) = S e^{bt} (T == 0, sigma == 0, or S == 0 below an up barrier):
    # it crosses the barrier at tau = ln(H/S) / b if it gets there by T.
    with np.errstate(over="ignore"):
        fwd = S * np.exp(b * T)
    hit = det & ((fwd <= H) if eta > 0 else (fwd >= H))
    one = np.ones_like(S)
    tau = np.log(np.where(hit, H, one) / np.where(hit, S, np.e)) / np.where(hit, b, -1.0)
    det_value = (np.where(hit, vanilla, R * df) if knock_in
                 else np.where(hit, R * np.exp(-r * tau), vanilla))

    # Regular case: Reiner & Rubinstein (1991) [RR91b], in the notation of Haug 2007 [H07]
    # chapter 4 (eta = +1 down / -1 up, phi = +1 call / -1 put), with
    # mu = (b - sigma^2/2) / sigma^2 and lambda = sqrt(mu^2 + 2 r / sigma^2).
    # Substitutes (1.0) outside `reg` keep the formulas quiet there; those entries are dropped.
    X_pos = reg & (X > 0.0)
    S_s, H_s, T_s, sig_s = (np.where(reg, a, one) for a in (S, H, T, sig))
    X_s = np.where(X_pos, X, one)
    var = sig_s * sig_s
    s = sig_s * np.sqrt(T_s)
    m = b - 0.5 * var
    mu = m / var
    lam2 = m * m + 2.0 * r * var  # lambda^2 sigma^4; negative only for some r < 0
    h = np.log(H_s / S_s)  # < 0 for down, > 0 for up
    ell = np.where(X_pos, np.log(S_s / X_s), np.inf)  # ln(S/X); +inf for a zero strike
    ln_HX = np.log(H_s / X_s)
    Sq = S_s * np.exp((b - r) * T_s)
    Xr = np.where(X_pos, X_s, 0.0) * np.exp(-r * T_s)
    with np.errstate(all="ignore"):
        # Terms of branches that do not apply to an entry may overflow; each term of the
        # branch that applies is bounded (a discounted probability, or the asset's value
        # times one), and the unused ones are discarded by np.where below.
        ms = (1.0 + mu) * s
        x1 = ell / s + ms
        x2 = -h / s + ms
        y1 = np.where(X_pos, (2.0 * h + ell) / s + ms, np.inf)
        y2 = h / s + ms
        # exp(k h) N(w) for the reflected terms, with k h - w^2/2 simplified by hand:
        # y1: -x1^2/2 - 2 h ln(H/X) / s^2,  y1 - s: -(x1 - s)^2/2 - 2 h ln(H/X) / s^2,
        # y2: -x2^2/2,  y2 - s: -(x2 - s)^2/2,  z and z - 2 lambda s: -(x2 - s)^2/2 - r T.
        cross = np.where(X_pos, 2.0 * h * ln_HX / (s * s), np.inf)
        A = phi * (Sq * ndtr(phi * x1) - Xr * ndtr(phi * (x1 - s)))
        B = phi * (Sq * ndtr(phi * x2) - Xr * ndtr(phi * (x2 - s)))
        C = phi * (Sq * _tilted_ndtr(2.0 * (mu + 1.0) * h, eta * y1, -0.5 * x1 * x1 - cross)
                   - Xr * _tilted_ndtr(2.0 * mu * h, eta * (y1 - s),
                                       -0.5 * (x1 - s) ** 2 - cross))
        refl = _tilted_ndtr(2.0 * mu * h, eta * (y2 - s), -0.5 * (x2 - s) ** 2)
        D = phi * (Sq * _tilted_ndtr(2.0 * (mu + 1.0) * h, eta * y2, -0.5 * x2 * x2) - Xr * refl)
        if knock_in:  # rebate paid at expiry if the barrier is never hit
            extra = R * np.exp(-r * T_s) * (ndtr(eta * (x2 - s)) - refl)
        else:  # rebate paid when the barrier is hit: R E[e^{-r tau}; tau <= T]
            g = -0.5 * (x2 - s) ** 2 - r * T_s
            lam = np.sqrt(np.maximum(lam2, 0.0)) / var
            z = h / s + lam * s
            hit_pv = (_tilted_ndtr((mu + lam) * h, eta * z, g)
                      + _tilted_ndtr((mu - lam) * h, eta * (z - 2.0 * lam * s), g))
            if np.any(reg & (lam2 < 0.0)):
                # lambda = i w: the two terms are complex conjugates.
                w = np.sqrt(np.maximum(-lam2, 0.0)) / var
                hit_c = 2.0 * np.real(_tilted_ndtr((mu + 1j * w) * h, eta * (h / s + 1j * w * s),
                                                   g))
                hit_pv = np.where(lam2 < 0.0, hit_c, hit_pv)
            extra = R * hit_pv

        terms = (A, B, C, D)
        hi, lo = _BARRIER_TERMS[(right, direction, effect)]

        def combine(coefs: tuple[int, ...]) -> NDArray[np.float64]:
            total = np.zeros_like(S_s)
            for c, term in zip(coefs, terms, strict=True):
                if c:
                    total = total + c * term
            return total

        regular = np.where(X >= H, combine(hi), combine(lo)) + extra

    return np.select([breached, det, never],
                     [vanilla if knock_in else R, det_value,
                      R * df if knock_in else vanilla], default=regular)


def barrier_price(spot: ArrayLike, strike: ArrayLike, barrier: ArrayLike, T: ArrayLike,
                  r: ArrayLike, q: ArrayLike, sigma: ArrayLike, right: str, direction: str,
                  effect: str, rebate: ArrayLike = 0.0) -> FloatOrArray:
    """Price of a continuously monitored single-barrier European option with rebate.

    The eight standard barrier options (down/up, in/out, call/put) of Merton (1973) [M73]
    (down-and-out call) and Reiner & Rubinstein (1991) [RR91b], in the form of Haug 2007
    [H07] chapter 4 (standard barrier options): with ``b = r - q``, ``eta = +1`` (down) or
    ``-1`` (up), ``phi = +1`` (call) or ``-1`` (put), ``mu = (b - sigma^2/2) / sigma^2``,
    ``lambda = sqrt(mu^2 + 2r/sigma^2)`` and ``s = sigma sqrt(T)``,

    * ``A = phi S e^{(b-r)T} N(phi x1) - phi X e^{-rT} N(phi (x1 - s))``,
    * ``B``: as ``A`` with ``x2`` for ``x1``,
    * ``C = phi S e^{(b-r)T} (H/S)^{2(mu+1)} N(eta y1) - phi X e^{-rT} (H/S)^{2mu}
      N(eta (y1 - s))``,
    * ``D``: as ``C`` with ``y2`` for ``y1``,
    * ``E = R e^{-rT} (N(eta (x2 - s)) - (H/S)^{2mu} N(eta (y2 - s)))`` (knock-in rebate,
      paid at expiry if the barrier was never hit),
    * ``F = R ((H/S)^{mu+lambda} N(eta z) + (H/S)^{mu-lambda} N(eta (z - 2 lambda s)))``
      (knock-out rebate, paid at the hitting time),

    where ``x1 = ln(S/X)/s + (1+mu) s``, ``x2 = ln(S/H)/s + (1+mu) s``,
    ``y1 = ln(H^2/(S X))/s + (1+mu) s``, ``y2 = ln(H/S)/s + (1+mu) s`` and
    ``z = ln(H/S)/s + lambda s``. For example the down-and-out call is ``A - C + F`` if
    ``X >= H`` and ``B - D + F`` otherwise. The reflection terms are evaluated with a scaled
    complementary error function so that tiny volatilities do not overflow, and a complex
    ``lambda`` (possible when ``r < 0``) is handled exactly.

    Parameters
    ----------
    spot, strike : array_like
        Spot and strike, >= 0.
    barrier : array_like
        Barrier level ``H``, >= 0.
    T, r, q : array_like
        As for :func:`bsm_price`.
    sigma : array_like
        Black volatility, >= 0. With ``sigma == 0`` (or so small that ``sigma**2``
        underflows) the path ``S e^{(r-q)t}`` is deterministic and is valued exactly: a
        knock-out hit at ``tau = ln(H/S)/(r-q)`` pays ``rebate * e^{-r tau}``, a knock-in
        hit by ``T`` is the discounted intrinsic value of the forward.
    right : {"call", "put"}
    direction : {"down", "up"}
    effect : {"in", "out"}
    rebate : array_like, default 0.0
        Cash paid at the hitting time (knock-out) or at expiry if never hit (knock-in).

    Returns
    -------
    float or ndarray
        If the spot is already through the barrier (down: ``spot <= barrier``, up:
        ``spot >= barrier``) a knock-in is the vanilla :func:`bsm_price` and a knock-out is
        worth ``rebate`` (paid now, undiscounted). At ``T == 0`` this gives the intrinsic
        value of a knock-in or knock-out that is not knocked, and otherwise the rebate.

    Raises
    ------
    InputError
        If ``right``, ``direction`` or ``effect`` is not one of its values, or an argument
        is negative where it must not be, not finite, or the arguments do not broadcast.

    Examples
    --------
    >>> round(barrier_price(100.0, 100.0, 95.0, 0.5, 0.08, 0.04, 0.25, "call", "down", "out",
    ...                     rebate=3.0), 4)
    6.7924
    >>> barrier_price([90.0, 100.0], 100.0, 95.0, 0.5, 0.08, 0.04, 0.25, "call", "down",
    ...               "out", rebate=3.0).round(4)
    array([3.    , 6.7924])
    """
    source = "barrier_price"
    _barrier_kind(source, right, direction, effect)
    x = _barrier_inputs(source, spot, strike, barrier, T, r, q, sigma, rebate)
    return _out(_barrier(x, right, direction, effect))


def bgk_barrier(barrier: ArrayLike, sigma: ArrayLike, dt: ArrayLike,
                direction: str) -> FloatOrArray:
    """Continuity-corrected barrier for discrete monitoring (Broadie, Glasserman & Kou 1997).

    A barrier monitored every ``dt`` years is approximated by the continuously monitored
    barrier ``H e^{+beta sigma sqrt(dt)}`` (up) or ``H e^{-beta sigma sqrt(dt)}`` (down),
    shifted away from the spot, with ``beta = -zeta(1/2) / sqrt(2 pi) ~= 0.5826``
    (:data:`BGK_BETA`) [BGK97]. The error is ``o(1/sqrt(m))`` for ``m`` monitoring dates.

    Parameters
    ----------
    barrier : array_like
        Barrier level, >= 0.
    sigma : array_like
        Black volatility, >= 0.
    dt : array_like
        Time between monitoring dates in years, >= 0 (0 leaves the barrier unchanged).
    direction : {"down", "up"}

    Returns
    -------
    float or ndarray

    Raises
    ------
    InputError
        If ``direction`` is not "down"/"up", or an argument is negative or not finite.

    Examples
    --------
    >>> round(bgk_barrier(110.0, 0.3, 1.0 / 252.0, "up"), 4)
    111.2178
    """
    source = "bgk_barrier"
    _check_direction(direction, source)
    names = ("barrier", "sigma", "dt")
    H, sig, dt_ = _arrays(source, names, (barrier, sigma, dt), names)
    return _out(_bgk(H, sig, dt_, direction))


#: Stated accuracy of the Broadie-Glasserman-Kou shift, as a fraction of the price, for the
#: weekly cases of the tests: against the exact quadrature (``discrete_barrier_quadrature``)
#: the shift was off by 0.4% (a down-and-in put) and 2.4% (an up-and-out call whose barrier
#: is about four weekly standard deviations above spot).
BGK_ACCURACY = 0.03


def _bgk(H: NDArray[np.float64], sig: NDArray[np.float64], dt: NDArray[np.float64],
         direction: str) -> NDArray[np.float64]:
    return H * np.exp(-_DIRECTION[direction] * BGK_BETA * sig * np.sqrt(dt))


def discrete_barrier_price(spot: ArrayLike, strike: ArrayLike, barrier: ArrayLike,
                           T: ArrayLike, r: ArrayLike, q: ArrayLike, sigma: ArrayLike,
                           right: str, direction: str, effect: str, rebate: ArrayLike,
                           monitoring_count: ArrayLike) -> FloatOrArray:
    """Approximate price of a barrier option monitored at ``m`` equally spaced dates.

    :func:`barrier_price` with the barrier moved to :func:`bgk_barrier` for
    ``dt = T / monitoring_count`` (Broadie, Glasserman & Kou 1997 [BGK97]); the monitoring
    dates are ``T/m, 2T/m, ..., T``. The correction is proved for the option without rebate;
    with a rebate the same shifted barrier is used for the rebate terms, which is a
    heuristic (a discretely monitored knock-out pays its rebate at a monitoring date).
    Whether the spot is already through the barrier is decided against the unshifted
    barrier.

    Parameters
    ----------
    spot, strike, barrier, T, r, q, sigma, right, direction, effect, rebate
        As for :func:`barrier_price`.
    monitoring_count : array_like
        Number of monitoring dates ``m``, a positive whole number, or ``inf`` for
        continuous monitoring.

    Returns
    -------
    float or ndarray

    Raises
    ------
    InputError
        As for :func:`barrier_price`, or if ``monitoring_count`` is not a positive whole
        number or ``inf``.

    Examples
    --------
    >>> round(discrete_barrier_price(100.0, 100.0, 95.0, 0.5, 0.08, 0.04, 0.25, "call",
    ...                              "down", "out", 0.0, 126), 4)
    5.0485
    """
    source = "discrete_barrier_price"
    _barrier_kind(source, right, direction, effect)
    try:
        m = np.asarray(monitoring_count, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"must be a positive whole number, got {monitoring_count!r}",
                         source=source, key="monitoring_count") from None
    bad = np.isnan(m) | (m < 1.0) | (np.isfinite(m) & (m != np.floor(m)))
    if np.any(bad):
        raise InputError(f"must be a positive whole number or inf, got {m[bad].flat[0]}",
                         source=source, key="monitoring_count")
    x = _barrier_inputs(source, spot, strike, barrier, T, r, q, sigma, rebate)
    try:
        *arrays, m = np.broadcast_arrays(*x, m)
    except ValueError:
        raise InputError(f"does not broadcast with the other arguments, shape {m.shape}",
                         source=source, key="monitoring_count") from None
    x = _BarrierInputs(*arrays)
    shifted = _bgk(x.barrier, x.sigma, x.T / m, direction)
    return _out(_barrier(x._replace(barrier=shifted), right, direction, effect,
                         breach_level=x.barrier))


# --------------------------------------------------------------------------- gap options


def gap_option(spot: ArrayLike, strike: ArrayLike, trigger: ArrayLike, T: ArrayLike,
               r: ArrayLike, q: ArrayLike, sigma: ArrayLike, right: str) -> FloatOrArray:
    """Gap option: pays ``S_T - K`` if ``S_T > H`` (call) or ``K - S_T`` if ``S_T < H`` (put).

    The payoff may be negative (a call with ``H < K``). It is an asset-or-nothing minus ``K``
    cash-or-nothing options struck at the trigger ``H``:
    ``put = K e^{-rT} N(-d2) - S e^{-qT} N(-d1)``, ``call = S e^{-qT} N(d1) - K e^{-rT} N(d2)``,
    with ``d1 = (ln(S/H) + (r - q + sigma^2/2) T) / (sigma sqrt(T))``, ``d2 = d1 - sigma sqrt(T)``
    (Haug 2007 [H07], chapter 4, gap options). A maturity-only knock-in put at ``H`` with strike
    ``K >= H``, ``(K - S_T) 1{S_T < H}``, is a gap put.

    Examples
    --------
    >>> round(gap_option(100.0, 100.0, 100.0, 1.0, 0.05, 0.0, 0.2, "put"),  # = the vanilla put
    ...       4)
    5.5735
    >>> round(gap_option(100.0, 100.0, 70.0, 1.0, 0.05, 0.0, 0.2, "put"), 4)
    0.8851
    """
    phi = _phi(right, "gap_option")
    cash = digital_price(spot, trigger, T, r, q, sigma, right)
    asset = asset_or_nothing_price(spot, trigger, T, r, q, sigma, right)
    K = _as_float_array(strike, "strike", "gap_option")
    return _out(phi * (np.asarray(asset) - K * np.asarray(cash)))


# --------------------------------------------------------------------------- two assets


#: Gauss-Legendre nodes and weights (the negative half) for the bivariate normal CDF
_GAUSS_LEGENDRE = {n: tuple(a[: n // 2] for a in np.polynomial.legendre.leggauss(n))
                   for n in (6, 12, 20)}


def bivariate_normal_cdf(a: float, b: float, rho: float) -> float:
    """``P(X <= a, Y <= b)`` for standard normals with correlation ``rho``.

    Genz's algorithm (A. Genz, "Numerical computation of rectangular bivariate and trivariate
    normal and t probabilities", Statistics and Computing 14, 2004, 251-260, after Drezner and
    Wesolowsky 1990): Gauss-Legendre quadrature of Plackett's integral in ``arcsin(rho)`` for
    ``|rho| < 0.925``, and of an expansion around the singular limit above; accurate to about
    1e-15 (tested against an adaptive quadrature of Plackett's identity).

    Examples
    --------
    >>> round(bivariate_normal_cdf(0.0, 0.0, 0.5), 10)  # 1/4 + arcsin(rho) / (2 pi) = 1/3
    0.3333333333
    """
    if not -1.0 <= rho <= 1.0:
        raise InputError(f"must be in [-1, 1], got {rho}", source="bivariate_normal_cdf",
                         key="rho")
    if a == -np.inf or b == -np.inf:
        return 0.0
    if a == np.inf:
        return float(ndtr(b))
    if b == np.inf:
        return float(ndtr(a))
    return _upper_bivariate(-a, -b, rho)


def _upper_bivariate(h: float, k: float, r: float) -> float:
    """``P(X > h, Y > k)``, Genz's BVND."""
    two_pi = 2.0 * math.pi
    ar = abs(r)
    x, w = _GAUSS_LEGENDRE[6 if ar < 0.3 else 12 if ar < 0.75 else 20]
    hk = h * k
    if ar < 0.925:
        hs = (h * h + k * k) / 2.0
        asr = math.asin(r)
        s1 = np.sin(asr * (x + 1.0) / 2.0)
        s2 = np.sin(asr * (1.0 - x) / 2.0)
        total = np.sum(w * (np.exp((s1 * hk - hs) / (1.0 - s1 * s1))
                            + np.exp((s2 * hk - hs) / (1.0 - s2 * s2))))
        return float(total * asr / (2.0 * two_pi) + ndtr(-h) * ndtr(-k))
    if r < 0:
        k, hk = -k, -hk
    bvn = 0.0
    if ar < 1.0:
        as_ = (1.0 - r) * (1.0 + r)
        a = math.sqrt(as_)
        bs = (h - k) ** 2
        c = (4.0 - hk) / 8.0
        d = (12.0 - hk) / 16.0
        bvn = a * math.exp(-(bs / as_ + hk) / 2.0) * (
            1.0 - c * (bs - as_) * (1.0 - d * bs / 5.0) / 3.0 + c * d * as_ * as_ / 5.0)
        if hk > -160.0:
            b = math.sqrt(bs)
            bvn -= (math.exp(-hk / 2.0) * math.sqrt(two_pi) * float(ndtr(-b / a)) * b
                    * (1.0 - c * bs * (1.0 - d * bs / 5.0) / 3.0))
        a /= 2.0
        for sign in (-1.0, 1.0):
            xs = (a * (sign * x + 1.0)) ** 2
            rs = np.sqrt(1.0 - xs)
            asr = -(bs / xs + hk) / 2.0
            with np.errstate(under="ignore", over="ignore"):
                term = a * w * np.exp(asr) * (np.exp(-hk * (1.0 - rs) / (2.0 * (1.0 + rs))) / rs
                                              - (1.0 + c * xs * (1.0 + d * xs)))
            bvn += float(np.sum(np.where(asr > -100.0, term, 0.0)))
        bvn = -bvn / two_pi
    if r > 0:
        return bvn + float(ndtr(-max(h, k)))
    bvn = -bvn
    if k > h:
        bvn += float(ndtr(k) - ndtr(h))
    return bvn


def two_asset_min_max(s1: float, s2: float, strike: float, T: float, r: float, q1: float,
                      q2: float, sigma1: float, sigma2: float, rho: float, right: str,
                      combine: str) -> float:
    """European call or put on the minimum or maximum of two lognormal assets (Stulz 1982).

    With ``b_i = r - q_i``, ``sigma^2 = sigma1^2 + sigma2^2 - 2 rho sigma1 sigma2``,
    ``d = (ln(s1/s2) + (b1 - b2 + sigma^2/2) T) / (sigma sqrt(T))``,
    ``y_i = (ln(s_i/K) + (b_i + sigma_i^2/2) T) / (sigma_i sqrt(T))``,
    ``rho1 = (sigma1 - rho sigma2) / sigma``, ``rho2 = (sigma2 - rho sigma1) / sigma``:

    ``call_min = s1 e^{-q1 T} M(y1, -d; -rho1) + s2 e^{-q2 T} M(y2, d - sigma sqrt(T); -rho2)
    - K e^{-rT} M(y1 - sigma1 sqrt(T), y2 - sigma2 sqrt(T); rho)``,
    ``call_max = s1 e^{-q1 T} M(y1, d; rho1) + s2 e^{-q2 T} M(y2, -d + sigma sqrt(T); rho2)
    - K e^{-rT} (1 - M(-y1 + sigma1 sqrt(T), -y2 + sigma2 sqrt(T); rho))``
    ([S82]; [H07] chapter 5). Puts by parity with the zero-strike call (the discounted
    expected minimum or maximum): ``put = K e^{-rT} - call(0) + call(K)``.

    Examples
    --------
    >>> mn = two_asset_min_max(100, 100, 100, 1.0, 0.05, 0.02, 0.02, 0.25, 0.25, 0.5,
    ...                        "call", "min")
    >>> mx = two_asset_min_max(100, 100, 100, 1.0, 0.05, 0.02, 0.02, 0.25, 0.25, 0.5,
    ...                        "call", "max")
    >>> v = bsm_price(100, 100, 1.0, 0.05, 0.02, 0.25, "call")
    >>> abs(mn + mx - 2 * v) < 1e-10  # min + max = the two assets
    True
    """
    source = "two_asset_min_max"
    if combine not in ("min", "max"):
        raise InputError(f"must be 'min' or 'max', got {combine!r}", source=source,
                         key="combine")
    phi = _phi(right, source)
    if not (T > 0 and sigma1 > 0 and sigma2 > 0 and s1 > 0 and s2 > 0 and strike >= 0):
        raise InputError("needs positive spots, vols and time, and a non-negative strike",
                         source=source)
    rt = np.sqrt(T)
    sig = np.sqrt(max(sigma1**2 + sigma2**2 - 2 * rho * sigma1 * sigma2, 0.0))
    if sig <= 0:
        raise InputError("the two assets move together exactly (sigma of the ratio is 0)",
                         source=source, key="rho")
    b1, b2 = r - q1, r - q2
    d = (np.log(s1 / s2) + (b1 - b2 + 0.5 * sig**2) * T) / (sig * rt)
    rho1 = (sigma1 - rho * sigma2) / sig
    rho2 = (sigma2 - rho * sigma1) / sig
    f1, f2 = s1 * np.exp(-q1 * T), s2 * np.exp(-q2 * T)
    M = bivariate_normal_cdf

    def call(k: float) -> float:
        if k <= 0:
            if combine == "min":
                return float(f1 * ndtr(-d) + f2 * ndtr(d - sig * rt))
            return float(f1 * ndtr(d) + f2 * ndtr(-d + sig * rt))
        y1 = (np.log(s1 / k) + (b1 + 0.5 * sigma1**2) * T) / (sigma1 * rt)
        y2 = (np.log(s2 / k) + (b2 + 0.5 * sigma2**2) * T) / (sigma2 * rt)
        dfk = k * np.exp(-r * T)
        if combine == "min":
            return float(f1 * M(y1, -d, -rho1) + f2 * M(y2, d - sig * rt, -rho2)
                         - dfk * M(y1 - sigma1 * rt, y2 - sigma2 * rt, rho))
        return float(f1 * M(y1, d, rho1) + f2 * M(y2, -d + sig * rt, rho2)
                     - dfk * (1.0 - M(-y1 + sigma1 * rt, -y2 + sigma2 * rt, rho)))

    if phi > 0:
        return call(strike)
    return float(strike * np.exp(-r * T) - call(0.0) + call(strike))


# --------------------------------------------------------------------------- discrete barriers


def discrete_barrier_quadrature(spot: float, strike: float, barrier: float, times, T: float,
                                r: float, q: float, sigma: float, right: str, direction: str,
                                effect: str, points: int = 4001) -> float:
    """Exact price (to quadrature accuracy) of a barrier option monitored on given dates.

    No rebate. The knock-out value is carried backwards from expiry on a uniform grid of
    log-levels spanning the alive side of the barrier (the barrier a grid node): between two
    monitoring times it is integrated against the exact Gaussian transition density of the
    log-level (Simpson's rule, the convolution done by FFT), and at each monitoring time it is
    set to zero beyond the barrier ([AWDN03]). From the last monitoring time to expiry the
    value is the Black-Scholes-Merton vanilla. Knock-in = vanilla - knock-out. ``times`` are
    the monitoring times in years, ``0 < t_1 < ... <= T``. Accuracy improves with ``points``
    (odd); at 4001 it is about 1e-6 of the spot for the cases in the tests.

    Examples
    --------
    >>> v = discrete_barrier_quadrature(100.0, 100.0, 95.0, [0.25, 0.5], 0.5, 0.08, 0.04,
    ...                                 0.25, "call", "down", "out")
    >>> 5.0 < v < bsm_price(100.0, 100.0, 0.5, 0.08, 0.04, 0.25, "call")
    True
    """
    from scipy.signal import fftconvolve

    source = "discrete_barrier_quadrature"
    _barrier_kind(source, right, direction, effect)
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or not len(times) or times[0] <= 0 or np.any(np.diff(times) <= 0) \
            or times[-1] > T + 1e-12:
        raise InputError("monitoring times must increase strictly within (0, T]", source=source,
                         key="times")
    if points % 2 == 0 or points < 101:
        raise InputError(f"must be an odd number >= 101, got {points}", source=source,
                         key="points")
    vanilla = float(bsm_price(spot, strike, T, r, q, sigma, right))
    down = direction == "down"
    h, x0 = np.log(barrier), np.log(spot)
    if (down and spot <= barrier) or (not down and spot >= barrier):
        out = 0.0  # already knocked out
        return vanilla - out if effect == "in" else out
    mu = r - q - 0.5 * sigma**2
    width = 10.0 * sigma * np.sqrt(T) + abs(mu) * T
    far = x0 + width if down else x0 - width
    x = np.linspace(h, far, points) if down else np.linspace(far, h, points)
    dx = x[1] - x[0]
    w = np.full(points, 2.0)
    w[1::2] = 4.0
    w[0] = w[-1] = 1.0
    w *= dx / 3.0
    tail = T - times[-1]
    if tail > 1e-12:
        v = np.asarray(bsm_price(np.exp(x), strike, tail, r, q, sigma, right), dtype=float)
    else:
        k = np.exp(x) - strike
        v = np.maximum(k if right == "call" else -k, 0.0)
    # the barrier node itself carries the value's limit from the alive side: a single level
    # has no probability, and this keeps the integrand continuous up to the grid's end
    alive = x >= h if down else x <= h
    v = np.where(alive, v, 0.0)
    prev = np.concatenate([[0.0], times[:-1]])
    for t0, t1 in zip(prev[::-1][:-1], times[::-1][:-1], strict=True):
        dt = t1 - t0
        s = sigma * np.sqrt(dt)
        lag = np.arange(-(points - 1), points) * dx  # y - x over the grid
        kern = np.exp(-0.5 * ((lag - mu * dt) / s) ** 2) / (s * np.sqrt(2 * np.pi))
        # v_new(x_i) = sum_j w_j v(x_j) kern(x_j - x_i): a correlation, done as a convolution
        conv = fftconvolve(w * v, kern[::-1], mode="full")
        v = np.exp(-r * dt) * conv[points - 1: 2 * points - 1]
        v = np.where(alive, v, 0.0)
    dt = times[0]
    s = sigma * np.sqrt(dt)
    dens = np.exp(-0.5 * ((x - x0 - mu * dt) / s) ** 2) / (s * np.sqrt(2 * np.pi))
    out = float(np.exp(-r * dt) * np.sum(w * v * dens))
    return vanilla - out if effect == "in" else out

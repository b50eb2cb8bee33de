"""Semi-analytic European prices by Fourier inversion: the Heston (1993) model.

The characteristic function of the centred log-return ``X_T = ln(S_T / S_0) - (r - q) T`` under
Heston's dynamics (``dS = (r - q) S dt + sqrt(v) S dW``, ``dv = kappa (theta - v) dt +
sigma sqrt(v) dZ``, ``d<W, Z> = rho dt``) in the form of Albrecher, Mayer, Schoutens and
Tistaert (2007), "The little Heston trap": with ``b = kappa - rho sigma i u``,
``d = sqrt(b^2 + sigma^2 (i u + u^2))`` and ``g = (b - d) / (b + d)``,

    phi(u) = exp( kappa theta / sigma^2 [ (b - d) T - 2 ln((1 - g e^{-dT}) / (1 - g)) ]
                  + v0 (b - d) / sigma^2 (1 - e^{-dT}) / (1 - g e^{-dT}) ),

which keeps the complex logarithm on its principal branch for every maturity (the original
form with ``+d`` jumps branches at long maturities). The call follows from Lewis's (2000)
single integral,

    C = S e^{-qT} - sqrt(S K) e^{-(r+q) T / 2} / pi
        * int_0^inf Re[ e^{i u k} phi(u - i/2) ] / (u^2 + 1/4) du,   k = ln(S / K) + (r - q) T,

and the put from put-call parity. The integral is taken by adaptive quadrature on a finite
range beyond which the integrand is below ``1e-16`` of the price scale (it decays like
``exp(-u sqrt(v) T)``-type terms and ``1 / u^2``). Checked against QuantLib's
``AnalyticHestonEngine`` in ``tests/test_fourier.py``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate

from fairpath.errors import InputError


def heston_cf(u: complex | np.ndarray, T: float, v0: float, kappa: float, theta: float,
              sigma: float, rho: float) -> complex | np.ndarray:
    """``E[exp(i u X_T)]`` of the centred log-return under Heston (little-trap form)."""
    u = np.asarray(u, dtype=complex)
    if sigma == 0.0:  # deterministic variance: Gaussian with the integrated variance
        w = theta * T + (v0 - theta) * (1.0 - math.exp(-kappa * T)) / kappa if kappa > 0 \
            else v0 * T
        return np.exp(-0.5 * w * (1j * u + u * u))
    s2 = sigma * sigma
    b = kappa - rho * sigma * 1j * u
    d = np.sqrt(b * b + s2 * (1j * u + u * u))
    g = (b - d) / (b + d)
    e = np.exp(-d * T)
    c = kappa * theta / s2 * ((b - d) * T - 2.0 * np.log((1.0 - g * e) / (1.0 - g)))
    dd = (b - d) / s2 * (1.0 - e) / (1.0 - g * e)
    return np.exp(c + dd * v0)


def _check(spot, strike, T, v0, kappa, theta, sigma, rho) -> None:
    for name, v in (("spot", spot), ("strike", strike), ("T", T)):
        if not (math.isfinite(v) and v > 0):
            raise InputError(f"must be positive, got {v}", key=name)
    for name, v in (("v0", v0), ("kappa", kappa), ("theta", theta), ("vol_of_vol", sigma)):
        if not (math.isfinite(v) and v >= 0):
            raise InputError(f"must be a non-negative number, got {v}", key=name)
    if not (math.isfinite(rho) and -1.0 <= rho <= 1.0):
        raise InputError(f"must be between -1 and 1, got {rho}", key="spot_vol_correlation")


def heston_price(spot: float, strike: float, T: float, r: float, q: float, v0: float,
                 kappa: float, theta: float, vol_of_vol: float, spot_vol_correlation: float,
                 right: str = "call") -> float:
    """European price under Heston (see the module notes).

    Examples
    --------
    With no vol of vol and ``v0 = theta`` the variance stays at ``theta``: Black-Scholes-Merton
    at ``sqrt(theta)`` (a 20% vol call, spot and strike 100, 1y, r 5%: 10.4506).

    >>> round(heston_price(100.0, 100.0, 1.0, 0.05, 0.0, 0.04, 1.5, 0.04, 0.0, -0.7), 4)
    10.4506
    """
    if right not in ("call", "put"):
        raise InputError(f"must be 'call' or 'put', got {right!r}", key="right")
    _check(spot, strike, T, v0, kappa, theta, vol_of_vol, spot_vol_correlation)
    k = math.log(spot / strike) + (r - q) * T

    def integrand(u: float) -> float:
        phi = heston_cf(u - 0.5j, T, v0, kappa, theta, vol_of_vol, spot_vol_correlation)
        return float((np.exp(1j * u * k) * phi).real / (u * u + 0.25))

    # a finite range: beyond it the integrand (bounded by 1 / u^2 times |phi|) is negligible
    upper = 200.0 / math.sqrt(max(v0, theta, 1e-4) * T) + 50.0
    total, _ = integrate.quad(integrand, 0.0, upper, limit=2000, epsabs=1e-14, epsrel=1e-13)
    scale = math.sqrt(spot * strike) * math.exp(-(r + q) * T / 2.0) / math.pi
    call = spot * math.exp(-q * T) - scale * total
    if right == "call":
        return float(call)
    return float(call - spot * math.exp(-q * T) + strike * math.exp(-r * T))

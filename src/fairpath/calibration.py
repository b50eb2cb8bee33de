"""Heston parameters fitted to an asset's implied-volatility surface.

The five parameters of Heston's (1993) variance process (:mod:`fairpath.stochvol`) are fitted
to the quotes of an asset's ``vol_surface`` by bounded nonlinear least squares
(``scipy.optimize.least_squares``, trust-region reflective), from a small fixed set of starts
(so a fit is deterministic), keeping the best. The Feller ratio ``2 kappa theta /
vol_of_vol^2`` is reported, not imposed.

**What is fitted.** A surface's quotes are Black vols of the level less its escrowed cash
dividends, with moneyness against that level's forward (:func:`fairpath.market.attach_surface`):
each quote is a point ``(T, y = log(K / F(T)), sigma)``. Heston's price of a call on the
forward, divided by the discounted forward, depends on ``T``, ``y`` and the five parameters
only, so the fit works on those normalised prices: it depends on the surface (its times,
strikes, vols and forward ratios) and on nothing else, and the cache is keyed on exactly that.

**Errors fitted.** By default (``weights="vega"``) each residual is the model's normalised
price less the market's, divided by the market quote's Black vega: to first order the error in
vol. With ``weights="vol"`` each residual is the model's implied vol less the market's (a Black
inversion per quote and evaluation). Either way the fit is reported as the root mean square of
model minus market implied vol, in vol points (percent).

**The pricer.** Lewis's (2000) single integral with the characteristic function in the "little
Heston trap" form of Albrecher, Mayer, Schoutens and Tistaert (2007) (:mod:`fairpath.fourier`),
for every strike of one maturity at once: the characteristic function is evaluated once per
maturity on composite Gauss-Legendre nodes shared by all strikes. The panels start at half a
unit (the integrand's ``1 / (u^2 + 1/4)`` has poles at ``+-i/2``), double up to a width set by
the widest strike's oscillation and the return's standard deviation, and stop where the
integrand's modulus falls below ``CUTOFF_TOL``. The node set depends on the parameters only
through the expected total variance and the cut-off, both rounded to quarter powers of two, so
it is piecewise constant and the finite-difference Jacobian does not see it move. Agrees with
:func:`fairpath.fourier.heston_price` (adaptive quadrature) and QuantLib's
``AnalyticHestonEngine`` to about 1e-10 on a unit forward (``tests/test_calibration.py``).

A fit whose optimiser does not converge from any start, or whose error is above
``MAX_RMSE_VOL_POINTS``, is refused with one line saying how far it got.

Examples
--------
The at-the-money call over the discounted forward, against the adaptive quadrature of
:func:`fairpath.fourier.heston_price` on a unit spot with no carry:

>>> from fairpath.fourier import heston_price
>>> from fairpath.stochvol import HestonParams
>>> p = HestonParams(0.04, 1.5, 0.04, 0.5, -0.7)
>>> c = heston_calls([0.0], 1.0, p)
>>> ref = heston_price(1.0, 1.0, 1.0, 0.0, 0.0, *p.numbers)
>>> round(float(c[0]), 6), bool(abs(c[0] - ref) < 1e-10)
(0.070243, True)
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
import tempfile
import threading
import time
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy import optimize
from scipy.special import ndtr

from fairpath.errors import InputError
from fairpath.fourier import heston_cf
from fairpath.stochvol import (
    HESTON_KEYS,
    MAX_KAPPA,
    MAX_VARIANCE,
    MAX_VOL_OF_VOL,
    HestonParams,
)

#: A fit whose root mean square vol error is above this many vol points is not a fit: refused.
MAX_RMSE_VOL_POINTS = 3.0
#: Lower and upper bounds of (v0, kappa, theta, vol_of_vol, spot_vol_correlation) in the fit:
#: the upper ones are the largest values a market file may give (:mod:`fairpath.stochvol`);
#: the lower ones keep the characteristic function away from its degenerate limits.
LOWER = (1e-6, 1e-3, 1e-6, 1e-2, -0.999)
UPPER = (MAX_VARIANCE, MAX_KAPPA, MAX_VARIANCE, MAX_VOL_OF_VOL, 0.999)
#: The starts, as (kappa, vol_of_vol, |spot_vol_correlation|), with v0 the shortest tenor's and
#: theta the longest tenor's at-the-money variance, and the correlation's sign the skew's.
START_SHAPES = ((1.5, 0.6, 0.7), (4.0, 1.2, 0.5), (0.5, 0.3, 0.3))
#: Function evaluations allowed per start (each counted, Jacobian columns included).
MAX_EVALUATIONS_PER_START = 1500
#: Relative tolerances of the least-squares fit (cost, step and gradient).
FIT_TOL = 1e-10
#: Smallest market vega used to weight a price error (normalised units).
VEGA_FLOOR = 1e-8

#: Nodes per Gauss-Legendre panel of the pricer.
GL_NODES = 16
#: The integrand's modulus beyond which the pricer's range stops.
CUTOFF_TOL = 1e-12
#: Most panels per maturity (parameters so extreme that the integrand decays slower are cut
#: there; such points are far from any fit).
MAX_PANELS = 2048
_GL_X, _GL_W = np.polynomial.legendre.leggauss(GL_NODES)
#: The cut-off search: quarter powers of two times the return's inverse standard deviation.
_SCAN = 2.0 ** (np.arange(-8, 65) / 4.0)


# ---------------------------------------------------------------------------------------------
# The fast pricer
# ---------------------------------------------------------------------------------------------
def _total_variance(T: float, v0: float, kappa: float, theta: float) -> float:
    """``E[int_0^T v dt]`` under Heston."""
    kt = kappa * T
    frac = T if kt < 1e-12 else -math.expm1(-kt) / kappa
    return theta * T + (v0 - theta) * frac


@lru_cache(maxsize=4096)
def _nodes(scale_q: int, cut_q: int, width_cap: float) -> tuple[np.ndarray, np.ndarray]:
    """Composite Gauss-Legendre nodes and weights on ``[0, U]``, ``U = 2^(cut_q / 4)``, panels
    from 0.5 doubling up to ``min(width_cap, 2 s)`` with ``s = 2^(scale_q / 4)``."""
    s = 2.0 ** (scale_q / 4.0)
    upper = 2.0 ** (cut_q / 4.0)
    hmax = min(width_cap, 2.0 * s)
    edges = [0.0]
    h = min(0.5, hmax)
    while edges[-1] < upper and len(edges) <= MAX_PANELS:
        edges.append(min(edges[-1] + h, upper))
        h = min(2.0 * h, hmax, max(0.5, 0.5 * edges[-1]))
    e = np.asarray(edges)
    a, b = e[:-1, None], e[1:, None]
    u = (0.5 * (b - a) * _GL_X + 0.5 * (a + b)).ravel()
    w = (0.5 * (b - a) * _GL_W).ravel()
    u.setflags(write=False)
    w.setflags(write=False)
    return u, w


def _quadrature(T: float, p: Sequence[float], ymax: float) -> tuple[int, int, float]:
    """The node set of one maturity for the parameters ``p`` (see the module notes), as the
    key of :func:`_nodes`."""
    v0, kappa, theta, sigma, rho = p
    w = max(_total_variance(T, v0, kappa, theta), 1e-10)
    scale_q = int(round(-2.0 * math.log2(w)))  # 4 log2(1 / sqrt(w))
    s = 2.0 ** (scale_q / 4.0)
    grid = s * _SCAN
    mod = np.abs(heston_cf(grid - 0.5j, T, v0, kappa, theta, sigma, rho)) / (grid * grid + 0.25)
    big = np.nonzero(~(mod <= CUTOFF_TOL))[0]
    k = min(int(big[-1]) + 1, len(grid) - 1) if len(big) else 0
    cut_q = scale_q + int(round(4.0 * math.log2(_SCAN[k])))
    width_cap = 6.0 / max(ymax, 0.05)
    return scale_q, cut_q, round(width_cap, 6)


@lru_cache(maxsize=1024)
def _phases(node_key: tuple[int, int, float], y_bytes: bytes
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The nodes and weights of ``node_key`` and ``cos(u y)``, ``sin(u y)`` for the strikes
    ``y`` (kept: the node set repeats across a fit's evaluations)."""
    u, w = _nodes(*node_key)
    y = np.frombuffer(y_bytes, dtype=float)
    uy = np.outer(y, u)
    return u, w / (u * u + 0.25), np.cos(uy), np.sin(uy)


def heston_calls(y, T: float, params: HestonParams | Sequence[float]) -> np.ndarray:
    """Heston call prices over the discounted forward, ``C / (P(0, T) F(T))``, at forward
    log-moneyness ``y = log(K / F(T))`` (an array: every strike of maturity ``T`` at once).

    Lewis's (2000) integral ``1 - e^{y/2} / pi int_0^inf Re[e^{-i u y} phi(u - i/2)] /
    (u^2 + 1/4) du`` on the shared nodes of the module notes.
    """
    p = params.numbers if isinstance(params, HestonParams) else tuple(float(x) for x in params)
    y = np.atleast_1d(np.asarray(y, dtype=float))
    key = _quadrature(float(T), p, float(np.max(np.abs(y))))
    u, w, cos, sin = _phases(key, np.ascontiguousarray(y).tobytes())
    f = heston_cf(u - 0.5j, float(T), *p) * w
    integral = cos @ f.real + sin @ f.imag  # Re[e^{-i u y} f]
    return 1.0 - np.exp(0.5 * y) / math.pi * integral


def heston_prices(spot: float, strikes, T: float, r: float, q: float,
                  params: HestonParams | Sequence[float], right: str = "call") -> np.ndarray:
    """European prices under Heston for many strikes of one maturity (flat ``r`` and ``q``,
    continuous compounding): :func:`heston_calls` scaled by the discounted forward, puts by
    put-call parity. The vectorised counterpart of :func:`fairpath.fourier.heston_price`."""
    if right not in ("call", "put"):
        raise InputError(f"must be 'call' or 'put', got {right!r}", key="right")
    k = np.asarray(strikes, dtype=float)
    fwd = spot * math.exp((r - q) * T)
    df = math.exp(-r * T)
    c = heston_calls(np.log(k / fwd), T, params)
    call = df * fwd * c
    return call if right == "call" else call - df * (fwd - k)


# ---------------------------------------------------------------------------------------------
# Black on a unit forward: price, vega, implied vol
# ---------------------------------------------------------------------------------------------
def _otm_black(y: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """Out-of-the-money Black price on a unit forward (call for ``y >= 0``, put below) at total
    standard deviation ``sd``."""
    d1 = -y / sd + 0.5 * sd
    d2 = d1 - sd
    call = ndtr(d1) - np.exp(y) * ndtr(d2)
    put = np.exp(y) * ndtr(-d2) - ndtr(-d1)
    return np.where(y >= 0, call, put)


def _black_vega_sd(y: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """``d price / d sd`` on a unit forward (the same for calls and puts)."""
    d1 = -y / sd + 0.5 * sd
    return np.exp(-0.5 * d1 * d1) / math.sqrt(2.0 * math.pi)


def implied_vols(calls: np.ndarray, y: np.ndarray, T: np.ndarray,
                 guess: np.ndarray | None = None) -> np.ndarray:
    """Black vols of calls over the discounted forward at log-moneyness ``y`` and maturity
    ``T`` (arrays of one shape): safeguarded Newton on the out-of-the-money price (bisection
    whenever a step leaves the bracket), vectorised. NaN where the price is outside the
    no-arbitrage bounds."""
    calls, y, T = (np.asarray(a, dtype=float) for a in np.broadcast_arrays(calls, y, T))
    otm = np.where(y >= 0, calls, calls - (1.0 - np.exp(y)))
    upper = np.where(y >= 0, 1.0, np.exp(y))
    ok = (otm > 0) & (otm < upper) & np.isfinite(otm)
    lo = np.full(otm.shape, 1e-8)
    hi = np.full(otm.shape, 10.0 * np.sqrt(np.maximum(T, 1e-8)) + 10.0)
    sd = (np.sqrt(T) * guess if guess is not None
          else np.sqrt(2.0 * np.abs(y)) + 0.2).astype(float)
    sd = np.clip(sd, 1e-4, hi * 0.5)
    for _ in range(100):
        f = _otm_black(y, sd) - otm
        lo = np.where(f < 0, sd, lo)
        hi = np.where(f > 0, sd, hi)
        vega = _black_vega_sd(y, sd)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(vega > 0, f / vega, np.inf)
        new = sd - step
        bad = ~((new > lo) & (new < hi))
        new = np.where(bad, 0.5 * (lo + hi), new)
        done = np.abs(new - sd) <= 1e-15 * np.maximum(sd, 1.0)
        sd = new
        if np.all(done | ~ok):
            break
    return np.where(ok, sd / np.sqrt(T), np.nan)


# ---------------------------------------------------------------------------------------------
# The fit
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class FitQuote:
    """One surface quote and the fitted model's implied vol there."""

    tenor: str
    moneyness: float
    market_vol: float
    model_vol: float

    @property
    def error_vol_points(self) -> float:
        """Model minus market implied vol, in vol points (percent)."""
        return 100.0 * (self.model_vol - self.market_vol)


@dataclass(frozen=True, slots=True)
class HestonFit:
    """The result of :func:`fit_heston`: the parameters (``calibrated=True``), the fit per
    quote, its RMSE in vol points, the Feller ratio, and how the optimiser got there."""

    asset: str
    params: HestonParams
    rmse_vol_points: float
    quotes: tuple[FitQuote, ...]
    evaluations: int
    status: str
    weights: str
    starts: int
    seconds: float

    @property
    def feller(self) -> float:
        """``2 kappa theta / vol_of_vol^2`` (at 1 or above the variance never reaches 0)."""
        return self.params.feller

    @property
    def max_error_vol_points(self) -> float:
        return max(abs(q.error_vol_points) for q in self.quotes)

    def to_dict(self, quotes: bool = True) -> dict:
        out = {k: getattr(self.params, k) for k in HESTON_KEYS}
        out.update(rmse_vol_points=self.rmse_vol_points, feller=self.feller,
                   max_error_vol_points=self.max_error_vol_points,
                   evaluations=self.evaluations, status=self.status, weights=self.weights,
                   seconds=self.seconds)
        if quotes:
            out["quotes"] = [{"tenor": q.tenor, "moneyness": q.moneyness,
                              "market_vol": q.market_vol, "model_vol": q.model_vol,
                              "error_vol_points": q.error_vol_points} for q in self.quotes]
        return out

    def table(self) -> str:
        """The fit as text: the parameters, the Feller ratio, one row per quote, the RMSE."""
        p = self.params
        feller = self.feller
        lines = [
            f"{self.asset}: Heston fit to its vol_surface ({len(self.quotes)} quotes, "
            f"{self.weights}-weighted, {self.starts} starts, {self.evaluations} evaluations, "
            f"{self.seconds:.2f} s)",
            f"  v0 = {p.v0:.6g}   kappa = {p.kappa:.6g}   theta = {p.theta:.6g}   "
            f"vol_of_vol = {p.vol_of_vol:.6g}   spot_vol_correlation = "
            f"{p.spot_vol_correlation:.6g}",
            f"  Feller ratio 2 kappa theta / vol_of_vol^2 = {feller:.3g}"
            + (" (below 1: the variance can reach zero)" if feller < 1 else ""),
            "",
            f"  {'tenor':<6} {'strike':>7} {'market vol':>11} {'model vol':>10} "
            f"{'error (vol pts)':>16}",
        ]
        for q in self.quotes:
            lines.append(f"  {q.tenor:<6} {q.moneyness:>7.4g} {100 * q.market_vol:>10.2f}% "
                         f"{100 * q.model_vol:>9.2f}% {q.error_vol_points:>+16.2f}")
        lines.append(f"  RMSE {self.rmse_vol_points:.3f} vol points (largest error "
                     f"{self.max_error_vol_points:.2f})")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.table()


@dataclass(frozen=True)
class _Smile:
    """A surface's quotes as the fit sees them: per tenor, ``T``, ``y`` and the vols."""

    times: tuple[float, ...]
    y: tuple[np.ndarray, ...]
    vols: tuple[np.ndarray, ...]
    names: tuple[str, ...]
    strikes: tuple[float, ...]

    @classmethod
    def of(cls, surface) -> _Smile:
        fr = surface.fwd_ratio or tuple(1.0 for _ in surface.times)
        k = np.asarray(surface.strikes, dtype=float)
        names = surface.tenor_names or tuple(f"{t:g}y" for t in surface.times)
        return cls(tuple(float(t) for t in surface.times),
                   tuple(np.log(k / f) for f in fr),
                   tuple(np.asarray(row, dtype=float) for row in surface.vols),
                   tuple(names), tuple(float(x) for x in surface.strikes))

    @property
    def flat(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``T``, ``y`` and vol of every quote, tenor by tenor."""
        T = np.concatenate([np.full(len(y), t) for t, y in zip(self.times, self.y,
                                                                 strict=True)])
        return T, np.concatenate(self.y), np.concatenate(self.vols)

    def model_calls(self, p) -> np.ndarray:
        return np.concatenate([heston_calls(y, t, p) for t, y in zip(self.times, self.y,
                                                                    strict=True)])


def _starts(smile: _Smile) -> list[tuple[float, ...]]:
    """The fixed starts of the module notes, from the surface's at-the-money variances and
    the sign of its skew."""
    def atm_var(i):
        return float(np.interp(0.0, smile.y[i], smile.vols[i])) ** 2

    v_short, v_long = atm_var(0), atm_var(len(smile.times) - 1)
    # the sign of the skew: vol against log-moneyness at the longest tenor
    slope = float(np.polyfit(smile.y[-1], smile.vols[-1], 1)[0])
    sign = -1.0 if slope <= 0 else 1.0
    return [(v_short, k, v_long, s, sign * r) for k, s, r in START_SHAPES]


def _clip_start(x) -> np.ndarray:
    lo, hi = np.asarray(LOWER), np.asarray(UPPER)
    x = np.asarray(x, dtype=float)
    return np.minimum(np.maximum(x, lo + 1e-9 * (1 + np.abs(lo))), hi - 1e-9 * (1 + np.abs(hi)))


def _round_params(x) -> tuple[float, ...]:
    """Eight significant digits (what a file keeps; the fit is reported at these values)."""
    return tuple(float(f"{v:.8g}") for v in x)


def fit_heston(market, name: str, *, weights: str = "vega",
               starts: int | Sequence[Sequence[float] | HestonParams] | None = None
               ) -> HestonFit:
    """Fit Heston's five parameters to the ``vol_surface`` of asset ``name``.

    Parameters
    ----------
    market : Market
    name : str
        The asset; it must have a surface.
    weights : {"vega", "vol"}
        Vega-weighted price errors (default) or implied-vol errors.
    starts : int or sequence, optional
        The number of fixed starts of :data:`START_SHAPES` to use (default all), or explicit
        starts (``HestonParams`` or 5-tuples ``(v0, kappa, theta, vol_of_vol,
        spot_vol_correlation)``), tried in order; the best converged fit is kept.

    Raises
    ------
    InputError
        The asset has no surface, or no start converged, or the best fit's RMSE is above
        :data:`MAX_RMSE_VOL_POINTS` (naming the market file and ``assets.NAME.vol_surface``
        and how far the fit got).

    Examples
    --------
    >>> import fairpath as fp
    >>> m = fp.load_market("markets/demo_smile.toml")
    >>> fit = fit_heston(m, "VIREO")
    >>> fit.rmse_vol_points < 1.0 and fit.params.calibrated
    True
    """
    if weights not in ("vega", "vol"):
        raise InputError(f"must be 'vega' or 'vol', got {weights!r}", key="weights")
    asset = market.asset(name)
    key = f"assets.{name}.vol_surface"
    if asset.surface is None:
        raise InputError(f"{name} has no vol_surface to fit Heston's parameters to",
                         source=market.source, key=key)
    smile = _Smile.of(asset.surface)
    if starts is None or isinstance(starts, int):
        trials = _starts(smile)[:starts]
        if not trials:
            raise InputError("give at least one start", key="starts")
    else:
        trials = [s.numbers if isinstance(s, HestonParams) else tuple(s) for s in starts]
    T, y, vols = smile.flat
    sd = vols * np.sqrt(T)
    market_calls = _otm_black(y, sd) + np.where(y >= 0, 0.0, 1.0 - np.exp(y))
    vega = np.maximum(_black_vega_sd(y, sd) * np.sqrt(T), VEGA_FLOOR)  # d price / d vol
    count = [0]
    seen = [math.inf, None]  # the lowest cost evaluated and where: how far a failed fit got

    def residuals(x):
        count[0] += 1
        c = smile.model_calls(x)
        if weights == "vega":
            r = (c - market_calls) / vega
        else:
            iv = implied_vols(c, y, T, guess=vols)
            # where the model's price has no implied vol (outside the bounds), its
            # vega-weighted price error stands in
            r = np.where(np.isfinite(iv), iv - vols, (c - market_calls) / vega)
        # parameters so extreme that the pricer overflows: a large error (1000 vol points)
        r = np.where(np.isfinite(r), r, 10.0)
        cost = float(r @ r)
        if cost < seen[0]:
            seen[0], seen[1] = cost, tuple(x)
        return r

    t0 = time.perf_counter()
    best = None
    for x0 in trials:
        start_count = count[0]

        def limited(x, _start=start_count):
            if count[0] - _start >= MAX_EVALUATIONS_PER_START:
                raise _Budget
            return residuals(x)

        try:
            res = optimize.least_squares(limited, _clip_start(x0), bounds=(LOWER, UPPER),
                                         method="trf", x_scale="jac", ftol=FIT_TOL,
                                         xtol=FIT_TOL, gtol=FIT_TOL, max_nfev=10_000)
        except _Budget:
            continue
        if res.status > 0 and (best is None or res.cost < best[0]):
            best = (float(res.cost), tuple(res.x), str(res.message))
    seconds = time.perf_counter() - t0
    evaluations = count[0]
    if best is None:
        how = ("" if seen[1] is None else
               f"; best RMSE reached {_rmse(smile, seen[1]):.2f} vol points")
        raise InputError(f"the Heston fit did not converge from any of {len(trials)} starts "
                         f"({evaluations} evaluations{how})", source=market.source, key=key)
    x = _round_params(best[1])
    c = smile.model_calls(x)
    model_vols = implied_vols(c, y, T, guess=vols)
    err = model_vols - vols
    rmse = float(100.0 * np.sqrt(np.mean(err * err))) if np.all(np.isfinite(err)) else math.inf
    if not rmse <= MAX_RMSE_VOL_POINTS:
        raise InputError(f"the Heston fit is too poor to use: RMSE {rmse:.2f} vol points "
                         f"(at most {MAX_RMSE_VOL_POINTS:g}) after {evaluations} evaluations "
                         f"from {len(trials)} starts", source=market.source, key=key)
    rows = []
    i = 0
    for name_t, row in zip(smile.names, smile.vols, strict=True):
        for k, v in zip(smile.strikes, row, strict=True):
            rows.append(FitQuote(name_t, k, float(v), float(model_vols[i])))
            i += 1
    params = HestonParams(*x, calibrated=True)
    return HestonFit(name, params, rmse, tuple(rows), evaluations, best[2], weights,
                     len(trials), seconds)


class _Budget(Exception):
    """A start used up its evaluations."""


def _rmse(smile: _Smile, x) -> float:
    T, y, vols = smile.flat
    iv = implied_vols(smile.model_calls(x), y, T, guess=vols)
    return float(100.0 * np.sqrt(np.nanmean((iv - vols) ** 2)))


# ---------------------------------------------------------------------------------------------
# Cache, model hook and calibrate-on-load
# ---------------------------------------------------------------------------------------------
_CACHE: dict = {}
_LOCK = threading.Lock()
#: Fits kept per process (the oldest is dropped first).
CACHE_SIZE = 256


def _cache_key(surface, weights: str, starts) -> tuple:
    """Everything a fit depends on: the surface's times, strikes, vols and forward ratios
    (forwards and discounts at its tenors enter only through those ratios; the spot does not
    enter, strikes being fractions of it), the weights and the starts."""
    return (surface.times, surface.strikes, surface.vols, surface.fwd_ratio, weights, starts)


def fitted(market, name: str, *, weights: str = "vega", starts=None) -> HestonFit:
    """:func:`fit_heston`, cached on everything the fit depends on: the same surface fitted
    again in a run costs nothing."""
    surface = market.asset(name).surface
    if surface is None:
        return fit_heston(market, name, weights=weights, starts=starts)  # raises, naming it
    frozen = starts if starts is None or isinstance(starts, int) else tuple(
        s.numbers if isinstance(s, HestonParams) else tuple(float(v) for v in s)
        for s in starts)
    key = _cache_key(surface, weights, frozen)
    with _LOCK:
        hit = _CACHE.get(key)
    if hit is not None:
        return dataclasses.replace(hit, asset=name)
    fit = fit_heston(market, name, weights=weights, starts=frozen)
    with _LOCK:
        if len(_CACHE) >= CACHE_SIZE:
            _CACHE.pop(next(iter(_CACHE)))
        _CACHE[key] = fit
    return fit


def heston_for(market, name: str) -> HestonParams:
    """The Heston parameters of asset ``name``: its own when the market gives them (from the
    file, or fitted on load with ``calibrate = true``), else the cached fit to its current
    surface (a bumped surface gets its own fit), else an InputError naming
    ``assets.NAME.heston``."""
    a = market.asset(name)
    if a.heston is not None:
        return a.heston
    if a.surface is None:
        raise InputError(f"the Heston model needs {name}'s variance process: give "
                         f"[assets.{name}.heston] (v0, kappa, theta, vol_of_vol, "
                         "spot_vol_correlation), or a vol_surface to fit them to",
                         source=market.source, key=f"assets.{name}.heston")
    return fitted(market, name).params


def calibrate_on_load(market):
    """The market with every asset that asks for it (``calibrate = true``) given the fit of
    its surface (``heston`` set, ``calibrated=True``)."""
    assets = []
    for a in market.assets:
        if a.heston_calibrate:
            a = dataclasses.replace(a, heston=fitted(market, a.name).params)
        assets.append(a)
    return dataclasses.replace(market, assets=tuple(assets))


# ---------------------------------------------------------------------------------------------
# Writing a fitted market file
# ---------------------------------------------------------------------------------------------
#: The comment line written above the fitted numbers (replaced on the next write).
FITTED_MARK = "# fitted by fairpath calibrate"
_BARE = re.compile(r"[A-Za-z0-9_-]+")


@dataclass
class _Statement:
    """A line-level view of a TOML file: a table header or a key/value statement."""

    kind: str  # "header" or "value"
    keys: tuple[str, ...] | None  # the header's table path, or the value's dotted key
    first: int  # its first and last line (a value may span lines: multi-line arrays)
    last: int


def _parse_keys(text: str) -> tuple[str, ...] | None:
    """A dotted key (``assets."NORDA".heston``) as a tuple, or None if it is not one."""
    keys, i, n = [], 0, len(text)
    while True:
        while i < n and text[i] in " \t":
            i += 1
        if i < n and text[i] in "\"'":
            q = text[i]
            j = text.find(q, i + 1)
            while q == '"' and j > 0 and text[j - 1] == "\\":
                j = text.find(q, j + 1)
            if j < 0:
                return None
            try:
                keys.append(json.loads(text[i:j + 1]) if q == '"' else text[i + 1:j])
            except ValueError:
                return None
            i = j + 1
        else:
            m = _BARE.match(text, i)
            if m is None:
                return None
            keys.append(m.group())
            i = m.end()
        while i < n and text[i] in " \t":
            i += 1
        if i == n:
            return tuple(keys)
        if text[i] != ".":
            return None
        i += 1


def _statements(lines: list[str]) -> list[_Statement]:
    """Headers and key/value statements of a TOML text, with the lines each spans (brackets
    and braces counted outside strings and comments, multi-line strings skipped)."""
    out: list[_Statement] = []
    depth, ml, current = 0, None, None
    for n, line in enumerate(lines):
        i = 0
        if depth == 0 and ml is None:
            stripped = line.strip()
            if not stripped or stripped.startswith("#"):
                continue
            if stripped.startswith("["):
                double = stripped.startswith("[[")
                close = stripped.find("]]" if double else "]")
                keys = _parse_keys(stripped[2 if double else 1:close]) if close > 0 else None
                out.append(_Statement("header", keys, n, n))
                continue
            eq = _find_equals(line)
            keys = _parse_keys(line[:eq]) if eq >= 0 else None
            current = _Statement("value", keys, n, n)
            out.append(current)
            i = eq + 1 if eq >= 0 else len(line)
        # scan the value's characters for brackets, strings and comments
        while i < len(line):
            if ml is not None:
                j = line.find(ml, i)
                if j < 0:
                    i = len(line)
                    break
                ml, i = None, j + 3
                continue
            ch = line[i]
            if line.startswith('"""', i) or line.startswith("'''", i):
                ml, i = line[i:i + 3], i + 3
                continue
            if ch in "\"'":
                j = i + 1
                while j < len(line) and line[j] != ch:
                    j += 2 if ch == '"' and line[j] == "\\" else 1
                i = j + 1
                continue
            if ch == "#":
                break
            if ch in "[{":
                depth += 1
            elif ch in "]}":
                depth -= 1
            i += 1
        if current is not None:
            current.last = n
    return out


def _find_equals(line: str) -> int:
    """The position of a statement's ``=`` (outside a quoted key), or -1."""
    i, q = 0, None
    while i < len(line):
        ch = line[i]
        if q:
            if ch == q:
                q = None
        elif ch in "\"'":
            q = ch
        elif ch == "=":
            return i
        i += 1
    return -1


def _toml_key(name: str) -> str:
    return name if _BARE.fullmatch(name) else json.dumps(name)


def _fitted_lines(fit: HestonFit) -> list[str]:
    p = fit.params
    return [f"{FITTED_MARK}: RMSE {fit.rmse_vol_points:.3f} vol points, Feller ratio "
            f"{fit.feller:.3g}"] + [f"{k} = {getattr(p, k)!r}" for k in HESTON_KEYS]


def fitted_text(text: str, fits: dict[str, HestonFit], *, source: str | None = None) -> str:
    """The market file's ``text`` with each fitted asset's Heston parameters written in: its
    ``[assets.NAME.heston]`` table's ``calibrate = true`` (or older numbers) replaced by the
    five numbers, everything else kept (comments, ``mixing``); a table added after the asset's
    own tables when it has none; an inline ``heston = {...}`` rewritten inline."""
    lines = text.splitlines()
    for name, fit in fits.items():
        stmts = _statements(lines)
        headers = [s for s in stmts if s.kind == "header"]
        where = "assets." + _toml_key(name)

        def block(keys, _stmts=stmts):
            """The statements under header ``keys`` (the header first), or []."""
            out, inside = [], False
            for s in _stmts:
                if s.kind == "header":
                    inside = s.keys == keys
                    if inside:
                        out.append(s)
                elif inside:
                    out.append(s)
            return out

        own = block(("assets", name, "heston"))
        body = block(("assets", name))
        inline = [s for s in body[1:] if s.keys and s.keys[0] == "heston"]
        new = _fitted_lines(fit)
        if own:
            drop = {n for s in own[1:] if s.keys and len(s.keys) == 1
                    and s.keys[0] in (*HESTON_KEYS, "calibrate")
                    for n in range(s.first, s.last + 1)}
            head = own[0].first
            end = next((s.first for s in headers if s.first > head), len(lines))
            drop |= {n for n in range(head + 1, end)
                     if lines[n].strip().startswith(FITTED_MARK)}
            lines = ([*lines[:head + 1], *new]
                     + [x for n, x in enumerate(lines) if n > head and n not in drop])
        elif inline:
            data = tomllib.loads("\n".join(lines))
            extra = {k: v for k, v in data["assets"][name]["heston"].items()
                     if k not in (*HESTON_KEYS, "calibrate")}
            items = [f"{k} = {getattr(fit.params, k)!r}" for k in HESTON_KEYS]
            items += [f"{_toml_key(k)} = {v!r}" for k, v in extra.items()
                      if isinstance(v, int | float) and not isinstance(v, bool)]
            if len(items) != len(HESTON_KEYS) + len(extra):
                raise InputError("cannot rewrite this inline heston table; write it as an "
                                 f"[{where}.heston] table", source=source, key=f"{where}.heston")
            first = inline[0]
            drop = {n for s in inline for n in range(s.first, s.last + 1)}
            lines = [x if n != first.first else "heston = { " + ", ".join(items) + " }"
                     for n, x in enumerate(lines) if n not in drop or n == first.first]
        else:
            mine = [s for s in headers if s.keys and s.keys[:2] == ("assets", name)]
            if not mine:
                raise InputError(f"cannot place the fitted parameters: the file defines {name} "
                                 f"without an [{where}] table", source=source, key=where)
            # after the asset's last table, before the blank and comment lines that lead
            # into the next table
            after = [s for s in headers if s.first > mine[-1].first]
            end = after[0].first if after else len(lines)
            while end > mine[-1].first + 1 and (not lines[end - 1].strip()
                                                or lines[end - 1].lstrip().startswith("#")):
                end -= 1
            lines = [*lines[:end], "", f"[{where}.heston]", *new, *lines[end:]]
    return "\n".join(lines) + "\n"


def write_fitted(market_path: str | Path, out_path: str | Path,
                 fits: dict[str, HestonFit], load_market) -> None:
    """Write the market file at ``market_path`` with the fitted Heston blocks to
    ``out_path`` (:func:`fitted_text`), atomically: a temporary file beside the target is
    written, loaded back by ``load_market`` (:func:`fairpath.market.load_market`, handed in:
    the market module calls this one on load) and every fitted asset must read back the same
    five numbers, then renamed over the target; on any error nothing is left behind."""
    src, out = Path(market_path), Path(out_path)
    try:
        text = src.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror or exc}", source=str(src)) from None
    new = fitted_text(text, fits, source=str(src))
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("no such folder to write the fitted market into", source=str(out))
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{out.stem}-", suffix=".toml", dir=folder)
    except OSError as exc:
        raise InputError(f"cannot write: {exc.strerror or exc}", source=str(out)) from None
    tmp_path = Path(tmp)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(new)
            fh.flush()
            os.fsync(fh.fileno())
        try:
            back = load_market(tmp_path)
        except InputError as exc:
            raise InputError(f"the fitted market would not load back: {exc.problem}",
                             source=str(out), key=exc.key) from None
        for name, fit in fits.items():
            got = back.asset(name).heston
            if got is None or got.numbers != fit.params.numbers:
                raise InputError(f"the fitted market reads back {name}'s Heston parameters as "
                                 f"{None if got is None else got.numbers}, not "
                                 f"{fit.params.numbers}", source=str(out),
                                 key=f"assets.{name}.heston")
        if out.exists():
            if not os.access(out, os.W_OK):
                raise InputError("cannot write: the file is read-only", source=str(out))
            mode = out.stat().st_mode & 0o777
        else:  # a new file gets the ordinary permissions (mkstemp's are owner-only)
            umask = os.umask(0)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp_path, mode)
        os.replace(tmp_path, out)
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise

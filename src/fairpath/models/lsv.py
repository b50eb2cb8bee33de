"""Local-stochastic volatility: a Heston variance with a leverage function that reprices the
surface.

The asset's (escrowed) level follows

    dX / X = (r - q) dt + L(t, X) sqrt(v) dW_S,
    dv = kappa (theta - v) dt + mixing * vol_of_vol * sqrt(v) dW_v,

with the Heston parameters of ``[assets.X.heston]`` (or fitted to the surface) and ``mixing``
(the share of the vol of vol kept: 0 gives local vol back, 1 Heston's vol of vol). Gyongy's
theorem says the model reprices every vanilla of the surface when

    L(t, y)^2 E[v | y(t) = y] = sigma_LV(t, y)^2,

``sigma_LV`` Dupire's local vol (:mod:`fairpath.surface`) and ``y`` the forward log-moneyness.
The leverage is calibrated by the particle method (Guyon and Henry-Labordere 2012): particles
of ``(y, v)`` are stepped through the simulation's own time steps, and at each step the
conditional expectation ``E[v | y]`` is estimated across them by kernel regression (linear
binning on the local-vol table's moneyness grid cut four times finer, then a Gaussian kernel
of bandwidth ``0.5 sd(y) N^(-1/5)``), which gives the leverage of that step before the
particles move on. The particles' normals are scrambled Sobol points of their own stream
(fixed: the leverage of a market and a grid is the same whatever the pricing seed); the table
is then frozen and shared by pricing, Greeks and every thread.

Pricing steps the level by log-Euler with the step's starting variance (``E[X' | X, v] = X F' /
F`` exactly: the forward is the market's) and the variance by Andersen's QE scheme
(:mod:`fairpath.models.heston`), in the same compiled loop as Heston, local-vol and Black
assets.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from numba import njit

from fairpath import sobol
from fairpath.calibration import heston_for
from fairpath.errors import InputError
from fairpath.models.base import Model
from fairpath.models.black import check_lognormal_tail
from fairpath.models.heston import (
    LSV_REFINE,
    StochSteps,
    _qe,
    qe_coefficients,
)
from fairpath.registry import Capability
from fairpath.sampling import to_normal
from fairpath.stochvol import HestonParams

#: ``mixing`` when the file gives none (the middle of the range desks commonly use; a
#: what-if ``--model lsv`` on a market without it says so in the result)
DEFAULT_MIXING = 0.7
#: Particles of the leverage calibration
PARTICLES = 1 << 15
#: The particles' stream (their own: the leverage does not depend on the pricing seed)
PARTICLE_SEED = 20260412
#: Kernel bandwidth constant (Guyon and Henry-Labordere suggest 1.5): the smoothing biases
#: E[v | y] upwards at the money, and 0.5 measured closest on a flat 25% surface with a vol of
#: vol of 1 (at-the-money 1y implied vol -0.49, -0.19, -0.13 vol points at 1.0, 0.5, 0.25)
BANDWIDTH = 0.5


@dataclass(frozen=True, slots=True)
class LocalStochasticVol(Model):
    """Heston variance times a leverage function calibrated to the asset's surface."""

    kind: ClassVar[str] = "lsv"
    factors: ClassVar[int] = 2
    hosts: ClassVar[tuple[str, ...]] = ("black", "local-vol", "heston")
    note_rank: ClassVar[int] = 25

    params: HestonParams | None = None
    mixing: float = DEFAULT_MIXING
    mixing_given: bool = True

    @classmethod
    def for_asset(cls, market, name):
        a = market.asset(name)
        if a.surface is None:
            raise InputError(f"the lsv model of {name} needs a vol_surface (its leverage "
                             "function is calibrated to reprice it), and it has none",
                             source=market.source, key=f"assets.{name}.model")
        mixing = DEFAULT_MIXING if a.mixing is None else a.mixing
        return cls(name, market, heston_for(market, name), mixing, a.mixing is not None)

    @property
    def capabilities(self) -> frozenset[Capability]:
        # the leverage is a function of moneyness against the forward: paths scale with spot
        # (a foreign asset's quanto drift moves with its vol: no forward, as under Heston)
        return self.forward_and_scaling(quanto_forward=False)

    @property
    def daily(self) -> bool:
        return True

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        check_lognormal_tail(self.market, self.name, variance, paths)

    @classmethod
    def group_notes(cls, models, names, steps_per_day):
        mix = ", ".join(f"{m.name} {m.mixing:g}" + ("" if m.mixing_given else " (default)")
                        for m in models)
        out = [f"local-stochastic volatility for {', '.join(m.name for m in models)}: Heston "
               f"variance with mixing {mix} of its vol of vol, leverage calibrated to the "
               f"surface by the particle method ({PARTICLES:,} particles of their own "
               "stream); log-Euler steps on every weekday"
               + (f", {steps_per_day} per day" if steps_per_day > 1 else "")]
        fitted = [m.name for m in models if m.params.calibrated]
        if fitted:
            out.append(f"Heston parameters of {', '.join(fitted)} calibrated to the vol surface")
        return out

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return StochSteps(models, correlation, times, steps_per_day)

    @classmethod
    def prepare(cls, models, starts: np.ndarray, dt: np.ndarray) -> None:
        """Calibrate these models' leverage on the steps together (:func:`prepare_leverage`)."""
        prepare_leverage(models, starts, dt)

    def leverage_table(self, starts: np.ndarray, dt: np.ndarray) -> LeverageTable:
        from fairpath.models.local_vol import local_table

        lv = local_table(self.asset.surface, starts)
        key = (id(lv), lv.variance.shape, self.params.numbers, self.mixing,
               np.asarray(dt).tobytes())
        table = _LEVERAGE.get(key)
        if table is None or table[0] is not lv:
            if len(_LEVERAGE) > 16:
                _LEVERAGE.clear()
            table = _LEVERAGE[key] = (lv, calibrate_leverage(lv, self.params, self.mixing, dt))
        return table[1]


def prepare_leverage(models, starts: np.ndarray, dt: np.ndarray) -> None:
    """Calibrate the leverage of every LSV model of ``models`` on these steps, the assets in
    parallel threads (the particle steps and numpy's normals release the interpreter); each
    lands in the cache that :meth:`LocalStochasticVol.leverage_table` reads."""
    todo = [m for m in models if isinstance(m, LocalStochasticVol)]
    if len(todo) < 2:
        return
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=min(len(todo), os.cpu_count() or 1)) as pool:
        for f in [pool.submit(m.leverage_table, starts, dt) for m in todo]:
            f.result()


@dataclass(frozen=True, slots=True)
class LeverageTable:
    """The leverage ``L(t_k, y)`` on the local-vol table's grid (rows: step starts), and the
    particles' mean of ``L^2 v`` per step (the variance a step sees on average)."""

    y0: float
    dy: float
    values: np.ndarray
    mean_variance: np.ndarray


_LEVERAGE: dict = {}


def calibrate_leverage(lv, params: HestonParams, mixing: float, dt: np.ndarray,
                       particles: int = PARTICLES, seed: int = PARTICLE_SEED) -> LeverageTable:
    """The particle method (see the module notes) on the steps ``dt`` of the local-vol table
    ``lv`` (its rows are the steps' starts)."""
    dt = np.asarray(dt, dtype=float)
    xi = params.vol_of_vol * mixing
    coef = qe_coefficients(params, dt, xi)
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    r = params.spot_vol_correlation
    g = (lv.variance.shape[1] - 1) * LSV_REFINE + 1
    dy = lv.dy / LSV_REFINE
    coarse = lv.y0 + lv.dy * np.arange(lv.variance.shape[1])
    fine = lv.y0 + dy * np.arange(g)
    lev = np.empty((len(dt), g))
    mean_var = np.empty(len(dt))
    y = np.zeros(particles)
    v = np.full(particles, params.v0)
    # scrambled Sobol normals, a step's two coordinates at a time (each step's spot and
    # variance shocks a (0, m, 2)-net across the particles: the leverage carries less of the
    # particles' own sampling noise than with pseudo-random ones)
    sv, shift = sobol.scrambled(2 * len(dt), rng)
    for k in range(len(dt)):
        z = to_normal(sobol.points(sv[2 * k:2 * k + 2], shift[2 * k:2 * k + 2], 0, particles))
        _particle_step(y, v, z, np.interp(fine, coarse, lv.variance[k]), lv.y0, dy, dt[k],
                       coef[:, k], params.theta, r, math.sqrt(max(1.0 - r * r, 0.0)), lev[k],
                       mean_var, k, BANDWIDTH)
    return LeverageTable(lv.y0, dy, lev, mean_var)


@njit(cache=True, nogil=True)
def _particle_step(y, v, z, lv_var, y0, dy, dt, coef, theta, rho, srho, lev, mean_var, k,
                   kappa_h):
    """One step of the particles: ``E[v | y]`` by kernel regression on the grid, the
    leverage row ``lev``, then the particles moved (log-Euler in ``y``, QE in ``v``)."""
    n = y.shape[0]
    g = lv_var.shape[0]
    num = np.zeros(g)
    den = np.zeros(g)
    s1 = 0.0
    s2 = 0.0
    vbar = 0.0
    for p in range(n):
        s1 += y[p]
        s2 += y[p] * y[p]
        vbar += v[p]
        u = (y[p] - y0) / dy
        if u <= 0.0:
            num[0] += v[p]
            den[0] += 1.0
        elif u >= g - 1:
            num[g - 1] += v[p]
            den[g - 1] += 1.0
        else:
            i = int(u)
            f = u - i
            num[i] += (1.0 - f) * v[p]
            den[i] += 1.0 - f
            num[i + 1] += f * v[p]
            den[i + 1] += f
    vbar /= n
    sd = math.sqrt(max(s2 / n - (s1 / n) ** 2, 0.0))
    h = kappa_h * max(sd, 1e-4) * n ** -0.2 / dy  # in grid points
    h = max(h, 0.5)
    reach = int(4.0 * h) + 1
    wts = np.empty(2 * reach + 1)
    for d in range(-reach, reach + 1):
        wts[d + reach] = math.exp(-0.5 * (d / h) ** 2)
    # a tenth of a particle's weight of the mean variance: where no particle goes the
    # conditional variance is the unconditional one
    eps = 0.1 * wts[reach]
    for j in range(g):
        a = 0.0
        b = 0.0
        for d in range(-reach, reach + 1):
            i = j + d
            if 0 <= i < g:
                a += wts[d + reach] * num[i]
                b += wts[d + reach] * den[i]
        ev = (a + eps * vbar) / (b + eps)
        lev[j] = math.sqrt(lv_var[j] / ev) if ev > 1e-12 else math.sqrt(lv_var[j] / 1e-12)
    acc = 0.0
    last = g - 1
    for p in range(n):
        u = (y[p] - y0) / dy
        if u <= 0.0:
            L = lev[0]
        elif u >= last:
            L = lev[last]
        else:
            i = int(u)
            f = u - i
            L = lev[i] + (lev[i + 1] - lev[i]) * f
        vk = v[p]
        var = L * L * vk
        acc += var
        e = z[0, p]
        y[p] += -0.5 * var * dt + math.sqrt(var * dt) * e
        vn, br, qa, qb2, qp, qbeta = _qe(vk, rho * e + srho * z[1, p], coef[0], coef[1],
                                        coef[2], theta)
        v[p] = vn
    mean_var[k] = acc / n

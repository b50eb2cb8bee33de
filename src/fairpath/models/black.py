"""Black: correlated geometric Brownian motion with term structures of rates, dividend yields
and vols, and escrowed cash dividends.

Under the risk-neutral measure each asset follows ``dS/S = (r(t) - q) dt + sigma(t) dW`` with
``d<W_a, W_b> = rho_ab dt``. Over a step ``[t0, t1]`` the log-return is exactly normal with

* mean ``log(F(t1) / F(t0)) - 0.5 * int sigma_a^2 dt`` (so ``E[S(t)] = F(t)``, the market forward);
* covariance ``rho_ab * int sigma_a sigma_b dt``,

which the stepper samples exactly from the lower-triangular factor of that covariance, however
long the step (no discretisation error on the product's dates). With cash dividends the
simulated part is the escrowed level ``X`` and the level is ``X + D(t)`` (see
:meth:`fairpath.market.Market.escrow`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy import stats

from fairpath.errors import InputError
from fairpath.kernels import log_paths
from fairpath.market import integrate_vol_product
from fairpath.models.base import (
    Model,
    PathState,
    ScalesWithSpot,
    Stepper,
    psd_cholesky,
)
from fairpath.registry import MODELS, Capability

#: A run is refused when more than this share of an asset's forward at the last date lies in
#: terminal moves rarer than one path in the run (its price would come out low: a 500% vol
#: over a year with 8,192 paths priced an at-the-money call 10 standard errors low).
MAX_UNSEEN_FORWARD = 0.2


@dataclass(frozen=True, slots=True)
class Black(Model):
    """Geometric Brownian motion on the asset's vol term structure (with cash dividends: the
    escrowed part). A non-normal shock law turns it into :class:`fairpath.models.shock_law.
    ShockLaw` (the same vols, the law's shocks)."""

    kind: ClassVar[str] = "black"
    note_rank: ClassVar[int] = 90

    @classmethod
    def for_asset(cls, market, name):
        if not market.asset(name).law.is_normal:  # the law's own model (registered by kind)
            return MODELS["black-law"].for_asset(market, name)
        return cls(name, market)

    @property
    def capabilities(self) -> frozenset[Capability]:
        caps = set(self.forward_and_scaling())
        if Capability.SPOT_SCALING not in caps:  # cash dividends: levels not lognormal
            return frozenset(caps)
        caps |= {Capability.SCORE, Capability.EXACT_BRIDGE}
        if self.market.foreign(self.name) is not None or self.market.is_fx(self.name):
            # lognormal, but the closed forms (and the controls priced by them) read a
            # dividend yield and the discount curve, not another currency's curve or the
            # quanto drift; and the quanto drift moves with the vol (no pathwise vega)
            return frozenset(caps)
        caps.add(Capability.LOGNORMAL)
        vol = self.asset.vol
        if vol.is_flat and vol.vols[0] > 0:
            caps.add(Capability.FLAT_VOL)
        return frozenset(caps)

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        check_lognormal_tail(self.market, self.name, variance, paths)

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return ExactSteps(models, correlation, times)


def step_covariance(models, correlation: np.ndarray, times: np.ndarray) -> np.ndarray:
    """(steps, assets, assets): the covariance of each grid step's log-returns under the
    assets' Black vols, ``rho_ab int sigma_a sigma_b dt``."""
    times = np.asarray(times, dtype=float)
    t0 = np.concatenate([[0.0], times[:-1]])
    n_a, n_s = len(models), len(times)
    vols = [m.asset.vol for m in models]
    cov = np.empty((n_s, n_a, n_a))
    for i in range(n_a):
        for j in range(i, n_a):
            c = correlation[i, j] * integrate_vol_product(vols[i], vols[j], t0, times)
            cov[:, i, j] = c
            cov[:, j, i] = c
    return cov


def log_forward_steps(models, times: np.ndarray) -> np.ndarray:
    """(assets, steps): ``log(F(t1) / F(t0))`` of each asset's escrowed level over each step."""
    market = models[0].market
    logf = np.stack([np.log(np.asarray(market.x_forward(m.name, np.concatenate(
        [[0.0], times])), dtype=float)) for m in models])
    return np.diff(logf, axis=1)


class ExactSteps(ScalesWithSpot, Stepper):
    """Exact joint GBM steps on the grid (any step length), in a compiled loop."""

    def __init__(self, models, correlation: np.ndarray, times: np.ndarray):
        cov = step_covariance(models, correlation, times)
        self._start(models, times, cov)
        self.sim_times = self.times
        self.factor = np.stack([psd_cholesky(cov[k]) for k in range(len(self.times))])
        self.drift = log_forward_steps(models, self.times) - 0.5 * self.variance

    def simulate(self, z: np.ndarray) -> PathState:
        """The correlated increment of asset ``a`` is ``drift[a] + sum_b L[a, b] z[b]``,
        accumulated path by path (:func:`fairpath.kernels.log_paths`), so every path's
        arithmetic is the same whatever the number of paths in the batch."""
        return self.state(log_paths(z, self.drift, self.factor, self.log_start))

    def asset_inputs(self, a: int) -> tuple:
        return (self.times, self.drift[a], self.factor[:, a, :], self.log_start[a],
                None if self.escrow is None else self.escrow[a])

    def simulate_changed(self, z: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
        return self.state_changed(log_paths(z, self.drift, self.factor, self.log_start, ~keep),
                                  base, keep)

    def restart(self, x0, col, last, rng):
        out = np.empty((*x0.shape, last - col))
        x = x0
        for j, g in enumerate(range(col + 1, last + 1)):
            z = rng.standard_normal(x.shape)
            x = x + self.drift[:, g][None, :] + z @ self.factor[g].T
            out[:, :, j] = x
        return out

    def first_step(self):
        L = self.factor[0]
        return self.drift[:, 0], L @ L.T


def unseen_forward_share(w: float, paths: int) -> float:
    """The share of a lognormal level's forward carried by moves rarer than one path in
    ``paths`` (``Phi(sqrt(w) - z)``, ``w`` the total variance of its log, ``z`` the normal level
    exceeded once in ``paths`` draws): a part of the mean no path of the run draws."""
    z = float(stats.norm.isf(1.0 / max(paths, 2)))
    return float(stats.norm.cdf(math.sqrt(max(w, 0.0)) - z))


def check_lognormal_tail(market, name: str, variance: np.ndarray, paths: int) -> None:
    """Refuse a run whose asset has so much variance to the last date that the forward is
    carried by moves no path draws (share ``Phi(sqrt(w) - z)``, ``z`` the normal level exceeded
    once in ``paths`` draws)."""
    w = float(np.sum(variance))
    share = unseen_forward_share(w, paths)
    if share > MAX_UNSEEN_FORWARD:
        need = float(stats.norm.sf(math.sqrt(w) + stats.norm.isf(MAX_UNSEEN_FORWARD)))
        paths_needed = f"{1.0 / need:,.0f}" if need > 1e-15 else "more than 1e15"
        raise InputError(
            f"the vol of {name} is too high for {paths:,} paths: the total variance to the "
            f"last date is {w:.3g} (sigma sqrt(T) = {math.sqrt(w):.2f}), so {share:.0%} of "
            f"its forward sits in moves rarer than one path in {paths:,} and the price "
            f"would come out low; use about {paths_needed} paths or check the vol",
            source=market.source, key=f"assets.{name}.vol")

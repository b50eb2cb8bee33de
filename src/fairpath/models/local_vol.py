"""Local volatility (Dupire) from an implied-volatility surface, with escrowed cash dividends.

The level's local variance is read from the asset's surface (:mod:`fairpath.surface`:
total-variance form of Dupire's formula, tabulated in log-moneyness at every step start), and
the paths take log-Euler steps on every weekday (``steps_per_day`` finer):
``x_{k+1} = x_k + log(F_{k+1} / F_k) - sigma_k^2 dt / 2 + sigma_k sqrt(dt) z``, where
``sigma_k`` is looked up at the path's own log-moneyness against the forward. Black assets in
the same simulation are stepped in the same compiled loop with their own step deviations
(:func:`fairpath.kernels.local_vol_paths`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from fairpath.errors import InputError
from fairpath.kernels import local_vol_paths
from fairpath.market import integrate_vol_product
from fairpath.models.base import (
    Model,
    PathState,
    ScalesWithSpot,
    Stepper,
    psd_cholesky,
)
from fairpath.models.black import check_lognormal_tail, step_covariance
from fairpath.registry import Capability


@dataclass(frozen=True, slots=True)
class LocalVol(Model):
    """Dupire local volatility from the asset's ``vol_surface``."""

    kind: ClassVar[str] = "local-vol"
    hosts: ClassVar[tuple[str, ...]] = ("black",)
    note_rank: ClassVar[int] = 20

    @classmethod
    def for_asset(cls, market, name):
        a = market.asset(name)
        if a.surface is None:
            raise InputError(f"the local-vol model needs a vol_surface, and {name} has none "
                             "(give one, or use model = \"black\")", source=market.source,
                             key=f"assets.{name}.model")
        return cls(name, market)

    @property
    def capabilities(self) -> frozenset[Capability]:
        # the surface's strikes are fractions of the spot: the path in moneyness against the
        # forward does not depend on the spot, so every level is proportional to it. A foreign
        # asset's quanto drift moves with its local vol: its mean is not the forward (which
        # carries the Black vols' quanto term), so no control may rest on it
        return self.forward_and_scaling(quanto_forward=False)

    @property
    def daily(self) -> bool:
        return True

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        check_lognormal_tail(self.market, self.name, variance, paths)

    @classmethod
    def group_notes(cls, models, names, steps_per_day):
        return [f"local volatility from the implied-vol surface of "
                f"{', '.join(m.name for m in models)} (Dupire, total-variance form): "
                "log-Euler steps on every weekday"
                + (f", {steps_per_day} per day" if steps_per_day > 1 else "")]

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return LocalSteps(models, correlation, times, steps_per_day)


class LocalSteps(ScalesWithSpot, Stepper):
    """Log-Euler stepping under local volatility on the grid cut into ``steps_per_day`` pieces.

    ``variance`` is each grid step's Black variance at the at-the-money term structure (what a
    Brownian-bridge correction between daily closes uses: an approximation under local vol);
    ``grid_cols`` are the fine steps that end on the grid's dates; ``floored`` counts the
    local-variance table points floored (see :mod:`fairpath.surface`)."""

    def __init__(self, models, correlation: np.ndarray, times: np.ndarray, sub: int):
        from fairpath.surface import Y_POINTS

        if isinstance(sub, bool) or not isinstance(sub, int) or sub < 1:
            raise InputError(f"must be a positive integer, got {sub!r}", key="steps_per_day")
        self._start(models, times, step_covariance(models, correlation, times))
        names, market = self.names, models[0].market
        edges = np.concatenate([[0.0], self.times])
        pieces = [np.linspace(a, b, sub + 1)[1:] for a, b in
                  zip(edges[:-1], edges[1:], strict=True)]
        fine = np.concatenate(pieces) if pieces else edges[1:]
        starts = np.concatenate([[0.0], fine[:-1]])
        self.dt = fine - starts
        n_a, n_f = len(models), len(fine)
        # a foreign asset's own forward (its surface's moneyness); the quanto drift is a term
        # of the steps, with the local vol (``quanto``)
        self.log_fwd = np.stack([np.log(np.asarray(market.x_forward(n, np.concatenate(
            [[0.0], fine]), quanto=False), dtype=float)) for n in names])
        self.quanto = np.zeros((len(names), len(fine)))
        for i, n in enumerate(names):
            code = market.foreign(n)
            if code is not None:
                fx = market.asset(code).vol
                self.quanto[i] = market.quanto_correlation(n) * np.sqrt(
                    integrate_vol_product(fx, fx, starts, fine))
        self.step_sd = np.zeros((n_a, n_f, Y_POINTS))
        self.y0, self.dy = np.zeros(n_a), np.ones(n_a)
        self.gbm_sd = np.zeros((n_a, n_f))
        self.is_lv = np.zeros(n_a, dtype=bool)
        self.floored = self.points = 0
        for i, m in enumerate(models):
            a = m.asset
            if isinstance(m, LocalVol):
                lv = local_table(a.surface, starts)
                self.step_sd[i] = np.sqrt(lv.variance * self.dt[:, None])
                self.y0[i], self.dy[i] = lv.y0, lv.dy
                self.is_lv[i] = True
                self.floored += lv.floored
                self.points += lv.points
            else:
                self.gbm_sd[i] = np.sqrt(integrate_vol_product(a.vol, a.vol, starts, fine))
        self.corr = psd_cholesky(correlation)
        self.grid_cols = np.arange(sub - 1, n_f, sub)
        self.sim_times = fine
        self.notes = ((f"local variance floored at a 1% vol at {self.floored} of {self.points} "
                       "points of the table (where Dupire's formula is not positive: the "
                       "surface is close to an arbitrage there)",) if self.floored else ())

    #: the normals are only read (the levels go to a new array): no copy per scenario
    keeps_normals = True
    #: log-Euler steps: a weak error of the order of the step, measured by the engine
    discretised = True

    def simulate(self, z: np.ndarray) -> PathState:
        return self.state(self._escrowed(z, None))

    def _escrowed(self, z: np.ndarray, active: np.ndarray | None) -> np.ndarray:
        """The escrowed log-levels of the ``active`` assets (default: all), on the grid's
        dates (finer than the grid with steps_per_day: only the steps ending on them)."""
        return local_vol_paths(z, self.corr, self.log_fwd, self.step_sd, self.y0, self.dy,
                               self.gbm_sd, self.is_lv, self.log_start, active, self.grid_cols,
                               self.quanto)

    def restart(self, x0, col, last, rng):
        f0 = 0 if col < 0 else int(self.grid_cols[col]) + 1
        f1 = int(self.grid_cols[last]) + 1
        z = rng.standard_normal((x0.shape[0], x0.shape[1], f1 - f0))
        return local_vol_paths(z, self.corr, self.log_fwd[:, f0:f1 + 1],
                               self.step_sd[:, f0:f1], self.y0, self.dy, self.gbm_sd[:, f0:f1],
                               self.is_lv, x0, None, self.grid_cols[col + 1:last + 1] - f0,
                               self.quanto[:, f0:f1])

    def asset_inputs(self, a: int) -> tuple:
        return (self.sim_times, self.grid_cols, self.log_fwd[a], self.step_sd[a], self.y0[a],
                self.dy[a], self.gbm_sd[a], self.is_lv[a], self.corr[a], self.log_start[a],
                self.quanto[a],
                None if self.escrow is None else self.escrow[a])

    def simulate_changed(self, z: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
        return self.state_changed(self._escrowed(z, ~keep), base, keep)


_TABLES: dict = {}


def local_table(surface, starts: np.ndarray):
    """:meth:`VolSurface.local_variance_table` on ``starts``, kept for reuse (the same surface
    and grid recur across assets, bumped scenarios and repeated pricings)."""
    key = (surface.times, surface.strikes, surface.vols, surface.fwd_ratio, starts.tobytes())
    table = _TABLES.get(key)
    if table is None:
        if len(_TABLES) > 32:
            _TABLES.clear()
        table = _TABLES[key] = surface.local_variance_table(starts)
    return table

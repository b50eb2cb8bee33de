"""Risk-neutral dynamics: correlated geometric Brownian motion with term structures.

Under the risk-neutral measure each asset follows ``dS/S = (r(t) - q) dt + sigma(t) dW`` with
``d<W_a, W_b> = rho_ab dt``. Over a step ``[t0, t1]`` the log-return is exactly normal with

* mean ``log(F(t1) / F(t0)) - 0.5 * int sigma_a^2 dt`` (so ``E[S(t)] = F(t)``, the market forward);
* covariance ``rho_ab * int sigma_a sigma_b dt``,

which the engine samples exactly from the lower-triangular factor of that covariance, however
long the step (no discretisation error on the product's dates).

An asset whose shock law is not normal (:mod:`fairpath.laws`) is stepped on the weekday grid:
the step's correlated normals (Gaussian copula) go through the law's inverse transform, are
scaled by the step's standard deviation ``sqrt(int sigma^2 dt)``, and the drift becomes
``log(F(t1) / F(t0)) - log E[exp(sd X)]``, the law's own exponential moment, so the forward is
still the market's.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from fairpath.errors import InputError
from fairpath.kernels import local_vol_paths, log_paths
from fairpath.laws import Law
from fairpath.market import Market, integrate_vol_product


@dataclass(frozen=True, slots=True)
class StepParameters:
    """Per-step drift ``(assets, steps)`` and covariance factor ``(steps, assets, assets)``."""

    times: np.ndarray
    drift: np.ndarray
    factor: np.ndarray
    variance: np.ndarray  # (assets, steps): integrated variance of each asset over each step
    #: per asset, its shock law, or None when every asset is normal (the exact GBM path)
    laws: tuple[Law, ...] | None = None
    #: (steps, assets, assets): factor of each step's correlation (copula), with ``laws``
    corr_factor: np.ndarray | None = None
    #: log of each asset's simulated level at time 0 (the escrowed spot with cash dividends)
    log_start: np.ndarray | None = None
    #: (assets, steps): value of the dividends still to come at each grid time (escrow), added
    #: back to the simulated level; None without cash dividends
    escrow: np.ndarray | None = None
    #: the times the sampler draws for (the grid, or a finer one under local volatility)
    fine_times: np.ndarray | None = None
    #: local-volatility stepping (see :class:`LocalParams`), or None
    local: LocalParams | None = None


@dataclass(frozen=True, slots=True)
class LocalParams:
    """Log-Euler stepping under local volatility on a fine grid (see kernels.local_vol_paths).

    ``grid_cols`` are the fine steps that end on the grid's dates; ``floored`` counts the
    local-variance table points floored (see :mod:`fairpath.surface`)."""

    dt: np.ndarray
    log_fwd: np.ndarray
    step_sd: np.ndarray  # (assets, steps, y points): local vol times sqrt(dt), tabulated
    y0: np.ndarray
    dy: np.ndarray
    gbm_sd: np.ndarray  # (assets, steps): the GBM assets' step standard deviation
    is_lv: np.ndarray
    corr: np.ndarray
    grid_cols: np.ndarray
    floored: int
    points: int


@dataclass(frozen=True, slots=True)
class GBM:
    """Correlated GBM on the named assets of a market.

    Examples
    --------
    >>> from fairpath.market import Market, Asset, DiscountCurve, VolCurve
    >>> from datetime import date
    >>> m = Market(date(2026, 12, 1), "EUR", DiscountCurve.flat(0.03),
    ...            (Asset("NORDA", 100.0, VolCurve.flat(0.2)),))
    >>> p = GBM.from_market(m, ["NORDA"]).steps(np.array([0.5, 1.0]))
    >>> p.variance.round(4).tolist()
    [[0.02, 0.02]]
    """

    market: Market
    names: tuple[str, ...]
    correlation: np.ndarray

    @classmethod
    def from_market(cls, market: Market, names, *, source: str | None = None) -> GBM:
        names = tuple(names)
        for n in names:
            market.asset(n, source=source)
        corr = market.correlation_matrix(names, source=source)
        return cls(market, names, corr)

    @property
    def spots(self) -> np.ndarray:
        return np.array([self.market.asset(n).spot for n in self.names])

    @property
    def laws(self) -> tuple[Law, ...]:
        return tuple(self.market.asset(n).law for n in self.names)

    @property
    def normal(self) -> bool:
        """Are all the assets' shocks normal (exact GBM steps of any length)?"""
        return all(law.is_normal for law in self.laws)

    def steps(self, times: np.ndarray, steps_per_day: int = 1) -> StepParameters:
        """Step parameters on the grid ``times`` (strictly increasing, all > 0): exact GBM
        (or law) steps, or, when an asset has a surface, log-Euler steps under local
        volatility on the grid cut into ``steps_per_day`` pieces."""
        p = self._steps(times)
        log_start = np.log([self.market.escrowed_spot(n) for n in self.names])
        escrow = None
        if any(self.market.dividend_times(n) for n in self.names):
            escrow = np.stack([np.asarray(self.market.escrow(n, np.asarray(times)), dtype=float)
                               for n in self.names])
        local = None
        fine = np.asarray(times, dtype=float)
        if self.market.local_vol(self.names):
            local, fine = self._local(np.asarray(times, dtype=float), steps_per_day)
        return dataclasses.replace(p, log_start=log_start, escrow=escrow, fine_times=fine,
                                   local=local)

    def _local(self, times: np.ndarray, sub: int) -> tuple[LocalParams, np.ndarray]:
        from fairpath.surface import Y_POINTS

        if isinstance(sub, bool) or not isinstance(sub, int) or sub < 1:
            raise InputError(f"must be a positive integer, got {sub!r}", key="steps_per_day")
        edges = np.concatenate([[0.0], times])
        pieces = [np.linspace(a, b, sub + 1)[1:] for a, b in
                  zip(edges[:-1], edges[1:], strict=True)]
        fine = np.concatenate(pieces) if pieces else edges[1:]
        starts = np.concatenate([[0.0], fine[:-1]])
        dt = fine - starts
        n_a, n_f = len(self.names), len(fine)
        log_fwd = np.stack([np.log(np.asarray(self.market.x_forward(n, np.concatenate(
            [[0.0], fine])), dtype=float)) for n in self.names])
        step_sd = np.zeros((n_a, n_f, Y_POINTS))
        y0, dy = np.zeros(n_a), np.ones(n_a)
        gbm_sd = np.zeros((n_a, n_f))
        is_lv = np.zeros(n_a, dtype=bool)
        floored = points = 0
        for i, n in enumerate(self.names):
            a = self.market.asset(n)
            if a.surface is not None:
                lv = local_table(a.surface, starts)
                step_sd[i] = np.sqrt(lv.variance * dt[:, None])
                y0[i], dy[i] = lv.y0, lv.dy
                is_lv[i] = True
                floored += lv.floored
                points += lv.points
            else:
                gbm_sd[i] = np.sqrt(integrate_vol_product(a.vol, a.vol, starts, fine))
        corr = psd_cholesky(self.correlation)
        cols = np.arange(sub - 1, n_f, sub)
        return LocalParams(dt, log_fwd, step_sd, y0, dy, gbm_sd, is_lv, corr, cols, floored,
                           points), fine

    def _steps(self, times: np.ndarray) -> StepParameters:
        times = np.asarray(times, dtype=float)
        t0 = np.concatenate([[0.0], times[:-1]])
        n_a, n_s = len(self.names), len(times)
        assets = [self.market.asset(n) for n in self.names]
        cov = np.empty((n_s, n_a, n_a))
        for i in range(n_a):
            for j in range(i, n_a):
                c = self.correlation[i, j] * integrate_vol_product(assets[i].vol, assets[j].vol,
                                                                   t0, times)
                cov[:, i, j] = c
                cov[:, j, i] = c
        var = np.stack([cov[:, i, i] for i in range(n_a)])
        logf = np.stack([np.log(np.asarray(self.market.x_forward(n, np.concatenate(
            [[0.0], times])), dtype=float)) for n in self.names])
        factor = np.stack([psd_cholesky(cov[k]) for k in range(n_s)])
        if self.normal:
            return StepParameters(times, np.diff(logf, axis=1) - 0.5 * var, factor, var)
        sd = np.sqrt(var)
        correction = np.stack([law.log_mgf(s) for law, s in zip(self.laws, sd, strict=True)])
        with np.errstate(divide="ignore", invalid="ignore"):
            corr_factor = np.where(sd.T[:, :, None] > 0, factor / sd.T[:, :, None], 0.0)
        return StepParameters(times, np.diff(logf, axis=1) - correction, factor, var,
                              self.laws, corr_factor)


def psd_cholesky(c: np.ndarray, tol: float = 1e-14) -> np.ndarray:
    """Lower-triangular ``L`` with ``L @ L.T == c`` for a positive semi-definite ``c``.

    Unlike ``numpy.linalg.cholesky`` it accepts singular matrices (a correlation of exactly 1, a
    zero vol): a pivot at or below ``tol`` times the diagonal scale gives a zero column.
    """
    n = c.shape[0]
    L = np.zeros_like(c, dtype=float)
    scale = max(float(np.max(np.abs(np.diag(c)))), 1e-300)
    for j in range(n):
        d = c[j, j] - np.dot(L[j, :j], L[j, :j])
        if d <= tol * scale:
            continue
        L[j, j] = np.sqrt(d)
        for i in range(j + 1, n):
            L[i, j] = (c[i, j] - np.dot(L[i, :j], L[j, :j])) / L[j, j]
    return L


def simulate_log_levels(params: StepParameters, spots: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Log levels on the grid from step normals ``z`` (paths, assets, steps), in place in ``z``.

    The correlated increment of asset ``a`` is ``drift[a] + sum_b L[a, b] z[b]``, accumulated
    path by path in a compiled loop (:func:`fairpath.kernels.log_paths`), so every path's
    arithmetic is the same whatever the number of paths in the chunk (bit-identical results for
    any chunk size or number of threads).
    """
    start = params.log_start if params.log_start is not None else np.log(spots)
    if params.local is not None:
        lp = params.local
        x = local_vol_paths(z, lp.corr, lp.log_fwd, lp.step_sd, lp.y0, lp.dy, lp.gbm_sd,
                            lp.is_lv, start)
        if len(lp.grid_cols) != x.shape[2]:  # finer than the grid: keep its dates only
            x = np.ascontiguousarray(x[:, :, lp.grid_cols])
    elif params.laws is not None:
        x = _simulate_with_laws(params, start, z)
    else:
        x = log_paths(z, params.drift, params.factor, start)
    if params.escrow is not None:  # the level is the escrowed part plus the dividends to come
        for a in range(x.shape[1]):
            if np.any(params.escrow[a]):
                x[:, a, :] = np.log(np.exp(x[:, a, :]) + params.escrow[a][None, :])
    return x


def _simulate_with_laws(params: StepParameters, start: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Log levels when some shock law is not normal: correlated normals (Gaussian copula), each
    asset's inverse transform, scaled by the step's standard deviation, plus the drift."""
    n_a = z.shape[1]
    sd = np.sqrt(params.variance)
    x = np.empty_like(z)
    for a in range(n_a):
        acc = z[:, 0, :] * params.corr_factor[:, a, 0]
        for b in range(1, a + 1):
            acc += z[:, b, :] * params.corr_factor[:, a, b]
        params.laws[a].shocks(acc, out=acc)
        acc *= sd[a]
        acc += params.drift[a]
        x[:, a, :] = acc
    np.cumsum(x, axis=2, out=x)
    x += start[None, :, None]
    return x


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

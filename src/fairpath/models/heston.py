"""Heston's stochastic volatility, simulated by Andersen's quadratic-exponential scheme.

Each asset's (escrowed) level follows Heston (1993) under the risk-neutral measure,

    dX / X = (r - q) dt + sqrt(v) dW_S,    dv = kappa (theta - v) dt + xi sqrt(v) dW_v,

with ``W_v = rho W_S + sqrt(1 - rho^2) W_perp``: the spot shocks ``W_S`` are correlated across
assets by the market's matrix (the only cross-asset input) and each variance shock is tied to
its own spot by ``spot_vol_correlation`` plus an independent part (one more normal factor per
asset and step).

A step of length ``D`` follows Andersen (2008), "Simple and efficient simulation of the Heston
stochastic volatility model":

* the variance by the quadratic-exponential (QE) scheme: with ``m`` and ``s^2`` the exact
  conditional mean and variance of ``v(t + D)`` and ``psi = s^2 / m^2``, a squared normal
  ``a (b + Z_v)^2`` when ``psi <= 1.5``, else a mass at zero plus an exponential tail (drawn
  from ``U = Phi(Z_v)``);
* the log-level by his central scheme (``gamma1 = gamma2 = 1/2``),
  ``ln X' = ln X + log(F' / F) + K0* + K1 v + K2 v' + sqrt(K3 v + K4 v') Z``, where ``Z`` is the
  part of the spot shock independent of the variance shock, and ``K0*`` is his martingale
  correction: ``E[X' | X, v] = X F' / F`` exactly, so the simulated forward is the market's.

The spot and variance normals of a step are ``Z_S`` (correlated across assets) and an
independent ``Z_perp``; ``Z_v = rho Z_S + sqrt(1 - rho^2) Z_perp`` and ``Z = sqrt(1 - rho^2) Z_S -
rho Z_perp`` are then independent standard normals, so each asset's step is exactly Andersen's
and, as the step shrinks, the spot shocks carry the market's correlation.

The scheme is exact in the limit of small steps; each grid interval is cut into pieces of at
most :data:`MAX_STEP_DAYS` calendar days (the default, measured in
``benchmarks/heston_bias.py``), and Richardson's extrapolation (``--richardson``) measures what
is left. Black and local-vol assets in the same simulation are stepped in the same compiled
loop (:func:`sv_paths`), and so are local-stochastic-vol assets (:mod:`fairpath.models.lsv`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from numba import njit

from fairpath.calibration import heston_for
from fairpath.errors import InputError
from fairpath.kernels import _active
from fairpath.market import integrate_vol_product
from fairpath.models.base import Model, PathState, ScalesWithSpot, Stepper, psd_cholesky
from fairpath.models.black import check_lognormal_tail
from fairpath.registry import Capability
from fairpath.stochvol import HestonParams

#: Longest step of a Heston simulation, in calendar days: each grid interval is cut into
#: equal pieces no longer than this (daily grids are stepped daily). Measured in
#: benchmarks/heston_bias.py: see docs/models.md.
MAX_STEP_DAYS = 14.0
#: paths stepped together by the compiled loop (measured on the demo note under Heston: 8
#: paths a tile 15% faster than the local-vol loop's 64: the tile's two factors per asset
#: stay in the first cache)
SV_TILE = 8
#: Andersen's switching level between the quadratic and the exponential branch of QE.
PSI_C = 1.5

#: The leverage grid of an LSV asset: the local-vol table's moneyness grid cut this many
#: times finer (early steps' particles span only a few of the table's points)
LSV_REFINE = 4

#: How each asset of a simulation is stepped (codes of the compiled loop).
BLACK, LOCAL, HESTON, LSV = 0, 1, 2, 3


@dataclass(frozen=True, slots=True)
class Heston(Model):
    """Heston's stochastic variance for the asset's level (see the module notes)."""

    kind: ClassVar[str] = "heston"
    factors: ClassVar[int] = 2
    hosts: ClassVar[tuple[str, ...]] = ("black", "local-vol")
    note_rank: ClassVar[int] = 30

    params: HestonParams | None = None

    @classmethod
    def for_asset(cls, market, name):
        return cls(name, market, heston_for(market, name))

    @property
    def capabilities(self) -> frozenset[Capability]:
        # the variance does not depend on the level, and the martingale correction makes the
        # simulated forward exact: every path is proportional to the escrowed spot. A foreign
        # asset's quanto drift moves with its instantaneous vol: its mean is not the forward
        # (which carries the Black vols' quanto term)
        return self.forward_and_scaling(quanto_forward=False)

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        check_lognormal_tail(self.market, self.name, variance, paths)

    def controls(self, product) -> list:
        """``(name, values, mean)``: a call on the asset struck at its forward on the
        product's last date, whose mean is the semi-analytic Heston price
        (:func:`fairpath.fourier.heston_price`); none with cash dividends (the level is then
        not a Heston process)."""
        from fairpath.fourier import heston_price

        market, name = self.market, self.name
        dates = product.observation_dates()
        if name not in product.underlyings() or not dates or market.dividend_times(name) \
                or market.foreign(name) is not None:  # no Fourier price with the quanto drift
            return []
        last = dates[-1]
        t = market.time(last)
        if not t > 0:
            return []
        df = float(market.discount.df(t))
        spot, fwd = self.asset.spot, float(market.forward(name, t))
        r = -math.log(df) / t
        q = r - math.log(fwd / spot) / t
        mean = heston_price(spot, fwd, t, r, q, *self.params.numbers, right="call")

        def values(ps, name=name, last=last, df=df, k=fwd):
            return df * np.maximum(ps.level(name, last) - k, 0.0)
        return [(f"Heston call on {name} at the forward on {last} (Fourier price)", values,
                 mean)]

    @classmethod
    def group_notes(cls, models, names, steps_per_day):
        out = [f"Heston stochastic volatility for {', '.join(m.name for m in models)} "
               f"(Andersen's QE scheme with martingale correction, steps of at most "
               f"{MAX_STEP_DAYS / max(steps_per_day, 1):g} days)"]
        fitted = [m.name for m in models if m.params.calibrated]
        if fitted:
            out.append(f"Heston parameters of {', '.join(fitted)} calibrated to the vol surface")
        low = [f"{m.name} ({m.params.feller:.2f})" for m in models if m.params.feller < 1]
        if low:
            out.append("Feller condition 2 kappa theta / vol_of_vol^2 below 1 for "
                       f"{', '.join(low)}: the variance touches zero (the QE scheme handles it)")
        return out

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return StochSteps(models, correlation, times, steps_per_day)


def stepping_code(m: Model) -> int:
    """How the compiled loop steps the asset of model ``m``."""
    if m.kind == "heston":
        return HESTON
    if m.kind == "lsv":
        return LSV
    return LOCAL if m.kind == "local-vol" else BLACK


def qe_coefficients(p: HestonParams, dt: np.ndarray, xi: float | None = None) -> np.ndarray:
    """(9, steps): per step ``exp(-kappa dt)``, the two terms of the conditional variance
    (``s^2 = v c1 + c2``), Andersen's ``K0, K1, K2`` and ``K3 = K4`` (central scheme), for vol
    of vol ``xi`` (default the parameters'), then ``dt`` and ``(1 - exp(-kappa dt)) / kappa``
    (the integrated variance of a deterministic variance is ``theta dt + (v - theta)`` times
    it)."""
    k, th, r = p.kappa, p.theta, p.spot_vol_correlation
    xi = p.vol_of_vol if xi is None else xi
    dt = np.asarray(dt, dtype=float)
    e = np.exp(-k * dt)
    if k > 0:
        c1 = xi * xi * e * (-np.expm1(-k * dt)) / k
        c2 = th * xi * xi * np.expm1(-k * dt) ** 2 / (2.0 * k)
    else:
        c1, c2 = xi * xi * dt, np.zeros_like(dt)
    out = np.zeros((9, len(dt)))
    out[0], out[1], out[2] = e, c1, c2
    out[7] = dt
    out[8] = -np.expm1(-k * dt) / k if k > 0 else dt
    if xi > 0:
        out[3] = -r * k * th * dt / xi
        out[4] = 0.5 * dt * (k * r / xi - 0.5) - r / xi
        out[5] = 0.5 * dt * (k * r / xi - 0.5) + r / xi
    out[6] = 0.5 * dt * (1.0 - r * r)  # K3 = K4 in the central scheme
    return out


class StochSteps(ScalesWithSpot, Stepper):
    """Heston (QE), local-stochastic-vol, local-vol and Black assets stepped together.

    The normals' factors are every asset's spot shock first (in the order of the names, as
    for local vol and Black, so those assets draw the same numbers as in their own models'
    simulations), then one variance shock per asset with a variance process. ``quanto``
    (assets, steps): the shift of a foreign asset's spot shock under the reporting currency's
    measure, ``rho(S, X)`` times the exchange rate's vol over the step (0 for the others)."""

    #: the normals are only read (the levels go to a new array)
    keeps_normals = True
    #: a discretisation of the dynamics whose error shrinks with the step
    discretised = True

    def __init__(self, models, correlation: np.ndarray, times: np.ndarray, sub: int):
        from fairpath.models.local_vol import local_table
        from fairpath.surface import Y_POINTS

        if isinstance(sub, bool) or not isinstance(sub, int) or sub < 1:
            raise InputError(f"must be a positive integer, got {sub!r}", key="steps_per_day")
        market = models[0].market
        n_a = len(models)
        grid = np.asarray(times, dtype=float)
        edges = np.concatenate([[0.0], grid])
        stoch = [stepping_code(m) in (HESTON, LSV) for m in models]
        day = 1.0 / 365.0
        pieces = []
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            n = sub * (max(1, math.ceil((b - a) / (MAX_STEP_DAYS * day) - 1e-9))
                       if any(stoch) else 1)
            pieces.append(np.linspace(a, b, n + 1)[1:])
        fine = np.concatenate(pieces) if pieces else edges[1:]
        starts = np.concatenate([[0.0], fine[:-1]])
        dt = fine - starts
        self.dt, self.sim_times = dt, fine
        ends = np.cumsum([len(p) for p in pieces]) - 1
        self.grid_cols = ends.astype(np.int64)
        n_f = len(fine)
        self.code = np.array([stepping_code(m) for m in models], dtype=np.int64)
        # a foreign asset's own forward, but for Black's exact steps (whose forward carries
        # the quanto drift). Under the other models the asset is stepped as in its own
        # currency with its spot shock shifted by ``-quanto`` (Girsanov: its Brownian motion
        # under the reporting currency's measure drifts by -rho(S, X) sigma_X), which gives
        # the quanto drift with the local or instantaneous vol, and under Heston and LSV the
        # variance's drift -xi sqrt(v) rho(S, v) rho(S, X) sigma_X through its correlated shock
        self.log_fwd = np.stack([np.log(np.asarray(market.x_forward(m.name, np.concatenate(
            [[0.0], fine]), quanto=bool(c == BLACK)), dtype=float))
            for m, c in zip(models, self.code, strict=True)])
        self.quanto = np.zeros((n_a, n_f))
        for i, m in enumerate(models):
            code = market.foreign(m.name)
            if code is not None and self.code[i] != BLACK:
                fx = market.asset(code).vol
                self.quanto[i] = market.quanto_correlation(m.name) * np.sqrt(
                    integrate_vol_product(fx, fx, starts, fine))
        self.vfac = np.full(n_a, -1, dtype=np.int64)
        self.gbm_sd = np.zeros((n_a, n_f))
        tables = bool(np.any((self.code == LOCAL) | (self.code == LSV)))
        # an LSV leverage lives on the local-vol grid cut finer: local-vol rows follow it
        width = Y_POINTS if not np.any(self.code == LSV) else (Y_POINTS - 1) * LSV_REFINE + 1
        self.table = np.zeros((n_a, n_f if tables else 0, width))
        self.y0, self.dy = np.zeros(n_a), np.ones(n_a)
        self.par = np.zeros((n_a, 5))  # v0, theta, rho, sqrt(1 - rho^2), xi
        self.coef = np.zeros((n_a, 9, n_f))
        self.floored = self.points = 0
        mean_var = np.zeros((n_a, n_f))
        n_v = 0
        lsv = [m for m in models if stepping_code(m) == LSV]
        if len(lsv) > 1:  # their leverage tables calibrated together (lsv.prepare_leverage)
            type(lsv[0]).prepare(lsv, starts, dt)
        for i, m in enumerate(models):
            a = market.asset(m.name)
            if stoch[i]:
                p = m.params
                xi = p.vol_of_vol * (1.0 if self.code[i] == HESTON else m.mixing)
                self.vfac[i] = n_a + n_v
                n_v += 1
                r = p.spot_vol_correlation
                self.par[i] = (p.v0, p.theta, r, math.sqrt(max(1.0 - r * r, 0.0)), xi)
                self.coef[i] = qe_coefficients(p, dt, xi)
                mean_var[i] = p.mean_variance(starts, fine)
                if self.code[i] == LSV:
                    lev = m.leverage_table(starts, dt)
                    self.table[i] = lev.values * np.sqrt(dt)[:, None]
                    self.y0[i], self.dy[i] = lev.y0, lev.dy
                    mean_var[i] = lev.mean_variance
            elif self.code[i] == LOCAL:
                lv = local_table(a.surface, starts)
                sd = np.sqrt(lv.variance * dt[:, None])
                self.y0[i], self.dy[i] = lv.y0, lv.dy
                if width != Y_POINTS:
                    coarse = np.arange(Y_POINTS, dtype=float)
                    fine_y = np.linspace(0.0, Y_POINTS - 1.0, width)
                    sd = np.stack([np.interp(fine_y, coarse, row) for row in sd])
                    self.dy[i] = lv.dy / LSV_REFINE
                self.table[i] = sd
                self.floored += lv.floored
                self.points += lv.points
                mean_var[i] = integrate_vol_product(a.vol, a.vol, starts, fine) / dt
            else:
                self.gbm_sd[i] = np.sqrt(integrate_vol_product(a.vol, a.vol, starts, fine))
                mean_var[i] = self.gbm_sd[i] ** 2 / dt
        # each grid step's variance of the log-level (Brownian-bridge corrections read it: the
        # expected variance, an approximation under stochastic vol)
        acc = np.cumsum(mean_var * dt[None, :], axis=1)
        at_ends = acc[:, self.grid_cols]
        step_var = np.diff(np.concatenate([np.zeros((n_a, 1)), at_ends], axis=1), axis=1)
        self.times = grid
        self.names = tuple(m.name for m in models)
        self.factors = n_a + n_v
        self.variance = step_var
        from fairpath.models.base import escrow_table, escrowed_log_spots

        self.log_start = escrowed_log_spots(market, self.names)
        self.escrow = escrow_table(market, self.names, self.times)
        self.corr = psd_cholesky(correlation)
        self.notes = ((f"local variance floored at a 1% vol at {self.floored} of {self.points} "
                       "points of the table (where Dupire's formula is not positive: the "
                       "surface is close to an arbitrage there)",) if self.floored else ())

    def describe_steps(self, steps_per_day: int) -> str:
        days = float(np.max(self.dt, initial=0.0)) * 365.0
        scheme = "QE" if np.any(self.code == HESTON) else "log-Euler and QE"
        if days <= 1.5 / steps_per_day + 1e-9:
            return super().describe_steps(steps_per_day).replace("log-Euler", scheme)
        return f"{scheme} steps (at most {days:.3g} days)"

    def simulate(self, z: np.ndarray) -> PathState:
        return self.state(self._escrowed(z, None))

    def _escrowed(self, z: np.ndarray, active: np.ndarray | None) -> np.ndarray:
        return sv_paths(z, self.corr, self.log_fwd, self.code, self.vfac, self.gbm_sd,
                        self.table, self.y0, self.dy, self.par, self.coef, self.log_start,
                        active, self.grid_cols, self.quanto)

    def asset_inputs(self, a: int) -> tuple:
        table = self.table[a] if self.table.shape[1] else None
        return (self.sim_times, self.grid_cols, self.log_fwd[a], int(self.code[a]),
                int(self.vfac[a]), self.gbm_sd[a], table, self.y0[a], self.dy[a],
                self.par[a], self.coef[a], self.corr[a], self.log_start[a], self.quanto[a],
                None if self.escrow is None else self.escrow[a])

    def simulate_changed(self, z: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
        return self.state_changed(self._escrowed(z, ~keep), base, keep)


@njit(cache=True, nogil=True)
def _qe(v, zv, e, c1, c2, theta):
    """Andersen's QE step of the variance from ``v`` with the normal ``zv``: (new variance,
    branch (0 quadratic, 1 exponential, 2 none), a, b^2, p, beta)."""
    m = theta + (v - theta) * e
    s2 = v * c1 + c2
    if m <= 1e-300:
        return 0.0, 2, 0.0, 0.0, 0.0, 0.0
    if s2 <= 0.0:
        return m, 2, 0.0, 0.0, 0.0, 0.0
    psi = s2 / (m * m)
    if psi <= PSI_C:
        t = 2.0 / psi
        b2 = t - 1.0 + math.sqrt(t * (t - 1.0))
        a = m / (1.0 + b2)
        w = math.sqrt(b2) + zv
        return a * w * w, 0, a, b2, 0.0, 0.0
    p = (psi - 1.0) / (psi + 1.0)
    beta = (1.0 - p) / m
    # U = Phi(zv) from its upper tail 1 - U (accurate where U is near 1): U <= p when the
    # tail is at least 1 - p
    tail = 0.5 * math.erfc(zv * 0.7071067811865476)
    if tail >= 1.0 - p:
        return 0.0, 1, 0.0, 0.0, p, beta
    return math.log((1.0 - p) / tail) / beta, 1, 0.0, 0.0, p, beta


@njit(cache=True, nogil=True)
def _sv_paths(z, out, col_of, corr, log_fwd, code, vfac, gbm_sd, table, y0, inv_dy, par,
              coef, log_x0, active, quanto):
    n, n_f, n_s = z.shape
    n_a = corr.shape[0]
    last = table.shape[2] - 1
    x = np.empty((n, n_a))
    v = np.empty((n, n_a))
    for p in range(n):
        for a in range(n_a):
            x[p, a] = log_x0[a]
            v[p, a] = par[a, 0]
    for p0 in range(0, n, SV_TILE):
        p1 = min(p0 + SV_TILE, n)
        for k in range(n_s):
            c = col_of[k]
            for a in range(n_a):
                if not active[a]:
                    continue
                step = log_fwd[a, k + 1] - log_fwd[a, k]
                kind = code[a]
                theta, rho, srho, xi = par[a, 1], par[a, 2], par[a, 3], par[a, 4]
                q = quanto[a, k]
                e_k, c1, c2 = coef[a, 0, k], coef[a, 1, k], coef[a, 2, k]
                k0, k1, k2, k34 = coef[a, 3, k], coef[a, 4, k], coef[a, 5, k], coef[a, 6, k]
                for p in range(p0, p1):
                    e = 0.0
                    for b in range(a + 1):
                        e += corr[a, b] * z[p, b, k]
                    if q != 0.0:  # under the reporting currency's measure (the quanto drift)
                        e -= q
                    if kind == 0:
                        sd = gbm_sd[a, k]
                        x[p, a] += step - 0.5 * sd * sd + sd * e
                    elif kind == 1 or kind == 3:
                        u = (x[p, a] - log_fwd[a, k] - y0[a]) * inv_dy[a]
                        if u <= 0.0:
                            sd = table[a, k, 0]
                        elif u >= last:
                            sd = table[a, k, last]
                        else:
                            i = int(u)
                            f = u - i
                            sd = table[a, k, i] + (table[a, k, i + 1] - table[a, k, i]) * f
                        if kind == 3:  # leverage times the root of the step's start variance
                            vk = v[p, a]
                            sd *= math.sqrt(vk)
                            zp = z[p, vfac[a], k]
                            vn, br, qa, qb2, qp, qbeta = _qe(vk, rho * e + srho * zp, e_k, c1,
                                                            c2, theta)
                            v[p, a] = vn
                        x[p, a] += step - 0.5 * sd * sd + sd * e
                    else:
                        vk = v[p, a]
                        zp = z[p, vfac[a], k]
                        vn, br, qa, qb2, qp, qbeta = _qe(vk, rho * e + srho * zp, e_k, c1, c2,
                                                        theta)
                        v[p, a] = vn
                        if xi <= 0.0:  # deterministic variance: an exact Gaussian step
                            iv = theta * coef[a, 7, k] + (vk - theta) * coef[a, 8, k]
                            x[p, a] += step - 0.5 * iv + math.sqrt(max(iv, 0.0)) * e
                        else:
                            aa = k2 + 0.5 * k34
                            shift = k0
                            if br == 0 and 2.0 * aa * qa < 1.0:
                                shift = (-aa * qb2 * qa / (1.0 - 2.0 * aa * qa)
                                         + 0.5 * math.log(1.0 - 2.0 * aa * qa)
                                         - (k1 + 0.5 * k34) * vk)
                            elif br == 1 and aa < qbeta:
                                shift = (-math.log(qp + qbeta * (1.0 - qp) / (qbeta - aa))
                                         - (k1 + 0.5 * k34) * vk)
                            w = k34 * (vk + vn)
                            x[p, a] += (step + shift + k1 * vk + k2 * vn
                                        + math.sqrt(max(w, 0.0)) * (srho * e - rho * zp))
                    if c >= 0:
                        out[p, a, c] = x[p, a]


def sv_paths(z: np.ndarray, corr: np.ndarray, log_fwd: np.ndarray, code: np.ndarray,
             vfac: np.ndarray, gbm_sd: np.ndarray, table: np.ndarray, y0: np.ndarray,
             dy: np.ndarray, par: np.ndarray, coef: np.ndarray, log_x0: np.ndarray,
             active: np.ndarray | None = None, cols: np.ndarray | None = None,
             quanto: np.ndarray | None = None) -> np.ndarray:
    """Log-levels (paths, assets, kept steps) of a simulation of Heston, LSV, local-vol and
    Black assets (see :class:`StochSteps`) from the normals ``z`` (paths, factors, steps),
    which are only read; kept: the steps ``cols`` (default: every step); ``quanto``: the
    quanto drifts' coefficients (default none)."""
    z = np.ascontiguousarray(z, dtype=np.float64)
    n, _, n_s = z.shape
    n_a = corr.shape[0]
    col_of = np.full(n_s, -1, dtype=np.int64)
    if cols is None:
        cols = np.arange(n_s)
    col_of[np.asarray(cols, dtype=np.int64)] = np.arange(len(cols))
    out = np.empty((n, n_a, len(cols)))
    if table.shape[1] == 0:
        table = np.zeros((n_a, 1, 2))
    _sv_paths(z, out, col_of, np.ascontiguousarray(corr, dtype=np.float64),
              np.ascontiguousarray(log_fwd, dtype=np.float64),
              np.ascontiguousarray(code, dtype=np.int64),
              np.ascontiguousarray(vfac, dtype=np.int64),
              np.ascontiguousarray(gbm_sd, dtype=np.float64),
              np.ascontiguousarray(table, dtype=np.float64),
              np.ascontiguousarray(y0, dtype=np.float64),
              np.ascontiguousarray(1.0 / np.asarray(dy, dtype=np.float64)),
              np.ascontiguousarray(par, dtype=np.float64),
              np.ascontiguousarray(coef, dtype=np.float64),
              np.ascontiguousarray(log_x0, dtype=np.float64), _active(active, n_a),
              np.zeros((n_a, n_s)) if quanto is None
              else np.ascontiguousarray(quanto, dtype=np.float64))
    return out

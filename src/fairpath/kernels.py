"""The engine's two compiled loops (numba): uniforms to normals, and normals to log-paths.

Both are plain loops over paths, compiled once (``cache=True`` keeps the machine code on disk
between runs) and run without the GIL, so the engine's threads use every core. Each path's
arithmetic is the same whatever the number of paths in the call, so results do not depend on
the chunk size or the number of threads.

* :func:`uniforms_to_normals`: clip to ``[clip, 1 - clip]`` and apply the inverse normal CDF by
  Wichura's algorithm AS 241 (``PPND16``: rational approximations in three regions, relative
  accuracy about 1e-16; M. J. Wichura, "Algorithm AS 241: The Percentage Points of the Normal
  Distribution", Applied Statistics 37(3), 1988, 477-484). Agrees with
  ``scipy.special.ndtri`` to a few units in the last place (tested), at about half its cost.
* :func:`log_paths`: the exact GBM steps on a grid, correlated by each step's lower-triangular
  factor, accumulated into log-levels, in place.
* :func:`moments`: a block's mean vector and centred cross-products in row order, and
  :func:`merge_moments`, the blocks' moments merged in order (Chan, Golub and LeVeque's
  pairwise update).
* :func:`average_option_given_shape`: an average-price option's value given a path's shape
  (the conditional estimator of :class:`fairpath.products.asian.Asian`).
"""

from __future__ import annotations

from math import erfc

import numpy as np
from numba import njit

_SQRT_HALF = 0.7071067811865476


@njit(cache=True, nogil=True, inline="always")
def _ppnd16(p: float) -> float:
    """Inverse of the standard normal CDF at ``p`` in (0, 1), Wichura's AS 241."""
    q = p - 0.5
    if abs(q) <= 0.425:
        r = 0.180625 - q * q
        num = (((((((2509.0809287301226727 * r + 33430.575583588128105) * r
                    + 67265.770927008700853) * r + 45921.953931549871457) * r
                  + 13731.693765509461125) * r + 1971.5909503065514427) * r
                + 133.14166789178437745) * r + 3.387132872796366608)
        den = (((((((5226.495278852545925 * r + 28729.085735721942674) * r
                    + 39307.89580009271061) * r + 21213.794301586595867) * r
                  + 5394.1960214247511077) * r + 687.1870074920579083) * r
                + 42.313330701600911252) * r + 1.0)
        return q * num / den
    r = p if q < 0.0 else 1.0 - p
    r = np.sqrt(-np.log(r))
    if r <= 5.0:
        r -= 1.6
        num = (((((((7.7454501427834140764e-4 * r + 0.0227238449892691845833) * r
                    + 0.24178072517745061177) * r + 1.27045825245236838258) * r
                  + 3.64784832476320460504) * r + 5.7694972214606914055) * r
                + 4.6303378461565452959) * r + 1.42343711074968357734)
        den = (((((((1.05075007164441684324e-9 * r + 5.475938084995344946e-4) * r
                    + 0.0151986665636164571966) * r + 0.14810397642748007459) * r
                  + 0.68976733498510000455) * r + 1.6763848301838038494) * r
                + 2.05319162663775882187) * r + 1.0)
    else:
        r -= 5.0
        num = (((((((2.01033439929228813265e-7 * r + 2.71155556874348757815e-5) * r
                    + 0.0012426609473880784386) * r + 0.026532189526576123093) * r
                  + 0.29656057182850489123) * r + 1.7848265399172913358) * r
                + 5.4637849111641143699) * r + 6.6579046435011037772)
        den = (((((((2.04426310338993978564e-15 * r + 1.4215117583164458887e-7) * r
                    + 1.8463183175100546818e-5) * r + 7.868691311456132591e-4) * r
                  + 0.0148753612908506148525) * r + 0.13692988092273580531) * r
                + 0.59983220655588793769) * r + 1.0)
    val = num / den
    return -val if q < 0.0 else val


@njit(cache=True, nogil=True)
def _normals_flat(u: np.ndarray, clip: float) -> None:
    hi = 1.0 - clip
    for i in range(u.size):
        p = u[i]
        if p < clip:
            p = clip
        elif p > hi:
            p = hi
        u[i] = _ppnd16(p)


def uniforms_to_normals(u: np.ndarray, clip: float) -> np.ndarray:
    """Standard normals from uniforms, in place (a C-contiguous float64 array of any shape).

    >>> import numpy as np
    >>> uniforms_to_normals(np.array([0.5, 0.975, 0.0]), 1e-16).round(6).tolist()
    [0.0, 1.959964, -8.222082]
    """
    if not (u.flags.c_contiguous and u.dtype == np.float64):
        raise ValueError("uniforms_to_normals needs a C-contiguous float64 array")
    _normals_flat(u.reshape(-1), clip)
    return u


@njit(cache=True, nogil=True)
def _log_paths(z: np.ndarray, drift: np.ndarray, factor: np.ndarray,
               log_spots: np.ndarray) -> None:
    n, n_a, n_s = z.shape
    if n_a == 1:  # one asset: a running sum per path
        for i in range(n):
            acc = log_spots[0]
            for k in range(n_s):
                acc += drift[0, k] + factor[k, 0, 0] * z[i, 0, k]
                z[i, 0, k] = acc
        return
    for i in range(n):
        for k in range(n_s):
            # assets from the last down: asset a reads the normals of assets b <= a, which are
            # still untouched when it overwrites its own
            for a in range(n_a - 1, -1, -1):
                inc = drift[a, k]
                for b in range(a + 1):
                    inc += factor[k, a, b] * z[i, b, k]
                prev = log_spots[a] if k == 0 else z[i, a, k - 1]
                z[i, a, k] = prev + inc


@njit(cache=True, nogil=True)
def _log_paths_some(z: np.ndarray, drift: np.ndarray, factor: np.ndarray,
                    log_spots: np.ndarray, active: np.ndarray) -> None:
    """:func:`_log_paths` for the ``active`` assets only (the others' rows keep their normals);
    a loop of its own, so that the full one carries no test per step."""
    n, n_a, n_s = z.shape
    for i in range(n):
        for k in range(n_s):
            for a in range(n_a - 1, -1, -1):
                if not active[a]:
                    continue
                inc = drift[a, k]
                for b in range(a + 1):
                    inc += factor[k, a, b] * z[i, b, k]
                prev = log_spots[a] if k == 0 else z[i, a, k - 1]
                z[i, a, k] = prev + inc


def log_paths(z: np.ndarray, drift: np.ndarray, factor: np.ndarray,
              log_spots: np.ndarray, active: np.ndarray | None = None) -> np.ndarray:
    """Log-levels on the grid from step normals ``z`` (paths, assets, steps), in place:
    ``x[a, k] = x[a, k-1] + drift[a, k] + sum_{b <= a} factor[k, a, b] z[b, k]``,
    ``x[a, -1] = log_spots[a]``. Only the ``active`` assets (default: all) are stepped; the
    others' rows keep their normals."""
    if not (z.flags.c_contiguous and z.dtype == np.float64):
        z = np.ascontiguousarray(z, dtype=np.float64)
    args = (z, np.ascontiguousarray(drift, dtype=np.float64),
            np.ascontiguousarray(factor, dtype=np.float64),
            np.ascontiguousarray(log_spots, dtype=np.float64))
    if active is None or bool(np.all(active)):
        _log_paths(*args)
    elif np.any(active):
        _log_paths_some(*args, _active(active, z.shape[1]))
    return z


def _active(active: np.ndarray | None, n_a: int) -> np.ndarray:
    return np.ones(n_a, dtype=np.bool_) if active is None else \
        np.ascontiguousarray(active, dtype=np.bool_)


@njit(cache=True, nogil=True)
def _moments(v: np.ndarray, mean: np.ndarray, m2: np.ndarray) -> None:
    n, k = v.shape
    for j in range(k):
        acc = 0.0
        for i in range(n):
            acc += v[i, j]
        mean[j] = acc / n
    for a in range(k):
        for b in range(a, k):
            acc = 0.0
            for i in range(n):
                acc += (v[i, a] - mean[a]) * (v[i, b] - mean[b])
            m2[a, b] = acc
            m2[b, a] = acc


def moments(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean vector and centred cross-product matrix of the rows of ``v`` (samples x columns),
    summed in row order (two passes), so the same rows always give the same numbers."""
    v = np.ascontiguousarray(v, dtype=np.float64)
    k = v.shape[1]
    mean = np.empty(k)
    m2 = np.empty((k, k))
    _moments(v, mean, m2)
    return mean, m2


@njit(cache=True, nogil=True)
def _average_given_shape(x, weights, beta, mean_y_weights, m_y, v_y, k_eff, put, out):
    n, m = x.shape
    sv = np.sqrt(v_y)
    a = np.empty(m)
    for p in range(n):
        y = 0.0
        for i in range(m):
            y += mean_y_weights[i] * x[p, i]
        total = 0.0
        for i in range(m):
            a[i] = weights[i] * np.exp(x[p, i] - beta[i] * (y - m_y))
            total += a[i] * np.exp(0.5 * beta[i] * beta[i] * v_y)
        if k_eff <= 0.0:  # the average is above the strike whatever happens
            out[p] = 0.0 if put else total - k_eff
            continue
        # the root u* of log A(u) = log k_eff, A(u) = sum a_i exp(beta_i u): log A is convex
        # and increasing with slope between the smallest and largest beta, so Newton's method
        # converges (from the right after at most one step) and nothing overflows
        u = 0.0
        log_k = np.log(k_eff)
        fp = 0.0
        for _ in range(200):
            top = -np.inf
            for i in range(m):
                if a[i] > 0.0:
                    top = max(top, np.log(a[i]) + beta[i] * u)
            s0 = 0.0
            s1 = 0.0
            for i in range(m):
                if a[i] > 0.0:
                    e = np.exp(np.log(a[i]) + beta[i] * u - top)
                    s0 += e
                    s1 += beta[i] * e
            fp = s1 / s0
            if fp <= 0.0:
                break
            step = (top + np.log(s0) - log_k) / fp
            u -= step
            if abs(step) <= 1e-14 * (1.0 + abs(u)):
                break
        if fp <= 0.0:  # no dependence on the conditioning variable
            out[p] = max(k_eff - total, 0.0) if put else max(total - k_eff, 0.0)
            continue
        # call: sum_i a_i e^{beta_i^2 v / 2} P(U > u* - beta_i v) - k P(U > u*); the put sums
        # the other tails directly (no cancellation far out of the money)
        sign = -1.0 if put else 1.0
        val = -sign * k_eff * 0.5 * erfc(sign * u / sv / np.sqrt(2.0))
        for i in range(m):
            val += sign * (a[i] * np.exp(0.5 * beta[i] * beta[i] * v_y)
                           * 0.5 * erfc(-sign * (beta[i] * v_y - u) / sv / np.sqrt(2.0)))
        out[p] = val


def average_option_given_shape(x: np.ndarray, weights: np.ndarray, beta: np.ndarray,
                               y_weights: np.ndarray, m_y: float, v_y: float, k_eff: float,
                               put: bool = False) -> np.ndarray:
    """``E[(A - k_eff)^+ | path shape]`` (``(k_eff - A)^+`` for a put) per path.

    ``A = sum_i weights_i exp(x_i)`` with the log-levels ``x`` (paths, fixings) jointly
    normal; the conditioning is on everything but ``Y = sum_i y_weights_i x_i`` (mean ``m_y``,
    variance ``v_y``, ``beta_i = Cov(x_i, Y) / v_y``). Given the shape ``x - beta (Y - m_y)``,
    ``A`` is a sum of exponentials of one normal, increasing, so the expectation is a sum of
    normal CDFs at its root (conditioning on the geometric average, after Curran 1994)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    out = np.empty(x.shape[0])
    _average_given_shape(x, np.ascontiguousarray(weights, dtype=np.float64),
                         np.ascontiguousarray(beta, dtype=np.float64),
                         np.ascontiguousarray(y_weights, dtype=np.float64), float(m_y),
                         float(v_y), float(k_eff), bool(put), out)
    return out


@njit(cache=True, nogil=True)
def _merge(ns, means, m2s, mean, m2):
    b, k = means.shape
    n = ns[0]
    for j in range(k):
        mean[j] = means[0, j]
        for i in range(k):
            m2[j, i] = m2s[0, j, i]
    for p in range(1, b):
        n2 = ns[p]
        total = n + n2
        f = n * n2 / total
        for j in range(k):
            dj = means[p, j] - mean[j]
            for i in range(k):
                m2[j, i] += m2s[p, j, i] + dj * (means[p, i] - mean[i]) * f
        for j in range(k):
            mean[j] += (means[p, j] - mean[j]) * (n2 / total)
        n = total
    return n


def merge_moments(ns: np.ndarray, means: np.ndarray, m2s: np.ndarray
                  ) -> tuple[int, np.ndarray, np.ndarray]:
    """Count, mean and centred cross-products of the union of blocks, merged in order:
    ``m2 = m2_a + m2_b + delta delta' n_a n_b / n``, ``mean = mean_a + delta n_b / n``."""
    k = means.shape[1]
    mean = np.empty(k)
    m2 = np.empty((k, k))
    n = _merge(np.ascontiguousarray(ns, dtype=np.int64),
               np.ascontiguousarray(means, dtype=np.float64),
               np.ascontiguousarray(m2s, dtype=np.float64), mean, m2)
    return int(n), mean, m2


@njit(cache=True, nogil=True, inline="always")
def _upper(d, s, fwd):
    """P(X > level) and E[X 1{X > level}] for log X ~ N(mu, s^2), E[X] = fwd, given
    d = (mu - log level) / s."""
    return 0.5 * erfc(-d * _SQRT_HALF), fwd * 0.5 * erfc(-(d + s) * _SQRT_HALF)


@njit(cache=True, nogil=True)
def _extreme_given_last(others, mu, var, k, worst, put, out):
    n, m = others.shape
    s = np.sqrt(var)
    log_k = np.log(k)
    for p in range(n):
        e = others[p, 0]
        for j in range(1, m):
            e = min(e, others[p, j]) if worst else max(e, others[p, j])
        lvl = np.exp(e)
        fwd = np.exp(mu[p] + 0.5 * var)
        p_l, ex_l = _upper((mu[p] - e) / s, s, fwd)
        if lvl <= k:
            p_k, ex_k = p_l, ex_l  # only needed when the strike is the nearer level
        if lvl != k:
            p_k, ex_k = _upper((mu[p] - log_k) / s, s, fwd)
        if worst and put:  # (k - min(m, X))^+ = (k - m)^+ P(X >= m) + E[(k - X) 1{X < min(m, k)}]
            p_c, ex_c = (p_l, ex_l) if lvl <= k else (p_k, ex_k)
            out[p] = max(k - lvl, 0.0) * p_l + k * (1.0 - p_c) - (fwd - ex_c)
        elif worst:  # (min(m, X) - k)^+: X between k and m, or m when X is above it
            out[p] = (ex_k - ex_l) - k * (p_k - p_l) + (lvl - k) * p_l if lvl > k else 0.0
        elif not put:  # (max(M, X) - k)^+ = (M - k)^+ P(X <= M) + E[(X - k) 1{X > max(M, k)}]
            p_c, ex_c = (p_k, ex_k) if lvl <= k else (p_l, ex_l)
            out[p] = max(lvl - k, 0.0) * (1.0 - p_l) + ex_c - k * p_c
        elif lvl < k:  # (k - max(M, X))^+: X between M and k, or M when X is below it
            out[p] = k * (p_l - p_k) - (ex_l - ex_k) + (k - lvl) * (1.0 - p_l)
        else:
            out[p] = 0.0


def extreme_given_last(others: np.ndarray, mu: np.ndarray, var: float, k: float, worst: bool,
                       put: bool) -> np.ndarray:
    """``E[(k - min(M, X))^+ | others]`` and the other three worst/best, call/put cases, per
    path: ``M`` the worst (best) of the other assets' performances (``others`` holds their
    logs), ``log X ~ N(mu, var)`` the last asset's given them (lognormal partial moments)."""
    out = np.empty(others.shape[0])
    _extreme_given_last(np.ascontiguousarray(others, dtype=np.float64),
                        np.ascontiguousarray(mu, dtype=np.float64), float(var), float(k),
                        bool(worst), bool(put), out)
    return out


#: paths stepped together by the local-vol kernel (a tile's normals stay in the first cache)
LV_TILE = 64


@njit(cache=True, nogil=True)
def _local_vol_paths(z, out, col_of, corr, log_fwd, lv_sd, lv_y0, lv_inv_dy, gbm_sd, is_lv,
                     log_x0, active, quanto):
    """Log-Euler steps of each asset's log-level x (the escrowed level when it pays cash
    dividends): ``x_{k+1} = x_k + log F_{k+1} - log F_k - s^2/2 + s e`` with ``e`` the
    correlated normal and ``s`` the step's standard deviation: the local vol at
    ``(t_k, y = x_k - log F_k)`` times the root of the step (tabulated as such), or the GBM
    step's. The level after step ``k`` goes to ``out[p, a, col_of[k]]`` (none when negative);
    ``z`` is only read. Assets not ``active`` are skipped (their rows of ``out`` untouched).
    A foreign asset's drift in the reporting currency has the quanto term ``-quanto[a, k] s``
    (``quanto`` is its correlation with its exchange rate times the rate's step deviation, so
    the term is ``-rho sigma_loc sigma_X dt`` with the asset's own local vol); zero else."""
    n, n_a, n_s = z.shape
    last = lv_sd.shape[2] - 1
    x = np.empty((n, n_a))
    for p in range(n):
        for a in range(n_a):
            x[p, a] = log_x0[p, a]
    # step by step across a tile of paths: a step's row of the table stays in cache for all
    # of them, and so do the tile's normals of the next few steps
    for p0 in range(0, n, LV_TILE):
        p1 = min(p0 + LV_TILE, n)
        for k in range(n_s):
            c = col_of[k]
            for a in range(n_a):
                if not active[a]:
                    continue
                step = log_fwd[a, k + 1] - log_fwd[a, k]
                for p in range(p0, p1):
                    e = 0.0
                    for b in range(a + 1):
                        e += corr[a, b] * z[p, b, k]
                    if is_lv[a]:
                        u = (x[p, a] - log_fwd[a, k] - lv_y0[a]) * lv_inv_dy[a]
                        if u <= 0.0:
                            sd = lv_sd[a, k, 0]
                        elif u >= last:
                            sd = lv_sd[a, k, last]
                        else:
                            i = int(u)
                            f = u - i
                            sd = lv_sd[a, k, i] + (lv_sd[a, k, i + 1] - lv_sd[a, k, i]) * f
                    else:
                        sd = gbm_sd[a, k]
                    x[p, a] += step - 0.5 * sd * sd - quanto[a, k] * sd + sd * e
                    if c >= 0:
                        out[p, a, c] = x[p, a]


def local_vol_paths(z: np.ndarray, corr: np.ndarray, log_fwd: np.ndarray, lv_sd: np.ndarray,
                    lv_y0: np.ndarray, lv_dy: np.ndarray, gbm_sd: np.ndarray,
                    is_lv: np.ndarray, log_x0: np.ndarray, active: np.ndarray | None = None,
                    cols: np.ndarray | None = None, quanto: np.ndarray | None = None
                    ) -> np.ndarray:
    """Log-levels under local volatility (see :func:`_local_vol_paths`) from the normals ``z``
    (paths, assets, fine steps), which are left as they are, in a new array (paths, assets,
    kept steps): after the fine steps ``cols`` (default: every step).

    ``corr`` is the lower-triangular factor of the assets' correlation; ``log_fwd`` (assets,
    steps + 1) the log forward of the simulated level at the grid's start and every step;
    ``lv_sd`` (assets, steps, y points) each local-vol asset's step standard deviation (local
    vol times the root of the step) on a uniform grid of forward log-moneyness from ``lv_y0``
    by ``lv_dy`` (linear interpolation, flat beyond); ``gbm_sd`` (assets, steps) the others';
    ``active`` (default: all) the assets to step (the rows of the others are left empty);
    ``log_x0`` the start, (assets,) or per path (paths, assets)."""
    z = np.ascontiguousarray(z, dtype=np.float64)
    n, n_a, n_s = z.shape
    log_x0 = np.ascontiguousarray(np.broadcast_to(np.asarray(log_x0, dtype=np.float64),
                                                  (n, n_a)))
    col_of = np.full(n_s, -1, dtype=np.int64)
    if cols is None:
        cols = np.arange(n_s)
    col_of[np.asarray(cols, dtype=np.int64)] = np.arange(len(cols))
    out = np.empty((n, n_a, len(cols)))
    _local_vol_paths(z, out, col_of, np.ascontiguousarray(corr, dtype=np.float64),
                     np.ascontiguousarray(log_fwd, dtype=np.float64),
                     np.ascontiguousarray(lv_sd, dtype=np.float64),
                     np.ascontiguousarray(lv_y0, dtype=np.float64),
                     np.ascontiguousarray(1.0 / np.asarray(lv_dy, dtype=np.float64)),
                     np.ascontiguousarray(gbm_sd, dtype=np.float64),
                     np.ascontiguousarray(is_lv, dtype=np.bool_),
                     log_x0, _active(active, n_a),
                     np.zeros((n_a, n_s)) if quanto is None
                     else np.ascontiguousarray(quanto, dtype=np.float64))
    return out


#: paths built together by the Brownian-bridge kernel
BRIDGE_TILE = 32


@njit(cache=True, nogil=True)
def _bridge_paths(zt, order, left, right, wl, wr, sd, sqrt_dt, out):
    n, cols = zt.shape
    k, fac = out.shape[0], out.shape[1]
    w = np.empty((n + 1, BRIDGE_TILE))
    for f in range(fac):
        for p0 in range(0, k, BRIDGE_TILE):
            m = min(BRIDGE_TILE, k - p0)
            c0 = f * k + p0
            for t in range(m):
                w[0, t] = 0.0
            for j in range(n):
                i, lo, hi = order[j], left[j], right[j]
                for t in range(m):
                    val = zt[j, c0 + t] * sd[j]
                    if lo:
                        val = val + wl[j] * w[lo, t]
                    if hi > 0:
                        val = val + wr[j] * w[hi, t]
                    w[i, t] = val
            for t in range(m):
                for s in range(n):
                    out[p0 + t, f, s] = (w[s + 1, t] - w[s, t]) / sqrt_dt[s]


def bridge_paths(zt: np.ndarray, order: np.ndarray, left: np.ndarray, right: np.ndarray,
                 wl: np.ndarray, wr: np.ndarray, sd: np.ndarray, sqrt_dt: np.ndarray,
                 factors: int) -> np.ndarray:
    """Normals in Brownian-bridge construction order, time-major (``zt[j]``: construction
    step ``j`` of every factor's paths, factor by factor), to each path's normalised step
    increments, shape (paths, factors, steps): the bridge and the transposition in one pass,
    a tile of paths at a time (the same arithmetic, in the same order, as building the
    bridge row by row)."""
    n, cols = zt.shape
    out = np.empty((cols // factors, factors, n))
    _bridge_paths(np.ascontiguousarray(zt), order, left, right, wl, wr, sd, sqrt_dt, out)
    return out


@njit(cache=True, nogil=True)
def _bridge_survival(g, lo, log_init, x0, shifted, var, use, survive, low, high, lowest):
    n, n_a, _ = g.shape
    n_s = shifted.shape[1]
    for i in range(n):
        s, lo_, hi_ = 1.0, 1.0, 1.0
        worst = np.inf
        for k in range(n_s):
            keep, total, top = 1.0, 0.0, 0.0
            for a in range(n_a):
                xk = g[i, a, lo + k] - log_init[a]
                if xk < worst:
                    worst = xk
                if not use[k]:
                    continue
                v = var[a, k]
                prev = x0[i, a] if k == 0 else g[i, a, lo + k - 1] - log_init[a]
                da = prev - shifted[a, k]
                db = xk - shifted[a, k]
                if v <= 0.0 or da <= 0.0 or db <= 0.0:
                    continue
                e = 2.0 * da * db / v
                if e > 40.0:  # exp(-40) < half an ulp of 1: 1 - p is exactly 1
                    continue
                p = np.exp(-e)
                keep *= 1.0 - p
                total += p
                if p > top:
                    top = p
            if use[k]:
                s *= keep
                hi_ *= 1.0 - top
                lo_ *= max(1.0 - total, 0.0)
        survive[i] = s
        low[i] = lo_
        high[i] = hi_
        lowest[i] = worst


def bridge_survival(g: np.ndarray, lo: int, log_init: np.ndarray, x0: np.ndarray,
                    shifted: np.ndarray, var: np.ndarray, use: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per path, over the grid columns ``lo .. lo + steps - 1`` of the log-levels ``g`` (paths,
    assets, grid dates) less ``log_init``: the product over steps ``k`` (where ``use[k]``) and
    assets ``a`` of ``1 - p``, ``p = exp(-2 (prev - s) (x - s) / v)`` the Brownian-bridge
    crossing probability of the level ``s = shifted[a, k]`` between the step's start ``prev``
    (``x0`` for the first) and its end ``x`` of variance ``v = var[a, k]`` (0 where an end is at
    or below ``s``); the per-step bounds ``prod (1 - max_a p)`` (high) and ``prod max(1 -
    sum_a p, 0)`` (low); and the lowest ``x`` over the assets and columns. Returns
    ``(survival, low, high, lowest)``."""
    n = g.shape[0]
    out = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    _bridge_survival(np.ascontiguousarray(g, dtype=np.float64), np.int64(lo),
                     np.ascontiguousarray(log_init, dtype=np.float64),
                     np.ascontiguousarray(x0, dtype=np.float64),
                     np.ascontiguousarray(shifted, dtype=np.float64),
                     np.ascontiguousarray(var, dtype=np.float64),
                     np.ascontiguousarray(use, dtype=np.bool_), *out)
    return out

"""Implied-volatility surfaces, their arbitrage checks, and Dupire's local volatility.

A surface is a table of Black volatilities by tenor and by strike as a fraction of spot. It is
handled in total implied variance ``w(T, y) = sigma(T, K)^2 T`` against forward log-moneyness
``y = log(K / F(T))``:

* **in strike**, at each tenor, a monotone-preserving cubic (PCHIP, Fritsch-Carlson) through the
  quoted total variances in ``y``: smooth (continuous first derivative), and it never invents
  wiggles between quotes; **beyond the quoted strikes the implied vol levels off and is then
  flat**: the slope of total variance at the first and last quote is brought linearly to zero
  over a short length (the shortest of ``WING_LENGTHS`` standard deviations that keeps the
  density positive there), after which total variance is constant in ``y``. Holding the
  wing quote's vol flat from the quote itself would leave a kink wherever the smile still
  rises towards the wing: a negative point mass of density, a butterfly arbitrage that no
  check on the quotes can see, which also distorts Dupire's formula nearby;
* **in maturity**, at fixed forward moneyness, linear in total variance between tenors; before
  the first tenor the implied vol is that of the first tenor (``w`` grows linearly from 0), and
  after the last the implied vol of the last tenor carries on (``w`` grows linearly in ``T``).

Arbitrage checks, before any use (a surface that fails is refused, never repaired):

* **calendar**: total variance must not decrease with maturity at fixed forward moneyness;
* **butterfly**: Gatheral's density condition ``g(y) >= 0`` at every tenor, with
  ``g = (1 - y w' / (2 w))^2 - w'^2 / 4 (1 / w + 1 / 4) + w'' / 2`` (J. Gatheral and
  A. Jacquier, "Arbitrage-free SVI volatility surfaces", Quantitative Finance 14(1), 2014,
  Lemma 2.2), checked on a fine grid across the quoted strikes and the wings' levelling off.

Local volatility by Dupire's formula in total-variance form (J. Gatheral, "The Volatility
Surface", Wiley 2006, equation 1.10):

``sigma_loc^2(T, y) = (dw/dT) / (1 - y/w dw/dy + 1/4 (-1/4 - 1/w + y^2/w^2) (dw/dy)^2
+ 1/2 d2w/dy2)``,

tabulated on a grid of times and log-moneyness. Where the numerator or the denominator is not
positive (possible at the grid's far edges even for a clean surface), the local variance is
floored at ``LOCAL_VAR_FLOOR`` and the floored points are counted and reported with the price.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import PchipInterpolator

from fairpath.errors import InputError

#: Floor of the local variance where Dupire's formula is not positive (a 1% vol).
LOCAL_VAR_FLOOR = 1e-4
#: Points of the log-moneyness grid of the local-vol table, and its half-width in standard
#: deviations of the longest maturity.
Y_POINTS = 401
Y_WIDTH = 6.0
#: Tolerances of the arbitrage checks (rounding in hand-typed quotes).
CALENDAR_TOL = 1e-10
BUTTERFLY_TOL = 1e-10


@dataclass(frozen=True, slots=True)
class VolSurface:
    """Black vols ``vols[i][j]`` at ``times[i]`` (years) and strike ``strikes[j]`` x spot.

    ``forward_ratio(t)`` (the forward over the spot) converts strikes to forward moneyness;
    it is set when the surface is attached to an asset (:meth:`attach`).

    Examples
    --------
    >>> s = VolSurface((0.5, 1.0), (0.9, 1.0, 1.1), ((0.22, 0.2, 0.19), (0.22, 0.2, 0.19)))
    >>> round(float(s.implied(1.0, 1.0)), 6)  # at the money, forward = spot here
    0.2
    """

    times: tuple[float, ...]
    strikes: tuple[float, ...]
    vols: tuple[tuple[float, ...], ...]
    #: forward / spot at each tenor (1 until attached to an asset)
    fwd_ratio: tuple[float, ...] = ()
    label: str = field(default="", compare=False)
    #: the tenors as the market file writes them (``"6M"``), for messages
    tenor_names: tuple[str, ...] = field(default=(), compare=False)

    def __post_init__(self):
        t = np.asarray(self.times, dtype=float)
        k = np.asarray(self.strikes, dtype=float)
        if any(np.ndim(row) != 1 or len(row) != len(self.strikes) for row in self.vols):
            raise InputError(f"must have one row of {len(self.strikes)} vols per tenor; got "
                             f"rows of {[int(np.size(row)) for row in self.vols]} vols",
                             key="vol_surface.vols")
        v = np.asarray(self.vols, dtype=float)
        if t.ndim != 1 or len(t) < 1 or np.any(~np.isfinite(t)) or np.any(t <= 0):
            raise InputError("tenors must be positive", key="vol_surface.tenors")
        if np.any(np.diff(t) <= 0):
            raise InputError("tenors must be strictly increasing", key="vol_surface.tenors")
        if k.ndim != 1 or len(k) < 2 or np.any(~np.isfinite(k)) or np.any(k <= 0):
            raise InputError("strikes must be at least two positive fractions of spot",
                             key="vol_surface.strikes")
        if np.any(np.diff(k) <= 0):
            raise InputError("strikes must be strictly increasing", key="vol_surface.strikes")
        if v.shape != (len(t), len(k)):
            raise InputError(f"must have one row of {len(k)} vols per tenor ({len(t)} rows); "
                             f"got shape {v.shape if v.ndim == 2 else 'ragged rows'}",
                             key="vol_surface.vols")
        if np.any(~np.isfinite(v)) or np.any(v <= 0):
            i, j = np.argwhere(~(np.isfinite(v) & (v > 0)))[0]
            raise InputError(f"must be positive: vols[{i}][{j}] = {v[i, j]}",
                             key="vol_surface.vols")
        if self.fwd_ratio and len(self.fwd_ratio) != len(t):
            raise InputError("one forward ratio per tenor", key="vol_surface")

    # -- construction ----------------------------------------------------------------------
    def attach(self, forward_ratio) -> VolSurface:
        """The surface with forwards (``forward_ratio(t) = F(t) / spot``) for moneyness."""
        return VolSurface(self.times, self.strikes, self.vols,
                          tuple(float(forward_ratio(t)) for t in self.times), self.label,
                          self.tenor_names)

    def shifted(self, dv: float) -> VolSurface:
        """Every quoted vol moved by ``dv`` (a parallel vega bump)."""
        return VolSurface(self.times, self.strikes,
                          tuple(tuple(x + dv for x in row) for row in self.vols),
                          self.fwd_ratio, self.label, self.tenor_names)

    # -- interpolation ---------------------------------------------------------------------
    def _rows(self):
        """Per tenor, total variance against forward log-moneyness (a :class:`_Row`)."""
        fr = self.fwd_ratio or tuple(1.0 for _ in self.times)
        out = []
        for i, t in enumerate(self.times):
            y = np.log(np.asarray(self.strikes) / fr[i])
            w = np.asarray(self.vols[i]) ** 2 * t
            out.append(_Row.build(y, w))
        return out

    def total_variance(self, t, y, rows=None) -> np.ndarray:
        """``w(t, y)`` on arrays (broadcast), with the rules of the module notes."""
        rows = rows if rows is not None else _rows_cached(self)
        t, y = np.broadcast_arrays(np.asarray(t, dtype=float), np.asarray(y, dtype=float))
        ft, fy = t.ravel(), y.ravel()
        per = self._implied_variances(fy, rows)
        ts = np.asarray(self.times)
        out = np.empty(ft.shape)
        before, after = ft <= ts[0], ft >= ts[-1]
        mid = ~(before | after)
        out[before] = per[0, before] * ft[before]
        out[after] = per[-1, after] * ft[after]
        if mid.any():
            j = np.searchsorted(ts, ft[mid], side="right") - 1
            cols = np.nonzero(mid)[0]
            t0, t1 = ts[j], ts[j + 1]
            wa, wb = per[j, cols] * t0, per[j + 1, cols] * t1
            out[mid] = wa + (wb - wa) * (ft[mid] - t0) / (t1 - t0)
        return out.reshape(t.shape)

    def variance_slope(self, t: float, y: np.ndarray, rows=None) -> np.ndarray:
        """``dw/dT`` just after ``t`` (exact for the piecewise-linear maturity rule)."""
        rows = rows if rows is not None else _rows_cached(self)
        per = self._implied_variances(np.asarray(y, dtype=float), rows)
        ts = np.asarray(self.times)
        if t < ts[0]:
            return per[0]
        if t >= ts[-1]:
            return per[-1]
        j = int(np.searchsorted(ts, t, side="right") - 1)
        return (per[j + 1] * ts[j + 1] - per[j] * ts[j]) / (ts[j + 1] - ts[j])

    def _implied_variances(self, y: np.ndarray, rows) -> np.ndarray:
        """(tenors, len(y)): each tenor's implied variance (vol^2) at forward moneyness y."""
        return np.stack([r(y) / T for r, T in zip(rows, self.times, strict=True)])

    def implied(self, t, m) -> np.ndarray:
        """Black vol at time ``t`` and strike ``m`` x spot."""
        t = np.asarray(t, dtype=float)
        fr = np.interp(t, self.times, self.fwd_ratio or [1.0] * len(self.times))
        y = np.log(np.asarray(m, dtype=float) / fr)
        return np.sqrt(self.total_variance(np.ravel(t) * np.ones_like(np.ravel(y)),
                                           np.ravel(y)).reshape(np.broadcast(t, y).shape) / t)

    def atm_vols(self) -> tuple[float, ...]:
        """Black vol at the forward (``y = 0``) at each tenor: the at-the-money term
        structure used by ``--flat-vol``."""
        rows = _rows_cached(self)
        return tuple(float(math.sqrt(r(np.zeros(1))[0] / t))
                     for r, t in zip(rows, self.times, strict=True))

    # -- arbitrage -------------------------------------------------------------------------
    def check(self, *, source: str | None = None, key: str = "vol_surface") -> None:
        """Refuse a surface with a calendar or butterfly arbitrage, naming where (tenors as
        the market file writes them, when it does)."""
        names = self.tenor_names or [f"{t:g}y" for t in self.times]
        rows = _rows_cached(self)
        grid = np.linspace(min(r.lo for r in rows), max(r.hi for r in rows), 1601)
        prev = None
        for i, r in enumerate(rows):
            w = r(grid)
            if prev is not None:
                bad = w < prev - CALENDAR_TOL * max(1.0, float(np.max(prev)))
                if bad.any():
                    at = int(np.argmax(prev - w))  # where total variance falls most
                    y = grid[at]
                    t0, t1 = self.times[i - 1], self.times[i]
                    need = math.sqrt(prev[at] / t1) - math.sqrt(max(w[at], 0.0) / t1)
                    cut = math.sqrt(prev[at] / t0) - math.sqrt(w[at] / t0)
                    raise InputError(
                        f"calendar arbitrage: total variance falls from tenor {names[i - 1]} "
                        f"to {names[i]} at strike {self._strike_name(i, y)} (forward "
                        f"moneyness {y:+.3f}); look at those two quotes: raising the "
                        f"{names[i]} vol there by about {100 * need:.2f} vol points, or "
                        f"lowering the {names[i - 1]} one by about {100 * cut:.2f}, removes "
                        "it", source=source, key=key)
            prev = w
            g, y = r.butterfly()
            if g.min() < -BUTTERFLY_TOL:
                yy = y[np.argmin(g)]
                raise InputError(
                    f"butterfly arbitrage at tenor {names[i]} near strike "
                    f"{self._strike_name(i, yy)}: Gatheral's density condition g = "
                    f"{g.min():.3g} < 0 (the smile is too steep or too curved there)"
                    f"{self._butterfly_fix(i, yy)}", source=source, key=key)

    def _butterfly_fix(self, i: int, y: float) -> str:
        """The smallest move of one of the three quotes nearest ``y`` on tenor ``i`` (up or
        down, in steps of a quarter of a vol point up to 30) that clears the row's density
        condition, said as a clause (or that none does)."""
        fr = (self.fwd_ratio or [1.0] * len(self.times))[i]
        ys = np.log(np.asarray(self.strikes) / fr)
        near = [int(j) for j in np.argsort(np.abs(ys - y))[:3]]
        t = self.times[i]
        row = np.asarray(self.vols[i], dtype=float)
        for step in np.arange(1, 121) * 0.0025:
            for j in near:
                for sign in (1.0, -1.0):
                    trial = row.copy()
                    trial[j] += sign * step
                    if trial[j] > 0 and _Row.build(ys, trial ** 2 * t).butterfly()[0].min() \
                            >= -BUTTERFLY_TOL:
                        return (f"; moving its {self.strikes[j]:g} quote by "
                                f"{100 * sign * step:+.2f} vol points clears it")
        quotes = ", ".join(f"{self.strikes[j]:g}" for j in sorted(near))
        return f"; no single move of its {quotes} quotes of up to 30 vol points does"

    def _strike_name(self, i: int, y: float) -> str:
        fr = (self.fwd_ratio or [1.0] * len(self.times))[i]
        m = fr * math.exp(y)
        j = int(np.argmin(np.abs(np.log(np.asarray(self.strikes) / m))))
        return f"{self.strikes[j]:g} (x spot)"

    # -- local volatility ------------------------------------------------------------------
    def local_variance_table(self, t_grid: np.ndarray) -> LocalVolTable:
        """Dupire's local variance on ``t_grid`` (the simulation's step starts) and a uniform
        grid of forward log-moneyness, with the floored points counted."""
        rows = _rows_cached(self)
        t_grid = np.asarray(t_grid, dtype=float)
        t_max = max(float(t_grid.max()) if len(t_grid) else 0.0, self.times[-1])
        w_max = float(self.total_variance(t_max, 0.0, rows))
        half = Y_WIDTH * math.sqrt(max(w_max, 1e-8))
        half = max(half, 1.05 * max(max(abs(r.lo), abs(r.hi)) for r in rows))
        y = np.linspace(-half, half, Y_POINTS)
        dy = y[1] - y[0]
        # every step start at once: the tenors' implied variances on the y grid, then the
        # piecewise-linear maturity rule of total_variance and variance_slope per start
        per = self._implied_variances(y, rows)
        ts = np.asarray(self.times)
        t = np.maximum(t_grid, 1e-6)[:, None]
        j = np.clip(np.searchsorted(ts, t[:, 0], side="right") - 1, 0, max(len(ts) - 2, 0))
        if len(ts) > 1:
            t0, t1 = ts[j][:, None], ts[j + 1][:, None]
            wa, wb = per[j] * t0, per[j + 1] * t1
            w = wa + (wb - wa) * (t - t0) / (t1 - t0)
            dwdt = (per[j + 1] * t1 - per[j] * t0) / (t1 - t0)
        else:
            w = dwdt = np.zeros((len(t), Y_POINTS))
        before, after = t[:, 0] <= ts[0], t[:, 0] >= ts[-1]
        w = np.where(before[:, None], per[0] * t, np.where(after[:, None], per[-1] * t, w))
        dwdt = np.where((t[:, 0] < ts[0])[:, None], per[0],
                        np.where(after[:, None], per[-1], dwdt))
        wy = np.gradient(w, dy, axis=1)
        wyy = np.gradient(wy, dy, axis=1)
        den = (1.0 - y / w * wy + 0.25 * (-0.25 - 1.0 / w + y * y / (w * w)) * wy * wy
               + 0.5 * wyy)
        with np.errstate(divide="ignore", invalid="ignore"):
            lv = np.where((den > 0) & (dwdt > 0), dwdt / den, -1.0)
        bad = ~(lv > LOCAL_VAR_FLOOR)
        floored = int(bad.sum())
        table = np.where(bad, LOCAL_VAR_FLOOR, lv)
        return LocalVolTable(t_grid, float(y[0]), float(dy), table, floored, table.size)


#: Lengths (in standard deviations ``sqrt(w)`` of the tenor) tried, shortest first, for the
#: wings' levelling off beyond the quoted strikes (see :class:`_Row`).
WING_LENGTHS = (0.05, 0.1, 0.2, 0.4, 0.8, 1.6, 3.2)


class _Row:
    """Total variance of one tenor against forward log-moneyness ``y``.

    Inside the quotes: PCHIP through them. Beyond the first and last quote the slope of
    total variance is brought linearly to zero over a length ``L`` (a quadratic in ``y``),
    after which total variance, so the implied vol, is flat. Holding the wing quote's vol
    flat from the quote itself would leave a kink in total variance there wherever the smile
    still rises towards the wing, and a kink is a point mass of negative density (a butterfly
    arbitrage no check on the quotes can see; it also distorts Dupire's formula nearby). ``L``
    is the shortest of :data:`WING_LENGTHS` (times the tenor's at-the-money-ish standard
    deviation) for which Gatheral's ``g >= 0`` holds across the levelling off; when none
    does, the row keeps the longest and the butterfly check refuses the surface there."""

    __slots__ = ("ys", "ws", "f", "f1", "f2", "d_lo", "d_hi", "len_lo", "len_hi")

    def __init__(self, ys: np.ndarray, ws: np.ndarray):
        self.ys, self.ws = ys, ws
        self.f = PchipInterpolator(ys, ws, extrapolate=False)
        self.f1, self.f2 = self.f.derivative(1), self.f.derivative(2)
        self.d_lo, self.d_hi = (float(d) for d in self.f1(np.array([ys[0], ys[-1]])))
        self.len_lo = self.len_hi = 0.0

    @classmethod
    def build(cls, ys: np.ndarray, ws: np.ndarray) -> _Row:
        row = cls(ys, ws)
        sd = math.sqrt(float(np.max(ws)))
        for side in ("lo", "hi"):
            for length in WING_LENGTHS:
                setattr(row, "len_" + side, length * sd)
                if row.wing_ok(side):
                    break
        return row

    @property
    def lo(self) -> float:
        return float(self.ys[0]) - self.len_lo

    @property
    def hi(self) -> float:
        return float(self.ys[-1]) + self.len_hi

    def derivatives(self, y, values_only: bool = False):
        """``w``, ``dw/dy`` and ``d2w/dy2`` at ``y`` (any shape); ``w`` alone if
        ``values_only``."""
        y = np.asarray(y, dtype=float)
        w = np.empty(y.shape)
        w1 = np.zeros(y.shape)
        w2 = np.zeros(y.shape)
        y0, y1 = float(self.ys[0]), float(self.ys[-1])
        inside = (y >= y0) & (y <= y1)
        if inside.any():
            yi = y[inside]
            w[inside] = self.f(yi)
            if not values_only:
                w1[inside] = self.f1(yi)
                w2[inside] = self.f2(yi)
        for side, edge, wq, d, length, mask in (
                ("lo", y0, self.ws[0], self.d_lo, self.len_lo, y < y0),
                ("hi", y1, self.ws[-1], self.d_hi, self.len_hi, y > y1)):
            if not mask.any():
                continue
            u = np.abs(y[mask] - edge)  # distance beyond the quote
            sign = -1.0 if side == "lo" else 1.0
            slope_out = d * sign  # dw/du at the quote, u measured outwards
            if length <= 0 or slope_out == 0.0:
                w[mask] = wq
                continue
            uc = np.minimum(u, length)
            w[mask] = wq + slope_out * (uc - uc * uc / (2.0 * length))
            if not values_only:
                w1[mask] = sign * slope_out * (1.0 - uc / length)
                w2[mask] = np.where(u < length, -slope_out / length, 0.0)
        return w if values_only else (w, w1, w2)

    def __call__(self, y) -> np.ndarray:
        return self.derivatives(y, values_only=True)

    def g(self, y) -> np.ndarray:
        """Gatheral's density function ``g(y)`` (Gatheral and Jacquier 2014, Lemma 2.2)."""
        y = np.asarray(y, dtype=float)
        w, w1, w2 = self.derivatives(y)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (1 - y * w1 / (2 * w)) ** 2 - w1 * w1 / 4 * (1 / w + 0.25) + w2 / 2

    def wing_ok(self, side: str) -> bool:
        if side == "lo":
            y = np.linspace(self.lo, float(self.ys[0]), 201)
        else:
            y = np.linspace(float(self.ys[-1]), self.hi, 201)
        w = self(y)
        return bool(np.all(w > 0) and self.g(y).min() >= -BUTTERFLY_TOL)

    def butterfly(self, points: int = 801) -> tuple[np.ndarray, np.ndarray]:
        """``g(y)`` and ``y`` on a fine grid across the quoted strikes and the wings'
        levelling off."""
        y = np.linspace(self.lo, self.hi, points)
        return self.g(y), y


_ROWS: dict = {}


def _rows_cached(s: VolSurface):
    key = (s.times, s.strikes, s.vols, s.fwd_ratio)
    rows = _ROWS.get(key)
    if rows is None:
        if len(_ROWS) > 256:
            _ROWS.clear()
        rows = _ROWS[key] = s._rows()
    return rows


@dataclass(frozen=True, slots=True)
class LocalVolTable:
    """Local variance on step times (rows) and a uniform forward log-moneyness grid."""

    times: np.ndarray
    y0: float
    dy: float
    variance: np.ndarray  # (times, Y_POINTS)
    floored: int
    points: int


def parse_surface(tab, valuation, day_count: str) -> VolSurface:
    """A surface from a market file's ``[assets.NAME.vol_surface]`` table (``tenors``,
    ``strikes`` as fractions of spot, ``vols`` one row per tenor); errors name the key."""
    from fairpath.dates import parse_tenor, year_fraction

    tenors = tab.list("tenors")
    times = []
    for i, text in enumerate(tenors):
        ten = parse_tenor(text, source=tab.source, key=tab.key(f"tenors[{i}]"))
        times.append(year_fraction(valuation, ten.add_to(valuation), day_count))
    if any(b <= a for a, b in zip(times, times[1:], strict=False)):
        raise tab.error("tenors", "tenors must be strictly increasing")
    strikes = [tab.check_number(f"strikes[{j}]", k, positive=True)
               for j, k in enumerate(tab.list("strikes"))]
    if len(strikes) < 2:
        raise tab.error("strikes", "give at least two strikes")
    if any(b <= a for a, b in zip(strikes, strikes[1:], strict=False)):
        raise tab.error("strikes", "strikes must be strictly increasing")
    rows = tab.list("vols")
    if len(rows) != len(times):
        raise tab.error("vols", f"has {len(rows)} rows for {len(times)} tenors (one row per "
                        "tenor)")
    vols = []
    for i, row in enumerate(rows):
        if not isinstance(row, list) or len(row) != len(strikes):
            raise tab.error(f"vols[{i}]", f"must hold {len(strikes)} vols, one per strike")
        vols.append(tuple(tab.check_number(f"vols[{i}][{j}]", v, positive=True)
                          for j, v in enumerate(row)))
    # a smile typed in percent (25 for 0.25) would otherwise be refused as an arbitrage
    for i, row in enumerate(vols):
        for j, v in enumerate(row):
            tab.check_vol(f"vols[{i}][{j}]", v, hint=" (every vol of the surface as a "
                          "fraction: 0.25 for 25%)")
    tab.finish()
    try:
        return VolSurface(tuple(times), tuple(strikes), tuple(vols), label=tab.prefix,
                          tenor_names=tuple(str(x) for x in tenors))
    except InputError as exc:
        raise InputError(exc.problem, source=tab.source, key=tab.prefix) from None


def ssvi_total_variance(theta, k, rho: float, eta: float, gamma: float):
    """SSVI total variance with the power-law ``phi(theta) = eta / (theta^gamma (1 +
    theta)^(1 - gamma))``: ``w = theta / 2 (1 + rho phi k + sqrt((phi k + rho)^2 + 1 - rho^2))``
    at forward log-moneyness ``k`` and at-the-money total variance ``theta``. Free of static
    arbitrage when ``eta (1 + |rho|) <= 2`` and ``0 < gamma <= 1/2`` (J. Gatheral and A.
    Jacquier, "Arbitrage-free SVI volatility surfaces", Quantitative Finance 14(1), 2014,
    Theorem 4.2 and Remark 4.4). Used to build invented, arbitrage-free example surfaces."""
    theta = np.asarray(theta, dtype=float)
    k = np.asarray(k, dtype=float)
    phi = eta / (theta**gamma * (1.0 + theta) ** (1.0 - gamma))
    return theta / 2.0 * (1.0 + rho * phi * k + np.sqrt((phi * k + rho) ** 2 + 1.0 - rho**2))


def ssvi_surface(times, strikes, atm_vol: float, rate: float, dividend_yield: float, *,
                 rho: float = -0.6, eta: float = 1.2, gamma: float = 0.4) -> VolSurface:
    """An example surface sampled from :func:`ssvi_total_variance` at ``times`` (years) and
    ``strikes`` (fractions of spot), with a flat at-the-money vol and flat rates (for the
    forward moneyness); the defaults give a downward equity-like skew."""
    rows = []
    for t in times:
        k = np.log(np.asarray(strikes, dtype=float)) - (rate - dividend_yield) * t
        w = ssvi_total_variance(atm_vol**2 * t, k, rho, eta, gamma)
        rows.append(tuple(np.sqrt(w / t).tolist()))
    return VolSurface(tuple(float(t) for t in times), tuple(float(k) for k in strikes),
                      tuple(rows))

"""Laws of the one-step log-return shocks, drawn by inverse transform.

A law is the *shape* of an asset's one-step shock ``X``: mean 0 and variance 1. The engine draws
it by inverse transform from the same standard normals that drive the normal model,
``X = Q(Phi(Z))`` (``Q`` the law's inverse CDF, ``Phi`` the normal CDF), scales it to the step's
integrated variance ``v`` and adds the drift that keeps the asset a martingale after discounting:

    log S(t1) = log S(t0) + log(F(t1) / F(t0)) - log E[exp(sqrt(v) X)] + sqrt(v) X,

so ``E[S(t1) | S(t0)] = S(t0) F(t1) / F(t0)`` and the simulated forward equals the market forward
on every date. The exponential moment ``E[exp(s X)]`` is integrated from the law itself (exactly
for the tabulated transform, see below), never estimated from the run. Several assets keep their
correlation through a Gaussian copula: the correlated normals of a step go through each asset's
own transform.

Laws
----
* :class:`NormalLaw`: ``X = Z`` (geometric Brownian motion).
* :class:`StudentT`: Student's t with ``dof > 2`` degrees of freedom, scaled to unit variance,
  ``X = sqrt((dof - 2) / dof) * t_dof``.
* :class:`EmpiricalLaw`: the daily log-returns of a history of closes, demeaned and scaled to
  unit variance: only their shape is used, the level of volatility is the market's ``vol``.
  The inverse empirical CDF interpolates linearly between the order statistics placed at the
  plotting positions ``p_i = (i - 1/2) / n`` (Hazen); beyond the outermost ones each tail is
  exponential, ``Q(u) = x_(1) + b log(u / p_1)`` below ``p_1`` (and the mirror image above
  ``p_n``), with ``b`` set so that the tail also passes through the ``k``-th order statistic,
  ``k = max(5, n // 50)`` (the most extreme 2% of the sample sets the tail's decay).

Tails and truncation
--------------------
A Student-t log-return has no exponential moment at all (``E[exp(s X)]`` is infinite for every
``s > 0``), so a forward under it exists only because the inverse transform is clipped. For a
non-normal law the clip is ``LAW_CLIP = 1e-7`` on each side (the normal law keeps the engine's
``1e-16``): the shock is ``Q(LAW_CLIP)`` whenever the uniform is below ``LAW_CLIP``, and that
mass is counted in the exponential moment, so forwards stay exact. With the normal clip instead,
a daily shock under ``dof = 4`` and a 25% vol could reach a log-return of 144 and the daily
martingale correction would be 107 instead of 0.00012: the forward would be set by
one-in-10^16 days. At ``1e-7`` and a 25% vol the daily correction is within 0.03% of the normal
one for ``dof = 4`` and 0.3% for ``dof = 3``. The shape of the law is standardised to unit
variance *after* clipping.

Even so, a very heavy tail (``dof`` near 2, or a high vol) puts much of the exponential moment
in moves so rare that a run never draws them: the exact correction then pulls every path down
for moves that did not happen, and forwards come out low while the error bar looks fine.
:meth:`Law.unseen_tail` measures it, and the engine refuses a run whose forwards could be off
by more than ``MAX_UNSEEN`` for that reason (see :func:`fairpath.estimate.check_law_tails`).

Implementation
--------------
The map ``z -> X`` is tabulated once per law on ``TABLE_POINTS`` equally spaced normals in
``[-Z_MAX, Z_MAX]`` (``Z_MAX = -ndtri(LAW_CLIP)``, about 5.2) and evaluated by linear
interpolation, clamped at the ends (which is the clip). Because the transform is piecewise
linear in ``z``, its mean, variance and exponential moment under the normal law have closed
forms cell by cell (truncated-normal integrals), so the standardisation and the martingale
correction are exact for the law the engine actually samples.
"""

from __future__ import annotations

import csv
import functools
import math
import numbers
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import ClassVar

import numpy as np
from scipy import stats
from scipy.special import log_ndtr, logsumexp, ndtr, ndtri

from fairpath.errors import InputError
from fairpath.inputs import Table, did_you_mean

#: Probability clipped from each tail of a non-normal law before its inverse CDF.
LAW_CLIP = 1e-7
#: A run is refused when the part of its laws' tails rarer than SEEN_DRAWS draws in the whole
#: run holds more than MAX_UNSEEN of a forward over the product's life. Calibrated on zero-strike
#: calls, six seeds of 32,768 pseudo-random paths each: Student-t dof 2.2 at 25% vol (0.9% of
#: the forward unseen) came out 15 standard errors low on average and dof 4 at 200% vol (14%)
#: 2 low, while dof 4 at 100% (0.3%), dof 3 at 25% (0.06%) and dof 6 at 100% (0.04%) were
#: within their error bars.
SEEN_DRAWS = 10
MAX_UNSEEN = 2e-3
#: The standard normal level of that clip (about 5.2).
Z_MAX = float(-ndtri(LAW_CLIP))
#: What a continuously monitored barrier says under a non-normal law.
BRIDGE_UNDER_LAW = ("between daily closes the barrier's Brownian-bridge crossing probability "
                    "treats the move within a day as lognormal with the at-the-money variance "
                    "(an approximation under a non-normal law, local volatility or cash "
                    "dividends)")
#: Points of the tabulated transform z -> shock.
TABLE_POINTS = 16385
#: An empirical law needs at least this many usable closes (about a year of trading days).
MIN_CLOSES = 250
#: Order statistic through which each exponential tail of an empirical law passes: k-th from
#: the end, k = max(TAIL_MIN, n // TAIL_DIVISOR).
TAIL_MIN, TAIL_DIVISOR = 5, 50


def _mass(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """``Phi(hi) - Phi(lo)`` computed on the side of zero where it keeps its precision."""
    upper = lo > 0
    return np.where(upper, ndtr(-lo) - ndtr(-hi), ndtr(hi) - ndtr(lo))


def _log_mass(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """``log(Phi(hi) - Phi(lo))`` for ``lo < hi``, without underflow far in either tail."""
    upper = lo > 0
    a = np.where(upper, log_ndtr(-lo), log_ndtr(hi))  # the larger of the two CDF values
    b = np.where(upper, log_ndtr(-hi), log_ndtr(lo))
    with np.errstate(divide="ignore"):
        return a + np.log1p(-np.exp(b - a))


@dataclass(frozen=True, slots=True)
class _Table:
    """A piecewise-linear transform ``T(z) = a + b z`` on each cell of ``z``, standardised."""

    z: np.ndarray
    x: np.ndarray

    @property
    def cells(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        z0, z1 = self.z[:-1], self.z[1:]
        b = np.diff(self.x) / np.diff(self.z)
        a = self.x[:-1] - b * z0
        return z0, z1, a, b

    def moments(self) -> tuple[float, float]:
        """Mean and variance of ``T(clip(Z))`` for a standard normal ``Z``."""
        z0, z1, a, b = self.cells
        mass = _mass(z0, z1)
        dphi = stats.norm.pdf(z1) - stats.norm.pdf(z0)
        zphi = z1 * stats.norm.pdf(z1) - z0 * stats.norm.pdf(z0)
        m1 = np.sum(a * mass - b * dphi)
        m2 = np.sum(a * a * mass - 2 * a * b * dphi + b * b * (mass - zphi))
        tail = LAW_CLIP
        m1 += tail * (self.x[0] + self.x[-1])
        m2 += tail * (self.x[0] ** 2 + self.x[-1] ** 2)
        return float(m1), float(m2 - m1 * m1)

    def _log_terms(self, s: float) -> tuple[np.ndarray, np.ndarray]:
        """Logs of each cell's part of ``E[exp(s T)]`` and of the two clipped end masses:
        ``exp(s a + (s b)^2 / 2) (Phi(z1 - s b) - Phi(z0 - s b))`` for ``T = a + b z``."""
        z0, z1, a, b = self.cells
        sb = s * b
        cells = s * a + 0.5 * sb * sb + _log_mass(z0 - sb, z1 - sb)
        ends = math.log(LAW_CLIP) + s * np.array([self.x[0], self.x[-1]])
        return cells, ends

    def log_mgf(self, s: np.ndarray) -> np.ndarray:
        """``log E[exp(s T(clip(Z)))]`` for each scale in ``s`` (exact for the table), summed
        in log space so that a heavy tail at a large scale gives a large number, not inf."""
        s = np.asarray(s, dtype=float)
        # steps of equal length share a scale: evaluate each distinct one (to 1e-13) once
        keys, inverse = np.unique(np.round(s, 13), return_inverse=True)
        vals = np.empty(keys.shape)
        for i, si in enumerate(keys):
            cells, ends = self._log_terms(float(si))
            vals[i] = float(logsumexp(np.concatenate([cells, ends])))
        return vals[inverse].reshape(s.shape)

    def unseen_tail(self, s: float, p: float) -> float:
        """What the part of the law rarer than ``p`` on either side adds to ``E[exp(s X)]``
        beyond its probability: ``E[exp(s X) - 1; u < p or u > 1 - p]``. A run that draws
        fewer than about ``1/p`` shocks rarely sees that part, so its forwards come out low by
        about this much per step (inf when it overflows)."""
        if p <= LAW_CLIP:
            return 0.0
        z0, z1, _, _ = self.cells
        zc = float(-ndtri(p))
        tail = (z1 <= -zc) | (z0 >= zc)
        cells, ends = self._log_terms(s)
        with np.errstate(over="ignore"):
            weight = float(np.sum(np.exp(cells[tail])) + np.sum(np.exp(ends)))
        mass = float(np.sum(_mass(z0, z1)[tail])) + 2 * LAW_CLIP
        return weight - mass


class Law:
    """The shape of one-step log-return shocks (mean 0, variance 1)."""

    kind: ClassVar[str] = ""
    is_normal: ClassVar[bool] = False

    def raw_quantiles(self, z: np.ndarray) -> np.ndarray:
        """``Q(Phi(z))`` before standardisation (subclasses)."""
        raise NotImplementedError

    def describe(self) -> str:
        raise NotImplementedError

    def _table(self) -> _Table:
        return _table_of(self)

    def shocks(self, z: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Unit-variance shocks from standard normals ``z`` (clamped at +-Z_MAX)."""
        t = self._table()
        res = np.interp(z, t.z, t.x)
        if out is None:
            return res
        out[...] = res
        return out

    def log_mgf(self, s) -> np.ndarray:
        """``log E[exp(s X)]`` for step standard deviations ``s`` (the martingale correction)."""
        return self._table().log_mgf(s)

    def unseen_tail(self, s: float, p: float) -> float:
        """See :meth:`_Table.unseen_tail`."""
        return self._table().unseen_tail(s, p)

    def ppf(self, u) -> np.ndarray:
        """Quantile function of the sampled (clipped, standardised) shock."""
        u = np.asarray(u, dtype=float)
        return self.shocks(ndtri(np.clip(u, LAW_CLIP, 1 - LAW_CLIP)))

    def cdf(self, x) -> np.ndarray:
        """Distribution function of the sampled shock (inverse of the tabulated transform)."""
        t = self._table()
        zz = np.interp(np.asarray(x, dtype=float), t.x, t.z, left=-np.inf, right=np.inf)
        return ndtr(zz)

    def density(self, x) -> np.ndarray:
        """Density of the sampled shock inside the clip, ``phi(z) / T'(z)``."""
        t = self._table()
        x = np.asarray(x, dtype=float)
        slope = np.diff(t.x) / np.diff(t.z)
        i = np.clip(np.searchsorted(t.x, x) - 1, 0, len(slope) - 1)
        zz = np.interp(x, t.x, t.z)
        inside = (x >= t.x[0]) & (x <= t.x[-1])
        return np.where(inside, stats.norm.pdf(zz) / slope[i], 0.0)


@dataclass(frozen=True, slots=True)
class NormalLaw(Law):
    """Normal shocks: the engine's geometric Brownian motion (no table, no extra clip)."""

    kind: ClassVar[str] = "normal"
    is_normal: ClassVar[bool] = True

    def raw_quantiles(self, z):
        return np.asarray(z, dtype=float)

    def shocks(self, z, out=None):
        if out is None:
            return np.array(z, dtype=float)
        out[...] = z
        return out

    def log_mgf(self, s):
        s = np.asarray(s, dtype=float)
        return 0.5 * s * s

    def unseen_tail(self, s, p):
        return 0.0  # the engine's own 1e-16 clip: nothing is left unseen that matters

    def describe(self) -> str:
        return "normal"


@dataclass(frozen=True, slots=True)
class StudentT(Law):
    """Student's t shocks with ``dof`` degrees of freedom, scaled to unit variance.

    Examples
    --------
    >>> law = StudentT(4.0)
    >>> round(float(law.log_mgf(0.0155)) / (0.5 * 0.0155**2), 3)  # near the normal's
    1.0
    """

    kind: ClassVar[str] = "student-t"
    dof: float

    def __post_init__(self):
        d = self.dof
        if isinstance(d, bool) or not isinstance(d, numbers.Real) or not math.isfinite(d):
            raise InputError(f"dof must be a finite number, got {d!r}", key="law.dof")
        if d <= 2:
            raise InputError(f"dof must be above 2, got {d:g}: with 2 or fewer degrees of "
                             "freedom the t law has infinite variance, so it cannot be scaled "
                             "to the asset's vol", key="law.dof")

    def raw_quantiles(self, z):
        z = np.asarray(z, dtype=float)
        lower = stats.t.ppf(ndtr(-np.abs(z)), self.dof)  # the lower tail, accurately
        return np.sign(z) * -lower

    def describe(self) -> str:
        return f"Student-t (dof {self.dof:g})"


@dataclass(frozen=True, slots=True)
class EmpiricalLaw(Law):
    """The shape of a history of daily log-returns (see the module notes for the tails).

    ``returns`` are the raw daily log-returns; only their shape is used.
    """

    kind: ClassVar[str] = "empirical"
    returns: tuple[float, ...] = ()
    label: str = field(default="", compare=False)

    def __post_init__(self):
        if len(self.returns) < MIN_CLOSES - 1:
            raise InputError(f"an empirical law needs at least {MIN_CLOSES} closes, got "
                             f"{len(self.returns) + 1}", key="law")
        r = np.asarray(self.returns, dtype=float)
        if not np.all(np.isfinite(r)) or float(np.std(r)) <= 0:
            raise InputError("the history's log-returns must be finite and not all equal",
                             key="law")

    @classmethod
    def from_closes(cls, closes, label: str = "") -> EmpiricalLaw:
        c = np.asarray(closes, dtype=float)
        return cls(tuple(np.diff(np.log(c)).tolist()), label)

    @classmethod
    def from_csv(cls, path: str | Path, column: str = "close", *, source: str | None = None,
                 key: str | None = None, column_key: str | None = None) -> EmpiricalLaw:
        """Daily closes from one column of a CSV file with a header row.

        Empty cells are skipped (holidays); anything else must be a positive number. When the
        file has a ``date`` column, the rows are put in date order (many data exports list the
        newest first); otherwise the file's order is taken as the order in time.
        """
        closes = read_closes(path, column, source=source, key=key, column_key=column_key)
        return cls.from_closes(closes, f"{Path(path).name}:{column}")

    def raw_quantiles(self, z):
        z = np.asarray(z, dtype=float)
        x = np.sort(np.asarray(self.returns, dtype=float))
        x = (x - x.mean()) / x.std()
        n = len(x)
        p = (np.arange(1, n + 1) - 0.5) / n
        k = min(max(TAIL_MIN, n // TAIL_DIVISOR), n // 2)
        b_lo = (x[k - 1] - x[0]) / math.log(p[k - 1] / p[0])
        b_hi = (x[-1] - x[n - k]) / math.log((1 - p[n - k]) / (1 - p[-1]))
        lower = ndtr(-np.abs(z))  # tail probability on z's side, accurately
        u = np.where(z < 0, lower, 1.0 - lower)
        mid = np.interp(u, p, x)
        with np.errstate(divide="ignore"):
            lo_tail = x[0] + b_lo * np.log(lower / p[0])
            hi_tail = x[-1] - b_hi * np.log(lower / (1 - p[-1]))
        return np.where((z < 0) & (lower < p[0]), lo_tail,
                        np.where((z > 0) & (lower < 1 - p[-1]), hi_tail, mid))

    def describe(self) -> str:
        src = f" of {self.label}" if self.label else ""
        return f"empirical ({len(self.returns) + 1} closes{src})"


NORMAL = NormalLaw()


@functools.lru_cache(maxsize=64)
def _table_of(law: Law) -> _Table:
    z = np.linspace(-Z_MAX, Z_MAX, TABLE_POINTS)
    x = law.raw_quantiles(z)
    raw = _Table(z, x)
    m, v = raw.moments()
    return _Table(z, (x - m) / math.sqrt(v))


# ---------------------------------------------------------------------------------------------
# Reading laws from files and from the command line
# ---------------------------------------------------------------------------------------------
def read_closes(path: str | Path, column: str, *, source: str | None = None,
                key: str | None = None, column_key: str | None = None) -> list[float]:
    """The positive closes of ``column`` in a CSV history (InputError naming file and line).

    ``key`` names the setting that gave the file, ``column_key`` the one that gave the
    column (both default to ``key``). Header names are matched exactly, else ignoring case
    (``Close`` for ``close``); a ``date`` column (any case) puts the rows in date order."""
    column_key = column_key or key
    p = Path(path)
    where = f"history file {p}"
    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{where} not found", source=source, key=key) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read {where}: {exc}", source=source, key=key) from None
    reader = csv.reader(text.splitlines(), strict=True)
    try:
        rows = list(reader)
    except csv.Error as exc:
        raise InputError(f"{where} line {reader.line_num}: not valid CSV: {exc}",
                         source=source, key=key) from None
    if not rows:
        raise InputError(f"{where} is empty", source=source, key=key)
    header = [h.strip() for h in rows[0]]
    folded = [h.casefold() for h in header]
    if column in header:
        col = header.index(column)
    elif folded.count(column.casefold()) == 1:
        col = folded.index(column.casefold())
    else:
        raise InputError(f"{where} has no column {column!r}; its columns: "
                         f"{', '.join(header) or 'none'}", source=source, key=column_key)
    dcol = folded.index("date") if "date" in folded else None
    values: list[tuple[date | None, float]] = []
    for line, row in enumerate(rows[1:], start=2):
        if not any(cell.strip() for cell in row):
            continue
        cell = row[col].strip() if col < len(row) else ""
        if not cell:
            continue
        try:
            v = float(cell)
        except ValueError:
            raise InputError(f"{where} line {line}: {header[col]} {cell!r} is not a number",
                             source=source, key=key) from None
        if not (math.isfinite(v) and v > 0):
            raise InputError(f"{where} line {line}: {header[col]} must be a positive price, got "
                             f"{cell}", source=source, key=key)
        d = None
        if dcol is not None:
            dtext = row[dcol].strip() if dcol < len(row) else ""
            try:
                d = date.fromisoformat(dtext)
            except ValueError:
                raise InputError(f"{where} line {line}: date {dtext!r} is not an ISO date "
                                 "(YYYY-MM-DD)", source=source, key=key) from None
        values.append((d, v))
    if len(values) < MIN_CLOSES:
        raise InputError(f"{where} has {len(values)} usable closes in column {header[col]!r}; an "
                         f"empirical law needs at least {MIN_CLOSES}", source=source, key=key)
    if dcol is not None:
        dates = [d for d, _ in values]
        if len(set(dates)) != len(dates):
            dup = next(d for d in dates if dates.count(d) > 1)
            raise InputError(f"{where}: date {dup} appears twice", source=source, key=key)
        values.sort(key=lambda dv: dv[0])
    return [v for _, v in values]


LAW_KINDS = ("normal", "student-t", "empirical")


def parse_law(value, *, base_dir: Path | None = None, source: str | None = None,
              key: str = "law") -> Law:
    """A law from a market file's ``law`` value: ``"normal"``, or a table with ``kind`` and
    its parameters (``dof`` for ``student-t``; ``file`` and ``column`` for ``empirical``, the
    file relative to ``base_dir``)."""
    if isinstance(value, str):
        if value == "normal":
            return NORMAL
        if value in LAW_KINDS:
            need = "dof" if value == "student-t" else "file"
            raise InputError(f"{value!r} needs parameters: write law = {{ kind = \"{value}\", "
                             f"{need} = ... }}", source=source, key=key)
        raise InputError(f"unknown law {value!r}{did_you_mean(value, LAW_KINDS)}; known: "
                         f"{', '.join(LAW_KINDS)}", source=source, key=key)
    if not isinstance(value, dict):
        raise InputError(f"expected \"normal\" or a table, got {value!r}", source=source, key=key)
    tab = Table(value, source, key)
    kind = tab.string("kind", choices=LAW_KINDS)
    try:
        if kind == "normal":
            law: Law = NORMAL
        elif kind == "student-t":
            law = StudentT(tab.number("dof"))
        else:
            fname = tab.string("file")
            column = tab.string("column", "close")
            path = Path(fname)
            if base_dir is not None and not path.is_absolute():
                path = base_dir / path
            law = EmpiricalLaw.from_csv(path, column, source=source, key=tab.key("file"),
                                        column_key=tab.key("column"))
    except InputError as exc:
        if exc.source:
            raise
        raise InputError(exc.problem, source=source, key=tab.key(
            "dof" if kind == "student-t" else "file")) from None
    tab.finish()
    return law


def law_from_options(kind: str, *, dof: float | None = None, history: str | None = None,
                     column: str = "close", flag: str = "--law") -> Law:
    """A law from command-line options (``--law student-t --dof 4``, ``--law empirical
    --history closes.csv [--column close]``)."""
    if kind == "normal":
        return NORMAL
    if kind == "student-t":
        if dof is None:
            raise InputError(f"{flag} student-t needs --dof (degrees of freedom, above 2)",
                             key=flag)
        try:
            return StudentT(dof)
        except InputError as exc:
            raise InputError(exc.problem, key="--dof") from None
    if kind == "empirical":
        if history is None:
            raise InputError(f"{flag} empirical needs --history FILE.csv (daily closes)",
                             key=flag)
        return EmpiricalLaw.from_csv(history, column, key="--history", column_key="--column")
    raise InputError(f"unknown law {kind!r}; known: {', '.join(LAW_KINDS)}", key=flag)

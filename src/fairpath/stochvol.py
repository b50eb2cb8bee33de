"""The inputs of the stochastic-volatility models: Heston's five parameters and LSV's mixing.

An asset's ``[assets.X.heston]`` block (see ``formats.md``) gives the variance process of the
``heston`` and ``lsv`` models (Heston 1993):

    dS / S = (r - q) dt + sqrt(v) dW,    dv = kappa (theta - v) dt + vol_of_vol sqrt(v) dZ,
    d<W, Z> = spot_vol_correlation dt,

or ``calibrate = true`` instead of the five numbers (fitted to the asset's ``vol_surface`` on
load, :mod:`fairpath.calibration`), and, for ``lsv`` only, ``mixing`` (the fraction of the vol
of vol kept). Every number is checked where it is read: a variance typed as a vol in percent
(``v0 = 20``), a vol of vol in percent (60 for 0.60), a correlation beyond 1, are refused with
one line naming the key.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fairpath.errors import InputError
from fairpath.inputs import Table

#: Largest variance ``v0`` or ``theta`` a file may give (that of a 200% vol): a larger one is a
#: vol typed in percent where a variance belongs (``v0 = 20`` for a 20% vol, 0.04).
MAX_VARIANCE = 4.0
#: Largest vol of vol (500%): a larger one is a percentage typed as a number.
MAX_VOL_OF_VOL = 5.0
#: Largest speed of mean reversion (a half-life of about 4 trading days).
MAX_KAPPA = 50.0
#: The five parameters, in the order of the file and of :class:`HestonParams`.
HESTON_KEYS = ("v0", "kappa", "theta", "vol_of_vol", "spot_vol_correlation")


@dataclass(frozen=True, slots=True)
class HestonParams:
    """Heston's variance process (see the module notes); ``calibrated``: fitted to the
    asset's surface rather than given."""

    v0: float
    kappa: float
    theta: float
    vol_of_vol: float
    spot_vol_correlation: float
    calibrated: bool = False

    def __post_init__(self):
        for k in HESTON_KEYS:
            if not math.isfinite(getattr(self, k)):
                raise InputError(f"must be a finite number, got {getattr(self, k)}", key=k)
        if self.v0 < 0 or self.theta < 0:
            raise InputError("a variance must not be negative", key="v0" if self.v0 < 0
                             else "theta")
        if self.kappa < 0 or self.vol_of_vol < 0:
            raise InputError("must not be negative", key="kappa" if self.kappa < 0
                             else "vol_of_vol")
        if abs(self.spot_vol_correlation) > 1:
            raise InputError("must be between -1 and 1", key="spot_vol_correlation")

    @property
    def numbers(self) -> tuple[float, float, float, float, float]:
        return (self.v0, self.kappa, self.theta, self.vol_of_vol, self.spot_vol_correlation)

    @property
    def feller(self) -> float:
        """``2 kappa theta / vol_of_vol^2``: at 1 or above the variance never reaches zero
        (the Feller condition); reported, not imposed."""
        s2 = self.vol_of_vol ** 2
        return math.inf if s2 == 0 else 2.0 * self.kappa * self.theta / s2

    def mean_variance(self, t0: np.ndarray, t1: np.ndarray) -> np.ndarray:
        """The expected variance averaged over each ``[t0, t1]``: ``E[int v dt] / (t1 - t0)``
        (its root is the vol a step sees on average)."""
        t0, t1 = np.asarray(t0, dtype=float), np.asarray(t1, dtype=float)
        k, th, v0 = self.kappa, self.theta, self.v0
        if k * np.max(t1, initial=0.0) < 1e-10:
            return np.full(np.shape(t1), v0)

        def integral(t):
            return th * t + (v0 - th) * (-np.expm1(-k * t)) / k

        dt = np.maximum(t1 - t0, 1e-300)
        return (integral(t1) - integral(t0)) / dt

    def term_vols(self, times) -> tuple[float, ...]:
        """The root of the mean expected variance from today to each of ``times``."""
        t = np.asarray(times, dtype=float)
        return tuple(float(x) for x in np.sqrt(np.maximum(self.mean_variance(0.0 * t, t), 0.0)))


def parse_heston(tab: Table) -> tuple[HestonParams | None, bool, float | None]:
    """An ``[assets.X.heston]`` table: (the parameters, or None when ``calibrate = true``
    asks for them to be fitted; that flag; ``mixing`` or None)."""
    calibrate = tab.boolean("calibrate", False)
    mixing = None
    if tab.has("mixing"):
        mixing = tab.number("mixing", nonnegative=True)
        if mixing > 1:
            raise tab.error("mixing", f"must be between 0 and 1 (the share of vol_of_vol "
                            f"kept), got {mixing:g}"
                            + (f"; a percentage? write {mixing / 100:g}" if mixing <= 100
                               else ""))
    given = [k for k in HESTON_KEYS if tab.has(k)]
    if calibrate:
        if given:
            raise tab.error(given[0], "give either calibrate = true or the five parameters, "
                            "not both")
        tab.finish()
        return None, True, mixing
    for k in HESTON_KEYS:
        if not tab.has(k):
            raise tab.error(k, "missing required key (the five Heston parameters are v0, "
                            "kappa, theta, vol_of_vol, spot_vol_correlation; or calibrate = "
                            "true to fit them to the vol_surface)")
    v0 = _variance(tab, "v0")
    theta = _variance(tab, "theta")
    kappa = tab.number("kappa", nonnegative=True)
    if kappa > MAX_KAPPA:
        raise tab.error("kappa", f"{kappa:g} is a mean-reversion half-life of "
                        f"{math.log(2) / kappa * 365:.1f} days; at most {MAX_KAPPA:g}")
    sigma = tab.number("vol_of_vol", nonnegative=True)
    if sigma > MAX_VOL_OF_VOL:
        raise tab.error("vol_of_vol", f"{sigma:g} is a vol of vol of {sigma:.0%}; a "
                        f"percentage? write {sigma / 100:g} for {sigma:g}%")
    rho = tab.number("spot_vol_correlation")
    if abs(rho) > 1:
        raise tab.error("spot_vol_correlation", f"a correlation must be between -1 and 1, got "
                        f"{rho:g}" + (f"; a percentage? write {rho / 100:g}"
                                      if 10 <= abs(rho) <= 100 else ""))
    tab.finish()
    return HestonParams(v0, kappa, theta, sigma, rho), False, mixing


def _variance(tab: Table, key: str) -> float:
    v = tab.number(key)
    if v < 0:
        raise tab.error(key, f"a variance must not be negative, got {v:g}")
    if v > MAX_VARIANCE:
        hint = (f"; {key} is a variance: write {(v / 100) ** 2:g} for a {v:g}% vol"
                if v <= 100 else "")
        raise tab.error(key, f"{v:g} is the variance of a {math.sqrt(v):.0%} vol (at most "
                        f"{MAX_VARIANCE:g}){hint}")
    return v

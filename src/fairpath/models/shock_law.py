"""Black vols with a non-normal law of daily shocks (:mod:`fairpath.laws`).

An asset whose shock law is not normal is stepped on the weekday grid: the step's correlated
normals (Gaussian copula) go through the law's inverse transform, are scaled by the step's
standard deviation ``sqrt(int sigma^2 dt)``, and the drift becomes
``log(F(t1) / F(t0)) - log E[exp(sd X)]``, the law's own exponential moment, so the forward is
still the market's. Black assets in the same simulation are stepped alongside with the normal
law (the same arithmetic as :mod:`fairpath.models.black`'s steps, through the copula).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from fairpath.errors import InputError
from fairpath.models.base import (
    Model,
    PathState,
    ScalesWithSpot,
    Stepper,
    add_escrow,
    psd_cholesky,
)
from fairpath.models.black import check_lognormal_tail, log_forward_steps, step_covariance
from fairpath.registry import Capability


@dataclass(frozen=True, slots=True)
class ShockLaw(Model):
    """The asset's Black vols with its law's shocks on every weekday (``model = "black"`` and a
    non-normal ``law``)."""

    kind: ClassVar[str] = "black-law"
    hosts: ClassVar[tuple[str, ...]] = ("black",)
    note_rank: ClassVar[int] = 10
    public: ClassVar[bool] = False

    @classmethod
    def for_asset(cls, market, name):
        if market.asset(name).law.is_normal:
            raise InputError("a shock-law model needs a non-normal law", source=market.source,
                             key=f"assets.{name}.law")
        return cls(name, market)

    @property
    def capabilities(self) -> frozenset[Capability]:
        # every step multiplies the level by a factor that does not depend on the spot
        return self.forward_and_scaling()

    @property
    def daily(self) -> bool:
        return True

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        check_law_tail(self.market, self.name, variance, paths)

    @classmethod
    def group_notes(cls, models, names, steps_per_day):
        from fairpath.laws import LAW_CLIP

        laws = "; ".join(f"{m.name}: {m.asset.law.describe()}" for m in models)
        return [f"return laws: {laws}; daily (weekday) steps, each shock scaled to the asset's "
                f"vol with its own martingale correction so forwards are the market's; tails "
                f"clipped at probability {LAW_CLIP:g} each side"
                + ("; assets correlated through a Gaussian copula" if len(names) > 1 else "")]

    @classmethod
    def stepper(cls, models, correlation, times, steps_per_day):
        return LawSteps(models, correlation, times)


class LawSteps(ScalesWithSpot, Stepper):
    """Correlated normals (Gaussian copula), each asset's inverse transform, scaled by the
    step's standard deviation, plus the drift."""

    def __init__(self, models, correlation: np.ndarray, times: np.ndarray):
        cov = step_covariance(models, correlation, times)
        self._start(models, times, cov)
        self.sim_times = self.times
        factor = np.stack([psd_cholesky(cov[k]) for k in range(len(self.times))])
        self.laws = tuple(m.asset.law for m in models)
        self.sd = np.sqrt(self.variance)
        correction = np.stack([law.log_mgf(s) for law, s in zip(self.laws, self.sd,
                                                               strict=True)])
        self.drift = log_forward_steps(models, self.times) - correction
        sdt = self.sd.T[:, :, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            self.corr_factor = np.where(sdt > 0, factor / sdt, 0.0)

    def simulate(self, z: np.ndarray) -> PathState:
        n_a = z.shape[1]
        sd = np.sqrt(self.variance)
        x = np.empty_like(z)
        for a in range(n_a):
            acc = z[:, 0, :] * self.corr_factor[:, a, 0]
            for b in range(1, a + 1):
                acc += z[:, b, :] * self.corr_factor[:, a, b]
            self.laws[a].shocks(acc, out=acc)
            acc *= sd[a]
            acc += self.drift[a]
            x[:, a, :] = acc
        np.cumsum(x, axis=2, out=x)
        x += self.log_start[None, :, None]
        return PathState(add_escrow(x, self.escrow))


def check_law_tail(market, name: str, variance: np.ndarray, paths: int) -> None:
    """Refuse a run whose non-normal shock law puts more than ``MAX_UNSEEN`` of a forward in
    moves it is unlikely to draw (rarer than one in ``paths x steps``): its forward, and so its
    prices, would come out biased (see :mod:`fairpath.laws`)."""
    from fairpath.laws import MAX_UNSEEN, SEEN_DRAWS

    law = market.asset(name).law
    steps = variance.shape[0]
    p_seen = SEEN_DRAWS / (max(paths, 1) * max(steps, 1))
    sd = np.sqrt(variance)
    keys, counts = np.unique(np.round(sd, 12), return_counts=True)
    unseen = sum(c * law.unseen_tail(float(k), p_seen) for k, c in zip(keys, counts,
                                                                       strict=True))
    if not unseen <= MAX_UNSEEN:
        vol = float(np.sqrt(np.sum(variance) / max(float(np.sum(variance > 0)), 1) * 261))
        raise InputError(
            f"the {law.describe()} law is too heavy-tailed at {name}'s vol (about {vol:.0%}): "
            + (f"{unseen:.2%} of the forward sits in" if unseen < 1 else
               "the forward is dominated by") + " one-day moves rarer than one "
            f"in {1 / p_seen:,.0f}, which a run of {paths:,} paths x {steps} steps hardly "
            "ever draws, so prices would come out low; use more degrees of freedom, a "
            "lower vol or more paths", source=market.source, key=f"assets.{name}.law")


__all__ = ["ShockLaw", "LawSteps", "check_law_tail", "check_lognormal_tail"]

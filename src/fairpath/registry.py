"""What is registered, and nothing else: model kinds, the capabilities a model can declare, and
the shortcuts a product family offers for a capability (a leaf module: it imports no other part
of fairpath, so the market, the models, the products and the engine can all read it).

A *capability* is a property of the simulated paths that a model promises (for example, that
the log-levels are jointly normal with the Black variance of the market's vols). A *shortcut*
is an estimator or a formula that is right only under some capabilities: a closed-form control
variate, a conditional estimator, pathwise or likelihood-ratio Greeks, an exact Brownian-bridge
correction. A product family registers each of its shortcuts with the capabilities it needs;
the engine uses a shortcut only when every model of the product's assets declares them, and
otherwise the plain payoff, which is right under any model.

    >>> register_shortcut("example", Shortcut.CONTROLS, {Capability.LOGNORMAL})
    >>> usable("example", Shortcut.CONTROLS, frozenset({Capability.LOGNORMAL}))
    True
    >>> usable("example", Shortcut.CONTROLS, frozenset())
    False
    >>> usable("example", Shortcut.CONDITIONAL, frozenset(Capability))  # never registered
    False
"""

from __future__ import annotations

import enum
import typing
from collections.abc import Iterable


class Capability(enum.Enum):
    """What a model promises about the paths it simulates."""

    #: the mean of every simulated level is the market's forward (a discounted level is a
    #: control variate with a known mean)
    FORWARD = "forward"
    #: log-levels jointly normal, each with the Black variance of the asset's vol term
    #: structure and the market's correlation (every closed form of fairpath.closed_form)
    LOGNORMAL = "lognormal"
    #: the first step's log-return is normal with a known mean and covariance given the log
    #: spot (likelihood-ratio Greeks in the spots)
    SCORE = "score"
    #: every simulated level is proportional to today's spot (pathwise delta dS_t/dS_0 = S_t/S_0)
    SPOT_SCALING = "spot-scaling"
    #: the level is S_t = F_t exp(sigma W_t - sigma^2 t / 2) with a flat sigma (pathwise vega)
    FLAT_VOL = "flat-vol"
    #: the integrated variance handed with the paths is exact between grid dates, so a
    #: Brownian-bridge crossing probability is exact (otherwise it is an approximation)
    EXACT_BRIDGE = "exact-bridge"


class Shortcut(enum.Enum):
    """What a product family can do better than averaging its plain payoff."""

    CONTROLS = "closed-form control variates"
    CONDITIONAL = "conditional estimator"
    PATHWISE = "pathwise delta"
    PATHWISE_VEGA = "pathwise vega"
    LIKELIHOOD_RATIO = "likelihood-ratio Greeks"
    EXACT_BRIDGE = "exact Brownian-bridge correction"
    CLOSED_FORM = "closed form"


class Estimator(typing.NamedTuple):
    """The name of a per-path estimator of a Greek handed from a product or a model to the
    Greeks: ``method`` ("pathwise" or "likelihood ratio"), ``greek`` ("delta", "vega",
    "gamma", "cross") and ``assets`` (one name, or a pair ``"A/B"``)."""

    method: str
    greek: str
    assets: str

    @property
    def label(self) -> str:
        """A stable text form (the order of the estimator columns follows it)."""
        head = "lr " if self.method == LIKELIHOOD_RATIO else ""
        return f"{head}{self.greek} {self.assets}"


PATHWISE = "pathwise"
LIKELIHOOD_RATIO = "likelihood ratio"

#: model kind -> model class (filled by each model class as it is defined)
MODELS: dict[str, type] = {}
#: (product kind, shortcut) -> the capabilities it needs
SHORTCUTS: dict[tuple[str, Shortcut], frozenset[Capability]] = {}


def register_shortcut(kind: str, shortcut: Shortcut, requires: Iterable[Capability]) -> None:
    """Declare that products of ``kind`` offer ``shortcut`` when every model of their assets has
    the capabilities ``requires``."""
    SHORTCUTS[(kind, shortcut)] = frozenset(requires)


def usable(kind: str, shortcut: Shortcut, capabilities: frozenset[Capability]) -> bool:
    """Is ``shortcut`` registered for ``kind`` and are its capabilities all declared?"""
    need = SHORTCUTS.get((kind, shortcut))
    return need is not None and need <= capabilities


def known_models() -> tuple[str, ...]:
    """The model kinds a market file or ``--model`` may name."""
    return tuple(sorted(k for k, c in MODELS.items() if getattr(c, "public", True)))

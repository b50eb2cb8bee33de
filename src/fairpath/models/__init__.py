"""Models of the assets' risk-neutral dynamics, one module each (see :mod:`.base` for the
contract): :mod:`.black` (GBM with term structures and cash dividends), :mod:`.local_vol`
(Dupire local volatility from an implied surface), :mod:`.shock_law` (Black vols with a
non-normal law of daily shocks), :mod:`.heston` (Heston's stochastic variance, QE scheme) and
:mod:`.lsv` (a Heston variance times a leverage function calibrated to the surface)."""

from fairpath.models.base import (
    Model,
    ModelSet,
    PathState,
    Stepper,
    default_kind,
    model_class,
    model_of,
    psd_cholesky,
)
from fairpath.models.black import Black
from fairpath.models.heston import Heston
from fairpath.models.local_vol import LocalVol
from fairpath.models.lsv import LocalStochasticVol
from fairpath.models.shock_law import ShockLaw

__all__ = ["Black", "Heston", "LocalStochasticVol", "LocalVol", "Model", "ModelSet",
           "PathState", "ShockLaw", "Stepper", "default_kind", "model_class", "model_of",
           "psd_cholesky"]

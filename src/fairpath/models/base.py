"""The model contract: what the engine asks of a model, and the set of models of a simulation.

A model describes the risk-neutral dynamics of one asset (:class:`Model`). The market resolves
each asset's model once (:meth:`ModelSet.resolve`: the file's ``model = ...``, else ``local-vol``
for an asset with a ``vol_surface`` and ``black`` otherwise); a simulation of several assets is
run by the one model class that can *host* all of them (its own kind and the kinds it names in
``hosts``: local vol steps its Black companions in the same loop), through a :class:`Stepper`
built for the simulation's grid.

The contract, in the spirit of a solver interface whose driver never branches on the subclass:

* ``factors``: random normal factors per asset and step (one for a diffusion of the level; two
  for a stochastic-variance model);
* ``daily``: must the model step on every weekday (a law of daily shocks, a local vol that
  moves with the level), or only on the dates the products need?
* ``stepper(models, correlation, times, steps_per_day)``: the step parameters of the grid
  ``times``; its ``simulate(normals)`` returns a :class:`PathState` (the log-levels on the
  grid, and room for more: a variance, an exchange rate);
* ``capabilities``: what the model promises about its paths (:class:`fairpath.registry.
  Capability`); a product's shortcuts are used only where every model declares what they need,
  so a model that declares nothing is priced with plain payoffs, which is always right;
* ``notes`` (what a result should say about the model) and ``check_run`` (refuse a run whose
  paths cannot resolve the forward).

Adding a model is one module: a frozen dataclass subclass with ``kind = "name"`` (which
registers it), its stepper, and a line importing it in ``fairpath/models/__init__.py``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np

from fairpath.errors import InputError
from fairpath.market import Market
from fairpath.registry import MODELS, Capability, known_models


@dataclass(frozen=True, slots=True)
class PathState:
    """What a model's simulation hands the engine for one batch of paths.

    ``log_levels``: natural logs of every asset's level on the grid, shape (paths, assets,
    grid dates). ``extra``: any further state a model simulates (a variance, an exchange
    rate), by name, each shaped (paths, assets, grid dates)."""

    log_levels: np.ndarray
    extra: dict = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class Model:
    """The dynamics of one asset of a market. Subclasses set ``kind`` (which registers them)."""

    kind: ClassVar[str] = ""
    #: random normal factors per asset and step
    factors: ClassVar[int] = 1
    #: other model kinds this class can simulate in the same stepper as its own
    hosts: ClassVar[tuple[str, ...]] = ()
    #: order of the notes of different model classes in a result
    note_rank: ClassVar[int] = 50
    #: may a market file or ``--model`` name it (False: chosen by another model's for_asset)
    public: ClassVar[bool] = True

    name: str
    market: Market

    def __init_subclass__(cls, **kwargs):
        super(Model, cls).__init_subclass__(**kwargs)
        if cls.__dict__.get("kind"):
            MODELS[cls.kind] = cls

    @classmethod
    def for_asset(cls, market: Market, name: str) -> Model:
        """The model of asset ``name`` (raise :class:`InputError` when the asset's inputs do
        not support it)."""
        return cls(name, market)

    @property
    def asset(self):
        return self.market.asset(self.name)

    @property
    def capabilities(self) -> frozenset[Capability]:
        return frozenset()

    @property
    def daily(self) -> bool:
        return False

    def forward_and_scaling(self, *, quanto_forward: bool = True) -> frozenset[Capability]:
        """What a model whose escrowed part moves in proportion to its start declares: the
        forward, and spot scaling unless cash dividends (which do not scale) are to come.
        ``quanto_forward=False``: a foreign asset's quanto drift moves with the model's own
        (local or stochastic) vol, so its simulated mean is not the forward (which carries the
        Black vols' quanto term), and no forward is declared for it."""
        caps = {Capability.FORWARD}
        if not quanto_forward and self.market.foreign(self.name) is not None:
            caps = set()
        if not self.market.dividend_times(self.name):
            caps.add(Capability.SPOT_SCALING)
        return frozenset(caps)

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        """Refuse a run of ``paths`` paths whose step variances ``variance`` (this asset's row,
        one value per grid step) put the forward where no path goes. Nothing by default."""

    def controls(self, product) -> list:
        """Control variates whose known means this model gives (a semi-analytic price of
        its own) for ``product``'s paths, as ``(name, values(paths), mean)``; none by
        default (the engine makes them control variates: models know no products)."""
        return []

    @classmethod
    def group_notes(cls, models: tuple[Model, ...], names: tuple[str, ...],
                    steps_per_day: int) -> list[str]:
        """What a result says about the assets of this class (``models``) in a simulation of
        ``names``."""
        return []

    @classmethod
    def stepper(cls, models: tuple[Model, ...], correlation: np.ndarray, times: np.ndarray,
                steps_per_day: int) -> Stepper:
        """The step parameters of a simulation of ``models`` on the grid ``times``."""
        raise NotImplementedError


class Stepper:
    """A simulation's step parameters on one grid (built by :meth:`Model.stepper`).

    Attributes every stepper sets: ``times`` (the grid, years > 0), ``sim_times`` (the times
    the sampler draws for: the grid, or a finer one), ``factors`` (normals per step for all
    assets), ``variance`` (assets, grid steps: each step's integrated variance of the log-level,
    exact or an approximation; Brownian-bridge corrections use it) and ``notes``.
    """

    times: np.ndarray
    sim_times: np.ndarray
    factors: int
    variance: np.ndarray
    notes: tuple[str, ...] = ()

    #: does :meth:`simulate` leave ``z`` as it is? (Else the engine hands each scenario a
    #: copy of the normals.)
    keeps_normals: bool = False
    #: set by the engine when scenarios will :meth:`respot` this stepper's paths: keep what
    #: that needs beside the levels (the diffusing part of a level with cash dividends)
    for_respot: bool = False
    #: are the steps an approximation whose error shrinks with the step (log-Euler)? The engine
    #: can remove that error to first order on a finer grid (:func:`fairpath.engine.richardson`)
    discretised: bool = False

    def describe_steps(self, steps_per_day: int) -> str:
        """The discretised steps, in a note (``"log-Euler steps (a day)"``)."""
        return f"log-Euler steps ({'a day' if steps_per_day == 1 else f'{steps_per_day} a day'})"

    def simulate(self, z: np.ndarray) -> PathState:
        """Paths from the normals ``z`` (paths, factors, sim steps), which it may overwrite
        unless it declares :attr:`keeps_normals`."""
        raise NotImplementedError

    def respot(self, state: PathState, market: Market) -> PathState | None:
        """The paths of ``state`` as they would be simulated, from the same normals, on
        ``market``: the stepper's own market with only spots moved. None (the default) when
        the model cannot tell without simulating again."""
        return None

    def first_step(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Mean and covariance of the first step's log-return given the log spots, where the
        model declares :attr:`Capability.SCORE`; None otherwise."""
        return None

    def asset_inputs(self, a: int) -> tuple | None:
        """Everything the path of asset ``a`` depends on besides the normals (the grid, its
        step parameters, its row of the correlation factor, its start), where the stepper can
        tell; None (the default) when it cannot."""
        return None

    def unchanged(self, base: Stepper) -> np.ndarray | None:
        """Per asset: is its path, from the same normals, exactly the one ``base`` simulates
        (every :meth:`asset_inputs` equal)? None when the two cannot be compared. A bump of
        one asset's vol or dividends then simulates that asset alone."""
        names = getattr(self, "names", None)
        if type(base) is not type(self) or names is None or names != base.names:
            return None
        out = np.zeros(len(names), dtype=bool)
        for a in range(len(names)):
            mine, theirs = self.asset_inputs(a), base.asset_inputs(a)
            if mine is None or theirs is None:
                return None
            out[a] = len(mine) == len(theirs) and all(
                _same(x, y) for x, y in zip(mine, theirs, strict=True))
        return out

    def restart(self, x0: np.ndarray, col: int, last: int, rng: np.random.Generator
                ) -> np.ndarray | None:
        """Paths restarted from the escrowed log-levels ``x0`` (paths, assets) on grid column
        ``col`` (-1: today), with pseudo-random normals from ``rng``: the escrowed log-levels
        on the grid columns ``col + 1`` to ``last``, (paths, assets, last - col). None (the
        default) where the model's state is more than the levels (a stochastic variance)."""
        return None

    def simulate_changed(self, z: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
        """Paths from the normals ``z`` where the assets in ``keep`` have the paths of
        ``base`` (:meth:`unchanged`): those are copied, the others simulated. The default
        simulates every asset."""
        return self.simulate(z)


class Coarsened(Stepper):
    """A stepper on a grid ``factor`` times coarser than the normals it is fed: each coarse
    step's normal is the sum of its ``factor`` equal fine steps' normals over the root of
    ``factor``, so the coarse and the fine paths follow one Brownian path (a coupling: their
    difference is the discretisation error alone, with little noise)."""

    keeps_normals = True

    def __init__(self, inner: Stepper, fine_times: np.ndarray, factor: int):
        self.inner, self.factor = inner, factor
        self.times, self.sim_times = inner.times, np.asarray(fine_times, dtype=float)
        self.factors, self.variance, self.notes = inner.factors, inner.variance, inner.notes

    def simulate(self, z: np.ndarray) -> PathState:
        n, f, s = z.shape
        zc = z.reshape(n, f, s // self.factor, self.factor).sum(axis=3)
        zc /= math.sqrt(self.factor)
        return self.inner.simulate(zc)


def _same(x, y) -> bool:
    if x is None or y is None:
        return x is None and y is None
    if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
        return np.array_equal(np.asarray(x), np.asarray(y))
    return x == y


@dataclass(frozen=True, slots=True)
class ModelSet:
    """The models of the named assets of a market, resolved once, and what they can do
    together.

    Examples
    --------
    >>> from datetime import date
    >>> from fairpath.market import Asset, DiscountCurve, Market, VolCurve
    >>> m = Market(date(2026, 12, 1), "EUR", DiscountCurve.flat(0.03),
    ...            (Asset("NORDA", 100.0, VolCurve.flat(0.2)),))
    >>> ms = ModelSet.resolve(m, ["NORDA"])
    >>> [x.kind for x in ms.models], ms.stepper(np.array([0.5, 1.0])).variance.round(4).tolist()
    (['black'], [[0.02, 0.02]])
    """

    market: Market
    names: tuple[str, ...]
    models: tuple[Model, ...]
    correlation: np.ndarray
    #: what every one of the models declares (worked out once: payoffs ask on every batch)
    capabilities: frozenset[Capability] = field(init=False)

    def __post_init__(self):
        caps = frozenset(Capability)
        for m in self.models:
            caps &= m.capabilities
        object.__setattr__(self, "capabilities", caps)

    @classmethod
    def resolve(cls, market: Market, names, *, source: str | None = None) -> ModelSet:
        names = tuple(names)
        for n in names:
            market.asset(n, source=source)
        corr = market.correlation_matrix(names, source=source)
        return cls(market, names, tuple(model_of(market, n) for n in names), corr)

    @property
    def spots(self) -> np.ndarray:
        return np.array([self.market.asset(n).spot for n in self.names])

    def has(self, capability: Capability) -> bool:
        return capability in self.capabilities

    @property
    def daily(self) -> bool:
        return any(m.daily for m in self.models)

    @property
    def factors(self) -> int:
        return sum(m.factors for m in self.models)

    def host(self) -> type[Model]:
        """The model class that simulates all of these assets together."""
        kinds = {m.kind for m in self.models}
        for m in self.models:
            cls = type(m)
            if kinds <= {cls.kind, *cls.hosts}:
                return cls
        which = ", ".join(f"{n}: {m.kind}" for n, m in zip(self.names, self.models, strict=True))
        raise InputError(f"the models of {', '.join(self.names)} ({which}) cannot be simulated "
                         "together", source=self.market.source)

    def stepper(self, times: np.ndarray, steps_per_day: int = 1) -> Stepper:
        return self.host().stepper(self.models, self.correlation,
                                   np.asarray(times, dtype=float), steps_per_day)

    def notes(self, steps_per_day: int = 1) -> list[str]:
        """What a result says about these models (empty for plain Black assets)."""
        classes = sorted({type(m) for m in self.models}, key=lambda c: (c.note_rank, c.kind))
        out = []
        for cls in classes:
            out.extend(cls.group_notes(tuple(m for m in self.models if type(m) is cls),
                                       self.names, steps_per_day))
        divs = [n for n in self.names if self.market.dividend_times(n)]
        if divs:
            out.append(f"cash dividends of {', '.join(divs)}: escrowed model (the level is the "
                       "diffusing part plus the value of the dividends to come, so it drops by "
                       "the amount on each ex-date)")
        return out

    def check_run(self, variance: np.ndarray, paths: int) -> None:
        for i, m in enumerate(self.models):
            m.check_run(variance[i], paths)

    def controls(self, product) -> list:
        """Every model's own control variates for ``product`` (:meth:`Model.controls`)."""
        return [c for m in self.models for c in m.controls(product)]


def default_kind(market: Market, name: str) -> str:
    """The model an asset gets when its file names none: local vol where it has a surface."""
    return "local-vol" if market.asset(name).surface is not None else "black"


def model_class(kind: object, *, source: str | None = None, key: str | None = None
                ) -> type[Model]:
    """The class registered for a model ``kind``; an unknown name lists the known ones."""
    from fairpath.inputs import did_you_mean, show

    if not isinstance(kind, str) or kind not in known_models():
        known = known_models()
        raise InputError(f"unknown model {show(kind)}{did_you_mean(str(kind), known)}; known: "
                         f"{', '.join(known)}", source=source, key=key)
    return MODELS[kind]


def model_of(market: Market, name: str) -> Model:
    """Asset ``name``'s model: the one its file or a what-if names, else the default."""
    a = market.asset(name)
    kind = a.model or default_kind(market, name)
    cls = model_class(kind, source=market.source, key=f"assets.{name}.model")
    return cls.for_asset(market, name)


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


def escrow_table(market: Market, names: tuple[str, ...], times: np.ndarray
                 ) -> np.ndarray | None:
    """(assets, grid dates): the value of each asset's cash dividends still to come at each
    grid time (escrowed-dividend model), or None without cash dividends."""
    if not any(market.dividend_times(n) for n in names):
        return None
    return np.stack([np.asarray(market.escrow(n, np.asarray(times)), dtype=float)
                     for n in names])


def add_escrow(x: np.ndarray, escrow: np.ndarray | None,
               assets: np.ndarray | None = None, keep: dict | None = None) -> np.ndarray:
    """The level is the escrowed (diffusing) part plus the dividends to come: in place on the
    log-levels ``x`` (paths, assets, grid dates), of the ``assets`` marked (default: all).
    With ``keep`` (a dict), the diffusing parts are kept in it under ``"diffusing"`` (same
    shape, rows of the assets with dividends), for :meth:`ScalesWithSpot.respot`."""
    if escrow is not None:
        for a in range(x.shape[1]):
            if (assets is None or assets[a]) and np.any(escrow[a]):
                part = np.exp(x[:, a, :])
                if keep is not None:
                    if "diffusing" not in keep:
                        keep["diffusing"] = np.empty_like(x)
                    keep["diffusing"][:, a, :] = part
                part += escrow[a][None, :]
                np.log(part, out=x[:, a, :])
    return x


def copy_kept(x: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
    """The freshly simulated log-levels ``x`` with the ``keep`` assets' rows taken from
    ``base`` (:meth:`Stepper.simulate_changed`)."""
    x[:, keep, :] = base.log_levels[:, keep, :]
    return PathState(x)


class ScalesWithSpot:
    """A stepper whose escrowed part moves in proportion to its starting value: exact GBM
    steps, a law's shocks, and local volatility in log-moneyness against the forward (the
    forward moves with the spot, so the path in moneyness does not change). A spot bump is
    then the base paths rescaled, with no new simulation. Needs ``names``, ``log_start`` and
    ``escrow`` (and ``times``) set by the stepper."""

    def _start(self, models, times: np.ndarray, covariance: np.ndarray) -> None:
        """What every such stepper sets: the grid, the names, each step's variance (the
        diagonal of the step ``covariance``), the escrowed log spots and the escrow table."""
        market = models[0].market
        self.times = np.asarray(times, dtype=float)
        self.names = tuple(m.name for m in models)
        self.factors = len(models)
        self.variance = np.stack([covariance[:, i, i] for i in range(len(models))])
        self.log_start = escrowed_log_spots(market, self.names)
        self.escrow = escrow_table(market, self.names, self.times)
        self.notes = ()

    def state(self, x: np.ndarray) -> PathState:
        """The simulated escrowed log-levels ``x`` as a path state: the dividends to come
        added, and the diffusing part kept where scenarios will :meth:`respot` it."""
        extra: dict = {}
        return PathState(add_escrow(x, self.escrow, keep=extra if self.for_respot else None),
                         extra)

    def state_changed(self, x: np.ndarray, base: PathState, keep: np.ndarray) -> PathState:
        """As :meth:`state` for the assets not in ``keep`` (simulated again); the others'
        rows are ``base``'s (:meth:`Stepper.simulate_changed`)."""
        return copy_kept(add_escrow(x, self.escrow, ~keep), base, keep)

    def respot(self, state: PathState, market: Market) -> PathState:
        new = escrowed_log_spots(market, self.names)
        base = state.log_levels
        diffusing = state.extra.get("diffusing")
        x = np.empty_like(base)  # each row written once: copied, shifted or rescaled
        for a in range(x.shape[1]):
            shift = new[a] - self.log_start[a]
            if shift == 0:
                x[:, a, :] = base[:, a, :]
            elif self.escrow is not None and np.any(self.escrow[a]):
                # the diffusing part scales; the dividends to come do not
                d = self.escrow[a][None, :]
                if diffusing is not None:
                    level = diffusing[:, a, :] * np.exp(shift)
                else:
                    level = np.exp(base[:, a, :])
                    level -= d
                    level *= np.exp(shift)
                level += d
                np.log(level, out=x[:, a, :])
            else:
                np.add(base[:, a, :], shift, out=x[:, a, :])
        return PathState(x)


def escrowed_log_spots(market: Market, names: tuple[str, ...]) -> np.ndarray:
    """Log of each asset's simulated level at time 0 (the escrowed spot with cash dividends)."""
    return np.log([market.escrowed_spot(n) for n in names])

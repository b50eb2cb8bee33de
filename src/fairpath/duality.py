"""The other bound of an early-exercise price: duality (Andersen and Broadie 2004).

A frozen exercise policy priced on independent paths gives a lower bound for the holder
(:mod:`fairpath.products.exercise`). For any martingale ``M`` with ``M_0 = 0``, the option is
worth at most ``E[max_k (h_k - M_k)]`` (Rogers 2002; Haugh and Kogan 2004), ``h_k`` the
discounted payoff of exercising on date ``k``; the closer ``M`` is to the martingale part of the
option's value, the tighter. Andersen and Broadie build it from the policy itself: with ``L_k``
the value of following the policy from date ``k`` (the payoff when the policy exercises there,
else the continuation value ``C_k``), ``M`` moves by ``L_k - C_{k-1}`` from date ``k - 1`` to
``k`` (``C_0`` is the lower bound). The continuation values along each outer path are estimated by
nested simulation: ``inner`` paths from the outer path's state on every date, run forward
under the frozen policy. The upper bound is ``C_0 + mean(max_k (h_k - M_k))``; its standard
error combines the outer paths' spread with the lower bound's. The inner estimates' noise
only raises the bound (Jensen), so it stays an upper bound.

The inner paths restart from a state on the grid (:meth:`Stepper.restart`), which needs a
model whose state is the levels: Black's exact steps (with or without cash dividends: the
escrowed part restarts) and local volatility (log-Euler steps from the outer path's level, on
the same steps as the pricing run). Heston and LSV carry a variance as well, and a law of
returns reads its own shocks: those are refused with one line.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fairpath.errors import InputError
from fairpath.products.exercise import EarlyExercise, apply_policy, exercised

#: Outer paths, and inner paths per outer path and date: the inner estimates' noise biases the
#: bound upwards (measured on Longstaff and Schwartz's weekly Bermudan put at S = 36, 128 outer
#: paths: a gap of 0.081 with 256 inner paths, 0.026 with 1,024, 0.012 with 4,096; 0.022 at
#: these defaults, in about a minute on two cores)
DEFAULT_OUTER = 512
DEFAULT_INNER = 1024
#: Most exercise dates --dual nests inner simulations on (the work grows with their square)
MAX_DATES = 120
#: The outer and inner paths' random stream (never a pricing or pilot path)
DUAL_STREAM = 0x7FFFFFFB
#: Models whose paths restart from the levels alone (:meth:`Stepper.restart`)
RESTARTS = ("black", "local-vol")


@dataclass(frozen=True, slots=True)
class Bounds:
    lower: float
    lower_se: float
    upper: float
    upper_se: float
    outer: int
    inner: int

    @property
    def gap(self) -> float:
        return self.upper - self.lower

    def to_dict(self) -> dict:
        return {"lower": {"value": self.lower, "stderr": self.lower_se},
                "upper": {"value": self.upper, "stderr": self.upper_se},
                "gap": self.gap, "outer_paths": self.outer, "inner_paths": self.inner}


def check_dual(product, market, source: str | None = None) -> None:
    """Refuse --dual, before any pricing, where it cannot apply (see :func:`dual_bounds`)."""
    from fairpath.dates import weekdays_between
    from fairpath.models import ModelSet

    if not isinstance(product, EarlyExercise) and not _issuer_callable(product, market):
        raise InputError("applies only to American options, Bermudan baskets and "
                         "issuer-callable notes (with a call date still to come)",
                         source=source, key="--dual")
    if getattr(product, "protection_monitoring", None) == "continuous":
        raise InputError("restarts the note from its closes, and a barrier watched "
                         "continuously also reads the crossings between them: use daily or "
                         "final monitoring", source=source, key="--dual")
    models = ModelSet.resolve(market, product.underlyings(), source=source)
    kinds = sorted({m.kind for m in models.models} - set(RESTARTS))
    if kinds:
        raise InputError(f"restarts paths from the levels on each exercise date, which the "
                         f"{', '.join(kinds)} model cannot (its state is more than the levels); "
                         f"it works under {' and '.join(RESTARTS)}", source=source,
                         key="--dual")
    if not isinstance(product, EarlyExercise):
        return
    n = len(weekdays_between(market.valuation_date, product.expiry)) \
        if product.exercise_dates is None else len(product.observation_dates())
    if n > MAX_DATES:
        raise InputError(f"nests a simulation at every exercise date, and this product "
                         f"has {n} (at most {MAX_DATES}): give exercise_dates (a Bermudan "
                         "with fewer dates)", source=source, key="--dual")


def _issuer_callable(product, market) -> bool:
    from fairpath.products.autocall import Autocallable

    return isinstance(product, Autocallable) and any(
        d > market.valuation_date for d in product.call_dates)


def dual_bounds(product, market, lower: float, lower_se: float, *, seed: int | None,
                steps_per_day: int = 1, outer: int = DEFAULT_OUTER,
                inner: int = DEFAULT_INNER, source: str | None = None) -> Bounds:
    """Andersen and Broadie's upper bound for the holder of ``product`` (fitted), given its
    lower bound ``lower`` (stderr ``lower_se``) from the pricing run. For an issuer-callable
    note the price is the upper bound and this gives the lower one (:func:`issuer_bounds`)."""
    check_dual(product, market, source)
    if not isinstance(product, EarlyExercise):
        return issuer_bounds(product, market, lower, lower_se, seed=seed,
                             steps_per_day=steps_per_day, outer=outer, inner=inner,
                             source=source)
    if product.policy is None:
        raise InputError("the product must be fitted before its bounds", key="--dual")
    sim, ps = _outer_paths(product, market, seed, steps_per_day, outer, source)
    stepper = sim.stepper
    dates, levels, values, dfs = product._state(ps)
    norm, extra, floor = product.regressors(levels, dates, market)
    h = values * dfs[None, :] * product.size  # (outer, dates), discounted to today
    m = len(dates)
    cols = [sim.grid_dates.index(d) for d in dates]
    rng = _inner_rng(seed, 1)
    cont = np.zeros((outer, m))  # C_k: the policy's value from after date k, per outer path
    for k in range(m - 1):
        cont[:, k] = _inner_values(product, market, stepper, ps.grid_log_levels[:, :, cols[k]],
                                   cols[k], dates[k + 1:], cols[k + 1:], dfs[k + 1:],
                                   inner, rng) * product.size
    exercise = np.zeros((outer, m), dtype=bool)  # where the policy would exercise, each date
    for k, d in enumerate(dates):
        ev = values[:, k]
        exercise[exercised(product.policy, d, k == m - 1, ev, norm[:, :, k],
                           None if extra is None else extra[:, :, k],
                           None if floor is None else floor[:, k], ev > 0), k] = True
    value = np.where(exercise, h, cont)  # L_k
    prev = np.concatenate([np.full((outer, 1), lower), cont[:, :-1]], axis=1)  # C_{k-1}
    # the martingale started at the lower bound (Andersen and Broadie's pi_0 = L_0): the excess
    # of the payoff over it, at its largest along each path, is what the bound adds
    mart = lower + np.cumsum(value - prev, axis=1)
    excess = np.max(h - mart, axis=1)
    upper = lower + float(excess.mean())
    se = math.sqrt(lower_se ** 2 + float(excess.var(ddof=1)) / outer)
    return Bounds(lower, lower_se, upper, se, outer, inner)


def issuer_bounds(note, market, upper: float, upper_se: float, *, seed: int | None,
                  steps_per_day: int = 1, outer: int = DEFAULT_OUTER,
                  inner: int = DEFAULT_INNER, source: str | None = None) -> Bounds:
    """The issuer's side of an issuer-callable note (fitted): its price under the frozen call
    policy, ``upper`` (stderr ``upper_se``), is an upper bound (a policy short of the issuer's
    best leaves the note worth more), and duality gives the lower one.

    The issuer minimises, so for any martingale ``M`` with ``M_0 = 0`` the note is worth at
    least ``E[min_k (H_k - M_k)]`` over the call dates and maturity, ``H_k`` the discounted
    cash the holder gets if the issuer calls on date ``k`` (the coupons and early redemptions
    paid so far plus the call price, where the note is still alive) and ``H`` at maturity the
    cash without any call. ``M`` is Andersen and Broadie's, built from the frozen policy: on
    each call date ``L_k`` is ``H_k`` where the policy calls, else ``C_k``, the cash so far plus
    the value of the note's later cash flows under the policy, estimated from ``inner`` paths
    restarted from the outer path's levels, coupons owed and barrier state on that date; ``M``
    moves by ``L_k - C_{k-1}`` (``C`` before the first call date: the price). The paths
    continue after the policy's call (the martingale is the state's, not the policy's)."""
    if note.call_policy is None:
        raise InputError("the note must be fitted before its bounds", key="--dual")
    sim, ps = _outer_paths(note, market, seed, steps_per_day, outer, source)
    rec: dict = {}
    note._evaluate(ps, False, record=rec)
    cash = np.cumsum(rec["flows"], axis=1) * note.notional  # paid up to each date, today's value
    rng = _inner_rng(seed, 2)
    calls = sorted(rec["calls"])
    m = len(calls) + 1
    h = np.empty((outer, m))
    value = np.empty((outer, m))  # L_k
    cont = np.empty((outer, m))  # C_k (in total: the cash so far and the value after)
    for i, j in enumerate(calls):
        d, df, alive, x, owed, breached = rec["calls"][j]
        h[:, i] = cash[:, j] + alive * (note.call_price * note.notional * df)
        later = np.zeros(outer)
        idx = np.flatnonzero(alive > 0)
        if len(idx):
            later[idx] = _note_inner_values(
                note, market, sim, ps.grid_log_levels[idx][:, :, sim.grid_dates.index(d)], d,
                owed[idx], None if breached is None else breached[idx] > 0, inner, rng)
        cont[:, i] = cash[:, j] + later
        go = (alive > 0) & note.call_policy.calls(d, x, note.call_price)
        value[:, i] = np.where(go, h[:, i], cont[:, i])
    h[:, -1] = value[:, -1] = cash[:, -1]
    prev = np.concatenate([np.full((outer, 1), upper), cont[:, :-1]], axis=1)
    shortfall = np.min(h - np.cumsum(value - prev, axis=1), axis=1)
    lower = float(shortfall.mean())
    se = math.sqrt(upper_se ** 2 + float(shortfall.var(ddof=1)) / outer)
    return Bounds(lower, se, upper, upper_se, outer, inner)


def _note_inner_values(note, market, sim, log_levels: np.ndarray, start, owed: np.ndarray,
                       breached: np.ndarray | None, inner: int, rng) -> np.ndarray:
    """Per outer path: the mean discounted cash after ``start`` of ``inner`` paths of the
    note restarted from its log-levels ``log_levels`` (outer, assets) on that date, alive,
    with its coupons owed and barrier state, and called by the frozen policy later on."""
    from fairpath.products.autocall import NoteState
    from fairpath.products.base import PathSet

    stepper = sim.stepper
    col = sim.grid_dates.index(start)
    escrow = stepper.escrow
    grid = sim.grid_dates[col + 1:]
    obs_index = [grid.index(d) if d > start else -1 for d in note.observations]
    out = np.empty(log_levels.shape[0])
    for o0, o1, x in _restarted(stepper, log_levels, col, len(sim.grid_dates) - 1, inner, rng,
                                1 << 15):
        if escrow is not None:
            x = np.log(np.exp(x) + escrow[None, :, col + 1:])
        paths = PathSet.from_log_levels(market, sim.names, note.observations, obs_index,
                                        sim.spots, grid, sim.grid_times[col + 1:], x,
                                        stepper.variance[:, col + 1:], sim.capabilities,
                                        note.funding_curve(market))
        state = NoteState(start, np.repeat(owed[o0:o1], inner),
                          np.zeros(x.shape[0], dtype=bool) if breached is None
                          else np.repeat(breached[o0:o1], inner))
        cash, _ = note._evaluate(paths, False, state=state)
        out[o0:o1] = cash.reshape(o1 - o0, inner).mean(axis=1)
    return out


def _inner_values(product, market, stepper, log_levels: np.ndarray, col: int, dates, cols,
                  dfs, inner: int, rng) -> np.ndarray:
    """Per outer path: the mean discounted cash of ``inner`` paths restarted from its
    log-levels ``log_levels`` (outer, assets) at grid column ``col`` and exercised by the
    frozen policy on ``dates`` (grid columns ``cols``)."""
    escrow = stepper.escrow
    take = np.asarray(cols) - col - 1
    out = np.empty(log_levels.shape[0])
    for o0, o1, x in _restarted(stepper, log_levels, col, cols[-1], inner, rng, 1 << 16):
        levels = np.exp(x[:, :, take])
        if escrow is not None:
            levels += escrow[None, :, cols]
        values = product.exercise_values(levels, market)
        x, extra, floor = product.regressors(levels, tuple(dates), market)
        cash, _ = apply_policy(product.policy, tuple(dates), x, values, np.asarray(dfs), extra,
                               floor)
        out[o0:o1] = cash.reshape(o1 - o0, inner).mean(axis=1)
    return out


def _outer_paths(product, market, seed: int | None, steps_per_day: int, outer: int,
                 source: str | None):
    """The simulation of ``product`` and its ``outer`` paths, from the duality's own stream."""
    from fairpath.engine import Simulation
    from fairpath.sampling import make_sampler

    smp = make_sampler("pseudo", seed=seed, stream_key=(DUAL_STREAM,))
    sim = Simulation([product], market, smp, [[]], source, steps_per_day)
    z = smp.normals(smp.plan(outer), sim.factors, sim.sim_times)
    return sim, sim.pathsets(sim.stepper.simulate(z).log_levels)[0]


def _inner_rng(seed: int | None, which: int) -> np.random.Generator:
    """The inner paths' generator (``which``: the holder's bound 1, the issuer's 2)."""
    return np.random.default_rng(np.random.SeedSequence(
        entropy=0 if seed is None else seed, spawn_key=(DUAL_STREAM, which)))


def _restarted(stepper, log_levels: np.ndarray, col: int, last: int, inner: int, rng,
               budget: int):
    """``inner`` paths per outer path restarted from its log-levels ``log_levels`` (outer,
    assets) on grid column ``col`` to ``last`` (:meth:`Stepper.restart`), about ``budget``
    paths at a time: yields ``(o0, o1, x)``, the outer paths ``o0:o1`` and the escrowed
    log-levels ``x`` of their inner paths (outer path by outer path)."""
    escrow = stepper.escrow
    x0 = log_levels if escrow is None else np.log(np.exp(log_levels) - escrow[None, :, col])
    n_out = x0.shape[0]
    chunk = max(1, budget // inner)
    for o0 in range(0, n_out, chunk):
        o1 = min(o0 + chunk, n_out)
        yield o0, o1, stepper.restart(np.repeat(x0[o0:o1], inner, axis=0), col, last, rng)


def with_bounds(res, *, seed: int | None, steps_per_day: int = 1, source: str | None = None):
    """The price result ``res`` of an early-exercise product with both bounds (its price is
    the lower one): under ``bounds`` in its extras, and said in a note."""
    import dataclasses

    product, market = res.context[0], res.context[1]
    b = dual_bounds(product, market, res.price, res.stderr, seed=seed,
                    steps_per_day=steps_per_day, source=source)
    holder = isinstance(product, EarlyExercise)
    note = (f"duality (Andersen-Broadie, {b.outer:,} outer paths x {b.inner:,} inner per "
            f"date{'' if holder else ', for the issuer'}): the value lies between the lower "
            f"bound {b.lower:.6g} (stderr {b.lower_se:.2g}{', the price' if holder else ''}) "
            f"and the upper bound {b.upper:.6g} (stderr {b.upper_se:.2g}"
            f"{'' if holder else ', the price'}); gap {b.gap:.4g}, "
            f"{b.gap / max(abs(b.upper), 1e-300):.2%} of the upper bound")
    return dataclasses.replace(res, notes=(*res.notes, note),
                               extras={**res.extras, "bounds": b.to_dict()})

"""Solving for the term that makes a product worth a target price (par coupon, fair strike...).

Every trial reuses the same random numbers (the same seed, sampler and path count), so the price
is a deterministic, smooth-as-the-payoff function of the key and root finding is well posed.

* Keys the price is linear in (``coupon`` of an autocallable): the prices at 0 and 1 come from
  one simulation (:func:`fairpath.estimate.price_many`) with one imposed control-variate set,
  so the estimate is exactly linear and the root exact.
* Other numeric keys: a bracket is grown geometrically from the current value until the price
  crosses the target, then :func:`scipy.optimize.brentq` finds the root. If the price never
  reaches the target, the error states the range of prices seen.
"""

from __future__ import annotations

import dataclasses
import html
import json
import math
from dataclasses import dataclass

from scipy.optimize import brentq

from fairpath.errors import InputError
from fairpath.estimate import CAUTION, DEFAULT_PATHS, PriceResult, price, price_many
from fairpath.market import Market
from fairpath.products.base import Product

#: Keys whose effect on the price is linear (solved exactly from one simulation).
LINEAR_KEYS = {"autocallable": ("coupon",)}
#: Largest number of bracket expansions (each doubles the distance from the start).
MAX_EXPANSIONS = 12


@dataclass(frozen=True, slots=True)
class SolveResult:
    """The solved value of ``key``, and the product repriced there."""

    key: str
    value: float
    price: float
    stderr: float
    target: float
    method: str
    evaluations: int
    result: PriceResult

    def to_dict(self) -> dict:
        return {"key": self.key, "value": self.value, "price": self.price, "stderr": self.stderr,
                "target": self.target, "method": self.method, "evaluations": self.evaluations,
                "currency": self.result.currency, "paths": self.result.paths,
                "sampler": self.result.sampler, "seed": self.result.seed}

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def _rows(self) -> list[tuple[str, str]]:
        r = self.result
        return [(self.key, f"{self.value:.8g}"),
                ("price there", f"{self.price:.6f} {r.currency}"),
                ("standard error", f"{self.stderr:.6f}"),
                ("target", f"{self.target:g}"),
                ("method", self.method),
                ("simulations", str(self.evaluations)),
                ("paths", f"{r.paths:,}"),
                ("sampler", r.sampler),
                ("seed", str(r.seed))]

    def _repr_html_(self) -> str:
        body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                       f"<td style='text-align:left'>{html.escape(v)}</td></tr>"
                       for k, v in self._rows())
        title = (f"<caption>{html.escape(self.result.product)}: solved for "
                 f"{html.escape(self.key)}</caption>" if self.result.product else "")
        return f"<table>{title}{body}</table><p><small>{html.escape(CAUTION)}</small></p>"

    def __str__(self) -> str:
        return (f"{self.key} = {self.value:.8g} makes the price {self.price:.6f} "
                f"(stderr {self.stderr:.6f}, target {self.target:g}; {self.method}, "
                f"{self.evaluations} simulation(s))")


def numeric_keys(product: Product) -> list[str]:
    """Product keys holding a real number (the candidates for ``--for``)."""
    out = []
    for f in dataclasses.fields(product):
        v = getattr(product, f.name)
        if isinstance(v, float | int) and not isinstance(v, bool) and \
                f.name not in ("coupons_owed", "quanto_rate"):  # a count; a settlement term
            out.append(f.name)
    return out


def solve(product: Product, market: Market, key: str, target: float, *,
          paths: int = DEFAULT_PATHS, sampler: str = "sobol", seed: int | None = None,
          antithetic: bool = False, control: bool = True, replicates: int = 16,
          source: str | None = None, steps_per_day: int = 1,
          daily_closes: bool = False) -> SolveResult:
    """The value of the numeric product key ``key`` at which the price equals ``target``.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    >>> s = fp.solve(call, m, "strike", 10.4506, paths=4096, seed=1)
    >>> abs(s.value - 100.0) < 0.5
    True
    """
    source = source or product.source
    keys = numeric_keys(product)
    if key not in keys:
        raise InputError(f"{key!r} is not a numeric key of this {product.kind}; numeric keys: "
                         f"{', '.join(keys)}", source=source, key="--for")
    if not (isinstance(target, int | float) and math.isfinite(target)):
        raise InputError(f"must be a finite number, got {target!r}", key="--target")
    settings = dict(paths=paths, sampler=sampler, seed=seed, antithetic=antithetic,
                    control=control, replicates=replicates, source=source,
                    steps_per_day=steps_per_day, daily_closes=daily_closes)

    def with_value(x: float) -> Product:
        return dataclasses.replace(product, **{key: x})

    # linear only while nothing decides on the paths (an issuer's call moves with the coupon)
    if key in LINEAR_KEYS.get(product.kind, ()) and not product.pilot_paths():
        # the controlled estimate is linear in the coupon when every run uses the same control
        # set (the regression coefficient is then linear too): take the set the zero-coupon
        # run prefers and impose it on the end points and on the repricing
        first = price(with_value(0.0), market, **settings)
        forced = first.controls
        lo, hi = price_many([with_value(0.0), with_value(1.0)], market, control_set=forced,
                            **settings)
        slope = hi.price - lo.price
        if slope == 0:
            raise InputError(f"the price does not depend on {key} (always {lo.price:.6g})",
                             source=source, key="--target")
        x = (target - lo.price) / slope
        if x < 0:
            raise InputError(f"no {key} >= 0 reaches {target:g}: the price is {lo.price:.6g} at "
                             f"{key} = 0 and rises by {slope:.6g} per 1.00 of {key}",
                             source=source, key="--target")
        res = price_many([with_value(x)], market, control_set=forced, **settings)[0]
        return SolveResult(key, float(x), res.price, res.stderr, float(target),
                           "linear in the coupon (exact on one set of paths)", 3, res)

    seen: dict[float, float] = {}

    def f(x: float) -> float:
        if x not in seen:
            try:
                p = with_value(x)
            except InputError as exc:
                raise _OutOfDomain(exc) from None
            seen[x] = price(p, market, **settings).price
        return seen[x] - target

    x0 = float(getattr(product, key))
    a, fa = x0, f(x0)
    if fa == 0:
        res = price(product, market, **settings)
        return SolveResult(key, x0, res.price, res.stderr, float(target), "already at target",
                           len(seen), res)
    bracket = None
    step = abs(x0) if x0 != 0 else 1.0
    for i in range(MAX_EXPANSIONS):
        for cand in _candidates(x0, step * 2.0**i, positive=x0 > 0):
            try:
                fc = f(cand)
            except _OutOfDomain:
                continue
            if (fc > 0) != (fa > 0) or fc == 0:
                bracket = (cand, fc)
                break
            # keep the closest point on the target's side for a tighter bracket
        if bracket:
            break
    if bracket is None:
        lo_p, hi_p = min(seen.values()), max(seen.values())
        raise InputError(f"no value of {key} reaches {target:g}: over {key} in "
                         f"[{min(seen):.6g}, {max(seen):.6g}] the price ranges over "
                         f"[{lo_p:.6g}, {hi_p:.6g}]", source=source, key="--target")
    b, fb = bracket
    # tighten: the nearest evaluated point on a's side
    same = [x for x, v in seen.items() if (v - target > 0) == (fa > 0) and
            min(a, b) <= x <= max(a, b)]
    if same:
        a = min(same, key=lambda x: abs(x - b))
    x = b if fb == 0 else brentq(f, a, b, xtol=1e-10 * max(1.0, abs(x0)), rtol=1e-10,
                                 maxiter=100)
    res = price(with_value(x), market, **settings)
    return SolveResult(key, float(x), res.price, res.stderr, float(target),
                       "bracketing root finder (brentq) on common random numbers", len(seen), res)


def _candidates(x0: float, d: float, *, positive: bool) -> list[float]:
    if positive:
        r = 1.0 + d / abs(x0)
        return [x0 * r, x0 / r]
    return [x0 + d, x0 - d]


class _OutOfDomain(Exception):
    def __init__(self, exc: InputError):
        super().__init__(str(exc))

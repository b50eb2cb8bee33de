"""Results of the engine: a price with its error bar, and the estimate behind it (a leaf
module: no simulation and no pictures here; :mod:`fairpath.plots` registers the function that
draws a result)."""

from __future__ import annotations

import html
import json
from dataclasses import dataclass, field

from fairpath.errors import InputError

CAUTION = ("Model estimate under the stated assumptions (risk-neutral dynamics on the given "
           "market inputs); not advice, and not a substitute for an institution's approved "
           "valuation models and controls.")

#: name -> drawing function, filled by :mod:`fairpath.plots` when it is imported
PLOTTERS: dict = {}


# ---------------------------------------------------------------------------------------------
# The result
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class PriceResult:
    """A Monte Carlo price with its error bar and the settings that produced it."""

    price: float
    stderr: float
    ci95: tuple[float, float]
    paths: int
    currency: str
    sampler: str
    seed: int
    seconds: float
    product: str = ""
    antithetic: bool = False
    replicates: int | None = None
    controls: tuple[str, ...] = ()
    variance_reduction: float | None = None
    notes: tuple[str, ...] = ()
    extras: dict = field(default_factory=dict, compare=False)
    #: (product, market, settings) that produced the result, for plots: ``settings`` is the
    #: run's whole :class:`fairpath.engine.Settings` (a plot re-prices with the same steps)
    context: tuple = field(default=(), compare=False, repr=False)

    def plot(self, kind: str = "convergence", **kwargs):
        """A picture of the result: ``"convergence"`` (the estimate and its 95% band as paths
        grow), ``"distribution"`` (the discounted payoffs) or ``"paths"`` (a fan of sample paths
        with the product's dates and barriers). Returns a matplotlib figure (drawn by
        :func:`fairpath.plots.plot_result`, a function of the result)."""
        if not self.context:
            raise InputError("this result carries no product and market to plot")
        if "result" not in PLOTTERS:
            import fairpath  # noqa: F401  (loads fairpath.plots, which registers itself)
        return PLOTTERS["result"](self, kind, **kwargs)

    def to_dict(self) -> dict:
        """The JSON contract of ``fairpath price --json`` (contract keys first)."""
        d = {"price": self.price, "stderr": self.stderr, "ci95": list(self.ci95),
             "paths": self.paths, "currency": self.currency, "sampler": self.sampler,
             "seed": self.seed, "seconds": round(self.seconds, 6)}
        d.update({"product": self.product, "antithetic": self.antithetic,
                  "replicates": self.replicates, "controls": list(self.controls),
                  "variance_reduction": self.variance_reduction, "notes": list(self.notes)})
        if self.diagnostics:
            d["diagnostics"] = {k: v for k, v in self.diagnostics.items()
                                if not k.startswith(EXERCISE_PREFIX)}
        if self.exercise:
            d["exercise"] = self.exercise
        if "discretisation_bias" in self.extras:
            d["discretisation_bias"] = dict(self.extras["discretisation_bias"])
        if "bounds" in self.extras:
            d["bounds"] = dict(self.extras["bounds"])
        if "funding" in self.extras:
            d["funding"] = dict(self.extras["funding"])
        return d

    @property
    def diagnostics(self) -> dict[str, float]:
        """Averages over the paths of the product's diagnostics (e.g. redemption odds)."""
        return dict(self.extras.get("diagnostics", {}))

    @property
    def exercise(self) -> dict[str, float]:
        """An early-exercise product's probability of exercise on each date (ISO dates)."""
        return {k[len(EXERCISE_PREFIX):]: v for k, v in self.diagnostics.items()
                if k.startswith(EXERCISE_PREFIX)}

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def _rows(self) -> list[tuple[str, str]]:
        lo, hi = self.ci95
        rows = [("price", f"{self.price:.6f} {self.currency}"),
                ("standard error", f"{self.stderr:.6f}"),
                ("95% interval", f"[{lo:.6f}, {hi:.6f}]"),
                ("paths", f"{self.paths:,}"),
                ("sampler", self.sampler + (f" ({self.replicates} scramblings)"
                                            if self.replicates else "")
                 + (", antithetic" if self.antithetic else "")),
                ("seed", str(self.seed)),
                ("controls", ", ".join(self.controls) or "none")]
        if self.variance_reduction is not None:
            rows.append(("variance reduction", f"x{self.variance_reduction:.3g}"))
        rows.append(("seconds", f"{self.seconds:.3f}"))
        b = self.extras.get("bounds")
        if b:
            rows.append(("lower bound", f"{b['lower']['value']:.6f} (stderr "
                                        f"{b['lower']['stderr']:.6f})"))
            rows.append(("upper bound", f"{b['upper']['value']:.6f} (stderr "
                                        f"{b['upper']['stderr']:.6f}) by duality"))
            rows.append(("duality gap", f"{b['gap']:.6f}"))
        f = self.extras.get("funding")
        if f:
            rows.append(("without funding spread", f"{f['price_without_spread']:.6f} (stderr "
                                                   f"{f['stderr_without_spread']:.6f})"))
        rows.extend((k, f"{v:.6g}") for k, v in self.diagnostics.items()
                    if not k.startswith(EXERCISE_PREFIX))
        ex = self.exercise
        if ex:
            if len(ex) <= 12:
                rows.extend((f"exercise {d}", f"{v:.4g}") for d, v in ex.items())
            else:  # a daily American: the busiest dates, the rest in --json
                top = sorted(ex.items(), key=lambda kv: -kv[1])[:3]
                rows.append(("exercise dates", f"{len(ex)}; most likely "
                             + ", ".join(f"{d} ({v:.3g})" for d, v in top)
                             + " (every date in --json)"))
        rows.extend(("note", n) for n in self.notes)
        return rows

    def __str__(self) -> str:
        w = max(len(k) for k, _ in self._rows())
        head = f"{self.product}\n" if self.product else ""
        return head + "\n".join(f"  {k:<{w}}  {v}" for k, v in self._rows())

    def _repr_html_(self) -> str:
        body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                       f"<td style='text-align:left'>{html.escape(v)}</td></tr>"
                       for k, v in self._rows())
        title = f"<caption>{html.escape(self.product)}</caption>" if self.product else ""
        return f"<table>{title}{body}</table><p><small>{html.escape(CAUTION)}</small></p>"


#: diagnostics keys of the probability of exercise on a date (early-exercise products)
EXERCISE_PREFIX = "exercise "


@dataclass(frozen=True, slots=True)
class Estimate:
    """A price, its standard error and interval from block moments (see
    :func:`fairpath.engine.combine`)."""

    price: float
    stderr: float
    ci95: tuple[float, float]
    samples: int
    controls: tuple[str, ...]
    variance_reduction: float | None
    notes: tuple[str, ...]

"""Checking dealer quotes: fair value, a band from the model's own uncertainty, a verdict.

For each quote:

* the fair value and its standard error (the engine's defaults or the run's settings);
* the band: every vol the product uses moved down and up by ``vol_band`` on the same random
  numbers, the lowest and highest of the three prices widened by 3 standard errors (and by the
  row's ``tolerance``, in price units, when the CSV gives one);
* ``difference = quote - price`` and ``z = difference / stderr``;
* the verdict: ``rich`` (quote above the band), ``cheap`` (below it) or ``fair``;
* for a single-asset product, the implied volatility of the quote: the flat vol at which the
  model reproduces the quote, on common random numbers (the same seed and settings for every
  vol). The price is evaluated on a grid of vols (:func:`vol_grid`, a dozen points, densest
  around the asset's market vol); every grid interval where ``price - quote`` changes sign is
  solved with ``brentq``. The price of a digital or a barrier is not monotone in vol, so two
  vols can reproduce one quote: the one nearest the market vol is reported and the note gives
  the other. Empty, with the reason, when no vol in [MIN_VOL, MAX_VOL] reaches the quote;
* for an autocallable, the fair coupon at the quoted price (the solver) beside the note's coupon.

A row whose product file fails to load, or whose product, quote or tolerance cell is bad, is
reported with its error (``QUOTES.csv line N: ...``) and the other rows are still priced.

In a notebook the results render as tables (``_repr_html_``) and :meth:`QuoteChecks.plot` draws
the quotes against their bands.
"""

from __future__ import annotations

import dataclasses
import html
import math
import os
import platform
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from fairpath.errors import FairpathError, InputError
from fairpath.estimate import CAUTION, DEFAULT_PATHS, price
from fairpath.inputs import read_csv_table
from fairpath.laws import Law
from fairpath.market import Market, VolCurve, check_model_kind
from fairpath.models import ModelSet, default_kind, model_of
from fairpath.products.base import Product
from fairpath.products.loader import load_product
from fairpath.sampling import normalize_seed

MIN_VOL, MAX_VOL = 1e-4, 3.0
BAND_STDERRS = 3.0
#: The implied-vol grid: the market vol times ``sqrt(2)**k`` for ``|k| <= GRID_HALF_WIDTH``,
#: plus MIN_VOL, 1% and MAX_VOL (a dozen points).
GRID_HALF_WIDTH = 4
#: Verdict colours (report chart and ``QuoteChecks.plot``).
COLOURS = {"fair": "#2f7d32", "rich": "#b3261e", "cheap": "#1f5fa8"}


@dataclass(frozen=True, slots=True)
class QuoteCheck:
    product: str
    quote: float | None
    price: float | None = None
    stderr: float | None = None
    low: float | None = None
    high: float | None = None
    difference: float | None = None
    z: float | None = None
    verdict: str | None = None
    implied_vol: float | None = None
    implied_vol_note: str = ""
    coupon: float | None = None
    fair_coupon: float | None = None
    name: str = ""
    status: str = "ok"
    message: str = ""
    #: the price under a comparison shock law (``compare_law``), same random numbers
    other_law: str | None = None
    other_price: float | None = None
    other_stderr: float | None = None
    #: with a volatility surface: the price with its at-the-money term structure instead
    flat_vol_price: float | None = None
    #: the band's parts: the vol move's prices +- 3 standard errors (``vol_low``, ``vol_high``),
    #: the compared models' prices, each +- 3 of its standard errors (``model_low``,
    #: ``model_high``, None without ``models``), and the row's tolerance; ``low``/``high`` are
    #: the widest of the parts, then the tolerance outside them
    vol_low: float | None = None
    vol_high: float | None = None
    model_low: float | None = None
    model_high: float | None = None
    tolerance: float = 0.0
    #: ``(model kind, price, stderr)`` for each compared model, in the order asked
    models: tuple[tuple[str, float, float], ...] = ()
    #: the issuer's funding spread the price is discounted with, and the price without it
    #: (``fairpath.estimate.with_funding``); None for a product without one
    funding: dict | None = None

    @property
    def funding_text(self) -> str:
        """The spread used and the price without it, in a line (empty without a spread)."""
        f = self.funding
        if not f:
            return ""
        spread = (f"{f['spread'] * 1e4:.4g} bp" if "spread" in f else
                  f"{min(f['spreads']) * 1e4:.4g}-{max(f['spreads']) * 1e4:.4g} bp by tenor")
        return (f"{f['issuer']}'s funding spread {spread}; without it "
                f"{f['price_without_spread']:.6g}")

    @property
    def model_prices(self) -> dict[str, dict[str, float]]:
        """``{kind: {"price": .., "stderr": ..}}`` for each compared model (empty without)."""
        return {k: {"price": p, "stderr": s} for k, p, s in self.models}

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in ("product", "quote", "price", "stderr", "low", "high",
                                           "difference", "z", "verdict", "implied_vol")}
        d.update(implied_vol_note=self.implied_vol_note, coupon=self.coupon,
                 fair_coupon=self.fair_coupon, name=self.name, status=self.status,
                 message=self.message)
        if self.status == "ok":
            d["band_parts"] = {
                "vol_move": [self.vol_low, self.vol_high],
                "models": (None if self.model_low is None
                           else [self.model_low, self.model_high]),
                "tolerance": self.tolerance, "stderrs": BAND_STDERRS}
        if self.models:
            d["model_prices"] = self.model_prices
        if self.other_law is not None:
            d.update(other_law=self.other_law, other_price=self.other_price,
                     other_stderr=self.other_stderr)
        if self.flat_vol_price is not None:
            d["flat_vol_price"] = self.flat_vol_price
        if self.funding:
            d["funding"] = dict(self.funding)
        return d

    def _repr_html_(self) -> str:
        """A one-row verdict table (and the caution) for a notebook."""
        return _table_html([self]) + _caution_html()


def _with_vols(market: Market, names, shift: float | None = None, flat: float | None = None
               ) -> Market:
    for n in names:
        a = market.asset(n)
        vol = VolCurve.flat(flat) if flat is not None else a.vol.shifted(shift)
        surface = None if flat is not None or a.surface is None else a.surface.shifted(shift)
        low = min(vol.vols) if surface is None else min(min(r) for r in surface.vols)
        if low <= 0:
            raise InputError(f"the vol band would make {n}'s vol non-positive ({low:g})",
                             key="--vol-band")
        market = market.with_asset(dataclasses.replace(a, vol=vol, surface=surface))
    return market


def market_vol(product: Product, market: Market, name: str) -> float:
    """The asset's Black vol to the product's last observation date (its flat vol when flat)."""
    curve = market.asset(name).vol
    dates = [d for d in product.observation_dates() if d > market.valuation_date]
    t = float(market.time(max(dates))) if dates else 1.0
    return float(curve.implied(t))


def vol_grid(centre: float) -> list[float]:
    """The vols at which :func:`implied_vol` evaluates the price first: ``centre`` times
    ``sqrt(2)**k`` for ``k = -GRID_HALF_WIDTH..GRID_HALF_WIDTH`` (a quarter to four times the
    market vol), plus MIN_VOL, 1% and MAX_VOL, sorted, inside [MIN_VOL, MAX_VOL]."""
    if not (MIN_VOL < centre < MAX_VOL):
        centre = 0.2
    pts = {MIN_VOL, 0.01, MAX_VOL}
    pts.update(centre * math.sqrt(2.0) ** k
               for k in range(-GRID_HALF_WIDTH, GRID_HALF_WIDTH + 1))
    return sorted(v for v in pts if MIN_VOL <= v <= MAX_VOL)


def implied_vol(product: Product, market: Market, quote: float, **settings
                ) -> tuple[float | None, str]:
    """Flat vol reproducing ``quote`` on common random numbers, or (None, reason).

    The price is evaluated on :func:`vol_grid` around the asset's market vol (the same seed
    and settings for every vol); each grid interval where ``price - quote`` changes sign is
    solved with ``brentq``. When the quote lies beyond every grid price but the grid's
    highest (lowest) price is inside the grid, that extremum is refined first, since two roots
    can hide between two grid points. Of several roots the one nearest the market vol is
    returned and the note names the others.
    """
    names = product.underlyings()
    if len(names) != 1:
        return None, "several assets: no single implied vol"
    centre = market_vol(product, market, names[0])
    seen: dict[float, float] = {}

    def f(v: float) -> float:
        if v not in seen:
            seen[v] = price(product, _with_vols(market, names, flat=v), **settings).price
        return seen[v] - quote

    grid, fs = [], []
    for v in vol_grid(centre):
        try:
            fs.append(f(v))
        except InputError as exc:
            if not (exc.key or "").endswith((".law", ".vol")):
                raise
            break  # this vol (and any higher one) is too high for the paths or the law
        grid.append(v)
    top = grid[-1] if grid else MIN_VOL
    if len(grid) < 2:
        return None, "every vol of the search is refused (too high for the paths or the law)"
    roots = [v for v, y in zip(grid, fs, strict=True) if y == 0]
    brackets = [(a, b) for a, fa, b, fb in zip(grid, fs, grid[1:], fs[1:], strict=False)
                if fa * fb < 0]
    if not roots and not brackets:
        brackets = _extremum_brackets(f, grid, fs)
    if not roots and not brackets:
        lo, hi = min(seen.values()), max(seen.values())
        if hi == lo:
            return None, f"the price does not depend on vol (always {lo:.6g})"
        where = "below" if quote < lo else "above"
        intrinsic = where == "below" and seen[MIN_VOL] == lo
        return None, (f"no vol in [{MIN_VOL:g}, {top:g}] reaches it: the quote is {where} "
                      f"the model's range [{lo:.6g}, {hi:.6g}]"
                      + (" (below intrinsic)" if intrinsic else ""))
    for a, b in brackets:
        roots.append(float(brentq(f, a, b, xtol=1e-7, maxiter=100)))
    roots.sort(key=lambda v: (abs(v - centre), v))
    best, others = roots[0], sorted(roots[1:])
    if not others:
        return best, ""
    listed = ", ".join(f"{v:.2%}" for v in others)
    one = len(others) == 1
    return best, (f"the price is not monotone in vol: {'another vol' if one else 'other vols'}, "
                  f"{listed}, also reproduce{'s' if one else ''} the quote; the one nearest the "
                  f"market vol {centre:.2%} is reported")


def _extremum_brackets(f, grid: list[float], fs: list[float]) -> list[tuple[float, float]]:
    """When every grid value of ``f`` has one sign, refine the interior extremum nearest zero
    (a maximum when all are negative, a minimum when all are positive); if it crosses zero,
    the two brackets on either side of it."""
    sign = 1.0 if fs[0] > 0 else -1.0
    i = int(np.argmin([sign * y for y in fs]))
    if i in (0, len(grid) - 1):
        return []
    a, b = grid[i - 1], grid[i + 1]
    opt = minimize_scalar(lambda v: sign * f(v), bounds=(a, b), method="bounded",
                          options={"xatol": 1e-4 * grid[i], "maxiter": 30})
    x = float(opt.x)
    if sign * f(x) >= 0:
        return []
    return [(a, x), (x, b)]


def model_list(models, *, key: str = "--models") -> tuple[str, ...]:
    """The model kinds of a comparison, in the order given, each once.

    ``models`` is a comma-separated string (``"local-vol,heston"``, as ``--models`` takes it) or
    a sequence of kinds; None or an empty sequence: no comparison. An empty string, an empty
    name in the list or a kind no model registered raises :class:`InputError` naming ``key``
    (an unknown kind lists the known ones).

    >>> model_list("black, local-vol,black")
    ('black', 'local-vol')
    """
    from fairpath.registry import known_models

    if models is None:
        return ()
    if isinstance(models, str):
        items = [m.strip() for m in models.split(",")]
        if not any(items):
            raise InputError(f"an empty list of models; known: {', '.join(known_models())}",
                             key=key)
    else:
        items = list(models)
    for m in items:
        if isinstance(m, str) and not m.strip():
            raise InputError(f"an empty name in the list of models {models!r}; known: "
                             f"{', '.join(known_models())}", key=key)
        check_model_kind(m, key=key)
    return tuple(dict.fromkeys(items))


def under_model(market: Market, names, kind: str, *, where: str | None = None) -> Market:
    """The market with every asset's model replaced by ``kind`` (a what-if), after checking
    that the model applies to each of the named assets (those a product uses): an
    :class:`InputError` naming ``where`` (the quote's row), ``--models``, the model and the
    asset otherwise."""
    alt = market.with_model(kind, key="--models")
    for n in names:
        try:
            model_of(alt, n)
        except InputError as exc:
            raise InputError(f"the {kind} model cannot apply to {n}: {exc.problem}",
                             source=where, key="--models") from None
    return alt


def check_quote(product: Product, market: Market, quote: float, *, vol_band: float = 0.01,
                tolerance: float = 0.0, paths: int = DEFAULT_PATHS, sampler: str = "sobol",
                seed: int | None = None, implied: bool = True, label: str = "",
                source: str | None = None, compare_law: Law | None = None,
                steps_per_day: int = 1, daily_closes: bool = False, models=None) -> QuoteCheck:
    """Check one quote (see the module notes).

    ``compare_law``: also price the product with this shock law for every asset it uses (same
    random numbers), to show how much of the value is the law of returns.

    ``models``: model kinds (``("local-vol", "heston")`` or ``"local-vol,heston"``) under which
    the product is also priced, the market's every asset given that model
    (:meth:`Market.with_model`), with the same seed and settings (so the same random numbers
    where the models draw the same factors). Each model's price and standard error are
    reported (``model_prices``), and the band is widened to cover every one of them +- 3 of
    its standard errors. A model that is the market's own for every asset the product uses
    is not priced again: its price is the fair value's.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    >>> fp.check_quote(call, m, 12.0, paths=4096, implied=False).verdict
    'rich'
    """
    if not (isinstance(vol_band, int | float) and vol_band >= 0 and math.isfinite(vol_band)):
        raise InputError(f"must be a non-negative number, got {vol_band!r}", key="--vol-band")
    settings = dict(paths=paths, sampler=sampler, seed=seed, source=source,
                    steps_per_day=steps_per_day, daily_closes=daily_closes)
    names = product.underlyings()
    kinds = model_list(models)
    alts = {k: under_model(market, names, k, where=label or source) for k in kinds
            if not all((market.asset(n).model or default_kind(market, n)) == k for n in names)}
    base = price(product, market, **settings)
    prices = [base.price]
    if vol_band > 0:
        # the exchange rates of foreign assets move too (their vol enters the quanto drift)
        moved = (*names, *(c for c in market.rates_in_play(names) if c not in names))
        for shift in (-vol_band, vol_band):
            prices.append(price(product, _with_vols(market, moved, shift=shift),
                                **settings).price)
    se = base.stderr
    vol_low = min(prices) - BAND_STDERRS * se
    vol_high = max(prices) + BAND_STDERRS * se
    compared = []
    for k in kinds:
        res = price(product, alts[k], **settings) if k in alts else base
        compared.append((k, res.price, res.stderr))
    model_low = min((p - BAND_STDERRS * s for _, p, s in compared), default=None)
    model_high = max((p + BAND_STDERRS * s for _, p, s in compared), default=None)
    low = min(vol_low, vol_low if model_low is None else model_low) - tolerance
    high = max(vol_high, vol_high if model_high is None else model_high) + tolerance
    diff = quote - base.price
    z = diff / se if se > 0 else (0.0 if diff == 0 else math.copysign(math.inf, diff))
    verdict = "rich" if quote > high else "cheap" if quote < low else "fair"
    iv, note = (None, "")
    if implied:
        iv, note = implied_vol(product, market, quote, paths=paths, sampler=sampler, seed=seed)
    coupon = fair = None
    if product.kind == "autocallable":
        from fairpath.solve import solve
        coupon = product.coupon
        try:
            fair = solve(product, market, "coupon", quote, **settings).value
        except InputError as exc:
            note = (note + "; " if note else "") + f"no fair coupon: {exc.problem}"
    other = {}
    if any(m.kind == "local-vol" for m in ModelSet.resolve(market, names).models):
        # how much of the value is the smile
        other["flat_vol_price"] = price(product, market.with_flat_vol(names), **settings).price
    if compare_law is not None:
        alt = price(product, market.with_law(compare_law, names), **settings)
        other = dict(other_law=compare_law.describe(), other_price=alt.price,
                     other_stderr=alt.stderr)
    return QuoteCheck(label or product.label(), quote, base.price, se, low, high, diff,
                      z if math.isfinite(z) else None, verdict, iv, note, coupon, fair,
                      product.label(), **other, vol_low=vol_low, vol_high=vol_high,
                      model_low=model_low, model_high=model_high, tolerance=tolerance,
                      models=tuple(compared), funding=base.extras.get("funding"))


def read_quotes(path: str | Path) -> list[dict]:
    """Rows of a quotes CSV (columns ``product,quote`` and an optional ``tolerance``)."""
    return [row for _, row in _read_rows(path)]


def _read_rows(path: str | Path) -> list[tuple[int, dict]]:
    """(line number, row) for every record of a quotes CSV."""
    return read_csv_table(path, ("product", "quote"), ("tolerance",))


def _number(row: dict, column: str, source: str, *, required: bool) -> float | None:
    """The number in one cell, or an InputError naming the file, the line and the cell."""
    text = (row.get(column) or "").strip()
    if not text:
        if required:
            raise InputError("empty", source=source, key=column)
        return None
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{column} is not a number: {text!r}", source=source) from None
    if not math.isfinite(value):
        raise InputError(f"{column} must be finite, got {text!r}", source=source)
    return value


def check_quotes(quotes_csv: str | Path, market: Market, *, vol_band: float = 0.01,
                 progress: bool = False, **settings) -> QuoteChecks:
    """Check every row of a quotes CSV; product paths are relative to the CSV.

    Returns a :class:`QuoteChecks` (a list of :class:`QuoteCheck`, one per row, in file order)
    that renders as a table in a notebook and has ``.plot()``. ``progress`` shows a progress
    bar over the rows (tqdm; notebook-aware). Other keyword arguments go to
    :func:`check_quote`.

    With ``models``, every row's product is first checked against every listed model before
    anything is priced: a model that cannot apply to an asset a row uses raises
    :class:`InputError` naming the row, the product and the model (nothing is priced).
    """
    rows = _read_rows(quotes_csv)
    base = Path(quotes_csv).parent
    kinds = model_list(settings.get("models"))
    if kinds:
        settings["models"] = kinds
        _check_models(rows, quotes_csv, base, market, kinds)
    out = QuoteChecks(settings={
        "paths": settings.get("paths", DEFAULT_PATHS),
        "sampler": settings.get("sampler", "sobol"),
        "seed": normalize_seed(settings.get("seed")), "vol band": vol_band,
        **({"models": ", ".join(kinds)} if kinds else {})})
    bar = None
    if progress and rows:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(rows), desc="checking quotes", unit="quote", leave=False)
    try:
        for line, row in rows:
            out.append(_check_row(row, f"{quotes_csv} line {line}", base, market, vol_band,
                                  settings))
            if bar is not None:
                bar.update(1)
    finally:
        if bar is not None:
            bar.close()
    return out


def _check_models(rows, quotes_csv, base: Path, market: Market, kinds: tuple[str, ...]
                  ) -> None:
    """Refuse, before any pricing, a compared model that cannot apply to an asset of a row's
    product (a row whose product does not load is left to be reported in its row)."""
    for line, row in rows:
        prod = (row.get("product") or "").strip()
        if not prod:
            continue
        try:
            product = load_product(base / prod)
        except (InputError, FairpathError, ValueError):
            continue
        for k in kinds:
            under_model(market, product.underlyings(), k,
                        where=f"{quotes_csv} line {line} ({prod})")


def _check_row(row: dict, where: str, base: Path, market: Market, vol_band: float,
               settings: dict) -> QuoteCheck:
    prod = (row.get("product") or "").strip()
    try:
        if not prod:
            raise InputError("empty", source=where, key="product")
        quote = _number(row, "quote", where, required=True)
        tol = _number(row, "tolerance", where, required=False)
        if tol is not None and tol < 0:
            raise InputError(f"tolerance must not be negative, got {tol:g}", source=where)
        path = base / prod
        product = load_product(path)
        return check_quote(product, market, quote, vol_band=vol_band, tolerance=tol or 0.0,
                           label=prod, source=str(path), **settings)
    except (InputError, FairpathError, ValueError) as exc:
        try:
            qv = float(row.get("quote"))
        except (TypeError, ValueError):
            qv = None
        return QuoteCheck(prod, qv, status="error", message=str(exc))


# ---------------------------------------------------------------------------------------------
# Display: tables (report and notebook) and a chart
# ---------------------------------------------------------------------------------------------
def _fmt(v, spec: str = ".6g") -> str:
    return "" if v is None else format(v, spec)


def _table_html(checks: list[QuoteCheck], attrs: str = "") -> str:
    """The verdicts as an HTML table (the report's and the notebook's)."""
    alt = next((c.other_law for c in checks if c.other_law is not None), None)
    smile = any(c.flat_vol_price is not None for c in checks)
    compared = any(c.models for c in checks)
    head = ("product", "quote", "price", "stderr", "low", "high",
            *(("vol band", "model band", "price under each model (stderr)") if compared
              else ()),
            "difference", "z", "verdict", "implied vol", "coupon / fair coupon",
            *((f"price under the {alt} law",) if alt else ()),
            *(("price with at-the-money vols (no smile)",) if smile else ()), "note")
    body = []
    for c in checks:
        if c.status != "ok":
            body.append(f"<tr><td>{html.escape(c.product)}</td><td>{_fmt(c.quote)}</td>"
                        f"<td colspan='{len(head) - 2}' class='err' style='text-align:left'>"
                        f"error: {html.escape(c.message)}</td></tr>")
            continue
        cpn = "" if c.coupon is None else f"{c.coupon:.4%} / {_fmt(c.fair_coupon, '.4%')}"
        law_col = (f"{_fmt(c.other_price)} ({_fmt(c.other_stderr, '.3g')})",) if alt else ()
        flat_col = (_fmt(c.flat_vol_price),) if smile else ()
        model_cols = ((_interval(c.vol_low, c.vol_high), _interval(c.model_low, c.model_high),
                       "; ".join(f"{k} {_fmt(p)} ({_fmt(e, '.3g')})" for k, p, e in c.models))
                      if compared else ())
        cells = (c.product, _fmt(c.quote), _fmt(c.price), _fmt(c.stderr, ".3g"), _fmt(c.low),
                 _fmt(c.high), *model_cols, _fmt(c.difference, ".4g"), _fmt(c.z, ".2f"),
                 c.verdict, _fmt(c.implied_vol, ".4%"), cpn, *law_col, *flat_col,
                 "; ".join(x for x in (c.implied_vol_note, c.funding_text) if x))
        at = head.index("verdict")
        style = f" style='color:{COLOURS[c.verdict]}'"
        body.append("<tr>" + "".join(
            f"<td{style if i == at else ''}>{html.escape(str(v))}</td>"
            for i, v in enumerate(cells)) + "</tr>")
    header = "".join(f"<th>{html.escape(h)}</th>" for h in head)
    return f"<table{attrs}><tr>{header}</tr>{''.join(body)}</table>"


def _interval(lo, hi) -> str:
    return "" if lo is None else f"[{_fmt(lo)}, {_fmt(hi)}]"


def _caution_html() -> str:
    return f"<p><small>{html.escape(CAUTION)}</small></p>"


class QuoteChecks(list):
    """The checks of a quotes CSV, one :class:`QuoteCheck` per row in file order.

    A plain list in every other respect (``json.dumps([c.to_dict() for c in checks])`` works
    as before); in a notebook it renders as the verdict table with the caution under it, and
    :meth:`plot` draws the quotes against their bands. ``settings`` holds the run's settings
    (paths, sampler, seed, vol band) for the report.
    """

    def __init__(self, items=(), *, settings: dict | None = None):
        super().__init__(items)
        self.settings = dict(settings or {})

    def to_dicts(self) -> list[dict]:
        """The ``--json`` rows."""
        return [c.to_dict() for c in self]

    def _repr_html_(self) -> str:
        return _table_html(list(self)) + _caution_html()

    def plot(self, ax=None, *, units: str = "auto"):
        """Each priced quote against its band, one row per quote: the band as a grey bar, the
        fair value as a black tick, the quote as a dot coloured by its verdict (green fair,
        red rich, blue cheap). The horizontal axis is the distance from the fair value, in %
        of the fair value (``units="percent"``) or in half-widths of the band
        (``units="band"``); ``"auto"`` takes percent unless a fair value is zero. Rows with an
        error are left out (the title counts them). Returns a matplotlib figure."""
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch

        if units not in ("auto", "percent", "band"):
            raise InputError(f"must be 'auto', 'percent' or 'band', got {units!r}", key="units")
        ok = [c for c in self if c.status == "ok"]
        if not ok:
            raise InputError("no priced quotes to plot")
        if units == "auto":
            units = "percent" if all(c.price != 0 for c in ok) else "band"
        from fairpath.plots import new_axes

        fig, ax = new_axes(ax, figsize=(10, 1.8 + 0.45 * len(ok)))
        for i, c in enumerate(ok):
            if units == "percent":
                scale = abs(c.price) / 100.0
            else:
                scale = max((c.high - c.low) / 2.0, 1e-300)

            def x(v, c=c, scale=scale):
                return (v - c.price) / scale
            ax.barh(i, x(c.high) - x(c.low), left=x(c.low), height=0.5, color="#d9d9d9",
                    zorder=1)
            ax.plot([0.0, 0.0], [i - 0.3, i + 0.3], color="#444", linewidth=2, zorder=2)
            ax.scatter([x(c.quote)], [i], s=50, color=COLOURS[c.verdict], zorder=3)
        ax.set_yticks(range(len(ok)), [c.product if len(c.product) <= 40 else
                                        "..." + c.product[-37:] for c in ok])
        ax.invert_yaxis()
        ax.set_xlabel("distance from the fair value (% of the fair value)" if units == "percent"
                      else "distance from the fair value (half-widths of the band)")
        skipped = len(self) - len(ok)
        ax.set_title("Quotes against their bands"
                     + (f" ({skipped} row(s) with errors not shown)" if skipped else ""))
        models = ", every model" if any(c.models for c in ok) else ""
        handles = [Patch(color="#d9d9d9", label=f"band (vol +- band{models}, +- 3 stderr)"),
                   Line2D([], [], color="#444", linewidth=2, label="fair value")]
        handles += [Line2D([], [], marker="o", linestyle="", color=col, label=f"quote: {v}")
                    for v, col in COLOURS.items()]
        ax.legend(handles=handles, fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                  borderaxespad=0.0)
        fig.tight_layout()
        return fig


# ---------------------------------------------------------------------------------------------
# Report
# ---------------------------------------------------------------------------------------------
def _svg_chart(checks: list[QuoteCheck]) -> str:
    ok = [c for c in checks if c.status == "ok"]
    if not ok:
        return "<p>No priced quotes to chart.</p>"
    row_h, width, left = 34, 760, 260
    models = any(c.model_low is not None for c in ok)
    height = row_h * len(ok) + (56 if models else 40)
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
             'role="img" aria-label="quotes against their fair-value bands" '
             'font-family="sans-serif" font-size="12">']
    for i, c in enumerate(ok):
        y = 20 + i * row_h
        span = max(c.high - c.low, 1e-12)
        lo = min(c.low, c.quote) - 0.25 * span
        hi = max(c.high, c.quote) + 0.25 * span

        def x(v, lo=lo, hi=hi):
            return left + (v - lo) / (hi - lo) * (width - left - 20)
        colour = COLOURS[c.verdict]
        parts.append(f'<text x="4" y="{y + 15}">{html.escape(c.product[:38])}</text>')
        parts.append(f'<rect x="{x(c.low):.1f}" y="{y + 4}" width="{x(c.high) - x(c.low):.1f}" '
                     f'height="16" fill="#d9d9d9"/>')
        if c.model_low is not None:  # the parts under the band: vol move, then models
            for lo_, hi_, dy, dash in ((c.vol_low, c.vol_high, 24, ""),
                                       (c.model_low, c.model_high, 28, ' stroke-dasharray="4 2"')):
                parts.append(f'<line x1="{x(lo_):.1f}" x2="{x(hi_):.1f}" y1="{y + dy}" '
                             f'y2="{y + dy}" stroke="#555" stroke-width="2"{dash}/>')
        parts.append(f'<line x1="{x(c.price):.1f}" x2="{x(c.price):.1f}" y1="{y + 2}" '
                     f'y2="{y + 22}" stroke="#444" stroke-width="2"/>')
        parts.append(f'<circle cx="{x(c.quote):.1f}" cy="{y + 12}" r="6" fill="{colour}"/>')
        parts.append(f'<text x="{width - 16}" y="{y + 15}" text-anchor="end" '
                     f'fill="{colour}">{c.verdict}</text>')
    if models:
        parts.append(f'<text x="{left}" y="{height - 22}">under the grey band: the vol band '
                     '(solid) and the model band (dashed)</text>')
    parts.append(f'<text x="{left}" y="{height - 6}">grey: band (vol +- band'
                 + (", every model" if models else "") + ', +- 3 stderr); '
                 'black line: fair value; dot: quote</text></svg>')
    return "".join(parts)


def _pct(v: float) -> str:
    return f"{100.0 * v:.4g}%"


def _vols_text(curve: VolCurve) -> str:
    """A vol term structure with its tenors, e.g. ``0.5y 28%, 1y 30%``; one vol when flat."""
    if curve.is_flat:
        return f"{_pct(curve.vols[0])} (flat)"
    return ", ".join(f"{round(t, 2):g}y {_pct(v)}"
                     for t, v in zip(curve.times, curve.vols, strict=True))


def _correlation_html(market: Market) -> str:
    corr = market.correlation
    if corr is None:
        return "<p>No correlation matrix (the market file has none).</p>"
    names = [html.escape(n) for n in corr.assets]
    head = "<tr><th></th>" + "".join(f"<th>{n}</th>" for n in names) + "</tr>"
    rows = "".join(f"<tr><th>{n}</th>" + "".join(f"<td>{v:.4g}</td>" for v in row) + "</tr>"
                   for n, row in zip(names, corr.matrix, strict=True))
    return f"<h3>Correlation</h3><table>{head}{rows}</table>"


def check_report_path(path: str | Path) -> None:
    """Refuse, before any work, a report path that cannot be written (InputError, exit 2)."""
    target = Path(path)
    folder = target.parent
    if target.is_dir():
        raise InputError("cannot write the report: this is a directory", source=str(path))
    if not folder.exists():
        raise InputError(f"cannot write the report: the folder {folder} does not exist",
                         source=str(path))
    if not folder.is_dir():
        raise InputError(f"cannot write the report: {folder} is not a folder",
                         source=str(path))
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"cannot write the report: no permission to write in {folder}",
                         source=str(path))


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def write_report(path: str | Path, checks: list[QuoteCheck], market: Market, settings: dict
                 ) -> None:
    """One self-contained HTML file, written whole or not at all (mode 0666 less the umask).

    ``settings`` are the run settings to print; a :class:`QuoteChecks` adds its own (paths,
    sampler, seed, vol band) under them. A seed of ``None`` is shown as the default seed it
    stands for. A path that cannot be written raises :class:`InputError` naming it, and
    nothing is left behind.
    """
    import numpy
    import scipy

    from fairpath import __version__

    check_report_path(path)
    run_settings = dict(settings)
    for k, v in getattr(checks, "settings", {}).items():
        run_settings.setdefault(k, v)
    if run_settings.get("seed") in (None, "default"):
        run_settings["seed"] = normalize_seed(None)
    assets = "".join(f"<tr><td>{html.escape(a.name)}</td><td>{a.spot:g}"
                     f"{' ' + html.escape(a.currency) if a.currency else ''}</td>"
                     f"<td>{html.escape(_vols_text(a.vol))}</td>"
                     f"<td>{a.dividend_yield:g}</td><td>{html.escape(a.law.describe())}</td>"
                     "</tr>" for a in market.assets)
    def curve_text(c) -> str:
        return (f"{c.zero_rates[0]:.4%} (flat)" if c.is_flat else
                ", ".join(f"{round(t, 2):g}y {r:.4%}"
                          for t, r in zip(c.times, c.zero_rates, strict=True)))

    curve = curve_text(market.discount)
    # the issuers' spreads, the other currencies' curves and their exchange rates
    others = "".join(f"; {html.escape(n)}'s funding spread {html.escape(curve_text(c))}"
                     for n, c in market.issuers)
    others += "".join(f"; {html.escape(c)} zero rates {html.escape(curve_text(k))}"
                      for c, k in market.curves)
    others += "".join(f"; 1 {html.escape(x.code)} = {x.spot:g} {html.escape(market.currency)}"
                      f" (vol {html.escape(_vols_text(x.vol))})" for x in market.fx)
    run = "".join(f"<tr><td>{html.escape(k)}</td><td>{html.escape(str(v))}</td></tr>"
                  for k, v in {**run_settings, "fairpath": __version__,
                               "numpy": numpy.__version__, "scipy": scipy.__version__,
                               "python": platform.python_version()}.items())
    doc = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>fairpath quote check</title>
<style>body{{font-family:sans-serif;margin:2em;color:#222}}table{{border-collapse:collapse;
margin:1em 0}}td,th{{border:1px solid #bbb;padding:3px 8px;text-align:right}}
td:first-child,th:first-child{{text-align:left}}
table.verdicts td:last-child,table.verdicts th:last-child{{text-align:left;min-width:16em;
max-width:28em;font-size:90%}}
.err{{color:#b3261e;text-align:left}}
.caution{{background:#fff4e5;border:1px solid #e0a040;padding:0.8em}}</style></head><body>
<h1>Quote check</h1>
<p class="caution">{html.escape(CAUTION)}</p>
<h2>Verdicts</h2>
{_table_html(checks, " class='verdicts'")}
<h2>Quotes against their bands</h2>
{_svg_chart(checks)}
<h2>Market inputs</h2>
<p>valuation date {market.valuation_date}, currency {html.escape(market.currency)},
day count {market.day_count}; discount zero rates {html.escape(curve)}{others}</p>
<table><tr><th>asset</th><th>spot</th><th>vol (tenor in years, Black vol)</th>
<th>dividend yield</th><th>shock law</th></tr>{assets}</table>
{_correlation_html(market)}
<h2>Run settings</h2><table>{run}</table>
</body></html>
"""
    target = Path(path)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=".report-", suffix=".html")
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(doc)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
        tmp = None
    except OSError as exc:
        raise InputError(f"cannot write the report: {exc.strerror or exc}",
                         source=str(path)) from None
    finally:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)

"""Checking dealer quotes: fair value, a band from the model's own uncertainty, a verdict.

For each quote:

* the fair value and its standard error (the engine's defaults or the run's settings);
* the band: every vol the product uses moved down and up by ``vol_band`` on the same random
  numbers, the lowest and highest of the three prices widened by 3 standard errors (and by the
  row's ``tolerance``, in price units, when the CSV gives one);
* ``difference = quote - price`` and ``z = difference / stderr``;
* the verdict: ``rich`` (quote above the band), ``cheap`` (below it) or ``fair``;
* for a single-asset product, the implied volatility of the quote: the flat vol at which the
  model reproduces the quote, solved on common random numbers with ``brentq`` (empty, with the
  reason, when no vol in [MIN_VOL, MAX_VOL] reaches it);
* for an autocallable, the fair coupon at the quoted price (the solver) beside the note's coupon.

A row whose product file fails to load, or whose quote is not a number, is reported with its
error and the other rows are still priced.
"""

from __future__ import annotations

import csv
import dataclasses
import html
import io
import math
import os
import platform
import tempfile
from dataclasses import dataclass
from pathlib import Path

from scipy.optimize import brentq

from fairpath.errors import FairpathError, InputError
from fairpath.estimate import CAUTION, DEFAULT_PATHS, price
from fairpath.laws import Law
from fairpath.market import Market, VolCurve
from fairpath.products.base import Product
from fairpath.products.loader import load_product

MIN_VOL, MAX_VOL = 1e-4, 3.0
BAND_STDERRS = 3.0


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

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in ("product", "quote", "price", "stderr", "low", "high",
                                           "difference", "z", "verdict", "implied_vol")}
        d.update(implied_vol_note=self.implied_vol_note, coupon=self.coupon,
                 fair_coupon=self.fair_coupon, name=self.name, status=self.status,
                 message=self.message)
        if self.other_law is not None:
            d.update(other_law=self.other_law, other_price=self.other_price,
                     other_stderr=self.other_stderr)
        return d


def _with_vols(market: Market, names, shift: float | None = None, flat: float | None = None
               ) -> Market:
    for n in names:
        a = market.asset(n)
        vol = VolCurve.flat(flat) if flat is not None else a.vol.shifted(shift)
        if min(vol.vols) <= 0:
            raise InputError(f"the vol band would make {n}'s vol non-positive "
                             f"({min(vol.vols):g})", key="--vol-band")
        market = market.with_asset(dataclasses.replace(a, vol=vol))
    return market


def implied_vol(product: Product, market: Market, quote: float, **settings
                ) -> tuple[float | None, str]:
    """Flat vol reproducing ``quote`` on common random numbers, or (None, reason)."""
    names = product.underlyings()
    if len(names) != 1:
        return None, "several assets: no single implied vol"

    def value(v: float) -> float:
        return price(product, _with_vols(market, names, flat=v), **settings).price

    lo, hi = value(MIN_VOL), value(MAX_VOL)
    if (lo - quote) * (hi - quote) > 0:
        bound = min(lo, hi), max(lo, hi)
        where = "below" if quote < bound[0] else "above"
        return None, (f"no vol in [{MIN_VOL:g}, {MAX_VOL:g}] reaches it: the quote is {where} "
                      f"the model's range [{bound[0]:.6g}, {bound[1]:.6g}]"
                      + (" (below intrinsic)" if where == "below" and lo <= hi else ""))
    v = brentq(lambda s: value(s) - quote, MIN_VOL, MAX_VOL, xtol=1e-7, maxiter=100)
    return float(v), ""


def check_quote(product: Product, market: Market, quote: float, *, vol_band: float = 0.01,
                tolerance: float = 0.0, paths: int = DEFAULT_PATHS, sampler: str = "sobol",
                seed: int | None = None, implied: bool = True, label: str = "",
                source: str | None = None, compare_law: Law | None = None) -> QuoteCheck:
    """Check one quote (see the module notes).

    ``compare_law``: also price the product with this shock law for every asset it uses (same
    random numbers), to show how much of the value is the law of returns.

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
    settings = dict(paths=paths, sampler=sampler, seed=seed, source=source)
    names = product.underlyings()
    base = price(product, market, **settings)
    prices = [base.price]
    if vol_band > 0:
        for shift in (-vol_band, vol_band):
            prices.append(price(product, _with_vols(market, names, shift=shift),
                                **settings).price)
    se = base.stderr
    low = min(prices) - BAND_STDERRS * se - tolerance
    high = max(prices) + BAND_STDERRS * se + tolerance
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
    if compare_law is not None:
        alt = price(product, market.with_law(compare_law, names), **settings)
        other = dict(other_law=compare_law.describe(), other_price=alt.price,
                     other_stderr=alt.stderr)
    return QuoteCheck(label or product.label(), quote, base.price, se, low, high, diff,
                      z if math.isfinite(z) else None, verdict, iv, note, coupon, fair,
                      product.label(), **other)


def read_quotes(path: str | Path) -> list[dict]:
    """Rows of a quotes CSV (columns ``product,quote`` and an optional ``tolerance``)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read: {exc}", source=str(path)) from None
    try:
        reader = csv.DictReader(io.StringIO(text))
        rows = list(reader)
    except csv.Error as exc:
        raise InputError(f"not valid CSV: {exc}", source=str(path)) from None
    cols = reader.fieldnames or []
    missing = [c for c in ("product", "quote") if c not in cols]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}; the file has "
                         f"{', '.join(cols) or 'no header'}", source=str(path))
    return rows


def check_quotes(quotes_csv: str | Path, market: Market, *, vol_band: float = 0.01,
                 **settings) -> list[QuoteCheck]:
    """Check every row of a quotes CSV; product paths are relative to the CSV."""
    rows = read_quotes(quotes_csv)
    base = Path(quotes_csv).parent
    out = []
    for i, row in enumerate(rows, start=2):
        prod = (row.get("product") or "").strip()
        try:
            try:
                quote = float(row.get("quote", ""))
            except (TypeError, ValueError):
                raise InputError(f"quote is not a number: {row.get('quote')!r}",
                                 source=f"{quotes_csv} line {i}") from None
            if not math.isfinite(quote):
                raise InputError(f"quote must be finite, got {quote}",
                                 source=f"{quotes_csv} line {i}")
            tol_text = (row.get("tolerance") or "").strip()
            tol = float(tol_text) if tol_text else 0.0
            path = base / prod
            product = load_product(path)
            out.append(check_quote(product, market, quote, vol_band=vol_band, tolerance=tol,
                                   label=prod, source=str(path), **settings))
        except (InputError, FairpathError, ValueError) as exc:
            q = row.get("quote")
            try:
                qv = float(q)
            except (TypeError, ValueError):
                qv = None
            out.append(QuoteCheck(prod, qv, status="error", message=str(exc)))
    return out


# ---------------------------------------------------------------------------------------------
# Report
# ---------------------------------------------------------------------------------------------
def _svg_chart(checks: list[QuoteCheck]) -> str:
    ok = [c for c in checks if c.status == "ok"]
    if not ok:
        return "<p>No priced quotes to chart.</p>"
    row_h, width, left = 34, 760, 260
    height = row_h * len(ok) + 40
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
        colour = {"fair": "#2f7d32", "rich": "#b3261e", "cheap": "#1f5fa8"}[c.verdict]
        parts.append(f'<text x="4" y="{y + 15}">{html.escape(c.product[:38])}</text>')
        parts.append(f'<rect x="{x(c.low):.1f}" y="{y + 4}" width="{x(c.high) - x(c.low):.1f}" '
                     f'height="16" fill="#d9d9d9"/>')
        parts.append(f'<line x1="{x(c.price):.1f}" x2="{x(c.price):.1f}" y1="{y + 2}" '
                     f'y2="{y + 22}" stroke="#444" stroke-width="2"/>')
        parts.append(f'<circle cx="{x(c.quote):.1f}" cy="{y + 12}" r="6" fill="{colour}"/>')
        parts.append(f'<text x="{width - 16}" y="{y + 15}" text-anchor="end" '
                     f'fill="{colour}">{c.verdict}</text>')
    parts.append(f'<text x="{left}" y="{height - 6}">grey: band (vol +- band, +- 3 stderr); '
                 'black line: fair value; dot: quote</text></svg>')
    return "".join(parts)


def write_report(path: str | Path, checks: list[QuoteCheck], market: Market, settings: dict
                 ) -> None:
    """One self-contained HTML file, written whole or not at all."""
    import numpy
    import scipy

    from fairpath import __version__

    def fmt(v, spec=".6g"):
        return "" if v is None else format(v, spec)

    alt = next((c.other_law for c in checks if c.other_law is not None), None)
    head = ("product", "quote", "price", "stderr", "low", "high", "difference", "z",
            "verdict", "implied vol", "coupon / fair coupon",
            *((f"price under the {html.escape(alt)} law",) if alt else ()), "note")
    body = []
    for c in checks:
        if c.status != "ok":
            body.append(f"<tr><td>{html.escape(c.product)}</td><td>{fmt(c.quote)}</td>"
                        f"<td colspan='{len(head) - 2}' class='err'>error: "
                        f"{html.escape(c.message)}</td></tr>")
            continue
        cpn = "" if c.coupon is None else f"{c.coupon:.4%} / {fmt(c.fair_coupon, '.4%')}"
        law_col = (f"{fmt(c.other_price)} ({fmt(c.other_stderr, '.3g')})",) if alt else ()
        body.append("<tr>" + "".join(f"<td>{html.escape(str(v))}</td>" for v in (
            c.product, fmt(c.quote), fmt(c.price), fmt(c.stderr, ".3g"), fmt(c.low),
            fmt(c.high), fmt(c.difference, ".4g"), fmt(c.z, ".2f"), c.verdict,
            fmt(c.implied_vol, ".4%"), cpn, *law_col, c.implied_vol_note)) + "</tr>")
    assets = "".join(f"<tr><td>{html.escape(a.name)}</td><td>{a.spot:g}</td>"
                     f"<td>{', '.join(f'{v:g}' for v in a.vol.vols)}</td>"
                     f"<td>{a.dividend_yield:g}</td><td>{html.escape(a.law.describe())}</td>"
                     "</tr>" for a in market.assets)
    curve = ", ".join(f"{t:.3g}y: {r:.4%}" for t, r in zip(market.discount.times,
                                                          market.discount.zero_rates,
                                                          strict=True))
    run = "".join(f"<tr><td>{html.escape(k)}</td><td>{html.escape(str(v))}</td></tr>"
                  for k, v in {**settings, "fairpath": __version__, "numpy": numpy.__version__,
                               "scipy": scipy.__version__,
                               "python": platform.python_version()}.items())
    doc = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>fairpath quote check</title>
<style>body{{font-family:sans-serif;margin:2em;color:#222}}table{{border-collapse:collapse;
margin:1em 0}}td,th{{border:1px solid #bbb;padding:3px 8px;text-align:right}}
td:first-child,th:first-child{{text-align:left}}
td:last-child{{text-align:left;max-width:24em;font-size:90%}}.err{{color:#b3261e;text-align:left}}
.caution{{background:#fff4e5;border:1px solid #e0a040;padding:0.8em}}</style></head><body>
<h1>Quote check</h1>
<p class="caution">{html.escape(CAUTION)}</p>
<h2>Verdicts</h2>
<table><tr>{''.join(f'<th>{h}</th>' for h in head)}</tr>{''.join(body)}</table>
<h2>Quotes against their bands</h2>
{_svg_chart(checks)}
<h2>Market inputs</h2>
<p>valuation date {market.valuation_date}, currency {html.escape(market.currency)},
day count {market.day_count}; discount zero rates {html.escape(curve)}</p>
<table><tr><th>asset</th><th>spot</th><th>vol(s)</th><th>dividend yield</th>
<th>shock law</th></tr>{assets}</table>
<h2>Run settings</h2><table>{run}</table>
</body></html>
"""
    target = Path(path)
    fd, tmp = tempfile.mkstemp(dir=target.parent or Path("."), prefix=".report-", suffix=".html")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(doc)
        os.replace(tmp, target)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


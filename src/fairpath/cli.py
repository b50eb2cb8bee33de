"""Command line: ``fairpath price | greeks | scenarios | check | solve | book | validate |
calibrate | demo``.

Exit status: 0 on success, 2 on bad input (one line on stderr naming the file, the key and the
problem), 1 on an internal error.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import warnings
from importlib import resources
from pathlib import Path

from fairpath import estimate
from fairpath.errors import FairpathError, InputError
from fairpath.market import load_market
from fairpath.models import model_of
from fairpath.products.loader import load_product
from fairpath.registry import known_models
from fairpath.sampling import DEFAULT_REPLICATES


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2
        self.exit(2, f"{self.prog}: error: {message}\n")


def _arg(kind, ok, what: str):
    """An argparse type: parse with ``kind``, accept when ``ok(value)``, else say ``what``."""
    def parse(text: str):
        try:
            v = kind(text)
        except ValueError:
            v = None
        if v is None or not ok(v):
            raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}")
        return v
    return parse


_positive_int = _arg(int, lambda v: v >= 1, "a positive integer")
_seed = _arg(int, lambda v: v >= 0, "a non-negative integer")
_positive_float = _arg(float, lambda v: 0 < v < float("inf"), "a positive number")
_nonnegative_float = _arg(float, lambda v: 0 <= v < float("inf"), "a non-negative number")
_finite_float = _arg(float, lambda v: abs(v) < float("inf"), "a finite number")


def _add_mc_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--paths", type=_positive_int, default=estimate.DEFAULT_PATHS,
                   help="number of paths (default %(default)s)")
    p.add_argument("--sampler", choices=("sobol", "pseudo"), default="sobol",
                   help="scrambled Sobol (randomized QMC) or PCG64 pseudo-random")
    p.add_argument("--seed", type=_seed, default=None, help="seed (a fixed default otherwise)")
    p.add_argument("--replicates", type=_positive_int, default=DEFAULT_REPLICATES,
                   help="independent Sobol scramblings for the standard error "
                        "(default %(default)s)")


def _add_law_options(p: argparse.ArgumentParser, compare: bool = False) -> None:
    from fairpath.laws import LAW_KINDS

    p.add_argument("--law", choices=LAW_KINDS, default=None,
                   help="replace every asset's shock law in the market file (a what-if)")
    if compare:
        p.add_argument("--compare-law", choices=LAW_KINDS, default=None,
                       help="add a column: each product priced under this law too")
    p.add_argument("--dof", type=_finite_float, default=None,
                   help="degrees of freedom of a student-t law (above 2)")
    p.add_argument("--history", default=None,
                   help="CSV of daily closes for an empirical law")
    p.add_argument("--column", default="close",
                   help="column of closes in --history (default %(default)s)")
    p.add_argument("--flat-vol", action="store_true",
                   help="price with each surface's at-the-money term structure instead of "
                        "local volatility (to see how much of a price is the smile)")
    p.add_argument("--steps-per-day", type=_positive_int, default=1,
                   help="under local volatility, log-Euler steps per weekday (default 1)")
    p.add_argument("--daily-closes", action="store_true",
                   help="simulate every weekday close of a daily-watched barrier, even under "
                        "Black where it is read from Brownian bridges between monthly dates")
    p.add_argument("--model", choices=known_models(), default=None,
                   help="replace every asset's model in the market file (a what-if)")


def _law(args, kind: str | None, flag: str):
    from fairpath.laws import law_from_options

    if kind is None:
        return None
    return law_from_options(kind, dof=args.dof, history=args.history, column=args.column,
                            flag=flag)


def _market(args):
    """The market file, with the shock law of ``--law`` when one is given."""
    kinds = {getattr(args, "law", None), getattr(args, "compare_law", None)}
    for flag, value, kind in (("--dof", getattr(args, "dof", None), "student-t"),
                              ("--history", getattr(args, "history", None), "empirical")):
        if value is not None and kind not in kinds:
            raise InputError(f"applies to a {kind} law only: add --law {kind}"
                             + (f" or --compare-law {kind}" if hasattr(args, "compare_law")
                                else ""), key=flag)
    market = load_market(args.market)
    if getattr(args, "flat_vol", False):
        market = market.with_flat_vol()
    law = _law(args, getattr(args, "law", None), "--law")
    market = market if law is None else market.with_law(law)
    kind = getattr(args, "model", None)
    if kind is not None:
        market = market.with_model(kind)
    for n in market.asset_names:  # every asset's model resolved now: bad input before work
        try:
            model_of(market, n)
        except InputError as exc:
            if kind is None:
                raise
            raise InputError(exc.problem, key="--model") from None
    return market


def _law_flag(args, exc: InputError) -> str | None:
    """The command-line flag to blame for a law refused by the engine, when the law came from
    the command line rather than the market file."""
    if not (exc.key or "").endswith(".law"):
        return None
    for kind in (getattr(args, "law", None), getattr(args, "compare_law", None)):
        if kind is not None:
            return "--dof" if kind == "student-t" else "--law"
    return None


def build_parser() -> argparse.ArgumentParser:
    ap = _Parser(prog="fairpath", description="Monte Carlo fair values with error bars for "
                 "options and structured notes.", epilog=estimate.CAUTION)
    sub = ap.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("price", help="price one product file on a market file")
    p.add_argument("product", help="product TOML file")
    p.add_argument("--market", required=True, help="market TOML file")
    _add_mc_options(p)
    p.add_argument("--antithetic", action="store_true", help="pair each draw with its mirror")
    p.add_argument("--no-control", action="store_true", help="switch off control variates")
    p.add_argument("--target-stderr", type=_positive_float, default=None,
                   help="double the paths until the standard error is at or below this")
    p.add_argument("--max-paths", type=_positive_int, default=estimate.DEFAULT_MAX_PATHS,
                   help="cap for --target-stderr (default %(default)s)")
    p.add_argument("--richardson", action="store_true",
                   help="under local volatility, remove the bias of the daily steps to first "
                        "order (twice the steps on the same paths) and report it; about four "
                        "times the time")
    p.add_argument("--dual", action="store_true",
                   help="early exercise: the other bound by duality (Andersen-Broadie, "
                        "nested simulation)")
    _add_law_options(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")

    g = sub.add_parser("greeks", help="delta, gamma, vega, rho, theta with standard errors")
    g.add_argument("product", help="product TOML file")
    g.add_argument("--market", required=True, help="market TOML file")
    _add_mc_options(g)
    g.add_argument("--method", choices=("bump", "pathwise", "lr", "auto"), default="auto",
                   help="bump-and-revalue on common random numbers, pathwise, likelihood "
                        "ratio, or the best available per Greek (default %(default)s)")
    g.add_argument("--buckets", nargs="?", const="tenor", choices=("tenor", "strike"),
                   default=None, help="vega by the market's own vol pillars (tenor, the "
                   "default) or by every quote of a surface (strike)")
    _add_law_options(g)
    g.add_argument("--json", action="store_true", help="print one JSON object")

    sc = sub.add_parser("scenarios", help="value over a grid of spot and vol moves, every cell "
                        "on the same random numbers")
    # a spec may start with a minus sign (--spot -0.3:0.3:0.1): read it as a value, not a
    # flag (argparse before Python 3.13 takes only plain negative numbers for values)
    import re

    sc._negative_number_matcher = re.compile(r"^-\.?\d")
    sc.add_argument("product", help="product TOML file")
    sc.add_argument("--market", required=True, help="market TOML file")
    sc.add_argument("--spot", default="-0.3:0.3:0.1", metavar="A:B:STEP",
                    help="relative moves of every spot together (default %(default)s)")
    sc.add_argument("--vol", default="-0.05:0.05:0.05", metavar="A:B:STEP",
                    help="absolute moves of every vol or whole surface (default %(default)s)")
    sc.add_argument("--plot", default=None, metavar="FILE.png",
                    help="write a heatmap of the value change (base cell marked)")
    _add_mc_options(sc)
    _add_law_options(sc)
    sc.add_argument("--json", action="store_true", help="print one JSON object")

    c = sub.add_parser("check", help="is each dealer quote in a CSV fair, rich or cheap?")
    c.add_argument("quotes", help="CSV with columns product,quote[,tolerance]")
    c.add_argument("--market", required=True, help="market TOML file")
    c.add_argument("--vol-band", type=_nonnegative_float, default=0.01,
                   help="vols moved down and up by this for the band (default %(default)s)")
    c.add_argument("--report", default=None, help="write a self-contained HTML report here")
    _add_mc_options(c)
    _add_law_options(c, compare=True)
    c.add_argument("--models", default=None, metavar="A,B,...",
                   help="also price each quote under each of these models (every asset's "
                        "model replaced, same random numbers) and widen the band to cover "
                        f"each one's price +- 3 stderr; known: {', '.join(known_models())}")
    c.add_argument("--json", action="store_true", help="print a JSON list")

    s = sub.add_parser("solve", help="the value of a product key that makes the price a target")
    s.add_argument("product", help="product TOML file")
    s.add_argument("--market", required=True, help="market TOML file")
    s.add_argument("--for", dest="key", required=True,
                   help="numeric product key to solve for (coupon, strike, barrier, ...)")
    s.add_argument("--target", type=_finite_float, required=True, help="target price")
    _add_mc_options(s)
    _add_law_options(s)
    s.add_argument("--json", action="store_true", help="print one JSON object")

    b = sub.add_parser("book", help="price a book of trades into a CSV, resumably (Dask)")
    b.add_argument("trades", help="CSV with columns trade_id,product[,quantity]")
    b.add_argument("--market", required=True, help="market TOML file")
    b.add_argument("--out", required=True, help="results CSV (rerun with it to resume)")
    where = b.add_mutually_exclusive_group()
    where.add_argument("--workers", type=_positive_int, default=None,
                       help="processes of the local Dask cluster (default: one per core)")
    where.add_argument("--scheduler", default=None,
                       help="address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786")
    b.add_argument("--greeks", action="store_true", help="also compute each trade's Greeks")
    _add_mc_options(b)
    _add_law_options(b)

    v = sub.add_parser("validate", help="Monte Carlo against the closed forms, with z-scores")
    v.add_argument("--json", action="store_true")

    cal = sub.add_parser("calibrate", help="Heston parameters fitted to each asset's "
                         "vol_surface, with the fit per quote")
    cal.add_argument("market", help="market TOML file")
    cal.add_argument("--asset", default=None, help="fit this asset only (default: every asset "
                     "with a vol_surface)")
    cal.add_argument("--write", default=None, metavar="FITTED.toml",
                     help="write the market file with each fitted asset's [assets.NAME.heston] "
                          "block holding the five numbers")
    cal.add_argument("--json", action="store_true", help="print one JSON object")

    d = sub.add_parser("demo", help="price the example payoffs on the demo market")
    d.add_argument("--payoffs", default=None, help="folder of product files")
    d.add_argument("--market", default=None, help="market file")
    _add_mc_options(d)
    d.add_argument("--json", action="store_true")
    return ap


def _warning_line(message, category, filename, lineno, file=None, line=None):
    print(f"fairpath: warning: {message}", file=sys.stderr)


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    warnings.showwarning = _warning_line
    try:
        if args.command == "price":
            return _price(args)
        if args.command == "check":
            return _check(args)
        if args.command == "greeks":
            return _greeks(args)
        if args.command == "scenarios":
            return _scenarios(args)
        if args.command == "solve":
            return _solve(args)
        if args.command == "validate":
            return _validate(args)
        if args.command == "calibrate":
            return _calibrate(args)
        if args.command == "book":
            return _book(args)
        if args.command == "demo":
            return _demo(args)
    except InputError as exc:
        flag = _law_flag(args, exc)
        print(f"fairpath: error: {flag + ': ' + exc.problem if flag else exc}", file=sys.stderr)
        return 2
    except FairpathError as exc:
        print(f"fairpath: internal error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("fairpath: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader went away (e.g. `| head`): nothing more to say
        sys.stderr.close()
        return 0
    except Exception as exc:  # noqa: BLE001 - one line, no traceback, for anything unforeseen
        if os.environ.get("FAIRPATH_DEBUG"):
            raise
        print(f"fairpath: internal error: {type(exc).__name__}: {exc} (set FAIRPATH_DEBUG=1 "
              "for the traceback)", file=sys.stderr)
        return 1
    return 1  # pragma: no cover


def _price(args) -> int:
    market = _market(args)
    product = load_product(args.product)
    res = estimate.price(product, market, paths=args.paths, sampler=args.sampler,
                         seed=args.seed, antithetic=args.antithetic,
                         control=not args.no_control, target_stderr=args.target_stderr,
                         max_paths=args.max_paths, replicates=args.replicates,
                         source=args.product, progress=not args.json and sys.stderr.isatty(),
                         steps_per_day=args.steps_per_day,
                         daily_closes=args.daily_closes, richardson=args.richardson,
                         dual=args.dual)
    return _emit(res, args.json)


def _emit(res, as_json: bool) -> int:
    """Print a result as JSON, or as text followed by the caution."""
    if as_json:
        print(res.to_json())
    else:
        print(res)
        print(f"\n{estimate.CAUTION}")
    return 0


def _check(args) -> int:
    from fairpath.quotes import check_quotes, check_report_path, model_list, write_report
    from fairpath.sampling import normalize_seed

    if args.report:
        check_report_path(args.report)  # refuse an unwritable report before any pricing
    models = model_list(args.models)  # a bad list refused before any work
    market = _market(args)
    other = _law(args, args.compare_law, "--compare-law")
    checks = check_quotes(args.quotes, market, vol_band=args.vol_band, paths=args.paths,
                          sampler=args.sampler, seed=args.seed, compare_law=other,
                          progress=not args.json and sys.stderr.isatty(),
                          steps_per_day=args.steps_per_day,
                          daily_closes=args.daily_closes, models=models or None)
    if args.report:
        write_report(args.report, checks, market,
                     {"quotes": args.quotes, "market": args.market, "paths": args.paths,
                      "sampler": args.sampler, "seed": normalize_seed(args.seed),
                      "vol band": args.vol_band,
                      "shock law": "market file" if args.law is None else args.law,
                      "comparison law": "none" if other is None else other.describe()})
    if args.json:
        print(json.dumps([c.to_dict() for c in checks]))
        return 0
    head = (f"{'product':<34} {'quote':>11} {'price':>11} {'stderr':>9} {'band':>25} "
            f"{'z':>7} {'verdict':<7} {'implied vol':>11}")
    print(head)
    print("-" * len(head))
    for c in checks:
        if c.status != "ok":
            print(f"{c.product[:34]:<34} error: {c.message}")
            continue
        band = f"[{c.low:.4f}, {c.high:.4f}]"
        iv = "" if c.implied_vol is None else f"{c.implied_vol:.2%}"
        z = "" if c.z is None else f"{c.z:.1f}"
        print(f"{c.product[:34]:<34} {c.quote:>11.4f} {c.price:>11.4f} {c.stderr:>9.4f} "
              f"{band:>25} {z:>7} {c.verdict:<7} {iv:>11}")
        if c.implied_vol_note:
            print(f"{'':<34} implied vol: {c.implied_vol_note}")
        if c.fair_coupon is not None:
            print(f"{'':<34} coupon {c.coupon:.4%}, fair coupon at the quote "
                  f"{c.fair_coupon:.4%}")
        if c.funding:
            print(f"{'':<34} {c.funding_text}")
        if c.flat_vol_price is not None:
            print(f"{'':<34} with the at-the-money vols (no smile): {c.flat_vol_price:.4f} "
                  f"({c.flat_vol_price - c.price:+.4f})")
        if c.other_price is not None:
            print(f"{'':<34} under the {c.other_law} law: {c.other_price:.4f} "
                  f"(stderr {c.other_stderr:.4f}, {c.other_price - c.price:+.4f})")
        if c.models:
            print(f"{'':<34} vol band [{c.vol_low:.4f}, {c.vol_high:.4f}]   model band "
                  f"[{c.model_low:.4f}, {c.model_high:.4f}]"
                  + (f"   tolerance {c.tolerance:g}" if c.tolerance else ""))
            for k, p, e in c.models:
                print(f"{'':<34}   under {k:<10} {p:>11.4f} (stderr {e:.4f}, "
                      f"{p - c.price:+.4f})")
    if args.report:
        print(f"\nreport written to {args.report}")
    print(f"\n{estimate.CAUTION}")
    return 0


def _greeks(args) -> int:
    from fairpath.greeks import greeks

    market = _market(args)
    product = load_product(args.product)
    res = greeks(product, market, paths=args.paths, sampler=args.sampler, seed=args.seed,
                 method=args.method, replicates=args.replicates, source=args.product,
                 steps_per_day=args.steps_per_day,
                 daily_closes=args.daily_closes, buckets=args.buckets,
                 progress=not args.json and sys.stderr.isatty())
    return _emit(res, args.json)


def _scenarios(args) -> int:
    from fairpath.scenarios import check_plot_path, scenarios, shift_list, write_plot

    shift_list(args.spot, "--spot")  # refuse a bad grid before anything else
    shift_list(args.vol, "--vol")
    if args.plot:
        check_plot_path(args.plot)  # refuse an unwritable picture before any pricing
    market = _market(args)
    product = load_product(args.product)
    res = scenarios(product, market, spot_shifts=args.spot, vol_shifts=args.vol,
                    paths=args.paths, sampler=args.sampler, seed=args.seed,
                    replicates=args.replicates, steps_per_day=args.steps_per_day,
                    daily_closes=args.daily_closes,
                    source=args.product, progress=not args.json and sys.stderr.isatty())
    if args.plot:
        write_plot(res, args.plot)
    if args.json:
        print(res.to_json())
    else:
        print(res)
        if args.plot:
            print(f"heatmap written to {args.plot}")
    return 0


def _solve(args) -> int:
    from fairpath.solve import solve

    market = _market(args)
    product = load_product(args.product)
    res = solve(product, market, args.key, args.target, paths=args.paths, sampler=args.sampler,
                seed=args.seed, replicates=args.replicates, source=args.product,
                steps_per_day=args.steps_per_day,
                daily_closes=args.daily_closes)
    return _emit(res, args.json)


def _book(args) -> int:
    from fairpath.book import price_book

    market = _market(args)
    summary = price_book(args.trades, market, args.out, workers=args.workers,
                         scheduler=args.scheduler, greeks=args.greeks, paths=args.paths,
                         sampler=args.sampler, seed=args.seed, replicates=args.replicates,
                         progress=sys.stderr.isatty(), steps_per_day=args.steps_per_day,
                         daily_closes=args.daily_closes)
    print(summary)
    print(f"results in {args.out}")
    print(f"\n{estimate.CAUTION}")
    return 0


def _validate(args) -> int:
    from fairpath import validate

    results = validate.run() + validate.greek_results()
    if args.json:
        print(json.dumps([r.to_dict() for r in results]))
    else:
        print(validate.table(results))
    return 0 if all(r.ok for r in results) else 1


def _calibrate(args) -> int:
    from fairpath.calibration import fitted, write_fitted

    market = load_market(args.market)
    if args.asset is not None:
        a = market.asset(args.asset, source=market.source, key="--asset")
        if a.surface is None:
            raise InputError(f"{a.name} has no vol_surface to fit Heston's parameters to",
                             source=market.source, key=f"assets.{a.name}.vol_surface")
        names = [a.name]
    else:
        names = [a.name for a in market.assets if a.surface is not None]
        if not names:
            raise InputError("no asset has a vol_surface to fit Heston's parameters to",
                             source=market.source, key="assets")
    fits = {n: fitted(market, n) for n in names}
    if args.write:
        write_fitted(args.market, args.write, fits, load_market)
    if args.json:
        print(json.dumps({n: f.to_dict() for n, f in fits.items()}))
        return 0
    for i, f in enumerate(fits.values()):
        print(("\n" if i else "") + f.table())
    skipped = [a.name for a in market.assets if a.name not in fits]
    if skipped and args.asset is None:
        print(f"\nnot fitted (no vol_surface): {', '.join(skipped)}")
    if args.write:
        print(f"\nfitted market written to {args.write}")
    return 0


def demo_paths() -> tuple[Path, Path]:
    """The example payoffs folder and the demo market: the checkout's, else the installed copy."""
    root = Path(__file__).resolve().parents[2]
    if (root / "payoffs").is_dir() and (root / "markets" / "demo.toml").is_file():
        return root / "payoffs", root / "markets" / "demo.toml"
    data = Path(str(resources.files("fairpath") / "_demo"))
    return data / "payoffs", data / "markets" / "demo.toml"


def _demo(args) -> int:
    payoffs, market_file = demo_paths()
    if args.payoffs:
        payoffs = Path(args.payoffs)
    if args.market:
        market_file = Path(args.market)
    if not payoffs.is_dir():
        raise InputError("not a folder of product files", source=str(payoffs))
    market = load_market(market_file)
    files = sorted(payoffs.glob("*.toml"))
    if not files:
        raise InputError("no product files (*.toml) in this folder", source=str(payoffs))
    rows = []
    todo = files
    if not args.json and sys.stderr.isatty():  # a progress bar on a terminal, as for price
        from tqdm.auto import tqdm

        todo = tqdm(files, desc="pricing the payoffs", unit="product", leave=False)
    for f in todo:
        row = {"file": f.name}
        try:
            product = load_product(f)
            res = estimate.price(product, market, paths=args.paths, sampler=args.sampler,
                                 seed=args.seed, replicates=args.replicates, source=str(f))
            ref = product.reference(market)
            row.update(name=product.label(), kind=product.kind, price=res.price,
                       stderr=res.stderr, ci95=list(res.ci95), closed_form=ref,
                       seconds=res.seconds, status="ok")
        except InputError as exc:
            row.update(status="error", message=str(exc))
        rows.append(row)
    if args.json:
        print(json.dumps({"market": str(market_file), "currency": market.currency,
                          "valuation_date": market.valuation_date.isoformat(),
                          "results": rows}))
        return 0 if all(r["status"] == "ok" for r in rows) else 2
    print(f"Demo market {market_file.name}: valuation {market.valuation_date}, "
          f"{market.currency}; {args.paths:,} {args.sampler} paths per product\n")
    head = (f"{'product':<40} {'kind':<12} {'price':>12} {'stderr':>10} "
            f"{'95% interval':>25} {'closed form':>12} {'sec':>6}")
    print(head)
    print("-" * len(head))
    for r in rows:
        if r["status"] != "ok":
            print(f"{r['file']:<40} error: {r['message']}")
            continue
        cf = "" if r["closed_form"] is None else f"{r['closed_form']:.4f}"
        ci = f"[{r['ci95'][0]:.4f}, {r['ci95'][1]:.4f}]"
        print(f"{r['name'][:40]:<40} {r['kind']:<12} {r['price']:>12.4f} {r['stderr']:>10.4f} "
              f"{ci:>25} {cf:>12} {r['seconds']:>6.2f}")
    print(f"\n{estimate.CAUTION}")
    return 0 if all(r["status"] == "ok" for r in rows) else 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

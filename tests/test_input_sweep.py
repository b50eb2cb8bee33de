"""A sweep of bad input files: every key of the file formats, one case per bad input.

Each case is a file written to ``tmp_path`` (a market, a product, a quotes or a trades CSV, with
any history file it names), the key the error must name and a fragment of the problem. Every
case is checked twice:

* from Python: ``fp.load_market`` / ``fp.load_product`` (or, for what only the market can tell,
  ``fp.price``) raise ``fp.InputError`` (a ``ValueError``) whose one-line message starts with
  ``FILE: KEY: `` and holds the fragment;
* from the command line: ``fairpath price PRODUCT --market MARKET`` (``check`` or ``book`` for
  the CSV files) exits with status 2, prints nothing on stdout and exactly one line on stderr,
  ``fairpath: error: FILE: KEY: ...`` with the fragment, and no traceback.

Names are invented (NORDA, KELPA, VIREO); the numbers are made up.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import pytest

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.cli import main

MARKET = """valuation_date = 2026-12-01
currency = "EUR"
day_count = "ACT/365F"

[discount]
rate = 0.03

[assets.NORDA]
spot = 100.0
vol = 0.25
dividend_yield = 0.02

[assets.KELPA]
spot = 42.5
vol_tenors = ["6M", "1Y", "3Y"]
vols = [0.28, 0.30, 0.31]
dividend_yield = 0.01

[assets.VIREO]
spot = 215.0
vol = 0.38

[correlation]
assets = ["NORDA", "KELPA", "VIREO"]
matrix = [[1.0, 0.6, 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]]
"""
CURVE = 'tenors = ["6M", "1Y", "2Y", "5Y"]\nzero_rates = [0.028, 0.030, 0.031, 0.033]'
MATRIX = "matrix = [[1.0, 0.6, 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]]"
EMPIRICAL = 'law = { kind = "empirical", file = "closes.csv" }'

EUROPEAN = """kind = "european"
name = "NORDA 1Y call 105"
asset = "NORDA"
right = "call"
strike = 105.0
expiry = 2027-12-01
quantity = 2
"""
DIGITAL = """kind = "digital"
asset = "VIREO"
right = "call"
strike = 240.0
expiry = 2028-06-01
payout = 100.0
"""
ASIAN = """kind = "asian"
asset = "NORDA"
right = "call"
average = "arithmetic"
strike = 100.0
fixings = { first = 2026-12-08, every = "1W", count = 52 }
expiry = 2027-11-30
"""
BARRIER = """kind = "barrier"
asset = "NORDA"
right = "call"
strike = 100.0
expiry = 2027-12-01
barrier = 85.0
direction = "down"
effect = "out"
monitoring = "continuous"
rebate = 0.0
"""
BASKET = """kind = "basket"
assets = ["NORDA", "KELPA", "VIREO"]
combine = "average"
weights = [0.5, 0.3, 0.2]
right = "call"
strike_level = 1.05
expiry = 2028-12-01
notional = 1000.0
"""
AUTOCALL = """kind = "autocallable"
assets = ["NORDA", "KELPA"]
notional = 1000.0
observations = { first = 2027-06-01, every = "6M", count = 6 }
autocall_level = 1.00
autocall_step = -0.05
coupon = 0.04
coupon_barrier = 0.70
memory = true
protection_barrier = 0.60
protection_monitoring = "daily"
strike_level = 1.00
"""
PRODUCTS = {"european": EUROPEAN, "digital": DIGITAL, "asian": ASIAN, "barrier": BARRIER,
            "basket": BASKET, "autocallable": AUTOCALL}


def closes(n: int, bad: str | None = None) -> str:
    """A history of ``n`` daily closes (with a date column), ``bad`` replacing the tenth."""
    rows = [f"{2020 + i // 336}-{1 + (i // 28) % 12:02d}-{1 + i % 28:02d},"
            f"{100 * math.exp(0.01 * math.sin(i)):.4f}" for i in range(n)]
    if bad is not None:
        rows[9] = rows[9].split(",")[0] + "," + bad
    return "date,close\n" + "\n".join(rows) + "\n"


def sub(text: str, old: str, new: str) -> str:
    assert old in text, f"the base file no longer holds {old!r}"
    return text.replace(old, new, 1)


@dataclass(frozen=True)
class Case:
    """One bad input: which file is bad, its content, the key named and a problem fragment."""

    id: str
    bad: str                       # "market" | "product" | "quotes" | "trades"
    content: str | bytes
    key: str | None                # None: a problem of the whole file (syntax, encoding)
    fragment: str
    stage: str = "load"            # "load": the loader refuses; "price": the pricer does
    market: str = MARKET           # the market when the product is the bad file
    product: str = EUROPEAN        # the product when the market is the bad file
    files: dict = field(default_factory=dict)   # other files (history, products of a CSV)


def m(id, old, new, key, fragment, **kw) -> Case:
    return Case(id, "market", sub(MARKET, old, new), key, fragment, **kw)


def p(id, kind, old, new, key, fragment, **kw) -> Case:
    return Case(id, "product", sub(PRODUCTS[kind], old, new), key, fragment, **kw)


def with_law(law: str) -> str:
    return sub(MARKET, "dividend_yield = 0.02", f"dividend_yield = 0.02\n{law}")


# ---------------------------------------------------------------------------------------------
# Market files
# ---------------------------------------------------------------------------------------------
MARKET_CASES = [
    # the file itself
    Case("broken TOML carries line and column", "market",
         sub(MARKET, "spot = 100.0", "spot = = 100.0"), None, "(at line 9, column 8)"),
    Case("unclosed array carries line and column", "market",
         sub(MARKET, "vols = [0.28, 0.30, 0.31]", "vols = [0.28, 0.30, 0.31"), None,
         "not valid TOML"),
    Case("duplicate key", "market", sub(MARKET, "spot = 100.0", "spot = 100.0\nspot = 101.0"),
         None, "Cannot overwrite a value (at line 10, column 13)"),
    Case("not UTF-8", "market", MARKET.encode("utf-8").replace(b"EUR", b"\xff\xfeUR"), None,
         "not UTF-8"),
    Case("integer beyond any float", "market", sub(MARKET, "spot = 100.0", "spot = 1" + "0" * 400),
         "assets.NORDA.spot", "must be a finite number"),
    Case("integer of thousands of digits", "market",
         sub(MARKET, "spot = 100.0", "spot = 1" + "0" * 5000), None, "too many digits"),
    Case("nested too deeply", "market", MARKET + "deep = " + "[" * 2000 + "]" * 2000 + "\n",
         None, "nested too deeply"),
    # top level
    m("valuation date missing", "valuation_date = 2026-12-01\n", "", "valuation_date",
      "missing required key"),
    m("valuation date misspelt", "valuation_date = 2026-12-01", "valuation_dat = 2026-12-01",
      "valuation_date", "found 'valuation_dat': a typo?"),
    m("valuation date a date-time", "valuation_date = 2026-12-01",
      "valuation_date = 2026-12-01T10:00:00", "valuation_date", "expected a date"),
    m("valuation date not a date", "valuation_date = 2026-12-01", 'valuation_date = "1 Dec 26"',
      "valuation_date", "expected a date like 2027-12-01"),
    m("currency a number", 'currency = "EUR"', "currency = 978", "currency", "expected a string"),
    m("currency empty", 'currency = "EUR"', 'currency = ""', "currency", "must not be empty"),
    m("day count unknown", 'day_count = "ACT/365F"', 'day_count = "ACT/365"', "day_count",
      "did you mean 'ACT/365F'"),
    m("unknown top-level key", 'currency = "EUR"', 'currency = "EUR"\nvaluation = 2026-12-01',
      "valuation", "known keys here:"),
    # discount
    m("discount missing", "[discount]\nrate = 0.03\n", "", "discount", "missing required key"),
    Case("discount not a table", "market", sub(MARKET, "[discount]\nrate = 0.03\n", "")
         .replace('day_count = "ACT/365F"', 'day_count = "ACT/365F"\ndiscount = 0.03'),
         "discount", "expected a table"),
    m("rate and a curve", "rate = 0.03", "rate = 0.03\n" + CURVE, "discount.rate", "not both"),
    m("neither rate nor curve", "rate = 0.03", "", "discount.rate", "give 'rate' or"),
    m("rate as a percentage", "rate = 0.03", "rate = 3.0", "discount.rate",
      "a percentage? write 0.03"),
    m("rate not a number", "rate = 0.03", 'rate = "3%"', "discount.rate", "expected a number"),
    m("rate nan", "rate = 0.03", "rate = nan", "discount.rate", "finite"),
    m("rate misspelt", "rate = 0.03", "rte = 0.03", "discount.rate", "missing"),
    m("unknown discount key", "rate = 0.03", 'rate = 0.03\ncompounding = "annual"',
      "discount.compounding", "known keys here: rate, tenors, zero_rates"),
    m("zero rates misspelt", "rate = 0.03", CURVE.replace("zero_rates", "zero_rate"),
      "discount.zero_rates", "found 'zero_rate': a typo?"),
    m("tenors not increasing", "rate = 0.03", CURVE.replace('"1Y", "2Y"', '"2Y", "1Y"'),
      "discount.tenors", "strictly increasing"),
    m("tenor not a tenor", "rate = 0.03", CURVE.replace('"5Y"', '"5X"'), "discount.tenors[3]",
      "not a tenor"),
    m("tenor of zero", "rate = 0.03", CURVE.replace('"6M"', '"0M"'), "discount.tenors[0]",
      "not a tenor"),
    m("tenor past the calendar", "rate = 0.03", CURVE.replace('"5Y"', '"9000Y"'),
      "discount.tenors[3]", "past the end of the calendar"),
    m("tenor longer than any calendar", "rate = 0.03", CURVE.replace('"5Y"', '"99999999Y"'),
      "discount.tenors[3]", "longer than any calendar"),
    m("zero rates of another length", "rate = 0.03", CURVE.replace(", 0.033]", "]"),
      "discount.zero_rates", "3 values for 4 tenors"),
    m("zero rate not a number", "rate = 0.03", CURVE.replace("0.031", '"0.031"'),
      "discount.zero_rates[2]", "expected a number"),
    m("zero rate as a percentage", "rate = 0.03", CURVE.replace("0.033", "3.3"),
      "discount.zero_rates[3]", "a percentage?"),
    # assets
    Case("assets missing", "market", MARKET.split("[assets.NORDA]")[0], "assets",
         "missing required key"),
    Case("no assets", "market", MARKET.split("[assets.NORDA]")[0] + "[assets]\n", "assets",
         "the market has no assets"),
    m("asset not a table", "[assets.VIREO]\nspot = 215.0\nvol = 0.38\n",
      "[assets]\nVIREO = 215.0\n", "assets.VIREO", "expected a table"),
    m("blank asset name", "[assets.VIREO]", '[assets." "]', "assets", "must be printable"),
    m("spot missing", "spot = 100.0\n", "", "assets.NORDA.spot", "missing required key"),
    m("spot zero", "spot = 100.0", "spot = 0.0", "assets.NORDA.spot", "must be positive"),
    m("spot negative", "spot = 42.5", "spot = -42.5", "assets.KELPA.spot", "must be positive"),
    m("spot a string", "spot = 42.5", 'spot = "42.5"', "assets.KELPA.spot", "expected a number"),
    m("spot a boolean", "spot = 42.5", "spot = true", "assets.KELPA.spot", "a boolean"),
    m("spot infinite", "spot = 215.0", "spot = inf", "assets.VIREO.spot", "finite"),
    m("spot absurdly large", "spot = 215.0", "spot = 1e300", "assets.VIREO.spot", "beyond 1e+15"),
    m("vol missing", "vol = 0.38\n", "", "assets.VIREO.vol", "missing"),
    m("vol negative", "vol = 0.25", "vol = -0.25", "assets.NORDA.vol", "must not be negative"),
    m("vol as a percentage", "vol = 0.25", "vol = 25", "assets.NORDA.vol",
      "a percentage? write 0.25"),
    m("vol and a vol curve", "vol = 0.25", 'vol = 0.25\nvol_tenors = ["1Y"]\nvols = [0.2]',
      "assets.NORDA.vol", "not both"),
    m("vols of another length", "vols = [0.28, 0.30, 0.31]", "vols = [0.28, 0.30]",
      "assets.KELPA.vols", "2 values for 3 tenors"),
    m("vol curve entry negative", "vols = [0.28, 0.30, 0.31]", "vols = [0.28, -0.30, 0.31]",
      "assets.KELPA.vols[1]", "must not be negative"),
    m("total variance decreasing", "vols = [0.28, 0.30, 0.31]", "vols = [0.28, 0.30, 0.15]",
      "assets.KELPA.vols[2]", "total variance"),
    m("vol tenors not a list", 'vol_tenors = ["6M", "1Y", "3Y"]', 'vol_tenors = "6M"',
      "assets.KELPA.vol_tenors", "expected a list"),
    m("dividend yield as a percentage", "dividend_yield = 0.02", "dividend_yield = 2",
      "assets.NORDA.dividend_yield", "a percentage? write 0.02"),
    m("dividend yield misspelt", "dividend_yield = 0.02", "dividend_yeild = 0.02",
      "assets.NORDA.dividend_yeild", "did you mean 'dividend_yield'"),
    m("vol surface beside a vol", "vol = 0.38",
      'vol = 0.38\n[assets.VIREO.vol_surface]\ntenors = ["1Y"]\nstrikes = [0.9, 1.0]\n'
      'vols = [[0.3, 0.3]]', "assets.VIREO.vol_surface", "not both"),
    m("cash dividends worth more than the spot", "vol = 0.38",
      "vol = 0.38\ndividends = [{ ex_date = 2027-03-15, amount = 300.0 }]",
      "assets.VIREO.dividends", "larger than the level"),
    # laws of returns
    Case("law unknown", "market", with_law('law = "gaussian"'), "assets.NORDA.law",
         "unknown law 'gaussian'"),
    Case("law misspelt", "market", with_law('law = "Normal"'), "assets.NORDA.law",
         "did you mean 'normal'"),
    Case("law not a string or table", "market", with_law("law = 4"), "assets.NORDA.law",
         'expected "normal" or a table'),
    Case("student-t without dof", "market", with_law('law = { kind = "student-t" }'),
         "assets.NORDA.law.dof", "missing required key"),
    Case("student-t dof of 2", "market", with_law('law = { kind = "student-t", dof = 2 }'),
         "assets.NORDA.law.dof", "above 2"),
    Case("law unknown key", "market",
         with_law('law = { kind = "student-t", dof = 4, df = 4 }'), "assets.NORDA.law.df",
         "unknown key"),
    Case("history file missing", "market", with_law(EMPIRICAL), "assets.NORDA.law.file",
         "not found"),
    Case("history too short", "market", with_law(EMPIRICAL), "assets.NORDA.law.file",
         "needs at least 250", files={"closes.csv": closes(40)}),
    Case("history with a negative close", "market", with_law(EMPIRICAL),
         "assets.NORDA.law.file", "line 11: close must be a positive price",
         files={"closes.csv": closes(300, "-3.5")}),
    Case("history with a zero close", "market", with_law(EMPIRICAL), "assets.NORDA.law.file",
         "must be a positive price", files={"closes.csv": closes(300, "0")}),
    Case("history with text for a close", "market", with_law(EMPIRICAL),
         "assets.NORDA.law.file", "is not a number", files={"closes.csv": closes(300, "n/a")}),
    Case("history without the column", "market",
         with_law('law = { kind = "empirical", file = "closes.csv", column = "adj_close" }'),
         "assets.NORDA.law.column", "no column 'adj_close'", files={"closes.csv": closes(300)}),
    # correlation
    m("correlation not symmetric", MATRIX, MATRIX.replace("[0.6, 1.0, 0.5]", "[0.5, 1.0, 0.5]"),
      "correlation.matrix", "not symmetric"),
    m("correlation diagonal not 1", MATRIX, MATRIX.replace("0.5, 1.0]]", "0.5, 0.9]]"),
      "correlation.matrix", "diagonal must be 1"),
    m("correlation outside [-1, 1]", MATRIX,
      "matrix = [[1.0, 1.2, 0.4], [1.2, 1.0, 0.5], [0.4, 0.5, 1.0]]", "correlation.matrix",
      "outside [-1, 1]"),
    m("correlation not PSD", MATRIX,
      "matrix = [[1.0, -0.6, -0.6], [-0.6, 1.0, -0.6], [-0.6, -0.6, 1.0]]",
      "correlation.matrix", "not positive semi-definite (smallest eigenvalue -0.2)"),
    m("correlation entry nan", MATRIX, MATRIX.replace("0.4], [0.6", "nan], [0.6"),
      "correlation.matrix[0][2]", "finite"),
    m("correlation entry a string", MATRIX, MATRIX.replace("[1.0, 0.6, 0.4]", '[1.0, "0.6", 0.4]'),
      "correlation.matrix[0][1]", "expected a number"),
    m("correlation wrong shape", MATRIX, "matrix = [[1.0, 0.6], [0.6, 1.0]]",
      "correlation.matrix", "3 x 3"),
    m("correlation row not a list", MATRIX, "matrix = [1.0, 0.6, 0.4]", "correlation.matrix[0]",
      "expected a row"),
    m("correlation unknown asset", 'assets = ["NORDA", "KELPA", "VIREO"]',
      'assets = ["NORDA", "KELPA", "VIRE0"]', "correlation.assets[2]", "did you mean 'VIREO'"),
    m("correlation asset twice", 'assets = ["NORDA", "KELPA", "VIREO"]',
      'assets = ["NORDA", "KELPA", "NORDA"]', "correlation.assets", "listed twice"),
    m("correlation unknown key", MATRIX, MATRIX + '\nmethod = "pearson"', "correlation.method",
      "unknown key"),
]

# ---------------------------------------------------------------------------------------------
# Product files
# ---------------------------------------------------------------------------------------------
NO_CORRELATION = MARKET.split("[correlation]")[0]
PART_CORRELATION = sub(sub(MARKET, 'assets = ["NORDA", "KELPA", "VIREO"]',
                           'assets = ["NORDA", "KELPA"]'),
                       MATRIX, "matrix = [[1.0, 0.6], [0.6, 1.0]]")

PRODUCT_CASES = [
    # every product
    Case("unclosed string", "product", sub(EUROPEAN, 'right = "call"', 'right = "call'), None,
         "not valid TOML: Illegal character '\\n' (at line 4, column 14)"),
    Case("empty file", "product", "", "kind", "missing required key"),
    p("kind unknown", "european", 'kind = "european"', 'kind = "europian"', "kind",
      "did you mean 'european'"),
    p("kind not a string", "european", 'kind = "european"', "kind = 1", "kind",
      "unknown product kind 1"),
    p("unknown key", "european", "quantity = 2", "quantity = 2\nmaturity = 2027-12-01",
      "maturity", "known keys here:"),
    p("key misspelt", "european", "strike = 105.0", "strik = 105.0", "strike",
      "found 'strik': a typo?"),
    p("name not a string", "european", 'name = "NORDA 1Y call 105"', "name = 7", "name",
      "expected a string"),
    p("quantity a boolean", "european", "quantity = 2", "quantity = true", "quantity",
      "expected a number"),
    p("quantity absurdly large", "european", "quantity = 2", "quantity = 1e300", "quantity",
      "beyond 1e+15"),
    p("notional on a single-asset option", "european", "quantity = 2", "notional = 1000.0",
      "notional", "takes 'quantity'"),
    # european and digital
    p("asset missing", "european", 'asset = "NORDA"\n', "", "asset", "missing required key"),
    p("asset not a string", "european", 'asset = "NORDA"', "asset = 1", "asset",
      "expected a string"),
    p("asset not in the market", "european", 'asset = "NORDA"', 'asset = "NORDAA"', "asset",
      "did you mean 'NORDA'", stage="price"),
    p("right unknown", "european", 'right = "call"', 'right = "cal"', "right",
      "did you mean 'call'"),
    p("strike negative", "european", "strike = 105.0", "strike = -105.0", "strike",
      "must not be negative"),
    p("strike a string", "european", "strike = 105.0", 'strike = "105"', "strike",
      "expected a number"),
    p("strike nan", "european", "strike = 105.0", "strike = nan", "strike", "finite"),
    p("strike infinite", "european", "strike = 105.0", "strike = 1e400", "strike", "finite"),
    p("expiry missing", "european", "expiry = 2027-12-01\n", "", "expiry", "missing"),
    p("expiry not a date", "european", "expiry = 2027-12-01", 'expiry = "Dec 2027"', "expiry",
      "expected a date"),
    p("expiry a local time", "european", "expiry = 2027-12-01", "expiry = 17:30:00", "expiry",
      "expected a date"),
    p("expiry before the valuation date", "european", "expiry = 2027-12-01",
      "expiry = 2026-06-01", "expiry", "before the valuation date 2026-12-01", stage="price"),
    p("expiry centuries away", "european", "expiry = 2027-12-01", "expiry = 9999-12-01",
      "expiry", "at most 100 years", stage="price"),
    p("payout nan", "digital", "payout = 100.0", "payout = nan", "payout", "finite"),
    p("payout a string", "digital", "payout = 100.0", 'payout = "100"', "payout",
      "expected a number"),
    # asian
    p("average unknown", "asian", 'average = "arithmetic"', 'average = "arithmetc"', "average",
      "did you mean 'arithmetic'"),
    p("floating strike misspelt", "asian", "strike = 100.0", 'strike = "Floating"', "strike",
      "did you mean 'floating'"),
    p("fixings missing", "asian", 'fixings = { first = 2026-12-08, every = "1W", count = 52 }\n',
      "", "fixings", "missing required key"),
    p("fixings not a schedule", "asian", '{ first = 2026-12-08, every = "1W", count = 52 }', "52",
      "fixings", "a schedule must be a table"),
    p("fixings count zero", "asian", "count = 52", "count = 0", "fixings.count",
      "positive integer"),
    p("fixings count absurd", "asian", "count = 52", "count = 100000000", "fixings.count",
      "at most 100,000"),
    p("fixings count a float", "asian", "count = 52", "count = 52.0", "fixings.count",
      "positive integer"),
    p("fixings bad tenor", "asian", 'every = "1W"', 'every = "1Q"', "fixings.every",
      "not a tenor"),
    p("fixings zero tenor", "asian", 'every = "1W"', 'every = "0W"', "fixings.every",
      "not a tenor"),
    p("fixings key misspelt", "asian", "count = 52", "cont = 52", "fixings",
      "unknown 'cont' (did you mean 'count'?)"),
    p("fixings unknown key", "asian", "count = 52", 'count = 52, roll = "following"', "fixings",
      "unknown schedule key(s) ['roll']"),
    p("fixings past the calendar", "asian", "first = 2026-12-08", "first = 9999-06-08",
      "fixings", "past the end of the calendar"),
    p("fixings roll onto one date", "asian",
      '{ first = 2026-12-08, every = "1W", count = 52 }',
      '{ first = 2026-12-11, every = "1D", count = 3 }', "fixings", "twice"),
    p("fixings dates not increasing", "asian",
      '{ first = 2026-12-08, every = "1W", count = 52 }',
      "{ dates = [2027-03-01, 2027-02-01] }", "fixings", "strictly increasing"),
    p("fixings dates empty", "asian", '{ first = 2026-12-08, every = "1W", count = 52 }',
      "{ dates = [] }", "fixings", "non-empty list"),
    p("fixing date not a date", "asian", '{ first = 2026-12-08, every = "1W", count = 52 }',
      '{ dates = [2027-03-01, "soon"] }', "fixings.dates[1]", "expected a date"),
    p("payment before the last fixing", "asian", "expiry = 2027-11-30", "expiry = 2027-06-01",
      "fixings", "after the payment date"),
    p("past fixing negative", "asian", "expiry = 2027-11-30",
      "expiry = 2027-11-30\npast_fixings = [101.0, -99.0]", "past_fixings[1]", "positive"),
    Case("more past fixings than dates", "product",
         sub(sub(ASIAN, "count = 52", "count = 2"), "expiry = 2027-11-30",
             "expiry = 2027-11-30\npast_fixings = [1.0, 2.0, 3.0]"), "past_fixings",
         "3 levels for 2 fixing dates"),
    p("past fixings missing for a trade under way", "asian", "first = 2026-12-08",
      "first = 2026-11-03", "past_fixings", "past level(s) are needed; got 0", stage="price"),
    p("past fixings for a trade not started", "asian", "expiry = 2027-11-30",
      "expiry = 2027-11-30\npast_fixings = [99.0]", "past_fixings", "got 1", stage="price"),
    # barrier
    p("barrier zero", "barrier", "barrier = 85.0", "barrier = 0.0", "barrier", "positive"),
    p("barrier missing", "barrier", "barrier = 85.0\n", "", "barrier", "missing required key"),
    p("direction unknown", "barrier", 'direction = "down"', 'direction = "dwn"', "direction",
      "did you mean 'down'"),
    p("effect unknown", "barrier", 'effect = "out"', 'effect = "knock-out"', "effect",
      "expected one of out, in"),
    p("monitoring misspelt", "barrier", 'monitoring = "continuous"', 'monitoring = "Daily"',
      "monitoring", "did you mean 'daily'"),
    p("monitoring a number", "barrier", 'monitoring = "continuous"', "monitoring = 1",
      "monitoring", 'expected "continuous", "daily" or a schedule'),
    p("monitoring after expiry", "barrier", 'monitoring = "continuous"',
      "monitoring = { dates = [2027-06-01, 2027-12-15] }", "monitoring", "after the expiry"),
    p("monitoring dates not increasing", "barrier", 'monitoring = "continuous"',
      "monitoring = { dates = [2027-06-01, 2027-03-01] }", "monitoring", "strictly increasing"),
    p("rebate negative", "barrier", "rebate = 0.0", "rebate = -1.0", "rebate",
      "must not be negative"),
    # basket
    p("assets empty", "basket", 'assets = ["NORDA", "KELPA", "VIREO"]', "assets = []", "assets",
      "must not be empty"),
    p("assets not a list", "basket", 'assets = ["NORDA", "KELPA", "VIREO"]', 'assets = "NORDA"',
      "assets", "expected a list"),
    p("asset name a number", "basket", 'assets = ["NORDA", "KELPA", "VIREO"]',
      'assets = ["NORDA", 2]', "assets[1]", "expected an asset name"),
    p("asset listed twice", "basket", 'assets = ["NORDA", "KELPA", "VIREO"]',
      'assets = ["NORDA", "KELPA", "NORDA"]', "assets", "listed twice"),
    p("combine unknown", "basket", 'combine = "average"', 'combine = "worstof"', "combine",
      "did you mean 'worst'"),
    p("weights for a worst-of", "basket", 'combine = "average"', 'combine = "worst"', "weights",
      'combine = "average" only'),
    p("weights of another length", "basket", "[0.5, 0.3, 0.2]", "[0.5, 0.5]", "weights",
      "2 weights for 3 assets"),
    p("weights not summing to 1", "basket", "[0.5, 0.3, 0.2]", "[0.5, 0.3, 0.3]", "weights",
      "must sum to 1"),
    p("weight negative", "basket", "[0.5, 0.3, 0.2]", "[0.9, 0.3, -0.2]", "weights[2]",
      "must not be negative"),
    p("strike level as a percentage", "basket", "strike_level = 1.05", "strike_level = 105",
      "strike_level", "a percentage? write 1.05"),
    Case("initial level of an asset not in the basket", "product",
         sub(sub(BASKET, '"KELPA", "VIREO"]', '"KELPA"]'), "weights = [0.5, 0.3, 0.2]",
             "initial_levels = { NORDA = 100.0, VIREO = 40.0 }"),
         "initial_levels.VIREO", "not one of the basket's assets"),
    Case("initial level under a key with a line break", "product",
         sub(sub(BASKET, '"KELPA", "VIREO"]', '"KELPA"]'), "weights = [0.5, 0.3, 0.2]",
             'initial_levels = { NORDA = 100.0, "KEL\\nPA" = 40.0 }'),
         "initial_levels.'KEL\\nPA'", "did you mean 'KELPA'"),
    p("initial levels incomplete", "basket", "notional = 1000.0",
      "notional = 1000.0\ninitial_levels = { NORDA = 100.0, KELPA = 40.0 }", "initial_levels",
      "missing VIREO"),
    p("initial level negative", "basket", "notional = 1000.0",
      "notional = 1000.0\ninitial_levels = { NORDA = 100.0, KELPA = -40.0, VIREO = 200.0 }",
      "initial_levels.KELPA", "must be positive"),
    p("basket without a correlation block", "basket", "notional", "notional", "assets",
      "need a [correlation] block", stage="price", market=NO_CORRELATION),
    p("asset missing from the correlation block", "basket", "notional", "notional", "assets",
      "'VIREO' is missing from the market's correlation block", stage="price",
      market=PART_CORRELATION),
    # autocallable
    p("observations count zero", "autocallable", "count = 6", "count = 0", "observations.count",
      "positive integer"),
    p("observations bad tenor", "autocallable", 'every = "6M"', 'every = "6Q"',
      "observations.every", "not a tenor"),
    p("autocall level zero", "autocallable", "autocall_level = 1.00", "autocall_level = 0.0",
      "autocall_level", "must be positive"),
    p("step-down below zero", "autocallable", "autocall_step = -0.05", "autocall_step = -0.5",
      "autocall_step", "must stay positive"),
    p("coupon as a percentage", "autocallable", "coupon = 0.04", "coupon = 4", "coupon",
      "a percentage? write 0.04"),
    p("coupon negative", "autocallable", "coupon = 0.04", "coupon = -0.04", "coupon",
      "must not be negative"),
    p("coupon barrier as a percentage", "autocallable", "coupon_barrier = 0.70",
      "coupon_barrier = 70", "coupon_barrier", "write 0.7 for 70%"),
    p("protection barrier negative", "autocallable", "protection_barrier = 0.60",
      "protection_barrier = -0.6", "protection_barrier", "must not be negative"),
    p("protection monitoring unknown", "autocallable", 'protection_monitoring = "daily"',
      'protection_monitoring = "weekly"', "protection_monitoring", "final, daily, continuous"),
    p("memory not a boolean", "autocallable", "memory = true", 'memory = "yes"', "memory",
      "expected true or false"),
    p("coupons owed without memory", "autocallable", "memory = true",
      "memory = false\ncoupons_owed = 1", "coupons_owed", "memory = true"),
    p("coupons owed beyond the schedule", "autocallable", "memory = true",
      "memory = true\ncoupons_owed = 7", "coupons_owed", "on a note of 6 observation(s)"),
    p("knocked in on a final barrier", "autocallable", 'protection_monitoring = "daily"',
      'protection_monitoring = "final"\nknocked_in = true', "knocked_in", "maturity only"),
    p("note's initial levels incomplete", "autocallable", "strike_level = 1.00",
      "strike_level = 1.00\ninitial_levels = { NORDA = 104.0 }", "initial_levels",
      "missing KELPA"),
    p("observations past without initial levels", "autocallable", "first = 2027-06-01",
      "first = 2026-09-01", "initial_levels", "give initial_levels", stage="price"),
    p("every observation past", "autocallable", "first = 2027-06-01, every = \"6M\", count = 6",
      "first = 2025-06-01, every = \"6M\", count = 2", "observations", "the note matured",
      stage="price"),
    p("coupons owed beyond the past observations", "autocallable", "memory = true",
      "memory = true\ncoupons_owed = 2", "coupons_owed", "only 0 observation(s) are past",
      stage="price"),
]

# ---------------------------------------------------------------------------------------------
# Quotes and trades CSV files (file-level problems stop the command; row problems are rows)
# ---------------------------------------------------------------------------------------------
CSV_CASES = [
    Case("quotes without a quote column", "quotes", "product,price\ncall.toml,8.0\n", None,
         "missing column(s) quote"),
    Case("quotes empty", "quotes", "", None, "is empty"),
    Case("quotes field beyond the CSV limit", "quotes",
         "product,quote\n" + "x" * 200_000 + ",1\n", None, "not valid CSV"),
    Case("quotes not UTF-8", "quotes", b"product,quote\ncall.toml,\xff8.0\n", None,
         "cannot read"),
    Case("trades without a product column", "trades", "trade_id,file\nt1,call.toml\n", None,
         "missing column(s) product"),
    Case("trades id repeated", "trades", "trade_id,product\nt1,call.toml\nt1,call.toml\n", None,
         "trade_id 't1' repeats line 2"),
    Case("trades id empty", "trades", "trade_id,product\n,call.toml\n", None, "trade_id: empty"),
    Case("trades quantity not a number", "trades", "trade_id,product,quantity\nt1,call.toml,ten\n",
         None, "quantity: not a finite number"),
]

CASES = MARKET_CASES + PRODUCT_CASES + CSV_CASES


def _write(path: Path, content: str | bytes) -> Path:
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


def materialize(case: Case, tmp: Path) -> tuple[Path, Path, Path]:
    """Write the case's files; returns (product or CSV path, market path, the bad file)."""
    for name, text in case.files.items():
        _write(tmp / name, text)
    market = _write(tmp / "market.toml", case.content if case.bad == "market" else case.market)
    if case.bad in ("quotes", "trades"):
        _write(tmp / "call.toml", EUROPEAN)
        first = _write(tmp / f"{case.bad}.csv", case.content)
        return first, market, first
    product = _write(tmp / "product.toml",
                     case.content if case.bad == "product" else case.product)
    return product, market, market if case.bad == "market" else product


def assert_message(msg: str, bad: Path, case: Case) -> None:
    assert "\n" not in msg and len(msg.splitlines()) == 1, msg
    head = f"{bad}: {case.key}: " if case.key else f"{bad}"
    if case.bad == "trades" and case.key is None:
        assert msg.startswith(str(bad)), msg  # "FILE" or "FILE line N"
    else:
        assert msg.startswith(head), (head, msg)
    assert case.fragment in msg, (case.fragment, msg)


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_from_python(case: Case, tmp_path):
    first, market_path, bad = materialize(case, tmp_path)
    with pytest.raises(fp.InputError) as ei:
        if case.bad == "market":
            fp.load_market(market_path)
        elif case.bad == "quotes":
            fp.check_quotes(first, fp.load_market(market_path), paths=256, sampler="pseudo")
        elif case.bad == "trades":
            from fairpath.book import read_trades

            read_trades(first)
        elif case.stage == "load":
            fp.load_product(first)
        else:
            product = fp.load_product(first)  # a well-formed file...
            fp.price(product, fp.load_market(market_path), paths=256, sampler="pseudo")
    exc = ei.value
    assert isinstance(exc, ValueError)
    assert_message(str(exc), bad, case)
    if case.key is not None:
        assert exc.key == case.key


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_from_the_command_line(case: Case, tmp_path, capsys):
    first, market_path, bad = materialize(case, tmp_path)
    if case.bad == "quotes":
        argv = ["check", first]
    elif case.bad == "trades":
        argv = ["book", first, "--out", tmp_path / "results.csv", "--workers", "1"]
    else:
        argv = ["price", first]
    argv += ["--market", market_path, "--paths", "256", "--sampler", "pseudo"]
    code, out, err = run(argv, capsys)
    assert_bad_input(code, out, err)
    lines = err.splitlines()
    prefix = "fairpath: error: "
    assert lines[0].startswith(prefix), lines[0]
    assert_message(lines[0][len(prefix):], bad, case)
    assert not (tmp_path / "results.csv").exists()  # nothing half-written


def test_sweep_is_broad():
    assert len(CASES) >= 60
    assert len({c.id for c in CASES}) == len(CASES), "case ids must be unique"


# ---------------------------------------------------------------------------------------------
# The valid files the cases start from, and legal inputs that must not be refused
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("kind", sorted(PRODUCTS))
def test_base_files_are_valid(kind, tmp_path):
    market = fp.load_market(_write(tmp_path / "market.toml", MARKET))
    product = fp.load_product(_write(tmp_path / f"{kind}.toml", PRODUCTS[kind]))
    product.check(market, str(tmp_path / f"{kind}.toml"))


def test_history_base_is_valid(tmp_path):
    _write(tmp_path / "closes.csv", closes(300))
    market = fp.load_market(_write(tmp_path / "market.toml", with_law(EMPIRICAL)))
    assert market.asset("NORDA").law.kind == "empirical"


@pytest.mark.parametrize("barrier, direction, effect", [
    (100.0, "down", "out"),   # exactly at spot: already hit
    (120.0, "down", "in"),    # spot below a down barrier: already knocked in
    (90.0, "up", "out"),      # spot above an up barrier: already knocked out
])
def test_barrier_already_breached_is_priced_not_refused(barrier, direction, effect, tmp_path,
                                                        capsys):
    text = sub(sub(sub(BARRIER, "barrier = 85.0", f"barrier = {barrier}"),
                   'direction = "down"', f'direction = "{direction}"'),
               'effect = "out"', f'effect = "{effect}"')
    product = _write(tmp_path / "barrier.toml", sub(text, "rebate = 0.0", "rebate = 1.5"))
    market = _write(tmp_path / "market.toml", MARKET)
    code = main(["price", str(product), "--market", str(market), "--paths", "256", "--sampler",
                 "pseudo", "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    res = fp.price(fp.load_product(product), fp.load_market(market), paths=256,
                   sampler="pseudo")
    assert any("already knocked" in n for n in res.notes), res.notes


def test_legal_edge_values_load(tmp_path):
    """Legal values near the limits are accepted as written: a negative rate, a zero vol, a
    high (but not percentage-sized) vol, a zero strike, a short quantity, a one-date schedule,
    a correlation of exactly 1, a byte-order mark."""
    market_text = sub(sub(sub(MARKET, "rate = 0.03", "rate = -0.005"), "vol = 0.25", "vol = 0.0"),
                      "vol = 0.38", "vol = 3.0")
    market_text = sub(market_text, MATRIX,
                      "matrix = [[1.0, 1.0, 0.4], [1.0, 1.0, 0.4], [0.4, 0.4, 1.0]]")
    market = fp.load_market(_write(tmp_path / "m.toml", market_text))
    assert market.discount.zero_rates == (-0.005,)
    product = fp.load_product(_write(tmp_path / "p.toml", "\ufeff" + sub(sub(
        EUROPEAN, "strike = 105.0", "strike = 0"), "quantity = 2", "quantity = -3")))
    assert (product.strike, product.quantity) == (0.0, -3.0)
    asian = fp.load_product(_write(tmp_path / "a.toml", sub(ASIAN, "count = 52", "count = 1")))
    assert len(asian.fixings) == 1
    note = fp.load_product(_write(tmp_path / "n.toml",
                                  sub(AUTOCALL, "notional = 1000.0",
                                      "notional = 1000.0\nquantity = 3")))
    assert note.notional == 3000.0  # a quantity multiplies the notional, as for baskets

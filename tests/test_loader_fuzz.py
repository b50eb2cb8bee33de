"""Fuzzing the file loaders: whatever a product or market file holds, loading it (and checking a
product against a valid market) either succeeds or raises one clean, one-line ``InputError``.

Hypothesis writes TOML documents: a valid example of a random kind with keys dropped, replaced by
values of random types (strings, numbers with nan/inf/huge/negative, booleans, dates, date-times,
arrays, inline and nested tables) or added; documents of random keys; and garbage text (random
characters, or a valid document with characters inserted or deleted). Any exception other than
``fairpath.InputError`` fails the test, and so does an ``InputError`` whose message spans lines.
Deterministic (``derandomize=True``), a few hundred examples per test.
"""

from __future__ import annotations

import json
import math
import warnings
from datetime import date, datetime, time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

import fairpath as fp

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "markets" / "demo.toml"
FUZZ = settings(derandomize=True, max_examples=500, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                       HealthCheck.data_too_large])


# ---------------------------------------------------------------------------------------------
# A small TOML writer (the standard library reads TOML but does not write it)
# ---------------------------------------------------------------------------------------------
def _string(s: str) -> str:
    """A TOML basic string: JSON's escapes of control characters are TOML's too."""
    return json.dumps(s, ensure_ascii=False).replace("\x7f", "\\u007f")


def _key(k: str) -> str:
    return k if k and all(c.isalnum() or c in "_-" for c in k) and k.isascii() else _string(k)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, datetime | date | time):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def dumps(doc: dict, sections: bool = True) -> str:
    """Scalars and arrays first, then tables as ``[name]`` sections (or all inline)."""
    lines, tables = [], []
    for k, v in doc.items():
        if sections and isinstance(v, dict):
            tables.append((k, v))
        else:
            lines.append(f"{_key(k)} = {_value(v)}")
    for k, v in tables:
        lines.append(f"\n[{_key(k)}]")
        lines.extend(f"{_key(kk)} = {_value(vv)}" for kk, vv in v.items())
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------------------------------------
# Values
# ---------------------------------------------------------------------------------------------
WORDS = ["call", "put", "NORDA", "KELPA", "VIREO", "floating", "daily", "continuous", "final",
         "worst", "best", "average", "arithmetic", "geometric", "down", "up", "in", "out",
         "6M", "1W", "1D", "3M", "1Y", "0M", "99999Y", "123456789012D", "normal", "student-t",
         "empirical", "ACT/365F", "ACT/360", "EUR", "", " ", "2027-12-01", "nan", "1e400",
         "max(NORDA[0], 0)", "__import__('os')", "european", "formula"]

numbers = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1.0, -1.0, 0.5, 1.05, 0.7, 100.0, 1e-300, 1e300, 1e308, -1e308,
                     5e-324, 70.0, 1000.0, 1e6]),
    st.integers(min_value=-10, max_value=400),
    st.sampled_from([0, 1, 2, 6, 52, -1, 10**6, 10**9, 2**63 - 1, -(2**63), 10**400]),
)
dates_ = st.one_of(
    st.dates(min_value=date(1, 1, 1), max_value=date(9999, 12, 31)),
    st.dates(min_value=date(2025, 1, 1), max_value=date(2031, 12, 31)),
    st.sampled_from([date(2026, 12, 1), date(9999, 12, 31), date(1, 1, 1), date(2026, 11, 30)]),
)
texts = st.text(st.characters(exclude_categories=("Cs",)), max_size=12)
scalars = st.one_of(
    numbers, st.booleans(), st.sampled_from(WORDS), texts, dates_,
    st.datetimes(min_value=datetime(2000, 1, 1), max_value=datetime(2100, 1, 1)),
    st.times(),
)
schedules = st.fixed_dictionaries(
    {"first": st.one_of(dates_, scalars), "every": st.one_of(st.sampled_from(WORDS), scalars),
     "count": st.one_of(numbers, scalars)},
    optional={"dates": st.lists(st.one_of(dates_, scalars), max_size=4), "x": scalars})
values = st.recursive(
    st.one_of(scalars, schedules),
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.one_of(st.sampled_from(
                                WORDS + ["first", "every", "count", "dates", "kind", "dof"]),
                                texts), inner, max_size=4)),
    max_leaves=8)


# ---------------------------------------------------------------------------------------------
# Products
# ---------------------------------------------------------------------------------------------
SCHEDULE = {"first": date(2027, 6, 1), "every": "6M", "count": 4}
VALID = {
    "european": {"kind": "european", "asset": "NORDA", "right": "call", "strike": 105.0,
                 "expiry": date(2027, 12, 1), "quantity": 2.0, "name": "x"},
    "digital": {"kind": "digital", "asset": "VIREO", "right": "put", "strike": 200.0,
                "expiry": date(2027, 12, 1), "payout": 10.0},
    "asian": {"kind": "asian", "asset": "NORDA", "right": "call", "average": "arithmetic",
              "strike": 100.0, "fixings": {"first": date(2026, 11, 2), "every": "1M",
                                           "count": 12},
              "expiry": date(2027, 11, 30), "past_fixings": [99.0]},
    "barrier": {"kind": "barrier", "asset": "NORDA", "right": "call", "strike": 100.0,
                "expiry": date(2027, 12, 1), "barrier": 85.0, "direction": "down",
                "effect": "out", "monitoring": "continuous", "rebate": 1.0},
    "basket": {"kind": "basket", "assets": ["NORDA", "KELPA", "VIREO"], "combine": "average",
               "weights": [0.5, 0.3, 0.2], "right": "put", "strike_level": 1.0,
               "expiry": date(2027, 12, 1), "notional": 1000.0},
    "autocallable": {"kind": "autocallable", "assets": ["NORDA", "KELPA"], "notional": 1000.0,
                     "observations": dict(SCHEDULE), "autocall_level": 1.0,
                     "autocall_step": -0.05, "coupon": 0.04, "coupon_barrier": 0.7,
                     "memory": True, "protection_barrier": 0.6,
                     "protection_monitoring": "daily", "strike_level": 1.0},
    "formula": {"kind": "formula", "assets": ["NORDA"], "dates": dict(SCHEDULE),
                "expression": "max(mean(NORDA) / NORDA[0] - 1, 0) * 1000",
                "pay_date": date(2028, 12, 1)},
}
KINDS = sorted(fp.REGISTRY)
PRODUCT_KEYS = sorted({k for d in VALID.values() for k in d} | {
    "monitoring", "initial_levels", "coupons_owed", "knocked_in", "constants", "past_levels",
    "notional", "quantity"})


@st.composite
def mutated(draw, base: dict, keys: list[str]) -> dict:
    """``base`` with a few keys dropped, replaced by values of any type, or added."""
    doc = dict(base)
    for _ in range(draw(st.integers(0, 3))):
        action = draw(st.sampled_from(["drop", "replace", "replace", "replace", "add"]))
        names = sorted(k for k in doc if k != "kind" or draw(st.integers(0, 9)) == 0)
        if action == "add" or not names:
            doc[draw(st.one_of(st.sampled_from(keys), texts))] = draw(values)
        elif action == "drop":
            del doc[draw(st.sampled_from(names))]
        else:
            k = draw(st.sampled_from(names))
            doc[k] = draw(st.one_of(values, like(doc[k])))
    return doc


def like(v) -> st.SearchStrategy:
    """Values of the same type as ``v`` (to get past the type checks to the range checks)."""
    if isinstance(v, bool):
        return st.booleans()
    if isinstance(v, int | float):
        return numbers
    if isinstance(v, date):
        return dates_
    if isinstance(v, str):
        return st.one_of(st.sampled_from(WORDS), texts)
    if isinstance(v, list):
        return st.lists(st.one_of(*(like(x) for x in v[:1])) if v else values, max_size=5)
    if isinstance(v, dict):
        return st.one_of(schedules, st.dictionaries(st.one_of(st.sampled_from(sorted(v) + WORDS),
                                                              texts),
                                                    st.one_of(numbers, dates_), max_size=4))
    return values


@st.composite
def product_docs(draw) -> str:
    style = draw(st.sampled_from(["mutated", "mutated", "mutated", "random", "garbage",
                                  "broken"]))
    if style == "garbage":
        return draw(st.text(max_size=200))
    kind = draw(st.sampled_from(KINDS))
    base = VALID.get(kind, {"kind": kind})
    if style == "random":
        doc = draw(st.dictionaries(st.sampled_from(PRODUCT_KEYS), values, max_size=8))
        if draw(st.booleans()):
            doc["kind"] = kind
        return dumps(doc, sections=draw(st.booleans()))
    text = dumps(draw(mutated(base, PRODUCT_KEYS)), sections=draw(st.booleans()))
    if style == "broken":  # characters inserted into or deleted from a plausible document
        i = draw(st.integers(0, len(text)))
        j = draw(st.integers(i, min(len(text), i + 3)))
        text = text[:i] + draw(st.text(max_size=3)) + text[j:]
    return text


@pytest.fixture(scope="module")
def workdir(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


@pytest.fixture(scope="module")
def market() -> fp.Market:
    return fp.load_market(DEMO)


def _clean(exc: fp.InputError) -> None:
    msg = str(exc)
    assert msg, "an empty error message"
    assert "\n" not in msg and "\r" not in msg, msg


def test_valid_bases_load(workdir, market):
    """The unmutated documents are valid products (so mutations start from something real)."""
    for kind in KINDS:
        if kind not in VALID:
            continue
        p = workdir / f"valid_{kind}.toml"
        p.write_text(dumps(VALID[kind]), encoding="utf-8")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fp.load_product(p).check(market, str(p))


EURO = 'kind = "european"\nasset = "NORDA"\nright = "call"\nexpiry = 2027-12-01\n'
ASIA = ('kind = "asian"\nasset = "NORDA"\nright = "call"\nstrike = 100.0\n'
        'expiry = 2027-11-30\n')


@FUZZ
@given(text=product_docs())
# inputs that once escaped as other exceptions (OverflowError, ValueError, RecursionError) or
# as messages over several lines
@example(text=EURO + "strike = 1" + "0" * 400 + "\n")
@example(text=EURO + "strike = 1" + "0" * 5000 + "\n")
@example(text=EURO + "strike = 1.0\nx = " + "[" * 3000 + "]" * 3000 + "\n")
@example(text=EURO + 'strike = 1.0\n"a\\nb" = 1\n')
@example(text=EURO.replace("2027-12-01", "9999-12-31") + "strike = 1.0\n")
@example(text=ASIA + 'fixings = { first = 2026-12-08, every = "99999Y", count = 2 }\n')
@example(text=ASIA + 'fixings = { first = 2026-12-08, every = "9999999999999D", count = 2 }\n')
@example(text=ASIA + 'fixings = { first = 9999-12-20, every = "1W", count = 3 }\n')
@example(text=ASIA + 'fixings = { first = 2026-12-08, every = "1W", count = 1000000000 }\n')
@example(text=ASIA + 'fixings = { dates = [9999-12-31] }\n')
@example(text='kind = "basket"\nassets = ["NORDA", "KELPA"]\ncombine = "worst"\nright = "put"\n'
         'strike_level = 1.0\nexpiry = 2027-12-01\n'
         'initial_levels = { "NOR\\nDA" = 100.0, KELPA = 40.0 }\n')
def test_product_loader_fuzz(text, workdir, market):
    p = workdir / "product.toml"
    p.write_text(text, encoding="utf-8", errors="surrogatepass")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            product = fp.load_product(p)
            product.check(market, str(p))
        except fp.InputError as exc:
            _clean(exc)
            return
    assert product.kind in fp.REGISTRY
    assert isinstance(product, fp.Product)
    assert all(isinstance(d, date) for d in product.observation_dates())
    assert set(product.underlyings()) <= set(market.asset_names)


# ---------------------------------------------------------------------------------------------
# Markets
# ---------------------------------------------------------------------------------------------
VALID_MARKET = {
    "valuation_date": date(2026, 12, 1), "currency": "EUR", "day_count": "ACT/365F",
    "discount": {"tenors": ["6M", "1Y", "2Y", "5Y"], "zero_rates": [0.028, 0.03, 0.031, 0.033]},
    "assets": {
        "NORDA": {"spot": 100.0, "vol": 0.25, "dividend_yield": 0.02},
        "KELPA": {"spot": 42.5, "vol_tenors": ["6M", "1Y", "3Y"], "vols": [0.28, 0.30, 0.31],
                  "law": {"kind": "student-t", "dof": 5}},
        "VIREO": {"spot": 215.0, "vol": 0.38,
                  "law": {"kind": "empirical", "file": "history.csv", "column": "close"}},
    },
    "correlation": {"assets": ["NORDA", "KELPA", "VIREO"],
                    "matrix": [[1.0, 0.6, 0.4], [0.6, 1.0, 0.5], [0.4, 0.5, 1.0]]},
}
MARKET_KEYS = ["valuation_date", "currency", "day_count", "discount", "assets", "correlation",
               "rate", "tenors", "zero_rates", "spot", "vol", "vol_tenors", "vols",
               "dividend_yield", "law", "matrix", "kind", "dof", "file", "column"]
HISTORIES = {
    "good": "date,close\n" + "".join(f"2025-{1 + i // 28:02d}-{1 + i % 28:02d},"
                                     f"{100 * math.exp(0.01 * math.sin(i)):.4f}\n"
                                     for i in range(300)),
    "short": "close\n100\n101\n",
    "negative": "close\n" + "100\n" * 260 + "-1\n",
    "empty": "",
    "flat": "close\n" + "100\n" * 300,
    "garbage": "date,close\nx,y\n\0\n",
}


@st.composite
def market_docs(draw) -> str:
    style = draw(st.sampled_from(["mutated", "mutated", "mutated", "asset", "random",
                                  "garbage", "broken"]))
    if style == "garbage":
        return draw(st.text(max_size=200))
    if style == "random":
        doc = draw(st.dictionaries(st.sampled_from(MARKET_KEYS), values, max_size=8))
        return dumps(doc, sections=draw(st.booleans()))
    doc = draw(mutated(VALID_MARKET, MARKET_KEYS))
    for part in ("discount", "correlation"):
        if isinstance(doc.get(part), dict) and draw(st.booleans()):
            doc[part] = draw(mutated(doc[part], MARKET_KEYS))
    if style == "asset" and isinstance(doc.get("assets"), dict):
        assets = dict(doc["assets"])
        name = draw(st.sampled_from(sorted(assets) + ["", "X Y"]))
        base = assets.get(name)
        assets[name] = draw(mutated(base, MARKET_KEYS)) if isinstance(base, dict) else \
            draw(values)
        doc["assets"] = assets
    text = dumps(doc, sections=draw(st.booleans()))
    if style == "broken":
        i = draw(st.integers(0, len(text)))
        j = draw(st.integers(i, min(len(text), i + 3)))
        text = text[:i] + draw(st.text(max_size=3)) + text[j:]
    return text


def test_valid_market_loads(workdir):
    (workdir / "history.csv").write_text(HISTORIES["good"], encoding="utf-8")
    p = workdir / "valid_market.toml"
    p.write_text(dumps(VALID_MARKET), encoding="utf-8")
    m = fp.load_market(p)
    assert m.asset_names == ("NORDA", "KELPA", "VIREO")


@FUZZ
@given(text=market_docs(), history=st.sampled_from(sorted(HISTORIES)))
@example(text=DEMO.read_text().replace("2026-12-01", "9999-12-01"), history="good")
@example(text=DEMO.read_text().replace('"5Y"', '"999999999999D"'), history="good")
@example(text=DEMO.read_text().replace("spot = 100.0", "spot = 1" + "0" * 400), history="good")
@example(text=DEMO.read_text().replace("vol = 0.38", "vol = 0.38\nlaw = { kind = "
         '"student-t", dof = 1' + "0" * 400 + " }"), history="good")
@example(text=DEMO.read_text().replace("[assets.VIREO]", '[assets."VI\\nREO"]'),
         history="good")
def test_market_loader_fuzz(text, history, workdir):
    (workdir / "history.csv").write_text(HISTORIES[history], encoding="utf-8")
    p = workdir / "market.toml"
    p.write_text(text, encoding="utf-8", errors="surrogatepass")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            m = fp.load_market(p)
        except fp.InputError as exc:
            _clean(exc)
            return
    assert m.assets
    for a in m.assets:
        assert math.isfinite(a.spot) and a.spot > 0
        assert math.isfinite(m.forward(a.name, 1.0))
    if m.correlation is not None:
        m.correlation_matrix(m.correlation.assets)

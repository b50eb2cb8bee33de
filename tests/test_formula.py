"""Formula payoffs: the expression language, its safety, and prices against outside references.

References, named beside each check: Black-Scholes-Merton (fairpath.closed_form, itself checked
against QuantLib in tests/test_closed_form.py) for a call and a digital written as formulas; the
engine's own Asian and basket products for formulas that restate them (same paths, so equal to
rounding); the discrete geometric-average closed form for a geometric average written out.
"""

from __future__ import annotations

import math
import pickle
from datetime import date

import numpy as np
import pytest

import fairpath as fp
from fairpath import closed_form as cf
from fairpath.cli import main
from fairpath.formula import compile_formula

VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
QUARTERS = (date(2027, 3, 1), date(2027, 6, 1), date(2027, 9, 1), date(2027, 12, 1))


def market(rate=0.03, q=0.02, vol=0.25):
    names = ("NORDA", "KELPA")
    assets = (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(vol), q),
              fp.Asset("KELPA", 42.5, fp.VolCurve.flat(0.3), 0.01))
    corr = fp.Correlation(names, ((1.0, 0.6), (0.6, 1.0)))
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(rate), assets, correlation=corr)


def within(res, ref, extra=0.0):
    return abs(res.price - ref) <= 4 * res.stderr + extra


# ---------------------------------------------------------------------------------------------
# The language
# ---------------------------------------------------------------------------------------------
LEVELS = np.array([[[100.0, 104.0, 110.0, 106.0], [40.0, 41.0, 39.0, 44.0]],
                   [[100.0, 90.0, 80.0, 95.0], [40.0, 38.0, 36.0, 41.0]]])


@pytest.mark.parametrize("text,expected", [
    ("NORDA[3]", [106.0, 95.0]),
    ("NORDA[-1] - NORDA[0]", [6.0, -5.0]),
    ("mean(NORDA)", [105.0, 91.25]),
    ("min(NORDA)", [100.0, 80.0]),
    ("max(NORDA / NORDA[0])", [1.1, 1.0]),
    ("min(NORDA[3] / NORDA[0], KELPA[3] / KELPA[0])", [1.06, 0.95]),
    ("max(mean(NORDA) / NORDA[0] - 1, 0) * 1000", [50.0, 0.0]),
    ("where(NORDA[3] > 100, 10, -10)", [10.0, -10.0]),
    ("where(NORDA[3] > 100 and KELPA[3] > 42, 1, 0)", [1.0, 0.0]),
    ("where(not NORDA[3] > 100 or KELPA[3] >= 41, 1, 0)", [1.0, 1.0]),
    ("NORDA[1] >= 100", [1.0, 0.0]),
    ("abs(NORDA[3] - 100) + sqrt(KELPA[0]) ** 2", [46.0, 45.0]),
    ("exp(log(NORDA[0]))", [100.0, 100.0]),
    ("2 ** 3 + NORDA[0] ** -1 * 100", [9.0, 9.0]),
    ("mean(NORDA * KELPA) / 1000", [4.3045, 3.54875]),
    ("cap * min(1, floor_ + NORDA[3] / NORDA[0])", [100.0, 100.0]),
    ("90 < NORDA[3] < 100", [0.0, 1.0]),
])
def test_expressions_evaluate_as_written(text, expected):
    # reference: the arithmetic done by hand on the two paths above
    f = compile_formula(text, ("NORDA", "KELPA"), 4, {"cap": 100.0, "floor_": 0.5})
    np.testing.assert_allclose(f(LEVELS), expected, rtol=1e-12)


HOSTILE = [
    "__import__('os').system('echo hi')",
    "NORDA.__class__.__mro__",
    "open('/etc/passwd')",
    "eval('1')",
    "exec('x=1')",
    "(lambda: 1)()",
    "[x for x in NORDA]",
    "{x: 1 for x in NORDA}",
    "{1, 2}",
    "[1, 2]",
    "(1, 2)",
    "'text'",
    "b'bytes'",
    "NORDA if True else KELPA",
    "NORDA[1:3]",
    "NORDA[i]",
    "NORDA[0.5]",
    "NORDA[True]",
    "mean(*NORDA)",
    "max(NORDA, key=abs)",
    "globals()",
    "getattr(NORDA, 'x')",
    "__builtins__",
    "_secret",
    "NORDA @ KELPA",
    "NORDA // 2",
    "NORDA % 2",
    "NORDA << 2",
    "~NORDA[0]",
    "9 ** 9 ** 9",
    "2 ** 1000",
    "NORDA[0] ** NORDA[1]",
    "1e400",
    "10 ** 20 * 1e300",
    "(" * 300 + "1" + ")" * 300,
    "-" * 200 + "1",
    "+".join(["NORDA[0]"] * 3000),
    "f'{NORDA}'",
    "await NORDA",
    "yield 1",
    "x := 1",
    "NORDA[0]; import os",
    "import os",
    "min()",
    "where(1, 2)",
    "mean(NORDA[0])",
    "log(NORDA, 2)",
    "NORDA",
    "NORDA > 100",
    "UNKNOWN[0]",
    "NORDA[7]",
    "print(1)",
    "type(NORDA)",
    "None",
    "...",
]


@pytest.mark.parametrize("text", HOSTILE)
def test_hostile_expressions_are_refused_before_anything_runs(text, monkeypatch):
    # nothing may be evaluated: any attempt to run the user's text as Python fails loudly
    import builtins

    real_eval, real_exec = builtins.eval, builtins.exec

    def guarded(real):
        def run(src, *a, **k):
            if isinstance(src, str) and text.strip() in src:
                raise AssertionError(f"user text reached Python: {src!r}")
            return real(src, *a, **k)
        return run

    monkeypatch.setattr(builtins, "eval", guarded(real_eval))
    monkeypatch.setattr(builtins, "exec", guarded(real_exec))
    try:
        f = compile_formula(text, ("NORDA", "KELPA"), 4)
    except fp.InputError as exc:
        assert "\n" not in str(exc)
        assert str(exc).startswith("expression") or "constants" in str(exc)
        return
    # one of the corpus is valid (NORDA > 100 pays 1 or 0): it must give one number per path
    # and run nothing else
    assert text == "NORDA > 100"
    with np.errstate(all="ignore"):
        f(LEVELS)


def test_constant_names_clash_with_assets_or_functions():
    with pytest.raises(fp.InputError, match="both an asset and a constant"):
        compile_formula("NORDA[0]", ("NORDA",), 1, {"NORDA": 1.0})
    with pytest.raises(fp.InputError, match="function name"):
        compile_formula("NORDA[0]", ("NORDA",), 1, {"mean": 1.0})


# ---------------------------------------------------------------------------------------------
# Prices
# ---------------------------------------------------------------------------------------------
def test_call_and_digital_as_formulas_match_black_scholes_merton():
    m = market()
    t = m.time(EXPIRY)
    call = fp.Formula(assets=("NORDA",), dates=(EXPIRY,), pay_date=EXPIRY,
                      expression="max(NORDA[0] - 105, 0)")
    res = fp.price(call, m, paths=65536, seed=3)
    ref = float(cf.bsm_price(100.0, 105.0, t, 0.03, 0.02, 0.25, "call"))  # BSM
    assert within(res, ref), (res.price, res.stderr, ref)
    dig = fp.Formula(assets=("NORDA",), dates=(EXPIRY,), pay_date=EXPIRY,
                     expression="where(NORDA[0] > 105, 10, 0)")
    res = fp.price(dig, m, paths=65536, seed=4)
    ref = 10 * float(cf.digital_price(100.0, 105.0, t, 0.03, 0.02, 0.25, "call"))  # BSM digital
    assert within(res, ref), (res.price, res.stderr, ref)


def test_formula_restating_a_basket_equals_it_path_by_path():
    # the engine's own worst-of call on the same paths (plain payoff, no control variates):
    # the two estimates agree to rounding
    m = market()

    class RawBasket(fp.Basket):
        kind = ""

        def payoff(self, paths):
            return self.raw_payoff(paths)

    b = RawBasket(assets=("NORDA", "KELPA"), combine="worst", right="call", strike_level=0.95,
                  expiry=EXPIRY, notional=100.0)
    f = fp.Formula(assets=("NORDA", "KELPA"), dates=(EXPIRY,), pay_date=EXPIRY,
                   expression="100 * max(min(NORDA[0] / 100, KELPA[0] / 42.5) - 0.95, 0)")
    run = dict(paths=16384, seed=5, control=False)
    assert fp.price(f, m, **run).price == pytest.approx(fp.price(b, m, **run).price, rel=1e-12)


def test_geometric_average_as_formula_matches_its_closed_form():
    # the discrete geometric-average option's closed form (fairpath.closed_form, checked
    # against QuantLib's analytic engine in tests/test_asian.py), through the Asian product
    m = market()
    geo = fp.Asian(asset="NORDA", right="call", strike=100.0, fixings=QUARTERS, expiry=EXPIRY,
                   average="geometric")
    f = fp.Formula(assets=("NORDA",), dates=QUARTERS, pay_date=EXPIRY,
                   expression="max(exp(log(NORDA[0] * NORDA[1] * NORDA[2] * NORDA[3]) / 4) "
                              "- 100, 0)")
    res = fp.price(f, m, paths=65536, seed=6)
    assert within(res, geo.closed_form(m)), (res.price, res.stderr, geo.closed_form(m))


def test_past_levels_of_a_trade_under_way():
    m = market()
    dates = (date(2026, 9, 1), date(2026, 12, 1), date(2027, 3, 1), date(2027, 6, 1))
    f = fp.Formula(assets=("NORDA",), dates=dates, pay_date=date(2027, 6, 1),
                   expression="mean(NORDA)", past_levels=(("NORDA", (96.0,)),))
    res = fp.price(f, m, paths=16384, seed=7, control=False)
    # reference: the mean of the discounted forwards (the martingale property), with the past
    # level and today's spot fixed
    t = [m.time(d) for d in dates[2:]]
    fwd = sum(m.forward("NORDA", x) for x in t)
    ref = (96.0 + 100.0 + fwd) / 4 * float(m.df(date(2027, 6, 1)))
    assert within(res, ref), (res.price, res.stderr, ref)
    with pytest.raises(fp.InputError, match="past level"):
        fp.price(fp.Formula(assets=("NORDA",), dates=dates, pay_date=date(2027, 6, 1),
                            expression="mean(NORDA)"), m, paths=1024)


def test_formula_survives_pickling_for_cluster_workers():
    f = fp.Formula(assets=("NORDA",), dates=QUARTERS, pay_date=EXPIRY,
                   expression="max(mean(NORDA) / NORDA[0] - 1, 0) * 1000")
    g = pickle.loads(pickle.dumps(f))
    assert g == f
    np.testing.assert_allclose(g.compiled(LEVELS[:, :1]), f.compiled(LEVELS[:, :1]))


def test_non_finite_amount_is_an_input_error_naming_the_expression():
    m = market()
    f = fp.Formula(assets=("NORDA",), dates=(EXPIRY,), pay_date=EXPIRY,
                   expression="log(NORDA[0] - 100)")
    with pytest.raises(fp.InputError, match="expression.*not a finite number"):
        fp.price(f, m, paths=4096, seed=1)


def test_formula_greeks_use_the_likelihood_ratio_for_a_jumping_payoff():
    # a digital written as a formula jumps: auto picks the likelihood ratio for delta;
    # reference: the cash-or-nothing delta (Black-Scholes-Merton)
    m = market()
    dig = fp.Formula(assets=("NORDA",), dates=(EXPIRY,), pay_date=EXPIRY,
                     expression="where(NORDA[0] > 105, 10, 0)")
    g = fp.greeks(dig, m, paths=65536, seed=8)
    ref = 10 * cf.digital_greeks(100.0, 105.0, m.time(EXPIRY), 0.03, 0.02, 0.25,
                                 "call")["delta"]
    d = g.delta["NORDA"]
    assert "likelihood" in d.method
    assert abs(d.value - ref) <= 4 * d.stderr, (d, ref)


# ---------------------------------------------------------------------------------------------
# Files and the command line
# ---------------------------------------------------------------------------------------------
FORMULA = """kind = "formula"
assets = ["NORDA"]
dates = {{ first = 2027-03-01, every = "3M", count = 4 }}
expression = "{expr}"
pay_date = 2027-12-01
"""


@pytest.mark.parametrize("expr,needle", [
    ("max(mean(NORDA) / NORDA[0] - 1, 0) * 1000", None),
    ("__import__('os').system('true')", "Call"),
    ("NORDA.real", "Attribute"),
    ("NORDA[9]", "out of range"),
    ("KELPA[0]", "unknown name 'KELPA'"),
])
def test_formula_files_through_the_command_line(tmp_path, capsys, expr, needle):
    (tmp_path / "f.toml").write_text(FORMULA.format(expr=expr))
    code = main(["price", str(tmp_path / "f.toml"), "--market", "markets/demo.toml",
                 "--paths", "4096", "--json"])
    out, err = capsys.readouterr()
    if needle is None:
        assert code == 0 and math.isfinite(__import__("json").loads(out)["price"])
        return
    assert code == 2 and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "f.toml" in err and "expression" in err
    assert needle in err or needle.lower() in err.lower(), err

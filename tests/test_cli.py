"""The command line (fairpath.cli): the ``price --json`` contract, the options, ``validate``,
``demo``, and bad input (exit status 2, one line on stderr naming the file and the key).

Most checks call ``fairpath.cli.main([...])`` in-process; two run the installed console script
end to end. References outside the project: the Black-Scholes-Merton price of the demo call from
QuantLib's ``blackFormula`` (the demo NORDA inputs are flat to 1Y: r = 3% on the 1Y pillar,
q = 2%, vol 25%, T = 365/365), and hand-computed intrinsic values.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest
import QuantLib as ql

from clitools import assert_bad_input, run

ROOT = Path(__file__).resolve().parents[1]
MARKET = ROOT / "markets" / "demo.toml"
PAYOFFS = ROOT / "payoffs"
CALL = PAYOFFS / "european_call.toml"
#: the first three rows of the demo market's correlation matrix (NORDA, KELPA, VIREO)
DEMO_MATRIX = ("[[1.0,  0.6,  0.4,  0.45,  0.35,  0.0,   0.0],\n"
               "          [0.6,  1.0,  0.5,  0.4,   0.3,   0.0,   0.0],\n"
               "          [0.4,  0.5,  1.0,  0.5,   0.3,   0.0,   0.0],")
CONTRACT_KEYS = ["price", "stderr", "ci95", "paths", "currency", "sampler", "seed", "seconds"]

# reference: QuantLib Black formula for the demo call (K = 105, T = 1): F = 100 e^{0.01},
# stdev = 0.25, discount e^{-0.03}
BSM_CALL = ql.blackFormula(ql.Option.Call, 105.0, 100.0 * math.exp(0.01), 0.25, math.exp(-0.03))



def price_json(capsys, *extra, product=CALL, market=MARKET) -> dict:
    code, out, err = run(["price", product, "--market", market, "--json", *extra], capsys)
    assert code == 0, err
    lines = out.strip().splitlines()
    assert len(lines) == 1, out
    return json.loads(lines[0])


def variant(tmp_path: Path, source: Path, old: str, new: str, name: str) -> Path:
    """A copy of a demo file with one piece of text replaced, in tmp_path."""
    text = source.read_text(encoding="utf-8")
    assert old in text, f"{source.name} no longer contains {old!r}"
    p = tmp_path / name
    p.write_text(text.replace(old, new, 1), encoding="utf-8")
    return p



def within(d: dict, ref: float, k: float = 4.0) -> bool:
    return abs(d["price"] - ref) <= k * d["stderr"] + 1e-12


# ---------------------------------------------------------------------------------------------
# price --json
# ---------------------------------------------------------------------------------------------
def test_price_json_contract(capsys):
    d = price_json(capsys)
    assert list(d)[:8] == CONTRACT_KEYS
    lo, hi = d["ci95"]
    assert isinstance(d["ci95"], list) and len(d["ci95"]) == 2
    assert lo < d["price"] < hi
    assert d["stderr"] > 0
    assert d["paths"] == 65536
    assert d["currency"] == "EUR"
    assert d["sampler"] == "sobol"
    assert isinstance(d["seed"], int)
    assert isinstance(d["seconds"], float) and d["seconds"] >= 0
    assert within(d, BSM_CALL), (d["price"], BSM_CALL, d["stderr"])


def test_price_options_reflected(capsys):
    d = price_json(capsys, "--sampler", "pseudo", "--seed", "5", "--paths", "8192")
    assert list(d)[:8] == CONTRACT_KEYS
    assert (d["sampler"], d["seed"], d["paths"]) == ("pseudo", 5, 8192)
    assert d["ci95"][0] < d["price"] < d["ci95"][1]
    assert within(d, BSM_CALL)


def test_same_seed_same_numbers(capsys):
    a = price_json(capsys, "--seed", "7", "--paths", "16384")
    b = price_json(capsys, "--seed", "7", "--paths", "16384")
    c = price_json(capsys, "--seed", "8", "--paths", "16384")
    for k in ("price", "stderr", "ci95", "paths", "seed"):
        assert a[k] == b[k], k
    assert a["price"] != c["price"]
    # the default seed is fixed: two runs without --seed agree too
    p = price_json(capsys, "--sampler", "pseudo", "--paths", "4096")
    q = price_json(capsys, "--sampler", "pseudo", "--paths", "4096")
    assert (p["price"], p["seed"]) == (q["price"], q["seed"])


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_antithetic(capsys, sampler):
    d = price_json(capsys, "--antithetic", "--sampler", sampler, "--paths", "16384")
    assert d["antithetic"] is True
    assert d["paths"] == 16384
    assert within(d, BSM_CALL)


def test_no_control(capsys):
    with_cv = price_json(capsys, "--paths", "16384")
    without = price_json(capsys, "--paths", "16384", "--no-control")
    assert with_cv["controls"] and with_cv["variance_reduction"] > 1
    assert without["controls"] == [] and without["variance_reduction"] is None
    assert within(without, BSM_CALL)


def test_target_stderr(capsys):
    d = price_json(capsys, "--target-stderr", "0.01")
    assert d["stderr"] <= 0.01
    # from a small start without control the paths are doubled until the target is met
    d = price_json(capsys, "--paths", "1024", "--no-control", "--target-stderr", "0.01")
    assert d["stderr"] <= 0.01
    n = d["paths"] // 1024
    assert d["paths"] > 1024 and d["paths"] % 1024 == 0 and n & (n - 1) == 0


def test_price_text_output(capsys):
    code, out, err = run(["price", CALL, "--market", MARKET, "--paths", "4096"], capsys)
    assert code == 0 and err == ""
    assert "NORDA 1Y call 105" in out and "EUR" in out and "95% interval" in out
    assert "not advice" in out


def test_sobol_balance_warning_is_one_line(capsys):
    # 1008 = 16 x 63: legal but not a power of two per scrambling, so a warning
    code, out, err = run(["price", CALL, "--market", MARKET, "--paths", "1008", "--json"],
                         capsys)
    assert code == 0
    assert json.loads(out)["paths"] == 1008
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("fairpath: warning:") and "63" in lines[0]


@pytest.mark.parametrize("strike, right, quantity, expected", [
    (90.0, "call", None, 10.0),     # max(100 - 90, 0), spot of NORDA is 100
    (90.0, "put", None, 0.0),
    (105.0, "put", 10, 50.0),       # 10 x max(105 - 100, 0)
])
def test_expiry_on_valuation_date_is_intrinsic(tmp_path, capsys, strike, right, quantity,
                                               expected):
    text = CALL.read_text(encoding="utf-8")
    text = text.replace("expiry = 2027-12-01", "expiry = 2026-12-01")
    text = text.replace("strike = 105.0", f"strike = {strike}")
    text = text.replace('right = "call"', f'right = "{right}"')
    if quantity is not None:
        text += f"quantity = {quantity}\n"
    p = tmp_path / "today.toml"
    p.write_text(text, encoding="utf-8")
    d = price_json(capsys, product=p)
    assert d["price"] == expected
    assert d["stderr"] == 0.0
    assert d["ci95"] == [expected, expected]
    assert list(d)[:8] == CONTRACT_KEYS


# ---------------------------------------------------------------------------------------------
# validate and demo
# ---------------------------------------------------------------------------------------------
def test_validate_json(capsys):
    code, out, err = run(["validate", "--json"], capsys)
    assert code == 0, err
    rows = json.loads(out)
    assert isinstance(rows, list) and len(rows) >= 5
    for r in rows:
        # exact references: |z| <= 4; approximate ones (BGK) carry a stated relative allowance
        slack = r["allowance"] * abs(r["closed_form"])
        assert abs(r["monte_carlo"] - r["closed_form"]) <= 4 * r["stderr"] + slack, r
        assert r["ok"] is True


def test_validate_table(capsys):
    code, out, _ = run(["validate"], capsys)
    assert code == 0
    assert "within |z| <= 4" in out


def _payoff_names() -> dict[str, str]:
    out = {}
    for f in sorted(PAYOFFS.glob("*.toml")):
        data = tomllib.loads(f.read_text(encoding="utf-8"))
        out[f.name] = data.get("name", data["kind"])
    return out


def test_demo_mentions_every_payoff(capsys):
    code, out, err = run(["demo", "--paths", "4096"], capsys)
    assert code == 0, err
    names = _payoff_names()
    assert names
    for name in names.values():
        assert name[:30] in out, name
    assert "error" not in out


def test_demo_json(capsys):
    code, out, err = run(["demo", "--json", "--paths", "4096"], capsys)
    assert code == 0, err
    d = json.loads(out)
    assert d["currency"] == "EUR" and d["valuation_date"] == "2026-12-01"
    assert [r["file"] for r in d["results"]] == list(_payoff_names())
    for r in d["results"]:
        assert r["status"] == "ok", r
        assert r["ci95"][0] <= r["price"] <= r["ci95"][1]
        if r["closed_form"] is not None:
            assert abs(r["price"] - r["closed_form"]) <= 4 * r["stderr"] + 1e-9, r


@pytest.mark.parametrize("market", ["demo_smile.toml", "demo_laws.toml"])
def test_demo_shows_no_closed_form_where_its_model_does_not_apply(market, capsys):
    # Black-Scholes-Merton assumes lognormal levels: no closed form column under a surface,
    # cash dividends or a non-normal law, so the demo must not print one beside the price
    root = Path(__file__).resolve().parents[1]
    code, out, err = run(["demo", "--json", "--paths", "1024", "--market",
                          root / "markets" / market, "--payoffs", root / "payoffs"], capsys)
    assert code == 0, err
    rows = {r["file"]: r for r in json.loads(out)["results"]}
    assert rows["european_call.toml"]["status"] == "ok"
    assert rows["european_call.toml"]["closed_form"] is None


def test_demo_bad_folder(tmp_path, capsys):
    code, out, err = run(["demo", "--payoffs", tmp_path], capsys)
    assert_bad_input(code, out, err, tmp_path, "no product files")


# ---------------------------------------------------------------------------------------------
# Bad input: exit 2, one line on stderr naming the file and the key, nothing on stdout
# ---------------------------------------------------------------------------------------------
PRODUCT_VARIANTS = [
    # id, old, new, expected fragments besides the file name
    ("missing strike", "strike = 105.0\n", "", ["strike", "missing"]),
    ("negative strike", "strike = 105.0", "strike = -105.0", ["strike", "negative"]),
    ("expiry before valuation", "expiry = 2027-12-01", "expiry = 2026-11-30",
     ["expiry", "before the valuation date"]),
    ("unknown product kind", 'kind = "european"', 'kind = "europian"',
     ["kind", "did you mean 'european'"]),
    ("bad right", 'right = "call"', 'right = "cal"', ["right", "call, put"]),
    ("unknown key", "strike = 105.0", "strike = 105.0\npayout = 3.0", ["payout", "unknown key"]),
    ("broken TOML", "strike = 105.0", "strike = 105.0.0", ["not valid TOML", "line"]),
]


@pytest.mark.parametrize("old, new, fragments", [v[1:] for v in PRODUCT_VARIANTS],
                         ids=[v[0] for v in PRODUCT_VARIANTS])
def test_bad_product(tmp_path, capsys, old, new, fragments):
    p = variant(tmp_path, CALL, old, new, "product.toml")
    code, out, err = run(["price", p, "--market", MARKET, "--json"], capsys)
    assert_bad_input(code, out, err, p, *fragments)


MARKET_VARIANTS = [
    ("negative vol", "vol = 0.25", "vol = -0.25", ["assets.NORDA.vol", "negative"]),
    ("zero spot", "spot = 100.0", "spot = 0.0", ["assets.NORDA.spot", "positive"]),
    ("correlation not symmetric", "[0.6,  1.0,  0.5,", "[0.6,  1.0,  -0.9,",
     ["correlation.matrix", "not symmetric"]),
    # NORDA, KELPA and VIREO at 0.99, 0.99 and -0.99: that block alone has the eigenvalue
    # 1 - 0.99 - 0.99 - ... < 0 (the vector (1, -1, -1) gives 3 - 2(0.99 + 0.99 - 0.99) < 0)
    ("correlation not PSD", DEMO_MATRIX,
     "[[1.0,  0.99, 0.99, 0.45,  0.35,  0.0,   0.0],\n"
     "          [0.99, 1.0, -0.99, 0.4,   0.3,   0.0,   0.0],\n"
     "          [0.99, -0.99, 1.0, 0.5,   0.3,   0.0,   0.0],",
     ["correlation.matrix", "smallest eigenvalue"]),
    ("correlation unknown asset", '"VIREO", "SPRUCE"', '"VIRE0", "SPRUCE"',
     ["correlation.assets[2]", "VIRE0"]),
    ("unknown day count", '"ACT/365F"', '"ACT/365"', ["day_count", "ACT/360"]),
    ("broken TOML", "spot = 100.0", "spot = = 100.0", ["not valid TOML"]),
]


@pytest.mark.parametrize("old, new, fragments", [v[1:] for v in MARKET_VARIANTS],
                         ids=[v[0] for v in MARKET_VARIANTS])
def test_bad_market(tmp_path, capsys, old, new, fragments):
    m = variant(tmp_path, MARKET, old, new, "market.toml")
    code, out, err = run(["price", CALL, "--market", m, "--json"], capsys)
    assert_bad_input(code, out, err, m, *fragments)


def test_unknown_asset_without_control(tmp_path, capsys):
    p = variant(tmp_path, CALL, 'asset = "NORDA"', 'asset = "NORDX"', "product.toml")
    code, out, err = run(["price", p, "--market", MARKET, "--no-control"], capsys)
    assert_bad_input(code, out, err, p, "asset", "unknown asset 'NORDX'", "did you mean 'NORDA'")


def test_unknown_asset_default(tmp_path, capsys):
    p = variant(tmp_path, CALL, 'asset = "NORDA"', 'asset = "NORDX"', "product.toml")
    code, out, err = run(["price", p, "--market", MARKET, "--json"], capsys)
    assert_bad_input(code, out, err, p, "asset:", "unknown asset 'NORDX'")


def test_missing_market_file(tmp_path, capsys):
    m = tmp_path / "absent.toml"
    code, out, err = run(["price", CALL, "--market", m, "--json"], capsys)
    assert_bad_input(code, out, err, m, "file not found")


def test_missing_product_file(tmp_path, capsys):
    p = tmp_path / "absent.toml"
    code, out, err = run(["price", p, "--market", MARKET], capsys)
    assert_bad_input(code, out, err, p, "file not found")


@pytest.mark.parametrize("args, fragments", [
    (["--paths", "1000"], ["paths", "multiple of 16", "1000"]),        # Sobol: 16 scramblings
    (["--paths", "0"], ["--paths", "'0'"]),
    (["--paths", "-5"], ["--paths"]),
    (["--paths", "many"], ["--paths"]),
    (["--seed", "-1"], ["--seed"]),
    (["--sampler", "halton"], ["--sampler", "halton"]),
    (["--target-stderr", "0"], ["--target-stderr"]),
    (["--target-stderr", "nan"], ["--target-stderr"]),
    (["--sampler", "pseudo", "--antithetic", "--paths", "4097"], ["paths", "even"]),
    (["--replicates", "1"], ["replicates"]),
    (["--colour"], ["--colour"]),
])
def test_bad_arguments(capsys, args, fragments):
    code, out, err = run(["price", CALL, "--market", MARKET, "--json", *args], capsys)
    assert_bad_input(code, out, err, *fragments)


def test_missing_arguments(capsys):
    assert_bad_input(*run(["price", CALL], capsys), "--market")
    assert_bad_input(*run([], capsys))
    assert_bad_input(*run(["quote"], capsys), "quote")


# ---------------------------------------------------------------------------------------------
# End to end through the installed console script
# ---------------------------------------------------------------------------------------------
def _console_script() -> str:
    exe = Path(sys.executable).with_name("fairpath")
    if not exe.exists():
        pytest.skip("the fairpath console script is not installed next to this interpreter")
    return str(exe)


def test_console_script_price_json(tmp_path):
    res = subprocess.run([_console_script(), "price", "payoffs/european_call.toml", "--market",
                          "markets/demo.toml", "--json"], cwd=ROOT, capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stderr == ""
    d = json.loads(res.stdout)
    assert list(d)[:8] == CONTRACT_KEYS
    assert d["paths"] == 65536 and d["sampler"] == "sobol"
    assert within(d, BSM_CALL)


def test_console_script_bad_input(tmp_path):
    m = variant(tmp_path, MARKET, "vol = 0.25", "vol = -0.25", "market.toml")
    res = subprocess.run([_console_script(), "price", str(CALL), "--market", str(m), "--json"],
                         capture_output=True, text=True, timeout=120)
    assert_bad_input(res.returncode, res.stdout, res.stderr, m, "assets.NORDA.vol")

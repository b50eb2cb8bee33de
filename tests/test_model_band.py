"""The model band of a quote check: ``check --models`` and ``fp.check_quote(models=...)``.

Each quote is also priced under each listed model (every asset's model replaced, the same seed
and settings) and the band is widened to cover each model's price +- 3 of its standard errors.

References:
* Black-Scholes-Merton with a continuous dividend yield (Merton 1973; the formula as printed in
  Hull, "Options, Futures, and Other Derivatives", ch. 17), written out here with scipy's normal
  CDF, for both models on a flat surface, where local vol is the flat vol itself (Dupire 1994);
  the Monte Carlo prices are compared within 4 standard errors at a fixed seed.
* The other checks are of the band's construction from the measured prices (each model's price
  +- 3 stderr inside the band; a quote placed between two models' prices) and of the command
  line contract in /work/shared/formats.md (``model_prices``; bad input: one line, exit 2).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
from pathlib import Path

import pytest
from scipy.stats import norm

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.cli import build_parser, main
from fairpath.registry import known_models

ROOT = Path(__file__).resolve().parents[1]
SMILE = ROOT / "markets" / "demo_smile.toml"
NO_SURFACE = ROOT / "markets" / "demo.toml"
CALL = ROOT / "payoffs" / "european_call.toml"        # NORDA 1Y call 105
DIGITAL = ROOT / "payoffs" / "digital_call.toml"      # VIREO 18M digital call 240, pays 100
PATHS = 4096
BOTH = "black,local-vol"
SE = 3.0  # standard errors around each model's price (formats.md)


def _quotes(folder: Path, rows, name: str = "quotes.csv") -> Path:
    """A quotes CSV of (product path, quote, tolerance cell) rows."""
    lines = ["product,quote,tolerance"] + [f"{p},{q!r},{t}" for p, q, t in rows]
    f = folder / name
    f.write_text("\n".join(lines) + "\n")
    return f


def _main(argv) -> tuple[int, str, str]:
    """main() in-process with its output captured (for module-scoped fixtures)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main([str(a) for a in argv])
        except SystemExit as exc:
            code = exc.code
    return code, out.getvalue(), err.getvalue()


def _check_json(csv: Path, market: Path, *extra) -> list[dict]:
    code, out, err = _main(["check", csv, "--market", market, "--paths", PATHS, "--json",
                            *extra])
    assert code == 0, err
    return json.loads(out)


@pytest.fixture(scope="module")
def smile_batch(tmp_path_factory):
    """The demo smile market's call and digital (with a tolerance), checked with and without
    --models black,local-vol: (folder, rows with, rows without)."""
    folder = tmp_path_factory.mktemp("band")
    csv = _quotes(folder, [(CALL, 7.9, ""), (DIGITAL, 36.0, "0.05")])
    return folder, _check_json(csv, SMILE, "--models", BOTH), _check_json(csv, SMILE)


def test_band_covers_every_model_price_and_the_json_contract(smile_batch):
    _, rows, _ = smile_batch
    for row in rows:
        assert row["status"] == "ok", row
        for key in ("product", "quote", "price", "stderr", "low", "high", "difference", "z",
                    "verdict", "implied_vol", "name"):
            assert key in row
        mp = row["model_prices"]
        assert list(mp) == ["black", "local-vol"]  # in the order asked
        for kind, got in mp.items():
            assert set(got) == {"price", "stderr"}
            assert got["stderr"] > 0, kind
            assert row["low"] <= got["price"] - SE * got["stderr"], (kind, row)
            assert row["high"] >= got["price"] + SE * got["stderr"], (kind, row)
        parts = row["band_parts"]
        lo_m = min(v["price"] - SE * v["stderr"] for v in mp.values())
        hi_m = max(v["price"] + SE * v["stderr"] for v in mp.values())
        assert parts["models"] == pytest.approx([lo_m, hi_m], rel=1e-12)
        tol = parts["tolerance"]
        assert row["low"] == pytest.approx(min(parts["vol_move"][0], lo_m) - tol, rel=1e-12)
        assert row["high"] == pytest.approx(max(parts["vol_move"][1], hi_m) + tol, rel=1e-12)
        # the market's own model (local vol: both assets have a surface) is the fair value
        assert mp["local-vol"]["price"] == row["price"]
        assert mp["local-vol"]["stderr"] == row["stderr"]
    assert rows[1]["band_parts"]["tolerance"] == 0.05


def test_without_models_the_band_is_the_vol_band(smile_batch):
    _, with_models, without = smile_batch
    for a, b in zip(with_models, without, strict=True):
        assert "model_prices" not in b
        assert b["band_parts"]["models"] is None
        assert a["price"] == b["price"]  # same seed and settings
        assert a["band_parts"]["vol_move"] == b["band_parts"]["vol_move"]
        tol = b["band_parts"]["tolerance"]
        assert b["low"] == pytest.approx(b["band_parts"]["vol_move"][0] - tol, rel=1e-12)
        assert a["low"] <= b["low"] and a["high"] >= b["high"]


def test_model_price_is_the_what_if_price_on_the_same_numbers(smile_batch, capsys):
    """check --models black gives what `price --model black` gives on the same settings."""
    _, rows, _ = smile_batch
    code, out, err = run(["price", DIGITAL, "--market", SMILE, "--model", "black", "--paths",
                          PATHS, "--json"], capsys)
    assert code == 0, err
    what_if = json.loads(out)
    assert rows[1]["model_prices"]["black"]["price"] == pytest.approx(what_if["price"],
                                                                      rel=1e-12)
    assert rows[1]["model_prices"]["black"]["stderr"] == pytest.approx(what_if["stderr"],
                                                                       rel=1e-12)


def test_widening_is_real_on_the_command_line(smile_batch):
    """The demo digital on the skewed smile: Black (at-the-money vols) and local vol differ by
    far more than the vol band; a quote between the two measured prices is fair only with
    --models (cheap without: Black is the lower of the two here)."""
    folder, rows, _ = smile_batch
    mp = rows[1]["model_prices"]
    lo, hi = sorted(v["price"] for v in mp.values())
    quote = lo + 0.2 * (hi - lo)
    assert quote < rows[1]["band_parts"]["vol_move"][0]  # outside the vol band: a real test
    csv = _quotes(folder, [(DIGITAL, quote, "")], name="between.csv")
    assert _check_json(csv, SMILE)[0]["verdict"] in ("cheap", "rich")
    assert _check_json(csv, SMILE, "--models", BOTH)[0]["verdict"] == "fair"


@pytest.mark.parametrize("path, direction", [(CALL, "rich"), (DIGITAL, "cheap")])
def test_widening_is_real_in_python(path, direction):
    """Without the vol move (vol_band=0) the band is the fair value +- 3 stderr; a quote 80% of
    the way from the local-vol price to the Black price is outside it, and fair with both
    models. The call is worth more under Black's at-the-money vol than under local vol on this
    skew, the digital less: both directions are covered."""
    market = fp.load_market(SMILE)
    product = fp.load_product(path)
    settings = dict(paths=PATHS, vol_band=0.0, implied=False)
    probe = fp.check_quote(product, market, 0.0, models=("black", "local-vol"), **settings)
    black, local = (probe.model_prices[k]["price"] for k in ("black", "local-vol"))
    quote = local + 0.8 * (black - local)
    plain = fp.check_quote(product, market, quote, **settings)
    assert plain.model_prices == {} and plain.model_low is None
    assert plain.verdict == direction
    both = fp.check_quote(product, market, quote, models="black,local-vol", **settings)
    assert both.verdict == "fair"
    assert both.price == plain.price and both.vol_low == plain.vol_low


def _bsm_call(s, k, t, r, q, vol):
    """Merton (1973), as printed in Hull (ch. 17): a call on an asset with yield q."""
    d1 = (math.log(s / k) + (r - q + 0.5 * vol * vol) * t) / (vol * math.sqrt(t))
    d2 = d1 - vol * math.sqrt(t)
    return s * math.exp(-q * t) * norm.cdf(d1) - k * math.exp(-r * t) * norm.cdf(d2)


FLAT_SURFACE = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
rate = 0.03
[assets.NORDA]
spot = 100.0
dividend_yield = 0.02
[assets.NORDA.vol_surface]
tenors = ["6M", "1Y", "2Y"]
strikes = [0.6, 0.8, 1.0, 1.2, 1.5]
vols = [[0.25, 0.25, 0.25, 0.25, 0.25],
        [0.25, 0.25, 0.25, 0.25, 0.25],
        [0.25, 0.25, 0.25, 0.25, 0.25]]
"""


def test_each_model_price_matches_black_scholes_on_a_flat_surface(tmp_path):
    """On a surface flat at 25% both models are Black-Scholes at 25%: each model's price
    within 4 of its standard errors of the formula, and the band holds the formula."""
    (tmp_path / "flat.toml").write_text(FLAT_SURFACE)
    market = fp.load_market(tmp_path / "flat.toml")
    call = fp.load_product(CALL)  # 2026-12-01 to 2027-12-01: t = 1 year (ACT/365F)
    ref = _bsm_call(100.0, 105.0, 1.0, 0.03, 0.02, 0.25)
    res = fp.check_quote(call, market, ref, models=["black", "local-vol"], paths=PATHS,
                         implied=False)
    assert [k for k, _, _ in res.models] == ["black", "local-vol"]
    for kind, p, se in res.models:
        assert abs(p - ref) <= 4 * se, (kind, p, se, ref)
    assert res.low <= ref <= res.high and res.verdict == "fair"


def test_console_and_report_show_the_model_band(smile_batch, capsys):
    folder, _, _ = smile_batch
    csv = _quotes(folder, [(CALL, 7.9, "")], name="one.csv")
    report = folder / "report.html"
    code, out, err = run(["check", csv, "--market", SMILE, "--paths", PATHS, "--models", BOTH,
                          "--report", report], capsys)
    assert code == 0, err
    assert "vol band [" in out and "model band [" in out
    assert "under black" in out and "under local-vol" in out
    assert fp.CAUTION in out
    page = report.read_text()
    assert "<th>vol band</th><th>model band</th>" in page
    assert "black " in page and "model band (dashed)" in page
    assert "models</td><td>black, local-vol" in page  # the run settings name them


@pytest.mark.parametrize("models, fragments", [
    ("hestn", ("--models", "unknown model 'hestn'", "known: ", "local-vol")),
    ("local-voll", ("--models", "did you mean 'local-vol'?")),
    ("", ("--models", "an empty list of models")),
    (",", ("--models", "an empty list of models")),
    ("black,,local-vol", ("--models", "an empty name")),
])
def test_bad_model_list_is_one_line_exit_2(tmp_path, capsys, models, fragments):
    csv = _quotes(tmp_path, [(CALL, 7.9, "")])
    report = tmp_path / "report.html"
    code, out, err = run(["check", csv, "--market", SMILE, "--paths", 1024, "--models",
                          models, "--report", report], capsys)
    assert_bad_input(code, out, err, *fragments)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quotes.csv"]


def test_model_that_cannot_apply_names_the_row_and_the_model(tmp_path, capsys):
    """demo.toml has no surfaces: local vol cannot apply to the call's NORDA. Refused before
    anything is priced, naming the row, the product and the model; no report written."""
    csv = _quotes(tmp_path, [(CALL, 7.9, ""), (DIGITAL, 36.0, "")])
    report = tmp_path / "report.html"
    code, out, err = run(["check", csv, "--market", NO_SURFACE, "--paths", 1024, "--models",
                          BOTH, "--report", report, "--json"], capsys)
    assert_bad_input(code, out, err, f"{csv} line 2", "european_call.toml", "--models",
                     "local-vol", "NORDA", "vol_surface")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quotes.csv"]


def test_python_api_refuses_bad_models():
    market = fp.load_market(SMILE)
    call = fp.load_product(CALL)
    with pytest.raises(fp.InputError, match="unknown model 'nope'"):
        fp.check_quote(call, market, 8.0, models=("nope",), paths=1024, implied=False)
    with pytest.raises(fp.InputError, match="empty name"):
        fp.check_quote(call, market, 8.0, models=("black", " "), paths=1024, implied=False)
    flat = fp.load_market(NO_SURFACE)
    with pytest.raises(fp.InputError, match="the local-vol model cannot apply to NORDA"):
        fp.check_quote(call, flat, 8.0, models=("local-vol",), paths=1024, implied=False)


@pytest.mark.parametrize("command", ["price", "greeks", "check", "solve", "book"])
def test_every_pricing_command_takes_a_model_what_if(command):
    """formats.md: price|greeks|check|solve|book ... [--model NAME] (every asset's model
    replaced); an unknown name is refused by the parser."""
    head = {"price": ["price", "p.toml"], "greeks": ["greeks", "p.toml"],
            "check": ["check", "q.csv"], "solve": ["solve", "p.toml", "--for", "strike",
                                                   "--target", "1"],
            "book": ["book", "t.csv", "--out", "o.csv"]}[command]
    args = build_parser().parse_args([*head, "--market", "m.toml", "--model", "local-vol"])
    assert args.model == "local-vol"
    with pytest.raises(SystemExit), contextlib.redirect_stderr(io.StringIO()):
        build_parser().parse_args([*head, "--market", "m.toml", "--model", "nope"])


needs_heston = pytest.mark.skipif("heston" not in known_models(),
                                  reason="the heston model is not registered")


@needs_heston
def test_heston_joins_the_band(smile_batch):
    """--models black,local-vol,heston on the demo smile (Heston fitted to each surface when
    the market gives no parameters): the band holds every model's price +- 3 stderr, and the
    two other models' prices are those of the black,local-vol run (same seed and settings)."""
    folder, two, _ = smile_batch
    rows = _check_json(folder / "quotes.csv", SMILE, "--models", BOTH + ",heston")
    for row, before in zip(rows, two, strict=True):
        mp = row["model_prices"]
        assert list(mp) == ["black", "local-vol", "heston"]
        for kind, got in mp.items():
            assert row["low"] <= got["price"] - SE * got["stderr"], (kind, row)
            assert row["high"] >= got["price"] + SE * got["stderr"], (kind, row)
        for kind in ("black", "local-vol"):
            assert mp[kind] == before["model_prices"][kind]


@needs_heston
def test_heston_without_parameters_or_surface_is_refused(tmp_path, capsys):
    csv = _quotes(tmp_path, [(CALL, 7.9, "")])
    code, out, err = run(["check", csv, "--market", NO_SURFACE, "--paths", 1024, "--models",
                          "heston"], capsys)
    assert_bad_input(code, out, err, f"{csv} line 2", "--models", "heston", "NORDA")

"""Quote checks: verdicts, the implied vol of a quote, the report, bad rows.

References: Black-Scholes-Merton (fairpath.closed_form.bsm_price, checked against QuantLib in
tests/test_closed_form.py) for the fair value and for the implied vol of a quote placed at the
closed-form price.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from datetime import date
from pathlib import Path

import pytest

import fairpath as fp
from fairpath import closed_form as cf
from fairpath.cli import main

VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
CALL = """kind = "european"
asset = "NORDA"
right = "call"
strike = 100.0
expiry = 2027-12-01
"""
MARKET = """valuation_date = 2026-12-01
currency = "EUR"
[discount]
rate = 0.05
[assets.NORDA]
spot = 100.0
vol = 0.25
dividend_yield = 0.02
"""


def bsm(vol=0.25):
    return float(cf.bsm_price(100.0, 100.0, 1.0, 0.05, 0.02, vol, "call"))


@pytest.fixture()
def batch(tmp_path: Path):
    (tmp_path / "call.toml").write_text(CALL)
    (tmp_path / "market.toml").write_text(MARKET)
    fair = bsm()
    rows = ["product,quote,tolerance",
            f"call.toml,{fair + 1.5},",        # well above any band: rich
            f"call.toml,{fair - 1.5},",        # well below: cheap
            f"call.toml,{fair},",              # at fair value
            "call.toml,not-a-number,",         # bad row: reported, others priced
            "missing.toml,5.0,"]               # product file that does not load
    (tmp_path / "quotes.csv").write_text("\n".join(rows) + "\n")
    return tmp_path


def test_verdicts_and_implied_vol(batch):
    market = fp.load_market(batch / "market.toml")
    checks = fp.check_quotes(batch / "quotes.csv", market, vol_band=0.01, paths=16384)
    assert [c.verdict for c in checks[:3]] == ["rich", "cheap", "fair"]
    assert [c.status for c in checks] == ["ok", "ok", "ok", "error", "error"]
    assert "quote is not a number" in checks[3].message
    assert "file not found" in checks[4].message
    # the implied vol of a quote at the BSM price comes back within 0.003 of the market vol
    assert abs(checks[2].implied_vol - 0.25) < 0.003
    # the rich quote's implied vol is above the market's, the cheap one's below
    assert checks[0].implied_vol > 0.25 > checks[1].implied_vol
    for c in checks[:3]:
        assert c.low < c.price < c.high
        assert abs(c.price - bsm()) <= 4 * c.stderr


def test_no_implied_vol_below_intrinsic(batch):
    market = fp.load_market(batch / "market.toml")
    call = fp.load_product(batch / "call.toml")
    res = fp.check_quote(call, market, 0.5, paths=4096)  # below the zero-vol value
    assert res.implied_vol is None and "below" in res.implied_vol_note
    assert res.verdict == "cheap"


def test_cli_json_and_report(batch, capsys):
    report = batch / "report.html"
    code = main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
                 "--paths", "4096", "--json", "--report", str(report)])
    assert code == 0
    rows = json.loads(capsys.readouterr().out)
    keys = {"product", "quote", "price", "stderr", "low", "high", "difference", "z",
            "verdict", "implied_vol"}
    assert all(keys <= set(r) for r in rows)
    text = report.read_text()
    assert "<svg" in text and "not advice" in text and "Run settings" in text
    assert "error" in text  # the bad rows are in the report too
    assert not list(batch.glob(".report-*"))  # no temporary left behind


def test_autocallable_quote_gets_a_fair_coupon(tmp_path):
    note = fp.load_product("payoffs/autocall_single.toml")
    market = fp.load_market("markets/demo.toml")
    res = fp.check_quote(note, market, 975.0, paths=4096, implied=False)
    assert res.coupon == pytest.approx(0.035) and 0 < res.fair_coupon < res.coupon


@pytest.mark.parametrize("content,needle", [
    ("product,price\ncall.toml,1\n", "missing column(s) quote"),
])
def test_bad_csv_is_one_line_exit_2(batch, capsys, content, needle):
    bad = batch / "bad.csv"
    bad.write_text(content)
    code = main(["check", str(bad), "--market", str(batch / "market.toml")])
    err = capsys.readouterr().err
    assert code == 2 and needle in err and len(err.strip().splitlines()) == 1


def test_missing_market_is_exit_2(batch, capsys):
    code = main(["check", str(batch / "quotes.csv"), "--market", str(batch / "nope.toml")])
    assert code == 2 and "file not found" in capsys.readouterr().err


@pytest.mark.skipif(shutil.which("chromium") is None, reason="no headless Chromium here")
def test_report_renders_in_a_headless_browser(batch, capsys):
    report = batch / "report.html"
    main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
          "--paths", "4096", "--report", str(report)])
    shot = batch / "shot.png"
    subprocess.run(["chromium", "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                    "--no-first-run", "--disable-background-networking",
                    "--disable-component-update", "--disable-sync",
                    f"--user-data-dir={batch / 'chrome'}", "--window-size=1000,900",
                    f"--screenshot={shot}", report.as_uri()],
                   check=True, capture_output=True, timeout=120)
    from matplotlib import image
    pixels = image.imread(shot)
    # the page drew something: many distinct colours (table, chart dots, caution box)
    colours = {tuple(p) for p in pixels[::7, ::7, :3].reshape(-1, 3)}
    assert pixels.shape[0] > 100 and len(colours) > 20

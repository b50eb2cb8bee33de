"""Quote checks: verdicts, the implied vol of a quote, the report, bad rows.

References: Black-Scholes-Merton (fairpath.closed_form.bsm_price, checked against QuantLib in
tests/test_closed_form.py) for the fair value and for the implied vol of a quote placed at the
closed-form price.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import stat
import subprocess
import sys
from datetime import date
from pathlib import Path

import pytest

import fairpath as fp
from fairpath import closed_form as cf
from fairpath.cli import main
from fairpath.quotes import (
    MAX_VOL,
    MIN_VOL,
    _extremum_brackets,
    implied_vol,
    vol_grid,
    write_report,
)
from fairpath.sampling import normalize_seed

ROOT = Path(__file__).resolve().parents[1]
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


# ---------------------------------------------------------------------------------------------
# Implied vol of a product whose price is not monotone in vol
# ---------------------------------------------------------------------------------------------
DIGITAL = """kind = "digital"
asset = "NORDA"
right = "call"
strike = 110.0
expiry = 2027-12-01
payout = 100.0
"""


def digital_roots(vol=0.25):
    """The two vols at which the reference digital (cash-or-nothing call, T = 1) has one price.

    Its price is payout e^{-rT} N(d2) with d2 = (a - vol^2 T / 2) / (vol sqrt T), a = ln(F/K):
    d2 takes each value below its maximum at two vols whose product is -2a/T."""
    a = math.log(100.0 * math.exp(0.05 - 0.02) / 110.0)
    return vol, -2.0 * a / vol


def test_fair_digital_quote_gets_the_market_vol_and_names_the_other_root(batch):
    (batch / "digital.toml").write_text(DIGITAL)
    market = fp.load_market(batch / "market.toml")
    digital = fp.load_product(batch / "digital.toml")
    fair = float(cf.digital_price(100.0, 110.0, 1.0, 0.05, 0.02, 0.25, "call", payout=100.0))
    res = fp.check_quote(digital, market, fair, paths=16384)
    assert res.verdict == "fair"
    assert abs(res.implied_vol - 0.25) < 0.003
    # the quote is also reproduced above the peak of the price in vol: the note gives that root
    _, other = digital_roots()
    found = re.search(r"another vol, ([0-9.]+)%", res.implied_vol_note)
    assert found, res.implied_vol_note
    assert abs(float(found.group(1)) / 100 - other) < 0.01


def test_implied_vol_of_a_european_is_unchanged(batch):
    market = fp.load_market(batch / "market.toml")
    call = fp.load_product(batch / "call.toml")
    iv, note = implied_vol(call, market, bsm(0.30), paths=16384)
    assert abs(iv - 0.30) < 0.003 and note == ""


def test_quote_above_the_digitals_peak_has_no_implied_vol(batch):
    (batch / "digital.toml").write_text(DIGITAL)
    market = fp.load_market(batch / "market.toml")
    digital = fp.load_product(batch / "digital.toml")
    top = 100.0 * math.exp(-0.05)  # the payout discounted: more than any vol can give
    iv, note = implied_vol(digital, market, 0.9 * top, paths=4096)
    assert iv is None and "above the model's range" in note


def test_two_roots_between_grid_points_are_found_by_refining_the_extremum():
    grid = [0.1, 0.2, 0.35, 0.5, 0.6]
    f = lambda v: 1e-4 - (v - 0.4) ** 2  # noqa: E731  positive only on (0.39, 0.41)
    fs = [f(v) for v in grid]
    assert all(y < 0 for y in fs)
    (a, x), (x2, b) = _extremum_brackets(f, grid, fs)
    assert (a, b) == (0.2, 0.5) and x == x2 and f(x) > 0


def test_vol_grid_is_a_dozen_points_around_the_market_vol():
    grid = vol_grid(0.25)
    assert len(grid) <= 12 and grid[0] == MIN_VOL and grid[-1] == MAX_VOL
    assert 0.25 in grid and grid == sorted(grid)


# ---------------------------------------------------------------------------------------------
# The demo batch: rich, cheap and fair
# ---------------------------------------------------------------------------------------------
def test_demo_batch_has_rich_cheap_and_fair_quotes():
    market = fp.load_market(ROOT / "markets" / "demo.toml")
    checks = fp.check_quotes(ROOT / "quotes" / "harbourline_batch.csv", market, paths=4096)
    verdicts = {c.verdict for c in checks if c.status == "ok"}
    assert verdicts == {"fair", "rich", "cheap"}
    digital = next(c for c in checks if "digital" in c.product)
    assert abs(digital.implied_vol - 0.38) < 0.003  # quoted at its fair value
    assert [c.status for c in checks].count("error") == 1  # the missing file, in its row


# ---------------------------------------------------------------------------------------------
# The report: unwritable paths, file mode, content
# ---------------------------------------------------------------------------------------------
def one_line_exit_2(code, out, err, *fragments):
    assert code == 2, err
    assert out == ""
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    for f in fragments:
        assert str(f) in lines[0], (f, lines[0])


@pytest.mark.parametrize("where", ["missing-folder", "a-directory", "file-as-folder"])
def test_unwritable_report_is_one_line_exit_2_and_nothing_written(batch, capsys, where):
    before = sorted(batch.rglob("*"))
    report = {"missing-folder": batch / "no" / "such" / "r.html",
              "a-directory": batch,
              "file-as-folder": batch / "call.toml" / "r.html"}[where]
    code = main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
                 "--paths", "4096", "--report", str(report)])
    out, err = capsys.readouterr()
    one_line_exit_2(code, out, err, report, "cannot write the report")
    assert sorted(batch.rglob("*")) == before


def test_report_write_failure_leaves_nothing_behind(batch, monkeypatch):
    market = fp.load_market(batch / "market.toml")
    checks = fp.check_quotes(batch / "quotes.csv", market, paths=4096, implied=False)
    report = batch / "r.html"

    def refuse(src, dst):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr("fairpath.quotes.os.replace", refuse)
    with pytest.raises(fp.InputError) as info:
        write_report(report, checks, market, {})
    assert info.value.source == str(report) and "No space left" in str(info.value)
    assert not report.exists() and not list(batch.glob(".report-*"))


@pytest.mark.parametrize("mask,mode", [(0o022, 0o644), (0o027, 0o640)])
def test_report_mode_follows_the_umask(batch, mask, mode):
    market = fp.load_market(batch / "market.toml")
    checks = fp.check_quotes(batch / "quotes.csv", market, paths=4096, implied=False)
    old = os.umask(mask)
    try:
        write_report(batch / "r.html", checks, market, {})
    finally:
        os.umask(old)
    assert stat.S_IMODE((batch / "r.html").stat().st_mode) == mode


def test_report_shows_correlation_vol_tenors_laws_and_the_seed(tmp_path):
    csv = tmp_path / "q.csv"
    csv.write_text(f"product,quote\n{ROOT / 'payoffs' / 'european_call.toml'},8.0\n")
    market = fp.load_market(ROOT / "markets" / "demo.toml")
    checks = fp.check_quotes(csv, market, paths=4096, implied=False)
    write_report(tmp_path / "r.html", checks, market, {"paths": 4096, "seed": None})
    text = (tmp_path / "r.html").read_text()
    assert "Correlation" in text and "<th>KELPA</th>" in text and "<td>0.6</td>" in text
    assert "0.5y 28%, 1y 30%, 3y 31%" in text and "25% (flat)" in text
    assert "<td>normal</td>" in text  # each asset's shock law
    assert f"<td>seed</td><td>{normalize_seed(None)}</td>" in text
    assert "default" not in text


def test_cli_report_names_the_seed_it_used(batch, capsys):
    report = batch / "r.html"
    assert main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
                 "--paths", "4096", "--seed", "11", "--json", "--report", str(report)]) == 0
    assert "<td>seed</td><td>11</td>" in report.read_text()


# ---------------------------------------------------------------------------------------------
# Bad cells: reported in their row with the file and the line
# ---------------------------------------------------------------------------------------------
def test_bad_tolerance_and_empty_product_name_the_file_and_line(batch):
    market = fp.load_market(batch / "market.toml")
    rows = ["product,quote,tolerance",
            "call.toml,10.0,x",
            "call.toml,10.0,-0.5",
            "",                       # a blank line still counts in the line numbers
            ",10.0,",
            "call.toml,10.0,nan",
            "call.toml,,",
            "call.toml,10.0,0.25",
            "call.toml,10.0,"]
    quotes = batch / "q.csv"
    quotes.write_text("\n".join(rows) + "\n")
    checks = fp.check_quotes(quotes, market, paths=4096, implied=False)
    msgs = [c.message for c in checks]
    assert msgs[0] == f"{quotes} line 2: tolerance is not a number: 'x'"
    assert msgs[1] == f"{quotes} line 3: tolerance must not be negative, got -0.5"
    assert msgs[2] == f"{quotes} line 5: product: empty"
    assert msgs[3].startswith(f"{quotes} line 6: tolerance must be finite")
    assert msgs[4] == f"{quotes} line 7: quote: empty"
    assert [c.status for c in checks] == ["error"] * 5 + ["ok", "ok"]
    # the tolerance widens the band by itself on both sides
    wide, plain = checks[5], checks[6]
    assert (wide.high - wide.low) - (plain.high - plain.low) == pytest.approx(0.5)


# ---------------------------------------------------------------------------------------------
# Progress bars: on a terminal only, never with --json
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("as_json", [False, True])
def test_check_progress_bar_only_on_a_terminal_without_json(batch, capsys, monkeypatch,
                                                            as_json):
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    code = main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
                 "--paths", "4096", *(["--json"] if as_json else [])])
    err = capsys.readouterr().err
    assert code == 0
    assert ("checking quotes" in err) == (not as_json)


def test_check_has_no_progress_bar_off_a_terminal(batch, capsys):
    assert main(["check", str(batch / "quotes.csv"), "--market", str(batch / "market.toml"),
                 "--paths", "4096"]) == 0
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize("as_json", [False, True])
def test_demo_progress_bar_only_on_a_terminal_without_json(tmp_path, capsys, monkeypatch,
                                                           as_json):
    (tmp_path / "payoffs").mkdir()
    (tmp_path / "payoffs" / "call.toml").write_text(CALL)
    (tmp_path / "market.toml").write_text(MARKET)
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    code = main(["demo", "--payoffs", str(tmp_path / "payoffs"), "--market",
                 str(tmp_path / "market.toml"), "--paths", "4096",
                 *(["--json"] if as_json else [])])
    err = capsys.readouterr().err
    assert code == 0
    assert ("pricing the payoffs" in err) == (not as_json)

"""Notebook rendering: ``_repr_html_`` tables and ``.plot()`` figures of quote checks, solves
and Greek profiles, which stay plain lists / results for existing code."""

from __future__ import annotations

import json
from datetime import date
from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")

import fairpath as fp  # noqa: E402
from fairpath.estimate import CAUTION  # noqa: E402
from fairpath.greeks import GreekProfile  # noqa: E402
from fairpath.quotes import QuoteChecks  # noqa: E402

VAL = date(2026, 12, 1)
MARKET = fp.Market(VAL, "EUR", fp.DiscountCurve.flat(0.05),
                   (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.25), dividend_yield=0.02),))
CALL = """kind = "european"
asset = "NORDA"
right = "call"
strike = 100.0
expiry = 2027-12-01
"""


@pytest.fixture()
def checks(tmp_path: Path) -> QuoteChecks:
    (tmp_path / "call.toml").write_text(CALL)
    rows = ["product,quote", "call.toml,13.0", "call.toml,8.5", "call.toml,10.9",
            "missing.toml,1.0"]
    (tmp_path / "q.csv").write_text("\n".join(rows) + "\n")
    return fp.check_quotes(tmp_path / "q.csv", MARKET, paths=4096, implied=False)


def test_check_quotes_is_still_a_list_that_dumps_to_json(checks):
    assert isinstance(checks, list) and isinstance(checks, QuoteChecks)
    assert [c.verdict for c in checks] == ["rich", "cheap", "fair", None]
    rows = json.loads(json.dumps([c.to_dict() for c in checks]))
    assert rows == json.loads(json.dumps(checks.to_dicts()))
    assert checks.settings["seed"] == 20261201 and checks.settings["paths"] == 4096


def test_quote_check_renders_as_a_one_row_table(checks):
    page = checks[0]._repr_html_()
    assert page.count("<table") == 1 and page.count("<tr>") == 2  # header and one row
    assert "rich" in page and "call.toml" in page


def test_quote_checks_render_as_the_whole_table_with_the_caution_under_it(checks):
    page = checks._repr_html_()
    assert page.count("<tr>") == 1 + len(checks)
    assert "error: " in page and "missing.toml" in page
    assert page.index("</table>") < page.index(CAUTION.split(";")[0])


@pytest.mark.parametrize("units", ["auto", "percent", "band"])
def test_quote_checks_plot_a_band_per_row_and_a_dot_per_quote(checks, units):
    fig = checks.plot(units=units)
    ax = fig.axes[0]
    assert len(ax.patches) == 3  # one band per priced row
    assert len(ax.collections) == 3  # one quote dot per priced row
    colours = [tuple(c.get_facecolor()[0][:3]) for c in ax.collections]
    assert len(set(colours)) == 3  # rich, cheap and fair in three colours
    assert "1 row(s) with errors" in ax.get_title()
    assert [t.get_text() for t in ax.get_yticklabels()] == ["call.toml"] * 3


def test_quote_checks_plot_refuses_nothing_to_plot(checks):
    with pytest.raises(fp.InputError, match="no priced quotes"):
        QuoteChecks([checks[3]]).plot()
    with pytest.raises(fp.InputError, match="units"):
        checks.plot(units="inches")


def test_solve_result_renders_as_a_table():
    call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    res = fp.solve(call, MARKET, "strike", 10.0, paths=4096)
    page = res._repr_html_()
    assert "<table" in page and "strike" in page and f"{res.value:.8g}" in page
    assert "seed" in page and "not advice" in page


def test_greek_profile_is_a_list_of_pairs_with_a_table_and_a_plot():
    put = fp.European(asset="NORDA", right="put", strike=100.0, expiry=date(2027, 12, 1))
    prof = fp.greek_profile(put, MARKET, spots=[80.0, 100.0, 120.0], paths=4096)
    assert isinstance(prof, GreekProfile) and isinstance(prof, list) and prof.asset == "NORDA"
    spots = [s for s, _ in prof]  # existing code unpacks (spot, GreeksResult) pairs
    assert spots == [80.0, 100.0, 120.0]
    assert all(isinstance(g, fp.GreeksResult) for _, g in prof)
    page = prof._repr_html_()
    assert page.count("<tr>") == 1 + 3
    for head in ("delta", "gamma", "vega"):
        assert f"<th>{head}</th>" in page
    assert f"{prof[0][1].delta['NORDA'].value:.6g}" in page
    for greek in ("delta", "gamma", "vega"):
        fig = prof.plot(greek)
        ax = fig.axes[0]
        assert ax.get_ylabel() == greek
        assert list(ax.lines[0].get_xdata()) == spots

"""The scenario grid (fairpath.scenarios, `fairpath scenarios`).

Reference: the Black-Scholes-Merton closed form, fairpath.closed_form.bsm_price, itself checked
against QuantLib in tests/test_closed_form.py, at the moved spot and vol of each cell. Monte
Carlo checks use |MC - reference| <= 4 standard errors at a fixed seed.
"""

from __future__ import annotations

import html
import importlib
import json
from datetime import date
from pathlib import Path

import numpy as np
import pytest

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.closed_form import bsm_price
from fairpath.results import CAUTION

# the module (fairpath.scenarios is the function, as fairpath.greeks is)
sc = importlib.import_module("fairpath.scenarios")

ROOT = Path(__file__).resolve().parents[1]
MARKET = ROOT / "markets" / "demo.toml"
SMILE = ROOT / "markets" / "demo_smile.toml"
CALL = ROOT / "payoffs" / "european_call.toml"
VAL = date(2026, 12, 1)
EXPIRY = date(2027, 12, 1)
R, Q, S0, VOL = 0.03, 0.01, 100.0, 0.2
PNG = b"\x89PNG\r\n\x1a\n"


def flat_market() -> fp.Market:
    return fp.Market(VAL, "EUR", fp.DiscountCurve.flat(R),
                     (fp.Asset("NORDA", S0, fp.VolCurve.flat(VOL), Q),))


def call(strike: float = 100.0) -> fp.European:
    return fp.European(asset="NORDA", right="call", strike=strike, expiry=EXPIRY)


def bsm(market: fp.Market, s: float, v: float) -> float:
    """Black-Scholes-Merton closed form, fairpath.closed_form.bsm_price, itself checked against
    QuantLib in tests/test_closed_form.py: the call at spot S0 (1 + s) and vol VOL + v."""
    return float(bsm_price(S0 * (1 + s), 100.0, market.time(EXPIRY), R, Q, VOL + v, "call"))


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_corner_cells_and_their_changes_match_black_scholes_merton(sampler):
    m = flat_market()
    g = fp.scenarios(call(), m, spot_shifts=[-0.2, 0.0, 0.2], vol_shifts=[-0.05, 0.0, 0.05],
                     paths=4096, sampler=sampler)  # the default seed
    assert g.spot_shifts == (-0.2, 0.0, 0.2) and g.vol_shifts == (-0.05, 0.0, 0.05)
    base = bsm(m, 0.0, 0.0)
    assert abs(g.base - base) <= 4 * g.base_stderr
    for i in (0, 2):
        for j in (0, 2):
            ref = bsm(m, g.spot_shifts[j], g.vol_shifts[i])
            assert abs(g.values[i][j] - ref) <= 4 * g.stderr[i][j], (i, j, g.values[i][j], ref)
            # the change from the base against the closed-form change, within its own error
            # (the spread of the difference on common numbers)
            assert abs(g.changes[i][j] - (ref - base)) <= 4 * g.change_stderr[i][j], (i, j)
    assert g.changes[1][1] == 0.0 and g.change_stderr[1][1] == 0.0
    assert g.values[1][1] == g.base


@pytest.mark.parametrize("sampler", ["sobol", "pseudo"])
def test_base_cell_is_the_plain_price_on_the_same_numbers(sampler):
    # The base cell is the first scenario of a run on the same settings, grid and random
    # numbers as fp.price(control=False); the other cells (simulated from the same normals, or
    # the base paths rescaled for a spot-only move) never touch its paths, and a column's
    # block moments do not depend on the other columns, so the value comes out bit for bit.
    # The error bar is allowed 1e-12 relative because it is summed by another route (std of
    # the scramblings' estimates over sqrt(R), or w' Cov w / N, against combine's variance).
    m = flat_market()
    g = fp.scenarios(call(), m, spot_shifts=[-0.1, 0.0, 0.1], vol_shifts=[0.0, 0.02],
                     paths=4096, sampler=sampler, seed=5)
    r = fp.price(call(), m, paths=4096, sampler=sampler, seed=5, control=False)
    assert g.base == pytest.approx(r.price, rel=1e-12, abs=0)
    assert g.base_stderr == pytest.approx(r.stderr, rel=1e-12, abs=0)
    assert g.base == r.price  # bit for bit (see above)
    assert (g.paths, g.sampler, g.seed, g.currency) == (r.paths, r.sampler, r.seed, "EUR")
    # common random numbers: a small move's change is far less noisy than the difference of
    # two independent prices with these error bars would be
    for j in (0, 2):
        independent = np.hypot(g.stderr[0][j], g.base_stderr)
        assert 0 < g.change_stderr[0][j] < 0.5 * independent


def test_changes_are_monotone_in_spot_and_vol_for_a_call():
    g = fp.scenarios(call(), flat_market(), spot_shifts="-0.3:0.3:0.1",
                     vol_shifts="-0.1:0.1:0.05", paths=2048, seed=2)
    ch = np.array(g.changes)
    assert ch.shape == (5, 7)
    assert np.all(np.diff(ch, axis=1) > 0)  # a call gains with the spot (common numbers)
    assert np.all(np.diff(ch, axis=0) > 0)  # and with the vol
    assert g.base_index == (2, 3)


def test_a_grid_split_over_several_runs_gives_the_same_numbers(monkeypatch):
    kwargs = dict(spot_shifts="-0.2:0.2:0.1", vol_shifts="-0.05:0.05:0.05", paths=1024, seed=9)
    one = fp.scenarios(call(), flat_market(), **kwargs)
    monkeypatch.setattr(sc, "RUN_CELLS", 4)  # 14 cells besides the base: four runs
    split = fp.scenarios(call(), flat_market(), **kwargs)
    assert split.values == one.values and split.stderr == one.stderr
    assert split.changes == one.changes and split.change_stderr == one.change_stderr
    assert any("4 runs" in n for n in split.notes)


def test_shift_lists_have_no_floating_drift_and_always_hold_the_base():
    pts, notes = sc.shift_list("-0.3:0.3:0.1", "--spot")
    assert pts == (-0.3, -0.2, -0.1, 0.0, 0.1, 0.2, 0.3) and notes == []
    assert sc.shift_list("-0.05:0.05:0.05", "--vol") == ((-0.05, 0.0, 0.05), [])
    pts, notes = sc.shift_list("0.1:0.3:0.1", "--spot")
    assert pts == (0.0, 0.1, 0.2, 0.3)
    assert len(notes) == 1 and "base move 0" in notes[0]
    pts, notes = sc.shift_list("0:0.25:0.1", "--spot")
    assert pts == (0.0, 0.1, 0.2) and "last point is 0.2" in notes[0]
    assert len(sc.shift_list("-0.2:0.2:0.01", "--spot")[0]) == 41
    assert sc.shift_list([0.1, -0.1], "--spot") == ((-0.1, 0.0, 0.1), [
        "--spot: the base move 0 is not on the grid given, so it was added (every grid holds "
        "the base cell)"])
    for bad in ([0.1, 0.1], [], [float("nan")], [-1.0], "-0.2:0.21:0.01"):
        with pytest.raises(fp.InputError, match="--spot"):
            sc.shift_list(bad, "--spot")


def test_the_result_renders_as_a_table_and_a_heatmap():
    g = fp.scenarios(call(), flat_market(), spot_shifts=[-0.1, 0.0, 0.1], vol_shifts=[0.0],
                     paths=1024, seed=1)
    text = str(g)
    assert "vol \\ spot" in text and "-10%" in text and "+10%" in text
    assert text.rstrip().endswith(CAUTION)
    assert f"{g.base:.4f}*" in text  # the base cell is starred
    page = g._repr_html_()
    assert "<table>" in page and html.escape(CAUTION) in page
    fig = g.plot()
    assert len(fig.axes) == 2  # the heatmap and its colour bar
    assert "%" in fig.axes[0].get_xlabel() and "%" in fig.axes[0].get_ylabel()
    assert set(g.to_dict()) >= {"base", "spot_shifts", "vol_shifts", "values", "stderr",
                                "changes", "change_stderr", "currency", "paths", "seed",
                                "notes"}


# ---------------------------------------------------------------------------------------------
# The command
# ---------------------------------------------------------------------------------------------
def test_json_contract(capsys):
    code, out, err = run(["scenarios", CALL, "--market", MARKET, "--paths", 1024,
                          "--spot", "-0.2:0.2:0.1", "--vol", "-0.05:0.05:0.05", "--json"],
                         capsys)
    assert code == 0, err
    assert err == ""  # no progress bar off a terminal, and never with --json
    d = json.loads(out)
    for key in ("base", "spot_shifts", "vol_shifts", "values", "stderr", "changes",
                "change_stderr", "currency", "paths", "seed", "notes"):
        assert key in d, key
    assert d["spot_shifts"] == [-0.2, -0.1, 0.0, 0.1, 0.2]
    assert d["vol_shifts"] == [-0.05, 0.0, 0.05]
    for key in ("values", "stderr", "changes", "change_stderr"):
        assert len(d[key]) == 3 and all(len(row) == 5 for row in d[key]), key
    assert d["values"][1][2] == d["base"] and d["changes"][1][2] == 0.0
    assert d["currency"] == "EUR" and d["paths"] == 1024


def test_text_output_and_defaults(capsys):
    code, out, err = run(["scenarios", CALL, "--market", MARKET, "--paths", 512], capsys)
    assert code == 0, err
    assert "-30%" in out and "+30%" in out and "-5 pts" in out and "+5 pts" in out
    assert CAUTION in out


BAD = [
    (["--spot", "abc"], "--spot", "A:B:STEP"),
    (["--spot", "-0.3:0.3"], "--spot", "A:B:STEP"),
    (["--spot", "-0.3:0.3:0"], "--spot", "step must be positive"),
    (["--vol", "-0.05:0.05:-0.01"], "--vol", "step must be positive"),
    (["--spot", "0.3:-0.3:0.1"], "--spot", "above the end"),
    (["--spot", "-0.5:0.5:0.01"], "--spot", "at most 41"),
    (["--spot", "-1:0:0.5"], "--spot", "non-positive spot"),
    (["--spot", "inf:1:0.5"], "--spot", "finite"),
    (["--vol", "-0.3:0:0.1"], "--vol", "non-positive"),
]


@pytest.mark.parametrize(("extra", "flag", "fragment"), BAD)
def test_bad_grids_are_refused_in_one_line_and_write_nothing(extra, flag, fragment, capsys,
                                                             tmp_path):
    pic = tmp_path / "grid.png"
    code, out, err = run(["scenarios", CALL, "--market", MARKET, "--paths", 512, *extra,
                          "--plot", pic], capsys)
    assert_bad_input(code, out, err, flag, fragment)
    assert list(tmp_path.iterdir()) == []


def test_a_vol_move_that_breaks_a_surface_is_refused(capsys):
    code, out, err = run(["scenarios", CALL, "--market", SMILE, "--paths", 512,
                          "--vol", "-0.19:0:0.19"], capsys)
    assert_bad_input(code, out, err, "--vol", "-0.19", "arbitrage")


def test_plot_writes_a_png_whole(capsys, tmp_path):
    pic = tmp_path / "grid.png"
    code, out, err = run(["scenarios", CALL, "--market", MARKET, "--paths", 512,
                          "--spot", "-0.1:0.1:0.1", "--vol", "0:0.05:0.05", "--plot", pic,
                          "--json"], capsys)
    assert code == 0, err
    json.loads(out)  # stdout holds the JSON alone
    assert pic.read_bytes()[:8] == PNG
    assert [p.name for p in tmp_path.iterdir()] == ["grid.png"]  # no temporary file left


@pytest.mark.parametrize("where", ["missing/grid.png", "grid.txt"])
def test_a_plot_path_that_cannot_be_written_is_refused_before_pricing(where, capsys,
                                                                      tmp_path):
    code, out, err = run(["scenarios", CALL, "--market", MARKET, "--paths", 512,
                          "--plot", tmp_path / where], capsys)
    assert_bad_input(code, out, err, "--plot", "cannot write")
    assert list(tmp_path.iterdir()) == []

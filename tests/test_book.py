"""A whole book at once (fairpath.book, ``fairpath book``): Dask against serial, determinism,
resuming after a kill, broken trades, bad input, quantities, Greeks and the summary.

Monte Carlo numbers are compared bit for bit (as the CSV cells, strings) where the design makes
them identical: a trade's random numbers come only from the run's seed and its ``trade_id``
(module notes of fairpath.book), never from the worker count, the order of completion or the
other trades of the book. Elsewhere comparisons are statistical: |a - b| <= 4 combined
standard errors. References outside the project: the Black-Scholes-Merton delta of the demo
NORDA call (closed form, inputs from markets/demo.toml) and SHA-256 from the standard library.

The books are invented (trade ids HL-...) and built in temporary folders from copies of the
payoffs/ library, on the demo market.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import random
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

import fairpath as fp
from clitools import assert_bad_input, run
from fairpath.book import COLUMNS, price_book, read_trades, trade_stream
from fairpath.errors import InputError

ROOT = Path(__file__).resolve().parents[1]
MARKET_FILE = ROOT / "markets" / "demo.toml"
PAYOFFS = ROOT / "payoffs"
PATHS = 16384  # modest: the whole file stays well under a minute on two cores
FAST_PATHS = 4096

# The shared book: slow autocallables between fast trades (so a run can be caught midway),
# a short position, an empty quantity, and two broken trades: one whose file is missing (found
# when the book loads its products) and one on an asset the market lacks (found when priced,
# i.e. on a Dask worker).
BOOK = [
    ("HL-0001", "autocall_worst_of.toml", "1"),
    ("HL-0002", "european_call.toml", "25"),
    ("HL-0003", "autocall_struck.toml", "2"),
    ("HL-0004", "asian_call.toml", "50"),
    ("HL-0005", "autocall_worst_of.toml", "-2"),
    ("HL-0006", "barrier_up_in_put_daily.toml", "10"),
    ("HL-0007", "autocall_struck.toml", ""),
    ("HL-0008", "zepha_call.toml", "5"),
    ("HL-0009", "autocall_worst_of.toml", "3"),
    ("HL-0010", "retired_note.toml", "1"),
    ("HL-0011", "autocall_struck.toml", "4"),
    ("HL-0012", "basket_worst_of_put.toml", "0.5"),
]
BROKEN = {"HL-0008", "HL-0010"}
FAST = [t for t in BOOK if t[0] in ("HL-0002", "HL-0004", "HL-0006", "HL-0012")]


# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------
def product_folder(folder: Path) -> Path:
    """Copies of the payoffs/ library in ``folder/products``, plus a product on an asset the
    demo market does not have (ZEPHA); ``retired_note.toml`` is deliberately absent."""
    prod = folder / "products"
    prod.mkdir(parents=True, exist_ok=True)
    for f in PAYOFFS.glob("*.toml"):
        shutil.copy(f, prod / f.name)
    text = (PAYOFFS / "european_call.toml").read_text(encoding="utf-8")
    (prod / "zepha_call.toml").write_text(text.replace('"NORDA"', '"ZEPHA"'), encoding="utf-8")
    return prod


def write_book(folder: Path, trades, name: str = "book.csv") -> Path:
    """A trades CSV in ``folder`` whose product paths are relative to it (products/...)."""
    if not (folder / "products").exists():
        product_folder(folder)
    lines = ["trade_id,product,quantity"]
    lines += [f"{tid},products/{prod},{qty}" for tid, prod, qty in trades]
    p = folder / name
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


def read_rows(out: Path) -> list[dict]:
    with open(out, encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        rows = list(reader)
    assert reader.fieldnames is not None
    return rows


def by_id(rows: list[dict]) -> dict[str, dict]:
    ids = [r["trade_id"] for r in rows]
    assert len(ids) == len(set(ids)), f"a trade appears twice: {sorted(ids)}"
    return {r["trade_id"]: r for r in rows}


def data_lines(out: Path) -> int:
    """Complete data rows written so far (header excluded)."""
    try:
        text = out.read_text(encoding="utf-8")
    except FileNotFoundError:
        return 0
    return max(text.count("\n") - 1, 0)




def consistent(a: dict, b: dict, k: float = 4.0) -> bool:
    """|a - b| within k combined standard errors (rows of the output CSV)."""
    pa, pb = float(a["price"]), float(b["price"])
    sa, sb = float(a["stderr"]), float(b["stderr"])
    return abs(pa - pb) <= k * math.hypot(sa, sb) + 1e-12


@pytest.fixture(scope="module")
def market():
    return fp.load_market(MARKET_FILE)


@pytest.fixture(scope="module")
def shared(tmp_path_factory, market):
    """The shared book and its uninterrupted serial run (the reference of every comparison)."""
    folder = tmp_path_factory.mktemp("shared")
    book = write_book(folder, BOOK)
    out = folder / "serial.csv"
    summary = price_book(book, market, out, executor="serial", paths=PATHS)
    return {"folder": folder, "book": book, "out": out, "summary": summary,
            "rows": by_id(read_rows(out))}


@pytest.fixture(scope="module")
def dask_run(shared, market):
    """The shared book on a local Dask cluster of 2 worker processes started by price_book."""
    out = shared["folder"] / "dask.csv"
    summary = price_book(shared["book"], market, out, workers=2, paths=PATHS)
    return {"out": out, "summary": summary}


@pytest.fixture(scope="module")
def cluster():
    """A running cluster on loopback that the book connects to with ``scheduler=``."""
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  silence_logs=40) as c:
        yield c


# ---------------------------------------------------------------------------------------------
# 1. Dask against serial: identical bits
# ---------------------------------------------------------------------------------------------
def test_serial_reference_is_sane(shared):
    rows = shared["rows"]
    assert set(rows) == {t[0] for t in BOOK}
    for tid, r in rows.items():
        if tid in BROKEN:
            assert r["status"] == "error", r
        else:
            assert r["status"] == "ok" and r["message"] == "", r
            assert r["currency"] == "EUR"  # the demo market's currency (markets/demo.toml)
            assert float(r["stderr"]) >= 0.0


def test_local_cluster_two_workers_matches_serial_bit_for_bit(shared, dask_run):
    header = read_rows(dask_run["out"])[0].keys()
    assert tuple(header) == COLUMNS  # the contract's columns (shared/formats.md)
    dask_rows = by_id(read_rows(dask_run["out"]))
    assert set(dask_rows) == set(shared["rows"])
    for tid, ref in shared["rows"].items():
        # every cell, prices and standard errors as written: string equality
        assert dask_rows[tid] == ref, tid
    s = dask_run["summary"]
    assert (s.trades, s.priced, s.skipped, s.errors) == (len(BOOK), len(BOOK), 0, len(BROKEN))
    # the totals are summed in the order trades finish: equal up to rounding
    assert s.totals["EUR"] == pytest.approx(shared["summary"].totals["EUR"], rel=1e-12)


def test_running_scheduler_matches_serial(shared, cluster, market, tmp_path):
    # the fast trades of the shared book, in another book, on a cluster started elsewhere
    book = write_book(tmp_path, FAST)
    out = tmp_path / "on_scheduler.csv"
    s = price_book(book, market, out, scheduler=cluster.scheduler_address, paths=PATHS)
    assert (s.priced, s.errors) == (len(FAST), 0)
    rows = by_id(read_rows(out))
    assert rows == {tid: shared["rows"][tid] for tid, _, _ in FAST}


# ---------------------------------------------------------------------------------------------
# 2. Determinism beyond workers
# ---------------------------------------------------------------------------------------------
def test_trade_stream_is_sha256_of_the_id():
    # reference: the first two big-endian 32-bit words of SHA-256 of the id (hashlib; the
    # module notes of fairpath.book), the same in every process unlike Python's hash()
    d = hashlib.sha256(b"HL-0002").digest()
    assert trade_stream("HL-0002") == (int.from_bytes(d[:4], "big"),
                                       int.from_bytes(d[4:8], "big"))
    assert trade_stream("HL-0002") != trade_stream("HL-0002 ")


def test_price_does_not_depend_on_the_rest_of_the_book(shared, market, tmp_path):
    # another folder and another book: shuffled, one trade removed, one added
    kept = [t for t in BOOK if t[0] not in ("HL-0007",)]
    rng = random.Random(5)
    rng.shuffle(kept)
    fast_ids = {t[0] for t in FAST}
    trades = [t for t in kept if t[0] in fast_ids] + [("HL-0999", "european_put.toml", "7")]
    rng.shuffle(trades)
    book = write_book(tmp_path, trades, name="other_book.csv")
    out = tmp_path / "other.csv"
    price_book(book, market, out, executor="serial", paths=PATHS)
    rows = by_id(read_rows(out))
    assert set(rows) == {t[0] for t in trades}
    for tid in fast_ids:
        for col in ("price", "stderr", "currency", "status", "message"):
            assert rows[tid][col] == shared["rows"][tid][col], (tid, col)


def test_book_row_is_the_price_under_the_trade_stream(shared, market):
    # the book's number for HL-0002 is fp.price of the product under the trade's stream,
    # times the book quantity (25)
    prod = fp.load_product(shared["folder"] / "products" / "european_call.toml")
    res = fp.price(prod, market, paths=PATHS, stream=trade_stream("HL-0002"))
    row = shared["rows"]["HL-0002"]
    assert float(row["price"]) == res.price * 25
    assert float(row["stderr"]) == res.stderr * 25


def test_other_trade_id_other_numbers_same_price(market, tmp_path):
    # the same product under two ids: other random streams, a statistically equal price
    trades = [("HL-0201", "barrier_up_in_put_daily.toml", "1"),
              ("HL-0202", "barrier_up_in_put_daily.toml", "1")]
    book = write_book(tmp_path, trades)
    out = tmp_path / "out.csv"
    price_book(book, market, out, executor="serial", paths=PATHS)
    rows = by_id(read_rows(out))
    a, b = rows["HL-0201"], rows["HL-0202"]
    assert a["price"] != b["price"] and a["stderr"] != b["stderr"]
    assert float(a["stderr"]) > 0 and float(b["stderr"]) > 0
    assert consistent(a, b), (a, b)


def test_seed_changes_the_numbers(market, tmp_path):
    book = write_book(tmp_path, [("HL-0301", "asian_call.toml", "1")])
    one, two = tmp_path / "one.csv", tmp_path / "two.csv"
    price_book(book, market, one, executor="serial", paths=FAST_PATHS, seed=11)
    price_book(book, market, two, executor="serial", paths=FAST_PATHS, seed=12)
    a, b = read_rows(one)[0], read_rows(two)[0]
    assert a["price"] != b["price"]
    assert consistent(a, b), (a, b)


# ---------------------------------------------------------------------------------------------
# 3. Kill a run midway and resume
# ---------------------------------------------------------------------------------------------
def _live_in_group(pgid: int) -> list[int]:
    """Processes of a process group that are still running (not zombies); Linux /proc."""
    live = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            text = stat.read_text()
        except OSError:
            continue
        fields = text[text.rfind(")") + 2:].split()
        if int(fields[2]) == pgid and fields[0] != "Z":
            live.append(int(stat.parent.name))
    return live


def test_kill_midway_then_resume(shared, market, tmp_path):
    out = tmp_path / "killed.csv"
    log = tmp_path / "book.log"
    cmd = [sys.executable, "-m", "fairpath.cli", "book", str(shared["book"]),
           "--market", str(MARKET_FILE), "--out", str(out), "--workers", "1",
           "--paths", str(PATHS)]
    with open(log, "wb") as fh:
        proc = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT, cwd=tmp_path,
                                start_new_session=True)
        try:
            deadline = time.monotonic() + 60
            while data_lines(out) < 3 and proc.poll() is None and time.monotonic() < deadline:
                time.sleep(0.01)
        finally:
            if proc.poll() is None:
                os.killpg(proc.pid, signal.SIGKILL)  # the command, its cluster and workers
            proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL, log.read_text()  # killed, not finished
    if Path("/proc").exists():
        deadline = time.monotonic() + 10
        while _live_in_group(proc.pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not _live_in_group(proc.pid), "worker processes survived the kill"

    text = out.read_text(encoding="utf-8")
    first = read_rows(out)
    assert 3 <= len(first) < len(BOOK), text
    kept = [r for r in first if r["status"] == "ok"]
    for r in first:  # what the killed run wrote is already right
        assert r == shared["rows"][r["trade_id"]]

    summary = price_book(shared["book"], market, out, executor="serial", paths=PATHS)
    final = read_rows(out)
    rows = by_id(final)  # every trade exactly once
    assert set(rows) == {t[0] for t in BOOK}
    for r in kept:  # rows of the first run unchanged
        assert rows[r["trade_id"]] == r
    assert rows == shared["rows"]  # as an uninterrupted serial run
    assert summary.skipped == len(kept)
    assert summary.priced == len(BOOK) - len(kept)
    assert math.isclose(summary.totals["EUR"], shared["summary"].totals["EUR"], rel_tol=1e-12)


@pytest.mark.parametrize("cut", ["mid-row", "before-newline"])
def test_row_cut_short_is_dropped_and_redone(shared, market, tmp_path, cut):
    # the serial output of the fast trades, whose last row a crash cut short
    book = write_book(tmp_path, FAST)
    out = tmp_path / "out.csv"
    price_book(book, market, out, executor="serial", paths=PATHS)
    complete = out.read_text(encoding="utf-8")
    lines = complete.splitlines(keepends=True)
    last = lines[-1]
    partial = last[: len(last) // 2] if cut == "mid-row" else last[:-1]
    out.write_text("".join(lines[:-1]) + partial, encoding="utf-8", newline="")
    cut_id = last.split(",")[0]

    summary = price_book(book, market, out, executor="serial", paths=PATHS)
    assert summary.skipped == len(FAST) - 1 and summary.priced == 1
    text = out.read_text(encoding="utf-8")
    assert text.endswith("\n")
    parsed = list(csv.reader(io.StringIO(text)))
    assert parsed[0] == list(COLUMNS)
    assert all(len(r) == len(COLUMNS) for r in parsed)
    rows = by_id(read_rows(out))
    assert set(rows) == {t[0] for t in FAST}
    for tid, r in rows.items():
        for col in ("price", "stderr", "currency", "status"):
            assert r[col] == shared["rows"][tid][col], (tid, col)
    assert rows[cut_id]["status"] == "ok"


def test_rerun_of_a_finished_book_prices_nothing(shared, market, tmp_path):
    out = tmp_path / "done.csv"
    ok_rows = [r for r in shared["rows"].values() if r["status"] == "ok"]
    with open(out, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(COLUMNS), lineterminator="\n")
        w.writeheader()
        w.writerows(ok_rows)
    t0 = time.perf_counter()
    summary = price_book(shared["book"], market, out, executor="serial", paths=PATHS)
    assert summary.skipped == len(ok_rows)
    assert summary.priced == len(BROKEN)  # only the errors are tried again
    assert by_id(read_rows(out)) == shared["rows"]
    assert time.perf_counter() - t0 < 5


# ---------------------------------------------------------------------------------------------
# 4. Broken trades
# ---------------------------------------------------------------------------------------------
def test_broken_trades_reported_then_fixed_on_rerun(market, tmp_path):
    folder = tmp_path / "desk"
    folder.mkdir()
    prod = product_folder(folder)
    text = (prod / "european_put.toml").read_text(encoding="utf-8")
    (prod / "bad_key.toml").write_text(text.replace("strike = 38.25", "strik = 38.25"),
                                       encoding="utf-8")
    trades = [("HL-0401", "european_call.toml", "2"),
              ("HL-0402", "missing_put.toml", "1"),
              ("HL-0403", "bad_key.toml", "1"),
              ("HL-0404", "zepha_call.toml", "1"),
              ("HL-0405", "asian_call.toml", "3")]
    book = write_book(folder, trades)
    out = folder / "out.csv"
    s1 = price_book(book, market, out, executor="serial", paths=FAST_PATHS)
    rows = by_id(read_rows(out))
    assert set(rows) == {t[0] for t in trades}
    for tid in ("HL-0401", "HL-0405"):
        assert rows[tid]["status"] == "ok" and float(rows[tid]["price"]) > 0
    for tid, name, what in (("HL-0402", "missing_put.toml", "file not found"),
                            ("HL-0403", "bad_key.toml", "strik"),
                            ("HL-0404", "zepha_call.toml", "ZEPHA")):
        r = rows[tid]
        assert r["status"] == "error", r
        assert r["price"] == "" and r["stderr"] == ""
        assert name in r["message"] and what in r["message"], r["message"]
    assert (s1.priced, s1.errors, s1.skipped) == (5, 3, 0)
    assert s1.totals["EUR"] == pytest.approx(
        float(rows["HL-0401"]["price"]) + float(rows["HL-0405"]["price"]), rel=1e-12)

    # fix two of the three files and rerun: they are priced, the ok rows are kept
    shutil.copy(prod / "european_put.toml", prod / "missing_put.toml")
    (prod / "bad_key.toml").write_text(text, encoding="utf-8")
    s2 = price_book(book, market, out, executor="serial", paths=FAST_PATHS)
    again = by_id(read_rows(out))
    assert set(again) == set(rows)
    for tid in ("HL-0401", "HL-0405"):
        assert again[tid] == rows[tid]
    for tid in ("HL-0402", "HL-0403"):
        assert again[tid]["status"] == "ok" and again[tid]["message"] == ""
    # two copies of the same put under two ids: consistent prices
    assert consistent(again["HL-0402"], again["HL-0403"])
    assert again["HL-0404"]["status"] == "error"
    assert (s2.priced, s2.errors, s2.skipped) == (3, 1, 2)


def test_broken_trade_on_the_cluster_does_not_stop_the_book(shared, dask_run):
    rows = by_id(read_rows(dask_run["out"]))
    # the ZEPHA product loads but fails when priced, on a worker
    assert rows["HL-0008"]["status"] == "error"
    assert "zepha_call.toml" in rows["HL-0008"]["message"]
    assert "unknown asset 'ZEPHA'" in rows["HL-0008"]["message"]
    assert rows["HL-0010"]["status"] == "error"
    assert "retired_note.toml" in rows["HL-0010"]["message"]
    assert sum(r["status"] == "ok" for r in rows.values()) == len(BOOK) - len(BROKEN)


# ---------------------------------------------------------------------------------------------
# 5. Bad input: exit 2, one line, no traceback, no output file
# ---------------------------------------------------------------------------------------------
def _book_argv(trades, out, *extra):
    return ["book", trades, "--market", MARKET_FILE, "--out", out, "--paths", FAST_PATHS,
            *extra]


BAD_TRADES = [
    # id, CSV text, expected fragments besides the file name
    ("missing product column", "trade_id,quantity\nHL-0501,1\n", ["missing column", "product"]),
    ("missing trade_id column", "product,quantity\nproducts/european_call.toml,1\n",
     ["missing column", "trade_id"]),
    ("empty file", "", ["is empty", "trade_id, product"]),
    ("repeated trade_id", "trade_id,product\nHL-0501,products/european_call.toml\n"
     "HL-0502,products/european_put.toml\nHL-0501,products/asian_call.toml\n",
     ["line 4", "'HL-0501'", "repeats line 2"]),
    ("non-numeric quantity", "trade_id,product,quantity\nHL-0501,products/european_call.toml,1\n"
     "HL-0502,products/european_put.toml,ten\n", ["line 3", "quantity", "'ten'"]),
    ("infinite quantity", "trade_id,product,quantity\nHL-0501,products/european_call.toml,inf\n",
     ["line 2", "quantity", "'inf'"]),
    ("empty trade_id", "trade_id,product\n,products/european_call.toml\n",
     ["line 2", "trade_id", "empty"]),
]


@pytest.mark.parametrize("text, fragments", [v[1:] for v in BAD_TRADES],
                         ids=[v[0] for v in BAD_TRADES])
def test_bad_trades_file(tmp_path, capsys, text, fragments):
    product_folder(tmp_path)
    trades = tmp_path / "trades.csv"
    trades.write_text(text, encoding="utf-8")
    out = tmp_path / "out.csv"
    code, stdout, err = run(_book_argv(trades, out), capsys)
    assert_bad_input(code, stdout, err, trades, *fragments)
    assert not out.exists()


def test_missing_trades_file(tmp_path, capsys):
    trades, out = tmp_path / "absent.csv", tmp_path / "out.csv"
    code, stdout, err = run(_book_argv(trades, out), capsys)
    assert_bad_input(code, stdout, err, trades, "file not found")
    assert not out.exists()


@pytest.mark.parametrize("extra, fragments", [
    (["--workers", "0"], ["--workers", "positive integer", "'0'"]),
    (["--workers", "two"], ["--workers", "'two'"]),
    (["--workers", "2", "--scheduler", "tcp://127.0.0.1:8786"], ["--scheduler", "--workers"]),
], ids=["workers 0", "workers not a number", "workers and scheduler"])
def test_bad_options(tmp_path, capsys, extra, fragments):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    code, stdout, err = run(_book_argv(book, out, *extra), capsys)
    assert_bad_input(code, stdout, err, *fragments)
    assert not out.exists()


def test_output_with_other_columns_is_refused(tmp_path, capsys):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    original = "product,quote\nproducts/european_call.toml,8.1\n"
    out.write_text(original, encoding="utf-8")
    code, stdout, err = run(_book_argv(book, out, "--workers", "1"), capsys)
    assert_bad_input(code, stdout, err, out, "other columns", "trade_id")
    assert out.read_text(encoding="utf-8") == original  # left untouched


def test_output_without_greeks_refused_with_greeks(shared, tmp_path, capsys):
    out = tmp_path / "out.csv"
    shutil.copy(shared["out"], out)
    before = out.read_bytes()
    code, stdout, err = run(_book_argv(shared["book"], out, "--workers", "1", "--greeks"), capsys)
    assert_bad_input(code, stdout, err, out, "greeks")
    assert out.read_bytes() == before


def test_output_folder_missing(tmp_path, capsys):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "no_such_folder" / "out.csv"
    code, stdout, err = run(_book_argv(book, out, "--workers", "1"), capsys)
    assert_bad_input(code, stdout, err, out, "does not exist")
    assert not out.parent.exists()


def test_output_is_a_folder(tmp_path, capsys):
    book = write_book(tmp_path, FAST[:1])
    code, stdout, err = run(_book_argv(book, tmp_path, "--workers", "1"), capsys)
    assert_bad_input(code, stdout, err, tmp_path, "folder")


@pytest.mark.parametrize("kwargs, fragment", [
    ({"workers": 0}, "workers"),
    ({"workers": True}, "workers"),
    ({"workers": 2, "scheduler": "tcp://127.0.0.1:8786"}, "not both"),
    ({"executor": "threads"}, "unknown executor"),
], ids=["workers 0", "workers bool", "workers and scheduler", "unknown executor"])
def test_bad_arguments_in_python(tmp_path, market, kwargs, fragment):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    with pytest.raises(InputError, match=fragment):
        price_book(book, market, out, **kwargs)
    assert not out.exists()


def test_read_trades(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("\ufefftrade_id , product,quantity\n HL-0601 ,sub/a.toml, 2.5 \n"
                 "HL-0602,b.toml,\n", encoding="utf-8")
    t1, t2 = read_trades(p)
    assert (t1.trade_id, t1.product, t1.quantity, t1.line) == ("HL-0601", "sub/a.toml", 2.5, 2)
    assert t1.path == tmp_path / "sub" / "a.toml"  # relative to the CSV (shared/formats.md)
    assert (t2.trade_id, t2.quantity) == ("HL-0602", 1.0)  # empty quantity: 1


# ---------------------------------------------------------------------------------------------
# 6. Quantity, the summary, --greeks
# ---------------------------------------------------------------------------------------------
def test_quantity_multiplies_price_and_stderr(market, tmp_path):
    prices = {}
    for qty in ("", "1", "-3", "0.25"):
        folder = tmp_path / f"q{qty or 'none'}"
        folder.mkdir()
        book = write_book(folder, [("HL-0701", "european_put.toml", qty)])
        out = folder / "out.csv"
        price_book(book, market, out, executor="serial", paths=FAST_PATHS)
        row = read_rows(out)[0]
        prices[qty] = (float(row["price"]), float(row["stderr"]))
    p1, s1 = prices["1"]
    assert prices[""] == (p1, s1)
    assert prices["-3"] == (-3 * p1, 3 * s1)
    assert prices["0.25"] == (0.25 * p1, 0.25 * s1)


def test_cli_summary_and_greeks(market, tmp_path, capsys):
    trades = [("HL-0801", "european_call.toml", "-3"), ("HL-0802", "asian_call.toml", "2"),
              ("HL-0803", "missing.toml", "1")]
    book = write_book(tmp_path, trades)
    out = tmp_path / "out.csv"
    code, stdout, err = run(_book_argv(book, out, "--workers", "1", "--greeks"), capsys)
    assert code == 0, err
    rows = read_rows(out)
    assert list(rows[0].keys()) == [*COLUMNS, "greeks"]
    rows = by_id(rows)
    total = float(rows["HL-0801"]["price"]) + float(rows["HL-0802"]["price"])
    assert "3 trades" in stdout and "1 with errors" in stdout
    assert f"total value {total:,.4f} EUR" in stdout
    assert f"results in {out}" in stdout
    assert rows["HL-0803"]["greeks"] == ""

    g = json.loads(rows["HL-0801"]["greeks"])
    assert set(g["delta"]) == {"NORDA"}  # the product's only asset
    delta = g["delta"]["NORDA"]
    # reference: Black-Scholes-Merton delta e^{-qT} N(d1) of the demo call (payoffs/
    # european_call.toml on markets/demo.toml): S = 100, K = 105, T = 365/365, r = 3% (the 1Y
    # pillar), q = 2%, vol 25%; times the book quantity -3
    d1 = (math.log(100 / 105) + 0.03 - 0.02 + 0.5 * 0.25**2) / 0.25
    bsm = -3 * math.exp(-0.02) * 0.5 * (1 + math.erf(d1 / math.sqrt(2)))
    assert abs(delta["value"] - bsm) <= 4 * delta["stderr"] + 1e-3, (delta, bsm)
    a = json.loads(rows["HL-0802"]["greeks"])
    assert a["delta"]["NORDA"]["value"] > 0  # a long call on an average: positive delta


def test_summary_totals_equal_sum_of_ok_prices(shared):
    ok = [float(r["price"]) for r in shared["rows"].values() if r["status"] == "ok"]
    s = shared["summary"]
    assert set(s.totals) == {"EUR"}
    assert s.totals["EUR"] == pytest.approx(math.fsum(ok), rel=1e-12)
    assert s.trades == len(BOOK) and s.errors == len(BROKEN)
    assert "total value" in str(s) and "EUR" in str(s)


# ---------------------------------------------------------------------------------------------
# 7. A scheduler nobody answers
# ---------------------------------------------------------------------------------------------
@pytest.fixture
def short_connect(monkeypatch):
    """The book waits 10 s for a scheduler; cut that to 1 s so the test stays quick."""
    distributed = pytest.importorskip("dask.distributed")
    real = distributed.Client

    class QuickClient(real):
        def __init__(self, *args, **kwargs):
            if "timeout" in kwargs:
                kwargs["timeout"] = "1s"
            super().__init__(*args, **kwargs)

    monkeypatch.setattr(distributed, "Client", QuickClient)


def test_scheduler_where_nothing_listens(tmp_path, capsys, short_connect):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    t0 = time.perf_counter()
    code, stdout, err = run(_book_argv(book, out, "--scheduler", "tcp://127.0.0.1:1"), capsys)
    assert_bad_input(code, stdout, err, "--scheduler", "tcp://127.0.0.1:1")
    assert time.perf_counter() - t0 < 15


def test_scheduler_address_malformed(tmp_path, capsys):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    code, stdout, err = run(_book_argv(book, out, "--scheduler", "not-an-address"), capsys)
    assert_bad_input(code, stdout, err, "--scheduler", "not-an-address")


def test_scheduler_unreachable_leaves_no_output(tmp_path, capsys):
    book = write_book(tmp_path, FAST[:1])
    out = tmp_path / "out.csv"
    code, _, _ = run(_book_argv(book, out, "--scheduler", "not-an-address"), capsys)
    assert code == 2
    assert not out.exists()


# ---------------------------------------------------------------------------------------------
# 8. Without Dask
# ---------------------------------------------------------------------------------------------
def test_without_dask_says_how_to_install(market, tmp_path, monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import fails as if absent
    book = write_book(tmp_path, FAST[:1])
    with pytest.raises(InputError, match=r"fairpath\[cluster\]"):
        price_book(book, market, tmp_path / "out.csv", executor="dask", workers=1)
    code, stdout, err = run(_book_argv(book, tmp_path / "cli.csv", "--workers", "1"), capsys)
    assert_bad_input(code, stdout, err, "fairpath[cluster]", "pip install")
    # the serial executor needs no Dask
    price_book(book, market, tmp_path / "serial.csv", executor="serial", paths=FAST_PATHS)
    assert read_rows(tmp_path / "serial.csv")[0]["status"] == "ok"


# ---------------------------------------------------------------------------------------------
# A shared cluster: two books priced at once
# ---------------------------------------------------------------------------------------------
def test_two_runs_at_once_on_one_cluster_keep_their_own_numbers(cluster, market, tmp_path):
    book = write_book(tmp_path, FAST)
    ref = {}
    for seed in (1, 2):
        ref[seed] = tmp_path / f"serial_{seed}.csv"
        price_book(book, market, ref[seed], executor="serial", paths=FAST_PATHS, seed=seed)
    second_done = threading.Event()
    failures = []

    def hold(row):  # run 1 keeps its futures on the cluster until run 2 has finished
        second_done.wait(timeout=30)

    def first():
        try:
            price_book(book, market, tmp_path / "run_1.csv", scheduler=cluster.scheduler_address,
                       paths=FAST_PATHS, seed=1, on_row=hold)
        except Exception as exc:  # noqa: BLE001 - reported below
            failures.append(exc)

    t = threading.Thread(target=first)
    t.start()
    try:
        deadline = time.monotonic() + 30
        while data_lines(tmp_path / "run_1.csv") < 1 and time.monotonic() < deadline:
            time.sleep(0.01)
        price_book(book, market, tmp_path / "run_2.csv", scheduler=cluster.scheduler_address,
                   paths=FAST_PATHS, seed=2)
    finally:
        second_done.set()
        t.join(timeout=60)
    assert not failures, failures
    for seed in (1, 2):
        got = by_id(read_rows(tmp_path / f"run_{seed}.csv"))
        assert got == by_id(read_rows(ref[seed])), f"run with seed {seed}"

"""A whole book at once: many trades priced on one machine or on a Dask cluster, resumably.

Input: a CSV with columns ``trade_id,product`` and an optional ``quantity`` (product paths are
relative to the CSV). Output: a CSV with columns
``trade_id,product,price,stderr,currency,status,message`` (``status`` is ``ok`` or ``error``;
with Greeks, a ``greeks`` column holds them as compact JSON), one row appended and flushed to
disk as each trade finishes.

* **Deterministic.** A trade's random numbers come from the run's seed and its ``trade_id``
  (``SeedSequence(seed, spawn_key=(h, ...))``, ``h`` from a SHA-256 of the id), so its price does
  not depend on the number of workers, the order in which trades finish, or which other trades
  share the book.
* **Resumable.** Rerunning with the same output file keeps the rows already ``ok`` and prices
  the rest (errors are tried again: a fixed file gets its price). A row cut short by a crash is
  dropped and redone; the file is rewritten whole (to a temporary file, then renamed) before
  new rows are appended, so it is never left half-written. A side file ``OUT.run.json`` keeps
  a digest of the market and settings: a rerun with others is refused rather than mixing
  prices of two runs.
* **Robust.** A trade whose product file is bad gets ``status = error`` with the message and
  does not stop the others; on a cluster a lost worker's trades are retried by Dask.
* **Where.** By default a local Dask cluster of processes (one per core, one thread each) is
  started and stopped; ``scheduler`` connects to a running cluster instead (the workers need
  fairpath installed; products and the market travel with the tasks, so the workers need no
  access to the files). ``executor="serial"`` prices in this process (no Dask).

Dask is an optional dependency: ``pip install "fairpath[cluster]"``.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from fairpath.errors import FairpathError, InputError
from fairpath.estimate import DEFAULT_PATHS, price
from fairpath.inputs import read_csv_table
from fairpath.market import Market
from fairpath.products.loader import load_product
from fairpath.sampling import DEFAULT_REPLICATES, normalize_seed

COLUMNS = ("trade_id", "product", "price", "stderr", "currency", "status", "message")
#: Retries of a trade whose worker was lost (Dask reschedules it on another worker).
RETRIES = 2
#: How long to try reaching a running scheduler.
SCHEDULER_TIMEOUT = "10s"
INSTALL_HINT = ('the book runs on Dask, an optional dependency: pip install "fairpath[cluster]" '
                '(or pip install "dask[distributed]")')


@dataclass(frozen=True, slots=True)
class Trade:
    trade_id: str
    product: str  # as written in the CSV
    path: Path
    quantity: float
    line: int


@dataclass(frozen=True, slots=True)
class BookSummary:
    """What a book run did: counts, total value per currency, time, the output file."""

    trades: int
    priced: int
    skipped: int
    errors: int
    totals: dict[str, float]
    seconds: float
    out: str
    rows: list[dict] = field(default_factory=list, repr=False)

    def __str__(self) -> str:
        lines = [f"{self.trades} trades: {self.priced} done now ({self.errors} with errors), "
                 f"{self.skipped} kept from {self.out}; {self.seconds:.1f} s"]
        for cur, total in sorted(self.totals.items()):
            lines.append(f"total value {total:,.4f} {cur}")
        return "\n".join(lines)


def trade_stream(trade_id: str) -> tuple[int, int]:
    """The key a trade's random streams are spawned under: two 32-bit words of SHA-256 of its
    id (stable across processes and machines, unlike Python's ``hash``)."""
    digest = hashlib.sha256(trade_id.encode("utf-8")).digest()
    return (int.from_bytes(digest[:4], "big"), int.from_bytes(digest[4:8], "big"))


def read_trades(path: str | Path) -> list[Trade]:
    """Rows of a trades CSV; a missing or unknown column or a repeated trade id is refused."""
    p = Path(path)
    trades, seen = [], {}
    for n, row in read_csv_table(path, ("trade_id", "product"), ("quantity",)):
        tid = row.get("trade_id", "")
        if not tid:
            raise InputError("trade_id: empty", source=f"{path} line {n}")
        if tid in seen:
            raise InputError(f"trade_id {tid!r} repeats line {seen[tid]}",
                             source=f"{path} line {n}")
        seen[tid] = n
        qty_text = row.get("quantity", "")
        qty = 1.0
        if qty_text:
            try:
                qty = float(qty_text)
            except ValueError:
                qty = math.nan
            if not math.isfinite(qty):
                raise InputError(f"quantity: not a finite number: {qty_text!r}",
                                 source=f"{path} line {n}")
        prod = row.get("product", "")
        trades.append(Trade(tid, prod, p.parent / prod, qty, n))
    return trades


def _read_done(out: Path, extra: tuple[str, ...]) -> list[dict]:
    """The ``ok`` rows of an existing output file (a row cut short by a crash is dropped)."""
    try:
        text = out.read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the existing output: {exc}", source=str(out)) from None
    if not text.strip():
        return []
    if not text.endswith("\n"):  # the last row was being written when the run stopped
        text = text[: text.rfind("\n") + 1]
    try:
        reader = csv.DictReader(io.StringIO(text))
        rows = list(reader)
    except csv.Error as exc:
        raise InputError(f"the existing output is not valid CSV: {exc}", source=str(out)) \
            from None
    want = list(COLUMNS + extra)
    if (reader.fieldnames or []) != want:
        raise InputError(f"exists with other columns ({', '.join(reader.fieldnames or [])}); "
                         f"expected {', '.join(want)}: choose another --out or remove it",
                         source=str(out))
    return [r for r in rows if r.get("status") == "ok" and None not in r]


def _rewrite(out: Path, rows: list[dict], columns: tuple[str, ...]) -> None:
    """Replace ``out`` by a file holding ``rows`` (whole or not at all)."""
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=out.parent, prefix=f".{out.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=list(columns), lineterminator="\n")
            w.writeheader()
            w.writerows(rows)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


class _Appender:
    """Appends one complete CSV row at a time, flushed and synced to disk."""

    def __init__(self, out: Path, columns: tuple[str, ...]):
        self.fh = open(out, "a", encoding="utf-8", newline="")  # noqa: SIM115 - held open
        self.columns = columns

    def write(self, row: dict) -> None:
        buf = io.StringIO()
        csv.DictWriter(buf, fieldnames=list(self.columns), lineterminator="\n").writerow(row)
        self.fh.write(buf.getvalue())  # one write per row
        self.fh.flush()
        os.fsync(self.fh.fileno())

    def close(self) -> None:
        self.fh.close()


def price_trade(trade_id: str, product, market: Market, quantity: float, settings: dict,
                want_greeks: bool = False) -> dict:
    """Price one trade (runs on a worker): a result row, ``status`` ok or error."""
    row = {"trade_id": trade_id, "status": "ok", "message": ""}
    try:
        stream = trade_stream(trade_id)
        res = price(product, market, stream=stream, **settings)
        row.update(price=res.price * quantity, stderr=res.stderr * abs(quantity),
                   currency=res.currency)
        if want_greeks:
            from fairpath.greeks import greeks

            g = greeks(product, market, stream=stream,
                       **{k: v for k, v in settings.items()
                          if k in ("paths", "sampler", "seed", "replicates",
                                   "steps_per_day", "daily_closes")})
            row["greeks"] = json.dumps({k: _scaled(v, quantity)
                                        for k, v in g.to_dict()["greeks"].items()},
                                       separators=(",", ":"))
    except (InputError, FairpathError, ValueError) as exc:
        row.update(price="", stderr="", currency=market.currency, status="error",
                   message=str(exc))
    return row


def _scaled(g: dict, q: float) -> dict:
    if "value" in g:
        return {"value": g["value"] * q, "stderr": g["stderr"] * abs(q)}
    return {k: _scaled(v, q) for k, v in g.items()}


def price_book(trades_csv: str | Path, market: Market, out: str | Path, *,
               workers: int | None = None, scheduler: str | None = None,
               executor: str = "dask", greeks: bool = False, paths: int = DEFAULT_PATHS,
               sampler: str = "sobol", seed: int | None = None,
               replicates: int = DEFAULT_REPLICATES, progress: bool = False,
               steps_per_day: int = 1, daily_closes: bool = False,
               on_row: Callable[[dict], None] | None = None) -> BookSummary:
    """Price every trade of a trades CSV into ``out`` (see the module notes).

    Parameters
    ----------
    workers : int, optional
        Processes of the local Dask cluster (default: one per core).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``) instead of a local cluster.
    executor : {"dask", "serial"}
        ``serial`` prices in this process, one trade after another (no Dask needed).
    greeks : bool
        Also compute each trade's Greeks (a ``greeks`` column of JSON).

    Examples
    --------
    >>> import fairpath as fp
    >>> summary = fp.price_book("quotes/book.csv", fp.load_market("markets/demo.toml"),
    ...                         "results.csv")  # doctest: +SKIP
    """
    t0 = time.perf_counter()
    if executor not in ("dask", "serial"):
        raise InputError(f"unknown executor {executor!r}; known: dask, serial", key="executor")
    if workers is not None and scheduler is not None:
        raise InputError("give either workers (a local cluster) or a scheduler address, not "
                         "both", key="--workers")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"must be a positive integer, got {workers!r}", key="--workers")
    seed = normalize_seed(seed)
    trades = read_trades(trades_csv)
    out = Path(out)
    if out.is_dir():
        raise InputError("is a folder, not a file", source=str(out))
    if not out.parent.exists():
        raise InputError(f"the folder {out.parent} does not exist", source=str(out))
    extra = ("greeks",) if greeks else ()
    columns = COLUMNS + extra
    ids = {t.trade_id for t in trades}
    settings = dict(paths=paths, sampler=sampler, seed=seed, replicates=replicates,
                    steps_per_day=steps_per_day, daily_closes=daily_closes)
    stamp = _fingerprint(market, settings, greeks)
    meta = out.with_name(out.name + ".run.json")
    done = {r["trade_id"]: r for r in _read_done(out, extra) if r["trade_id"] in ids}
    if done and meta.exists():
        try:
            before = json.loads(meta.read_text(encoding="utf-8")).get("inputs")
        except (OSError, ValueError):
            before = None
        if before is not None and before != stamp:
            raise InputError("holds results priced with another market or other settings "
                             "(seed, paths, sampler, Greeks); use another --out or remove it "
                             f"and {meta.name}", source=str(out))
    todo = [t for t in trades if t.trade_id not in done]
    client = cluster = None
    if executor == "dask" and todo:
        client, cluster = _open_client(workers, scheduler)  # before anything is written
    _rewrite(out, list(done.values()), columns)
    _write_meta(meta, stamp)
    rows: list[dict] = []
    appender = _Appender(out, columns)
    bar = None
    if progress and todo:
        from tqdm.auto import tqdm
        bar = tqdm(total=len(todo), unit="trade", desc="book", leave=True)

    def record(row: dict, trade: Trade) -> None:
        row = {**row, "product": trade.product}
        for k in ("price", "stderr"):
            if isinstance(row.get(k), float):
                row[k] = repr(row[k])
        appender.write(row)
        rows.append(row)
        if on_row is not None:
            on_row(row)
        if bar is not None:
            bar.update(1)

    try:
        # load the products here: a bad file is that trade's error, and the workers need no
        # access to the files
        ready = []
        for t in todo:
            try:
                if not t.product:
                    raise InputError("product: empty", source=f"{trades_csv} line {t.line}")
                ready.append((t, load_product(t.path)))
            except (InputError, FairpathError) as exc:
                record({"trade_id": t.trade_id, "price": "", "stderr": "",
                        "currency": market.currency, "status": "error",
                        "message": str(exc)}, t)
        if client is None:
            for t, prod in ready:
                record(price_trade(t.trade_id, prod, market, t.quantity, settings, greeks), t)
        elif ready:
            _run_dask(client, ready, market, settings, greeks, record)
    finally:
        appender.close()
        if bar is not None:
            bar.close()
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    every = list(done.values()) + rows
    order = {t.trade_id: i for i, t in enumerate(trades)}
    totals: dict[str, list[float]] = {}
    for r in sorted(every, key=lambda r: order.get(r["trade_id"], -1)):
        if r.get("status") == "ok":
            totals.setdefault(r["currency"], []).append(float(r["price"]))
    return BookSummary(len(trades), len(rows), len(done),
                       sum(r.get("status") == "error" for r in rows),
                       {k: math.fsum(v) for k, v in totals.items()},
                       time.perf_counter() - t0, str(out), every)


def _open_client(workers, scheduler):
    """A Dask client: on a new local cluster of processes, or on a running scheduler."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise InputError(INSTALL_HINT, key="book") from None
    if scheduler is None:
        n = workers or os.cpu_count() or 1
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               dashboard_address=None, silence_logs=40)
        return Client(cluster), cluster
    try:
        return Client(scheduler, timeout=SCHEDULER_TIMEOUT), None
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler: {exc}", key="--scheduler") \
            from None


def _run_dask(client, ready, market, settings, greeks, record) -> None:
    from dask.distributed import as_completed

    # one fairpath thread per task: the cluster's workers share the cores
    one = {**settings, "threads": 1}
    m = client.scatter(market, broadcast=True)
    futures = {}
    for t, prod in ready:
        # Dask names each task uniquely (pure=False): two books on one cluster never share
        # results, whatever their trade ids
        f = client.submit(price_trade, t.trade_id, prod, m, t.quantity, one, greeks,
                          retries=RETRIES, pure=False)
        futures[f] = t
    for f in as_completed(futures):
        t = futures[f]
        try:
            row = f.result()
        except Exception as exc:  # noqa: BLE001 - a task that failed for good
            row = {"trade_id": t.trade_id, "price": "", "stderr": "",
                   "currency": market.currency, "status": "error",
                   "message": f"failed on the cluster: {type(exc).__name__}: {exc}"}
        record(row, t)


def _fingerprint(market: Market, settings: dict, greeks: bool) -> str:
    """A digest of what a book's rows depend on besides the trades (market, settings)."""
    text = repr((market, sorted(settings.items()), greeks))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _write_meta(meta: Path, stamp: str) -> None:
    fd, tmp = tempfile.mkstemp(dir=meta.parent, prefix=f".{meta.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump({"inputs": stamp, "note": "fairpath book: the inputs these results were "
                       "priced with (a rerun with other inputs is refused)"}, fh)
        os.replace(tmp, meta)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise

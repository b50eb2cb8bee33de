"""The scenario grid: a product's value over a grid of spot and vol moves (see
docs/scenarios.md).

Every cell is a bumped market: each spot of the product's assets times ``1 + s`` (a relative
move of every spot together) and each vol of those assets moved by ``v`` (an absolute move of
every pillar, or of every quote of a surface, which is re-attached and re-checked as loading a
bumped file would; :mod:`fairpath.bumps`). Levels the trade fixes from today's spots (a
basket's or a note's initial levels) stay fixed (:meth:`Product.struck`).

All cells are simulated from the same random numbers (common random numbers: the same Sobol
points and scramblings, or the same PCG64 streams) on the base market's grid, without control
variates, so the base cell is the plain Monte Carlo price (``price(..., control=False)`` at the
same seed and paths). The change of a cell from the base is the combination ``cell - base`` of
the cells' per-block moments, and its standard error is the spread of that difference itself:
across the Sobol scramblings, or ``w' Cov w / N`` for pseudo-random numbers. On common numbers
it is far smaller than either value's own error.

The cells go through :func:`fairpath.engine.run` in one run when there are at most
:data:`RUN_CELLS` of them; a larger grid is simulated in several runs of that many cells, each
with the base market first. Every run uses the same settings, so it draws the same numbers on
the same grid: a cell's paths are bit for bit those of one big run, and its change is taken
against the base of its own run. (One run per grid would hold per-block cross-products of
every pair of cells, which grow with the square of the cell count.)
"""

from __future__ import annotations

import dataclasses
import html
import json
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from fairpath import bumps as bump
from fairpath.engine import DEFAULT_PATHS, Settings, prepare, run
from fairpath.errors import InputError
from fairpath.market import Market
from fairpath.products.base import Product
from fairpath.products.currency import settle
from fairpath.results import CAUTION
from fairpath.sampling import DEFAULT_REPLICATES

#: Default grids: spot moves of -30% to +30% in steps of 10%, vol moves of -5 to +5 vol points.
DEFAULT_SPOT = "-0.3:0.3:0.1"
DEFAULT_VOL = "-0.05:0.05:0.05"
#: Points per axis at most (the base move 0 included).
MAX_POINTS = 41
#: Shifts are rounded to this many decimals (no floating drift: -0.3 + 3 * 0.1 is 0).
DECIMALS = 10
#: Cells simulated in one engine run at most (see the module notes).
RUN_CELLS = 64
#: Extensions ``--plot`` writes (matplotlib's own writers).
PICTURE_FORMATS = ("png", "pdf", "svg", "jpg", "jpeg", "tif", "tiff", "eps", "ps")


# ---------------------------------------------------------------------------------------------
# Grids of shifts
# ---------------------------------------------------------------------------------------------
def parse_grid(spec: str, key: str) -> tuple[tuple[float, ...], list[str]]:
    """The points of an ``A:B:STEP`` spec (``A, A + STEP, ...`` up to ``B``), each rounded to
    :data:`DECIMALS` decimals, and notes; :class:`InputError` naming ``key`` otherwise."""
    text = str(spec).strip()
    parts = text.split(":")
    bad = f"expected A:B:STEP (e.g. {DEFAULT_SPOT if key == '--spot' else DEFAULT_VOL}), " \
          f"got {spec!r}"
    if len(parts) != 3:
        raise InputError(bad, key=key)
    try:
        a, b, step = (float(p) for p in parts)
    except ValueError:
        raise InputError(bad, key=key) from None
    if not all(math.isfinite(x) for x in (a, b, step)):
        raise InputError(f"expected finite numbers in A:B:STEP, got {spec!r}", key=key)
    if not step > 0:
        raise InputError(f"the step must be positive, got {step:g} in {spec!r}", key=key)
    if a > b:
        raise InputError(f"the start {a:g} is above the end {b:g} in {spec!r}", key=key)
    span = (b - a) / step
    if not span < MAX_POINTS:  # also catches an overflow to inf
        raise InputError(f"too many points in {spec!r}: at most {MAX_POINTS} per axis",
                         key=key)
    n = math.floor(span + 1e-9) + 1
    pts = tuple(round(a + i * step, DECIMALS) + 0.0 for i in range(n))  # + 0.0: no -0.0
    if len(set(pts)) < len(pts):
        raise InputError(f"the step {step:g} is below the grid's resolution of 1e-{DECIMALS}",
                         key=key)
    notes = []
    if abs(pts[-1] - b) > 1e-9 * max(1.0, abs(b)):
        notes.append(f"{key} {text}: the end {b:g} is not a whole number of steps from the "
                     f"start, so the last point is {pts[-1]:g}")
    return pts, notes


def shift_list(shifts, key: str) -> tuple[tuple[float, ...], list[str]]:
    """Checked shifts, sorted, with the base move 0 added if missing (and said in a note).

    ``shifts`` is an ``A:B:STEP`` string or a sequence of numbers; ``key`` is ``"--spot"``
    (relative moves, each above -1) or ``"--vol"`` (absolute moves)."""
    if isinstance(shifts, str):
        pts, notes = parse_grid(shifts, key)
    else:
        try:
            raw = list(shifts)
        except TypeError:
            raise InputError(f"expected A:B:STEP or a list of numbers, got {shifts!r}",
                             key=key) from None
        vals = []
        for x in raw:
            if isinstance(x, bool) or not isinstance(x, int | float | np.integer | np.floating) \
                    or not math.isfinite(float(x)):
                raise InputError(f"expected finite numbers, got {x!r}", key=key)
            vals.append(round(float(x), DECIMALS) + 0.0)
        if not vals:
            raise InputError("no shifts given", key=key)
        if len(set(vals)) < len(vals):
            dup = sorted({v for v in vals if vals.count(v) > 1})
            raise InputError(f"repeated shifts: {', '.join(f'{v:g}' for v in dup)}", key=key)
        pts, notes = tuple(sorted(vals)), []
    if key == "--spot" and not pts[0] > -1:
        raise InputError(f"a spot move of {pts[0]:g} leaves a non-positive spot (spot moves "
                         "are relative and must be above -1)", key=key)
    if 0.0 not in pts:
        pts = tuple(sorted((*pts, 0.0)))
        notes.append(f"{key}: the base move 0 is not on the grid given, so it was added "
                     "(every grid holds the base cell)")
    if len(pts) > MAX_POINTS:
        raise InputError(f"too many points: {len(pts)} (at most {MAX_POINTS} per axis, the "
                         "base 0 included)", key=key)
    return pts, notes


# ---------------------------------------------------------------------------------------------
# The result
# ---------------------------------------------------------------------------------------------
def _pct(x: float) -> str:
    """A move as a signed percentage (``0.1`` -> ``+10%``, ``0`` -> ``0%``)."""
    v = round(100.0 * x, DECIMALS - 2) + 0.0
    return "0%" if v == 0 else f"{v:+g}%"


def _pts(x: float) -> str:
    """An absolute vol move in vol points (``0.05`` -> ``+5 pts``)."""
    v = round(100.0 * x, DECIMALS - 2) + 0.0
    return "0 pts" if v == 0 else f"{v:+g} pts"


@dataclass(frozen=True, slots=True)
class ScenarioGrid:
    """Values over a grid of spot and vol moves, on common random numbers.

    ``values[i][j]`` is the value with every vol moved by ``vol_shifts[i]`` (absolute) and
    every spot moved by ``spot_shifts[j]`` (relative); ``changes`` are ``values - base`` with
    their own standard errors (the spread of the difference on common numbers). In a notebook
    it renders as a table; :meth:`plot` draws the changes as a heatmap.
    """

    base: float
    base_stderr: float
    spot_shifts: tuple[float, ...]
    vol_shifts: tuple[float, ...]
    values: tuple[tuple[float, ...], ...]
    stderr: tuple[tuple[float, ...], ...]
    changes: tuple[tuple[float, ...], ...]
    change_stderr: tuple[tuple[float, ...], ...]
    currency: str
    paths: int
    sampler: str
    seed: int
    notes: tuple[str, ...] = ()
    product: str = ""

    @property
    def base_index(self) -> tuple[int, int]:
        """``(row, column)`` of the base cell (no move)."""
        return self.vol_shifts.index(0.0), self.spot_shifts.index(0.0)

    def to_dict(self) -> dict:
        """The JSON contract of ``fairpath scenarios --json`` (contract keys first)."""
        return {"base": self.base, "spot_shifts": list(self.spot_shifts),
                "vol_shifts": list(self.vol_shifts),
                "values": [list(r) for r in self.values],
                "stderr": [list(r) for r in self.stderr],
                "changes": [list(r) for r in self.changes],
                "change_stderr": [list(r) for r in self.change_stderr],
                "base_stderr": self.base_stderr, "currency": self.currency,
                "paths": self.paths, "sampler": self.sampler, "seed": self.seed,
                "product": self.product, "notes": list(self.notes)}

    def to_json(self) -> str:
        return json.dumps(self.to_dict())

    def __str__(self) -> str:
        head = (f"{self.product}: " if self.product else "") + (
            f"value over spot and vol moves ({self.currency}); base {self.base:.6f} "
            f"(stderr {self.base_stderr:.6f}); {self.paths:,} {self.sampler} paths, seed "
            f"{self.seed}, every cell on the same random numbers")
        corner = "vol \\ spot"
        w = max(12, *(len(f"{x:.4f}") + 2 for r in self.values for x in r))
        rows = [head, "", f"{corner:<11}" + "".join(f"{_pct(s):>{w}}" for s in self.spot_shifts)]
        bi, bj = self.base_index
        for i, (v, row) in enumerate(zip(self.vol_shifts, self.values, strict=True)):
            cells = "".join(f"{x:>{w - 1}.4f}" + ("*" if (i, j) == (bi, bj) else " ")
                            for j, x in enumerate(row))
            rows.append(f"{_pts(v):<11}{cells}")
        rows.append("")
        rows.append("* the base cell. Rows: absolute vol moves (vol points, every vol of the "
                    "product's assets); columns: relative moves of every spot together.")
        rows.append(f"standard error of a value up to {max(map(max, self.stderr)):.4g}; of a "
                    f"change from the base up to {max(map(max, self.change_stderr)):.4g} "
                    "(common random numbers)")
        rows.extend(f"note: {n}" for n in self.notes)
        rows.append("")
        rows.append(CAUTION)
        return "\n".join(rows)

    def _repr_html_(self) -> str:
        bi, bj = self.base_index
        head = "".join(f"<th>{html.escape(_pct(s))}</th>" for s in self.spot_shifts)
        body = []
        for i, v in enumerate(self.vol_shifts):
            cells = []
            for j in range(len(self.spot_shifts)):
                txt = (f"{self.values[i][j]:.4f}<br><small>{self.changes[i][j]:+.4f} "
                       f"({self.change_stderr[i][j]:.2g})</small>")
                style = " style='border:2px solid #222;font-weight:bold'" \
                    if (i, j) == (bi, bj) else ""
                cells.append(f"<td{style}>{txt}</td>")
            body.append(f"<tr><th>{html.escape(_pts(v))}</th>{''.join(cells)}</tr>")
        title = html.escape(f"{self.product}: " if self.product else "")
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (f"<table><caption>{title}value over spot moves (columns) and vol moves (rows), "
                f"{html.escape(self.currency)}; base {self.base:.6f} (stderr "
                f"{self.base_stderr:.2g}); in small type the change from the base (its "
                f"standard error); {self.paths:,} {html.escape(self.sampler)} paths, seed "
                f"{self.seed}, common random numbers</caption>"
                f"<tr><th>vol \\ spot</th>{head}</tr>{''.join(body)}</table>"
                + (f"<ul>{notes}</ul>" if notes else "")
                + f"<p><small>{html.escape(CAUTION)}</small></p>")

    def plot(self, ax=None):
        """A heatmap of the change of value from the base cell (boxed), with a colour bar;
        returns a matplotlib figure."""
        from matplotlib.colors import TwoSlopeNorm
        from matplotlib.patches import Rectangle

        from fairpath.plots import new_axes

        n_v, n_s = len(self.vol_shifts), len(self.spot_shifts)
        fig, ax = new_axes(ax, figsize=(min(12.0, max(6.0, 0.7 * n_s + 2.5)),
                                        min(8.0, max(3.5, 0.5 * n_v + 2.0))))
        ch = np.array(self.changes, dtype=float)
        top = float(np.max(np.abs(ch))) or 1.0
        img = ax.imshow(ch, cmap="RdBu", norm=TwoSlopeNorm(0.0, -top, top), origin="lower",
                        aspect="auto", interpolation="nearest")
        bar = fig.colorbar(img, ax=ax)
        bar.set_label(f"value change from the base ({self.currency})")
        bi, bj = self.base_index
        ax.add_patch(Rectangle((bj - 0.5, bi - 0.5), 1, 1, fill=False, edgecolor="black",
                               linewidth=2.0))
        if n_s * n_v <= 121:  # small grids: the change written in each cell
            for i in range(n_v):
                for j in range(n_s):
                    x = ch[i, j]
                    ax.text(j, i, f"{x:+.3g}" if x else "0", ha="center", va="center",
                            fontsize=7, color="white" if abs(x) > 0.6 * top else "black")

        def ticks(n, base):
            step = max(1, math.ceil(n / 11))
            return sorted({*range(base % step, n, step), base})

        xs, ys = ticks(n_s, bj), ticks(n_v, bi)
        ax.set_xticks(xs, [_pct(self.spot_shifts[j]) for j in xs])
        ax.set_yticks(ys, [_pct(self.vol_shifts[i]) for i in ys])
        ax.set_xlabel("spot move (% of every spot)")
        ax.set_ylabel("vol move (absolute, vol points in %)")
        title = f"{self.product}: " if self.product else ""
        ax.set_title(f"{title}value change over spot and vol moves\nbase {self.base:.4g} "
                     f"{self.currency} (boxed cell); model estimate, {self.paths:,} paths, "
                     "common random numbers", fontsize=10)
        return fig


# ---------------------------------------------------------------------------------------------
# Scenario markets
# ---------------------------------------------------------------------------------------------
def _vol_moved(market: Market, names: tuple[str, ...], v: float) -> Market:
    """Every vol of ``names`` moved by ``v`` (refusals name ``--vol``)."""
    out = market
    for n in names:
        low = bump.lowest_vol(market, n)
        if not low + v > 0:
            raise InputError(f"a vol move of {v:+g} makes {n}'s vol non-positive (its lowest "
                             f"vol is {low:g}, so moves must be above {-low:g})", key="--vol")
        try:
            out = bump.vol(out, n, v)
        except InputError as exc:
            raise InputError(f"a vol move of {v:+g} is refused for {n}: {exc.problem}",
                             key="--vol") from None
    return out


def _spot_moved(market: Market, names: tuple[str, ...], s: float) -> Market:
    """Every spot of ``names`` times ``1 + s`` (refusals name ``--spot``)."""
    out = market
    for n in names:
        try:
            out = bump.spot(out, n, 1.0 + s)
        except InputError as exc:
            raise InputError(f"a spot move of {s:+g} is refused for {n}: {exc.problem}",
                             key="--spot") from None
    return out


# ---------------------------------------------------------------------------------------------
# Entry point
# ---------------------------------------------------------------------------------------------
def scenarios(product: Product, market: Market, *, spot_shifts=DEFAULT_SPOT,
              vol_shifts=DEFAULT_VOL, paths: int = DEFAULT_PATHS, sampler: str = "sobol",
              seed: int | None = None, replicates: int = DEFAULT_REPLICATES,
              steps_per_day: int = 1, daily_closes: bool = False, threads: int | None = None,
              source: str | None = None,
              progress: bool = False) -> ScenarioGrid:
    """The value of ``product`` over a grid of spot and vol moves, every cell on the same
    random numbers.

    Parameters
    ----------
    spot_shifts : str or sequence of float
        Relative moves of every spot of the product's assets together (each above -1), as
        ``"A:B:STEP"`` or a list; default ``"-0.3:0.3:0.1"``.
    vol_shifts : str or sequence of float
        Absolute moves of every vol (every pillar, every quote of a surface) of those assets;
        default ``"-0.05:0.05:0.05"``.

    Other arguments as for :func:`fairpath.price` (no control variates: each cell is a plain
    average on the common numbers). The base move 0 is added to an axis that lacks it, with a
    note; at most 41 points per axis.

    Examples
    --------
    >>> import fairpath as fp
    >>> from datetime import date
    >>> m = fp.Market(date(2026, 12, 1), "EUR", fp.DiscountCurve.flat(0.05),
    ...               (fp.Asset("NORDA", 100.0, fp.VolCurve.flat(0.2)),))
    >>> call = fp.European(asset="NORDA", right="call", strike=100.0, expiry=date(2027, 12, 1))
    >>> g = fp.scenarios(call, m, spot_shifts=[-0.1, 0.0, 0.1], vol_shifts=[0.0], paths=4096)
    >>> g.changes[0][0] < 0 < g.changes[0][2]
    True
    """
    spot_pts, spot_notes = shift_list(spot_shifts, "--spot")
    vol_pts, vol_notes = shift_list(vol_shifts, "--vol")
    source = source or product.source
    settings = Settings(paths=paths, sampler=sampler, seed=seed, replicates=replicates,
                        control=False, threads=threads, steps_per_day=steps_per_day,
                        daily_closes=daily_closes,
                        progress=progress)
    settings.make_sampler()  # refuse bad sampler settings before anything else
    product.check(market, source)
    product = settle([product.struck(market)], market, source)[0]
    market, div_notes = prepare([product], market, source)
    names = product.underlyings()

    # every cell's market, built (and refused) before any simulation
    cells: list[tuple[int, int, Market]] = []
    for i, v in enumerate(vol_pts):
        mv = market if v == 0 else _vol_moved(market, names, v)
        for j, s in enumerate(spot_pts):
            if v == 0 and s == 0:
                continue  # the base: the market itself, first in every run
            cells.append((i, j, mv if s == 0 else _spot_moved(mv, names, s)))

    shape = (len(vol_pts), len(spot_pts))
    values, errs = np.zeros(shape), np.zeros(shape)
    changes, change_errs = np.zeros(shape), np.zeros(shape)
    bi, bj = vol_pts.index(0.0), spot_pts.index(0.0)
    chunks = [cells[k:k + RUN_CELLS] for k in range(0, len(cells), RUN_CELLS)] or [[]]
    run_notes: list[str] = []
    res = None
    bar = None
    if progress and len(chunks) > 1:  # one bar over the runs; none per run
        from tqdm.auto import tqdm

        bar = tqdm(total=len(cells) + 1, unit="cell", leave=False,
                   desc=f"{product.label()[:30]} grid")
        settings = dataclasses.replace(settings, progress=False)
    try:
        for chunk in chunks:
            res = run([product], [market, *(m for _, _, m in chunk)], settings, source=source)
            if res.sim.steps == 0:
                raise InputError("nothing left to simulate: every level the payoff needs is "
                                 "known, so every cell is the same fixed amount",
                                 source=source)
            if not run_notes:
                run_notes = list(res.notes)
            combo = res.weighted(0)
            values[bi, bj], errs[bi, bj] = combo({0: 1.0})
            for k, (i, j, _) in enumerate(chunk, start=1):
                values[i, j], errs[i, j] = combo({k: 1.0})
                changes[i, j], change_errs[i, j] = combo({k: 1.0, 0: -1.0})
            if bar is not None:
                bar.update(len(chunk) + (1 if chunk is chunks[0] else 0))
    finally:
        if bar is not None:
            bar.close()
    bad = ~np.isfinite(values) | ~np.isfinite(errs)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"the value under a spot move of {spot_pts[j]:g} and a vol move of "
                         f"{vol_pts[i]:g} is not a finite number (check the quantity or "
                         "notional)", source=source)
    notes = [*spot_notes, *vol_notes, *div_notes, *run_notes]
    if len(chunks) > 1:
        notes.append(f"{len(cells) + 1} cells simulated in {len(chunks)} runs of the same "
                     "random numbers, each with the base cell")
    if product.payoff_jumps:
        notes.append(f"the {product.kind} payoff jumps: a cell's change counts the paths that "
                     "cross a trigger, and its error bar can be unreliable when few do")

    def rows(a: np.ndarray) -> tuple[tuple[float, ...], ...]:
        return tuple(tuple(float(x) for x in r) for r in a)

    smp = res.sampler
    return ScenarioGrid(float(values[bi, bj]), float(errs[bi, bj]), spot_pts, vol_pts,
                        rows(values), rows(errs), rows(changes), rows(change_errs),
                        market.currency, res.paths, smp.name, smp.seed, tuple(notes),
                        product.label())


# ---------------------------------------------------------------------------------------------
# Writing the picture (the command line)
# ---------------------------------------------------------------------------------------------
def check_plot_path(path: str | Path) -> None:
    """Refuse, before any work, a picture path that cannot be written or whose extension is
    not a picture format matplotlib writes (InputError naming ``--plot``)."""
    target = Path(path)
    folder = target.parent
    fmt = target.suffix.lower().lstrip(".")
    if fmt not in PICTURE_FORMATS:
        raise InputError(f"cannot write {str(path)!r}: the extension must name a picture "
                         f"format ({', '.join(PICTURE_FORMATS)})", key="--plot")
    if target.is_dir():
        raise InputError(f"cannot write {str(path)!r}: it is a folder", key="--plot")
    if not folder.is_dir():
        raise InputError(f"cannot write {str(path)!r}: the folder {str(folder)!r} does not "
                         "exist", key="--plot")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"cannot write {str(path)!r}: no permission to write in "
                         f"{str(folder)!r}", key="--plot")


def write_plot(grid: ScenarioGrid, path: str | Path) -> None:
    """Draw the grid's heatmap into ``path``, written whole or not at all (a temporary file in
    the same folder, then renamed over the target)."""
    check_plot_path(path)
    target = Path(path)
    fmt = target.suffix.lower().lstrip(".")
    fig = grid.plot()
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=f".{target.stem}-",
                                   suffix=target.suffix)
        with os.fdopen(fd, "wb") as fh:
            fig.savefig(fh, format=fmt, dpi=120, bbox_inches="tight")
        mask = os.umask(0o022)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
        os.replace(tmp, target)
        tmp = None
    except OSError as exc:
        raise InputError(f"cannot write {str(path)!r}: {exc.strerror or exc}",
                         key="--plot") from None
    finally:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)

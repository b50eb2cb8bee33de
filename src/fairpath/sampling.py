"""Uniform sources, the inverse normal transform, antithetic pairing and the Brownian bridge.

Two samplers hand out standard normal increments, shape ``(n, assets, steps)``, block by block:

* :class:`SobolSampler`: scrambled Sobol points (:mod:`fairpath.sobol`: Joe-Kuo direction
  numbers, Owen-type linear matrix scrambling plus digital shift), ``replicates`` independent
  scramblings so the standard error comes from their spread (randomized QMC). The time steps
  are ordered by a Brownian bridge and the assets interleaved, so the first coordinates carry
  the terminal value of every asset, the next ones the mid-points, and so on.
* :class:`PseudoSampler`: PCG64 streams, one per block, spawned from one ``SeedSequence``.

Both turn uniforms into normals by the inverse normal CDF (Wichura's AS 241, compiled; it agrees
with ``scipy.special.ndtri`` to a few units in the last place) after clipping them to
``[UNIFORM_CLIP, 1 - UNIFORM_CLIP]``.

A *block* is the unit of randomness and of accumulation: its numbers depend only on the seed and
its index, never on how many blocks are computed together, so results do not depend on the chunk
size or on the number of threads.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass

import numpy as np

from fairpath import sobol
from fairpath.errors import InputError, SamplingWarning
from fairpath.kernels import bridge_paths, uniforms_to_normals

#: Uniforms are clipped to [UNIFORM_CLIP, 1 - UNIFORM_CLIP] before the inverse CDF, so no
#: normal is infinite (ndtri(1e-16) is about -8.2).
UNIFORM_CLIP = 1e-16
#: Paths per block (the unit of randomness and of accumulation).
BLOCK_SIZE = 4096
#: Largest dimension of the Sobol direction numbers.
SOBOL_MAX_DIM = sobol.MAX_DIM
#: Default number of independent scramblings for randomized QMC.
DEFAULT_REPLICATES = 16
#: Seed used when none is given: results are reproducible by default.
DEFAULT_SEED = 20261201


def normalize_seed(seed: int | None) -> int:
    """The one place a user seed is turned into the integer entropy of every stream."""
    if seed is None:
        return DEFAULT_SEED
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise InputError(f"seed must be a non-negative integer, got {seed!r}", key="seed")
    return int(seed)


def to_normal(u: np.ndarray) -> np.ndarray:
    """Inverse normal CDF of clipped uniforms, in place (:func:`fairpath.kernels.
    uniforms_to_normals`: Wichura's AS 241, within a few ulps of ``scipy.special.ndtri``)."""
    u = np.ascontiguousarray(u, dtype=np.float64)
    return uniforms_to_normals(u, UNIFORM_CLIP)


@dataclass(frozen=True, slots=True)
class Block:
    """A contiguous run of samples: ``size`` paths from point ``start`` of stream ``stream``.

    For Sobol, ``stream`` is the scrambling (replicate) index; for pseudo-random numbers it is the
    block number. With antithetic pairing the block holds ``size // 2`` draws and their mirrors.
    """

    stream: int
    start: int
    size: int
    replicate: int


class BrownianBridge:
    """Brownian-bridge construction on given step times (t_0 = 0 < t_1 < ... < t_n).

    ``order`` lists the step indices in the order they are built: the last point first, then
    recursive mid-points, so the first normals carry most of the path's variance.
    """

    def __init__(self, times: np.ndarray):
        t = np.asarray(times, dtype=float)
        n = len(t)
        self.n = n
        tt = np.concatenate([[0.0], t])  # index 0 is time 0 (W = 0)
        self.order: list[int] = []  # point index (1..n) built at each construction step
        self.left: list[int] = []
        self.right: list[int] = []
        self.wl: list[float] = []
        self.wr: list[float] = []
        self.sd: list[float] = []
        built = np.zeros(n + 1, dtype=bool)
        built[0] = True
        # first: the last point from 0
        self._add(n, 0, None, tt)
        built[n] = True
        queue = [(0, n)]
        while queue:
            nxt = []
            for lo, hi in queue:
                if hi - lo < 2:
                    continue
                mid = (lo + hi) // 2
                self._add(mid, lo, hi, tt)
                built[mid] = True
                nxt.append((lo, mid))
                nxt.append((mid, hi))
            queue = nxt
        assert built.all()
        self.dt = np.diff(tt)
        self._arrays = None

    def _add(self, i, lo, hi, tt):
        self.order.append(i)
        self.left.append(lo)
        self.right.append(-1 if hi is None else hi)
        if hi is None:
            self.wl.append(1.0)
            self.wr.append(0.0)
            self.sd.append(np.sqrt(tt[i] - tt[lo]))
        else:
            span = tt[hi] - tt[lo]
            self.wl.append((tt[hi] - tt[i]) / span)
            self.wr.append((tt[i] - tt[lo]) / span)
            self.sd.append(np.sqrt((tt[i] - tt[lo]) * (tt[hi] - tt[i]) / span))

    def increments(self, z: np.ndarray) -> np.ndarray:
        """Map normals in construction order, shape (m, assets, n), to iid step normals.

        Returns an array of the same shape whose entry ``[:, :, k]`` is the normalised Brownian
        increment over step ``k``: ``(W(t_{k+1}) - W(t_k)) / sqrt(t_{k+1} - t_k)``.
        """
        m, a, n = z.shape
        rows = self.increments_rows(np.ascontiguousarray(z.transpose(2, 0, 1)).reshape(n, m * a))
        return np.ascontiguousarray(rows.reshape(n, m, a).transpose(1, 2, 0))

    def paths(self, zt: np.ndarray, factors: int) -> np.ndarray:
        """:meth:`increments_rows` and the transposition to (paths, factors, steps) in one
        compiled pass (``zt[j]`` holds construction step ``j``, factor by factor)."""
        if self._arrays is None:
            self._arrays = (np.array(self.order, dtype=np.int64),
                            np.array(self.left, dtype=np.int64),
                            np.array(self.right, dtype=np.int64), np.array(self.wl),
                            np.array(self.wr), np.array(self.sd), np.sqrt(self.dt))
        return bridge_paths(zt, *self._arrays, factors)

    def increments_rows(self, zt: np.ndarray) -> np.ndarray:
        """The same on time-major rows: ``zt[j]`` holds construction step ``j`` for every path."""
        n = zt.shape[0]
        w = np.empty((n + 1, zt.shape[1]))
        w[0] = 0.0
        for j, i in enumerate(self.order):
            lo, hi = self.left[j], self.right[j]
            row = w[i]
            np.multiply(zt[j], self.sd[j], out=row)
            if lo:
                row += self.wl[j] * w[lo]
            if hi > 0:
                row += self.wr[j] * w[hi]
        out = np.subtract(w[1:], w[:-1], out=zt)
        out /= np.sqrt(self.dt)[:, None]
        return out


class Sampler:
    """Common interface: a block plan for a path count, and the normals of one block."""

    name = "base"
    replicates: int | None = None

    def __init__(self, seed: int | None = None, *, antithetic: bool = False,
                 stream_key: tuple[int, ...] = ()):
        self.seed = normalize_seed(seed)
        self.antithetic = bool(antithetic)
        self.stream_key = tuple(int(k) for k in stream_key)

    def _seq(self, index: int) -> np.random.SeedSequence:
        return np.random.SeedSequence(self.seed, spawn_key=(*self.stream_key, index))

    def plan(self, paths: int) -> list[Block]:  # pragma: no cover - interface
        raise NotImplementedError

    def normals(self, blocks: list[Block], n_assets: int, times: np.ndarray) -> np.ndarray:
        """Normal step increments for consecutive ``blocks``: (sum of sizes, assets, steps)."""
        parts = [self._block_normals(b, n_assets, times) for b in blocks]
        return parts[0] if len(parts) == 1 else np.concatenate(parts, axis=0)

    def _block_normals(self, block: Block, n_assets: int, times: np.ndarray) -> np.ndarray:
        raise NotImplementedError  # pragma: no cover

    def pieces(self, block: Block, n_assets: int, times: np.ndarray, piece: int):
        """The block's normals in consecutive pieces of at most ``piece`` paths, for memory.

        The numbers are those of :meth:`normals` for the whole block; with antithetic pairing
        each piece holds some draws followed by their mirrors (pairs are never split).
        Yields ``(normals, draws)``, ``draws`` the number of draws in the piece.
        """
        draws_total = block.size // 2 if self.antithetic else block.size
        per = max(1, piece // 2 if self.antithetic else piece)
        state = self._start(block, n_assets, times)
        done = 0
        while done < draws_total:
            k = min(per, draws_total - done)
            z = self._draw(state, k, n_assets, times)
            done += k
            yield (self._mirror(z, 2 * k) if self.antithetic else z), k

    def unit_pieces(self, blocks: list[Block], n_assets: int, times: np.ndarray, piece: int):
        """Pieces of several blocks, in block order: lists of ``(block, normals, draws)`` that
        come from one draw (by default each block's own :meth:`pieces`)."""
        for b in blocks:
            for z, k in self.pieces(b, n_assets, times, piece):
                yield [(b, z, k)]

    def _start(self, block: Block, n_assets: int, times: np.ndarray):
        raise NotImplementedError  # pragma: no cover

    def _draw(self, state, k: int, n_assets: int, times: np.ndarray) -> np.ndarray:
        raise NotImplementedError  # pragma: no cover

    def describe(self) -> dict:
        return {"sampler": self.name, "seed": self.seed, "antithetic": self.antithetic,
                "replicates": self.replicates}

    @staticmethod
    def _mirror(z: np.ndarray, size: int) -> np.ndarray:
        out = np.empty((size, *z.shape[1:]))
        h = z.shape[0]
        out[:h] = z
        np.negative(z, out=out[h:])
        return out


class PseudoSampler(Sampler):
    """PCG64 uniforms, one stream per block from ``SeedSequence(seed).spawn``."""

    name = "pseudo"

    def plan(self, paths: int) -> list[Block]:
        paths = _check_paths(paths)
        if self.antithetic and paths % 2:
            raise InputError(f"antithetic pairing needs an even path count, got {paths}",
                             key="paths")
        blocks = []
        for k, start in enumerate(range(0, paths, BLOCK_SIZE)):
            blocks.append(Block(stream=k, start=0, size=min(BLOCK_SIZE, paths - start),
                                replicate=k))
        return blocks

    def _block_normals(self, block, n_assets, times):
        rng = self._start(block, n_assets, times)
        draws = block.size // 2 if self.antithetic else block.size
        z = self._draw(rng, draws, n_assets, times)
        return self._mirror(z, block.size) if self.antithetic else z

    def _start(self, block, n_assets, times):
        return np.random.Generator(np.random.PCG64(self._seq(block.stream)))

    def _draw(self, rng, k, n_assets, times):
        # the stream is drawn in order, so pieces of a block give the numbers of one call
        return to_normal(rng.random((k, n_assets, len(times))))


class SobolSampler(Sampler):
    """Scrambled Sobol points with ``replicates`` independent scramblings (randomized QMC)."""

    name = "sobol"

    def __init__(self, seed: int | None = None, *, antithetic: bool = False,
                 replicates: int = DEFAULT_REPLICATES, stream_key: tuple[int, ...] = ()):
        super().__init__(seed, antithetic=antithetic, stream_key=stream_key)
        if isinstance(replicates, bool) or not isinstance(replicates, int) or replicates < 2:
            raise InputError(f"replicates must be an integer >= 2, got {replicates!r}",
                             key="replicates")
        self.replicates = replicates
        self._bridges: dict[bytes, BrownianBridge] = {}

    def plan(self, paths: int) -> list[Block]:
        paths = _check_paths(paths)
        r = self.replicates
        if paths % r:
            raise InputError(f"a Sobol run splits its paths over {r} scramblings, so the path "
                             f"count must be a multiple of {r}; got {paths} (try "
                             f"{1 << max(paths - 1, 1).bit_length()})", key="paths")
        per = paths // r
        points = per // 2 if self.antithetic else per
        if self.antithetic and per % 2:
            raise InputError(f"antithetic Sobol needs an even count per scrambling, got {per}",
                             key="paths")
        if points < 2:
            raise InputError(f"too few paths for {r} Sobol scramblings: {paths}", key="paths")
        if points & (points - 1):
            warnings.warn(f"{points} Sobol points per scrambling is not a power of two; the "
                          "balance properties of the sequence are lost (use a power of two "
                          "times the number of scramblings)", SamplingWarning, stacklevel=3)
        size = min(BLOCK_SIZE, per)
        blocks = []
        for rep in range(r):
            for start in range(0, per, size):
                blocks.append(Block(stream=rep, start=start, size=min(size, per - start),
                                    replicate=rep))
        return blocks

    def dimension(self, n_assets: int, steps: int) -> int:
        return n_assets * steps

    def _scrambling(self, rep: int, dim: int) -> tuple[np.ndarray, np.ndarray]:
        """Scrambled direction numbers and shift of replicate ``rep`` (cached, read-only)."""
        return _scrambled(self.seed, (*self.stream_key, rep), dim)

    def _bridge(self, times: np.ndarray) -> BrownianBridge:
        key = np.asarray(times, dtype=float).tobytes()
        br = self._bridges.get(key)
        if br is None:
            br = self._bridges[key] = BrownianBridge(times)
        return br

    def _block_normals(self, block, n_assets, times):
        state = self._start(block, n_assets, times)
        draws = block.size // 2 if self.antithetic else block.size
        z = self._draw(state, draws, n_assets, times)
        return self._mirror(z, block.size) if self.antithetic else z

    def unit_pieces(self, blocks, n_assets, times, piece):
        """Consecutive blocks of one scrambling are drawn together, up to ``piece`` paths a
        draw (the same points as block by block: the generator runs forward)."""
        per = max(1, piece // 2 if self.antithetic else piece)
        i = 0
        while i < len(blocks):
            run = [blocks[i]]
            while (i + len(run) < len(blocks) and blocks[i + len(run)].stream == run[0].stream
                   and blocks[i + len(run)].start == run[-1].start + run[-1].size):
                run.append(blocks[i + len(run)])
            i += len(run)
            sizes = [b.size // 2 if self.antithetic else b.size for b in run]
            state = self._start(run[0], n_assets, times)
            j, used = 0, 0  # current block, draws of it already handed out
            while j < len(run):
                k = min(per, sum(sizes[j:]) - used)
                z = self._draw(state, k, n_assets, times)
                out, off = [], 0
                while off < k:
                    take = min(k - off, sizes[j] - used)
                    part = z[off:off + take]
                    out.append((run[j], self._mirror(part, 2 * take) if self.antithetic
                                else part, take))
                    off += take
                    used += take
                    if used == sizes[j]:
                        j, used = j + 1, 0
                yield out

    def _start(self, block, n_assets, times):
        steps = len(times)
        dim = n_assets * steps
        if dim > SOBOL_MAX_DIM:
            raise InputError(f"the Sobol dimension {dim} (= {steps} dates x {n_assets} assets) "
                             f"exceeds the generator's limit of {SOBOL_MAX_DIM}; use the "
                             "pseudo-random sampler", key="sampler")
        first = block.start // 2 if self.antithetic else block.start
        return [block.stream, dim, first]

    def _draw(self, state, k, n_assets, times):
        stream, dim, first = state
        steps = len(times)
        sv, shift = self._scrambling(stream, dim)
        u = sobol.points(sv, shift, first, k)  # one row per coordinate
        state[2] = first + k
        # coordinate c = j * n_assets + a: bridge step j of asset a (every asset's coarse path
        # comes before any asset's finer points)
        zt = to_normal(u).reshape(steps, n_assets * k)
        if steps > 1:
            return self._bridge(times).paths(zt, n_assets)
        return np.ascontiguousarray(zt.reshape(steps, n_assets, k).transpose(2, 1, 0))


def make_sampler(name: str, *, seed: int | None = None, antithetic: bool = False,
                 replicates: int = DEFAULT_REPLICATES, stream_key: tuple[int, ...] = ()
                 ) -> Sampler:
    """Build a sampler from its name: ``"sobol"`` (default) or ``"pseudo"``."""
    if name == "sobol":
        return SobolSampler(seed, antithetic=antithetic, replicates=replicates,
                            stream_key=stream_key)
    if name == "pseudo":
        return PseudoSampler(seed, antithetic=antithetic, stream_key=stream_key)
    raise InputError(f"unknown sampler {name!r}; known: sobol, pseudo", key="sampler")


def _check_paths(paths) -> int:
    if isinstance(paths, bool) or not isinstance(paths, int | np.integer) or paths < 2:
        raise InputError(f"paths must be an integer >= 2, got {paths!r}", key="paths")
    return int(paths)


@functools.lru_cache(maxsize=256)
def _scrambled(seed: int, spawn_key: tuple[int, ...], dim: int) -> tuple[np.ndarray, np.ndarray]:
    """One independent scrambling (LMS + digital shift, :mod:`fairpath.sobol`) of the stream
    ``SeedSequence(seed, spawn_key)``; read-only arrays, shared safely between threads."""
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed,
                                                                     spawn_key=spawn_key)))
    sv, shift = sobol.scrambled(dim, rng)
    sv.setflags(write=False)
    shift.setflags(write=False)
    return sv, shift

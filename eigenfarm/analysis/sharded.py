"""The dynamical matrix D = M^-½ H M^-½ of a Hessian store as an operator on blocks of vectors that stay
where the shard tasks run.

A *blocked vector* X (3N × width) is a list of handles, one per shard: handle k holds rows
3·first_k … 3·stop_k − 1 (store order) as a (3·rows_k, width) float64 array.  Each operation is one task
per shard, sent to the shard's place (:meth:`Runner.submit_near`; shards are spread over the places in
contiguous runs, so neighbouring shards mostly share a worker):

* :meth:`ShardedDynamical.combine` — Y_k = a·(D X)_k + Σ c_i T_i,k.  The task takes X's own block and the
  blocks of the shards its rows reach (found once, when the shard is first read), gathers the few halo
  rows it needs and multiplies by the shard's rows of D, which it keeps in the worker's shard cache
  (:mod:`eigenfarm.analysis.shardcache`) between calls;
* :meth:`ShardedDynamical.dots` — Σ_rows A ⊙ B per column, summed over shards in shard order on the
  client, so results do not depend on where tasks ran;
* :meth:`ShardedDynamical.random` — Rademacher (±1) blocks drawn from ``default_rng([seed, stream, k])``.

Only per-column sums travel to the client; the vectors themselves move only between workers, and only
as the neighbour blocks a shard's rows reach.  D is in energy/(length²·mass) of the store's units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from eigenfarm.analysis import shardcache
from eigenfarm.farm.runner import Runner
from eigenfarm.store import layout
from eigenfarm.store.reader import HessianStore, shard_matrix


@dataclass(frozen=True)
class Source:
    """What a task needs to (re)build a shard's rows of D: the store, its digest, its size and shard
    boundaries (n_shards + 1 atom indices), and the cache budget in bytes (None: the worker's default)."""

    path: str
    digest: str
    n_atoms: int
    bounds: tuple
    budget: int | None

    @property
    def group(self) -> tuple:
        return (self.path, self.digest)


@dataclass
class ShardRows:
    """Shard k's rows of D split by column: ``own`` (3r × 3r) on the shard's own degrees of freedom,
    ``halo`` (3r × h) on h others, which are, in order, rows ``index`` of neighbour j's block for each
    (j, index) in ``reach`` (j ascending)."""

    own: sp.csr_matrix
    halo: sp.csr_matrix
    reach: list

    @property
    def neighbours(self) -> list[int]:
        return [j for j, _ in self.reach]

    @property
    def nbytes(self) -> int:
        parts = [a for m in (self.own, self.halo) for a in (m.data, m.indices, m.indptr)]
        parts += [index for _, index in self.reach]
        return int(sum(p.nbytes for p in parts))

    def apply(self, own: np.ndarray, neighbours: list) -> np.ndarray:
        """(D X)_k (3r, width) from X's block k and the blocks of :attr:`neighbours`, in order."""
        out = self.own @ own
        if self.reach:
            halo = np.concatenate([block[index] for (_, index), block in zip(self.reach, neighbours)])
            out += self.halo @ halo
        return out


def build_rows(source: Source, k: int, inv_sqrt_mass: np.ndarray) -> ShardRows:
    """Read shard k and form its rows of D = M^-½ H M^-½; ``inv_sqrt_mass`` (N,) is m^-½ per atom."""
    shard = layout.read_shard(source.path, k)
    H = shard_matrix(shard, source.n_atoms, "csr")
    H.sum_duplicates()
    row_scale = np.repeat(inv_sqrt_mass[shard.first:shard.stop], 3)
    rows = np.repeat(np.arange(H.shape[0]), np.diff(H.indptr))
    H.data = H.data * row_scale[rows] * inv_sqrt_mass[H.indices // 3]
    first, stop = 3 * shard.first, 3 * shard.stop
    columns = np.unique(H.indices)
    outside = columns[(columns < first) | (columns >= stop)]
    bounds = np.asarray(source.bounds, dtype=np.int64)
    owner = layout.shard_of(outside // 3, bounds)
    reach = [(int(j), outside[owner == j] - 3 * bounds[j]) for j in np.unique(owner)]
    return ShardRows(H[:, first:stop].tocsr(), H[:, outside].tocsr(), reach)


def _rows(source: Source, k: int, inv_sqrt_mass: np.ndarray) -> ShardRows:
    """Shard k's rows from this process's cache, built (and offered to the cache) on a miss."""
    key = (source.group, k)
    rows = shardcache.get(key)
    if rows is None:
        rows = build_rows(source, k, inv_sqrt_mass)
        budget = shardcache.default_budget() if source.budget is None else source.budget
        shardcache.put(key, rows, rows.nbytes, budget)
    return rows


def _neighbours_task(source, k, inv_sqrt_mass) -> list[int]:
    return _rows(source, k, inv_sqrt_mass).neighbours


def _combine_task(source, k, inv_sqrt_mass, a, own, neighbours, coefficients, terms) -> np.ndarray:
    if a:
        out = _rows(source, k, inv_sqrt_mass).apply(own, neighbours)
        out *= a
    else:
        out, coefficients, terms = coefficients[0] * terms[0], coefficients[1:], terms[1:]
    scratch = np.empty_like(out) if terms else None  # one temporary, however many terms
    for c, term in zip(coefficients, terms):
        out += np.multiply(term, c, out=scratch)
    return out


def _dots_task(pairs) -> np.ndarray:
    return np.array([np.einsum("ij,ij->j", x, y) for x, y in pairs])


def _random_task(seed, stream, k, rows, width) -> np.ndarray:
    rng = np.random.default_rng([seed, stream, k])
    return rng.integers(0, 2, size=(rows, width)).astype(float) * 2 - 1


#: steps a recursion on dask may run ahead of its inner products (each step's tasks need the previous
#: step's blocks, so this adds queued tasks, not blocks held in memory)
LOOKAHEAD = 8


class ShardedDynamical:
    """D of ``store`` as an operator on blocked vectors run by ``runner`` (see the module docstring).

    ``cache_bytes``: each worker's shard-cache budget (None: a quarter of its memory limit).  Creating
    the operator reads every shard once (stage "read shards" of ``progress``); :meth:`close` empties
    the workers' caches of this store.
    """

    def __init__(self, store: HessianStore, runner: Runner, cache_bytes: int | None = None, progress=None):
        self.runner = runner
        self.bounds = store.shard_bounds
        self.n_dof = 3 * store.n_atoms
        self.source = Source(str(store.path), store.digest, store.n_atoms, tuple(int(b) for b in self.bounds),
                             cache_bytes)
        self._mass = runner.scatter(1.0 / np.sqrt(np.asarray(store.masses, dtype=float)))
        self.place = [k * runner.slots // store.n_shards for k in range(store.n_shards)]
        tasks = [self._submit(k, _neighbours_task, self.source, k, self._mass) for k in range(store.n_shards)]
        self.neighbours = runner.gather(tasks, "read shards", progress)
        runner.release(tasks)

    @property
    def n_shards(self) -> int:
        return len(self.place)

    def _submit(self, k, fn, *args):
        return self.runner.submit_near(self.place[k], fn, *args)

    def random(self, width: int, seed: int, stream: int = 0) -> list:
        """A Rademacher block vector (3N, width) of entries ±1, the same for the same (seed, stream)."""
        rows = 3 * np.diff(self.bounds)
        return [self._submit(k, _random_task, seed, stream, k, int(rows[k]), width) for k in range(self.n_shards)]

    def combine(self, a: float, X: list | None, terms: list = ()) -> list:
        """The blocked vector a·D X + Σ c·T over ``terms`` [(c, T), ...] (X may be None when a is 0)."""
        coefficients = [float(c) for c, _ in terms]
        out = []
        for k in range(self.n_shards):
            own = X[k] if a else None
            near = [X[j] for j in self.neighbours[k]] if a else []
            out.append(self._submit(k, _combine_task, self.source, k, self._mass, float(a), own, near,
                                    coefficients, [T[k] for _, T in terms]))
        return out

    @property
    def lookahead(self) -> int:
        """How many steps a recursion may submit before collecting their inner products: 0 in this
        process (tasks run when gathered), :data:`LOOKAHEAD` on dask, where it hides the round trips."""
        return LOOKAHEAD if self.runner.concurrent else 0

    def dots(self, pairs: list) -> np.ndarray:
        """(P, width) column-wise inner products ⟨A, B⟩ of the P pairs (A, B) of blocked vectors."""
        return self.collect(self.submit_dots(pairs))

    def submit_dots(self, pairs: list) -> list:
        """The tasks of :meth:`dots`, to :meth:`collect` later."""
        return [self._submit(k, _dots_task, [[A[k], B[k]] for A, B in pairs]) for k in range(self.n_shards)]

    def collect(self, tasks: list) -> np.ndarray:
        """The summed results of :meth:`submit_dots`' tasks, (P, width), in shard order."""
        parts = self.runner.gather(tasks)
        self.runner.release(tasks)
        total = parts[0].copy()
        for part in parts[1:]:
            total += part
        return total

    def release(self, *vectors) -> None:
        """Free blocked vectors that are no longer needed."""
        self.runner.release([handle for vector in vectors for handle in vector])

    def close(self) -> None:
        """Drop this store's shards from every worker's cache and release the scattered masses."""
        self.runner.everywhere(shardcache.forget, self.source.group)
        self.runner.release([self._mass])

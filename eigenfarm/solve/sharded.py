"""D = M^-½ H M^-½ as a PETSc matrix whose rows are spread over MPI ranks by whole store shards.

Each rank reads only its own shards of the Hessian store (:func:`assign_shards`: contiguous runs of
shards with about equal numbers of atoms), mass-weights their rows (the masses of all N atoms are read
by every rank: 8 bytes per atom) and hands them to PETSc as its block of rows of one distributed AIJ
matrix.  The matrix is in store order (rows 3a, 3a+1, 3a+2 for stored atom a), as everywhere else in
eigenfarm.solve.  Every diagonal entry is stored, so D − σI keeps D's pattern for any σ.

:class:`VectorLayout` moves vectors between numpy and PETSc: a full (n,) numpy vector known on every
rank fills a distributed Vec (each rank copies its own rows), and a distributed Vec comes back to every
rank or to rank 0 only.  Collective calls (everything that touches PETSc objects) must be made by every
rank of the communicator in the same order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from eigenfarm.solve.backends.slepc import require
from eigenfarm.store import layout as store_layout
from eigenfarm.store import open_store
from eigenfarm.store.reader import shard_matrix


def assign_shards(bounds: np.ndarray, ranks: int) -> np.ndarray:
    """(ranks + 1,) shard indices: rank r reads shards out[r] ≤ k < out[r + 1] (contiguous, whole
    shards, each rank about n_atoms / ranks atoms; ranks beyond the number of shards get none).
    ``bounds`` (n_shards + 1,) are the store's atom boundaries of its shards."""
    sizes = np.diff(np.asarray(bounds, dtype=np.int64))
    middle = (np.cumsum(sizes) - sizes / 2) / max(int(bounds[-1]), 1)
    owner = np.minimum((middle * ranks).astype(np.int64), ranks - 1)
    return np.searchsorted(owner, np.arange(ranks + 1), side="left")


@dataclass
class VectorLayout:
    """Rows ``start`` ≤ i < ``stop`` of an n-vector live on this rank of the PETSc communicator ``comm``."""

    comm: object
    start: int
    stop: int
    n: int

    @classmethod
    def serial(cls, n: int) -> "VectorLayout":
        """All n rows in this process (PETSc.COMM_SELF)."""
        return cls(require()[0].COMM_SELF, 0, int(n), int(n))

    @property
    def size(self) -> int:
        """Number of ranks."""
        return self.comm.getSize()

    @property
    def rank(self) -> int:
        return self.comm.getRank()

    @property
    def local(self) -> int:
        return self.stop - self.start

    def vector(self):
        """A new distributed PETSc Vec of this layout."""
        PETSc = require()[0]
        return PETSc.Vec().createMPI((self.local, self.n), comm=self.comm)

    def fill(self, vec, full: np.ndarray) -> None:
        """Copy this rank's rows of ``full`` (n,) into ``vec``."""
        vec.setArray(np.ascontiguousarray(full[self.start:self.stop], dtype=np.float64))

    def everywhere(self, vec) -> np.ndarray:
        """The whole of ``vec`` as an (n,) numpy array on every rank."""
        mpi = self.comm.tompi4py()
        return np.concatenate(mpi.allgather(vec.getArray(readonly=True).copy()))

    def at_root(self, block: np.ndarray) -> np.ndarray | None:
        """Rows of a local block (local, m) stacked over ranks: (n, m) on rank 0, None elsewhere."""
        pieces = self.comm.tompi4py().gather(np.ascontiguousarray(block), root=0)
        return np.concatenate(pieces) if pieces is not None else None

    def matrix(self, rows: sp.csr_matrix):
        """A PETSc AIJ matrix (n × n) whose rows on this rank are ``rows`` (local × n CSR), assembled."""
        PETSc = require()[0]
        rows = sp.csr_matrix(rows, dtype=np.float64)
        rows.sort_indices()
        csr = (rows.indptr.astype(PETSc.IntType), rows.indices.astype(PETSc.IntType), rows.data)
        mat = PETSc.Mat().createAIJ(((self.local, self.n), (self.local, self.n)), csr=csr, comm=self.comm)
        mat.assemble()
        return mat


class _Everywhere:
    """A PETSc matrix applied to full numpy vectors known on every rank (for :func:`.common.measure_factor`)."""

    def __init__(self, mat, layout: VectorLayout):
        self.mat, self.layout, self.shape = mat, layout, (layout.n, layout.n)

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        source, target = self.layout.vector(), self.layout.vector()
        self.layout.fill(source, x)
        self.mat.mult(source, target)
        return self.layout.everywhere(target)


class ShardedMatrix:
    """D of the Hessian store at ``path`` with rows on the ranks of ``comm`` (use :meth:`read`).

    ``mat``: the PETSc matrix (n × n, n = 3N, energy/(length²·mass)); ``layout``: which rows are here;
    ``shards``: (first, stop) shard indices read by this rank; ``original_index`` (N,): input index of
    each stored atom.
    """

    def __init__(self, mat, layout: VectorLayout, shards: tuple[int, int], original_index: np.ndarray):
        self.mat, self.layout, self.shards, self.original_index = mat, layout, shards, original_index

    @classmethod
    def read(cls, path, comm=None) -> "ShardedMatrix":
        """Read this rank's shards of the store at ``path`` and assemble D on ``comm`` (default: all ranks)."""
        return cls.assemble(*local_rows(path, comm))

    @classmethod
    def assemble(cls, rows: sp.csr_matrix, layout: VectorLayout, shards: tuple[int, int],
                 original_index: np.ndarray) -> "ShardedMatrix":
        """D from each rank's :func:`local_rows` (collective)."""
        return cls(layout.matrix(rows), layout, shards, original_index)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.layout.n, self.layout.n)

    def shifted(self, sigma: float):
        """D − σI as a new PETSc matrix (same pattern)."""
        A = self.mat.duplicate(copy=True)
        A.shift(-sigma)
        return A

    def operator(self, mat=None) -> _Everywhere:
        """``mat`` (default D) as an operator on full numpy vectors: ``op @ x`` on every rank."""
        return _Everywhere(self.mat if mat is None else mat, self.layout)

    def times_local(self, block: np.ndarray) -> np.ndarray:
        """D applied to the columns of a distributed block: this rank's rows (local, m) in and out."""
        source, target = self.layout.vector(), self.layout.vector()
        out = np.empty_like(block)
        for j in range(block.shape[1]):
            source.setArray(np.ascontiguousarray(block[:, j]))
            self.mat.mult(source, target)
            out[:, j] = target.getArray(readonly=True)
        return out

    def allsum(self, value: np.ndarray) -> np.ndarray:
        """Σ over ranks of a small numpy array (the same result on every rank: rank 0's is sent)."""
        mpi = self.layout.comm.tompi4py()
        return mpi.bcast(mpi.allreduce(np.asarray(value)), root=0)


def local_rows(path, comm=None) -> tuple[sp.csr_matrix, VectorLayout, tuple[int, int], np.ndarray]:
    """This rank's rows of D read from its own shards of the store at ``path`` (no communication):
    (rows (local × n CSR, every diagonal entry stored), layout, (first, stop) shards, original_index (N,))."""
    PETSc = require()[0]
    comm = comm or PETSc.COMM_WORLD
    store = open_store(path)
    bounds = store.shard_bounds
    owned = assign_shards(bounds, comm.getSize())
    first, stop = int(owned[comm.getRank()]), int(owned[comm.getRank() + 1])
    layout = VectorLayout(comm, 3 * int(bounds[first]), 3 * int(bounds[stop]), 3 * store.n_atoms)
    weights = np.repeat(1.0 / np.sqrt(store.masses), 3)
    rows = [shard_matrix(store_layout.read_shard(store.path, k), store.n_atoms, "csr") for k in range(first, stop)]
    local = sp.vstack(rows, format="csr") if rows else sp.csr_matrix((0, layout.n))
    local = sp.diags(weights[layout.start:layout.stop]) @ local @ sp.diags(weights)
    return _with_diagonal(local.tocoo(), layout.start), layout, (first, stop), store.original_index


def _with_diagonal(coo: sp.coo_matrix, start: int) -> sp.csr_matrix:
    """Local rows (local × n, global columns) with an explicit, possibly zero, diagonal entry in each."""
    local = coo.shape[0]
    rows = np.arange(local)
    data = np.concatenate([coo.data, np.zeros(local)])
    out = sp.csr_matrix((data, (np.concatenate([coo.row, rows]), np.concatenate([coo.col, rows + start]))),
                        shape=coo.shape)
    out.sum_duplicates()
    return out

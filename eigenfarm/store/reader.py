"""Reading a Hessian store: metadata, one shard at a time, the whole matrix, streamed products.

Everything is in store order (rows/columns of atom a are 3a, 3a+1, 3a+2); ``original_index`` maps a
stored atom to its index in the input.  Matrix entries are in energy/length² of :attr:`HessianStore.units`.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.store import layout
from eigenfarm.store.atomic import is_store
from eigenfarm.farm.runner import runner_for
from eigenfarm.structure.box import Box
from eigenfarm.structure.units import UnitSystem, get_units

FORMATS = ("bsr", "csr")


def shard_matrix(shard: layout.Shard, n_atoms: int, format: str = "bsr"):
    """A shard's rows as scipy.sparse (3·rows × 3·n_atoms), ``format`` "bsr" (3×3 blocks) or "csr"."""
    if format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, got {format!r}")
    matrix = sp.bsr_matrix((shard.blocks, shard.indices, shard.indptr),
                           shape=(3 * shard.n_rows, 3 * n_atoms), blocksize=(3, 3))
    return matrix if format == "bsr" else matrix.tocsr()


def _shard_product(path: str, k: int, n_atoms: int, x: np.ndarray) -> np.ndarray:
    """Worker task: rows of shard k times x (3N,) or (3N, m); CSR when m > 1 (faster for blocks of
    vectors, ../shared/FACTS.md)."""
    shard = layout.read_shard(path, k)
    return shard_matrix(shard, n_atoms, "bsr" if x.ndim == 1 else "csr") @ x


class HessianStore:
    """A complete Hessian store opened read-only (use :func:`open_store`)."""

    def __init__(self, path):
        self.path = Path(path)
        self.attrs = layout.read_attrs(self.path)

    @property
    def n_atoms(self) -> int:
        return int(self.attrs["n_atoms"])

    @property
    def units(self) -> UnitSystem:
        return get_units(self.attrs["units"])

    @property
    def digest(self) -> str:
        """sha256 content digest (see docs/store-format.md)."""
        return self.attrs["digest"]

    @property
    def shard_bounds(self) -> np.ndarray:
        """(n_shards + 1,) int64: shard k holds atoms bounds[k] ≤ a < bounds[k+1] (store order)."""
        return np.asarray(self.attrs["shard_bounds"], dtype=np.int64)

    @property
    def n_shards(self) -> int:
        return len(self.shard_bounds) - 1

    @property
    def provenance(self) -> dict:
        return self.attrs.get("provenance", {})

    @property
    def validation(self) -> dict:
        """The verdict recorded when the store was written (:meth:`validate` recomputes it)."""
        return self.attrs.get("validation", {})

    @functools.cached_property
    def masses(self) -> np.ndarray:
        """(n_atoms,) masses in mass units, store order."""
        return layout.read_array(self.path, "masses")

    @functools.cached_property
    def original_index(self) -> np.ndarray:
        """(n_atoms,) int64 input index of each stored atom."""
        return layout.read_array(self.path, "original_index")

    @functools.cached_property
    def positions(self) -> np.ndarray | None:
        """(n_atoms, 3) positions in length units (store order), or None for an imported matrix."""
        return layout.read_array(self.path, "positions")

    @functools.cached_property
    def species(self) -> np.ndarray | None:
        """(n_atoms,) species labels (store order), or None."""
        codes = layout.read_array(self.path, "species")
        if codes is None:
            return None
        return np.asarray(layout.array_attrs(self.path, "species")["names"])[codes]

    @functools.cached_property
    def box(self) -> Box | None:
        """The cell, or None for an imported matrix."""
        cell = layout.read_array(self.path, "cell")
        return None if cell is None else Box(cell, layout.read_array(self.path, "pbc"))

    def n_blocks(self) -> int:
        """Number of stored 3×3 blocks (reads each shard's attributes)."""
        return sum(int(layout.shard_attrs(self.path, k)["n_blocks"]) for k in range(self.n_shards))

    def read_shard(self, k: int, format: str = "bsr"):
        """Rows of shard k as scipy.sparse (3·rows × 3·n_atoms), "bsr" or "csr"."""
        if not 0 <= k < self.n_shards:
            raise IndexError(f"shard {k} out of range 0..{self.n_shards - 1}")
        return shard_matrix(layout.read_shard(self.path, k), self.n_atoms, format)

    def matrix(self, format: str = "bsr"):
        """The whole matrix (3N × 3N) in ``format``; for systems that fit in memory."""
        shards = [layout.read_shard(self.path, k) for k in range(self.n_shards)]
        offsets = np.cumsum([0] + [len(s.indices) for s in shards])
        whole = layout.Shard(0, self.n_atoms,
                             np.concatenate([[0]] + [s.indptr[1:] + o for s, o in zip(shards, offsets)]),
                             np.concatenate([s.indices for s in shards] or [np.zeros(0, np.int64)]),
                             np.concatenate([s.blocks for s in shards] or [np.zeros((0, 3, 3))]))
        return shard_matrix(whole, self.n_atoms, format)

    def _product(self, x: np.ndarray, client) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        if x.shape[:1] != (3 * self.n_atoms,) or x.ndim > 2:
            raise ValueError(f"x must have shape (3N,) or (3N, m) with 3N = {3 * self.n_atoms}, got {x.shape}")
        runner = runner_for(client)
        shared = runner.scatter(x)
        tasks = [runner.submit(_shard_product, str(self.path), k, self.n_atoms, shared)
                 for k in range(self.n_shards)]
        pieces = runner.gather(tasks)
        runner.release(tasks + [shared])
        return np.concatenate(pieces) if pieces else np.zeros_like(x)

    def matvec(self, x: np.ndarray, client=None) -> np.ndarray:
        """H·x for x (3N,) (energy/length² × x's unit), read shard by shard; on ``client`` one task per shard."""
        return self._product(x, client)

    def matmat(self, X: np.ndarray, client=None) -> np.ndarray:
        """H·X for X (3N, m), read shard by shard (see :meth:`matvec`)."""
        return self._product(X, client)

    def validate(self, client=None, progress=None) -> dict:
        """Re-run all checks on the data as stored now; returns a fresh verdict."""
        from eigenfarm.store.validate import validate_store

        return validate_store(self.path, client, progress)

    def summary(self) -> str:
        """A readable description for the command line (size, nnz, units, digest, verdict, provenance)."""
        from eigenfarm.store.summary import format_summary

        return format_summary(self)


def open_store(path) -> HessianStore:
    """Open the complete Hessian store at ``path``; :class:`InputError` if it is not one."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file or directory")
    if not is_store(path):
        raise InputError(f"{path}: not a Hessian store (no zarr group with kind='{layout.KIND}')")
    attrs = layout.read_attrs(path)
    if int(attrs.get("format_version", 0)) > layout.FORMAT_VERSION:
        raise InputError(f"{path}: store format {attrs.get('format_version')} is newer than this eigenfarm "
                         f"reads ({layout.FORMAT_VERSION}); upgrade eigenfarm")
    if "digest" not in attrs:
        raise InputError(f"{path}: incomplete Hessian store (its writer did not finish)")
    return HessianStore(path)

"""The on-disk layout of a Hessian store (zarr v3 directory); docs/store-format.md is the reference.

::

    H.zarr/                      root group, attributes: kind, format_version, n_atoms, units, n_shards,
                                 shard_bounds, provenance, and once complete digest and validation
      masses          (n_atoms,)      float64   mass units, store order
      original_index  (n_atoms,)      int64     input atom index of each stored atom
      positions       (n_atoms, 3)    float64   optional, length units, store order
      species         (n_atoms,)      int32     optional, codes into the attribute ``names``
      cell            (3, 3)          float64   optional, rows are lattice vectors
      pbc             (3,)            bool      optional
      shards/
        000000/                  attributes: first_atom, stop_atom, n_blocks, digest
          indptr      (rows + 1,)     int64     BSR row pointer of this shard's block rows
          indices     (n_blocks,)     int64     global (store-order) block column = atom index
          blocks      (n_blocks, 3, 3) float64  energy/length²

Shard k holds the block rows of atoms shard_bounds[k] ≤ a < shard_bounds[k+1].  Every function here is
a primitive on one store path; nothing here knows about potentials, dask or validation.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass

import numpy as np
import zarr
from zarr.codecs import ZstdCodec

KIND = "hessian"
FORMAT_VERSION = 1
#: atoms per shard unless the caller says otherwise: ~14 blocks per atom × 72 bytes ≈ 33 MB of blocks
DEFAULT_SHARD_ATOMS = 32768
#: blocks per zarr chunk of a shard's ``indices`` and ``blocks`` (≈ 9.4 MB of blocks)
BLOCK_CHUNK = 131072
SHARDS = "shards"


def codecs():
    """Compressor chain for every array: zstd at level 1 (fast both ways, ~30 % smaller on Hessians)."""
    return [ZstdCodec(level=1)]


@dataclass
class Shard:
    """One shard's block rows: atoms ``first`` ≤ a < ``stop``; ``indptr`` (rows+1,) int64, ``indices``
    (nb,) int64 global block columns, ``blocks`` (nb, 3, 3) float64 in energy/length²."""

    first: int
    stop: int
    indptr: np.ndarray
    indices: np.ndarray
    blocks: np.ndarray

    @property
    def n_rows(self) -> int:
        return self.stop - self.first

    def row_atoms(self) -> np.ndarray:
        """(nb,) store-order atom index of each block's row."""
        return self.first + np.repeat(np.arange(self.n_rows, dtype=np.int64), np.diff(self.indptr))


def plan_bounds(n_atoms: int, shard_atoms: int | None = None) -> np.ndarray:
    """Shard boundaries (n_shards + 1,) int64 splitting ``n_atoms`` into runs of ``shard_atoms``."""
    size = int(shard_atoms or DEFAULT_SHARD_ATOMS)
    if size < 1:
        raise ValueError(f"shard_atoms must be positive, got {shard_atoms}")
    return np.unique(np.r_[np.arange(0, n_atoms, size), n_atoms]).astype(np.int64)


def shard_of(atoms: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Shard index of each store-order atom index in ``atoms``."""
    return np.searchsorted(bounds, atoms, side="right") - 1


def shard_name(k: int) -> str:
    return f"{SHARDS}/{k:06d}"


def _put(group, name: str, data: np.ndarray, dims: tuple[str, ...], chunk_rows: int | None = None):
    data = np.ascontiguousarray(data)
    rows = max(1, min(len(data), chunk_rows or len(data) or 1))
    array = group.create_array(name, shape=data.shape, dtype=data.dtype, chunks=(rows,) + data.shape[1:],
                               compressors=codecs(), dimension_names=dims)
    if data.size:
        array[...] = data
    return array


def create_root(path, attrs: dict, masses: np.ndarray, original_index: np.ndarray, *, positions=None,
                species_codes=None, species_names=None, cell=None, pbc=None) -> None:
    """Create the root group at ``path`` with ``attrs``, the per-atom arrays and an empty shards group."""
    root = zarr.open_group(str(path), mode="w-", attributes=attrs)
    _put(root, "masses", np.asarray(masses, dtype=np.float64), ("atom",))
    _put(root, "original_index", np.asarray(original_index, dtype=np.int64), ("atom",))
    if positions is not None:
        _put(root, "positions", np.asarray(positions, dtype=np.float64), ("atom", "xyz"))
    if species_codes is not None:
        arr = _put(root, "species", np.asarray(species_codes, dtype=np.int32), ("atom",))
        arr.attrs["names"] = list(species_names)
    if cell is not None:
        _put(root, "cell", np.asarray(cell, dtype=np.float64), ("vector", "xyz"))
        _put(root, "pbc", np.asarray(pbc, dtype=bool), ("vector",))
    root.create_group(SHARDS)


def shard_digest(shard: Shard) -> str:
    """sha256 (hex) of a shard: its bounds, indptr, indices (int64 LE) and blocks (float64 LE, C order)."""
    h = hashlib.sha256()
    h.update(np.array([shard.first, shard.stop], dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(shard.indptr, dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(shard.indices, dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(shard.blocks, dtype="<f8").tobytes())
    return h.hexdigest()


def root_digest(n_atoms: int, masses: np.ndarray, original_index: np.ndarray, shard_digests) -> str:
    """The store's content digest: sha256 over a format tag, n_atoms, the sha256 of masses and of
    original_index, and the shard digests in shard order (so it does not depend on who wrote them)."""
    h = hashlib.sha256(f"eigenfarm-hessian/{FORMAT_VERSION}/{int(n_atoms)}\n".encode())
    h.update(hashlib.sha256(np.ascontiguousarray(masses, dtype="<f8").tobytes()).hexdigest().encode())
    h.update(hashlib.sha256(np.ascontiguousarray(original_index, dtype="<i8").tobytes()).hexdigest().encode())
    for digest in shard_digests:
        h.update(f"\n{digest}".encode())
    return h.hexdigest()


def write_shard(path, k: int, shard: Shard) -> str:
    """Write shard ``k`` under the store at ``path``; returns its digest (also stored as an attribute)."""
    digest = shard_digest(shard)
    attrs = {"first_atom": int(shard.first), "stop_atom": int(shard.stop),
             "n_blocks": int(len(shard.indices)), "digest": digest}
    group = zarr.open_group(os.path.join(str(path), shard_name(k)), mode="w-", attributes=attrs)
    _put(group, "indptr", np.asarray(shard.indptr, dtype=np.int64), ("row_pointer",))
    _put(group, "indices", np.asarray(shard.indices, dtype=np.int64), ("block",), BLOCK_CHUNK)
    _put(group, "blocks", np.asarray(shard.blocks, dtype=np.float64), ("block", "i", "j"), BLOCK_CHUNK)
    return digest


def read_shard(path, k: int) -> Shard:
    """Read shard ``k`` of the store at ``path``."""
    group = zarr.open_group(os.path.join(str(path), shard_name(k)), mode="r")
    attrs = group.attrs
    return Shard(int(attrs["first_atom"]), int(attrs["stop_atom"]), group["indptr"][...],
                 group["indices"][...], group["blocks"][...])


def shard_attrs(path, k: int) -> dict:
    """The attributes of shard ``k`` (first_atom, stop_atom, n_blocks, digest)."""
    return dict(zarr.open_group(os.path.join(str(path), shard_name(k)), mode="r").attrs)


def read_attrs(path) -> dict:
    """The root attributes of the store at ``path``."""
    return dict(zarr.open_group(str(path), mode="r").attrs)


def update_attrs(path, values: dict) -> None:
    """Add or replace root attributes."""
    zarr.open_group(str(path), mode="r+").attrs.update(values)


def read_array(path, name: str):
    """Root array ``name`` as numpy, or None when the store has none."""
    root = zarr.open_group(str(path), mode="r")
    return root[name][...] if name in root else None


def array_attrs(path, name: str) -> dict:
    """Attributes of root array ``name``."""
    return dict(zarr.open_group(str(path), mode="r")[name].attrs)

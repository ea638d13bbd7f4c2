"""Numerical checks on one shard of Hessian block rows (pure numpy; no I/O, no dask).

* :func:`inspect_shard` — finiteness, the translational sum rule per block row (Σ_j H_ij = 0 for a
  translation-invariant energy, common practice), the largest entry, the digest, and which other shards
  the shard's columns touch.
* :func:`transposed_parts` — a shard's blocks H_ij whose column atom j lives in another shard t,
  transposed into (j, i, H_ijᵀ): what shard t needs to check its own symmetry.
* :func:`symmetry_of_shard` — max |H_ij − H_jiᵀ| over a shard's rows, given those parts from the others.

Indices are store-order atoms; "dof" rows/columns are 3·atom + component.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.store.layout import Shard, shard_digest, shard_of


@dataclass
class ShardReport:
    """What :func:`inspect_shard` found.  Atoms are store-order indices; entries in energy/length²."""

    index: int
    n_blocks: int
    digest: str
    max_abs: float
    row_sum: float
    row_sum_atom: int
    nonfinite: tuple[int, int] | None
    touches: tuple[int, ...]
    structure: str | None = None


@dataclass
class SymmetryReport:
    """Largest |H[r, c] − H[c, r]| over a shard's rows (absolute), where it is, and the first pair (in
    row-major dof order) above the threshold.  ``worst``/``first_over`` are (row dof, col dof, H[r, c],
    H[c, r]) with store-order dofs."""

    index: int
    max_diff: float
    worst: tuple[int, int, float, float] | None
    first_over: tuple[int, int, float, float] | None
    n_over: int


def finite_blocks(shard: Shard) -> tuple[np.ndarray, tuple[int, int] | None]:
    """Blocks (nb, 3, 3) with non-finite entries set to 0, and the (row atom, col atom) of the first
    non-finite block, or None."""
    bad = ~np.isfinite(shard.blocks).all(axis=(1, 2))
    if not bad.any():
        return shard.blocks, None
    first = int(np.flatnonzero(bad)[0])
    where = (int(shard.row_atoms()[first]), int(shard.indices[first]))
    return np.where(np.isfinite(shard.blocks), shard.blocks, 0.0), where


def row_sums(shard: Shard, blocks: np.ndarray) -> np.ndarray:
    """Σ_j H_ij for each block row i of the shard: (rows, 3, 3)."""
    out = np.zeros((shard.n_rows, 3, 3))
    counts = np.diff(shard.indptr)
    filled = np.flatnonzero(counts)
    if len(filled):
        out[filled] = np.add.reduceat(blocks, shard.indptr[:-1][filled], axis=0)
    return out


def structure_problem(shard: Shard, n_atoms: int) -> str | None:
    """Why the shard is not well-formed BSR (indptr monotone from 0 to nb, columns in range and strictly
    increasing within each row, blocks (nb, 3, 3)), or None."""
    ptr, cols = shard.indptr, shard.indices
    if len(ptr) != shard.n_rows + 1 or ptr[0] != 0 or ptr[-1] != len(cols) or np.any(np.diff(ptr) < 0):
        return "indptr does not match the shard's rows and blocks"
    if shard.blocks.shape != (len(cols), 3, 3):
        return f"blocks have shape {shard.blocks.shape}, expected ({len(cols)}, 3, 3)"
    if len(cols) and (cols.min() < 0 or cols.max() >= n_atoms):
        return "a block column lies outside 0..n_atoms-1"
    keys = shard.row_atoms() * n_atoms + cols
    if np.any(keys[1:] <= keys[:-1]):
        return "block columns are not strictly increasing within a row"
    return None


def inspect_shard(k: int, shard: Shard, bounds: np.ndarray) -> ShardReport:
    """Per-shard facts for validation (see :class:`ShardReport`); non-finite blocks count as zero."""
    problem = structure_problem(shard, int(bounds[-1]))
    if problem:
        return ShardReport(k, len(shard.indices), shard_digest(shard), 0.0, 0.0, shard.first, None, (), problem)
    blocks, nonfinite = finite_blocks(shard)
    sums = np.abs(row_sums(shard, blocks)).max(axis=(1, 2)) if shard.n_rows else np.zeros(0)
    worst = int(np.argmax(sums)) if len(sums) else 0
    outside = (shard.indices < shard.first) | (shard.indices >= shard.stop)
    touches = np.unique(shard_of(shard.indices[outside], bounds))
    return ShardReport(
        index=k, n_blocks=len(shard.indices), digest=shard_digest(shard),
        max_abs=float(np.abs(blocks).max()) if len(blocks) else 0.0,
        row_sum=float(sums[worst]) if len(sums) else 0.0, row_sum_atom=shard.first + worst,
        nonfinite=nonfinite, touches=tuple(int(t) for t in touches))


def transposed_parts(shard: Shard, bounds: np.ndarray) -> dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """For each other shard t: (rows (m,), cols (m,), blocks (m, 3, 3)) = (j, i, H_ijᵀ) for this
    shard's blocks H_ij with j in t.  Non-finite entries count as zero."""
    blocks, _ = finite_blocks(shard)
    outside = np.flatnonzero((shard.indices < shard.first) | (shard.indices >= shard.stop))
    cols = shard.indices[outside]
    rows = shard.row_atoms()[outside]
    target = shard_of(cols, bounds)
    order = np.argsort(target, kind="stable")
    target, cols, rows, outside = target[order], cols[order], rows[order], outside[order]
    starts = np.flatnonzero(np.r_[True, target[1:] != target[:-1]]) if len(target) else []
    ends = np.r_[starts[1:], len(target)] if len(target) else []
    return {int(target[a]): (cols[a:b], rows[a:b], blocks[outside[a:b]].transpose(0, 2, 1).copy())
            for a, b in zip(starts, ends)}


def _lookup(keys: np.ndarray, wanted: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Positions of ``wanted`` in sorted ``keys`` and whether each is present."""
    pos = np.searchsorted(keys, wanted)
    safe = np.minimum(pos, max(len(keys) - 1, 0))
    found = (pos < len(keys)) & (keys[safe] == wanted) if len(keys) else np.zeros(len(wanted), bool)
    return safe, found


def _mirror(keys, blocks, wanted):
    """Blocks at ``wanted`` keys (zeros where absent) and which were present; ``keys`` ascending."""
    pos, found = _lookup(keys, wanted)
    out = np.zeros((len(wanted), 3, 3))
    if len(keys):
        out[found] = blocks[pos[found]]
    return out, found


def symmetry_of_shard(k: int, shard: Shard, n_atoms: int, incoming, threshold: float) -> SymmetryReport:
    """Compare each block H_ij of the shard with H_jiᵀ.

    ``incoming``: list of (rows, cols, blocks) parts that other shards made with
    :func:`transposed_parts` for this shard; an absent block counts as zero.  ``threshold``: absolute
    difference above which an entry is counted and the row-major first one reported.
    """
    blocks, _ = finite_blocks(shard)
    rows, cols = shard.row_atoms(), shard.indices
    keys = rows * n_atoms + cols
    inside = (cols >= shard.first) & (cols < shard.stop)
    mirror = np.empty_like(blocks)
    found, _ = _mirror(keys[inside], blocks[inside], cols[inside] * n_atoms + rows[inside])
    mirror[inside] = found.transpose(0, 2, 1)
    parts = [p for p in incoming if len(p[0])]
    r_in = np.concatenate([p[0] for p in parts]) if parts else np.zeros(0, np.int64)
    c_in = np.concatenate([p[1] for p in parts]) if parts else np.zeros(0, np.int64)
    b_in = np.concatenate([p[2] for p in parts]) if parts else np.zeros((0, 3, 3))
    k_in = r_in * n_atoms + c_in
    order = np.argsort(k_in)
    k_in, b_in, r_in, c_in = k_in[order], b_in[order], r_in[order], c_in[order]
    mirror[~inside], _ = _mirror(k_in, b_in, keys[~inside])
    _, matched = _lookup(keys[~inside], k_in)
    lone = ~matched
    all_rows = np.concatenate([rows, r_in[lone]])
    all_cols = np.concatenate([cols, c_in[lone]])
    own = np.concatenate([blocks, np.zeros((int(lone.sum()), 3, 3))])
    other = np.concatenate([mirror, b_in[lone]])
    return _symmetry_report(k, all_rows, all_cols, own, other, threshold)


def _symmetry_report(k, rows, cols, own, other, threshold) -> SymmetryReport:
    diff = np.abs(own - other)
    if not diff.size:
        return SymmetryReport(k, 0.0, None, None, 0)

    def element(flat):
        b, a, c = np.unravel_index(flat, diff.shape)
        return (int(3 * rows[b] + a), int(3 * cols[b] + c), float(own[b, a, c]), float(other[b, a, c]))

    worst = int(np.argmax(diff))
    over = np.flatnonzero(diff.reshape(-1) > threshold)
    first = None
    if len(over):
        b, a, c = np.unravel_index(over, diff.shape)
        pick = np.lexsort((3 * cols[b] + c, 3 * rows[b] + a))[0]
        first = element(over[pick])
    return SymmetryReport(k, float(diff.reshape(-1)[worst]), element(worst), first, len(over))

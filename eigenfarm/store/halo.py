"""The atoms a shard's Hessian rows can depend on, found with a coarse cell grid.

Rows of atoms R depend only on atoms within ``reach`` = cutoff × (halo + 1) of R (a term with
``halo`` = h needs complete neighbour lists for atoms up to h hops away).  Atoms are binned once into a
grid of cells at least ``reach`` wide (widths measured perpendicular to the cell faces, so triclinic
cells work); a shard's neighbourhood is every atom in the cells next to (or in) a cell holding one of
its atoms, periodic where the box is.  A build task then works on that sub-configuration, so its cost
is set by the shard, not by the whole system (common practice: linked cells, Allen & Tildesley,
Computer Simulation of Liquids, §5.3).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from eigenfarm.structure.box import Box


@dataclass
class CellGrid:
    """Atoms binned into ``shape`` cells; ``cell_of`` (N,) flat cell of each atom; ``atoms`` the atom
    indices sorted by cell with ``starts`` (n_cells + 1,) the offsets of each cell's run."""

    shape: tuple[int, int, int]
    periodic: tuple[bool, bool, bool]
    cell_of: np.ndarray
    starts: np.ndarray
    atoms: np.ndarray


def cell_grid(positions: np.ndarray, box: Box, reach: float) -> CellGrid:
    """Bin ``positions`` (N, 3, length units) into cells at least ``reach`` (length) wide."""
    s = box.fractional(positions)
    counts, index = [], []
    for d in range(3):
        x = s[:, d]
        if box.pbc[d]:
            x = x - np.floor(x)
            span = box.widths[d]
        else:
            lo, hi = (x.min(), x.max()) if len(x) else (0.0, 0.0)
            span = (hi - lo) * box.widths[d]
            x = (x - lo) / (hi - lo) if hi > lo else np.zeros_like(x)
        n = max(1, int(np.floor(span / reach)))
        counts.append(n)
        index.append(np.minimum((x * n).astype(np.int64), n - 1))
    flat = np.ravel_multi_index(tuple(index), counts)
    atoms = np.argsort(flat, kind="stable")
    starts = np.searchsorted(flat[atoms], np.arange(int(np.prod(counts)) + 1))
    return CellGrid(tuple(counts), tuple(bool(p) for p in box.pbc), flat, starts, atoms)


def neighbourhood(grid: CellGrid, first: int, stop: int) -> np.ndarray:
    """Sorted atom indices within one cell of atoms first..stop-1 (which are included)."""
    cells = np.unique(grid.cell_of[first:stop])
    coords = np.stack(np.unravel_index(cells, grid.shape), axis=1)
    near = []
    for shift in itertools.product((-1, 0, 1), repeat=3):
        c = coords + shift
        keep = np.ones(len(c), bool)
        for d in range(3):
            if grid.periodic[d]:
                c[:, d] %= grid.shape[d]
            else:
                keep &= (c[:, d] >= 0) & (c[:, d] < grid.shape[d])
        near.append(np.ravel_multi_index(tuple(c[keep].T), grid.shape))
    near = np.unique(np.concatenate(near))
    runs = [grid.atoms[grid.starts[c]:grid.starts[c + 1]] for c in near]
    return np.unique(np.concatenate(runs + [np.arange(first, stop)]))

"""Periodic neighbour search for orthorhombic and triclinic cells.

Method: atoms are wrapped into the cell; every periodic image that lies within ``cutoff`` of the cell
(a slab of fractional width cutoff/width_d beyond each periodic face, so several images per direction
when the cell is small) is added as a ghost; a k-d tree (scipy.spatial.cKDTree) over atoms and ghosts
answers all pairs within ``cutoff`` of the chosen centre atoms at C speed.  Each pair keeps the integer
lattice translation of its image, so separations can be recomputed for moved atoms without a new search
(Verlet skin, common practice).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box


@dataclass
class Neighbourhood:
    """Directed neighbour pairs i → j (each unordered bond appears twice when both ends are centres).

    ``i``, ``j`` (P,) atom indices; ``shift`` (P, 3) integer-valued lattice translation (stored as float so
    products with the cell take the BLAS path) such that the separation is
    d = x[j] − x[i] + shift · cell; ``d`` (P, 3) and ``r`` (P,) the separations for the positions last
    given; ``centres`` (N,) bool: atoms whose complete neighbour list (within ``cutoff``) is present.
    """

    n_atoms: int
    cutoff: float
    i: np.ndarray
    j: np.ndarray
    shift: np.ndarray
    d: np.ndarray
    r: np.ndarray
    centres: np.ndarray

    def refreshed(self, positions: np.ndarray, box: Box) -> "Neighbourhood":
        """The same pairs with separations recomputed for new ``positions`` (N, 3)."""
        d = positions[self.j] - positions[self.i] + self.shift @ box.cell
        return Neighbourhood(self.n_atoms, self.cutoff, self.i, self.j, self.shift, d,
                             np.sqrt(np.einsum("pk,pk->p", d, d)), self.centres)

    def within(self, cutoff: float) -> "Neighbourhood":
        """Only the pairs closer than ``cutoff``."""
        keep = self.r < cutoff
        return Neighbourhood(self.n_atoms, cutoff, self.i[keep], self.j[keep], self.shift[keep],
                             self.d[keep], self.r[keep], self.centres)

    def counts(self) -> np.ndarray:
        """(N,) number of neighbours of each atom (as centre)."""
        return np.bincount(self.i, minlength=self.n_atoms)


def _images(fractional: np.ndarray, box: Box, cutoff: float):
    """Atoms plus periodic ghost images within ``cutoff`` of the cell.

    Returns (owner (G,), lattice shift (G, 3) int) with the atoms themselves first (shift 0).
    """
    margin = cutoff / box.widths
    reach = [int(np.ceil(m)) if p else 0 for m, p in zip(margin, box.pbc)]
    n = len(fractional)
    owners, shifts = [np.arange(n)], [np.zeros((n, 3), dtype=np.int64)]
    for t in itertools.product(*(range(-k, k + 1) for k in reach)):
        if t == (0, 0, 0):
            continue
        s = fractional + np.array(t)
        keep = np.ones(n, bool)
        for dim in range(3):
            if box.pbc[dim]:
                keep &= (s[:, dim] >= -margin[dim]) & (s[:, dim] < 1.0 + margin[dim])
        idx = np.flatnonzero(keep)
        owners.append(idx)
        shifts.append(np.broadcast_to(np.array(t, dtype=np.int64), (len(idx), 3)))
    return np.concatenate(owners), np.concatenate(shifts)


def neighbour_pairs(positions: np.ndarray, box: Box, cutoff: float, centres=None) -> Neighbourhood:
    """All directed pairs (i, j) with i a centre and |d_ij| ≤ ``cutoff``.

    ``positions`` (N, 3) need not be wrapped; ``centres`` an index array or bool mask (default: all atoms).
    Separations d use the given (unwrapped) positions.  Coincident atoms appear as pairs with r = 0.
    """
    positions = np.asarray(positions, dtype=float)
    n = len(positions)
    frac = box.fractional(positions)
    wrap = np.zeros_like(frac)
    wrap[:, box.pbc] = np.floor(frac[:, box.pbc])
    frac -= wrap
    owner, shift = _images(frac, box, cutoff)
    image_xyz = box.cartesian(frac[owner] + shift)
    if centres is None:
        centre_idx = np.arange(n)
    else:
        centres = np.asarray(centres)
        centre_idx = np.flatnonzero(centres) if centres.dtype == bool else np.unique(centres)
    tree_images = cKDTree(image_xyz)
    tree_centres = cKDTree(image_xyz[centre_idx])
    found = tree_centres.sparse_distance_matrix(tree_images, cutoff, output_type="ndarray")
    ci = centre_idx[found["i"]]
    g = found["j"]
    not_self = ~((g < n) & (g == ci))
    ci, g = ci[not_self], g[not_self]
    j = owner[g]
    lattice = shift[g] - wrap[j].astype(np.int64) + wrap[ci].astype(np.int64)
    order = np.lexsort((j, ci))
    ci, j, lattice = ci[order], j[order], lattice[order]
    lattice = lattice.astype(float)
    d = positions[j] - positions[ci] + lattice @ box.cell
    mask = np.zeros(n, bool)
    mask[centre_idx] = True
    return Neighbourhood(n, cutoff, ci, j, lattice, d, np.sqrt(np.einsum("pk,pk->p", d, d)), mask)



def check_overlaps(positions: np.ndarray, box: Box, min_distance: float, where: str = "configuration") -> None:
    """Raise :class:`InputError` naming the closest pair of atoms if any two are nearer than ``min_distance``."""
    nb = neighbour_pairs(positions, box, min_distance)
    if len(nb.i):
        k = int(np.argmin(nb.r))
        raise InputError(
            f"{where}: atoms {nb.i[k]} and {nb.j[k]} overlap: distance {nb.r[k]:.4g} < {min_distance:g} "
            "(duplicated atom or wrong cell?)"
        )

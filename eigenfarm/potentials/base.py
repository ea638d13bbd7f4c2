"""The potential protocol: additive terms with analytic energy, forces and Hessian blocks.

A :class:`Potential` is a sum of :class:`Term` objects (a pair sum, a three-body sum, …) over a fixed
list of species.  Each term evaluates, vectorised over all its pairs or triplets,

* ``energy_forces`` — total energy (energy units) and forces (N, 3) (energy/length), and
* ``hessian_blocks`` — the 3×3 blocks ∂²E/∂x_a∂x_b (energy/length²) of the rows in a row set, as
  unsummed coordinates (row (B,), col (B,), block (B, 3, 3)).

A term whose contributions to row a come from interactions centred on a's neighbours (a three-body
term, where a may be an arm of a triplet centred elsewhere) declares ``halo = 1``: the caller then
supplies complete neighbour lists for the rows *and* their neighbours.  This is what lets the Hessian
store assemble one atom shard at a time without the whole matrix.
"""

from __future__ import annotations

from abc import ABC, abstractmethod

import numpy as np
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.potentials.neighbours import Neighbourhood, neighbour_pairs
from eigenfarm.structure.configuration import Configuration


class Term(ABC):
    """One additive part of a potential.  ``types`` (N,) are species indices into the potential's list."""

    #: largest separation (length units) at which this term interacts
    cutoff: float
    #: neighbour hops beyond a row set whose centred interactions reach those rows
    halo: int = 0

    @abstractmethod
    def energy_forces(self, nb: Neighbourhood, types: np.ndarray) -> tuple[float, np.ndarray]:
        """Energy and forces (N, 3) of the whole system; ``nb`` has every atom as a centre."""

    @abstractmethod
    def hessian_blocks(self, nb: Neighbourhood, types: np.ndarray, rows: np.ndarray):
        """Blocks of the rows flagged in ``rows`` (N,) bool: (row (B,), col (B,), block (B, 3, 3)).

        ``nb`` has every atom within ``halo`` hops of a row as a centre.  Blocks for the same (row, col)
        may repeat; the caller sums them.
        """

    def describe(self) -> dict:
        """Name and parameters, for provenance records (JSON-serialisable)."""
        return {"term": type(self).__name__}


def sum_blocks(row, col, blocks, n_rows: int, n_cols: int, row_offset: int = 0):
    """Sum repeated (row, col) blocks into BSR arrays (indptr (n_rows+1,), indices (nb,), data (nb, 3, 3)).

    Rows are shifted by ``row_offset`` (global row of local row 0); columns are sorted within each row.
    """
    local = np.asarray(row) - row_offset
    key = local.astype(np.int64) * n_cols + np.asarray(col, dtype=np.int64)
    order = np.argsort(key, kind="stable")
    key = key[order]
    if len(key):
        starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
        data = np.add.reduceat(np.asarray(blocks)[order], starts, axis=0)
        ukey = key[starts]
    else:
        data, ukey = np.zeros((0, 3, 3)), key
    rows_u, cols_u = ukey // n_cols, ukey % n_cols
    indptr = np.searchsorted(rows_u, np.arange(n_rows + 1))
    return indptr.astype(np.int64), cols_u.astype(np.int64), data


class Potential:
    """A sum of terms over the species ``species`` (tuple of labels).

    ``name`` and ``parameters`` are recorded as provenance in every Hessian store.
    """

    def __init__(self, species, terms: list[Term], name: str = "custom", parameters: dict | None = None):
        self.species = tuple(species)
        self.terms = list(terms)
        self.name = name
        self.parameters = parameters or {}

    @property
    def cutoff(self) -> float:
        """Largest interaction range (length units)."""
        return max(t.cutoff for t in self.terms)

    @property
    def halo(self) -> int:
        return max(t.halo for t in self.terms)

    def types(self, config: Configuration) -> np.ndarray:
        """(N,) species index of each atom in this potential's list; unknown species name the atom."""
        table = {s: k for k, s in enumerate(self.species)}
        wildcard = table.get("*")
        names, inverse = np.unique(config.species, return_inverse=True)
        codes = np.empty(len(names), dtype=np.int64)
        for k, label in enumerate(names):
            code = table.get(label, wildcard)
            if code is None:
                atom = int(np.flatnonzero(inverse == k)[0])
                raise InputError(
                    f"{config.source}: atom {atom}: species {str(label)!r} has no parameters in potential "
                    f"{self.name!r} (it knows {', '.join(self.species)})"
                )
            codes[k] = code
        return codes[inverse]

    def neighbours(self, config: Configuration, centres=None, skin: float = 0.0) -> Neighbourhood:
        """Neighbour pairs within cutoff + ``skin`` for ``centres`` (default all atoms)."""
        return neighbour_pairs(config.positions, config.box, self.cutoff + skin, centres)

    def energy_forces(self, config: Configuration, nb: Neighbourhood | None = None):
        """Total energy and forces (N, 3); ``nb`` may be a (refreshed) list with a skin."""
        return self.evaluate(nb or self.neighbours(config), self.types(config))

    def evaluate(self, nb: Neighbourhood, types: np.ndarray):
        """Energy and forces (N, 3) from a complete neighbour list and species indices (N,)."""
        energy, forces = 0.0, np.zeros((nb.n_atoms, 3))
        for term in self.terms:
            e, f = term.energy_forces(nb, types)
            energy += e
            forces += f
        return energy, forces

    def energy(self, config: Configuration) -> float:
        return self.energy_forces(config)[0]

    def hessian_rows(self, config: Configuration, rows: np.ndarray):
        """Hessian rows for atoms ``rows`` (sorted int array, contiguous or not) as unsummed blocks.

        Returns (row (B,), col (B,), block (B, 3, 3)) in energy/length², global atom indices.
        Builds neighbour lists only around ``rows`` (plus ``halo`` hops), so the cost scales with the
        row set, not the system.
        """
        types = self.types(config)
        mask = np.zeros(config.n_atoms, bool)
        mask[rows] = True
        centres = mask.copy()
        for _ in range(self.halo):
            nb = self.neighbours(config, centres)
            centres[nb.j] = True
        nb = self.neighbours(config, centres)
        parts = [term.hessian_blocks(nb, types, mask) for term in self.terms]
        return tuple(np.concatenate([p[k] for p in parts]) for k in range(3))

    def hessian(self, config: Configuration) -> sp.bsr_matrix:
        """The whole Hessian (3N × 3N, BSR with 3×3 blocks) in energy/length², for small systems."""
        n = config.n_atoms
        row, col, blocks = self.hessian_rows(config, np.arange(n))
        indptr, indices, data = sum_blocks(row, col, blocks, n, n)
        return sp.bsr_matrix((data, indices, indptr), shape=(3 * n, 3 * n))

    def describe(self) -> dict:
        return {"name": self.name, "species": list(self.species), "parameters": self.parameters,
                "terms": [t.describe() for t in self.terms]}

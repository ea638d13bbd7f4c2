"""Spring-lattice reference systems with analytic phonon spectra, shared by the tests.

Nearest-neighbour springs of stiffness k at their rest length, so the Hessian is Σ k δ̂δ̂ᵀ per bond and
the dynamical matrix at wavevector q is D(q) = (k/m) Σ_δ (1 − cos q·δ) δ̂δ̂ᵀ over the nearest-neighbour
vectors δ (Ashcroft & Mermin, Solid State Physics, 1976, ch. 22, eq. 22.58 for a monatomic Bravais
lattice with pair interactions).  The allowed q of a periodic box are those of Born–von Kármán
boundary conditions (ibid., ch. 22 and eq. 8.27).
"""

from __future__ import annotations

import itertools

import numpy as np

from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration

FCC_BASIS = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])


def springs(r0: float, rc: float, k: float = 1.0) -> Potential:
    """Nearest-neighbour springs: φ = k/2 (r − r0)² for r < rc."""
    return Potential(["*"], [PairTerm("spring", ["*"], {("*", "*"): {"k": k, "r0": r0, "rc": rc}})])


def fcc_crystal(cells: int, a: float = 1.0, k: float = 1.0, mass: float = 1.0):
    """FCC crystal of cells³ conventional cubes (4·cells³ atoms) with nearest-neighbour springs."""
    grid = np.array(list(itertools.product(range(cells), repeat=3)))
    positions = ((grid[:, None, :] + FCC_BASIS[None]) * a).reshape(-1, 3)
    config = Configuration(positions, ["X"] * len(positions), Box.cubic(cells * a), "reduced",
                           masses=np.full(len(positions), mass))
    return config, springs(a / np.sqrt(2), 0.85 * a, k)


def fcc_neighbours(a: float = 1.0) -> np.ndarray:
    """The 12 nearest-neighbour vectors (a/2)(±1, ±1, 0) and permutations, (12, 3)."""
    vectors = {p for v in itertools.product((-1, 1), repeat=2) for p in itertools.permutations((v[0], v[1], 0))}
    return np.array(sorted(vectors), dtype=float) * a / 2


def fcc_allowed_q(cells: int, a: float = 1.0) -> np.ndarray:
    """One wavevector per class of the 4·cells³ allowed in the periodic box: q = 2π n/(cells·a), n in
    [0, 2·cells)² × [0, cells) (n and n + cells·(1,1,1) differ by an FCC reciprocal-lattice vector)."""
    L = cells
    n = np.array([(x, y, z) for x in range(2 * L) for y in range(2 * L) for z in range(L)], dtype=float)
    return 2 * np.pi * n / (L * a)


def bravais_eigenvalues(qs: np.ndarray, neighbours: np.ndarray, k: float = 1.0, mass: float = 1.0) -> np.ndarray:
    """Sorted eigenvalues ω² of D(q) over all q (len(q)·3 values), Ashcroft & Mermin eq. 22.58."""
    unit = neighbours / np.linalg.norm(neighbours, axis=1)[:, None]
    outer = unit[:, :, None] * unit[:, None, :]
    weight = 1 - np.cos(qs @ neighbours.T)  # (Q, 12)
    D = (k / mass) * np.einsum("qd,dij->qij", weight, outer)
    return np.sort(np.linalg.eigvalsh(D).ravel())


def simple_cubic(cells: int, a: float = 1.0, k: float = 1.0):
    """Simple cubic crystal, cells³ atoms, nearest-neighbour springs (a floppy lattice: 3·cells² zero modes)."""
    positions = np.array(list(itertools.product(range(cells), repeat=3)), dtype=float) * a
    config = Configuration(positions, ["X"] * len(positions), Box.cubic(cells * a), "reduced")
    return config, springs(a, 1.2 * a, k)


def ring(n: int, a: float = 1.0, k: float = 1.0, mass: float = 1.0):
    """n atoms on a periodic line along x (box n·a × 10a × 10a), springs between neighbours."""
    positions = np.zeros((n, 3))
    positions[:, 0] = np.arange(n) * a
    config = Configuration(positions, ["X"] * n, Box.orthorhombic([n * a, 10 * a, 10 * a]), "reduced",
                           masses=np.full(n, mass))
    return config, springs(a, 1.5 * a, k)


def ring_frequencies(n: int, k: float = 1.0, mass: float = 1.0) -> np.ndarray:
    """ω_j = 2√(k/m)|sin(πj/n)|, j = 0 … n−1: the chain's longitudinal branch (Kittel, Introduction to
    Solid State Physics, 8th ed., 2005, ch. 4, eq. 4.9 with Born–von Kármán boundary conditions)."""
    return 2 * np.sqrt(k / mass) * np.abs(np.sin(np.pi * np.arange(n) / n))

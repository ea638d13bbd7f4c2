"""Matrices shared by the backend tests: a small glass and a degenerate FCC spring crystal."""

import numpy as np
import pytest
import scipy.sparse as sp

from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration


def mass_weighted(H: sp.spmatrix, masses: np.ndarray) -> sp.csr_matrix:
    """D = M^-½ H M^-½ for atom masses (N,)."""
    scale = sp.diags(np.repeat(masses, 3) ** -0.5)
    return (scale @ H @ scale).tocsr()


@pytest.fixture(scope="module")
def glass():
    """A 300-atom demo glass with species masses 1 (A) and 2 (B): (D (900 × 900), eigenvalues)."""
    config = make_sample(Recipe(300), seed=3, sample=0)
    masses = np.where(config.species == "A", 1.0, 2.0)
    D = mass_weighted(demo_potential().hessian(config), masses)
    return D, np.linalg.eigvalsh(D.toarray())


@pytest.fixture(scope="module")
def crystal():
    """FCC crystal, 3³ cubic cells (108 atoms), nearest-neighbour springs k = 1 at rest, m = 1:
    (D (324 × 324), eigenvalues, distinct eigenvalues).  Plane waves make them heavily degenerate."""
    basis = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    grid = np.array([[i, j, k] for i in range(3) for j in range(3) for k in range(3)])
    positions = (grid[:, None, :] + basis[None]).reshape(-1, 3)
    spring = PairTerm("spring", ["*"], {("*", "*"): {"k": 1.0, "r0": 2 ** -0.5, "rc": 0.85}})
    config = Configuration(positions, ["X"] * len(positions), Box.cubic(3.0))
    D = Potential(["*"], [spring]).hessian(config).tocsr()
    values = np.linalg.eigvalsh(D.toarray())
    distinct = values[np.r_[True, np.diff(values) > 1e-9]]
    return D, values, distinct

"""Shared fixtures for the Hessian store tests: small jittered lattices, pair potentials, one dask cluster."""

from __future__ import annotations

import numpy as np
import pytest

from eigenfarm.farm.cluster import open_client
from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration

FCC = np.array([[0, 0, 0], [0.5, 0.5, 0], [0.5, 0, 0.5], [0, 0.5, 0.5]])


def jittered_fcc(cells: int, jitter: float = 0.05, seed: int = 0, species=("A",), density: float = 1.1):
    """An FCC lattice of 4·cells³ atoms at ``density`` (reduced units) with Gaussian displacements and
    species assigned at random; positions wrapped into the cell."""
    rng = np.random.default_rng(seed)
    a = (4 / density) ** (1 / 3)
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    positions = ((grid + FCC) * a).reshape(-1, 3) + rng.normal(scale=jitter, size=(4 * cells**3, 3))
    box = Box.cubic(cells * a)
    labels = rng.choice(np.array(species), size=len(positions))
    return Configuration(box.wrap(positions), labels, box, "reduced", masses=rng.uniform(1, 2, len(positions)),
                         source="test lattice")


def pair_potential(form: str = "lj", species=("A",)) -> Potential:
    """Lennard-Jones (or ipl n=12) between all species pairs, cut off between the first two FCC shells."""
    params = {"lj": {"eps": 1.0, "sigma": 1.0, "rc": 1.45}, "ipl": {"eps": 1.0, "sigma": 1.0, "n": 12, "rc": 1.45}}
    table = {(a, b): dict(params[form]) for a in species for b in species}
    return Potential(species, [PairTerm(form, species, table)], name=f"test {form}")


@pytest.fixture(scope="session")
def client():
    """One local 2-worker cluster for the whole test session (starting one costs a few seconds)."""
    with open_client(workers=2) as c:
        yield c


@pytest.fixture
def lattice():
    """The :func:`jittered_fcc` factory."""
    return jittered_fcc


@pytest.fixture
def potential():
    """The :func:`pair_potential` factory."""
    return pair_potential


def permutation_dofs(original_index: np.ndarray) -> np.ndarray:
    """Input-order dof of each store-order dof (3a + c → 3·original[a] + c)."""
    return (3 * original_index[:, None] + np.arange(3)).reshape(-1)


@pytest.fixture
def input_dofs():
    """The :func:`permutation_dofs` helper."""
    return permutation_dofs

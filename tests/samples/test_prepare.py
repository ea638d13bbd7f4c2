"""Demo glasses and the FIRE minimiser."""

import numpy as np
import pytest

from eigenfarm.errors import ConvergenceError
from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.fire import fire_minimise
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.samples.ensemble import make_ensemble
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration


def fcc_springs(cells=2, a=1.0, k=1.0):
    """FCC crystal with nearest-neighbour springs at rest length a/√2 (its own minimum)."""
    basis = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    grid = np.array([[i, j, l] for i in range(cells) for j in range(cells) for l in range(cells)])
    positions = ((grid[:, None, :] + basis[None]) * a).reshape(-1, 3)
    r0 = a / np.sqrt(2)
    potential = Potential(["*"], [PairTerm("spring", ["*"], {("*", "*"): {"k": k, "r0": r0, "rc": 0.85 * a}})])
    return Configuration(positions, ["X"] * len(positions), Box.cubic(cells * a)), potential


def test_fire_returns_a_perturbed_crystal_to_its_lattice():
    # Analytic minimum: the undistorted FCC spring crystal (every spring at rest length, energy 0),
    # up to a rigid translation (common practice).
    lattice, potential = fcc_springs()
    rng = np.random.default_rng(5)
    start = lattice.with_positions(lattice.positions + 0.05 * rng.normal(size=lattice.positions.shape))
    relaxed = fire_minimise(potential, start)
    assert relaxed.fmax < 1e-10
    # residual energy ≈ ½ FᵀH⁺F ≤ N fmax² / (2 λ_min), λ_min ~ k (2π/L)² ≈ 0.6 here
    assert relaxed.energy < 32 * 1e-20 / (2 * 0.6)
    shift = relaxed.config.positions - lattice.positions
    shift -= shift.mean(axis=0)
    assert np.abs(lattice.box.minimum_image(shift)).max() < 1e-9


def test_fire_reports_non_convergence_clearly():
    lattice, potential = fcc_springs()
    start = lattice.with_positions(lattice.positions + 0.05 * np.random.default_rng(1).normal(size=(32, 3)))
    with pytest.raises(ConvergenceError, match="did not converge in 3 steps"):
        fire_minimise(potential, start, max_steps=3)


def test_demo_sample_is_a_minimum_and_deterministic():
    recipe = Recipe(120)
    a = make_sample(recipe, seed=7, sample=0)
    b = make_sample(recipe, seed=7, sample=0)
    c = make_sample(recipe, seed=7, sample=1)
    assert np.array_equal(a.positions, b.positions) and np.array_equal(a.species, b.species)
    assert not np.array_equal(a.positions, c.positions)
    energy, forces = demo_potential().energy_forces(a)
    assert np.sqrt((forces**2).sum(axis=1)).max() < 1e-10
    assert a.info["energy_per_atom"] == pytest.approx(energy / 120, rel=1e-12)
    # composition and density as the recipe says
    assert (a.species == "A").sum() == 72
    assert a.box.volume == pytest.approx(120 / recipe.density)


def test_annealed_sample_differs_from_instant_quench_and_is_a_minimum():
    quench = make_sample(Recipe(100), seed=3, sample=0)
    annealed = make_sample(Recipe(100, anneal_steps=200, temperature=0.4), seed=3, sample=0)
    assert not np.allclose(quench.positions, annealed.positions)
    _, forces = demo_potential().energy_forces(annealed)
    assert np.sqrt((forces**2).sum(axis=1)).max() < 1e-10
    assert annealed.info["anneal_steps"] == 200


def test_ensemble_resumes_and_refuses_a_foreign_file(tmp_path):
    from eigenfarm.errors import InputError

    recipe = Recipe(60)
    paths = make_ensemble(recipe, seed=1, samples=2, out=tmp_path)
    before = [p.read_bytes() for p in paths]
    again = make_ensemble(recipe, seed=1, samples=2, out=tmp_path)
    assert [p.read_bytes() for p in again] == before
    with pytest.raises(InputError, match="holds a different sample"):
        make_ensemble(recipe, seed=2, samples=2, out=tmp_path)

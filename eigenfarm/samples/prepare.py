"""Preparing glass samples: random fill, optional Langevin anneal, FIRE quench.

Protocol (documented in docs/user-guide.md § Demo glasses, since the low-frequency tail depends on it):

1. ``N`` atoms placed uniformly at random in a periodic cube at the scenario's density (species drawn
   at the scenario's fraction), i.e. an infinite-temperature liquid;
2. optionally ``anneal_steps`` of Langevin dynamics at temperature ``temperature`` (BAOAB splitting,
   Leimkuhler & Matthews, Appl. Math. Res. Express 2013, 34; friction ``friction``), a short anneal;
3. a FIRE quench to max |F| < ``fmax`` (an instantaneous quench from the state reached).

Everything is drawn from ``numpy.random.default_rng([seed, sample])``, so sample k of seed s is
the same on every machine and in any order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.potentials.base import Potential
from eigenfarm.potentials.fire import SkinnedForces, fire_minimise
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration
from eigenfarm.samples import scenario


@dataclass(frozen=True)
class Recipe:
    """How to make one sample: size, density (atoms per length³), composition, anneal and quench."""

    n_atoms: int
    density: float = scenario.DENSITY
    fraction_a: float = scenario.FRACTION_A
    anneal_steps: int = 0
    temperature: float = 0.5
    timestep: float = 0.003
    friction: float = 1.0
    fmax: float = 1e-10


def random_fill(recipe: Recipe, rng: np.random.Generator) -> Configuration:
    """Uniform random positions in a periodic cube of volume N/ρ; species A with probability fraction_a."""
    length = (recipe.n_atoms / recipe.density) ** (1 / 3)
    n_a = int(round(recipe.fraction_a * recipe.n_atoms))
    species = np.array(["A"] * n_a + ["B"] * (recipe.n_atoms - n_a))
    rng.shuffle(species)
    positions = rng.random((recipe.n_atoms, 3)) * length
    return Configuration(positions, species, Box.cubic(length), "reduced", source="random fill")


def langevin_anneal(potential: Potential, config: Configuration, recipe: Recipe,
                    rng: np.random.Generator) -> Configuration:
    """``recipe.anneal_steps`` BAOAB Langevin steps at ``recipe.temperature`` (reduced units, k_B = 1).

    Starts from a FIRE pre-relaxation to max |F| < 1 so random overlaps do not explode.
    """
    config = fire_minimise(potential, config, fmax=1.0).config
    x, m = config.positions.copy(), config.masses[:, None]
    dt, gamma, kt = recipe.timestep, recipe.friction, recipe.temperature
    v = rng.normal(size=x.shape) * np.sqrt(kt / m)
    forces = SkinnedForces(potential, config, skin=0.3)
    f = forces(x)[1]
    c1 = np.exp(-gamma * dt)
    c2 = np.sqrt((1 - c1 * c1) * kt / m)
    for _ in range(recipe.anneal_steps):
        v += 0.5 * dt * f / m
        x += 0.5 * dt * v
        v = c1 * v + c2 * rng.normal(size=x.shape)
        x += 0.5 * dt * v
        f = forces(x)[1]
        v += 0.5 * dt * f / m
    return config.with_positions(config.box.wrap(x))


def make_sample(recipe: Recipe, seed: int, sample: int, potential: Potential | None = None) -> Configuration:
    """Sample number ``sample`` of ensemble ``seed``: a quenched glass (max |F| < recipe.fmax)."""
    potential = potential or scenario.demo_potential()
    rng = np.random.default_rng([seed, sample])
    config = random_fill(recipe, rng)
    if recipe.anneal_steps:
        config = langevin_anneal(potential, config, recipe, rng)
    relaxed = fire_minimise(potential, config, fmax=recipe.fmax)
    out = relaxed.config.with_positions(relaxed.config.box.wrap(relaxed.config.positions))
    out.info = {"seed": seed, "sample": sample, "energy_per_atom": relaxed.energy / recipe.n_atoms,
                "fmax": relaxed.fmax, "fire_steps": relaxed.steps, "anneal_steps": recipe.anneal_steps,
                "anneal_temperature": recipe.temperature if recipe.anneal_steps else 0.0,
                "potential": potential.name}
    out.source = f"sample {sample} of seed {seed}"
    return out

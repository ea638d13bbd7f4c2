"""Published parameter sets reproduce their published numbers."""

import numpy as np
import pytest

from eigenfarm.potentials.library import SW_SILICON, stillinger_weber_silicon
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration


def diamond(a, cells=1):
    """Perfect diamond lattice, ``cells``³ conventional cells of edge ``a`` (Å); the basis is offset by
    a/8 so that no atom sits on a cell face."""
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    basis = np.vstack([fcc, fcc + 0.25]) + 0.125
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    pos = (grid + basis).reshape(-1, 3) * a
    return Configuration(pos, ["Si"] * len(pos), Box.cubic(a * cells), units="metal")


def test_sw_silicon_diamond_energy_at_published_minimum():
    # Stillinger & Weber, PRB 31, 5262 (1985): diamond at a = 5.431 Å has energy −2ε = −4.3366 eV/atom
    pot = stillinger_weber_silicon()
    cfg = diamond(5.431, cells=2)
    energy, forces = pot.energy_forces(cfg)
    assert energy / cfg.n_atoms == pytest.approx(-4.3366, abs=1e-6)
    assert np.abs(forces).max() < 1e-12


def test_sw_silicon_energy_is_minimal_near_5431():
    # the diamond minimum of SW silicon is at nearest-neighbour distance 2^(1/6) σ (SW 1985, sec. II),
    # i.e. a = 4 · 2^(1/6) σ / √3 = 5.4309 Å
    pot = stillinger_weber_silicon()
    a_min = 4 * 2 ** (1 / 6) * SW_SILICON["sigma"] / np.sqrt(3)
    assert a_min == pytest.approx(5.431, abs=2e-4)
    e = [pot.energy(diamond(a_min * s)) for s in (0.999, 1.0, 1.001)]
    assert e[1] < e[0] and e[1] < e[2]


def test_sw_silicon_three_body_vanishes_in_perfect_diamond():
    # cos θ = −1/3 at the tetrahedral angle, where the SW angular factor (cos θ + 1/3)² is zero (SW 1985)
    pot = stillinger_weber_silicon()
    cfg = diamond(5.431)
    nb = pot.neighbours(cfg)
    e3 = pot.terms[1].energy_forces(nb, pot.types(cfg))[0]
    assert abs(e3) < 1e-12
    sheared = cfg.with_positions(cfg.positions @ np.array([[1, 0.02, 0], [0, 1, 0], [0, 0, 1]]))
    sheared.box = cfg.box.deformed(np.array([[0, 0.02, 0], [0, 0, 0], [0, 0, 0]]))
    assert pot.terms[1].energy_forces(pot.neighbours(sheared), pot.types(sheared))[0] > 1e-4


def test_sw_silicon_records_its_parameters():
    pot = stillinger_weber_silicon()
    p = pot.parameters
    assert p["units"] == "metal" and p["species"] == ["Si"]
    assert p["triplets"]["Si-Si-Si"]["B"] == pytest.approx(21.0 * 2.1683)
    assert p["triplets"]["Si-Si-Si"]["xi"] == pytest.approx(1.20 * 2.0951)
    assert p["pairs"]["sw2"]["Si-Si"]["A"] == 7.049556277

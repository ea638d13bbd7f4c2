"""Configurations: masses from species (standard atomic weights in metal units, 1 in reduced units)."""

from __future__ import annotations

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration, species_masses
from eigenfarm.structure.units import METAL, REDUCED

#: abridged standard atomic weights, IUPAC CIAAW (Prohaska et al., "Standard atomic weights of the
#: elements 2021", Pure Appl. Chem. 94, 573, 2022, Table 2); Ar is an interval since 2021, 39.95 its
#: conventional value.  Typed from memory of that table, independently of eigenfarm/structure/elements.py.
IUPAC_ABRIDGED = {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999, "Na": 22.990, "Al": 26.982,
                  "Si": 28.085, "Ar": 39.95, "Fe": 55.845, "Cu": 63.546, "Ge": 72.630, "Ag": 107.87,
                  "Au": 196.97}


def test_metal_masses_are_standard_atomic_weights():
    labels = list(IUPAC_ABRIDGED)
    masses = species_masses(labels, METAL)
    assert masses.tolist() == [IUPAC_ABRIDGED[s] for s in labels]
    config = Configuration(np.zeros((3, 3)) + np.arange(3)[:, None], ["Si", "O", "Si"], Box.cubic(5.0), "metal")
    assert config.masses.tolist() == [28.085, 15.999, 28.085]


def test_reduced_masses_default_to_one():
    assert species_masses(["A", "B", "Si"], REDUCED).tolist() == [1.0, 1.0, 1.0]
    config = Configuration(np.zeros((2, 3)), ["A", "B"], Box.cubic(5.0))
    assert config.units.name == "reduced" and config.masses.tolist() == [1.0, 1.0]


def test_unknown_species_in_metal_units_names_the_first_atom():
    with pytest.raises(InputError, match=r"^glass.xyz: atom 2: unknown species 'Xx'"):
        species_masses(["Si", "O", "Xx", "Xx"], METAL, "glass.xyz")
    # an element without stable isotopes has no standard atomic weight either
    with pytest.raises(InputError, match="atom 0: unknown species 'Tc'"):
        Configuration(np.zeros((1, 3)), ["Tc"], Box.cubic(5.0), "metal")


def test_explicit_masses_checked():
    box = Box.cubic(5.0)
    config = Configuration(np.zeros((2, 3)), ["A", "B"], box, masses=2.5)
    assert config.masses.tolist() == [2.5, 2.5]
    for bad in ([1.0, 0.0], [1.0, -2.0], [np.nan, 1.0]):
        with pytest.raises(InputError, match="atom [01]: mass"):
            Configuration(np.zeros((2, 3)), ["A", "B"], box, masses=bad)
    with pytest.raises(InputError, match="3 species labels for 2 atoms"):
        Configuration(np.zeros((2, 3)), ["A", "B", "A"], box)
    with pytest.raises(InputError, match="atom 1: non-finite position"):
        Configuration(np.array([[0.0, 0, 0], [np.nan, 0, 0]]), ["A", "B"], box)


def test_take_and_species_index():
    config = Configuration(np.arange(12.0).reshape(4, 3), ["B", "A", "C", "A"], Box.cubic(20.0),
                           masses=[1.0, 2.0, 3.0, 4.0])
    assert config.species_names == ["A", "B", "C"]
    assert config.species_index.tolist() == [1, 0, 2, 0]
    sub = config.take(np.array([2, 0]))
    assert sub.species.tolist() == ["C", "B"] and sub.masses.tolist() == [3.0, 1.0]
    np.testing.assert_array_equal(sub.positions, config.positions[[2, 0]])

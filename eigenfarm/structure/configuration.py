"""Atomic configurations: positions, species, masses, cell and unit system."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box
from eigenfarm.structure.elements import ATOMIC_WEIGHTS
from eigenfarm.structure.units import UnitSystem, get_units


def species_masses(species, units: UnitSystem, where: str = "configuration") -> np.ndarray:
    """Masses (N,) for species labels (N,).

    ``metal`` units look each label up in the standard atomic weights table (amu); ``reduced`` units give
    every species mass 1 (give explicit masses for unequal reduced masses).  An unknown element names the
    first atom that carries it.
    """
    species = np.asarray(species)
    if units.name == "reduced":
        return np.ones(len(species))
    labels, inverse = np.unique(species, return_inverse=True)
    table = np.empty(len(labels))
    for k, label in enumerate(labels):
        if label not in ATOMIC_WEIGHTS:
            atom = int(np.flatnonzero(inverse == k)[0])
            raise InputError(
                f"{where}: atom {atom}: unknown species {str(label)!r} in metal units "
                "(not an element with a standard atomic weight; give explicit masses)"
            )
        table[k] = ATOMIC_WEIGHTS[label]
    return table[inverse]


@dataclass
class Configuration:
    """N atoms in a cell.

    ``positions`` (N, 3) in length units; ``species`` (N,) string labels; ``masses`` (N,) in mass units
    (looked up from species when omitted); ``box`` the cell; ``units`` the unit system;
    ``info`` free-form metadata carried through extended XYZ comment lines.
    """

    positions: np.ndarray
    species: np.ndarray
    box: Box
    units: UnitSystem = field(default_factory=lambda: get_units("reduced"))
    masses: np.ndarray | None = None
    info: dict = field(default_factory=dict)
    source: str = "configuration"

    def __post_init__(self):
        self.positions = np.array(self.positions, dtype=float).reshape(-1, 3)
        n = len(self.positions)
        self.species = np.asarray(self.species).astype(str).reshape(-1)
        if isinstance(self.units, str):
            self.units = get_units(self.units)
        if len(self.species) != n:
            raise InputError(f"{self.source}: {len(self.species)} species labels for {n} atoms")
        bad = np.flatnonzero(~np.isfinite(self.positions).all(axis=1))
        if len(bad):
            raise InputError(f"{self.source}: atom {bad[0]}: non-finite position")
        if self.masses is None:
            self.masses = species_masses(self.species, self.units, self.source)
        else:
            self.masses = np.broadcast_to(np.asarray(self.masses, dtype=float), (n,)).copy()
        bad = np.flatnonzero(~(np.isfinite(self.masses) & (self.masses > 0)))
        if len(bad):
            raise InputError(f"{self.source}: atom {bad[0]}: mass {self.masses[bad[0]]} is not positive")

    @property
    def n_atoms(self) -> int:
        return len(self.positions)

    @property
    def species_names(self) -> list[str]:
        """Sorted distinct species labels."""
        return sorted(set(self.species.tolist()))

    @property
    def species_index(self) -> np.ndarray:
        """(N,) int index of each atom's species in :attr:`species_names`."""
        return np.searchsorted(np.array(self.species_names), self.species)

    def with_positions(self, positions: np.ndarray) -> "Configuration":
        """A copy with new positions (N, 3)."""
        return Configuration(positions, self.species, self.box, self.units, self.masses,
                             dict(self.info), self.source)

    def take(self, order: np.ndarray) -> "Configuration":
        """The configuration with atoms reordered (or subset) by index array ``order``."""
        return Configuration(self.positions[order], self.species[order], self.box, self.units,
                             self.masses[order], dict(self.info), self.source)

"""Periodic simulation cells (orthorhombic or triclinic).

A cell is a 3×3 matrix whose *rows* are the lattice vectors a, b, c (length units).  Cartesian
positions r and fractional coordinates s are related by r = s · cell.  Each direction may be periodic
or not (``pbc``); a non-periodic direction still has a cell vector, used only for spatial ordering.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from eigenfarm.errors import InputError


@dataclass(frozen=True)
class Box:
    """Simulation cell: ``cell`` (3, 3) rows = lattice vectors; ``pbc`` (3,) bool."""

    cell: np.ndarray
    pbc: np.ndarray = field(default_factory=lambda: np.ones(3, bool))

    def __post_init__(self):
        cell = np.array(self.cell, dtype=float).reshape(3, 3)
        pbc = np.broadcast_to(np.asarray(self.pbc, dtype=bool), (3,)).copy()
        if not np.all(np.isfinite(cell)):
            raise InputError("cell: non-finite lattice vector component")
        if abs(np.linalg.det(cell)) < 1e-12 * max(1.0, np.abs(cell).max() ** 3):
            raise InputError("cell: lattice vectors are linearly dependent (zero volume)")
        object.__setattr__(self, "cell", cell)
        object.__setattr__(self, "pbc", pbc)

    @classmethod
    def cubic(cls, length: float, pbc=True) -> "Box":
        """A cube of edge ``length``."""
        return cls(np.eye(3) * float(length), pbc)

    @classmethod
    def orthorhombic(cls, lengths, pbc=True) -> "Box":
        """An orthorhombic cell with edges ``lengths`` (3,)."""
        return cls(np.diag(np.asarray(lengths, dtype=float)), pbc)

    @property
    def volume(self) -> float:
        """Cell volume (length³)."""
        return float(abs(np.linalg.det(self.cell)))

    @property
    def is_orthorhombic(self) -> bool:
        return bool(np.all(self.cell == np.diag(np.diag(self.cell))))

    @property
    def widths(self) -> np.ndarray:
        """Perpendicular distances between opposite faces (3,), length units."""
        inv = np.linalg.inv(self.cell)  # columns are reciprocal vectors / 2π
        return 1.0 / np.linalg.norm(inv, axis=0)

    def fractional(self, positions: np.ndarray) -> np.ndarray:
        """Fractional coordinates s (N, 3) of Cartesian ``positions`` (N, 3)."""
        return np.asarray(positions, dtype=float) @ np.linalg.inv(self.cell)

    def cartesian(self, fractional: np.ndarray) -> np.ndarray:
        """Cartesian positions (N, 3) of fractional coordinates (N, 3)."""
        return np.asarray(fractional, dtype=float) @ self.cell

    def wrap(self, positions: np.ndarray) -> np.ndarray:
        """Positions (N, 3) mapped into the cell along periodic directions."""
        s = self.fractional(positions)
        s[:, self.pbc] -= np.floor(s[:, self.pbc])
        s[:, self.pbc] %= 1.0  # floor can leave exactly 1.0 after rounding
        return self.cartesian(s)

    def minimum_image(self, d: np.ndarray) -> np.ndarray:
        """Minimum-image form of separation vectors ``d`` (..., 3).

        Exact when |d| is below half the smallest periodic width; used for displacements, not for
        neighbour search (see :mod:`eigenfarm.potentials.neighbours`).
        """
        s = np.asarray(d, dtype=float) @ np.linalg.inv(self.cell)
        s[..., self.pbc] -= np.round(s[..., self.pbc])
        return s @ self.cell

    def deformed(self, strain: np.ndarray) -> "Box":
        """The cell under the homogeneous deformation r → r (I + strain) (row-vector convention)."""
        return Box(self.cell @ (np.eye(3) + np.asarray(strain, dtype=float)), self.pbc)

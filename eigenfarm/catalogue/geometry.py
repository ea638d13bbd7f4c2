"""The sample a catalogue's modes belong to: masses, positions and cell, in input atom order.

A catalogue carries these (optional, one vector's worth of data) so that analyses which need space —
plane-wave projections, mode locations, radial profiles — work on the catalogue alone, without the
Hessian store it was solved from.  Layout inside the catalogue::

    mass      (site,)       float64  mass units
    position  (site, xyz)   float64  length units (absent for an imported matrix)
    root attributes ``cell`` (3×3 rows = lattice vectors, length units) and ``pbc`` (3 booleans)

The dimension is ``site`` (not ``atom``) because ``atom`` is already the dof coordinate of ``vector``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.structure.box import Box


@dataclass(frozen=True)
class Geometry:
    """``masses`` (N,) mass units; ``positions`` (N, 3) length units or None; ``box`` or None."""

    masses: np.ndarray
    positions: np.ndarray | None = None
    box: Box | None = None

    @property
    def n_atoms(self) -> int:
        return len(self.masses)

    @property
    def periodic(self) -> bool:
        """Positions and a fully periodic cell are known (plane waves and minimum images make sense)."""
        return self.positions is not None and self.box is not None and bool(np.all(self.box.pbc))

    @classmethod
    def from_store(cls, store) -> "Geometry":
        """From an open Hessian store (store atom order) to input atom order."""
        order = np.argsort(store.original_index)
        positions = store.positions
        return cls(np.asarray(store.masses)[order],
                   None if positions is None else np.asarray(positions)[order], store.box)

    def attributes(self) -> dict:
        """Root attributes describing the cell (empty without one)."""
        if self.box is None:
            return {}
        return {"cell": self.box.cell.tolist(), "pbc": [bool(p) for p in self.box.pbc]}


def read_geometry(group, attrs: dict) -> Geometry | None:
    """The geometry stored in an open catalogue ``group`` (root attributes ``attrs``), or None."""
    if "mass" not in group:
        return None
    positions = group["position"][...] if "position" in group else None
    box = Box(np.asarray(attrs["cell"]), np.asarray(attrs["pbc"])) if "cell" in attrs else None
    return Geometry(group["mass"][...], positions, box)

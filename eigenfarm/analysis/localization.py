"""Where a mode lives and how its amplitude decays around that place.

Vector convention: everything here uses the catalogue's mass-weighted unit vectors e (e_a = √m_a u_a for
displacements u); per-atom weight |e_a|² is the share of the mode's kinetic energy carried by atom a.
With unequal masses this differs from weighting displacements |u_a|²; we use e because it is the
eigenvector of the symmetric dynamical matrix and its weights sum to one.

- participation ratio P = (Σ|e_a|²)² / (N Σ|e_a|⁴) (Bell & Dean, Discuss. Faraday Soc. 50, 55, 1970 —
  from memory) and its inverse IPR = Σ|e_a|⁴ / (Σ|e_a|²)² = 1/(N P) (1 for one atom, 1/N for all alike);
- centre: the weighted mean position of the ``top`` atoms with the largest |e_a|², taken with minimum
  images around the largest one (so a mode across a periodic boundary is placed correctly);
- radial profile: mean |e_a|² of atoms at distance r from the centre, in shells out to half the
  smallest periodic width (the largest distance a minimum image defines).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.catalogue.geometry import Geometry

#: atoms averaged into a mode's centre
CENTRE_ATOMS = 16


def inverse_participation(weight: np.ndarray) -> np.ndarray:
    """IPR = Σ|e_a|⁴ / (Σ|e_a|²)² of each row of per-atom weights (b, N); returns (b,)."""
    total = weight.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.einsum("ba,ba->b", weight, weight) / total**2


def _separation(geometry: Geometry, d: np.ndarray) -> np.ndarray:
    return d if geometry.box is None else geometry.box.minimum_image(d)


def mode_centres(weight: np.ndarray, geometry: Geometry, top: int = CENTRE_ATOMS) -> np.ndarray:
    """Centre of each mode (b, 3) in length units from per-atom weights (b, N) and the atoms' positions."""
    top = min(top, weight.shape[1])
    centres = np.empty((len(weight), 3))
    for i, row in enumerate(weight):
        chosen = np.argpartition(row, -top)[-top:]
        anchor = geometry.positions[np.argmax(row)]
        d = _separation(geometry, geometry.positions[chosen] - anchor)
        centres[i] = anchor + row[chosen] @ d / row[chosen].sum()
    if geometry.box is not None:
        centres = geometry.box.wrap(centres)
    return centres


@dataclass(frozen=True)
class RadialProfile:
    """``radius`` (bins,) shell centres (length units); ``weight`` (bins,) mean |e_a|² of the atoms in each
    shell; ``atoms`` (bins,) how many atoms each shell holds."""

    radius: np.ndarray
    weight: np.ndarray
    atoms: np.ndarray

    def to_dict(self) -> dict:
        return {"radius": self.radius.tolist(), "weight": self.weight.tolist(), "atoms": self.atoms.tolist()}


def reach(geometry: Geometry) -> float:
    """Largest distance a radial profile covers: half the smallest periodic width, else the sample's extent."""
    if geometry.box is not None and np.all(geometry.box.pbc):
        return 0.5 * float(np.min(geometry.box.widths))
    return float(np.ptp(geometry.positions, axis=0).max())


def radial_profile(weight: np.ndarray, centre: np.ndarray, geometry: Geometry, bins: int = 24) -> RadialProfile:
    """Profile of one mode's per-atom weights (N,) around ``centre`` (3,), in ``bins`` equal shells."""
    r = np.linalg.norm(_separation(geometry, geometry.positions - centre), axis=1)
    edges = np.linspace(0.0, reach(geometry), bins + 1)
    atoms = np.histogram(r, edges)[0]
    summed = np.histogram(r, edges, weights=weight)[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(atoms > 0, summed / np.maximum(atoms, 1), np.nan)
    return RadialProfile(0.5 * (edges[1:] + edges[:-1]), mean, atoms)

"""Participation ratio of mass-weighted mode vectors.

P = (Σ_a |e_a|²)² / (N Σ_a |e_a|⁴), with |e_a|² the squared norm of atom a's three components and N the
number of atoms (Bell & Dean, Discuss. Faraday Soc. 50, 55, 1970).  P = 1 when every atom moves
equally, 1/N when one atom moves alone, 2/3 for a standing plane wave; quasi-localised modes in glasses
have P of order 10⁻²–10⁻³ at 10⁴ atoms.
"""

from __future__ import annotations

import numpy as np


def participation_ratio(vectors: np.ndarray) -> np.ndarray:
    """P of each row of ``vectors`` (b, 3N): dof 3a + c is component c of atom a.  Returns (b,).

    The vectors need not be normalised (P is scale-free); a zero vector gives NaN.
    """
    vectors = np.asarray(vectors, dtype=float)
    if vectors.ndim != 2 or vectors.shape[1] % 3:
        raise ValueError(f"vectors must have shape (b, 3N), got {vectors.shape}")
    n_atoms = vectors.shape[1] // 3
    weight = np.einsum("bac,bac->ba", vectors.reshape(len(vectors), n_atoms, 3),
                       vectors.reshape(len(vectors), n_atoms, 3))
    total = weight.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total**2 / (n_atoms * np.einsum("ba,ba->b", weight, weight))

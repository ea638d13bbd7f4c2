"""The mass-weighted dynamical matrix D = M^-½ H M^-½ of a Hessian store, and its scale.

D is assembled in the store's (spatial) atom order; :func:`to_input_order` maps vectors back to the
order of the atoms in the user's input, which is the order catalogues use.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from eigenfarm.store import open_store


def dynamical_matrix(H: sp.spmatrix, masses: np.ndarray) -> sp.csr_matrix:
    """D = M^-½ H M^-½ (3N × 3N CSR, energy/(length²·mass)) from H (3N × 3N) and masses (N,)."""
    scale = np.repeat(1.0 / np.sqrt(np.asarray(masses, dtype=float)), 3)
    S = sp.diags(scale)
    D = (S @ sp.csr_matrix(H) @ S).tocsr()
    D.sort_indices()
    return D


def load_dynamical(path) -> tuple[sp.csr_matrix, np.ndarray, dict]:
    """(D, original_index (N,), store attributes) for the Hessian store at ``path``."""
    store = open_store(path)
    D = dynamical_matrix(store.matrix("csr"), store.masses)
    info = {"digest": store.digest, "units": store.units.name, "n_atoms": store.n_atoms,
            "pbc": None if store.box is None else [bool(p) for p in store.box.pbc]}
    return D, store.original_index, info


def largest_eigenvalue(D: sp.spmatrix, rtol: float = 1e-6, seed: int = 0) -> float:
    """λ_max of D by Lanczos (scipy eigsh, which='LA'): the scale of the spectrum (energy/(length²·mass))."""
    if D.shape[0] <= 3:
        return float(np.linalg.eigvalsh(D.toarray())[-1])
    v0 = np.random.default_rng(seed).standard_normal(D.shape[0])
    return float(sla.eigsh(D, k=1, which="LA", tol=rtol, v0=v0, return_eigenvectors=False)[0])


def to_input_order(vectors: np.ndarray, original_index: np.ndarray) -> np.ndarray:
    """Rows of ``vectors`` (3N, m) from store order to input atom order (3·input_atom + xyz)."""
    out = np.empty_like(vectors)
    dof = (3 * np.asarray(original_index)[:, None] + np.arange(3)).ravel()
    out[dof] = vectors
    return out


def trivial_zero_modes(pbc) -> int | None:
    """Zero modes a translation/rotation-invariant potential must give: 3 translations, plus the
    rotations compatible with the periodic directions (fully periodic 3, slab 3, wire 4, free cluster 6);
    None when the store has no cell (an imported matrix).  Common practice (rigid-body motions)."""
    if pbc is None:
        return None
    return {3: 3, 2: 3, 1: 4, 0: 6}[int(sum(bool(p) for p in pbc))]

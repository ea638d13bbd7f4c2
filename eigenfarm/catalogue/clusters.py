"""Where two slices meet: duplicates removed, near-degenerate sets made orthonormal.

A mode close to a slice boundary may be returned by both neighbouring slices, and the members of a
(near-)degenerate set straddling a boundary are orthonormal within each slice but not across.  Modes
whose eigenvalues chain together within a tolerance τ form a *cluster*; a cluster holding modes of more
than one slice is resolved:

1. **Duplicates.**  Members are taken in order of increasing residual; one whose overlap with the span
   of the members already kept exceeds 0.9 (‖Qᵀe‖ > 0.9, Q an orthonormal basis of the kept ones) is a
   duplicate and dropped — so of two copies of a mode (|e_i·e_j| > 0.9) the one with the smaller
   residual stays, and a copy of a degenerate partner is caught even when it mixes several partners.
2. **Rayleigh–Ritz on the cluster.**  For the kept vectors A (a, n), unit rows, with eigenvalue
   estimates Λ, the projected matrix A D Aᵀ is estimated without D as S = ½(GΛ + ΛG), G = AAᵀ (exact
   for exact eigenpairs; error of the order of the residuals otherwise).  Solving S y = θ G y gives
   G-orthonormal Y, so Q = YᵀA is orthonormal and θ are the Ritz values (Parlett, *The Symmetric
   Eigenvalue Problem*, SIAM 1998, §11.4).  The residual of q = Σ_i y_i a_i is bounded by
   ‖Dq − θq‖ ≤ Σ_i |y_i| (‖D a_i − λ_i a_i‖ + |λ_i − θ| ‖a_i‖), which is what is recorded.

Clusters within one slice are left alone: a slice's vectors are already orthonormal.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

#: overlap with already-kept vectors above which a member is a duplicate
DUPLICATE_OVERLAP = 0.9


@dataclass
class Resolution:
    """A resolved cluster: ``kept`` member indices (ascending), ``dropped`` duplicates, and the
    modes that replace the cluster: ``eigenvalues`` (a,) ascending, ``residuals`` (a,), ``slices`` (a,)
    and ``vectors`` (a, n) unit rows, or None when the kept members stand unchanged (all from one
    slice)."""

    kept: np.ndarray
    dropped: np.ndarray
    eigenvalues: np.ndarray
    residuals: np.ndarray
    slices: np.ndarray
    vectors: np.ndarray | None


def runs(eigenvalues: np.ndarray, tol: float) -> list[tuple[int, int]]:
    """(start, stop) of each maximal run of ascending ``eigenvalues`` (p,) whose neighbours differ by
    at most ``tol`` (same units); singletons included."""
    if len(eigenvalues) == 0:
        return []
    breaks = np.flatnonzero(np.diff(eigenvalues) > tol) + 1
    edges = np.r_[0, breaks, len(eigenvalues)]
    return list(zip(edges[:-1].tolist(), edges[1:].tolist()))


def _select(vectors: np.ndarray, residuals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Greedy duplicate removal: (kept, dropped) member indices, each ascending."""
    basis = np.zeros((0, vectors.shape[1]))
    kept, dropped = [], []
    for i in np.argsort(residuals, kind="stable"):
        v = vectors[i] / np.linalg.norm(vectors[i])
        inside = basis @ v
        if np.linalg.norm(inside) > DUPLICATE_OVERLAP:
            dropped.append(i)
            continue
        w = v - basis.T @ inside
        w -= basis.T @ (basis @ w)  # second Gram–Schmidt pass
        basis = np.vstack([basis, w / np.linalg.norm(w)])
        kept.append(i)
    return np.sort(np.array(kept, dtype=np.int64)), np.sort(np.array(dropped, dtype=np.int64))


def _ritz(eigenvalues, residuals, slices, vectors, scale):
    """Rayleigh–Ritz on the span of ``vectors`` (a, n) from their eigenvalue estimates (module doc)."""
    a = vectors / np.linalg.norm(vectors, axis=1, keepdims=True)
    gram = a @ a.T
    lam = np.asarray(eigenvalues, dtype=float)
    projected = 0.5 * (gram * lam[None, :] + lam[:, None] * gram)
    theta, y = scipy.linalg.eigh(projected, gram)
    q = y.T @ a
    weight = np.abs(y)
    bound = (weight * (residuals[:, None] * scale + np.abs(lam[:, None] - theta[None, :]))).sum(axis=0)
    return theta, bound / scale, slices[np.argmax(weight, axis=0)], q


def resolve(eigenvalues: np.ndarray, residuals: np.ndarray, slices: np.ndarray, vectors: np.ndarray,
            scale: float) -> Resolution:
    """Resolve one cluster of c modes: ``eigenvalues`` (c,) in λ units, ``residuals`` (c,) relative to
    ``scale`` (λ units), ``slices`` (c,) int, ``vectors`` (c, n) mass-weighted rows."""
    kept, dropped = _select(vectors, residuals)
    if len(np.unique(slices[kept])) < 2:
        return Resolution(kept, dropped, eigenvalues[kept], residuals[kept], slices[kept], None)
    theta, bound, origin, q = _ritz(eigenvalues[kept], residuals[kept], slices[kept], vectors[kept], scale)
    return Resolution(kept, dropped, theta, bound, origin, q)

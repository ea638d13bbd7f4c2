"""Plane waves allowed by a periodic cell, grouped in shells of equal |k|, and the weight of modes on them.

In a periodic cell with lattice vectors a_i (rows of ``cell``) the allowed wave vectors are
k = Σ_j n_j b_j with integer n and reciprocal vectors b_j (a_i·b_j = 2π δ_ij).  In a cube of edge L,
k = 2πn/L and the shells |n|² = 1, 2, 3, 4, 5, 6 hold 6, 12, 8, 6, 24, 24 vectors (integer-vector counts).

A long-wavelength acoustic wave displaces every atom alike, u_a = ε exp(i k·r_a); in the mass-weighted
coordinates of the catalogue it is the unit vector w_a = √(m_a/Σm) ε exp(i k·r_a).  The weight of a mode
e (unit norm) on wave vector k is |F_k|² with F_k = Σ_a √(m_a/Σm) e_a exp(−i k·r_a) (a 3-vector);
its longitudinal part is |k̂·F_k|², its transverse part |F_k|² − |k̂·F_k|².  Summed over a shell and both
polarisations this is the fraction of the mode that is a plane wave of that |k|: 1 for an eigenmode of a
crystal with a one-atom basis, small for a quasi-localised mode.  (Common practice in the glass
literature; the normalisation is ours.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.errors import InputError

#: atoms per block of the phase matrix exp(−i k·r): bounds memory at 16·n_k·ATOM_BLOCK bytes
ATOM_BLOCK = 1 << 15


@dataclass(frozen=True)
class Shells:
    """The first shells of allowed wave vectors.

    ``k`` (n_k, 3) wave vectors (1/length), ``shell`` (n_k,) shell index of each, ``magnitude``
    (n_shells,) |k| of each shell, ``multiplicity`` (n_shells,) vectors per shell, ``label`` (n_shells,)
    a readable name (|n|² for a cube, else |k|).
    """

    k: np.ndarray
    shell: np.ndarray
    magnitude: np.ndarray
    multiplicity: np.ndarray
    label: tuple[str, ...]

    @property
    def n_shells(self) -> int:
        return len(self.magnitude)


def _is_cube(cell: np.ndarray) -> bool:
    edge = np.linalg.norm(cell[0])
    return bool(np.allclose(cell, edge * np.eye(3), rtol=0, atol=1e-9 * edge))


def allowed_shells(cell, n_shells: int, rtol: float = 1e-9) -> Shells:
    """The ``n_shells`` shortest nonzero |k| shells of the periodic cell ``cell`` (3, 3), rows = lattice
    vectors (length units).  Vectors whose |k| agree within ``rtol`` share a shell."""
    cell = np.asarray(cell, dtype=float)
    if n_shells < 1:
        raise InputError(f"plane-wave shells: need at least one, got {n_shells}")
    recip = 2 * np.pi * np.linalg.inv(cell).T
    reach = int(np.ceil(np.sqrt(n_shells))) + 1
    while True:  # grow the integer search box until the n-th shell is certainly inside it
        axis = np.arange(-reach, reach + 1)
        n = np.stack(np.meshgrid(axis, axis, axis, indexing="ij"), -1).reshape(-1, 3)
        n = n[np.any(n != 0, axis=1)]
        k = n @ recip
        size = np.linalg.norm(k, axis=1)
        order = np.argsort(size, kind="stable")
        n, k, size = n[order], k[order], size[order]
        new_shell = np.concatenate([[True], np.diff(size) > rtol * size[1:]])
        index = np.cumsum(new_shell) - 1
        inner = 2 * np.pi * reach / np.max(np.linalg.norm(cell, axis=1))  # |n_j| ≤ |k||a_j|/2π
        if index[-1] >= n_shells and size[np.searchsorted(index, n_shells)] < inner:
            break
        reach *= 2
    keep = index < n_shells
    n, k, index = n[keep], k[keep], index[keep]
    magnitude = size[keep][new_shell[keep]]
    cube = _is_cube(cell)
    label = tuple(f"|n|²={int((n[index == s][0] ** 2).sum())}" if cube else f"|k|={magnitude[s]:.4g}"
                  for s in range(n_shells))
    return Shells(k, index, magnitude, np.bincount(index, minlength=n_shells), label)


def shell_weights(vectors: np.ndarray, positions: np.ndarray, masses: np.ndarray,
                  shells: Shells) -> tuple[np.ndarray, np.ndarray]:
    """Transverse and longitudinal weights of each mode on each shell.

    ``vectors`` (b, 3N) mass-weighted unit rows; ``positions`` (N, 3) length units; ``masses`` (N,).
    Returns (T, L), each (b, n_shells): Σ over the shell's k of |F_k|² − |k̂·F_k|² and |k̂·F_k|².
    The phase matrix is built ATOM_BLOCK atoms at a time, so memory stays bounded for any N.
    """
    vectors = np.asarray(vectors, dtype=float)
    n_atoms = len(masses)
    b = len(vectors)
    weight = np.sqrt(np.asarray(masses, dtype=float) / np.sum(masses))
    re = np.zeros((b * 3, len(shells.k)))
    im = np.zeros((b * 3, len(shells.k)))
    for start in range(0, n_atoms, ATOM_BLOCK):
        stop = min(start + ATOM_BLOCK, n_atoms)
        X = vectors[:, 3 * start:3 * stop].reshape(b, stop - start, 3) * weight[start:stop, None]
        X = np.ascontiguousarray(X.transpose(0, 2, 1)).reshape(b * 3, stop - start)  # rows: (mode, xyz)
        angle = positions[start:stop] @ shells.k.T  # (atoms, n_k); F = Σ X e^{−iθ}: two real products
        re += X @ np.cos(angle)
        im -= X @ np.sin(angle)
    F = (re + 1j * im).reshape(b, 3, len(shells.k))
    total = np.einsum("bck,bck->bk", F.real, F.real) + np.einsum("bck,bck->bk", F.imag, F.imag)
    unit = shells.k / np.linalg.norm(shells.k, axis=1)[:, None]
    along = np.einsum("bck,kc->bk", F, unit)
    longitudinal = along.real**2 + along.imag**2
    per_shell = np.zeros((shells.n_shells, len(shells.k)))
    per_shell[shells.shell, np.arange(len(shells.k))] = 1.0
    return (total - longitudinal) @ per_shell.T, longitudinal @ per_shell.T

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
#: largest phase table kept for a whole scan (bytes)
PHASE_CACHE = 64 * 2**20


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


class Projector:
    """Weights of modes on the plane waves of ``shells`` for one sample.

    ``positions`` (N, 3) length units, ``masses`` (N,).  The phase table cos/sin(k·r) (2·N·n_k doubles) is
    built once and kept when it fits in ``cache_bytes``; otherwise it is rebuilt ATOM_BLOCK atoms at a
    time for every call, so memory stays bounded for any N.
    """

    def __init__(self, positions: np.ndarray, masses: np.ndarray, shells: Shells, cache_bytes: int = PHASE_CACHE):
        self.positions = np.asarray(positions, dtype=float)
        masses = np.asarray(masses, dtype=float)
        self.weight = np.sqrt(masses / masses.sum())
        self.shells = shells
        blocks = range(0, len(masses), ATOM_BLOCK)
        cached = 16 * len(masses) * len(shells.k) <= cache_bytes
        self._cache = [self._phases(start) for start in blocks] if cached else None

    def _phases(self, start: int) -> tuple[np.ndarray, np.ndarray]:
        angle = self.positions[start:start + ATOM_BLOCK] @ self.shells.k.T  # (atoms, n_k)
        return np.cos(angle), np.sin(angle)

    def weights(self, vectors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(T, L), each (b, n_shells), for ``vectors`` (b, 3N) mass-weighted unit rows: Σ over each shell's
        k of |F_k|² − |k̂·F_k|² and |k̂·F_k|²."""
        vectors = np.asarray(vectors, dtype=float)
        b, n_k = len(vectors), len(self.shells.k)
        re = np.zeros((b * 3, n_k))
        im = np.zeros((b * 3, n_k))
        for index, start in enumerate(range(0, len(self.weight), ATOM_BLOCK)):
            stop = min(start + ATOM_BLOCK, len(self.weight))
            X = vectors[:, 3 * start:3 * stop].reshape(b, stop - start, 3) * self.weight[start:stop, None]
            X = np.ascontiguousarray(X.transpose(0, 2, 1)).reshape(b * 3, stop - start)  # rows: (mode, xyz)
            cos, sin = self._cache[index] if self._cache is not None else self._phases(start)
            re += X @ cos  # F = Σ X e^{−iθ}: two real products
            im -= X @ sin
        return self._split(re.reshape(b, 3, n_k), im.reshape(b, 3, n_k))

    def _split(self, re: np.ndarray, im: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        shells = self.shells
        total = np.einsum("bck,bck->bk", re, re) + np.einsum("bck,bck->bk", im, im)
        unit = shells.k / np.linalg.norm(shells.k, axis=1)[:, None]
        longitudinal = np.einsum("bck,kc->bk", re, unit) ** 2 + np.einsum("bck,kc->bk", im, unit) ** 2
        per_shell = np.zeros((shells.n_shells, len(shells.k)))
        per_shell[shells.shell, np.arange(len(shells.k))] = 1.0
        return (total - longitudinal) @ per_shell.T, longitudinal @ per_shell.T


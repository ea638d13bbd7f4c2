"""Dense LAPACK backend: LDLᵀ with Bunch–Kaufman pivoting, for small D and as the reference.

scipy.linalg.ldl (LAPACK ?sytrf) computes P (D − σI) Pᵀ = T B Tᵀ with T unit lower triangular and B
block diagonal with 1×1 and 2×2 blocks (Bunch & Kaufman, Math. Comp. 31, 163, 1977).  B is congruent
to D − σI, so by Sylvester's law of inertia the eigenvalue signs of B's blocks count the eigenvalues
of D below and above σ exactly (up to rounding; see :mod:`.common`).  Solves reuse T and B: two
triangular solves and one tridiagonal solve.  Memory n² doubles, time O(n³): refused above ``max_n``.

Example::

    >>> backend = DenseBackend()
    >>> f = backend.factor(D, 1.5)          # D: n × n symmetric, eigenvalues λ = ω²
    >>> f.inertia().below                   # number of λ < 1.5
    >>> x = f.solve(b)                      # (D − 1.5 I)⁻¹ b
"""

from __future__ import annotations

import time

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Backend, Factor, Inertia, SingularShift
from eigenfarm.solve.backends.common import block_diagonal_signs, check_factor, shifted

#: largest n the dense backend accepts by default (n² doubles = 0.8 GiB; ~1 min per factorisation)
DENSE_MAX_N = 10_000


class DenseFactor(Factor):
    """(D − σI)⁻¹ from P (D − σI) Pᵀ = T B Tᵀ: ``lower`` T (n × n), ``band`` B as (3, n) tridiagonal
    band storage, ``perm`` P as an index array (n,)."""

    def __init__(self, sigma: float, n: int, stats: dict, lower: np.ndarray, band: np.ndarray,
                 perm: np.ndarray, inertia: Inertia):
        super().__init__(sigma, n, stats)
        self._lower, self._band, self._perm, self._inertia = lower, band, perm, inertia

    def solve(self, b: np.ndarray) -> np.ndarray:
        """(D − σI)⁻¹ b for b (n,) or (n, k)."""
        y = la.solve_triangular(self._lower, b[self._perm], lower=True, unit_diagonal=True, check_finite=False)
        z = la.solve_banded((1, 1), self._band, y, check_finite=False)
        w = la.solve_triangular(self._lower, z, lower=True, trans="T", unit_diagonal=True, check_finite=False)
        x = np.empty_like(w)
        x[self._perm] = w
        return x

    def inertia(self) -> Inertia:
        return self._inertia


class DenseBackend(Backend):
    """LAPACK Bunch–Kaufman LDLᵀ of the dense D − σI (n ≤ ``max_n``).

    ``zero_tol``: σ closer than zero_tol × ‖D − σI‖₁ to an eigenvalue raises SingularShift.
    """

    name = "dense"
    provides_inertia = True
    handles_indefinite = True
    distributed = False

    def __init__(self, max_n: int = DENSE_MAX_N, zero_tol: float = 1e-12):
        self.max_n, self.zero_tol = int(max_n), float(zero_tol)

    def check_size(self, n: int) -> None:
        """InputError if n is above ``max_n``, naming the backends to use instead."""
        if n > self.max_n:
            gib = 8 * n * n / 2**30
            raise InputError(f"dense backend: n = {n} is above its limit {self.max_n} (it needs {gib:.1f} GiB and "
                             f"O(n³) time); use backend 'superlu' (any shift) or 'cholmod' (shifts below the spectrum)")

    def factor(self, D: sp.spmatrix, sigma: float) -> DenseFactor:
        """Factor D − σI (D: n × n symmetric, σ in D's eigenvalue units)."""
        start = time.perf_counter()
        A, sigma, norm = shifted(D, sigma)
        n = A.shape[0]
        self.check_size(n)
        packed, blocks, perm = la.ldl(A.toarray(), lower=True, hermitian=True, overwrite_a=True,
                                      check_finite=False)
        lower = np.ascontiguousarray(packed[perm])
        del packed
        diagonal, sub = np.diag(blocks).copy(), np.diag(blocks, -1).copy()
        neg, zero, pos = block_diagonal_signs(diagonal, sub)
        if zero:
            raise SingularShift(f"shift {sigma!r} is an eigenvalue of D ({zero} zero pivots)")
        band = np.zeros((3, n))
        band[0, 1:], band[1], band[2, :-1] = sub, diagonal, sub
        factor = DenseFactor(sigma, n, {"backend": self.name}, lower, band, perm, Inertia(neg, 0, pos))
        factor.stats.update(check_factor(A, factor.solve, sigma, norm, self.zero_tol))
        factor.stats.update(seconds=time.perf_counter() - start, factor_nnz=n * (n + 1) // 2,
                            two_by_two_blocks=int((sub != 0).sum()))
        return factor

    def describe(self) -> dict:
        return {"backend": self.name, "method": "LAPACK sytrf (Bunch–Kaufman LDLᵀ)", "max_n": self.max_n,
                "zero_tol": self.zero_tol}

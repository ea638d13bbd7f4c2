"""CHOLMOD backend (optional): supernodal Cholesky D − σI = P L Lᵀ Pᵀ, for shifts below the spectrum.

CHOLMOD (Chen, Davis, Hager & Rajamanickam, ACM TOMS 35, 22, 2008) through scikit-sparse, with METIS
ordering (../shared/FACTS.md: ~4× faster and ~2.5× less fill than AMD on our matrices).  A Cholesky
factor exists only for positive-definite D − σI, i.e. σ below every eigenvalue of D: for a stable
configuration any σ < 0, the usual shift for the lowest modes (the 3 zero modes come first).  Its
inertia is therefore one bit: a factor means no eigenvalue below σ; a failure raises
:class:`IndefiniteShift` (at least one eigenvalue ≤ σ).  Interior shifts need 'superlu' or 'dense'.

Setting up (Debian 12): ``apt-get install libsuitesparse-dev libopenblas0-pthread`` then
``pip install "eigenfarm[cholmod]"`` (scikit-sparse 0.4.16; 0.5.0 does not compile against Debian 12's
SuiteSparse 5.12).  Without OpenBLAS, Debian's SuiteSparse runs on the reference BLAS and the
supernodal factorisation is 7× slower (13,500 atoms: 17.4 s against 2.5 s; SuperLU with METIS 15 s).

Example::

    >>> f = CholmodBackend().factor(D, -0.01)   # D: n × n sparse, positive semi-definite
    >>> f.inertia()                             # Inertia(below=0, zero=0, above=n)
    >>> x = f.solve(b)                          # (D + 0.01 I)⁻¹ b
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Backend, Factor, Inertia
from eigenfarm.solve.backends.common import IndefiniteShift, check_factor, shifted

try:
    from sksparse import cholmod as _cholmod
except ImportError:  # optional dependency
    _cholmod = None

#: how to install the optional dependency (shown when it is missing)
INSTALL_HINT = ("apt-get install libsuitesparse-dev libopenblas0-pthread && pip install 'eigenfarm[cholmod]' "
                "(scikit-sparse 0.4.16)")
#: CHOLMOD fill-reducing orderings
ORDERINGS = ("metis", "amd", "nesdis", "colamd", "natural")


def available() -> bool:
    """True if scikit-sparse (CHOLMOD) can be imported here."""
    return _cholmod is not None


class CholmodFactor(Factor):
    """(D − σI)⁻¹ through a CHOLMOD factor of the positive-definite D − σI."""

    def __init__(self, sigma: float, n: int, stats: dict, chol):
        super().__init__(sigma, n, stats)
        self._chol = chol

    def solve(self, b: np.ndarray) -> np.ndarray:
        """(D − σI)⁻¹ b for b (n,) or (n, k)."""
        return self._chol(np.asarray(b, dtype=np.float64))

    def inertia(self) -> Inertia:
        """All n eigenvalues above σ (the factor exists only then)."""
        return Inertia(0, 0, self.n)


class CholmodBackend(Backend):
    """Supernodal CHOLMOD Cholesky of D − σI; σ must lie below the spectrum of D.

    ``ordering``: one of :data:`ORDERINGS`; ``zero_tol``: σ closer than zero_tol × ‖D − σI‖₁ to an
    eigenvalue raises SingularShift.
    """

    name = "cholmod"
    provides_inertia = False
    handles_indefinite = False
    distributed = False

    def __init__(self, ordering: str = "metis", zero_tol: float = 1e-12):
        if not available():
            raise InputError(f"backend 'cholmod' needs scikit-sparse, which is not installed: {INSTALL_HINT}")
        if ordering not in ORDERINGS:
            raise InputError(f"cholmod backend: unknown ordering {ordering!r}: choose one of {', '.join(ORDERINGS)}")
        self.ordering, self.zero_tol = ordering, float(zero_tol)

    def factor(self, D: sp.spmatrix, sigma: float) -> CholmodFactor:
        """Factor D − σI (n × n, σ in D's eigenvalue units, below every eigenvalue of D)."""
        start = time.perf_counter()
        A, sigma, norm = shifted(D, sigma)
        factor_start = time.perf_counter()
        try:
            chol = _cholmod.cholesky(A, ordering_method=self.ordering, mode="supernodal")
        except _cholmod.CholmodNotPositiveDefiniteError:
            raise IndefiniteShift(f"shift {sigma!r}: D − σI is not positive definite, so at least one eigenvalue of "
                                  f"D is ≤ σ; backend 'cholmod' factors only shifts below the spectrum "
                                  f"(use 'superlu' or 'auto')") from None
        factor_seconds = time.perf_counter() - factor_start
        factor = CholmodFactor(sigma, A.shape[0], {"backend": self.name, "ordering": self.ordering}, chol)
        factor.stats.update(check_factor(A, factor.solve, sigma, norm, self.zero_tol))
        factor.stats.update(factor_seconds=factor_seconds, seconds=time.perf_counter() - start)
        return factor

    def describe(self) -> dict:
        return {"backend": self.name, "method": "CHOLMOD supernodal Cholesky", "ordering": self.ordering,
                "zero_tol": self.zero_tol}

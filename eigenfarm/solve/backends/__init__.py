"""Factorisation backends for shift-invert, one per module, chosen by name with :func:`get_backend`.

=========  ================  ==================  ===============================================
name       provides_inertia  handles_indefinite  method
=========  ================  ==================  ===============================================
dense      yes               yes                 LAPACK Bunch–Kaufman LDLᵀ (n ≤ 10,000)
superlu    yes               yes                 SuperLU symmetric mode (LDLᵀ), METIS ordering
cholmod    no (one bit)      no                  CHOLMOD supernodal Cholesky (optional install)
slepc      yes               yes                 MUMPS LDLᵀ through PETSc, also on MPI ranks (optional)
auto       yes               yes                 dense / cholmod (σ < 0) / mumps or superlu
=========  ================  ==================  ===============================================

Example::

    >>> from eigenfarm.solve.backends import get_backend
    >>> factor = get_backend("auto").factor(D, sigma)   # D = M^-½ H M^-½, n × n, σ in λ = ω² units
    >>> factor.inertia().below                          # eigenvalues of D below σ
"""

from __future__ import annotations

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Backend
from eigenfarm.solve.backends import cholmod, slepc
from eigenfarm.solve.backends.auto import AutoBackend
from eigenfarm.solve.backends.cholmod import CholmodBackend
from eigenfarm.solve.backends.common import IndefiniteShift
from eigenfarm.solve.backends.dense import DenseBackend
from eigenfarm.solve.backends.slepc import SlepcBackend
from eigenfarm.solve.backends.superlu import SuperLUBackend

#: name → backend class
BACKENDS: dict[str, type[Backend]] = {"auto": AutoBackend, "dense": DenseBackend, "superlu": SuperLUBackend,
                                      "cholmod": CholmodBackend, "slepc": SlepcBackend}
#: optional backends → whether their dependencies are installed here
OPTIONAL = {"cholmod": cholmod.available, "slepc": slepc.available}


def available_backends() -> list[str]:
    """Names usable on this machine (``cholmod`` only with scikit-sparse, ``slepc`` only with PETSc/SLEPc)."""
    return [name for name in BACKENDS if name not in OPTIONAL or OPTIONAL[name]()]


def get_backend(name: str, **settings) -> Backend:
    """The backend called ``name`` with keyword ``settings`` for its constructor.

    Unknown names, unknown settings and a missing optional dependency raise :class:`InputError`.
    """
    if name not in BACKENDS:
        raise InputError(f"unknown backend {name!r}: choose one of {', '.join(BACKENDS)}")
    try:
        return BACKENDS[name](**settings)
    except TypeError as exc:
        raise InputError(f"backend {name!r}: bad setting ({exc})") from None


__all__ = ["BACKENDS", "AutoBackend", "CholmodBackend", "DenseBackend", "IndefiniteShift", "SlepcBackend", "SuperLUBackend",
           "available_backends", "get_backend"]

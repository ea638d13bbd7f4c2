"""The factorisation backend protocol.

Every solve works on the mass-weighted dynamical matrix D = M^-½ H M^-½ (n × n, n = 3N, symmetric),
whose eigenpairs (λ = ω², e) give the modes v = M^-½ e of H v = λ M v.  Working with D (not the pencil
H − σM) keeps every eigenproblem standard and every vector orthonormal in the plain inner product; a
congruence does not change the inertia (Sylvester's law of inertia), so counts for D − σI are the
counts for H − σM.

A :class:`Backend` factors D − σI once per shift; the returned :class:`Factor` applies (D − σI)⁻¹ and,
if the backend can, reports the inertia: how many eigenvalues of D lie below, at and above σ.  Like
zarr-python's store interface, a backend implements only its primitives (``factor``) and declares its
capabilities; derived operations (``count_below``) are built here on the primitives.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp


@dataclass(frozen=True)
class Inertia:
    """Counts of eigenvalues of D below, equal to (numerically: zero pivots) and above the shift σ."""

    below: int
    zero: int
    above: int


class SingularShift(ArithmeticError):
    """The shift is (numerically) an eigenvalue: move it and factor again."""


@dataclass
class Factor(ABC):
    """D − σI factored.  ``stats``: what it cost (e.g. ``seconds``, ``factor_nnz``)."""

    sigma: float
    n: int
    stats: dict = field(default_factory=dict)

    @abstractmethod
    def solve(self, b: np.ndarray) -> np.ndarray:
        """(D − σI)⁻¹ b for b of shape (n,) or (n, k)."""

    def inertia(self) -> Inertia | None:
        """Eigenvalue counts relative to σ, or None if this backend cannot tell."""
        return None


class Backend(ABC):
    """Factors D − σI.  Capability flags say what a caller may rely on."""

    #: short name used on the command line (``--backend``)
    name: str = ""
    #: ``Factor.inertia()`` returns exact counts (Sylvester's law) for any σ
    provides_inertia: bool = False
    #: can factor D − σI when it is indefinite (σ inside the spectrum)
    handles_indefinite: bool = False
    #: the factorisation is distributed over MPI ranks
    distributed: bool = False

    @abstractmethod
    def factor(self, D: sp.spmatrix, sigma: float) -> Factor:
        """Factor D − σI; raises :class:`SingularShift` if σ is numerically an eigenvalue."""

    def count_below(self, D: sp.spmatrix, sigma: float) -> int:
        """Number of eigenvalues of D below σ (requires ``provides_inertia``)."""
        if not self.provides_inertia:
            raise TypeError(f"backend {self.name!r} cannot count eigenvalues (no inertia)")
        inertia = self.factor(D, sigma).inertia()
        if inertia.zero:
            raise SingularShift(f"shift {sigma!r} is numerically an eigenvalue ({inertia.zero} zero pivots)")
        return inertia.below

    def describe(self) -> dict:
        """Name and settings, recorded with every catalogue."""
        return {"backend": self.name}

"""The default backend: picks dense, CHOLMOD, MUMPS or SuperLU per factorisation by size and shift.

* n ≤ ``dense_max_n``: dense Bunch–Kaufman LDLᵀ (pivoted for stability, and within 0.02 s of SuperLU
  there; at n = 2,592 it is 4× slower, at n = 6,144 7×);
* σ < 0 and scikit-sparse installed: CHOLMOD (6× faster than SuperLU at 13,500 atoms), since D of a
  stable configuration is positive semi-definite and D − σI is then positive definite; if it is not
  (the configuration has negative eigenvalues, i.e. is not at a minimum), a pivoting LDLᵀ instead,
  which counts them;
* otherwise (σ ≥ 0: interior shifts and the counts that prove a result complete) a pivoting LDLᵀ with
  exact inertia: MUMPS in this process when PETSc/SLEPc are installed (the ``slepc`` backend on one
  rank: 7 s against SuperLU's ~130 s at 13,500 atoms, benchmarks/results/mpi_scale.md), SuperLU in
  symmetric mode otherwise or if MUMPS fails.

Every factor's ``stats["backend"]`` names the backend that made it (``stats["tried"]`` one that failed
first).  Timings: benchmarks/results/factorisation_choices.md and mpi_scale.md.
"""

from __future__ import annotations

import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Backend, Factor
from eigenfarm.solve.backends import cholmod, slepc
from eigenfarm.solve.backends.common import IndefiniteShift, check_shift, matrix_size
from eigenfarm.solve.backends.dense import DenseBackend
from eigenfarm.solve.backends.superlu import SuperLUBackend

#: n up to which the dense backend is used (see module doc)
AUTO_DENSE_MAX_N = 1500


class AutoBackend(Backend):
    """Dense for small n, CHOLMOD for σ < 0 when installed, MUMPS (or SuperLU) otherwise (module doc).

    ``use_cholmod`` / ``use_mumps``: None uses each optional library when installed, False never."""

    name = "auto"
    provides_inertia = True
    handles_indefinite = True
    distributed = False

    def __init__(self, dense_max_n: int = AUTO_DENSE_MAX_N, use_cholmod: bool | None = None,
                 use_mumps: bool | None = None):
        self.dense_max_n = int(dense_max_n)
        self.dense, self.superlu = DenseBackend(), SuperLUBackend()
        wanted = cholmod.available() if use_cholmod is None else use_cholmod
        self.cholmod = cholmod.CholmodBackend() if wanted else None
        wanted = slepc.available() if use_mumps is None else use_mumps
        self.mumps = slepc.SlepcBackend() if wanted else None  # PETSc (and MPI) start at its first factor

    def factor(self, D: sp.spmatrix, sigma: float) -> Factor:
        """Factor D − σI (n × n, σ in D's eigenvalue units) with the backend chosen for n and σ."""
        if matrix_size(D) <= self.dense_max_n:
            return self.dense.factor(D, sigma)
        if self.cholmod is None or check_shift(sigma) >= 0:
            return self._pivoting(D, sigma)
        try:
            return self.cholmod.factor(D, sigma)
        except IndefiniteShift as exc:
            return self._pivoting(D, sigma, f"cholmod: {exc}")

    def _pivoting(self, D: sp.spmatrix, sigma: float, tried: str | None = None) -> Factor:
        """A symmetric-indefinite LDLᵀ with inertia: MUMPS if installed and working, else SuperLU."""
        notes, factor = [tried] if tried else [], None
        if self.mumps is not None:
            try:
                factor = self.mumps.factor(D, sigma)
            except InputError as exc:  # PETSc does not load, or MUMPS itself failed: SuperLU can still count
                notes.append(f"slepc: {exc}")
        if factor is None:
            factor = self.superlu.factor(D, sigma)
        if notes:
            factor.stats["tried"] = "; ".join(notes)
        return factor

    def describe(self) -> dict:
        return {"backend": self.name, "dense_max_n": self.dense_max_n, "cholmod_for_negative_shifts":
                self.cholmod is not None, "mumps_for_other_shifts": self.mumps is not None,
                "dense": self.dense.describe(), "superlu": self.superlu.describe(),
                **({"mumps": self.mumps.describe()} if self.mumps is not None else {})}

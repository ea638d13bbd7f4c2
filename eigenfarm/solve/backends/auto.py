"""The default backend: picks dense, CHOLMOD or SuperLU per factorisation by size and shift.

* n ≤ ``dense_max_n``: dense Bunch–Kaufman LDLᵀ (pivoted for stability, and within 0.02 s of SuperLU
  there; at n = 2,592 it is 4× slower, at n = 6,144 7×);
* σ < 0 and scikit-sparse installed: CHOLMOD (6× faster than SuperLU at 13,500 atoms), since D of a
  stable configuration is positive semi-definite and D − σI is then positive definite; if it is not
  (the configuration has negative eigenvalues, i.e. is not at a minimum), SuperLU instead, which
  counts them;
* otherwise SuperLU in symmetric mode.

Every factor's ``stats["backend"]`` names the backend that made it.  Timings: benchmarks/results/
factorisation_choices.md.
"""

from __future__ import annotations

import scipy.sparse as sp

from eigenfarm.solve.backend import Backend, Factor
from eigenfarm.solve.backends import cholmod
from eigenfarm.solve.backends.common import IndefiniteShift, check_shift, matrix_size
from eigenfarm.solve.backends.dense import DenseBackend
from eigenfarm.solve.backends.superlu import SuperLUBackend

#: n up to which the dense backend is used (see module doc)
AUTO_DENSE_MAX_N = 1500


class AutoBackend(Backend):
    """Dense for small n, CHOLMOD for σ < 0 when installed, SuperLU otherwise (module doc)."""

    name = "auto"
    provides_inertia = True
    handles_indefinite = True
    distributed = False

    def __init__(self, dense_max_n: int = AUTO_DENSE_MAX_N, use_cholmod: bool | None = None):
        self.dense_max_n = int(dense_max_n)
        self.dense, self.superlu = DenseBackend(), SuperLUBackend()
        wanted = cholmod.available() if use_cholmod is None else use_cholmod
        self.cholmod = cholmod.CholmodBackend() if wanted else None

    def factor(self, D: sp.spmatrix, sigma: float) -> Factor:
        """Factor D − σI (n × n, σ in D's eigenvalue units) with the backend chosen for n and σ."""
        if matrix_size(D) <= self.dense_max_n:
            return self.dense.factor(D, sigma)
        if self.cholmod is None or check_shift(sigma) >= 0:
            return self.superlu.factor(D, sigma)
        try:
            return self.cholmod.factor(D, sigma)
        except IndefiniteShift as exc:
            factor = self.superlu.factor(D, sigma)
            factor.stats["tried"] = f"cholmod: {exc}"
            return factor

    def describe(self) -> dict:
        return {"backend": self.name, "dense_max_n": self.dense_max_n, "cholmod_for_negative_shifts":
                self.cholmod is not None, "dense": self.dense.describe(), "superlu": self.superlu.describe()}

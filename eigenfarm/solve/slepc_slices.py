"""All eigenpairs of a distributed D in one slice (lo, hi], with SLEPc, collectively on the ranks of D.

Two slice solvers, both for a :class:`eigenfarm.solve.sharded.ShardedMatrix` D and an ``expected``
count from inertia (every rank calls them with the same arguments):

* ``krylov-schur`` — D − σI factored once at the slice centre with MUMPS (:mod:`.backends.slepc`);
  SLEPc's Krylov–Schur (Stewart, SIAM J. Matrix Anal. Appl. 23, 601, 2001; Hernandez, Roman & Vidal,
  ACM TOMS 31, 351, 2005) on the operator (D − σI)⁻¹ finds the eigenvalues nearest σ, λ = σ + 1/θ.
  Members of a degenerate set it misses are found by reruns with the found vectors as SLEPc's
  deflation space, exactly as the ARPACK slicer does (:mod:`eigenfarm.solve.slicer`).
* ``interval`` — SLEPc's own spectrum slicing (``EPS.setInterval``; Campos & Roman, Numer. Algorithms
  60, 279, 2012): Krylov–Schur with shift-and-invert at shifts it chooses inside [lo, hi], each
  factored by MUMPS with inertia (ICNTL(13) = 1 on the KSP of ``EPS.getKrylovSchurKSP``), until the
  inertia counts at the ends are all accounted for.

Both end with a Rayleigh–Ritz step on the found vectors (orthonormal, sorted) and relative residuals
‖D e − λ e‖ / (λ_max ‖e‖); the vectors are gathered to rank 0 (store order), the values are on every rank.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.solve.backends.slepc import SlepcBackend, configure_mumps, require
from eigenfarm.solve.sharded import ShardedMatrix
from eigenfarm.solve.slicer import (IncompleteSlice, LanczosSettings, SliceResult, best_in_slice, factor_near,
                                    in_slice)

def largest_eigenvalue(D: ShardedMatrix, rtol: float = 1e-6) -> float:
    """λ_max of D (energy/(length²·mass)) by Krylov–Schur, the scale of the spectrum."""
    _, SLEPc = require()
    eps = _eps(D.mat, rtol)
    eps.setWhichEigenpairs(SLEPc.EPS.Which.LARGEST_REAL)
    eps.setDimensions(nev=1)
    eps.solve()
    if eps.getConverged() < 1:
        raise RuntimeError("SLEPc did not find the largest eigenvalue of D")
    return float(eps.getEigenvalue(0).real)


def _eps(operator, tol: float):
    """A Hermitian Krylov–Schur EPS on ``operator`` with relative tolerance ``tol``."""
    _, SLEPc = require()
    eps = SLEPc.EPS().create(operator.getComm())
    eps.setOperators(operator)
    eps.setProblemType(SLEPc.EPS.ProblemType.HEP)
    eps.setType(SLEPc.EPS.Type.KRYLOVSCHUR)
    eps.setTolerances(tol=max(tol, 1e-15))
    return eps


class _Inverse:
    """Context of a PETSc python matrix applying (D − σI)⁻¹ through a MUMPS factor."""

    def __init__(self, factor):
        self.factor = factor

    def mult(self, mat, x, y):
        self.factor.solve_vec(x, y)


def _pairs(eps, D: ShardedMatrix) -> tuple[np.ndarray, list]:
    """Converged (values (c,), vectors as PETSc Vecs) of a solved ``eps``."""
    values, vectors = [], []
    for i in range(eps.getConverged()):
        vec = D.layout.vector()
        values.append(eps.getEigenpair(i, vec).real)
        vectors.append(vec)
    return np.asarray(values, dtype=float), vectors


def _local(vectors: list, rows: int) -> np.ndarray:
    """This rank's rows of PETSc Vecs as a (local, m) block."""
    if not vectors:
        return np.zeros((rows, 0))
    return np.column_stack([v.getArray(readonly=True).copy() for v in vectors])


def _vecs(D: ShardedMatrix, block: np.ndarray | None) -> list:
    """The columns of a local block (local, m) as distributed PETSc Vecs."""
    if block is None:
        return []
    vecs = []
    for column in block.T:
        vec = D.layout.vector()
        vec.setArray(np.ascontiguousarray(column))
        vecs.append(vec)
    return vecs


def _krylov_schur_runs(D: ShardedMatrix, factor, keep, missing, settings: LanczosSettings,
                       known: np.ndarray | None = None):
    """Krylov–Schur runs on (D − σI)⁻¹, each deflating ``known`` (a local block of orthonormal vectors)
    and what earlier runs found, until ``missing(values)`` is 0 or the reruns run out; returns
    (values (m,) ascending, this rank's rows of their vectors (local, m), runs)."""
    PETSc, SLEPc = require()
    n, local = D.layout.n, D.layout.local
    op = PETSc.Mat().createPython(((local, n), (local, n)), context=_Inverse(factor), comm=D.layout.comm)
    op.setUp()
    fixed = _vecs(D, known)
    values, vectors, runs = np.zeros(0), [], 0
    while missing(values) > 0 and runs <= settings.max_restarts:
        k = min(missing(values) + settings.extra, n - 1 - len(vectors) - len(fixed))
        eps = _eps(op, settings.tol)
        eps.setWhichEigenpairs(SLEPc.EPS.Which.LARGEST_MAGNITUDE)
        eps.setDimensions(nev=k, ncv=min(n, max(settings.ncv or max(2 * k + 1, 20), k + 1)))
        if fixed or vectors:
            eps.setDeflationSpace(fixed + vectors)
        eps.solve()
        runs += 1
        theta, found = _pairs(eps, D)
        eps.destroy()
        lam = factor.sigma + 1.0 / np.where(np.abs(theta) > 1e-300, theta, np.inf)
        wanted = np.flatnonzero(keep(lam) & (np.abs(theta) > 1e-300))
        values = np.concatenate([values, lam[wanted]])
        vectors += [found[i] for i in wanted]
    op.destroy()
    order = np.argsort(values, kind="stable")
    return values[order], _local([vectors[i] for i in order], local), runs


class KrylovSchurEngine:
    """The Krylov solves of the one-pass lowest-K proof (:func:`eigenfarm.solve.slicer.solve_lowest`)
    for a D on MPI ranks: vectors are this rank's rows, the values are on every rank."""

    def accumulate(self, D: ShardedMatrix, factor, keep, missing, settings: LanczosSettings,
                   known: np.ndarray | None = None):
        return _krylov_schur_runs(D, factor, keep, missing, settings, known)

    def result(self, D: ShardedMatrix, values, block, scale, stats) -> SliceResult:
        """Rayleigh–Ritz on the pairs, relative residuals; vectors gathered to rank 0 (store order)."""
        values, block = _rayleigh_ritz(D, block)
        return _gathered(D, values, block, scale, stats)


def _rayleigh_ritz(D: ShardedMatrix, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal Ritz vectors (local, m) of span(block) and their Rayleigh quotients (m,), ascending."""
    gram = D.allsum(block.T @ block)
    lower = np.linalg.cholesky(0.5 * (gram + gram.T))
    q = np.linalg.solve(lower, block.T).T  # q = block L⁻ᵀ: orthonormal columns
    small = D.allsum(q.T @ D.times_local(q))
    values, rotation = np.linalg.eigh(0.5 * (small + small.T))
    return values, q @ rotation


def _finish(D: ShardedMatrix, values: np.ndarray, block: np.ndarray, lo, hi, expected, sigma, scale,
            stats: dict) -> SliceResult:
    """Rayleigh–Ritz, the ``expected`` pairs inside the slice, residuals; vectors gathered to rank 0."""
    values, block = _rayleigh_ritz(D, block)
    return _gathered(D, *best_in_slice(values, block, expected, lo, hi, sigma), scale, stats)


def _gathered(D: ShardedMatrix, values: np.ndarray, block: np.ndarray, scale: float, stats: dict) -> SliceResult:
    """Relative residuals ‖D e − λ e‖ / (λ_max ‖e‖) of the pairs; their vectors gathered to rank 0."""
    residual = D.times_local(block) - block * values
    residuals = np.sqrt(D.allsum((residual**2).sum(axis=0))) / scale
    return SliceResult(values, D.layout.at_root(block), residuals, stats)


def krylov_schur_slice(D: ShardedMatrix, backend: SlepcBackend, lo: float, hi: float, expected: int, scale: float,
                       settings: LanczosSettings = LanczosSettings()) -> SliceResult:
    """The ``expected`` eigenpairs with lo < λ ≤ hi by shift-invert Krylov–Schur at the slice centre
    (module doc); ``scale`` = λ_max.  :class:`IncompleteSlice` when reruns cannot reach the count."""
    if expected == 0:
        return _empty(D)
    factor = factor_near(backend, D, lo, hi)
    keep = lambda lam: in_slice(lam, lo, hi, 1e-10 * scale)  # noqa: E731
    values, block, runs = _krylov_schur_runs(D, factor, keep, lambda found: expected - len(found), settings)
    if len(values) < expected:
        raise IncompleteSlice(f"slice ({lo:.6g}, {hi:.6g}]: found {len(values)} of {expected} eigenpairs "
                              f"after {runs} Krylov–Schur runs")
    stats = {"shift": factor.sigma, "runs": runs, "method": "krylov-schur",
             **{f"factor_{k}": v for k, v in factor.stats.items()}}
    return _finish(D, values, block, lo, hi, expected, factor.sigma, scale, stats)


def interval_slice(D: ShardedMatrix, backend: SlepcBackend, lo: float, hi: float, expected: int, scale: float,
                   settings: LanczosSettings = LanczosSettings()) -> SliceResult:
    """The ``expected`` eigenpairs with lo < λ ≤ hi by SLEPc's spectrum slicing over [lo, hi] (module
    doc).  :class:`IncompleteSlice` when SLEPc returns another number of pairs."""
    if expected == 0:
        return _empty(D)
    _, SLEPc = require()
    eps = _eps(D.mat, settings.tol)
    eps.setWhichEigenpairs(SLEPc.EPS.Which.ALL)
    eps.setInterval(lo, hi)
    eps.getST().setType(SLEPc.ST.Type.SINVERT)
    configure_mumps(eps.getKrylovSchurKSP(), backend.null_pivot)
    eps.solve()
    values, vectors = _pairs(eps, D)
    if len(values) != expected:
        raise IncompleteSlice(f"slice ({lo:.6g}, {hi:.6g}]: SLEPc spectrum slicing returned {len(values)} "
                              f"eigenpairs where inertia counts {expected}")
    shifts, inertias = eps.getKrylovSchurInertias()
    eps.destroy()
    stats = {"shift": 0.5 * (lo + hi), "runs": 1, "method": "interval",
             "inertia_shifts": [float(s) for s in shifts], "inertia_counts": [int(c) for c in inertias]}
    return _finish(D, values, _local(vectors, D.layout.local), lo, hi, expected, 0.5 * (lo + hi), scale, stats)


def _empty(D: ShardedMatrix) -> SliceResult:
    vectors = D.layout.at_root(np.zeros((D.layout.local, 0)))
    return SliceResult(np.zeros(0), vectors, np.zeros(0), {"shift": None, "runs": 0})


#: slice solvers of this module by the name ``--slice-method`` uses
SOLVERS = {"krylov-schur": krylov_schur_slice, "interval": interval_slice}

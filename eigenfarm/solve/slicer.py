"""All eigenpairs of D in one slice (lo, hi] by shift-invert Lanczos with deflated restarts.

The slice knows from inertia counts how many eigenvalues it holds (``expected``).  D − σI is factored
once at the slice's centre σ; implicitly restarted Lanczos (ARPACK through scipy.sparse.linalg.eigsh;
Lehoucq, Sorensen & Yang, *ARPACK Users' Guide*, SIAM 1998) on (D − σI)⁻¹ finds the eigenvalues
nearest σ, which are exactly those of the slice when σ is its centre.  Lanczos can miss members of a
degenerate set (a crystal's plane-wave shells come 6, 12, 24 … fold); then it is restarted with the
found vectors projected out of the operator, so their shift-inverted eigenvalues become 0 and the
next run finds the rest, until the count matches or ``max_restarts`` is exhausted.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from eigenfarm.solve.backend import Backend, SingularShift


class IncompleteSlice(RuntimeError):
    """Lanczos did not find as many eigenpairs as the inertia counts say the slice holds."""


@dataclass
class SliceResult:
    """Eigenpairs of one slice: ``values`` (m,) ascending, ``vectors`` (n, m) orthonormal columns,
    ``residuals`` (m,) ‖D e − λ e‖ / (‖D‖ ‖e‖); ``stats``: shift, factorisation, Lanczos runs."""

    values: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    stats: dict = field(default_factory=dict)


@dataclass(frozen=True)
class LanczosSettings:
    """``tol``: ARPACK convergence tolerance on the shift-inverted Ritz values (0 = machine precision);
    ``extra``: eigenpairs requested beyond those still missing (helps convergence of clusters);
    ``ncv``: Lanczos basis size (default max(2k + 1, 20)); ``max_restarts``: deflated restarts."""

    tol: float = 1e-12
    extra: int = 6
    ncv: int | None = None
    max_restarts: int = 6
    seed: int = 0


def _factor_near(backend: Backend, D, lo: float, hi: float):
    """Factor D − σI at the slice centre, nudging σ inside the slice if it hits an eigenvalue."""
    width = hi - lo
    for fraction in (0.5, 0.5 + 1e-3, 0.5 - 2e-3, 0.47, 0.53):
        try:
            return backend.factor(D, lo + fraction * width)
        except SingularShift:
            continue
    raise SingularShift(f"no usable shift inside slice ({lo!r}, {hi!r}]")


def _deflated_operator(factor, basis: np.ndarray | None) -> sla.LinearOperator:
    """(I − VVᵀ)(D − σI)⁻¹(I − VVᵀ) with V the found vectors (n, f), as a LinearOperator."""
    n = factor.n

    def project(x):
        return x if basis is None else x - basis @ (basis.T @ x)

    return sla.LinearOperator((n, n), matvec=lambda x: project(factor.solve(project(x))), dtype=float)


def _in_slice(values, lo, hi, margin):
    return (values > lo - margin) & (values <= hi + margin)


def solve_slice(D: sp.spmatrix, backend: Backend, lo: float, hi: float, expected: int, scale: float,
                settings: LanczosSettings = LanczosSettings()) -> SliceResult:
    """The ``expected`` eigenpairs of D with lo < λ ≤ hi.

    ``scale``: ‖D‖ (its largest eigenvalue), for relative residuals and boundary margins.
    Raises :class:`IncompleteSlice` if deflated restarts cannot reach ``expected``.
    """
    n = D.shape[0]
    if expected == 0:
        return SliceResult(np.zeros(0), np.zeros((n, 0)), np.zeros(0), {"shift": None, "runs": 0})
    factor = _factor_near(backend, D, lo, hi)
    margin = 1e-10 * scale
    rng = np.random.default_rng(settings.seed)
    values, vectors, runs = np.zeros(0), np.zeros((n, 0)), 0
    while len(values) < expected and runs <= settings.max_restarts:
        missing = expected - len(values)
        k = min(missing + settings.extra, n - 1 - vectors.shape[1])
        ncv = min(n, max(settings.ncv or max(2 * k + 1, 20), k + 1))
        op = _deflated_operator(factor, vectors if vectors.shape[1] else None)
        v0 = rng.standard_normal(n)
        if vectors.shape[1]:
            v0 -= vectors @ (vectors.T @ v0)
        theta, ritz = _lanczos(op, k, ncv, settings.tol, v0)
        runs += 1
        keep = np.abs(theta) > 1e-300
        lam = factor.sigma + 1.0 / theta[keep]
        ritz = ritz[:, keep]
        inside = _in_slice(lam, lo, hi, margin)
        lam, ritz = lam[inside], ritz[:, inside]
        if vectors.shape[1]:  # re-orthogonalise against what we have (deflation is exact only in theory)
            ritz -= vectors @ (vectors.T @ ritz)
        ritz, lam = _orthonormal_ritz(D, ritz, lam)
        values, vectors = np.concatenate([values, lam]), np.hstack([vectors, ritz])
    if len(values) < expected:
        raise IncompleteSlice(f"slice ({lo:.6g}, {hi:.6g}]: found {len(values)} of {expected} eigenpairs "
                              f"after {runs} Lanczos runs")
    values, vectors = _best(values, vectors, expected, lo, hi, factor.sigma)
    residuals = np.linalg.norm(D @ vectors - vectors * values, axis=0) / scale
    stats = {"shift": factor.sigma, "runs": runs, **{f"factor_{k}": v for k, v in factor.stats.items()}}
    return SliceResult(values, vectors, residuals, stats)


def _lanczos(op, k: int, ncv: int, tol: float, v0: np.ndarray):
    """k largest-magnitude eigenpairs of ``op`` by ARPACK; on non-convergence, those that did converge
    (the caller restarts with them deflated)."""
    try:
        return sla.eigsh(op, k=k, which="LM", ncv=ncv, tol=tol, v0=v0)
    except sla.ArpackNoConvergence as exc:
        return exc.eigenvalues, exc.eigenvectors


def _orthonormal_ritz(D, basis: np.ndarray, approx: np.ndarray):
    """Rayleigh–Ritz on span(basis): orthonormal vectors and their Rayleigh quotients, sorted."""
    if basis.shape[1] == 0:
        return basis, approx
    q, r = np.linalg.qr(basis)
    good = np.abs(np.diag(r)) > 1e-8
    q = q[:, good]
    small = q.T @ (D @ q)
    vals, rot = np.linalg.eigh(0.5 * (small + small.T))
    return q @ rot, vals


def _best(values, vectors, expected, lo, hi, sigma):
    """Sort ascending; if more than ``expected`` were kept (boundary margin), keep those inside (lo, hi]
    and nearest σ."""
    order = np.argsort(values)
    values, vectors = values[order], vectors[:, order]
    if len(values) > expected:
        priority = np.where((values > lo) & (values <= hi), 0.0, 1.0) + np.abs(values - sigma) / (hi - lo + 1e-300) * 1e-3
        chosen = np.sort(np.argsort(priority, kind="stable")[:expected])
        values, vectors = values[chosen], vectors[:, chosen]
    return values, vectors

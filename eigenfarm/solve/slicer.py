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


def factor_near(backend: Backend, D, lo: float, hi: float):
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
    solve = factor.solve if basis is None else _Deflated(factor, basis).solve
    return sla.LinearOperator((factor.n, factor.n), matvec=solve, dtype=float)


def in_slice(values, lo, hi, margin):
    """Mask of ``values`` in (lo − margin, hi + margin]."""
    return (values > lo - margin) & (values <= hi + margin)


def _accumulate(D, factor, keep, missing, settings: LanczosSettings):
    """Deflated Lanczos runs on (D − σI)⁻¹ until ``missing(values)`` is 0 or the restarts run out.

    ``keep(λ)`` → bool mask of the Ritz values worth keeping; ``missing(values)`` → how many more are
    needed.  Returns (values (m,), orthonormal vectors (n, m), Lanczos runs)."""
    n = D.shape[0]
    rng = np.random.default_rng(settings.seed)
    values, vectors, runs = np.zeros(0), np.zeros((n, 0)), 0
    while missing(values) > 0 and runs <= settings.max_restarts:
        k = min(missing(values) + settings.extra, n - 1 - vectors.shape[1])
        ncv = min(n, max(settings.ncv or max(2 * k + 1, 20), k + 1))
        op = _deflated_operator(factor, vectors if vectors.shape[1] else None)
        v0 = rng.standard_normal(n)
        if vectors.shape[1]:
            v0 -= vectors @ (vectors.T @ v0)
        theta, ritz = _lanczos(op, k, ncv, settings.tol, v0)
        runs += 1
        live = np.abs(theta) > 1e-300
        lam, ritz = factor.sigma + 1.0 / theta[live], ritz[:, live]
        wanted = keep(lam)
        lam, ritz = lam[wanted], ritz[:, wanted]
        if vectors.shape[1]:  # re-orthogonalise against what we have (deflation is exact only in theory)
            ritz -= vectors @ (vectors.T @ ritz)
        ritz, lam = _orthonormal_ritz(D, ritz, lam)
        values, vectors = np.concatenate([values, lam]), np.hstack([vectors, ritz])
    order = np.argsort(values)
    return values[order], vectors[:, order], runs


def _result(D, values, vectors, scale, stats) -> SliceResult:
    residuals = np.linalg.norm(D @ vectors - vectors * values, axis=0) / scale
    return SliceResult(values, vectors, residuals, stats)


class ArpackEngine:
    """Finds eigenpairs near a factored shift of a D held whole in this process (scipy/ARPACK).

    The one-pass lowest-K solve (:func:`solve_lowest`) is written against this small interface, so the
    same proof runs on MPI ranks with SLEPc's Krylov–Schur
    (:class:`eigenfarm.solve.slepc_slices.KrylovSchurEngine`)."""

    def accumulate(self, D, factor, keep, missing, settings: LanczosSettings, known: np.ndarray | None = None):
        """Deflated runs on (D − σI)⁻¹ (``known`` (n, f) orthonormal vectors projected out) until
        ``missing(values)`` is 0: (values (m,) ascending, vectors (n, m), runs)."""
        return _accumulate(D, factor if known is None else _Deflated(factor, known), keep, missing, settings)

    def result(self, D, values, vectors, scale, stats) -> SliceResult:
        """The pairs with relative residuals ‖D e − λ e‖ / (λ_max ‖e‖)."""
        return _result(D, values, vectors, scale, stats)


def solve_slice(D: sp.spmatrix, backend: Backend, lo: float, hi: float, expected: int, scale: float,
                settings: LanczosSettings = LanczosSettings()) -> SliceResult:
    """The ``expected`` eigenpairs of D with lo < λ ≤ hi.

    ``scale``: ‖D‖ (its largest eigenvalue), for relative residuals and boundary margins.
    Raises :class:`IncompleteSlice` if deflated restarts cannot reach ``expected``.
    """
    n = D.shape[0]
    if expected == 0:
        return SliceResult(np.zeros(0), np.zeros((n, 0)), np.zeros(0), {"shift": None, "runs": 0})
    factor = factor_near(backend, D, lo, hi)
    margin = 1e-10 * scale
    values, vectors, runs = _accumulate(D, factor, lambda lam: in_slice(lam, lo, hi, margin),
                                        lambda found: expected - len(found), settings)
    if len(values) < expected:
        raise IncompleteSlice(f"slice ({lo:.6g}, {hi:.6g}]: found {len(values)} of {expected} eigenpairs "
                              f"after {runs} Lanczos runs")
    values, vectors = best_in_slice(values, vectors, expected, lo, hi, factor.sigma)
    stats = {"shift": factor.sigma, "runs": runs, **{f"factor_{k}": v for k, v in factor.stats.items()}}
    return _result(D, values, vectors, scale, stats)


@dataclass
class LowestResult:
    """The lowest modes found from one shift below the spectrum and proved complete by one count:
    ``modes`` (the kept eigenpairs above the zero band), ``check`` the shift σ_c above them with
    ``count`` = N(σ_c) eigenvalues below it, ``n_zero`` zero modes found (|λ| ≤ τ)."""

    modes: SliceResult
    check: float
    count: int
    n_zero: int


def solve_lowest(D, backend: Backend, k: int, scale: float, zero_tol: float,
                 settings: LanczosSettings = LanczosSettings(), engine=ArpackEngine()) -> LowestResult | None:
    """The k lowest modes above the zero band |λ| ≤ τ = zero_tol·scale, in one Lanczos pass.

    D − σI is factored at σ = −100τ, below the spectrum of a stable configuration (positive definite,
    so CHOLMOD can do it); shift-invert Lanczos then finds the eigenvalues from the bottom up.  The
    result is *proved* complete by one inertia count at σ_c, halfway between the last kept mode and the
    next: N(σ_c) must equal the number found below σ_c.  Returns None when that proof fails or the
    factorisation shows negative eigenvalues; the caller then slices the window instead.  ``engine``
    runs the Krylov solves: :class:`ArpackEngine` for a scipy D, the SLEPc one for a D on MPI ranks.

    Only one factorisation of D is held at a time: the one below the spectrum is released before the
    count (at 32,000 atoms on 2 ranks holding both took 2.6 GiB per rank against 1.35 GiB for one
    factor, benchmarks/results/mpi_scale.md), and made again in the rare case that the count shows
    members of a degenerate level Lanczos missed.
    """
    tau = zero_tol * scale
    factor = backend.factor(D, -100 * tau)
    inertia = factor.inertia()
    if inertia is None or inertia.below:
        return None
    level = 1e-9 * scale

    def missing(values):  # k modes above the zero band, the rest of the k-th level, and one beyond it
        physical = values[values > tau]
        if len(physical) < k:
            return k + 1 - len(physical)
        return 0 if (physical > physical[k - 1] + level).any() else 1

    everything = lambda lam: np.ones(len(lam), bool)  # noqa: E731 (from below, all Ritz values are wanted)
    values, vectors, runs = engine.accumulate(D, factor, everything, missing, settings)
    stats = {"shift": factor.sigma, **{f"factor_{key}": v for key, v in factor.stats.items()}, "refactored": 0}
    del factor  # released before the count factors D − σ_c I
    for _ in range(settings.max_restarts):
        if missing(values):
            return None
        physical = values > tau
        above = values[physical]
        keep = int((above <= above[k - 1] + level).sum())
        check = 0.5 * (above[keep - 1] + above[keep])
        count = backend.count_below(D, check)
        n_zero = int((np.abs(values) <= tau).sum())
        short = count - (n_zero + keep)
        if short <= 0:
            break
        # Lanczos missed members of a (degenerate) level below σ_c: deflate what we have, find the rest
        factor = backend.factor(D, stats["shift"])
        more, extra, more_runs = engine.accumulate(D, factor, everything, lambda found: short - len(found),
                                                   settings, known=vectors)
        del factor
        stats["refactored"] += 1
        values, vectors, runs = _merge_sorted(values, vectors, more, extra, runs + more_runs)
    if short != 0:
        return None
    chosen = np.flatnonzero(physical)[:keep]
    stats.update(runs=runs, check_shift=check, check_count=count)
    return LowestResult(engine.result(D, values[chosen], vectors[:, chosen], scale, stats), check, count, n_zero)


class _Deflated:
    """A factor whose solves project out fixed orthonormal vectors (n, f) first, so a new Lanczos run
    cannot find them again."""

    def __init__(self, factor, basis: np.ndarray):
        self.sigma, self.n, self.factor, self.basis = factor.sigma, factor.n, factor, basis

    def solve(self, b):
        project = lambda x: x - self.basis @ (self.basis.T @ x)  # noqa: E731
        return project(self.factor.solve(project(b)))


def _merge_sorted(values, vectors, more, extra, runs):
    """Found pairs plus newly found ones (orthogonal to them), sorted by eigenvalue."""
    values, vectors = np.concatenate([values, more]), np.hstack([vectors, extra])
    order = np.argsort(values)
    return values[order], vectors[:, order], runs


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


def best_in_slice(values, vectors, expected, lo, hi, sigma):
    """Sort ascending; if more than ``expected`` were kept (boundary margin), keep those inside (lo, hi]
    and nearest σ."""
    order = np.argsort(values)
    values, vectors = values[order], vectors[:, order]
    if len(values) > expected:
        priority = np.where((values > lo) & (values <= hi), 0.0, 1.0) + np.abs(values - sigma) / (hi - lo + 1e-300) * 1e-3
        chosen = np.sort(np.argsort(priority, kind="stable")[:expected])
        values, vectors = values[chosen], vectors[:, chosen]
    return values, vectors

"""What every factorisation backend shares: checking D, forming D − σI, and checking a factor.

* :func:`shifted` validates D (square, real, finite, symmetric) and σ, and returns A = D − σI as CSC
  with every diagonal entry stored, so A's sparsity pattern (and hence any fill-reducing ordering)
  does not depend on σ, even when a diagonal entry of A is exactly zero.
* :func:`check_factor` measures a factor with two solves: the backward error of one solve, and a
  rigorous upper bound on the distance from σ to the nearest eigenvalue of D (two steps of inverse
  iteration; for symmetric A, min |λ(A)| ≤ ‖A y‖₂ / ‖y‖₂ for any y ≠ 0).  A factorisation with
  backward error η is exact for some A + E with ‖E‖ ≈ η‖A‖, and Sylvester's law of inertia gives the
  inertia of A + E; eigenvalues move by at most ‖E‖₂ (Weyl), so the counts are exact for D whenever
  no eigenvalue lies that close to σ.  A shift closer than that is :class:`SingularShift`.
"""

from __future__ import annotations

import numbers

import numpy as np
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import SingularShift

#: D counts as symmetric when max |D − Dᵀ| ≤ this × max |D| (Hessians are symmetric to rounding)
SYMMETRY_TOL = 1e-10
#: the backward error of one sample solve understates ‖E‖ / ‖A‖; this margin covers that
BACKWARD_ERROR_MARGIN = 1e3


class IndefiniteShift(ArithmeticError):
    """D − σI is not positive definite, for a backend that factors only positive-definite shifts.

    This is itself one bit of inertia: at least one eigenvalue of D is ≤ σ.
    """


def check_shift(sigma) -> float:
    """σ as a float; InputError unless it is a finite real number."""
    if isinstance(sigma, bool) or not isinstance(sigma, numbers.Real) or not np.isfinite(sigma):
        raise InputError(f"shift sigma must be a finite real number, got {sigma!r}")
    return float(sigma)


def matrix_size(D) -> int:
    """n of an n × n D (scipy.sparse or numpy); InputError for anything else."""
    if not (sp.issparse(D) or isinstance(D, np.ndarray)):
        raise InputError(f"D must be a scipy.sparse matrix or a numpy array, got {type(D).__name__}")
    if D.ndim != 2 or D.shape[0] != D.shape[1] or D.shape[0] == 0:
        raise InputError(f"D must be a non-empty square matrix, got shape {D.shape}")
    return D.shape[0]


def _check_matrix(D) -> sp.coo_matrix:
    """D as COO float64 with duplicates summed; InputError on any defect."""
    matrix_size(D)
    if np.iscomplexobj(D):
        raise InputError("D must be real (the dynamical matrix of a real Hessian), got a complex matrix")
    coo = sp.coo_matrix(D, dtype=np.float64)
    coo.sum_duplicates()
    bad = np.flatnonzero(~np.isfinite(coo.data))
    if len(bad):
        raise InputError(f"D has a non-finite entry {coo.data[bad[0]]} at row {coo.row[bad[0]]}, "
                         f"column {coo.col[bad[0]]}")
    return coo


def _check_symmetric(coo: sp.coo_matrix) -> None:
    scale = np.abs(coo.data).max(initial=0.0)
    csr = coo.tocsr()
    diff = (csr - csr.T).tocoo()
    if diff.nnz and np.abs(diff.data).max() > SYMMETRY_TOL * scale:
        k = int(np.argmax(np.abs(diff.data)))
        i, j = int(diff.row[k]), int(diff.col[k])
        raise InputError(f"D is not symmetric: D[{i}, {j}] − D[{j}, {i}] = {diff.data[k]:.3g} "
                         f"(max |D| = {scale:.3g}, tolerance {SYMMETRY_TOL:g} relative)")


def shifted(D, sigma) -> tuple[sp.csc_matrix, float, float]:
    """(A, σ, ‖A‖₁) with A = D − σI as CSC float64 (n × n) holding every diagonal entry.

    D: n × n real symmetric, scipy.sparse or numpy (eigenvalue units, e.g. ω² in √(ε/mσ²)² or
    (rad/ps)²); σ in the same units.  Raises :class:`InputError` on a bad D or σ.
    """
    sigma = check_shift(sigma)
    coo = _check_matrix(D)
    _check_symmetric(coo)
    n = coo.shape[0]
    diagonal = np.arange(n)
    A = sp.csc_matrix((np.concatenate([coo.data, np.full(n, -sigma)]),
                       (np.concatenate([coo.row, diagonal]), np.concatenate([coo.col, diagonal]))),
                      shape=(n, n))
    A.sort_indices()
    norm = float(abs(A).sum(axis=0).max())
    return A, sigma, norm


def measure_factor(A: sp.csc_matrix, solve, norm: float) -> dict:
    """Backward error and eigenvalue-distance bound of a factor of A = D − σI (n × n).

    ``solve`` maps b (n,) to A⁻¹b.  Returns ``{"backward_error": η, "eigenvalue_within": d}``:
    η = ‖A x − b‖∞ / (‖A‖∞ ‖x‖∞ + ‖b‖∞) for a random b (normwise backward error, common practice:
    Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., thm 7.1), and some eigenvalue of
    D lies within d of σ (same units as σ; d = 0 when a solve is not finite: a zero pivot).
    """
    b = np.random.default_rng(0).standard_normal(A.shape[0])
    x = solve(b)
    if not np.all(np.isfinite(x)):
        return {"backward_error": np.inf, "eigenvalue_within": 0.0}
    eta = float(np.abs(A @ x - b).max() / (norm * np.abs(x).max() + np.abs(b).max()))
    y = solve(x / np.linalg.norm(x))
    within = float(np.linalg.norm(A @ y) / np.linalg.norm(y)) if np.all(np.isfinite(y)) else 0.0
    return {"backward_error": eta, "eigenvalue_within": within}


def require_regular(checks: dict, sigma: float, norm: float, zero_tol: float) -> dict:
    """``checks`` (from :func:`measure_factor`) unchanged, or :class:`SingularShift` when σ is
    numerically an eigenvalue: one lies within max(zero_tol, 1000 η) ‖D − σI‖₁ of σ, where the
    factor's inertia is not reliable."""
    eta, within = checks["backward_error"], checks["eigenvalue_within"]
    limit = max(zero_tol, BACKWARD_ERROR_MARGIN * eta) * norm
    if not within > limit:
        raise SingularShift(f"shift {sigma!r} is numerically an eigenvalue of D: one lies within {within:.3g} "
                            f"of it (limit {limit:.3g} = max(zero_tol, 1000 × backward error {eta:.1e}) "
                            f"× ‖D − σI‖₁); move the shift")
    return checks


def check_factor(A: sp.csc_matrix, solve, sigma: float, norm: float, zero_tol: float) -> dict:
    """:func:`measure_factor` then :func:`require_regular`."""
    return require_regular(measure_factor(A, solve, norm), sigma, norm, zero_tol)


def block_diagonal_signs(diagonal: np.ndarray, sub: np.ndarray) -> tuple[int, int, int]:
    """(negative, zero, positive) eigenvalue counts of a symmetric block-diagonal matrix.

    ``diagonal`` (n,) and ``sub`` (n − 1,) are its diagonal and sub-diagonal; sub[k] ≠ 0 marks a 2×2
    block on rows k, k+1 (the D of a Bunch–Kaufman LDLᵀ; all 1×1 when ``sub`` is zero).
    """
    n = len(diagonal)
    start = np.flatnonzero(sub != 0)
    in_pair = np.zeros(n, bool)
    in_pair[start] = in_pair[start + 1] = True
    single = diagonal[~in_pair]
    a, c, b = diagonal[start], diagonal[start + 1], sub[start]
    det, trace = a * c - b * b, a + c
    # a 2×2 block (b ≠ 0) with det < 0 has one eigenvalue of each sign, with det > 0 two of trace's
    # sign, with det = 0 a zero and one of trace's sign (trace ≠ 0 there since b ≠ 0)
    pair_neg = (det < 0) + 2 * ((det > 0) & (trace < 0)) + ((det == 0) & (trace < 0))
    neg = int((single < 0).sum() + pair_neg.sum())
    zero = int((single == 0).sum() + (det == 0).sum())
    return neg, zero, n - neg - zero

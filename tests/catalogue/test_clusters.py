"""Resolving clusters that span slices: duplicate removal and Rayleigh–Ritz without D."""

import numpy as np

from eigenfarm.catalogue.clusters import resolve, runs


def _eigen(seed=0, n=30):
    """Reference eigenpairs of a random symmetric matrix with a planted double eigenvalue 0.5 (dense
    LAPACK, numpy.linalg.eigh)."""
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    values = np.sort(np.r_[rng.uniform(0.6, 1.0, n - 2), 0.5, 0.5])
    D = (q * values) @ q.T
    lam, vec = np.linalg.eigh(D)
    return D, lam, vec


def test_runs_split_where_neighbours_are_farther_than_tol():
    assert runs(np.array([0.0, 1e-10, 1.0, 2.0, 2.0 + 5e-10, 2.0 + 1e-9]), 6e-10) == [(0, 2), (2, 3), (3, 6)]
    assert runs(np.zeros(0), 1.0) == []


def test_copy_of_a_degenerate_partner_mixture_is_a_duplicate():
    D, lam, vec = _eigen()
    a, b = vec[:, 0], vec[:, 1]
    mixture = 0.6 * a + 0.8 * b   # overlap 0.6 and 0.8 with each partner, but 1.0 with their span
    r = resolve(np.array([0.5, 0.5, 0.5]), np.array([1e-15, 1e-15, 1e-13]), np.array([2, 2, 3]),
                np.stack([a, b, mixture]), 1.0)
    assert list(r.kept) == [0, 1] and list(r.dropped) == [2] and r.vectors is None
    assert list(r.slices) == [2, 2]


def test_the_copy_with_the_smaller_residual_stays():
    D, lam, vec = _eigen(1)
    v = vec[:, 5]
    r = resolve(np.array([lam[5], lam[5] + 1e-12]), np.array([3e-10, 1e-14]), np.array([0, 1]),
                np.stack([v, -v + 1e-10]), 1.0)
    assert list(r.kept) == [1] and list(r.dropped) == [0] and list(r.slices) == [1]


def test_split_pair_becomes_orthonormal_ritz_pairs_with_valid_residual_bounds():
    D, lam, vec = _eigen(2)
    a, b = vec[:, 0], vec[:, 1]
    members = np.stack([a, 0.6 * a + 0.8 * b])
    estimates = np.array([0.5 - 1e-12, 0.5 + 2e-12])
    residuals = np.array([np.linalg.norm(D @ m - e * m) / np.linalg.norm(m) for m, e in zip(members, estimates)])
    r = resolve(estimates, residuals, np.array([0, 1]), members, 1.0)
    assert len(r.dropped) == 0 and r.vectors.shape == (2, 30)
    assert np.abs(r.vectors @ r.vectors.T - np.eye(2)).max() < 1e-14
    projector = np.outer(a, a) + np.outer(b, b)   # the reference eigenspace
    assert np.abs(r.vectors @ projector - r.vectors).max() < 1e-13
    assert np.all(np.abs(r.eigenvalues - 0.5) < 3e-12) and np.all(np.diff(r.eigenvalues) >= 0)
    true = np.linalg.norm(D @ r.vectors.T - r.vectors.T * r.eigenvalues, axis=0)
    assert np.all(true <= r.residuals * (1 + 1e-12) + 1e-15) and np.all(r.residuals < 1e-10)

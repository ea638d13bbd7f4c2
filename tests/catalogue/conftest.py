"""A synthetic solve job for the catalogue tests: a dense symmetric D with a designed spectrum, its
reference eigenpairs from dense LAPACK (numpy.linalg.eigh), and slice parts as a slice solver could
return them — including a degenerate pair split across a boundary and duplicates across boundaries."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest

from eigenfarm.catalogue import WorkFolder
from eigenfarm.plan.slicing import Plan, Slice

N_ATOMS = 20
EDGES = [0.02, 0.3, 0.55, 0.8, 1.0]   # slice k is (EDGES[k], EDGES[k+1]]; λ in reduced units
SCALE = 1.0                            # the notional λ_max residuals are relative to


@dataclass
class Job:
    D: np.ndarray            # (n, n) the matrix
    values: np.ndarray       # (n,) designed eigenvalues, ascending
    vectors: np.ndarray      # (n, n) reference eigenvectors (columns) from numpy.linalg.eigh
    plan: Plan
    work: WorkFolder
    info: dict
    out: object
    pair_split: tuple[int, int]     # degenerate pair just below EDGES[1], one member returned by slice 1
    duplicated: int                 # mode just below EDGES[2], returned by slices 1 (noisy) and 2 (exact)
    pair_copied: tuple[int, int]    # degenerate pair below EDGES[3]; slice 3 returns a mixture of it


def designed_spectrum(seed: int = 3):
    """(values, D): 3N eigenvalues in (0.05, 0.95) with a degenerate pair just below EDGES[1], a mode
    just below EDGES[2] and a degenerate pair just below EDGES[3]; D = Q diag(values) Qᵀ, Q random
    orthogonal."""
    rng = np.random.default_rng(seed)
    n = 3 * N_ATOMS
    values = rng.uniform(0.05, 0.95, 2 * n)
    values = values[np.min(np.abs(values[:, None] - np.array(EDGES)[None, :]), axis=1) > 1e-3]
    values = np.concatenate([values[: n - 5], [EDGES[1] - 1e-12] * 2, [EDGES[2] - 3e-11],
                             [EDGES[3] - 2e-11] * 2])
    values = np.sort(values)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return values, (q * values) @ q.T


def residual(D, vector, value) -> float:
    """‖D v − λ v‖ / (λ_max ‖v‖), the slice solver's definition."""
    return float(np.linalg.norm(D @ vector - value * vector) / (SCALE * np.linalg.norm(vector)))


def returned_modes(job_values, vectors, D, pair_split, duplicated, pair_copied, rng):
    """{slice: [(eigenvalue estimate, vector)]} as a slice solver returns them (see :class:`Job`)."""
    parts = {k: [] for k in range(len(EDGES) - 1)}
    for i, lam in enumerate(job_values):
        k = int(np.searchsorted(EDGES, lam, side="left")) - 1
        parts[k].append((lam, vectors[:, i]))
    a1, a2 = pair_split
    parts[0] = [(lam, v) for lam, v in parts[0] if not np.array_equal(v, vectors[:, a2])]
    parts[1].insert(0, (job_values[a1] + 2e-12, 0.6 * vectors[:, a1] + 0.8 * vectors[:, a2]))
    d = duplicated
    noisy = vectors[:, d] + 1e-9 * rng.normal(size=len(vectors))
    parts[1] = [(lam, -noisy / np.linalg.norm(noisy)) if np.array_equal(v, vectors[:, d]) else (lam, v)
                for lam, v in parts[1]]
    parts[2].insert(0, (job_values[d] + 5e-11, vectors[:, d]))
    c1, c2 = pair_copied
    parts[3].insert(0, (job_values[c1] + 4e-11, 0.6 * vectors[:, c1] + 0.8 * vectors[:, c2]))
    return parts


def save_parts(work: WorkFolder, parts: dict, D, skip=()) -> None:
    for k, modes in parts.items():
        if k in skip:
            continue
        lam = np.array([m[0] for m in modes])
        vec = np.stack([m[1] for m in modes], axis=1)
        res = np.array([residual(D, v, value) for value, v in modes])
        work.save_part(k, lam, vec, res, {"index": k, "found": len(modes), "shift": 0.5 * (EDGES[k] + EDGES[k + 1])})


def make_plan(values, keep=None) -> Plan:
    slices = [Slice(k, lo, hi, int(np.count_nonzero((values > lo) & (values <= hi))))
              for k, (lo, hi) in enumerate(zip(EDGES[:-1], EDGES[1:]))]
    request = {"lowest": keep} if keep else {"window": [EDGES[0], EDGES[-1]]}
    return Plan(EDGES[0], EDGES[-1], slices, SCALE, 1e-8, 0, 3, 3, request, keep)


@pytest.fixture
def make_job(tmp_path):
    """Factory: ``make_job(keep=None, skip=(), units="metal")`` saves the parts of the synthetic job in a
    work folder for ``tmp_path/modes.zarr`` and returns a :class:`Job`."""

    def make(keep=None, skip=(), units="metal", seed=3):
        values, D = designed_spectrum(seed)
        _, vectors = np.linalg.eigh(D)  # reference: dense LAPACK
        pair_split = tuple(np.flatnonzero(values == EDGES[1] - 1e-12))
        duplicated = int(np.flatnonzero(values == EDGES[2] - 3e-11)[0])
        pair_copied = tuple(np.flatnonzero(values == EDGES[3] - 2e-11))
        out = tmp_path / "modes.zarr"
        work = WorkFolder(out, {"hessian_digest": "f" * 64, "request": {"window": [EDGES[0], EDGES[-1]]}})
        plan = make_plan(values, keep)
        work.save_plan(plan)
        parts = returned_modes(values, vectors, D, pair_split, duplicated, pair_copied, np.random.default_rng(seed))
        save_parts(work, parts, D, skip)
        info = {"units": units, "hessian_digest": "f" * 64, "n_atoms": N_ATOMS, "trivial_zero_modes": 3,
                "store": "synthetic", "solver": {"backend": "dense-test", "tol": 1e-12}}
        return Job(D, values, vectors, plan, work, info, out, pair_split, duplicated, pair_copied)

    return make

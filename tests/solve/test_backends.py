"""Factorisation backends: inertia counts, solves, singular shifts, SuperLU's checks, the registry.

Reference throughout (unless a test says otherwise): dense LAPACK through numpy — the number of
``numpy.linalg.eigvalsh(D.toarray())`` below σ for counts, ``numpy.linalg.solve`` for solves.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as sla
from threadpoolctl import threadpool_limits

from eigenfarm.errors import InputError
from eigenfarm.solve.backend import Inertia, SingularShift
from eigenfarm.solve.backends import (BACKENDS, IndefiniteShift, SuperLUBackend, available_backends, cholmod,
                                      get_backend, slepc)
from eigenfarm.solve.backends.common import block_diagonal_signs, shifted
from eigenfarm.solve.backends.ordering import metis_available, nested_dissection
from eigenfarm.solve.backends.superlu import ORDERINGS

needs_slepc = pytest.mark.skipif(not slepc.available(), reason="PETSc/SLEPc (petsc4py, slepc4py) not installed: make slepc")
#: the slepc backend here is its in-process (one rank) use; tests/solve/test_slepc_mpi.py runs it on 2 ranks
BUILT_IN = ("dense", "superlu", "auto")
INERTIA_BACKENDS = (*BUILT_IN, pytest.param("slepc", marks=needs_slepc))
#: settings that make ``auto`` use its sparse branches on the small test matrices
SETTINGS = {"auto": {"dense_max_n": 100}}
needs_cholmod = pytest.mark.skipif(not cholmod.available(), reason="scikit-sparse (CHOLMOD) not installed")


@pytest.fixture(scope="module", autouse=True)
def one_blas_thread():
    """One BLAS thread, as on eigenfarm's workers: 2 threads on 2 busy cores are several times slower
    (../shared/FACTS.md)."""
    with threadpool_limits(1):
        yield


def count_below(values: np.ndarray, sigma: float) -> int:
    return int((values < sigma).sum())


def gap_midpoints(values: np.ndarray, indices) -> list[float]:
    """Shifts halfway between eigenvalue k and k + 1 for each k in ``indices``."""
    return [0.5 * (values[k] + values[k + 1]) for k in indices]


# ------------------------------------------------------------------------------------ inertia counts
@pytest.mark.parametrize("name", INERTIA_BACKENDS)
def test_inertia_matches_dense_eigenvalues_on_a_glass(glass, name):
    D, values = glass
    n = len(values)
    shifts = [values[0] - 1.0, values[-1] + 1.0] + gap_midpoints(values, [2, 3, 4, 10, 50, 120, 300, 450, 600,
                                                                          750, 880, n - 2])
    backend = get_backend(name, **SETTINGS.get(name, {}))
    for sigma in shifts:
        inertia = backend.factor(D, sigma).inertia()
        expected = count_below(values, sigma)
        assert inertia == Inertia(expected, 0, n - expected), sigma


@pytest.mark.parametrize("name", INERTIA_BACKENDS)
def test_inertia_between_degenerate_shells_of_a_crystal(crystal, name):
    # reference: eigvalsh; the multiplicities (3, 24, 16, …) are those of the FCC plane waves
    D, values, distinct = crystal
    assert len(distinct) < len(values) / 10  # the test needs heavy degeneracy
    backend = get_backend(name, **SETTINGS.get(name, {}))
    for sigma in 0.5 * (distinct[1:] + distinct[:-1]):
        assert backend.count_below(D, sigma) == count_below(values, sigma), sigma


@pytest.mark.parametrize("ordering", [o for o in ORDERINGS if o != "METIS" or metis_available()])
def test_every_superlu_ordering_counts_right(glass, ordering):
    D, values = glass
    backend = SuperLUBackend(ordering=ordering)
    for sigma in gap_midpoints(values, [3, 200, 700]):
        factor = backend.factor(D, sigma)
        assert factor.inertia().below == count_below(values, sigma)
        assert factor.stats["ordering"] == ordering and "fallback" not in factor.stats


def test_block_diagonal_signs_match_eigenvalues():
    # reference: numpy.linalg.eigvalsh of the assembled block-diagonal matrix
    # 2×2 blocks with det −1, det −2.25, det 0 (trace 5), det 5 (trace −5); 1×1 blocks 2, −1, 0, 5
    diagonal = np.array([2.0, -1.0, 0.0, 1.0, 3.0, -2.0, 1.0, 4.0, 1.0, 5.0, -3.0, -2.0])
    sub = np.array([0.0, 0.0, 0.0, 2.0, 0.0, 0.5, 0.0, 2.0, 0.0, 0.0, 1.0])
    matrix = np.diag(diagonal) + np.diag(sub, -1) + np.diag(sub, 1)
    eigen = np.linalg.eigvalsh(matrix)
    zero = np.abs(eigen) < 1e-12
    expected = (int((~zero & (eigen < 0)).sum()), int(zero.sum()), int((~zero & (eigen > 0)).sum()))
    assert expected == (5, 2, 5)
    assert block_diagonal_signs(diagonal, sub) == expected
    assert block_diagonal_signs(-diagonal, -sub) == expected[::-1]


# ------------------------------------------------------------------------------------------- solves
def solve_cases(values):
    """(backend name, σ) pairs: inertia backends at an interior shift, CHOLMOD below the spectrum."""
    names = BUILT_IN + (("slepc",) if slepc.available() else ())
    cases = [(name, 0.5 * (values[400] + values[401])) for name in names]
    if cholmod.available():
        cases.append(("cholmod", values[0] - 0.5))
    return cases


def test_solves_match_numpy_solve(glass):
    D, values = glass
    rng = np.random.default_rng(1)
    b = rng.standard_normal((D.shape[0], 4))
    for name, sigma in solve_cases(values):
        factor = get_backend(name, **SETTINGS.get(name, {})).factor(D, sigma)
        A = D.toarray() - sigma * np.eye(D.shape[0])
        expected = np.linalg.solve(A, b)
        for got, want in ((factor.solve(b), expected), (factor.solve(b[:, 0]), expected[:, 0])):
            assert got.shape == want.shape
            assert np.linalg.norm(got - want) <= 1e-9 * np.linalg.norm(want), name


def test_eigenvalue_distance_is_an_upper_bound(glass):
    D, values = glass
    for name in ("dense", "superlu"):
        for sigma in gap_midpoints(values, [3, 300]) + [values[500] + 1e-3]:
            stats = get_backend(name).factor(D, sigma).stats
            assert stats["eigenvalue_within"] >= np.abs(values - sigma).min() * (1 - 1e-9)
            assert stats["backward_error"] < 1e-10


# ----------------------------------------------------------------------------------- singular shifts
@pytest.mark.parametrize("name", INERTIA_BACKENDS)
def test_shift_at_an_eigenvalue_is_singular(glass, crystal, name):
    D, values = glass
    backend = get_backend(name, **SETTINGS.get(name, {}))
    for k in (0, 3, 450, len(values) - 1):  # a zero (translation) mode, the lowest non-trivial, interior, top
        with pytest.raises(SingularShift, match="numerically an eigenvalue"):
            backend.factor(D, values[k])
    D, values, distinct = crystal
    shell = distinct[np.argmax([np.sum(np.abs(values - v) < 1e-9) for v in distinct])]  # most degenerate
    with pytest.raises(SingularShift):
        backend.count_below(D, shell)


# ------------------------------------------------------------------------------- SuperLU's own checks
PIVOT_ORDERINGS = ("METIS", "MMD_AT_PLUS_A") if metis_available() else ("MMD_AT_PLUS_A",)


def raw_symmetric_lu(D, sigma: float, ordering: str):
    """(SuperLU object, perm) as the backend makes them, but without its checks."""
    A = shifted(D, sigma)[0]
    perm = nested_dissection(A) if ordering == "METIS" else np.arange(A.shape[0])
    spec = "NATURAL" if ordering == "METIS" else ordering
    lu = sla.splu(A[perm][:, perm].tocsc(), permc_spec=spec, diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    return lu, perm


@pytest.fixture(scope="module", params=PIVOT_ORDERINGS)
def zero_first_pivot(request, glass):
    """(ordering, σ) with σ = D[j, j] for the column j eliminated first: the first pivot is exactly zero,
    SuperLU must take an off-diagonal pivot, and its raw diag(U) miscounts (checked against eigvalsh).
    The ordering depends only on the pattern, which ``shifted`` keeps independent of σ."""
    D, values = glass
    lu, perm = raw_symmetric_lu(D, 0.0, request.param)
    j = int(perm[np.flatnonzero(lu.perm_c == 0)[0]])
    sigma = float(D[j, j])
    lu, _ = raw_symmetric_lu(D, sigma, request.param)
    assert not np.array_equal(lu.perm_r, lu.perm_c)
    assert (lu.U.diagonal() < 0).sum() != count_below(values, sigma)  # why the check exists
    return request.param, sigma


def test_superlu_off_diagonal_pivots_fall_back_to_dense(glass, zero_first_pivot):
    D, values = glass
    ordering, sigma = zero_first_pivot
    factor = SuperLUBackend(ordering=ordering).factor(D, sigma)
    assert factor.inertia().below == count_below(values, sigma)
    assert factor.sigma == sigma and factor.stats["backend"] == "dense"
    assert "off-diagonal pivots" in factor.stats["fallback"]


def test_superlu_off_diagonal_pivots_retry_at_bracketing_shifts(glass, zero_first_pivot):
    D, values = glass
    ordering, sigma = zero_first_pivot
    factor = SuperLUBackend(ordering=ordering, dense_fallback_max_n=0).factor(D, sigma)
    assert factor.stats["backend"] == "superlu" and factor.stats["requested_sigma"] == sigma
    assert factor.sigma > sigma and "off-diagonal pivots" in factor.stats["fallback"]
    assert factor.inertia().below == count_below(values, sigma) == count_below(values, factor.sigma)
    x = factor.solve(np.ones(D.shape[0]))
    assert np.allclose(D @ x - factor.sigma * x, 1.0, atol=1e-8)


def test_superlu_retry_refuses_when_an_eigenvalue_lies_between_the_bracketing_shifts(glass, zero_first_pivot):
    # a bracket ±δ wider than the distance to the nearest eigenvalue holds it: counts differ, so no count
    D, values = glass
    ordering, sigma = zero_first_pivot
    distance = np.abs(values - sigma).min()
    norm = shifted(D, sigma)[2]
    wide = SuperLUBackend(ordering=ordering, dense_fallback_max_n=0, retry_shift=1.5 * distance / norm)
    with pytest.raises(SingularShift, match="an eigenvalue lies within"):
        wide.factor(D, sigma)


def test_superlu_fallbacks_do_not_hide_an_eigenvalue_at_the_shift(crystal):
    # every diagonal entry of the spring crystal is 4k = 4 (12 bonds, Σ u uᵀ = 4 I), which is also an
    # eigenvalue (analytic FCC dispersion at the X point; here from eigvalsh): a zero first pivot at an
    # eigenvalue must end as SingularShift on both fallback paths
    D, values, _ = crystal
    assert np.allclose(D.diagonal(), 4.0) and np.abs(values - 4.0).min() < 1e-12
    for settings in ({}, {"dense_fallback_max_n": 0}):
        with pytest.raises(SingularShift):
            SuperLUBackend(**settings).factor(D, 4.0)


def test_superlu_distrusts_a_large_backward_error(glass):
    # a tolerance no factor meets stands in for element growth: the dense fallback must take over,
    # and without it the backend must refuse rather than count
    D, values = glass
    sigma = 0.5 * (values[300] + values[301])
    factor = SuperLUBackend(max_backward_error=0.0).factor(D, sigma)
    assert factor.stats["backend"] == "dense" and "backward error" in factor.stats["fallback"]
    assert factor.inertia().below == 301
    with pytest.raises(SingularShift, match="backward error"):
        SuperLUBackend(max_backward_error=0.0, dense_fallback_max_n=0).factor(D, sigma)


# ------------------------------------------------------------------------------------------- CHOLMOD
@needs_cholmod
def test_cholmod_factors_below_the_spectrum_and_refuses_above(glass):
    D, values = glass
    backend = get_backend("cholmod")
    factor = backend.factor(D, values[0] - 0.1)
    assert factor.inertia() == Inertia(0, 0, D.shape[0])
    for sigma in (0.5 * (values[3] + values[4]), 0.5 * (values[500] + values[501])):
        assert count_below(values, sigma) > 0
        with pytest.raises(IndefiniteShift, match="not positive definite"):
            backend.factor(D, sigma)


def test_superlu_without_pymetis_uses_its_own_ordering(monkeypatch, glass):
    from eigenfarm.solve.backends import ordering
    monkeypatch.setattr(ordering, "_pymetis", None)
    D, values = glass
    assert SuperLUBackend().factor(D, 1.0).stats["ordering"] == "MMD_AT_PLUS_A"
    with pytest.raises(InputError, match="ordering 'METIS' needs pymetis: pip install"):
        SuperLUBackend(ordering="METIS")


def test_cholmod_without_scikit_sparse_says_how_to_install(monkeypatch):
    monkeypatch.setattr(cholmod, "_cholmod", None)
    assert "cholmod" not in available_backends()
    with pytest.raises(InputError, match="apt-get install libsuitesparse-dev"):
        get_backend("cholmod")
    assert get_backend("auto").describe()["cholmod_for_negative_shifts"] is False


# ---------------------------------------------------------------------------------------------- auto
def test_auto_uses_dense_for_small_and_superlu_for_large_matrices(glass):
    D, values = glass
    sigma = 0.5 * (values[100] + values[101])
    assert get_backend("auto").factor(D, sigma).stats["backend"] == "dense"
    factor = get_backend("auto", dense_max_n=100, use_mumps=False).factor(D, sigma)
    assert factor.stats["backend"] == "superlu" and factor.inertia().below == 101


@needs_slepc
def test_auto_counts_with_mumps_when_petsc_is_installed(glass):
    # the count is exact by Sylvester's law of inertia; the reference is dense LAPACK (numpy eigvalsh)
    D, values = glass
    auto = get_backend("auto", dense_max_n=100)
    assert auto.describe()["mumps_for_other_shifts"] is True
    for sigma in (0.5 * (values[100] + values[101]), 0.5 * (values[-3] + values[-2])):
        factor = auto.factor(D, sigma)
        assert factor.stats["backend"] == "slepc" and factor.inertia().below == count_below(values, sigma)
        b = np.random.default_rng(1).standard_normal(D.shape[0])
        x = factor.solve(b)
        assert np.linalg.norm(D @ x - sigma * x - b) <= 1e-9 * np.linalg.norm(b)


@needs_slepc
def test_starting_petsc_in_a_process_leaves_its_children_no_mpi_job_to_join():
    # Open MPI's singleton start sets PMIX_RANK and ~25 other variables in the C environment, which
    # child processes inherit; eigenfarm (mpijob.launched_by_mpi) would then take a child for an MPI rank
    slepc.require()
    probe = "from eigenfarm.farm.mpijob import launched_by_mpi; import os; print(launched_by_mpi(), " \
            "sorted(k for k in os.environ if k.startswith(('PMIX_', 'OMPI_'))))"
    child = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    assert child.stdout.strip() == "False []"
    D = sp.diags(np.arange(1.0, 2001.0)).tocsr()  # MPI still works here after the clean-up
    assert slepc.SlepcBackend().factor(D, 100.5).inertia().below == 100


def test_auto_falls_back_to_superlu_when_mumps_fails(glass, monkeypatch):
    D, values = glass
    auto = get_backend("auto", dense_max_n=100, use_mumps=False)

    class Broken:
        def factor(self, D, sigma):
            raise InputError("backend 'slepc': PETSc/SLEPc do not load (libmpi.so.40: cannot open)")

    auto.mumps = Broken()
    sigma = 0.5 * (values[100] + values[101])
    factor = auto.factor(D, sigma)
    assert factor.stats["backend"] == "superlu" and factor.stats["tried"].startswith("slepc: backend 'slepc'")
    assert factor.inertia().below == 101


@needs_cholmod
def test_auto_tries_cholmod_for_negative_shifts_and_counts_negative_eigenvalues(glass):
    D, values = glass
    auto = get_backend("auto", dense_max_n=100)
    factor = auto.factor(D, -0.5)
    assert factor.stats["backend"] == "cholmod" and factor.inertia().below == 0
    unstable = (D - 2.0 * sp.eye(D.shape[0])).tocsr()  # eigenvalues λ − 2: not a minimum any more
    factor = auto.factor(unstable, -0.5)
    assert factor.stats["backend"] in ("superlu", "slepc") and factor.stats["tried"].startswith("cholmod")
    assert factor.inertia().below == count_below(values - 2.0, -0.5) > 0


# ------------------------------------------------------------------------------- registry and inputs
def test_capability_flags():
    flags = {name: (cls.provides_inertia, cls.handles_indefinite, cls.distributed) for name, cls in BACKENDS.items()}
    assert flags == {"auto": (True, True, False), "dense": (True, True, False), "superlu": (True, True, False),
                     "cholmod": (False, False, False), "slepc": (True, True, True)}
    assert {"auto", "dense", "superlu"} <= set(available_backends())


def test_registry_rejects_unknown_names_and_settings():
    with pytest.raises(InputError, match="unknown backend 'mumps': choose one of auto, dense, superlu, cholmod, slepc"):
        get_backend("mumps")
    with pytest.raises(InputError, match="backend 'superlu': bad setting"):
        get_backend("superlu", pivoting="full")
    with pytest.raises(InputError, match="unknown ordering 'AMD'"):
        get_backend("superlu", ordering="AMD")


def test_dense_refuses_large_matrices_and_names_the_alternative(glass):
    D, _ = glass
    with pytest.raises(InputError, match=r"n = 900 is above its limit 100 .* use backend 'superlu'"):
        get_backend("dense", max_n=100).factor(D, 1.0)


@pytest.mark.parametrize("name", ["dense", "superlu"])
def test_bad_matrices_and_shifts_are_input_errors(name):
    backend = get_backend(name)
    good = sp.diags([1.0, 2.0, 3.0]).tocsr()
    nonsymmetric = sp.csr_matrix(np.array([[2.0, 1.0, 0.0], [0.0, 2.0, 0.0], [0.0, 0.0, 2.0]]))
    nan = sp.csr_matrix(np.array([[2.0, 0.0], [0.0, np.nan]]))
    cases = [(sp.random(3, 4, density=0.5), 1.5, "square"), (nonsymmetric, 1.5, r"not symmetric: D\[0, 1\]"),
             (nan, 1.5, "non-finite entry nan at row 1, column 1"), (good, float("nan"), "finite real"),
             (good, "1.5", "finite real"), ([[1.0]], 0.5, "scipy.sparse matrix or a numpy array"),
             (good.astype(complex), 1.5, "real")]
    for D, sigma, message in cases:
        with pytest.raises(InputError, match=message):
            backend.factor(D, sigma)


def test_numpy_arrays_are_accepted(glass):
    D, values = glass
    sigma = 0.5 * (values[10] + values[11])
    assert get_backend("superlu").factor(D.toarray(), sigma).inertia().below == 11

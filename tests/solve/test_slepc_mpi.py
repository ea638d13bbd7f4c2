"""The slepc backend on 2 MPI ranks (``mpiexec -n 2 eigenfarm solve … --backend slepc``) and in one process.

References, named beside each check: dense LAPACK (``numpy.linalg.eigh``) on the same mass-weighted
Hessian; scipy's backends through eigenfarm's own dask-free solve path (SuperLU + ARPACK); the analytic
FCC spring-crystal levels (Ashcroft & Mermin 1976, ch. 22, eq. 22.58, tests/lattices.py).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

import numpy as np
import pytest
from lattices import bravais_eigenvalues, fcc_allowed_q, fcc_crystal, fcc_neighbours
from test_modes_physics import levels, solve

from eigenfarm.catalogue import open_catalogue
from eigenfarm.cli import main
from eigenfarm.errors import InputError
from eigenfarm.farm import solvejob
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.solve.backends import get_backend, slepc
from eigenfarm.solve.dynamical import dynamical_matrix
from eigenfarm.solve.sharded import assign_shards
from eigenfarm.store import build_store

pytestmark = [pytest.mark.skipif(not slepc.available(), reason="PETSc/SLEPc (petsc4py, slepc4py, mpi4py) not "
                                 "installed: run 'make slepc'"),
              pytest.mark.skipif(shutil.which("mpiexec") is None, reason="no mpiexec on PATH (make slepc installs "
                                 "Open MPI where it can run apt-get)")]
#: Open MPI refuses root without --allow-run-as-root; --oversubscribe lets 2 ranks share busy cores
MPIEXEC = ["mpiexec", "-n", "2"] + (["--allow-run-as-root", "--oversubscribe"] if os.geteuid() == 0 else [])


def on_two_ranks(*arguments, timeout: float = 120) -> subprocess.CompletedProcess:
    """``eigenfarm solve ARGUMENTS`` as an MPI job of 2 ranks (a hang fails the test by the timeout)."""
    env = {**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
    return subprocess.run([*MPIEXEC, sys.executable, "-m", "eigenfarm.cli", "solve", *map(str, arguments)],
                          capture_output=True, text=True, timeout=timeout, env=env)


def subspace_gap(catalogue, reference: np.ndarray) -> float:
    """max |V Vᵀ − R Rᵀ|: equal subspaces have equal projectors (free of signs and rotations in degenerate sets)."""
    V = np.concatenate([chunk for _, chunk in catalogue.iter_vectors(16)]).T
    return float(np.abs(V @ V.T - reference @ reference.T).max())


@pytest.fixture(scope="module")
def glass(tmp_path_factory):
    """A 200-atom demo glass in a store of 4 shards: (path, eigenvalues, eigenvectors in input order)."""
    config = make_sample(Recipe(200), seed=11, sample=0)
    path = tmp_path_factory.mktemp("glass") / "H.zarr"
    build_store(config, demo_potential(), path, shard_atoms=50)
    return (path, *np.linalg.eigh(dynamical_matrix(demo_potential().hessian(config), config.masses).toarray()))


@pytest.mark.parametrize("method", ["krylov-schur", "interval"])
def test_window_on_two_ranks_matches_dense_eigh_and_scipy(glass, tmp_path, method):
    path, w, U = glass
    lo, hi = 0.5, 5.0  # ω (reduced units)
    done = on_two_ranks(path, "--out", tmp_path / "m.zarr", "--window", f"{lo}:{hi}", "--backend", "slepc",
                        "--slice-method", method, "--slice-modes", 12)
    assert done.returncode == 0, done.stderr
    cat = open_catalogue(tmp_path / "m.zarr")
    inside = (w > lo**2) & (w <= hi**2)
    # counts exact: dense LAPACK (numpy.linalg.eigh), and scipy's SuperLU backend through the one-process path
    scipy_cat = solve(path, tmp_path / "s.zarr", window=(lo, hi), backend="superlu", slice_modes=12)
    assert cat.complete and cat.n_modes == inside.sum() == scipy_cat.n_modes > 40
    np.testing.assert_allclose(cat.eigenvalues, w[inside], rtol=1e-9)  # numpy.linalg.eigh
    np.testing.assert_allclose(cat.eigenvalues, scipy_cat.eigenvalues, rtol=1e-9)  # scipy backend
    assert subspace_gap(cat, U[:, inside]) < 1e-8 and cat.residuals.max() < 1e-10
    runs = [s["run"] for s in cat.attrs["slices"]]
    assert {r["method"] for r in runs} == {method} and len(runs) > 2
    if method == "krylov-schur":  # each slice's shift lies inside the spectrum: D − σI is indefinite
        assert all(r["factor_ranks"] == 2 and 0 < (w < r["shift"]).sum() < len(w) for r in runs)


@pytest.mark.parametrize("k", [20, 201])  # 20: one Krylov–Schur pass; 201 > ONE_PASS_MAX: sliced
def test_lowest_on_two_ranks_matches_dense_eigh(glass, tmp_path, k):
    path, w, U = glass
    done = on_two_ranks(path, "--out", tmp_path / "m.zarr", "--lowest", k, "--backend", "slepc", "--slice-modes", 40)
    assert done.returncode == 0, done.stderr
    cat = open_catalogue(tmp_path / "m.zarr")
    np.testing.assert_allclose(cat.eigenvalues[:k], w[3:3 + k], rtol=1e-9)  # numpy.linalg.eigh; 3 translations out
    assert cat.complete and cat.attrs["zero_modes"]["count"] == 3
    assert subspace_gap(cat, U[:, 3:3 + cat.n_modes]) < 1e-8
    assert bool(cat.attrs["request"].get("one_pass")) == (k <= solvejob.ONE_PASS_MAX)
    if k <= solvejob.ONE_PASS_MAX:  # two factorisations: below the spectrum, and the proving count
        run, = [s["run"] for s in cat.attrs["slices"]]
        assert run["factor_ranks"] == 2 and run["check_count"] == 3 + cat.n_modes


def test_lowest_in_one_pass_on_two_ranks_completes_a_degenerate_level(tmp_path):
    # FCC spring crystal, 4³ cells: the 30 lowest non-trivial modes end inside the 16-fold second level
    # (levels 24, 16 from Ashcroft & Mermin eq. 22.58 on the box's wavevectors), so 40 are kept; a
    # Krylov–Schur run misses members of such levels, which the proving count exposes
    config, potential = fcc_crystal(4)
    build_store(config, potential, tmp_path / "H.zarr", shard_atoms=64)
    ref = bravais_eigenvalues(fcc_allowed_q(4), fcc_neighbours())[3:43]
    done = on_two_ranks(tmp_path / "H.zarr", "--out", tmp_path / "m.zarr", "--lowest", 30, "--backend", "slepc")
    assert done.returncode == 0, done.stderr
    cat = open_catalogue(tmp_path / "m.zarr")
    assert cat.attrs["request"].get("one_pass") and cat.complete and cat.n_modes == 40
    np.testing.assert_allclose(cat.eigenvalues, ref, rtol=1e-9)


def test_degenerate_fcc_shells_on_two_ranks(tmp_path):
    # FCC nearest-neighbour springs, 4³ cells: levels 24-, 16- and 18-fold below ω = 1.2 (analytic
    # dispersion, Ashcroft & Mermin eq. 22.58 on the box's wavevectors; see test_modes_physics.py)
    config, potential = fcc_crystal(4)
    build_store(config, potential, tmp_path / "H.zarr", shard_atoms=64)
    ref = bravais_eigenvalues(fcc_allowed_q(4), fcc_neighbours())
    expected = ref[(ref > 1e-8) & (ref <= 1.2**2)]
    done = on_two_ranks(tmp_path / "H.zarr", "--out", tmp_path / "m.zarr", "--window", "0:1.2", "--backend", "slepc",
                        "--slice-modes", 10)
    assert done.returncode == 0, done.stderr
    cat = open_catalogue(tmp_path / "m.zarr")
    got, want = levels(cat.eigenvalues), levels(expected)
    assert cat.complete and [m for _, m in got] == [m for _, m in want] == [24, 16, 18]
    np.testing.assert_allclose([v for v, _ in got], [v for v, _ in want], rtol=1e-9)
    np.testing.assert_allclose(cat.eigenvalues, expected, rtol=1e-9)


def test_one_process_slepc_backend_through_the_dask_free_path(glass, tmp_path):
    # the in-process backend under eigenfarm's ARPACK slicer, against numpy.linalg.eigh
    path, w, _ = glass
    cat = solve(path, tmp_path / "m.zarr", window=(1.0, 3.0), backend="slepc", slice_modes=10)
    inside = (w > 1.0) & (w <= 9.0)
    assert cat.complete and cat.n_modes == inside.sum()
    np.testing.assert_allclose(cat.eigenvalues, w[inside], rtol=1e-9)


def test_error_on_one_rank_ends_both_with_one_line(glass, tmp_path):
    # shard 3 belongs to rank 1 only (assign_shards); without it only rank 1 fails to read
    path, _, _ = glass
    assert list(assign_shards(np.array([0, 50, 100, 150, 200]), 2)) == [0, 2, 4]
    broken = tmp_path / "broken.zarr"
    shutil.copytree(path, broken)
    shutil.rmtree(broken / "shards" / "000003" / "blocks")
    done = on_two_ranks(broken, "--out", tmp_path / "m.zarr", "--lowest", 5, "--backend", "slepc", timeout=60)
    assert done.returncode != 0
    lines = done.stderr.strip().splitlines()
    assert len([line for line in lines if line.startswith("eigenfarm: error:")]) == 1, done.stderr
    assert "(rank 1 of 2)" in done.stderr and not (tmp_path / "m.zarr").exists()


def test_dask_task_runs_a_store_as_an_mpi_job(glass, tmp_path, capsys):
    path, w, _ = glass
    status = main(["solve", str(path), "--out", str(tmp_path / "m.zarr"), "--lowest", "6", "--backend", "slepc",
                   "--ranks", "2", "--inline"])
    assert status == 0, capsys.readouterr().err
    cat = open_catalogue(tmp_path / "m.zarr")
    assert cat.attrs["solver"]["slice_method"] == "krylov-schur"
    np.testing.assert_allclose(cat.eigenvalues[:6], w[3:9], rtol=1e-9)  # numpy.linalg.eigh


def test_without_petsc_the_backend_says_how_to_install_it(monkeypatch, glass, tmp_path, capsys):
    monkeypatch.setattr(slepc, "available", lambda: False)
    with pytest.raises(InputError, match="make slepc"):
        get_backend("slepc")
    path, _, _ = glass
    assert main(["solve", str(path), "--out", str(tmp_path / "m.zarr"), "--lowest", "3", "--backend", "slepc"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("eigenfarm: error: backend 'slepc' needs petsc4py") and "make slepc" in err[0]


def test_assign_shards_gives_whole_contiguous_shards_of_about_equal_atoms():
    bounds = np.array([0, 10, 20, 30, 40, 50, 60])
    assert list(assign_shards(bounds, 3)) == [0, 2, 4, 6]
    assert list(assign_shards(bounds, 1)) == [0, 6]
    assert list(assign_shards(np.array([0, 10, 20]), 4)) == [0, 0, 1, 1, 2]  # ranks 0 and 2 get no rows

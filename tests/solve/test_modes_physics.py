"""Whole solve jobs (plan → slices → catalogue, run inline) against outside references."""

import numpy as np
import pytest
from lattices import (bravais_eigenvalues, fcc_allowed_q, fcc_crystal, fcc_neighbours, ring, ring_frequencies,
                      simple_cubic)

from eigenfarm.catalogue import open_catalogue
from eigenfarm.errors import InputError
from eigenfarm.farm import solvejob
from eigenfarm.farm.runner import LocalRunner
from eigenfarm.potentials.fire import fire_minimise
from eigenfarm.samples.prepare import Recipe, make_sample, random_fill
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.solve.dynamical import dynamical_matrix
from eigenfarm.store import build_store


def solve(store, out, notices=None, **request):
    """Run a solve job in this process; returns the opened catalogue."""
    runner = LocalRunner()
    req = solvejob.SolveRequest(**request)
    job = solvejob.prepare(runner, str(store), out, req, False, [].append if notices is None else notices.append)
    return open_catalogue(solvejob.run(runner, [job], req)[0])


def levels(values, tol=1e-7):
    """(value, multiplicity) of sorted values grouped within tol."""
    groups = np.split(values, np.flatnonzero(np.diff(values) > tol) + 1)
    return [(g[0], len(g)) for g in groups]


@pytest.fixture(scope="module")
def glass(tmp_path_factory):
    config = make_sample(Recipe(200), seed=11, sample=0)
    path = tmp_path_factory.mktemp("glass") / "H.zarr"
    build_store(config, demo_potential(), path)
    D = dynamical_matrix(demo_potential().hessian(config), config.masses).toarray()
    return path, np.linalg.eigh(D)


@pytest.mark.parametrize("backend", ["superlu", "dense"])
def test_glass_window_matches_dense_eigh(glass, tmp_path, backend):
    # Reference: dense LAPACK (numpy.linalg.eigh) on the same mass-weighted Hessian, input atom order.
    path, (w, U) = glass
    lo, hi = 0.5, 5.0  # reduced frequency units ω
    cat = solve(path, tmp_path / "m.zarr", window=(lo, hi), backend=backend, slice_modes=12)
    inside = (w > lo**2) & (w <= hi**2)
    assert cat.complete and cat.n_modes == inside.sum() > 40
    np.testing.assert_allclose(cat.eigenvalues, w[inside], rtol=1e-9)
    V = np.concatenate([chunk for _, chunk in cat.iter_vectors(7)]).T  # (3N, m)
    ref = U[:, inside]
    # equal subspaces: the projectors agree (sign- and rotation-free within degenerate sets)
    assert np.abs(V @ V.T - ref @ ref.T).max() < 1e-8
    assert np.abs(V.T @ V - np.eye(V.shape[1])).max() < 1e-10
    assert cat.residuals.max() < 1e-10
    assert len(np.unique(cat.attrs["slices"] and [s["index"] for s in cat.attrs["slices"]])) > 2


def test_glass_lowest_k_matches_dense_eigh(glass, tmp_path):
    path, (w, _) = glass
    cat = solve(path, tmp_path / "m.zarr", lowest=25, slice_modes=10)
    np.testing.assert_allclose(cat.eigenvalues[:25], w[3:28], rtol=1e-9)  # 3 translations excluded
    assert cat.attrs["zero_modes"]["count"] == 3


@pytest.mark.parametrize("backend", ["superlu", "dense"])
def test_fcc_crystal_shells_have_their_exact_multiplicities(tmp_path, backend):
    # Nearest-neighbour spring FCC in a box of 4³ conventional cells; reference levels from the
    # dynamical matrix on the box's allowed wavevectors (Ashcroft & Mermin 1976, ch. 22, eq. 22.58).
    # For this central-force model the lowest level is 24-fold, not the 12 transverse modes of the
    # six q = (2π/4a)⟨100⟩ alone: the twelve q = (2π/4a)⟨110⟩ each add one mode polarised normal to
    # their {110} plane at the same ω² = 2(k/m)(1 − cos π/4); the next levels are 16- and 18-fold
    # (the 18 = 6 longitudinal ⟨100⟩ + 12 ⟨110⟩ modes at 4(k/m)(1 − cos π/4)).
    config, potential = fcc_crystal(4)
    build_store(config, potential, tmp_path / "H.zarr")
    ref = bravais_eigenvalues(fcc_allowed_q(4), fcc_neighbours())
    hi = 1.2  # ω; covers the first three levels (ω² = 0.586, 1.0, 1.172)
    cat = solve(tmp_path / "H.zarr", tmp_path / "m.zarr", window=(0.0, hi), backend=backend, slice_modes=10)
    expected = ref[(ref > 1e-8) & (ref <= hi**2)]
    assert [m for _, m in levels(expected)] == [24, 16, 18]
    got = levels(cat.eigenvalues)
    assert [m for _, m in got] == [24, 16, 18]
    np.testing.assert_allclose([v for v, _ in got], [v for v, _ in levels(expected)], rtol=1e-10)
    assert cat.attrs["zero_modes"]["count"] == 3


def test_ring_gives_degenerate_pairs_and_reports_its_floppy_modes(tmp_path):
    # Periodic chain of 24 atoms: ω_n = 2√(k/m)|sin(πn/N)| (Kittel, ch. 4, eq. 4.9), each n ≠ 0, N/2
    # paired with N − n; the 2N transverse displacements cost no energy, so 2N + 1 zero modes.
    n, k, m = 24, 1.7, 2.0
    config, potential = ring(n, k=k, mass=m)
    build_store(config, potential, tmp_path / "H.zarr")
    notices = []
    cat = solve(tmp_path / "H.zarr", tmp_path / "m.zarr", notices, window=(0.0, 10.0), slice_modes=6)
    ref = np.sort(ring_frequencies(n, k, m))[1:]
    np.testing.assert_allclose(cat.frequencies, ref, rtol=1e-10)
    assert [mult for _, mult in levels(cat.eigenvalues)] == [2] * 11 + [1]
    assert cat.attrs["zero_modes"]["count"] == 2 * n + 1
    assert any("49 zero modes" in text for text in notices)
    # the catalogue carries the sample's geometry in input order, for analyses without the store
    assert "mass" in cat.group and "position" in cat.group and "cell" in cat.attrs
    geometry = cat.geometry
    np.testing.assert_allclose(geometry.box.minimum_image(geometry.positions - config.positions), 0, atol=1e-12)
    np.testing.assert_array_equal(geometry.masses, config.masses)
    np.testing.assert_array_equal(geometry.box.cell, config.box.cell)


def test_simple_cubic_floppy_planes_are_reported_not_a_crash(tmp_path):
    # Simple cubic nearest-neighbour springs, L³ box: a rigid slip of any lattice plane costs no
    # energy, giving 3L² zero modes (common practice; ω² = 2(k/m)(1 − cos q_α a) per Cartesian branch).
    L = 4
    config, potential = simple_cubic(L)
    build_store(config, potential, tmp_path / "H.zarr")
    cat = solve(tmp_path / "H.zarr", tmp_path / "m.zarr", window=(0.0, 1.5), slice_modes=20)
    assert cat.attrs["zero_modes"]["count"] == 3 * L**2
    q = 2 * np.pi * np.arange(L) / L
    branch = 2 * (1 - np.cos(q))  # each of x, y, z: depends on one component of q only
    ref = np.sort(np.concatenate([np.repeat(branch, L * L)] * 3))
    ref = ref[(ref > 1e-8) & (ref <= 1.5**2)]
    np.testing.assert_allclose(cat.eigenvalues, ref, rtol=1e-10)


@pytest.fixture(scope="module")
def rough(tmp_path_factory):
    """A configuration away from its minimum (a random fill only roughly relaxed): its store and the
    eigenvalues of its D by dense LAPACK (numpy.linalg.eigvalsh), the reference for its negative modes."""
    potential = demo_potential()
    config = fire_minimise(potential, random_fill(Recipe(120), np.random.default_rng(4)), fmax=0.5).config
    path = tmp_path_factory.mktemp("rough") / "H.zarr"
    build_store(config, potential, path)
    return path, np.linalg.eigvalsh(dynamical_matrix(potential.hessian(config), config.masses).toarray())


def test_negative_eigenvalues_are_counted_and_strict_refuses(rough, tmp_path):
    path, w = rough
    negative = int((w < -1e-8 * w.max()).sum())
    assert negative > 0
    notices = []
    cat = solve(path, tmp_path / "m.zarr", notices, window=(-50.0, 2.0))
    assert cat.attrs["negative_modes"]["count"] == negative
    np.testing.assert_allclose(cat.eigenvalues[:negative], w[:negative], rtol=1e-9)
    assert (cat.frequencies[:negative] < 0).all()
    assert any("NEGATIVE" in text for text in notices)
    with pytest.raises(InputError, match="NEGATIVE"):
        solve(path, tmp_path / "strict.zarr", window=(-50.0, 2.0), strict=True)


def test_bad_requests_are_clear_errors(glass, tmp_path):
    path, _ = glass
    with pytest.raises(InputError, match="empty window"):
        solve(path, tmp_path / "a.zarr", window=(2.0, 1.0))
    with pytest.raises(InputError, match="only zero modes"):
        solve(path, tmp_path / "b.zarr", window=(0.0, 1e-9))
    with pytest.raises(InputError, match="only 597 modes above the zero band"):
        solve(path, tmp_path / "c.zarr", lowest=598)


def test_a_store_that_failed_validation_is_refused(glass, tmp_path):
    import shutil

    from eigenfarm.store import layout

    path, _ = glass
    broken = tmp_path / "broken.zarr"
    shutil.copytree(path, broken)
    verdict = layout.read_attrs(broken)["validation"]
    verdict["passed"] = False
    verdict["checks"]["symmetry"]["passed"] = False
    layout.update_attrs(broken, {"validation": verdict})
    with pytest.raises(InputError, match=r"failed validation \(symmetry\)"):
        solve(broken, tmp_path / "m.zarr", lowest=5)


def test_lowest_k_one_pass_and_sliced_paths_agree_and_complete_degenerate_levels(tmp_path, monkeypatch):
    # FCC spring crystal, 4³ cells: the 30 lowest non-trivial modes end inside the 16-fold second level
    # (levels 24, 16, 18 from Ashcroft & Mermin eq. 22.58 on the box's wavevectors), so 40 are kept.
    config, potential = fcc_crystal(4)
    build_store(config, potential, tmp_path / "H.zarr")
    ref = bravais_eigenvalues(fcc_allowed_q(4), fcc_neighbours())[3:43]
    one_pass = solve(tmp_path / "H.zarr", tmp_path / "a.zarr", lowest=30, backend="superlu")
    assert one_pass.attrs["request"].get("one_pass") and len(one_pass.attrs["slices"]) == 1
    monkeypatch.setattr(solvejob, "ONE_PASS_MAX", 0)
    sliced = solve(tmp_path / "H.zarr", tmp_path / "b.zarr", lowest=30, backend="superlu", slice_modes=10)
    assert not sliced.attrs["request"].get("one_pass")
    for cat in (one_pass, sliced):
        assert cat.complete and cat.n_modes == 40
        np.testing.assert_allclose(cat.eigenvalues, ref, rtol=1e-10)


def test_lowest_k_falls_back_to_slicing_when_there_are_negative_modes(rough, tmp_path):
    path, w = rough
    tau = 1e-8 * w.max()
    cat = solve(path, tmp_path / "m.zarr", lowest=10)
    assert not cat.attrs["request"].get("one_pass")
    assert cat.attrs["negative_modes"]["count"] == int((w < -tau).sum()) > 0
    np.testing.assert_allclose(cat.eigenvalues, w[w > tau][:10], rtol=1e-9)

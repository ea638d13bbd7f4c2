"""The kernel polynomial density of states of streamed Hessian stores, against outside references."""

import json

import numpy as np
import pytest
from lattices import bravais_eigenvalues, fcc_allowed_q, fcc_crystal, fcc_neighbours

from eigenfarm.analysis import kpm, shardcache
from eigenfarm.analysis.sharded import LOOKAHEAD, ShardedDynamical
from eigenfarm.cli import main
from eigenfarm.farm.cluster import open_client
from eigenfarm.farm.runner import LocalRunner, runner_for
from eigenfarm.potentials.fire import fire_minimise
from eigenfarm.samples.prepare import Recipe, make_sample, random_fill
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.solve.dynamical import dynamical_matrix
from eigenfarm.store import build_store, open_store
from eigenfarm.structure.units import REDUCED


@pytest.fixture(scope="module")
def crystal(tmp_path_factory):
    """FCC spring crystal, 4³ cells (256 atoms) in 4 shards, and its exact eigenvalues from the
    dynamical matrix on the box's allowed wavevectors (Ashcroft & Mermin 1976, ch. 22, eq. 22.58)."""
    config, potential = fcc_crystal(4)
    path = tmp_path_factory.mktemp("crystal") / "H.zarr"
    build_store(config, potential, path, shard_atoms=64)
    return path, bravais_eigenvalues(fcc_allowed_q(4), fcc_neighbours())


@pytest.fixture(scope="module")
def glass(tmp_path_factory):
    """A 200-atom demo glass in 4 shards; eigenpairs of its D by dense LAPACK (numpy.linalg.eigh)."""
    config = make_sample(Recipe(200), seed=11, sample=0)
    path = tmp_path_factory.mktemp("glass") / "H.zarr"
    build_store(config, demo_potential(), path, shard_atoms=50)
    D = dynamical_matrix(demo_potential().hessian(config), config.masses).toarray()
    return path, D, np.linalg.eigh(D)


@pytest.fixture(scope="module")
def rough(tmp_path_factory):
    """A random fill only roughly relaxed (it has a negative eigenvalue); eigenvalues by dense LAPACK
    (numpy.linalg.eigvalsh)."""
    potential = demo_potential()
    config = fire_minimise(potential, random_fill(Recipe(120), np.random.default_rng(4)), fmax=0.5).config
    path = tmp_path_factory.mktemp("rough") / "H.zarr"
    build_store(config, potential, path, shard_atoms=40)
    return path, np.linalg.eigvalsh(dynamical_matrix(potential.hessian(config), config.masses).toarray())


@pytest.fixture(scope="module")
def crystal_estimate(crystal):
    return kpm.estimate_density(crystal[0], moments=256, probes=32, seed=1)


@pytest.fixture(scope="module")
def glass_estimate(glass):
    return kpm.estimate_density(glass[0], moments=256, probes=20, seed=3)


def exact_count_bracket(estimate, eigenvalues, frequency, widths=4.0):
    """(N(λ − wσ), N(λ + wσ)): exact counts of eigenvalues below λ(f) ∓ ``widths`` kernel widths."""
    lam = estimate.units.eigenvalue(frequency)
    sigma, _ = estimate.resolution(frequency)
    below = np.sort(eigenvalues)
    return (np.searchsorted(below, lam - widths * sigma), np.searchsorted(below, lam + widths * sigma))


def test_streamed_product_matches_the_assembled_dynamical_matrix(glass):
    # reference: D = M^-½ H M^-½ of the potential's own Hessian (scipy.sparse), rows in store order
    path, D, _ = glass
    store = open_store(path)
    dofs = (3 * store.original_index[:, None] + np.arange(3)).ravel()
    D = D[np.ix_(dofs, dofs)]
    op = ShardedDynamical(store, LocalRunner(), cache_bytes=0)  # nothing cached: read every time
    assert op.n_shards == 4 and all(len(n) >= 1 for n in op.neighbours)
    X = op.random(3, seed=7)
    Y = op.combine(2.0, X, [(-0.5, X)])
    x, y = (np.concatenate([h.result() for h in v]) for v in (X, Y))
    assert set(np.unique(x)) == {-1.0, 1.0}
    np.testing.assert_allclose(y, 2 * D @ x - 0.5 * x, rtol=1e-12, atol=1e-10 * np.abs(D).max())
    np.testing.assert_allclose(op.dots([(X, Y)])[0], (x * y).sum(axis=0), rtol=1e-12)
    op.close()


def test_shard_cache_keeps_its_budget_and_evicts_other_stores_first():
    group_a, group_b = ("a.zarr", "1"), ("b.zarr", "2")
    shardcache.forget(group_a), shardcache.forget(group_b)
    assert shardcache.put((group_a, 0), "A0", 60, budget=100)
    assert not shardcache.put((group_a, 1), "A1", 60, budget=100)  # a store never evicts its own shards
    assert shardcache.get((group_a, 0)) == "A0" and shardcache.get((group_a, 1)) is None
    assert shardcache.put((group_b, 0), "B0", 70, budget=100)  # another store's entries make room
    assert shardcache.get((group_a, 0)) is None and shardcache.get((group_b, 0)) == "B0"
    assert shardcache.forget(group_b) == 70 and shardcache.get((group_b, 0)) is None


@pytest.mark.parametrize("a", [0.0, 0.6, -0.95])
def test_jackson_kernel_is_positive_with_the_stated_width(a):
    # Weiße et al., Rev. Mod. Phys. 78, 275 (2006), Jackson kernel — from memory: the damped series of
    # a delta function is non-negative, centred near a, with standard deviation ≈ π/M mid-spectrum.
    M = 128
    moments = np.cos(np.arange(M) * np.arccos(a))[:, None].repeat(2, axis=1)  # exact: μ_n = T_n(a)
    bounds = kpm.SpectralBounds(-1.0, 1.0, (-1.0, 1.0), (0.0, 0.0), 0.0, 0)
    estimate = kpm.DensityEstimate(moments, bounds, 1, REDUCED, 0)
    f = estimate.grid(8000)
    density, _ = estimate.density(f)
    assert density.min() > -1e-12 * density.max()
    below, _ = estimate.modes_below(np.linspace(*estimate.frequency_range(), len(f) + 1))  # bin edges
    assert below[0] == pytest.approx(0.0, abs=1e-12) and below[-1] == pytest.approx(1.0, abs=1e-12)
    weight = np.diff(below)  # the probability in each bin, centred on f
    assert weight.min() > -1e-12
    lam = REDUCED.eigenvalue(f)
    mean = (weight * lam).sum()
    spread = np.sqrt((weight * (lam - mean) ** 2).sum())
    sigma, _ = estimate.resolution(REDUCED.frequency(a))
    assert mean == pytest.approx(a, abs=0.1 * sigma)
    assert spread == pytest.approx(sigma, rel=0.02)
    if a == 0.0:
        assert sigma == pytest.approx(np.pi / M, rel=0.02)


def test_crystal_density_agrees_with_the_analytic_spectrum_within_the_resolution(crystal, crystal_estimate):
    # reference: analytic FCC spring-lattice eigenvalues (Ashcroft & Mermin 1976, eq. 22.58); the KPM
    # cumulative count must lie between the exact counts 4 kernel widths either side (the Jackson
    # kernel is positive with Gaussian-like tails), allowing 3 standard errors of stochastic error.
    _, exact = crystal
    est = crystal_estimate
    f = est.grid(2000)
    below, error = est.modes_below(f)
    low, high = exact_count_bracket(est, exact, f)
    assert np.all(below >= low - 3 * error - 0.5) and np.all(below <= high + 3 * error + 0.5)
    density, _ = est.density(f)
    assert np.trapezoid(density, f) == pytest.approx(1.0, abs=2e-3)  # per dof: ∫D(f)df = 1
    # every degenerate level at least 8 kernel widths from its neighbours holds its multiplicity
    levels = np.split(exact, np.flatnonzero(np.diff(exact) > 1e-7) + 1)
    values = np.array([level[0] for level in levels])
    checked = 0
    for i, level in enumerate(levels):
        sigma, _ = est.resolution(REDUCED.frequency(values[i]))
        if min(np.abs(np.delete(values, i) - values[i])) < 8 * sigma:
            continue
        value, error = est.count(*REDUCED.frequency(values[i] + np.array([-4, 4]) * sigma))
        assert abs(value - len(level)) <= 3 * error + 0.5, (values[i], len(level), value, error)
        checked += 1
    assert checked >= 4


def test_glass_counts_agree_with_dense_eigh_within_their_errors(glass, glass_estimate):
    # reference: dense LAPACK (numpy.linalg.eigh) of the same D.  Error check: Hutchinson's estimator
    # with Rademacher probes has variance 2(‖P‖_F² − Σ P_ii²) for a projector P (Hutchinson, Commun.
    # Stat. Simul. Comput. 18, 1059 (1989) — from memory); the reported error must be of that size.
    _, _, (w, U) = glass
    est = glass_estimate
    edges = [est.frequency_range()[0], 2.0, 4.0, 8.0, 14.0, 30.0]  # the first band holds the zero modes
    for f1, f2 in zip(edges[:-1], edges[1:]):
        value, error = est.count(f1, f2)
        inside = (w > est.units.eigenvalue(f1)) & (w <= est.units.eigenvalue(f2))
        assert abs(value - inside.sum()) <= 3 * error + 0.5, (f1, f2, value, error, inside.sum())
        diagonal = (U[:, inside] ** 2).sum(axis=1)
        expected = np.sqrt(2 * (inside.sum() - (diagonal**2).sum()) / est.n_probes)
        assert 0.4 * expected < error < 2.0 * expected, (f1, f2, error, expected)


def test_glass_density_is_the_exact_spectrum_under_the_same_kernel(glass, glass_estimate):
    # reference: moments of the dense-LAPACK eigenvalues, μ_n = (1/3N) Σ T_n(x_i), under the same
    # kernel; the stochastic estimate may differ from them only by its stated errors.
    _, _, (w, _) = glass
    est = glass_estimate
    c, h = (est.bounds.hi + est.bounds.lo) / 2, (est.bounds.hi - est.bounds.lo) / 2
    exact_moments = np.cos(np.arange(est.n_moments)[:, None] * np.arccos((w - c) / h)).mean(axis=1)
    exact = kpm.DensityEstimate(np.stack([exact_moments] * 2, axis=1), est.bounds, est.n_dof, est.units, 0)
    f = est.grid(1000)
    (value, error), (reference, _) = est.density(f), exact.density(f)
    z = np.abs(value - reference) / error
    assert np.mean(z > 3) < 0.01 and z.max() < 5
    assert np.median(error / np.maximum(reference, 1e-3 * reference.max())) < 0.2  # errors not absurd


@pytest.mark.parametrize("which", ["crystal", "glass", "rough"])
def test_bounds_enclose_the_spectrum_and_are_not_loose(which, crystal, glass, rough):
    # reference: analytic (crystal) or dense LAPACK (glass, rough) extreme eigenvalues
    path, exact = {"crystal": crystal, "glass": (glass[0], glass[2][0]), "rough": rough}[which]

    op = ShardedDynamical(open_store(path), LocalRunner())
    bounds = kpm.lanczos_bounds(op, seed=2)
    op.close()
    width = exact.max() - exact.min()
    assert bounds.lo <= exact.min() and bounds.hi >= exact.max()
    assert bounds.hi - bounds.lo < 1.1 * width


def test_negative_eigenvalue_is_covered_and_counted(rough):
    # reference: dense LAPACK (numpy.linalg.eigvalsh); the rough configuration has one λ < 0
    path, w = rough
    negative = w[w < -1e-6]
    assert len(negative) == 1
    # one mode's count has a per-probe spread of about √2 (Hutchinson's variance 2(1 − Σ u_i⁴)), so
    # telling 1 from 0 at 3 standard errors takes R ≳ 20 probes; 64 make it clear
    est = kpm.estimate_density(path, moments=1536, probes=64, seed=5)
    assert est.bounds.lo < negative[0] and est.frequency_range()[0] < REDUCED.frequency(negative[0])
    cut = REDUCED.frequency(negative[0] / 2)
    assert est.resolution(cut)[0] < abs(negative[0]) / 6  # the cut is 3 widths from λ_neg and from 0
    value, error = est.count(est.frequency_range()[0], cut)
    assert abs(value - 1.0) <= 3 * error and value > 3 * error


def test_moments_refuse_bounds_that_miss_the_spectrum(crystal):
    op = ShardedDynamical(open_store(crystal[0]), LocalRunner())
    with pytest.raises(kpm.BoundsExceeded):
        kpm.chebyshev_moments(op, -0.1, 7.0, 64, 2)  # λ_max = 8
    op.close()


def test_estimate_widens_bounds_once_when_the_moments_say_so(crystal, monkeypatch):
    true = kpm.SpectralBounds(-0.05, 7.8, (0.0, 7.8), (0.0, 0.0), 0.05, 40)  # too narrow: λ_max = 8
    monkeypatch.setattr(kpm, "lanczos_bounds", lambda *args: true)
    est = kpm.estimate_density(crystal[0], moments=64, probes=2)
    assert est.bounds.margin == pytest.approx(0.5) and est.bounds.hi == pytest.approx(8.25)


@pytest.fixture(scope="module")
def client():
    with open_client(workers=2) as c:
        yield c


def test_inline_and_two_workers_give_identical_estimates(crystal, client):
    # few steps (each Lanczos step is two dask round trips), enough for the moments to run ahead of
    # their inner products by more than LOOKAHEAD steps
    settings = dict(moments=2 * (LOOKAHEAD + 4), probes=4, seed=9, lanczos_steps=6)
    inline = kpm.estimate_density(crystal[0], **settings)
    farmed = kpm.estimate_density(crystal[0], client=client, **settings)
    assert runner_for(client).slots == 2
    np.testing.assert_array_equal(farmed.probe_moments, inline.probe_moments)
    assert farmed.bounds == inline.bounds
    stats = client.run(shardcache.stats)
    assert all(s["entries"] == 0 for s in stats.values())  # each store's shards are dropped at the end
    # every product went through the cache; a worker reads a shard at most once (normally each worker
    # reads only the 2 shards whose tasks keep going to it; work stealing may move a task or two)
    lookups = 4 + 4 * (farmed.bounds.steps + settings["moments"] // 2)
    assert sum(s["hits"] + s["misses"] for s in stats.values()) == lookups
    assert all(s["misses"] <= 4 for s in stats.values()) and sum(s["misses"] for s in stats.values()) >= 4


def test_cli_density_writes_its_folder_and_refuses_bad_input(crystal, tmp_path, capsys):
    out = tmp_path / "dos"
    args = ["density", str(crystal[0]), "--out", str(out), "--moments", "64", "--probes", "4", "--inline"]
    assert main(args) == 0
    assert sorted(p.name for p in out.iterdir()) == sorted(
        ["density.csv", "density.png", "density.svg", "density.md", "density.json"])
    rows = (out / "density.csv").read_text().splitlines()
    assert rows[0] == "frequency,density,density_stderr,modes_below,modes_below_stderr" and len(rows) == 1001
    last = [float(v) for v in rows[-1].split(",")]
    assert last[3] == pytest.approx(768, abs=1)  # all 3N modes lie below the upper bound
    summary = (out / "density.md").read_text()
    assert "Assumptions" in summary and "64 Chebyshev moments" in summary
    assert json.loads((out / "density.json").read_text())["probes"] == 4
    capsys.readouterr()
    missing = ["density", str(tmp_path / "none.zarr"), "--out", str(tmp_path / "x")]
    for bad in (args, args[:-2] + ["1", "--inline"], missing):  # exists; 1 probe; no such store
        assert main(bad) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("eigenfarm: error: ")
    (tmp_path / "mine").mkdir()
    assert main(args[:3] + [str(tmp_path / "mine"), "--overwrite", "--inline"]) == 2  # not ours: kept
    assert main(args + ["--overwrite"]) == 0 and not list(tmp_path.glob(".dos*"))

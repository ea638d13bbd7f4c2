"""Bands placed from the Hessian store (plane-wave spectral measure by KPM) against exact references."""

import numpy as np
import pytest
from lattices import fcc_crystal

from eigenfarm.analysis.phonons import weighted_quantiles
from eigenfarm.analysis.planewaves import Projector, allowed_shells
from eigenfarm.analysis.wavebands import band_from_store, wave_block
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.solve.dynamical import dynamical_matrix
from eigenfarm.store import build_store, open_store


def test_wave_block_is_orthonormal_and_spans_the_shell():
    # 2m transverse and m longitudinal real waves per shell, orthonormal (exact on a lattice whose k are
    # allowed: the sums of cos·sin products over the lattice vanish).
    config, _ = fcc_crystal(3)
    shells = allowed_shells(config.box.cell, 2)
    for shell, m in ((0, 6), (1, 12)):
        T = wave_block(shells, shell, "T", config.positions, config.masses)
        L = wave_block(shells, shell, "L", config.positions, config.masses)
        assert T.shape[1] == 2 * m and L.shape[1] == m
        both = np.hstack([T, L])
        np.testing.assert_allclose(both.T @ both, np.eye(3 * m), atol=1e-12)


def test_fcc_first_bands_from_the_store(tmp_path):
    # FCC spring crystal: the first-shell waves are eigenmodes, so the band is a single level at the
    # frequency of the analytic dispersion (Ashcroft & Mermin 1976, eq. 22.58), here read from the
    # full-spectrum catalogue's weights (dense LAPACK) — the KPM placement must agree within its kernel width.
    config, potential = fcc_crystal(4)
    build_store(config, potential, tmp_path / "H.zarr")
    store = open_store(tmp_path / "H.zarr")
    shells = allowed_shells(config.box.cell, 1)
    L = config.box.cell[0, 0]
    q = 2 * np.pi / L
    d = np.array([[1, 1, 0], [1, -1, 0], [1, 0, 1], [1, 0, -1]]) / 2.0  # neighbours with q·d ≠ 0 (×2 for ±)
    unit = d / np.linalg.norm(d, axis=1)[:, None]
    exact = {"T": np.sqrt(2 * np.sum((1 - np.cos(q * d[:, 0])) * unit[:, 1] ** 2)),
             "L": np.sqrt(2 * np.sum((1 - np.cos(q * d[:, 0])) * unit[:, 0] ** 2))}
    for pol in "TL":
        band, resolution = band_from_store(store, shells, 0, pol, moments=512)
        assert resolution < 0.1 * exact[pol]
        assert band.frequency == pytest.approx(exact[pol], abs=resolution)


def test_glass_band_from_store_matches_exact_modes(tmp_path):
    # Reference: the first bands from the exact eigenvectors' plane-wave weights (dense LAPACK,
    # numpy.linalg.eigh on the same D); the store placement agrees within its kernel width (plus the
    # grid of one level spacing a discrete spectrum's quantile can jump by).
    config = make_sample(Recipe(120), seed=2, sample=0)
    build_store(config, demo_potential(), tmp_path / "H.zarr")
    store = open_store(tmp_path / "H.zarr")
    w, U = np.linalg.eigh(dynamical_matrix(demo_potential().hessian(config), config.masses).toarray())
    shells = allowed_shells(config.box.cell, 1)
    T, L = Projector(config.positions, config.masses, shells).weights(U.T)
    f = config.units.frequency(w)
    for pol, weights in (("T", T[:, 0]), ("L", L[:, 0])):
        expected = len(shells.k) * (2 if pol == "T" else 1)
        median = weighted_quantiles(f, weights, [0.5], expected)[0]
        band, resolution = band_from_store(store, shells, 0, pol, moments=1024)
        gap = np.max(np.diff(np.sort(f))[np.abs(np.sort(f)[1:] - median) < 1.0])
        assert band.frequency == pytest.approx(median, abs=2 * resolution + gap)

"""Plane-wave shells and phonon bands against integer-vector counts and the FCC spring crystal's dynamics."""

import numpy as np
import pytest
from lattices import fcc_neighbours

from eigenfarm.analysis.phonons import BEYOND, LOCAL, MIXED, PHONON, ClassRule, classify, identify_bands, \
    plane_wave_weight, shells_reach, sound_speeds
from eigenfarm.analysis.planewaves import allowed_shells
from eigenfarm.analysis.scan import scan_catalogue


def test_cube_shell_multiplicities():
    # Integer vectors n with |n|² = 1 … 6: 6, 12, 8, 6, 24, 24 (counting; |n|² = 7 has none, so the
    # seventh shell is |n|² = 8 with 12) — common practice, checked by brute force below.
    shells = allowed_shells(np.eye(3) * 7.5, 7)
    assert shells.multiplicity.tolist() == [6, 12, 8, 6, 24, 24, 12]
    assert shells.label[:3] == ("|n|²=1", "|n|²=2", "|n|²=3") and shells.label[6] == "|n|²=8"
    n = np.array([(x, y, z) for x in range(-3, 4) for y in range(-3, 4) for z in range(-3, 4)])
    brute = np.bincount((n**2).sum(1))[1:9]
    assert brute[[0, 1, 2, 3, 4, 5, 7]].tolist() == shells.multiplicity.tolist()
    np.testing.assert_allclose(shells.magnitude, 2 * np.pi / 7.5 * np.sqrt([1, 2, 3, 4, 5, 6, 8]))


def test_non_cubic_cell_shells_group_equal_lengths():
    # Orthorhombic 10 × 10 × 20: |k| = 2π·(1/20), then 2π·(1/10) shared by (±1,0,0), (0,±1,0), (0,0,±2).
    shells = allowed_shells(np.diag([10.0, 10.0, 20.0]), 2)
    assert shells.multiplicity.tolist() == [2, 6]
    np.testing.assert_allclose(shells.magnitude, 2 * np.pi * np.array([1 / 20, 1 / 10]))


def fcc_frequency(q: np.ndarray, polarisation: np.ndarray) -> float:
    """ω of the nearest-neighbour FCC spring crystal (k = m = a = 1) for wave vector q and a pure
    polarisation: ω² = Σ_d (1 − cos q·d)(û_d·ε)² (Ashcroft & Mermin, Solid State Physics, 1976, eq. 22.58)."""
    d = fcc_neighbours()
    unit = d / np.linalg.norm(d, axis=1)[:, None]
    return float(np.sqrt(np.sum((1 - np.cos(d @ q)) * (unit @ polarisation) ** 2)))


def test_fcc_bands_hold_their_plane_wave_counts(fcc_modes):
    # Every mode of a one-atom-basis crystal is a plane wave, so shell s holds exactly 2m_s transverse and
    # m_s longitudinal modes (the counts above); all 3N − 3 modes are in the catalogue.
    path, w, U, config = fcc_modes
    table = scan_catalogue(path, shells=6, wave_share=1.0)
    bands = identify_bands([table])
    mult = [6, 12, 8, 6, 24, 24]
    for band in bands:
        expected = (2 if band.polarisation == "T" else 1) * mult[band.shell]
        assert band.expected == expected and band.modes == pytest.approx(expected, abs=1e-9), band
    # First shell, q = 2π/L along ⟨100⟩: T and L frequencies from the crystal's dynamical matrix.
    L = config.box.cell[0, 0]
    q = np.array([2 * np.pi / L, 0.0, 0.0])
    t1, l1 = bands[0], bands[1]
    assert t1.frequency == pytest.approx(fcc_frequency(q, np.array([0.0, 1.0, 0.0])), rel=1e-10)
    assert l1.frequency == pytest.approx(fcc_frequency(q, np.array([1.0, 0.0, 0.0])), rel=1e-10)
    assert t1.width < 1e-8 and l1.width < 1e-8
    speeds = sound_speeds(bands, table)
    assert speeds.transverse == pytest.approx(t1.frequency / (2 * np.pi / L), rel=1e-12)
    # Debye: ω_D³ = 18π² n / (1/c_L³ + 2/c_T³) (Kittel, ISSP 8th ed., ch. 5 — from memory)
    n = config.n_atoms / L**3
    omega_d = (18 * np.pi**2 * n / (1 / speeds.longitudinal**3 + 2 / speeds.transverse**3)) ** (1 / 3)
    assert speeds.debye_frequency == pytest.approx(omega_d, rel=1e-12)
    f = np.linspace(0.1, 1.0, 5)
    np.testing.assert_allclose(speeds.debye_density(f), 3 * f**2 / omega_d**3)


def test_fcc_classes(fcc_modes):
    # Plane waves of the projected shells are phonons; nothing in a crystal is quasi-localised (P ≥ 1/2).
    path, *_ = fcc_modes
    table = scan_catalogue(path, shells=6, wave_share=1.0)
    bands = identify_bands([table])
    classes = classify(table, ClassRule(), shells_reach(bands))
    below = table.frequency < bands[0].frequency + 1e-9
    # the lowest level is 24-fold: 12 T⟨100⟩ waves and 12 of the ⟨110⟩ shell share its frequency
    assert np.all(classes[below] == PHONON) and below.sum() == 24
    # Degenerate levels mix projected and unprojected shells (eigh returns any basis of a level), so only
    # the summed weight is exact: 3 Σ m_s = 240 modes' worth, all of it on modes classed phonon or mixed.
    weight = plane_wave_weight(table)
    assert weight.sum() == pytest.approx(3 * sum([6, 12, 8, 6, 24, 24]), abs=1e-8)
    assert np.all(classes[weight > 1 - 1e-9] == PHONON) and np.count_nonzero(weight > 1 - 1e-9) >= 180
    assert not np.any(classes == LOCAL)
    assert set(classes) <= {PHONON, MIXED, BEYOND}
    above = table.frequency > shells_reach(bands)
    assert np.all((classes[above] == BEYOND) | (classes[above] == PHONON))

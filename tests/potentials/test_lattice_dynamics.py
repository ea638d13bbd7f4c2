"""Hessians of nearest-neighbour spring lattices against their analytic phonon spectra.

For springs of stiffness k at rest length (φ = k/2 (r − r0)², r0 the bond length) the force on every
atom is zero and each bond δ contributes k δ̂δ̂ᵀ; the spectrum of M^-½ H M^-½ of a periodic box is then
the set of eigenvalues ω²(q) of the dynamical matrix

    D(q) = (k/m) Σ_δ (1 − cos q·δ) δ̂δ̂ᵀ      (Ashcroft & Mermin, Solid State Physics, 1976, ch. 22,
                                               eq. 22.58 with nearest-neighbour pair springs)

over the wavevectors the box allows (Born–von Kármán boundary conditions, ibid. ch. 22 and eq. 8.27).
The allowed set is derived here from the box itself (Bloch's theorem on the supercell): a supercell
whose lattice vectors T = M·P are an integer matrix M times the primitive vectors P admits q with
q·T_i ∈ 2πℤ; two such q are the same mode when they differ by a reciprocal vector of P.  In the basis
of P's reciprocal vectors (q·P_j = 2π f_j) that is f = M⁻¹ m for integer m, taken modulo 1: |det M|
classes, one per atom.  The dense eigenvalues come from numpy.linalg.eigh (reference LAPACK).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from eigenfarm.potentials.neighbours import neighbour_pairs
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration
from lattices import (bravais_eigenvalues, fcc_allowed_q, fcc_crystal, fcc_neighbours, ring, ring_frequencies,
                      simple_cubic, springs)

#: spring stiffness and mass away from 1, so a missing k/m would show
K, MASS = 2.5, 1.7
#: FCC primitive vectors (rows) for a cube edge a = 1 (Ashcroft & Mermin, 1976, ch. 4, eq. 4.5)
FCC_PRIMITIVE = 0.5 * np.array([[0.0, 1.0, 1.0], [1.0, 0.0, 1.0], [1.0, 1.0, 0.0]])
#: the cube edges in the primitive basis: e_x = −a1 + a2 + a3 etc., so the conventional cube is M = CUBE
CUBE = np.array([[-1, 1, 1], [1, -1, 1], [1, 1, -1]])


def dense_omega2(config: Configuration, potential) -> np.ndarray:
    """Sorted eigenvalues of M^-½ H M^-½ (dense LAPACK, numpy.linalg.eigh)."""
    h = potential.hessian(config).toarray()
    w = 1.0 / np.sqrt(np.repeat(config.masses, 3))
    d = h * w[:, None] * w[None, :]
    assert np.abs(d - d.T).max() <= 1e-14 * np.abs(d).max()
    return np.linalg.eigvalsh(0.5 * (d + d.T))


def supercell_wavevectors(M: np.ndarray, primitive: np.ndarray) -> np.ndarray:
    """The |det M| distinct allowed q (rows, Cartesian) of the supercell T = M·primitive (module doc)."""
    M = np.asarray(M, dtype=float)
    corners = np.array(list(itertools.product((0, 1), repeat=3))) @ M.T  # M·f at the unit cube's corners
    lo, hi = np.floor(corners.min(0)).astype(int), np.ceil(corners.max(0)).astype(int)
    m = np.array(list(itertools.product(*(range(a, b + 1) for a, b in zip(lo, hi)))), dtype=float)
    f = m @ np.linalg.inv(M).T
    keep = np.all((f > -1e-9) & (f < 1 - 1e-9), axis=1)
    f = f[keep]
    assert len(f) == round(abs(np.linalg.det(M)))
    assert len(np.unique(np.round(f * 1e6), axis=0)) == len(f)
    return 2 * np.pi * f @ np.linalg.inv(primitive).T


def lattice_sites(M: np.ndarray, primitive: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(positions (N, 3), supercell vectors T (3, 3) rows) of the Bravais lattice sites in T = M·primitive."""
    M = np.asarray(M, dtype=float)
    T = M @ primitive
    corners = np.array(list(itertools.product((0, 1), repeat=3))) @ M
    lo, hi = np.floor(corners.min(0)).astype(int), np.ceil(corners.max(0)).astype(int)
    n = np.array(list(itertools.product(*(range(a, b + 1) for a, b in zip(lo, hi)))), dtype=float)
    s = n @ np.linalg.inv(M)  # fractional coordinates in T
    keep = np.all((s > -1e-9) & (s < 1 - 1e-9), axis=1)
    assert keep.sum() == round(abs(np.linalg.det(M)))
    return n[keep] @ primitive, T


def fcc_box(M, a=1.0, k=K, mass=MASS):
    """FCC with nearest-neighbour springs in the supercell M·(primitive vectors), masses ``mass``."""
    positions, T = lattice_sites(M, FCC_PRIMITIVE)  # half-integers: exact
    config = Configuration(positions * a, ["X"] * len(positions), Box(T * a), "reduced",
                           masses=np.full(len(positions), mass))
    # cut between the first shell (a/√2) and the second (a)
    return config, springs(a / np.sqrt(2), 0.85 * a, k)


@pytest.mark.parametrize("cells", [1, 2, 3])
def test_fcc_cubic_box_matches_dispersion(cells):
    """FCC, cells³ conventional cubes (4·cells³ atoms): the spectrum is ω²(q) over the allowed q.
    One cube (4 atoms) bonds each atom to four images of each other atom."""
    a = 1.3
    config, potential = fcc_box(cells * CUBE, a)
    assert config.n_atoms == 4 * cells**3
    assert config.box.is_orthorhombic and np.allclose(np.diag(config.box.cell), cells * a)
    qs = supercell_wavevectors(cells * CUBE, FCC_PRIMITIVE * a)
    expected = bravais_eigenvalues(qs, fcc_neighbours(a), K, MASS)
    got = dense_omega2(config, potential)
    # eigenvalues are O(16 k/m); LAPACK error is O(1e-15) of that
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-11 * K / MASS)
    # each atom has exactly its 12 nearest neighbours (no second shell)
    assert np.all(neighbour_pairs(config.positions, config.box, potential.cutoff).counts() == 12)


def test_fcc_spectrum_has_three_zero_modes_and_the_zone_boundary_top():
    """Three zero modes (uniform translations, q = 0), nothing negative, and the X-point modes present."""
    cells, a = 2, 1.0
    config, potential = fcc_box(cells * CUBE, a)
    got = dense_omega2(config, potential)
    gap = 1e-9 * K / MASS
    assert np.sum(np.abs(got) < gap) == 3
    assert got.min() > -gap
    # X point q = (2π/a)(1, 0, 0) is allowed in a box of 2 cubes; its ω² from D(q) (A&M eq. 22.58)
    x_point = bravais_eigenvalues(np.array([[2 * np.pi / a, 0, 0]]), fcc_neighbours(a), K, MASS)
    # worked by hand from D(q): L branch 8k/m (four bonds with q·δ = π, δ̂_x² = 1/2, weight 2), T 4k/m twice
    np.testing.assert_allclose(x_point, np.array([4, 4, 8]) * K / MASS, rtol=1e-14)
    for value in x_point:
        assert np.min(np.abs(got - value)) < 1e-10


def test_fcc_primitive_triclinic_box_matches_dispersion():
    """FCC in triclinic supercells built from the primitive vectors (60° cells): ω²(q) over the box's q."""
    # 2·I: each atom's 12 neighbours are images of 7 atoms (several through more than one shift)
    for M in (2 * np.eye(3), 3 * np.eye(3), np.array([[2, 0, 0], [1, 3, 0], [0, 1, 4]])):
        config, potential = fcc_box(M, 1.0)
        assert not config.box.is_orthorhombic
        qs = supercell_wavevectors(M, FCC_PRIMITIVE)
        expected = bravais_eigenvalues(qs, fcc_neighbours(1.0), K, MASS)
        np.testing.assert_allclose(dense_omega2(config, potential), expected, rtol=0, atol=1e-11 * K / MASS)


def test_fcc_same_crystal_in_skewed_cell_gives_same_spectrum():
    """The crystal of 2³ cubes described with a triclinic cell spanning the same periodic lattice
    (rows 2a(1,0,0), 2a(1,1,0), 2a(1,1,1): a unimodular change of basis), atoms unwrapped and shifted
    by lattice vectors, has exactly the cubic description's spectrum."""
    cells, a = 2, 1.0
    cubic, potential = fcc_box(cells * CUBE, a)
    skew = np.array([[1, 0, 0], [1, 1, 0], [1, 1, 1]]) @ cubic.box.cell
    rng = np.random.default_rng(7)
    moved = cubic.positions + rng.integers(-2, 3, size=(cubic.n_atoms, 3)) @ cubic.box.cell
    tilted = Configuration(moved, cubic.species, Box(skew), "reduced", masses=cubic.masses)
    assert not tilted.box.is_orthorhombic
    np.testing.assert_allclose(dense_omega2(tilted, potential), dense_omega2(cubic, potential),
                               rtol=0, atol=1e-12 * K / MASS)


def test_fcc_helper_wavevectors_agree_with_bloch_construction():
    """tests/lattices.py's fcc_allowed_q (used by other suites) gives the same ω² multiset as the general
    construction here, and its crystal the same spectrum."""
    cells = 3
    ours = bravais_eigenvalues(supercell_wavevectors(cells * CUBE, FCC_PRIMITIVE), fcc_neighbours(), K, MASS)
    theirs = bravais_eigenvalues(fcc_allowed_q(cells), fcc_neighbours(), K, MASS)
    np.testing.assert_allclose(theirs, ours, rtol=0, atol=1e-12)
    config, potential = fcc_crystal(cells, k=K, mass=MASS)
    np.testing.assert_allclose(dense_omega2(config, potential), ours, rtol=0, atol=1e-11 * K / MASS)


@pytest.mark.parametrize("cells", [3, 4])
def test_simple_cubic_spectrum_and_floppy_planes(cells):
    """Simple cubic, nearest-neighbour springs: D(q) is diagonal with ω²_α = 2(k/m)(1 − cos q_α a)
    (from D(q) above with δ = ±a e_α; common practice), so every branch vanishes on a whole plane
    q_α = 0 of the allowed q: 3·cells² zero modes, not 3."""
    a = 0.9
    config, potential = simple_cubic(cells, a, K)
    config = Configuration(config.positions, config.species, config.box, "reduced",
                           masses=np.full(config.n_atoms, MASS))
    n = np.array(list(itertools.product(range(cells), repeat=3)), dtype=float)
    qa = 2 * np.pi * n / cells  # q_α a
    expected = np.sort((2 * K / MASS * (1 - np.cos(qa))).ravel())
    got = dense_omega2(config, potential)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-11 * K / MASS)
    assert np.sum(np.abs(got) < 1e-9) == 3 * cells**2
    # the same from the general D(q) (six neighbours ±a e_α)
    six = np.vstack([np.eye(3), -np.eye(3)]) * a
    np.testing.assert_allclose(bravais_eigenvalues(qa / a, six, K, MASS), expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("n", [7, 12])
def test_ring_longitudinal_branch(n):
    """A periodic line of n atoms in 3-D: the longitudinal branch is ω_j = 2√(k/m)|sin(πj/n)| (Kittel,
    Introduction to Solid State Physics, 8th ed., 2005, ch. 4, eq. 4.9); springs at rest length have no
    transverse stiffness (φ'(r0) = 0), so the other 2n modes are zero."""
    config, potential = ring(n, a=1.1, k=K, mass=MASS)
    got = dense_omega2(config, potential)
    transverse = np.zeros(2 * n)
    longitudinal = ring_frequencies(n, K, MASS) ** 2
    np.testing.assert_allclose(got, np.sort(np.r_[transverse, longitudinal]), rtol=0, atol=1e-12 * K / MASS)
    # the longitudinal vectors move atoms along x only
    h = potential.hessian(config).toarray()
    # (φ'(r)/r for r − r0 at rounding level is ~1e-16, not exactly 0)
    assert np.abs(h.reshape(n, 3, n, 3)[:, 1:, :, :]).max() < 1e-13 * K
    # direct closed form, independent of the helper: 4(k/m) sin²(πj/n)
    j = np.arange(n)
    np.testing.assert_allclose(np.sort(longitudinal), np.sort(4 * K / MASS * np.sin(np.pi * j / n) ** 2),
                               rtol=1e-14, atol=1e-15)

"""Analytic forces and Hessians of every potential form against finite differences of their own energy
and forces (common practice), plus the translational sum rule, symmetry, and shard-wise row assembly.

Configurations are jittered lattices (no overlaps, every site inside the cell) in orthorhombic and
triclinic cells, with one and two species and distinct per-pair and per-triplet parameters.
"""

import numpy as np
import pytest

from eigenfarm.potentials.base import Potential, sum_blocks
from eigenfarm.potentials.library import stillinger_weber_silicon
from eigenfarm.potentials.pair import PairTerm
from eigenfarm.potentials.threebody import TripletTerm, triplet_chunks
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration

TRICLINIC = np.array([[1.0, 0.0, 0.0], [0.23, 0.97, 0.0], [-0.17, 0.21, 0.94]])


def jittered_grid(cell, m, labels, jitter, seed, units="reduced"):
    """m³ sites at fractional ((n + ½)/m) in ``cell`` (rows), each moved by up to ``jitter``/m
    (fractional, < ½ so every atom stays inside the cell); species alternate by site parity."""
    rng = np.random.default_rng(seed)
    n = np.stack(np.meshgrid(*[np.arange(m)] * 3, indexing="ij"), -1).reshape(-1, 3)
    frac = (n + 0.5 + rng.uniform(-jitter, jitter, n.shape)) / m
    species = np.array(list(labels))[n.sum(1) % len(labels)]
    return Configuration(frac @ np.asarray(cell), species, Box(cell), units=units)


def jittered_diamond(a, cells, jitter, seed):
    """Diamond silicon, ``cells``³ conventional cells of edge ``a`` (Å), moved by ≤ ``jitter`` Å."""
    rng = np.random.default_rng(seed)
    fcc = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    basis = np.vstack([fcc, fcc + 0.25]) + 0.125
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    frac = ((grid + basis).reshape(-1, 3)) / cells
    pos = frac * a * cells + rng.uniform(-jitter, jitter, frac.shape)
    return Configuration(pos, ["Si"] * len(pos), Box.cubic(a * cells), units="metal")


def pair_potential(form, species, table, smooth=2):
    return Potential(species, [PairTerm(form, species, table, smooth)], name=form)


LJ_MIX = {("A", "A"): dict(eps=1.0, sigma=1.0, rc=2.5), ("A", "B"): dict(eps=1.5, sigma=0.8, rc=2.0),
          ("B", "B"): dict(eps=0.5, sigma=0.88, rc=2.2)}
HARMONIC_MIX = {("A", "A"): dict(eps=1.0, sigma=1.25), ("A", "B"): dict(eps=2.0, sigma=1.15),
                ("B", "B"): dict(eps=0.7, sigma=1.3)}
#: screened-Coulomb/steric numbers of the right magnitude for an oxide (eV, Å), not a published set
SCREENED_MIX = {
    ("Si", "Si"): dict(H=0.8, eta=11, Z=23.0, lam=4.4, D=0.0, xi=2.5, rc=5.0),
    ("Si", "O"): dict(H=160.0, eta=9, Z=-11.5, lam=4.4, D=3.0, xi=2.5, rc=5.0),
    ("O", "O"): dict(H=740.0, eta=7, Z=5.8, lam=4.4, D=6.0, xi=2.5, rc=5.0),
}
#: bond-bending triplets, all six types distinct (arms of O-Si-Si differ), one switched off
BENDING_MIX = {
    ("O", "Si", "O"): dict(B=4.9, c0=-1 / 3, C=5.0, xi=1.0, a=2.6),
    ("Si", "O", "Si"): dict(B=19.0, c0=-0.777, C=8.0, xi=1.2, a=2.5),
    ("O", "Si", "Si"): dict(B=2.0, c0=-0.5, C=3.0, xi_ij=0.9, a_ij=2.4, xi_ik=1.4, a_ik=2.9),
    ("Si", "Si", "Si"): dict(B=1.0, c0=-1 / 3, C=0.0, xi=1.1, a=2.8),
    ("Si", "O", "O"): dict(B=3.0, c0=0.1, C=1.0, xi_ij=1.3, a_ij=2.7, xi_ik=0.8, a_ik=2.3),
    ("O", "O", "O"): None,
}
#: a two-species Stillinger–Weber-type mixture (C = 0), distinct per-triplet parameters (metal units)
SW_MIX_PAIRS = {("Si", "Si"): dict(eps=2.17, sigma=2.10, A=7.05, B=0.602, p=4, q=0, a=1.8),
                ("Si", "Ge"): dict(eps=2.0, sigma=2.15, A=7.05, B=0.602, p=4, q=0, a=1.8),
                ("Ge", "Ge"): dict(eps=1.93, sigma=2.18, A=7.05, B=0.602, p=4, q=0, a=1.8)}
SW_MIX_TRIPLETS = {
    ("Si", "Si", "Si"): dict(B=45.5, c0=-1 / 3, xi=2.52, a=3.78),
    ("Ge", "Ge", "Ge"): dict(B=60.0, c0=-1 / 3, xi=2.6, a=3.92),
    ("Si", "Ge", "Si"): dict(B=50.0, c0=-0.3, xi=2.55, a=3.85),
    ("Ge", "Si", "Ge"): dict(B=52.0, c0=-0.35, xi=2.58, a=3.88),
    ("Si", "Si", "Ge"): dict(B=48.0, c0=-1 / 3, xi_ij=2.52, a_ij=3.78, xi_ik=2.55, a_ik=3.85),
    ("Ge", "Ge", "Si"): dict(B=55.0, c0=-0.32, xi_ij=2.6, a_ij=3.92, xi_ik=2.55, a_ik=3.85),
}


def case_lj():
    return pair_potential("lj", ["A", "B"], LJ_MIX), jittered_grid(4.4 * TRICLINIC, 4, "AB", 0.12, 1)


def case_lj_smooth1():
    pot = pair_potential("lj", ["*"], {("*", "*"): dict(eps=1.0, sigma=1.0, rc=2.2)}, smooth=1)
    return pot, jittered_grid(np.eye(3) * 4.4, 4, "A", 0.12, 2)


def case_ipl():
    pot = pair_potential("ipl", ["*"], {("*", "*"): dict(eps=1.0, sigma=1.0, n=12, rc=1.9)})
    return pot, jittered_grid(4.2 * TRICLINIC, 4, "A", 0.15, 3)


def case_harmonic():
    pot = pair_potential("harmonic", ["A", "B"], HARMONIC_MIX)
    return pot, jittered_grid(4.0 * TRICLINIC, 4, "AB", 0.2, 4)


def case_sw2():
    pot = pair_potential("sw2", ["Si"], {("Si", "Si"): SW_MIX_PAIRS[("Si", "Si")]})
    return pot, jittered_diamond(5.431, 1, 0.15, 5)


def case_screened():
    pot = pair_potential("screened", ["Si", "O"], SCREENED_MIX)
    return pot, jittered_grid(6.4 * TRICLINIC, 4, ["Si", "O"], 0.15, 6, units="metal")


def case_spring():
    pot = pair_potential("spring", ["A", "B"], {("A", "A"): dict(k=1.0, r0=1.05, rc=1.25),
                                                ("A", "B"): dict(k=2.5, r0=0.95, rc=1.25),
                                                ("B", "B"): dict(k=0.5, r0=1.0, rc=1.25)})
    return pot, jittered_grid(np.eye(3) * 4.0, 4, "AB", 0.2, 7)


def case_sw_silicon():
    return stillinger_weber_silicon(), jittered_diamond(5.431, 1, 0.2, 8)


def case_sw_silicon_triclinic():
    cfg = jittered_grid(10.5 * TRICLINIC, 4, ["Si"], 0.15, 9, units="metal")
    return stillinger_weber_silicon(), cfg


def case_sw_mixture():
    species = ["Si", "Ge"]
    pot = Potential(species, [PairTerm("sw2", species, SW_MIX_PAIRS),
                              TripletTerm(species, SW_MIX_TRIPLETS)], name="sw-mix")
    return pot, jittered_grid(10.5 * TRICLINIC, 4, species, 0.15, 10, units="metal")


def case_bond_bending():
    species = ["Si", "O"]
    pot = Potential(species, [PairTerm("screened", species, SCREENED_MIX),
                              TripletTerm(species, BENDING_MIX)], name="bending")
    return pot, jittered_grid(6.4 * TRICLINIC, 4, species, 0.15, 11, units="metal")


def case_bond_bending_alone():
    pot = Potential(["*"], [TripletTerm(["*"], {("*", "*", "*"): dict(B=3.0, c0=-0.2, C=4.0, xi=0.7,
                                                                      a=1.9)})], name="bending-only")
    return pot, jittered_grid(4.6 * TRICLINIC, 4, "A", 0.25, 12)


CASES = {f.__name__[5:]: f for f in (case_lj, case_lj_smooth1, case_ipl, case_harmonic, case_sw2,
                                     case_screened, case_spring, case_sw_silicon,
                                     case_sw_silicon_triclinic, case_sw_mixture, case_bond_bending,
                                     case_bond_bending_alone)}


def fd_forces(pot, cfg, h):
    """−∂E/∂x (N, 3) by central differences with step h (length units)."""
    out = np.zeros((cfg.n_atoms, 3))
    for a in range(cfg.n_atoms):
        for x in range(3):
            pos = cfg.positions.copy()
            pos[a, x] += h
            up = pot.energy(cfg.with_positions(pos))
            pos[a, x] -= 2 * h
            out[a, x] = -(up - pot.energy(cfg.with_positions(pos))) / (2 * h)
    return out


def fd_hessian(pot, cfg, h):
    """−∂F/∂x (3N, 3N) by central differences of the analytic forces."""
    n = cfg.n_atoms
    out = np.zeros((3 * n, 3 * n))
    for a in range(n):
        for x in range(3):
            pos = cfg.positions.copy()
            pos[a, x] += h
            up = pot.energy_forces(cfg.with_positions(pos))[1]
            pos[a, x] -= 2 * h
            out[3 * a + x] = -(up - pot.energy_forces(cfg.with_positions(pos))[1]).ravel() / (2 * h)
    return out


@pytest.fixture(scope="module", params=list(CASES))
def case(request):
    pot, cfg = CASES[request.param]()
    return pot, cfg, pot.hessian(cfg).toarray()


def spacing(cfg):
    return (cfg.box.volume / cfg.n_atoms) ** (1 / 3)


def test_every_case_interacts(case):
    pot, cfg, hess = case
    counts = pot.neighbours(cfg).counts()
    assert counts.min() >= 3
    assert np.abs(hess).max() > 0


def test_forces_are_minus_gradient_of_energy(case):
    pot, cfg, _ = case
    forces = pot.energy_forces(cfg)[1]
    fd = fd_forces(pot, cfg, 1e-5 * spacing(cfg))
    assert np.abs(forces).max() > 1e-3
    assert np.abs(fd - forces).max() <= 1e-6 * np.abs(forces).max()


def test_hessian_is_derivative_of_forces(case):
    pot, cfg, hess = case
    fd = fd_hessian(pot, cfg, 1e-5 * spacing(cfg))
    assert np.abs(fd - hess).max() <= 1e-6 * np.abs(hess).max()


def test_hessian_sum_rule_and_symmetry(case):
    _, cfg, hess = case
    n = cfg.n_atoms
    scale = np.abs(hess).max()
    # symmetric up to rounding of sums taken in different orders
    assert np.abs(hess - hess.T).max() <= 1e-13 * scale
    # translation invariance: every 3-row block sums to zero over column atoms (common practice)
    assert np.abs(hess.reshape(n, 3, n, 3).sum(axis=2)).max() <= 1e-11 * scale


def test_row_subsets_match_full_hessian(case):
    pot, cfg, hess = case
    n = cfg.n_atoms
    for rows in (np.arange(0, n, 3), np.arange(n // 3, n // 2), np.array([n - 1])):
        row, col, blocks = pot.hessian_rows(cfg, rows)
        assert set(np.unique(row)) <= set(rows.tolist())
        indptr, indices, data = sum_blocks(row, col, blocks, n, n)
        part = np.zeros((n, 3, n, 3))
        for a in rows:
            for p in range(indptr[a], indptr[a + 1]):
                part[a, :, indices[p], :] = data[p]
        full = hess.reshape(n, 3, n, 3)
        assert np.abs(part[rows] - full[rows]).max() <= 1e-12 * np.abs(hess).max()


def test_triplet_enumeration_gives_every_pair_once():
    centre = np.array([0, 0, 0, 2, 5, 5, 5, 5])
    for size in (1, 3, 100):
        p, q = (np.concatenate(x) for x in zip(*triplet_chunks(centre, size)))
        got = sorted(zip(p.tolist(), q.tolist()))
        want = [(a, b) for a in range(8) for b in range(a + 1, 8) if centre[a] == centre[b]]
        assert got == want


def test_small_triplet_chunks_give_the_same_results():
    pot, cfg = case_bond_bending()
    term = pot.terms[1]
    e_big, f_big = pot.energy_forces(cfg)
    h_big = pot.hessian(cfg).toarray()
    term.chunk = 7
    e_small, f_small = pot.energy_forces(cfg)
    assert e_small == pytest.approx(e_big, rel=1e-13)
    assert np.allclose(f_small, f_big, rtol=0, atol=1e-12 * np.abs(f_big).max())
    assert np.allclose(pot.hessian(cfg).toarray(), h_big, rtol=0, atol=1e-12 * np.abs(h_big).max())


def test_radial_factor_vanishes_smoothly_at_range():
    pot = Potential(["*"], [TripletTerm(["*"], {("*", "*", "*"): dict(B=1.0, c0=0.0, xi=1.0, a=1.5)})])
    d = 1.5 - np.array([1e-300, 1e-12, 1e-4, 0.0])
    for r in d:
        pos = [[5, 5, 5], [5 + r, 5, 5], [5, 5 + 1.0, 5]]
        cfg = Configuration(pos, ["A"] * 3, Box.cubic(20.0))
        e, f = pot.energy_forces(cfg)
        h = pot.hessian(cfg).toarray()
        assert np.isfinite(e) and np.all(np.isfinite(f)) and np.all(np.isfinite(h))
        assert e >= 0


def test_moving_an_atom_by_a_lattice_vector_changes_nothing():
    pot, cfg = case_sw_mixture()
    moved = cfg.positions.copy()
    moved[3] += cfg.box.cell[0] - cfg.box.cell[2]
    e0, f0 = pot.energy_forces(cfg)
    e1, f1 = pot.energy_forces(cfg.with_positions(moved))
    assert e1 == pytest.approx(e0, rel=1e-12)
    assert np.allclose(f1, f0, rtol=0, atol=1e-10)
    h0, h1 = pot.hessian(cfg).toarray(), pot.hessian(cfg.with_positions(moved)).toarray()
    assert np.allclose(h1, h0, rtol=0, atol=1e-10 * np.abs(h0).max())

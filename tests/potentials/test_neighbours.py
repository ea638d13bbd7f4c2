"""neighbour_pairs against a brute-force search over every periodic image, and check_overlaps.

The reference enumerates all atom pairs (i, j), i = j included, and every integer lattice translation t
within a range that provably covers the cutoff, keeping d = x_j − x_i + t·cell with |d| ≤ cutoff and
(i, t) ≠ (j, 0) — the definition of the periodic neighbour list (common practice), with no cleverness
to get wrong.  Pairs are compared as sets of (i, j, t) and their separations to rounding.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.potentials.neighbours import check_overlaps, neighbour_pairs
from eigenfarm.structure.box import Box

TRICLINIC = np.array([[3.0, 0.0, 0.0], [1.4, 2.6, 0.0], [-0.9, 0.8, 2.4]])


def brute_force(positions, box: Box, cutoff: float):
    """{(i, j, t1, t2, t3): d (3,)} of every directed pair within ``cutoff`` (module doc)."""
    positions = np.asarray(positions, dtype=float)
    frac = box.fractional(positions)
    # |t_k| ≤ (cutoff/width_k) + fractional spread of the atoms along k, plus one for safety
    spread = np.ptp(frac, axis=0)
    reach = [int(np.ceil(cutoff / w + s)) + 1 if p else 0 for w, s, p in zip(box.widths, spread, box.pbc)]
    shifts = np.array(list(itertools.product(*(range(-r, r + 1) for r in reach))), dtype=float)
    out = {}
    base = positions[None, :, :] - positions[:, None, :]  # (i, j, 3) = x_j − x_i
    for t in shifts:
        d = base + t @ box.cell
        r = np.sqrt(np.einsum("ijk,ijk->ij", d, d))
        for i, j in zip(*np.nonzero(r <= cutoff)):
            if i == j and not t.any():
                continue
            out[(int(i), int(j), *map(int, t))] = d[i, j]
    return out


def as_dict(nb):
    """The neighbourhood as {(i, j, t1, t2, t3): d}; fails on a repeated (i, j, t)."""
    keys = [(int(i), int(j), *map(int, np.round(t))) for i, j, t in zip(nb.i, nb.j, nb.shift)]
    assert len(set(keys)) == len(keys), "a pair image appears twice"
    assert np.array_equal(nb.shift, np.round(nb.shift)), "shifts must be integers"
    return dict(zip(keys, nb.d))


def assert_same(nb, reference, positions, box):
    got = as_dict(nb)
    missing = sorted(set(reference) - set(got))[:5]
    extra = sorted(set(got) - set(reference))[:5]
    assert not missing and not extra, f"missing {missing}, extra {extra}"
    for key, d in reference.items():
        np.testing.assert_allclose(got[key], d, rtol=0, atol=1e-12)
    np.testing.assert_allclose(nb.r, np.linalg.norm(nb.d, axis=1), rtol=1e-15)
    # d is the separation of the given (unwrapped) positions
    np.testing.assert_allclose(nb.d, positions[nb.j] - positions[nb.i] + nb.shift @ box.cell, rtol=0, atol=1e-12)


def random_atoms(box: Box, n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.uniform(0, 1, (n, 3)) @ box.cell


@pytest.mark.parametrize("cell, cutoff, crowded", [
    (np.diag([4.0, 5.0, 6.0]), 1.7, False),   # cutoff below half the smallest width
    (np.diag([4.0, 5.0, 6.0]), 4.2, True),    # beyond the 4.0 edge: several images of a pair, self-images
    (TRICLINIC, 1.1, False),                  # widths 2.37, 2.47, 2.40
    (TRICLINIC, 2.9, True),                   # beyond every width and the shortest lattice vector 2.69
])
def test_matches_brute_force(cell, cutoff, crowded):
    box = Box(cell)
    positions = random_atoms(box, 25, seed=int(cutoff * 10))
    reference = brute_force(positions, box, cutoff)
    nb = neighbour_pairs(positions, box, cutoff)
    assert_same(nb, reference, positions, box)
    if crowded:
        # the large cutoffs really exercise repeated images of one pair and atoms seeing themselves
        pairs = [(k[0], k[1]) for k in reference]
        assert len(set(pairs)) < len(pairs)
        assert any(k[0] == k[1] for k in reference)
    assert np.all(nb.centres)
    assert np.array_equal(nb.counts(), np.bincount([k[0] for k in reference], minlength=25))


def test_single_atom_sees_only_its_own_images():
    """One atom in a small triclinic cell: its neighbours are exactly the lattice points within cutoff."""
    box = Box(TRICLINIC / 3.0)
    positions = np.array([[0.3, 0.2, 0.1]])
    cutoff = 2.5
    reference = brute_force(positions, box, cutoff)
    assert len(reference) > 26 and all(k[0] == k[1] == 0 for k in reference)
    assert_same(neighbour_pairs(positions, box, cutoff), reference, positions, box)


def test_atoms_outside_the_cell_keep_their_separations():
    """Atoms given displaced by whole lattice vectors (far outside the cell, negative fractions, one on
    the boundary from below): the set of separations vectors d is unchanged and still complete."""
    box = Box(TRICLINIC)
    inside = random_atoms(box, 20, seed=3)
    inside[0] = [-1e-17, 0.5, 0.5]  # fraction −1e-17 wraps to exactly 1.0 in floating point
    rng = np.random.default_rng(4)
    lattice = rng.integers(-3, 4, size=(20, 3))
    outside = inside + lattice @ box.cell
    cutoff = 2.2
    nb_in = neighbour_pairs(inside, box, cutoff)
    nb_out = neighbour_pairs(outside, box, cutoff)
    assert_same(nb_out, brute_force(outside, box, cutoff), outside, box)

    def separations(nb):
        key = np.column_stack([nb.i, nb.j, np.round(nb.d, 9)])
        return key[np.lexsort(key.T[::-1])]

    np.testing.assert_allclose(separations(nb_out), separations(nb_in), rtol=0, atol=1e-9)
    # the shifts change by exactly the atoms' lattice displacements
    got = as_dict(nb_out)
    for (i, j, *t), d in as_dict(nb_in).items():
        moved = tuple(np.array(t) - lattice[j] + lattice[i])
        np.testing.assert_allclose(got[(i, j, *moved)], d, rtol=0, atol=1e-12)


@pytest.mark.parametrize("pbc", [(True, False, True), (False, False, False), (False, True, False)])
def test_non_periodic_directions(pbc):
    """No images along a non-periodic direction, even for atoms lying beyond the cell there."""
    box = Box(TRICLINIC, pbc)
    positions = random_atoms(box, 25, seed=11)
    rng = np.random.default_rng(12)
    positions += rng.uniform(-2, 2, (25, 1)) * box.cell[1] * (not pbc[1])  # spill out along b if open
    cutoff = 2.6
    reference = brute_force(positions, box, cutoff)
    nb = neighbour_pairs(positions, box, cutoff)
    assert_same(nb, reference, positions, box)
    for k, periodic in enumerate(pbc):
        if not periodic:
            assert np.all(nb.shift[:, k] == 0)


def test_centre_subset():
    """Centres given as indices or as a mask: the pairs of those atoms only, each complete."""
    box = Box(TRICLINIC)
    positions = random_atoms(box, 30, seed=5)
    cutoff = 2.4
    reference = brute_force(positions, box, cutoff)
    chosen = np.array([2, 7, 19])
    wanted = {k: d for k, d in reference.items() if k[0] in set(chosen.tolist())}
    mask = np.zeros(30, bool)
    mask[chosen] = True
    for centres in (chosen, mask, chosen[::-1]):
        nb = neighbour_pairs(positions, box, cutoff, centres)
        assert_same(nb, wanted, positions, box)
        assert np.array_equal(nb.centres, mask)


def test_refreshed_follows_moved_atoms():
    """Separations recomputed for moved atoms use the same pairs and shifts."""
    box = Box(TRICLINIC)
    positions = random_atoms(box, 15, seed=8)
    nb = neighbour_pairs(positions, box, 2.0)
    moved = positions + np.random.default_rng(9).normal(scale=0.05, size=positions.shape)
    fresh = nb.refreshed(moved, box)
    np.testing.assert_allclose(fresh.d, moved[nb.j] - moved[nb.i] + nb.shift @ box.cell, rtol=0, atol=1e-12)
    assert np.array_equal(fresh.i, nb.i) and np.array_equal(fresh.j, nb.j)


def test_check_overlaps_names_the_closest_pair():
    box = Box.cubic(5.0)
    positions = random_atoms(box, 12, seed=1)
    positions[:, 0] = np.linspace(0.2, 4.6, 12)  # spread so no accidental overlap
    check_overlaps(positions, box, 0.1, "sample.xyz")  # nothing closer than 0.1: no error
    # atom 3 and atom 9 nearly coincide across the periodic boundary; 5 and 6 are close but less so
    positions[9] = positions[3] + np.array([-0.02, 0.0, 0.0]) + np.array([5.0, 0.0, 0.0])
    positions[6] = positions[5] + np.array([0.0, 0.05, 0.0])
    with pytest.raises(InputError) as err:
        check_overlaps(positions, box, 0.1, "sample.xyz")
    message = str(err.value)
    assert message.startswith("sample.xyz: ")
    assert "atoms 3 and 9" in message or "atoms 9 and 3" in message
    assert "0.02" in message


def test_check_overlaps_coincident_atoms():
    """Two atoms at the very same place (r = 0) are named too."""
    box = Box(TRICLINIC)
    positions = random_atoms(box, 6, seed=2)
    positions[4] = positions[1]
    with pytest.raises(InputError, match=r"atoms (1 and 4|4 and 1) overlap"):
        check_overlaps(positions, box, 0.05)

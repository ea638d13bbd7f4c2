"""Morton ordering: bit interleaving against its definition, and the octant property of Z-order."""

import numpy as np

from eigenfarm.store.ordering import BITS, morton_codes, morton_order, spread_bits
from eigenfarm.structure.box import Box


def _naive_morton(x: int, y: int, z: int) -> int:
    """Bit k of x, y, z goes to bit 3k, 3k+1, 3k+2 (definition of the Z-order curve; common practice)."""
    code = 0
    for k in range(BITS):
        code |= ((x >> k) & 1) << (3 * k) | ((y >> k) & 1) << (3 * k + 1) | ((z >> k) & 1) << (3 * k + 2)
    return code


def test_spread_bits_matches_definition():
    rng = np.random.default_rng(3)
    values = rng.integers(0, 1 << BITS, 200, dtype=np.uint64)
    assert spread_bits(np.uint64(0b111)) == 0b1001001
    for v in values:
        assert int(spread_bits(v)) == _naive_morton(int(v), 0, 0)


def test_codes_interleave_quantised_fractional_coordinates():
    box = Box.cubic(2.0)
    rng = np.random.default_rng(4)
    q = rng.integers(0, 1 << BITS, (50, 3))
    positions = (q + 0.5) / (1 << BITS) * 2.0
    codes = morton_codes(positions, box)
    assert [int(c) for c in codes] == [_naive_morton(*map(int, row)) for row in q]


def test_first_eighth_of_the_curve_is_one_octant():
    # Z-order visits the octants one after another (definition of the curve)
    grid = np.stack(np.meshgrid(*[np.arange(8)] * 3, indexing="ij"), -1).reshape(-1, 3) + 0.5
    order = morton_order(grid[::-1].copy(), Box.cubic(8.0))
    first = grid[::-1][order[:64]]
    assert np.all(first < 4.0)
    assert sorted(order.tolist()) == list(range(512))


def test_wraps_periodic_coordinates():
    box = Box.cubic(1.0)
    inside = np.array([[0.25, 0.5, 0.75]])
    assert morton_codes(inside + [1.0, -2.0, 3.0], box)[0] == morton_codes(inside, box)[0]

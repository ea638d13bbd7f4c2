"""Spatial ordering of atoms along a Morton (Z-order) curve.

Atoms are sorted by the Morton code of their fractional coordinates: each coordinate is quantised to
``BITS`` bits and the three bit strings are interleaved (x in bit 0, y in bit 1, z in bit 2 of every
triple; Morton 1966, common practice in spatial indexing).  Consecutive atoms in this order are close in
space, so a contiguous range of them (an atom shard of the Hessian store) is a compact region whose
Hessian rows reference few other shards.

The bit spreading is the usual branch-free "magic number" sequence, vectorised over numpy uint64.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.structure.box import Box

#: bits per coordinate; 3 × 21 = 63 bits fit a uint64
BITS = 21

_SPREAD = (
    (32, 0x1F00000000FFFF),
    (16, 0x1F0000FF0000FF),
    (8, 0x100F00F00F00F00F),
    (4, 0x10C30C30C30C30C3),
    (2, 0x1249249249249249),
)


def spread_bits(values: np.ndarray) -> np.ndarray:
    """Insert two zero bits after each of the low 21 bits of ``values`` (uint64 array, any shape)."""
    v = np.asarray(values, dtype=np.uint64) & np.uint64((1 << BITS) - 1)
    for shift, mask in _SPREAD:
        v = (v | (v << np.uint64(shift))) & np.uint64(mask)
    return v


def unit_coordinates(positions: np.ndarray, box: Box) -> np.ndarray:
    """Coordinates (N, 3) in [0, 1): fractional and wrapped along periodic directions, rescaled to the
    occupied range along the others.  ``positions`` (N, 3) in length units."""
    s = box.fractional(positions)
    for dim in range(3):
        if box.pbc[dim]:
            s[:, dim] -= np.floor(s[:, dim])
        elif len(s):
            lo, hi = s[:, dim].min(), s[:, dim].max()
            s[:, dim] = (s[:, dim] - lo) / (hi - lo) if hi > lo else 0.0
    return np.clip(s, 0.0, np.nextafter(1.0, 0.0))


def morton_codes(positions: np.ndarray, box: Box) -> np.ndarray:
    """Morton code (N,) uint64 of each position (N, 3) in ``box``."""
    q = (unit_coordinates(positions, box) * (1 << BITS)).astype(np.uint64)
    return spread_bits(q[:, 0]) | (spread_bits(q[:, 1]) << np.uint64(1)) | (spread_bits(q[:, 2]) << np.uint64(2))


def morton_order(positions: np.ndarray, box: Box) -> np.ndarray:
    """Permutation (N,) int64 listing atom indices along the Morton curve (ties keep input order).

    ``order[k]`` is the input index of the atom stored at position k.
    """
    return np.argsort(morton_codes(positions, box), kind="stable").astype(np.int64)

"""Cells: volume and face widths against geometric formulas, wrapping and minimum images."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.structure.box import Box


def cell_from_parameters(a, b, c, alpha, beta, gamma):
    """Rows a, b, c from lengths and angles (degrees): a along x, b in the xy plane (common practice,
    e.g. the International Tables' standard setting, from memory)."""
    al, be, ga = (math.radians(x) for x in (alpha, beta, gamma))
    bx, by = b * math.cos(ga), b * math.sin(ga)
    cx = c * math.cos(be)
    cy = c * (math.cos(al) - math.cos(be) * math.cos(ga)) / math.sin(ga)
    cz = math.sqrt(c * c - cx * cx - cy * cy)
    return np.array([[a, 0, 0], [bx, by, 0], [cx, cy, cz]])


PARAMETERS = [(3.0, 4.0, 5.0, 90, 90, 90), (4.1, 3.9, 5.3, 71.0, 98.0, 113.0), (2.0, 2.0, 2.0, 60, 60, 60)]


@pytest.mark.parametrize("params", PARAMETERS)
def test_volume_and_widths(params):
    a, b, c, alpha, beta, gamma = params
    box = Box(cell_from_parameters(*params))
    ca, cb, cg = (math.cos(math.radians(x)) for x in (alpha, beta, gamma))
    # V = abc √(1 − cos²α − cos²β − cos²γ + 2 cosα cosβ cosγ) (common practice, from memory)
    volume = a * b * c * math.sqrt(1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg)
    assert box.volume == pytest.approx(volume, rel=1e-13)
    rows = box.cell
    # the distance between faces spanned by the other two vectors: V / |u × v|
    faces = [np.cross(rows[1], rows[2]), np.cross(rows[2], rows[0]), np.cross(rows[0], rows[1])]
    np.testing.assert_allclose(box.widths, [volume / np.linalg.norm(f) for f in faces], rtol=1e-13)
    # every width is at most the edge length along it, equal only for an orthogonal cell
    assert np.all(box.widths <= np.array([a, b, c]) * (1 + 1e-14))
    if params[3:] == (90, 90, 90):
        np.testing.assert_allclose(box.widths, [a, b, c], rtol=1e-15)
    else:
        assert np.all(box.widths < np.array([a, b, c]) * (1 - 1e-3))


def test_fractional_cartesian_rows_are_lattice_vectors():
    box = Box(cell_from_parameters(*PARAMETERS[1]))
    np.testing.assert_allclose(box.fractional(box.cell), np.eye(3), atol=1e-15)
    s = np.random.default_rng(0).uniform(-2, 3, (10, 3))
    np.testing.assert_allclose(box.fractional(box.cartesian(s)), s, rtol=0, atol=1e-13)


def test_wrap_moves_by_lattice_vectors_into_the_cell():
    box = Box(cell_from_parameters(*PARAMETERS[1]), pbc=[True, True, False])
    rng = np.random.default_rng(1)
    x = rng.uniform(-15, 15, (200, 3))
    x[0] = -1e-17 * box.cell[0]  # fraction −1e-17 must not wrap to exactly 1
    w = box.wrap(x)
    s = box.fractional(w)
    assert np.all(s[:, :2] >= 0) and np.all(s[:, :2] < 1)
    # the non-periodic direction is untouched
    np.testing.assert_allclose(s[:, 2], box.fractional(x)[:, 2], rtol=0, atol=1e-12)
    # the move is a whole lattice translation
    moved = box.fractional(w - x)
    np.testing.assert_allclose(moved, np.round(moved), rtol=0, atol=1e-11)
    assert np.all(np.round(moved)[:, 2] == 0)


def test_minimum_image_is_the_shortest_image():
    box = Box(cell_from_parameters(4.0, 4.4, 4.8, 80, 95, 105))
    rng = np.random.default_rng(2)
    # separations shorter than half the smallest width, given displaced by random lattice vectors
    short = rng.normal(size=(100, 3))
    short *= (0.49 * box.widths.min() * rng.uniform(0, 1, (100, 1))) / np.linalg.norm(short, axis=1)[:, None]
    d = short + rng.integers(-3, 4, (100, 3)) @ box.cell
    np.testing.assert_allclose(box.minimum_image(d), short, rtol=0, atol=1e-12)
    # for any separation the result is still an image of it (exactly shortest only within half a width)
    shifts = np.array(list(itertools.product(range(-3, 4), repeat=3))) @ box.cell
    for v in rng.uniform(-10, 10, (20, 3)):
        m = box.minimum_image(v)
        assert np.min(np.linalg.norm(v + shifts - m, axis=1)) < 1e-12  # m is an image of v


def test_minimum_image_leaves_open_directions():
    box = Box.orthorhombic([3.0, 4.0, 5.0], pbc=[True, False, True])
    np.testing.assert_allclose(box.minimum_image(np.array([2.0, 3.5, -4.0])), [-1.0, 3.5, 1.0], atol=1e-15)


def test_bad_cells():
    with pytest.raises(InputError, match="linearly dependent"):
        Box(np.array([[1.0, 0, 0], [0, 1.0, 0], [1.0, 1.0, 0]]))
    with pytest.raises(InputError, match="non-finite"):
        Box(np.array([[1.0, 0, 0], [0, np.inf, 0], [0, 0, 1.0]]))

"""Participation ratios, mode centres and radial profiles against closed forms."""

import numpy as np
import pytest

from eigenfarm.analysis.localization import inverse_participation, mode_centres, radial_profile, reach
from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.catalogue.participation import atom_weights, participation_ratio
from eigenfarm.structure.box import Box


def grid(cells: int, a: float = 1.0) -> np.ndarray:
    axis = np.arange(cells) * a
    return np.stack(np.meshgrid(axis, axis, axis, indexing="ij"), -1).reshape(-1, 3)


def test_participation_closed_forms():
    # Bell & Dean, Discuss. Faraday Soc. 50, 55 (1970) for the definition (from memory); the values are
    # the closed forms derived in docs/analysis.md: one atom 1/N, all atoms alike 1, standing wave 2/3.
    positions = grid(8)
    n = len(positions)
    one = np.zeros((1, 3 * n))
    one[0, 3 * 17 + 1] = 1.0
    uniform = np.tile([0.3, -0.2, 0.5], n)[None]
    k = 2 * np.pi * np.array([1, 2, 0]) / 8.0
    standing = (np.cos(positions @ k)[:, None] * np.array([0.0, 0.0, 1.0])).ravel()[None]
    p = participation_ratio(np.concatenate([one, uniform, standing]))
    np.testing.assert_allclose(p, [1 / n, 1.0, 2 / 3], rtol=1e-12)
    np.testing.assert_allclose(inverse_participation(atom_weights(np.concatenate([one, uniform]))), [1.0, 1 / n],
                               rtol=1e-12)


def test_centre_of_a_mode_across_the_periodic_boundary():
    # A mode spread over atoms on both sides of the x = 0 face sits at x ≈ 0, not mid-box (minimum image;
    # common practice).
    positions = grid(6, 2.0)
    geometry = Geometry(np.ones(len(positions)), positions, Box.cubic(12.0))
    weight = np.zeros((1, len(positions)))
    near = np.flatnonzero((np.isclose(positions[:, 1], 4.0)) & (np.isclose(positions[:, 2], 6.0))
                          & np.isin(positions[:, 0], [0.0, 10.0]))
    weight[0, near] = [1.0, 1.0]
    centre = mode_centres(weight, geometry, top=2)[0]
    x = centre[0] if centre[0] < 6 else centre[0] - 12.0
    np.testing.assert_allclose([x, centre[1], centre[2]], [-1.0, 4.0, 6.0], atol=1e-12)


def test_radial_profile_of_an_exponential_decay():
    # |e_a|² = exp(−r/ξ) around an atom: the profile's log falls with slope −1/ξ (analytic).
    positions = grid(16, 1.0) + 0.5
    geometry = Geometry(np.ones(len(positions)), positions, Box.cubic(16.0))
    centre = positions[len(positions) // 2]
    r = np.linalg.norm(geometry.box.minimum_image(positions - centre), axis=1)
    profile = radial_profile(np.exp(-r / 1.5), centre, geometry, bins=16)
    assert profile.radius[-1] < reach(geometry) == pytest.approx(8.0)
    assert profile.atoms.sum() == np.count_nonzero(r <= 8.0)
    good = profile.atoms > 20
    slope = np.polyfit(profile.radius[good], np.log(profile.weight[good]), 1)[0]
    assert slope == pytest.approx(-1 / 1.5, rel=0.05)

"""Participation ratio against closed forms (Bell & Dean, Discuss. Faraday Soc. 50, 55, 1970)."""

import numpy as np
import pytest

from eigenfarm.catalogue import participation_ratio


def test_single_atom_gives_one_over_n():
    # one atom moving alone: P = (|e_a|²)² / (N |e_a|⁴) = 1/N  (from the definition)
    v = np.zeros((1, 3 * 50))
    v[0, 3 * 17:3 * 18] = [0.3, -0.4, 0.5]
    assert participation_ratio(v)[0] == pytest.approx(1 / 50, rel=1e-14)


def test_uniform_amplitude_gives_one():
    # every atom with the same |e_a| (directions random): P = (N w)² / (N · N w²) = 1  (definition)
    rng = np.random.default_rng(1)
    d = rng.normal(size=(40, 3))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    assert participation_ratio(d.reshape(1, -1))[0] == pytest.approx(1.0, rel=1e-14)


@pytest.mark.parametrize("mode", [(1, 0, 0), (1, 2, 0), (3, 1, 2)])
def test_standing_plane_wave_gives_two_thirds(mode):
    # e_a = ε cos(k·r_a) on an L³ periodic simple-cubic lattice, k = 2π m / L: the lattice sums of cos²
    # and cos⁴ over whole periods are N/2 and 3N/8 (2k, 4k not reciprocal-lattice vectors), so
    # P = (1/2)² / (3/8) = 2/3 — the value quoted for extended plane waves (common practice; derivation here).
    L = 8
    r = np.stack(np.meshgrid(*[np.arange(L)] * 3, indexing="ij"), -1).reshape(-1, 3)
    k = 2 * np.pi * np.array(mode) / L
    polarisation = np.array([0.48, 0.6, 0.64])
    e = np.cos(r @ k)[:, None] * polarisation
    assert participation_ratio(e.reshape(1, -1))[0] == pytest.approx(2 / 3, rel=1e-12)


def test_rows_are_independent_and_scale_free():
    rng = np.random.default_rng(2)
    v = rng.normal(size=(5, 30))
    each = np.array([participation_ratio(row[None])[0] for row in v])
    assert np.allclose(participation_ratio(v), each, rtol=1e-14)
    assert np.allclose(participation_ratio(7.5 * v), each, rtol=1e-14)
    with pytest.raises(ValueError, match="3N"):
        participation_ratio(np.ones((2, 31)))

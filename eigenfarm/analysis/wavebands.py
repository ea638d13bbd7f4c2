"""Plane-wave bands placed from the Hessian store, without eigenpairs, when a catalogue stops below them.

A lowest-K catalogue of a large sample usually ends below the first longitudinal band, so the band (and
with it c_L and the Debye level) cannot be read from the catalogue's modes.  The band's weight
distribution is the spectral measure of its plane waves, μ_w(λ) = Σ_i |⟨e_i, w⟩|² δ(λ − λ_i), whose
Chebyshev moments ⟨w, T_n(D̃) w⟩ the kernel polynomial method gives from products with D alone
(:mod:`eigenfarm.analysis.kpm`, with the band's unit plane waves as the probe block instead of random
vectors — the moments are then exact, with no stochastic error).  The band's cumulative weight is the
damped series' exact integral; its 10 %, 16 % and 50 % points give the band's edge, width and frequency
as for a catalogue (:mod:`eigenfarm.analysis.phonons`), within the Jackson kernel's resolution (stated).

Real plane waves: for each wave vector k of the shell taken once per ±k pair, cos(k·r) and sin(k·r)
times the polarisation (k̂ for L, two unit vectors ⊥ k̂ for T), mass-weighted and normalised — 2m_s
transverse and m_s longitudinal columns, the same subspace as the complex waves of the shell.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.analysis.kpm import DensityEstimate, plane_wave_moments
from eigenfarm.analysis.phonons import BAND_EDGE, Band
from eigenfarm.analysis.planewaves import Shells
from eigenfarm.store import HessianStore

#: Chebyshev moments for band placement (kernel width ≈ 500/M in λ near λ = 0 when λ_max ≈ 1000)
DEFAULT_WAVE_MOMENTS = 1024


def _half(k: np.ndarray) -> np.ndarray:
    """The wave vectors with a canonical sign (first nonzero component positive): one per ±k pair."""
    first = np.array([row[np.flatnonzero(np.abs(row) > 1e-12 * np.abs(row).max())[0]] for row in k])
    return k[first > 0]


def _perpendicular(unit: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    helper = np.eye(3)[np.argmin(np.abs(unit))]
    a = np.cross(unit, helper)
    a /= np.linalg.norm(a)
    return a, np.cross(unit, a)


def wave_block(shells: Shells, shell: int, polarisation: str, positions: np.ndarray,
               masses: np.ndarray) -> np.ndarray:
    """(3N, c) unit mass-weighted real plane waves of one shell and polarisation ("T": c = 2m, "L": c = m)
    for atoms at ``positions`` (N, 3) with ``masses`` (N,), dof 3a + xyz in the given atom order."""
    root = np.sqrt(np.asarray(masses, dtype=float))
    columns = []
    for k in _half(shells.k[shells.shell == shell]):
        unit = k / np.linalg.norm(k)
        directions = [unit] if polarisation == "L" else list(_perpendicular(unit))
        phase = positions @ k
        for wave in (np.cos(phase), np.sin(phase)):
            for eps in directions:
                column = ((root * wave)[:, None] * eps).ravel()
                columns.append(column / np.linalg.norm(column))
    return np.stack(columns, axis=1)


def band_from_store(store: HessianStore, shells: Shells, shell: int, polarisation: str,
                    moments: int = DEFAULT_WAVE_MOMENTS, client=None) -> tuple[Band, float]:
    """(band, resolution): the band of ``shell``/``polarisation`` of ``store``'s sample placed from its
    plane waves' spectral measure; resolution is the kernel's frequency width at the band frequency."""
    block = wave_block(shells, shell, polarisation, store.positions, store.masses)
    mu, bounds = plane_wave_moments(store, block, moments, client)
    estimate = DensityEstimate(mu, bounds, 1, store.units, 0)
    low, q16, median = _quantiles(estimate, [BAND_EDGE, 0.16, 0.5])
    k = float(shells.magnitude[shell])
    omega = np.sqrt(max(float(store.units.eigenvalue(median)), 0.0))
    band = Band(shell, shells.label[shell], polarisation, k, int(shells.multiplicity[shell]),
                float(block.shape[1]), float(block.shape[1]), median, low, median - q16,
                float(omega / k * store.units.speed_factor))
    return band, float(estimate.resolution(median)[1])


def _quantiles(estimate: DensityEstimate, q, points: int = 20000) -> list[float]:
    """Frequencies where the band's mean cumulative weight reaches each fraction in ``q``."""
    lo, hi = estimate.frequency_range()
    grid = np.linspace(max(lo, 0.0), hi, points)
    cumulative = np.maximum.accumulate(estimate.modes_below(grid)[0])  # the damped series may wiggle
    return [float(np.interp(fraction, cumulative, grid)) for fraction in q]

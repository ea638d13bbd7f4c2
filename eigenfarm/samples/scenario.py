"""The built-in demo scenario: eigenfarm's own binary soft-sphere glass former.

Two species in reduced units, "A" (60 %) and "B" (40 %), equal masses (m = 1), interacting by the
inverse-power-law pair potential φ_ab(r) = ε (σ_ab/r)¹² with σ_AA = 1, σ_BB = 1.3, additive
σ_AB = 1.15, cut at r_c = 1.45 σ_ab and smoothed to second order (energy, force and curvature vanish at
r_c), at number density ρ = 0.80 σ_AA⁻³.  The size disparity frustrates crystallisation; these
numbers are our own choice for a demonstration, not a published model (soft-sphere mixtures of this
family go back to Bernu, Hansen, Hiwatari & Pastore, PRA 36, 4891, 1987; from memory).
"""

from __future__ import annotations

from eigenfarm.potentials.library import demo_soft_spheres as demo_potential

FRACTION_A = 0.6
DENSITY = 0.80

__all__ = ["FRACTION_A", "DENSITY", "demo_potential"]

"""Zero-temperature elastic constants with internal relaxation from the Hessian.

For a periodic configuration at a minimum (forces zero, stress zero), a homogeneous strain e (Voigt
6-vector, engineering shears) changes the energy to second order as E = E0 + ½ V eᵀ C e, where the atoms
are free to relax after the affine map.  Minimising over the non-affine displacements u of
E(e, u) ≈ E0 + ½ eᵀ W e + uᵀ Ξ e + ½ uᵀ H u gives (Lutsko, J. Appl. Phys. 65, 2991, 1989; Maloney &
Lemaître, PRE 74, 016118, 2006; both from memory)

    C = (1/V) [W − Ξᵀ H⁺ Ξ],   W = ∂²E/∂e∂e at fixed fractional coordinates (Born term),
                               Ξ = ∂²E/∂x∂e = −∂F/∂e (3N, 6),

with H⁺ the pseudo-inverse of the Hessian on the complement of its zero modes (the three translations,
plus any rattlers).  Here W is a central finite difference of the energy under symmetric strains,
Ξ a central finite difference of the analytic forces, and H⁺ comes from a dense eigendecomposition, so
this is meant for cells of up to a few thousand atoms.  Units: GPa for ``metal``, ε/σ³ for ``reduced``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.potentials.base import Potential
from eigenfarm.structure.configuration import Configuration
from eigenfarm.structure.units import EV_PER_A3_IN_GPA

#: Voigt order: xx, yy, zz, yz, xz, xy
VOIGT = ((0, 0), (1, 1), (2, 2), (1, 2), (0, 2), (0, 1))


@dataclass(frozen=True)
class ElasticConstants:
    """Voigt 6×6 stiffness matrices in ``unit``: ``affine`` (no internal relaxation) and ``relaxed``."""

    affine: np.ndarray
    relaxed: np.ndarray
    unit: str

    @property
    def relaxation(self) -> np.ndarray:
        """The softening by internal relaxation, affine − relaxed (6, 6), ``unit``."""
        return self.affine - self.relaxed


def voigt_strain(e) -> np.ndarray:
    """Symmetric strain tensor (3, 3) of a Voigt strain (6,) with engineering shears (γ = 2ε)."""
    e = np.asarray(e, dtype=float)
    strain = np.zeros((3, 3))
    for n, (a, b) in enumerate(VOIGT):
        strain[a, b] = strain[b, a] = e[n] if a == b else 0.5 * e[n]
    return strain


def strained(config: Configuration, e) -> Configuration:
    """The configuration under the affine Voigt strain ``e`` (6,): cell and positions map r → r(I + ε)."""
    strain = voigt_strain(e)
    moved = config.with_positions(config.positions @ (np.eye(3) + strain))
    moved.box = config.box.deformed(strain)
    return moved


def born_term(potential: Potential, config: Configuration, step: float) -> np.ndarray:
    """W = ∂²E/∂e_I∂e_J (6, 6), energy units, by central differences with strain ``step``."""
    e0 = potential.energy(config)

    def energy(*moves):
        e = np.zeros(6)
        for axis, sign in moves:
            e[axis] += sign * step
        return potential.energy(strained(config, e))

    w = np.zeros((6, 6))
    for a in range(6):
        w[a, a] = (energy((a, 1)) - 2 * e0 + energy((a, -1))) / step**2
        for b in range(a):
            w[a, b] = w[b, a] = (energy((a, 1), (b, 1)) - energy((a, 1), (b, -1))
                                 - energy((a, -1), (b, 1)) + energy((a, -1), (b, -1))) / (4 * step**2)
    return w


def mixed_term(potential: Potential, config: Configuration, step: float) -> np.ndarray:
    """Ξ = −∂F/∂e (3N, 6), energy/length, by central differences of the forces under strain."""
    xi = np.zeros((3 * config.n_atoms, 6))
    for a in range(6):
        e = np.zeros(6)
        e[a] = step
        plus = potential.energy_forces(strained(config, e))[1]
        minus = potential.energy_forces(strained(config, -e))[1]
        xi[:, a] = -(plus - minus).ravel() / (2 * step)
    return xi


def relaxation_term(hessian: np.ndarray, xi: np.ndarray, where: str) -> np.ndarray:
    """Ξᵀ H⁺ Ξ (6, 6) with H⁺ the pseudo-inverse on the non-zero modes of ``hessian`` (3N, 3N).

    A clearly negative eigenvalue means the configuration is not at a minimum: InputError.
    """
    lam, vec = np.linalg.eigh(hessian)
    scale = max(np.abs(lam).max(), np.finfo(float).tiny)
    tol = 1e-8 * scale
    if lam[0] < -tol:
        raise InputError(f"{where}: not at a minimum (Hessian eigenvalue {lam[0]:.3g} < 0); "
                         "minimise before computing elastic constants")
    keep = lam > tol
    proj = vec[:, keep].T @ xi
    return proj.T @ (proj / lam[keep, None])


def elastic_constants(potential: Potential, config: Configuration, step: float = 1e-4) -> ElasticConstants:
    """Affine and relaxed Voigt stiffness (6, 6) of a periodic ``config`` at a minimum.

    ``step`` is the finite-difference strain.  Result in GPa for ``metal`` units, in energy/length³
    (ε/σ³) for ``reduced``.  The configuration should be at a force and stress minimum.
    """
    if not np.all(config.box.pbc):
        raise InputError(f"{config.source}: elastic constants need a cell periodic in all three directions")
    volume = config.box.volume
    born = born_term(potential, config, step)
    xi = mixed_term(potential, config, step)
    relax = relaxation_term(potential.hessian(config).toarray(), xi, config.source)
    relax = 0.5 * (relax + relax.T)
    factor, unit = ((EV_PER_A3_IN_GPA, "GPa") if config.units.name == "metal"
                    else (1.0, f"{config.units.energy}/{config.units.length}³"))
    return ElasticConstants(born / volume * factor, (born - relax) / volume * factor, unit)

"""Energy minimisation by FIRE (Bitzek, Koskinen, Gähler, Moseler & Gumbsch, PRL 97, 170201, 2006).

The fast inertial relaxation engine runs damped molecular dynamics with unit masses, mixing the
velocity toward the force direction and adapting the time step (parameters of the paper: N_min = 5,
f_inc = 1.1, f_dec = 0.5, α_start = 0.1, f_α = 0.99, Δt_max = 10 Δt).  Two safeguards of common
practice: no atom moves more than ``max_step`` per step (so random initial overlaps do not blow up),
and neighbour lists carry a Verlet skin, rebuilt when any atom has moved half the skin.

Convergence: max over atoms of |F_i| below ``fmax`` (default 1e-10 in the potential's force units,
common practice before a Hessian is built: residual forces shift eigenvalues at order |F|).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from eigenfarm.errors import ConvergenceError
from eigenfarm.potentials.base import Potential
from eigenfarm.structure.configuration import Configuration

N_MIN, F_INC, F_DEC, ALPHA_START, F_ALPHA = 5, 1.1, 0.5, 0.1, 0.99


@dataclass
class Relaxed:
    """Result of a minimisation: the configuration, its energy, max |F_i|, and the steps taken."""

    config: Configuration
    energy: float
    fmax: float
    steps: int


class SkinnedForces:
    """Energy and forces with a neighbour list reused until an atom moves half the skin (length units)."""

    def __init__(self, potential: Potential, config: Configuration, skin: float):
        self.potential, self.config, self.skin = potential, config, skin
        self.types = potential.types(config)
        self._build(config.positions)

    def _build(self, positions):
        self.anchor = positions.copy()
        self.pairs = self.potential.neighbours(self.config.with_positions(positions), skin=self.skin)

    def __call__(self, positions: np.ndarray):
        """(energy, forces (N, 3)) at ``positions`` (N, 3)."""
        moved = np.einsum("ij,ij->i", positions - self.anchor, positions - self.anchor).max()
        if moved > (0.5 * self.skin) ** 2:
            self._build(positions)
        return self.potential.evaluate(self.pairs.refreshed(positions, self.config.box), self.types)


def fire_minimise(potential: Potential, config: Configuration, fmax: float = 1e-10, dt: float = 0.002,
                  dt_max: float = 0.02, max_steps: int = 200_000, max_step: float = 0.1, skin: float = 0.3,
                  progress: Callable[[int, float, float], None] | None = None) -> Relaxed:
    """Relax ``config`` to a local energy minimum of ``potential``.

    ``dt`` initial and ``dt_max`` largest time step (in √(m·length²/energy) with unit masses; dt_max
    must stay below ~1/ω_max of the stiffest vibration for the damped dynamics to be stable, so the
    paper's Δt_max = 10 Δt is a default of ours only in ratio); ``max_step`` cap on any atom's
    move per step (length); ``skin`` Verlet skin (length).  ``progress(step, energy, fmax)`` is called
    every 500 steps.  Raises :class:`ConvergenceError` after ``max_steps`` without reaching ``fmax``.
    """
    forces_at = SkinnedForces(potential, config, skin)
    x = config.positions.copy()
    v = np.zeros_like(x)
    energy, f = forces_at(x)
    alpha, since_negative = ALPHA_START, 0
    for step in range(max_steps + 1):
        worst = float(np.sqrt(np.einsum("ij,ij->i", f, f).max()))
        if worst < fmax:
            return Relaxed(config.with_positions(x), energy, worst, step)
        if progress and step % 500 == 0:
            progress(step, energy, worst)
        power = float(np.vdot(f, v))
        if power > 0:
            fnorm = np.linalg.norm(f)
            v = (1 - alpha) * v + alpha * np.linalg.norm(v) * f / fnorm
            since_negative += 1
            if since_negative > N_MIN:
                dt, alpha = min(dt * F_INC, dt_max), alpha * F_ALPHA
        else:
            v[:] = 0.0
            dt, alpha, since_negative = dt * F_DEC, ALPHA_START, 0
        # semi-implicit Euler step (velocity first), as in FIRE 2.0 (Guénolé et al., Comput. Mater.
        # Sci. 175, 109584, 2020); the move is capped at max_step per atom
        v += dt * f
        dx = dt * v
        longest = np.sqrt(np.einsum("ij,ij->i", dx, dx).max())
        if longest > max_step:
            dx *= max_step / longest
        x = x + dx
        energy, f = forces_at(x)
    raise ConvergenceError(
        f"FIRE did not converge in {max_steps} steps: max |F| = {worst:.3g} > {fmax:g} "
        f"({config.source}); allow more steps (--max-steps) or a looser tolerance (--fmax)"
    )

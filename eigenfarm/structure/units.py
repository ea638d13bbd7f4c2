"""Unit systems recorded in every store and catalogue.

``metal``: energy eV, length Å, mass amu (unified atomic mass unit, Da).  Eigenvalues λ of
H v = λ M v are in eV/(Å²·amu); frequencies are reported as ν = ω/2π in THz.

``reduced``: energy ε, length σ, mass m all 1; eigenvalues in ε/(mσ²); frequencies are reported as the
angular frequency ω in √(ε/(mσ²)).

Constants: CODATA 2018 exact/recommended values (e = 1.602176634e-19 C exact; m_u = 1.66053906660e-27 kg;
Tiesinga et al., Rev. Mod. Phys. 93, 025010, 2021).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from eigenfarm.errors import InputError

_EV = 1.602176634e-19  # J, exact (SI 2019)
_AMU = 1.66053906660e-27  # kg, CODATA 2018
_ANGSTROM = 1e-10  # m

#: ω in rad/s for λ = 1 eV/(Å²·amu)
_METAL_OMEGA = math.sqrt(_EV / (_ANGSTROM**2 * _AMU))
#: GPa per eV/Å³ (used for elastic constants)
EV_PER_A3_IN_GPA = _EV / _ANGSTROM**3 / 1e9


@dataclass(frozen=True)
class UnitSystem:
    """A named unit system.

    ``frequency_factor`` converts √λ (λ an eigenvalue in energy/(length²·mass)) to the reported
    frequency unit ``frequency_unit``.
    """

    name: str
    energy: str
    length: str
    mass: str
    frequency_unit: str
    frequency_factor: float
    #: unit of sound speeds and the factor from the internal speed √λ/|k| (length·√(energy/mass)/length)
    speed_unit: str = ""
    speed_factor: float = 1.0

    def frequency(self, eigenvalue):
        """Reported frequency for eigenvalue(s) λ; negative λ gives a negative signed frequency.

        ``eigenvalue``: scalar or array in energy/(length²·mass).  Returns the same shape.
        """
        lam = np.asarray(eigenvalue, dtype=float)
        return np.sign(lam) * np.sqrt(np.abs(lam)) * self.frequency_factor

    def eigenvalue(self, frequency):
        """Inverse of :meth:`frequency`: λ = sign(f)·(f/factor)²."""
        f = np.asarray(frequency, dtype=float)
        return np.sign(f) * (f / self.frequency_factor) ** 2


METAL = UnitSystem("metal", "eV", "Å", "amu", "THz", _METAL_OMEGA / (2 * math.pi) / 1e12,
                   "m/s", _METAL_OMEGA * _ANGSTROM)
REDUCED = UnitSystem("reduced", "ε", "σ", "m", "√(ε/mσ²)", 1.0, "√(ε/m)", 1.0)
UNIT_SYSTEMS = {u.name: u for u in (METAL, REDUCED)}


def get_units(name: str) -> UnitSystem:
    """The unit system called ``name`` (``metal`` or ``reduced``)."""
    try:
        return UNIT_SYSTEMS[name]
    except KeyError:
        raise InputError(
            f"unknown unit system {name!r}: choose one of {', '.join(sorted(UNIT_SYSTEMS))}"
        ) from None

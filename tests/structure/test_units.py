"""Unit systems: the metal frequency factor from CODATA constants, signed frequencies, names."""

from __future__ import annotations

import math

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.structure.units import METAL, REDUCED, get_units

# CODATA 2018 (Tiesinga, Mohr, Newell & Taylor, Rev. Mod. Phys. 93, 025010, 2021): elementary charge
# (exact since the 2019 SI) and atomic mass constant; typed here independently of the package
ELEMENTARY_CHARGE = 1.602176634e-19  # C, so 1 eV = this many J
ATOMIC_MASS_CONSTANT = 1.66053906660e-27  # kg


def test_metal_frequency_factor_from_codata():
    """λ = 1 eV/(Å²·amu) is ω = √(e / (10⁻²⁰ m² · m_u)) rad/s, ν = ω/2π = 15.633 THz (the usual
    'sqrt(eV/Å²/amu) = 15.633 THz' of lattice-dynamics codes: common practice, from memory)."""
    omega = math.sqrt(ELEMENTARY_CHARGE / (1e-20 * ATOMIC_MASS_CONSTANT))
    nu_thz = omega / (2 * math.pi) / 1e12
    assert abs(nu_thz - 15.633) < 5e-4
    assert METAL.frequency_factor == pytest.approx(nu_thz, rel=1e-12)
    assert float(METAL.frequency(1.0)) == pytest.approx(nu_thz, rel=1e-12)
    assert METAL.frequency_unit == "THz" and (METAL.energy, METAL.length, METAL.mass) == ("eV", "Å", "amu")


def test_signed_frequencies_and_inverse():
    lam = np.array([-4.0, 0.0, 0.25, 9.0])
    np.testing.assert_allclose(REDUCED.frequency(lam), [-2.0, 0.0, 0.5, 3.0], rtol=1e-15)
    f = METAL.frequency(lam)
    assert f.shape == lam.shape and f[0] < 0 and f[1] == 0
    np.testing.assert_allclose(METAL.eigenvalue(f), lam, rtol=1e-14)
    np.testing.assert_allclose(REDUCED.eigenvalue(REDUCED.frequency(lam)), lam, rtol=1e-15)


def test_named_lookup():
    assert get_units("metal") is METAL and get_units("reduced") is REDUCED
    with pytest.raises(InputError, match="unknown unit system 'si'.*metal, reduced"):
        get_units("si")

"""Phonon bands from plane-wave weights, sound speeds, the Debye level, and the class of each mode.

**Bands.**  Shell s of allowed wave vectors (multiplicity m_s) holds 2m_s transverse and m_s longitudinal
plane waves.  Over all 3N modes the weights of a shell's waves add up to exactly 2m_s (T) and m_s (L)
(completeness of the eigenbasis), so the summed weight of the modes in a catalogue is the number of
modes the band holds there, and it equals 2m_s / m_s when the catalogue covers the whole band.
Band positions are weighted quantiles *of that expected total*: the frequency below which a fraction q
of 2m_s (or m_s) lies.  A catalogue is complete below its top frequency, so these quantiles are exact
whenever the catalogue holds at least q of the band — a lowest-K catalogue that cuts a band still
places it correctly.  The band frequency is the median (q = ½; the band is *covered* when at least half
its weight is found), its lower edge the 10 % point and its width the median minus the 16 % point (one
standard deviation for a Gaussian band, and blind to the thin high-frequency tail of band weight a
disordered sample has).

**Sound speeds** c = √λ̄ / |k| of the first shell's T and L bands (the lowest |k| is closest to the
continuum limit; dispersion shows in the speeds of later shells, listed in the band table).

**Debye level** D_Debye(ω) = 3ω²/ω_D³ per degree of freedom with ω_D³ = 18π² n / (1/c_L³ + 2/c_T³),
n the number density (Kittel, Introduction to Solid State Physics, 8th ed., ch. 5, Debye model —
from memory).  In the reported frequency f ∝ ω the same form holds: D(f) = 3f²/f_D³.

**Classes** (thresholds are options of ``eigenfarm analyze``):

- ``phonon``: plane-wave weight W = Σ_shells (T + L) ≥ ``phonon_weight``;
- ``quasi-localized``: W < ``phonon_weight`` and participation P ≤ ``local_participation``;
- ``mixed``: everything else below the projected shells;
- ``beyond-shells``: modes that are not phonons by W and lie above the highest projected shell's
  transverse band, where waves of larger |k| — not projected on — may carry them; left unclassified.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from eigenfarm.analysis.scan import ModeTable

PHONON = "phonon"
LOCAL = "quasi-localized"
MIXED = "mixed"
BEYOND = "beyond-shells"
CLASSES = (PHONON, LOCAL, MIXED, BEYOND)
#: a band counts as covered (its median known) when the catalogues hold this share of its weight
COVERED_SHARE = 0.5
#: weight fraction defining a band's lower edge
BAND_EDGE = 0.1


@dataclass(frozen=True)
class ClassRule:
    """Thresholds of the mode classes (see the module docstring)."""

    phonon_weight: float = 0.5
    local_participation: float = 0.15


@dataclass(frozen=True)
class Band:
    """One polarisation of one plane-wave shell, over one or more samples of the same cell.

    ``k`` 1/length; ``modes``: plane-wave weight found (modes' worth); ``expected``: modes the band holds
    (2m or m per sample); ``frequency`` (reported unit) the median, ``low`` the 10 % point and ``width`` the
    median minus the 16 % point of the expected weight (NaN where not enough weight was found);
    ``speed`` ω/|k| of the median in the units' speed unit; ``source`` "catalogue" (from the modes'
    plane-wave weights) or "store" (placed from the Hessian store, :mod:`eigenfarm.analysis.wavebands`).
    """

    shell: int
    label: str
    polarisation: str
    k: float
    multiplicity: int
    expected: float
    modes: float
    frequency: float
    low: float
    width: float
    speed: float
    source: str = "catalogue"

    @property
    def covered(self) -> bool:
        """The band's frequency is known: placed from the store, or at least half its weight is in the
        catalogues."""
        return self.source == "store" or self.modes >= COVERED_SHARE * self.expected

    def to_dict(self) -> dict:
        return {**asdict(self), "covered": self.covered}


def _band(tables: list[ModeTable], shell: int, polarisation: str) -> Band:
    first = tables[0]
    weights = np.concatenate([(t.transverse if polarisation == "T" else t.longitudinal)[:, shell] for t in tables])
    freq = np.concatenate([t.frequency for t in tables])
    k = float(first.shells.magnitude[shell])
    mult = int(first.shells.multiplicity[shell])
    expected = float((2 if polarisation == "T" else 1) * mult * len(tables))
    low, q16, median = weighted_quantiles(freq, weights, [BAND_EDGE, 0.16, 0.5], expected)
    omega = np.sqrt(max(float(first.units.eigenvalue(median)), 0.0)) if np.isfinite(median) else np.nan
    return Band(shell, first.shells.label[shell], polarisation, k, mult, expected, float(weights.sum()),
                median, low, median - q16, float(omega / k * first.units.speed_factor))


def weighted_quantiles(values: np.ndarray, weights: np.ndarray, q, total: float) -> list[float]:
    """Values below which fractions ``q`` of ``total`` weight lie (weights non-negative, summing to at
    most ``total``); NaN where the weights found do not reach that fraction."""
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(weights[order])
    out = []
    for fraction in np.atleast_1d(q):
        i = int(np.searchsorted(cum, fraction * total, side="left"))
        out.append(float(values[order][i]) if i < len(cum) else np.nan)
    return out


def identify_bands(tables: list[ModeTable]) -> list[Band]:
    """Bands (shell by shell, T then L) pooled over ``tables`` — samples with the same cell shape and size
    (their shells must agree).  Empty without plane-wave weights."""
    if not tables or any(t.shells is None for t in tables):
        return []
    ref = tables[0].shells
    for t in tables[1:]:
        if t.shells.n_shells != ref.n_shells or not np.allclose(t.shells.magnitude, ref.magnitude, rtol=1e-6):
            raise ValueError(f"{t.path}: its cell differs from {tables[0].path}; bands pool samples of one cell")
    return [_band(tables, s, p) for s in range(ref.n_shells) for p in ("T", "L")]


@dataclass(frozen=True)
class SoundSpeeds:
    """``transverse``/``longitudinal`` in the speed unit (None when that first band is not covered);
    ``debye_frequency`` f_D in the reported unit (None unless both speeds and a density are known)."""

    transverse: float | None
    longitudinal: float | None
    debye_frequency: float | None
    unit: str

    def debye_density(self, f: np.ndarray) -> np.ndarray:
        """D_Debye(f) = 3f²/f_D³ per dof (zero above f_D), f in the reported unit; NaN without f_D."""
        f = np.asarray(f, dtype=float)
        if self.debye_frequency is None:
            return np.full_like(f, np.nan)
        return np.where(f <= self.debye_frequency, 3 * f**2 / self.debye_frequency**3, 0.0)

    def to_dict(self) -> dict:
        return asdict(self)


def sound_speeds(bands: list[Band], table: ModeTable) -> SoundSpeeds:
    """Speeds from the first shell's bands; f_D from them and ``table``'s number density and units."""
    first = {b.polarisation: b for b in bands if b.shell == 0 and b.covered}
    c_t = first["T"].speed if "T" in first else None
    c_l = first["L"].speed if "L" in first else None
    f_d = None
    density = table.number_density
    if c_t and c_l and density:
        internal = np.array([c_l, c_t]) / table.units.speed_factor  # √λ/k units
        omega_d = (18 * np.pi**2 * density / (1 / internal[0] ** 3 + 2 / internal[1] ** 3)) ** (1 / 3)
        f_d = float(table.units.frequency(omega_d**2))
    return SoundSpeeds(c_t, c_l, f_d, table.units.speed_unit)


def plane_wave_weight(table: ModeTable) -> np.ndarray:
    """W (M,): each mode's weight on all projected shells, both polarisations (NaN without them)."""
    if table.shells is None:
        return np.full(table.n_modes, np.nan)
    return table.transverse.sum(axis=1) + table.longitudinal.sum(axis=1)


def shells_reach(bands: list[Band]) -> float:
    """Frequency above which modes are ``beyond-shells``: the highest shell's T band centre, or ∞ when
    the catalogues do not cover that band (then every mode they hold lies below it)."""
    top = [b for b in bands if b.polarisation == "T" and b.shell == max(x.shell for x in bands)]
    return top[0].frequency if top and top[0].covered else np.inf


def classify(table: ModeTable, rule: ClassRule, reach: float) -> np.ndarray:
    """Class name of each mode (M,) of ``table`` by ``rule`` (see module docstring); ``reach`` from
    :func:`shells_reach`.  Without plane-wave weights only ``quasi-localized``/``mixed`` by P."""
    weight = plane_wave_weight(table)
    has_weights = table.shells is not None
    phonon = has_weights & (weight >= rule.phonon_weight)
    local = ~phonon & (table.participation <= rule.local_participation)
    out = np.where(phonon, PHONON, np.where(local, LOCAL, MIXED)).astype(object)
    out[~phonon & (table.frequency > reach)] = BEYOND
    return out

"""The finite-size table: how the first band, the quasi-localised modes and the tail change with N.

One row per size group.  The first transverse band of a periodic cube sits at k₁ = 2π/L; a continuum
with transverse sound speed c_T puts it at ω₁ = c_T k₁.  The reference c_T is the one measured in the
largest system (closest to the continuum), so the column ``first_band / continuum`` shows how far each
size's band is from c_T·2π/L (dispersion and finite-size stiffening; 1 for the reference row by
construction only when its own band defines c_T).
"""

from __future__ import annotations

import numpy as np

from eigenfarm.analysis.ensemble import Analysis, SizeGroup


def _mean_error(values: np.ndarray) -> tuple[float, float]:
    """Mean and its standard error over samples (NaN error for one value, NaN both for none)."""
    values = np.asarray(values, dtype=float)
    if len(values) == 0:
        return np.nan, np.nan
    return float(values.mean()), float(values.std(ddof=1) / np.sqrt(len(values))) if len(values) > 1 else np.nan


def reference_speed(analysis: Analysis) -> float | None:
    """Transverse sound speed of the largest system that has one (speed unit), or None."""
    for group in reversed(analysis.groups):
        if group.speeds is not None and group.speeds.transverse is not None:
            return group.speeds.transverse
    return None


def continuum_first_band(group: SizeGroup, speed: float | None) -> float | None:
    """c_T·k₁ as a reported frequency for ``group``'s cell (k₁ its first shell), or None."""
    first = group.first_band("T")
    if speed is None or first is None:
        return None
    units = group.tables[0].units
    omega = speed / units.speed_factor * first.k  # √λ units
    return float(units.frequency(omega**2))


def _estimates(tail) -> dict:
    """β, A and A at fixed β with their interval ends (bootstrap when there is one, else profile)."""
    out = {}
    for name in ("exponent", "prefactor", "fixed_prefactor"):
        estimate = None if tail is None else getattr(tail, name)
        bounds = (None, None) if estimate is None else (estimate.bootstrap or estimate.profile)
        out.update({name: None if estimate is None else estimate.value,
                    f"{name}_low": bounds[0], f"{name}_high": bounds[1]})
    return out


def size_row(group: SizeGroup, speed: float | None) -> dict:
    """One row of the table (JSON/CSV-ready; frequencies in the reported unit)."""
    band, band_err = _mean_error(group.first_band_per_sample())
    continuum = continuum_first_band(group, speed)
    local_below, local_below_err = _mean_error(group.local_counts(group.cutoff) if group.cutoff else [])
    local_all, local_all_err = _mean_error(group.local_counts())
    return {
        "n_atoms": group.n_atoms, "samples": group.n_samples, "edge": group.edge,
        "first_band": band, "first_band_error": band_err, "continuum_first_band": continuum,
        "first_band_over_continuum": band / continuum if continuum else None,
        "tail_cutoff": group.cutoff,
        "local_below_cutoff": local_below, "local_below_cutoff_error": local_below_err,
        "local_all": local_all, "local_all_error": local_all_err,
        "interval": None if group.tail is None else ("bootstrap" if group.tail.exponent.bootstrap
                                                     else "profile likelihood"),
        **_estimates(group.tail),
    }


def size_table(analysis: Analysis) -> list[dict]:
    """Rows for every size group, smallest first (see :func:`size_row`)."""
    speed = reference_speed(analysis)
    return [size_row(g, speed) for g in analysis.groups]

"""Counting what a merged catalogue holds against what inertia says it must, and its attributes.

Inertia counts are exact; eigenvalue estimates are not, so a mode within τ of a slice boundary may sit
on either side of it.  At each boundary x the number of modes at or below x is taken as the inertia
count clamped to what the estimates allow, [#(λ ≤ x − τ), #(λ ≤ x + τ)]; a slice's ``found`` is the
difference between its two ends.  The catalogue is **complete** iff every slice found what its
inertia count expects and the total matches: no mode is missing or doubled anywhere, up to moving
modes by at most τ.
"""

from __future__ import annotations

import numpy as np

from eigenfarm.catalogue.clusters import DUPLICATE_OVERLAP
from eigenfarm.plan.slicing import Plan, Slice
from eigenfarm.store.provenance import stamp
from eigenfarm.structure.units import UnitSystem


def count_at(eigenvalues: np.ndarray, shift: float, target: int, tol: float) -> int:
    """Modes of ascending ``eigenvalues`` at or below ``shift``, reconciled with the inertia count
    ``target`` within ``tol`` (λ units)."""
    low = int(np.searchsorted(eigenvalues, shift - tol, side="right"))
    high = int(np.searchsorted(eigenvalues, shift + tol, side="right"))
    return min(max(int(target), low), high)


def slice_found(eigenvalues: np.ndarray, slices: list[Slice], tol: float) -> list[int]:
    """Modes found in each slice (lo, hi]: eigenvalues (M,) ascending, every mode of the catalogue."""
    found, below = [], 0
    for piece in slices:
        start = count_at(eigenvalues, piece.lo, below, tol)
        below += piece.expected
        found.append(count_at(eigenvalues, piece.hi, below, tol) - start)
    return found


def _ranges(indices: list[int]) -> str:
    shown = ", ".join(str(i) for i in indices[:8])
    return shown + (f" … ({len(indices)} in all)" if len(indices) > 8 else "")


def completeness(slices: list[Slice], found: list[int], total: int) -> dict:
    """The verdict: ``complete`` (bool), ``expected`` and ``found`` totals, ``mismatched_slices``, and a
    one-line ``reason``."""
    expected = sum(s.expected for s in slices)
    wrong = [s.index for s, f in zip(slices, found) if f != s.expected]
    complete = not wrong and total == expected
    if complete:
        reason = f"every slice holds the {expected} modes its inertia counts say"
    else:
        reason = (f"{total} modes where inertia counts say {expected}"
                  + (f"; slices {_ranges(wrong)} differ from their counts" if wrong else ""))
    return {"complete": complete, "expected": expected, "found": int(total), "mismatched_slices": wrong,
            "reason": reason}


def _slice_record(piece: Slice, found: int, counts: dict, run: dict, units: UnitSystem) -> dict:
    return {"index": piece.index, "eigenvalue": [piece.lo, piece.hi],
            "frequency": units.frequency([piece.lo, piece.hi]).tolist(), "expected": piece.expected,
            "found": found, **counts, "run": run}


def catalogue_attributes(plan: Plan, info: dict, units: UnitSystem, eigenvalues: np.ndarray, kept: int,
                         records: dict, runs: dict, tol: float, recombined: int) -> dict:
    """Root attributes of a catalogue.

    ``eigenvalues`` (M,): every merged mode, ascending; ``kept``: how many of them the catalogue stores
    (the lowest ``plan.keep`` for a lowest-K request, else all); ``records``/``runs``: per slice, the
    stitcher's counts and the solver's record; ``tol``: τ in λ units; ``recombined``: modes made by
    Rayleigh–Ritz across slices.  ``info`` needs ``units``, ``hessian_digest``, ``n_atoms``, and may hold
    ``trivial_zero_modes``, ``store`` and ``solver``.
    """
    found = slice_found(eigenvalues, plan.slices, tol)
    stored = eigenvalues[:kept]
    tau = plan.zero_tol * plan.scale
    return {
        "units": info["units"], "hessian_digest": info["hessian_digest"], "n_atoms": int(info["n_atoms"]),
        "store": info.get("store"), "preparation": info.get("preparation"),
        "window": {"eigenvalue": [plan.lo, plan.hi], "frequency": units.frequency([plan.lo, plan.hi]).tolist(),
                   "frequency_unit": units.frequency_unit, "convention": "lo < λ ≤ hi, zero band excluded"},
        "request": plan.request, "keep_lowest": plan.keep,
        "zero_modes": {"count": plan.n_zero, "expected_trivial": info.get("trivial_zero_modes"),
                       "tolerance": tau, "relative_tolerance": plan.zero_tol,
                       "in_catalogue": int(np.count_nonzero(np.abs(stored) <= tau))},
        "negative_modes": {"count": plan.n_negative, "in_catalogue": int(np.count_nonzero(stored < -tau))},
        "spectrum_scale": plan.scale,
        "slices": [_slice_record(s, f, records[s.index], runs.get(s.index, {}), units)
                   for s, f in zip(plan.slices, found)],
        "solver": info.get("solver"),
        "merge": {"tolerance": tol, "duplicate_overlap": DUPLICATE_OVERLAP, "recombined_modes": recombined,
                  "recombined_residual": "upper bound Σ_i |y_i| (r_i + |λ_i − θ| / λ_max)"},
        "completeness": completeness(plan.slices, found, len(eigenvalues)),
        **stamp(),
    }

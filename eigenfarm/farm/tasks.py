"""Worker-side tasks of a solve job: counts, the spectrum scale, and one slice each.

A worker process keeps the dynamical matrices of the stores it has opened (a small cache keyed by path
and digest), so the many tasks of one store read and mass-weight it once per worker.
"""

from __future__ import annotations

import time
from collections import OrderedDict


from eigenfarm.plan.slicing import Slice, plan_one_pass
from eigenfarm.solve.backend import SingularShift
from eigenfarm.solve.backends import get_backend
from eigenfarm.solve.dynamical import largest_eigenvalue, load_dynamical, to_input_order
from eigenfarm.solve.slicer import LanczosSettings, SliceResult, solve_lowest, solve_slice

_OPEN: OrderedDict = OrderedDict()
_OPEN_LIMIT = 2


def opened(path: str):
    """(D, original_index, info) of the store at ``path``, cached in this worker process."""
    if path in _OPEN:
        _OPEN.move_to_end(path)
        return _OPEN[path]
    _OPEN[path] = load_dynamical(path)
    while len(_OPEN) > _OPEN_LIMIT:
        _OPEN.popitem(last=False)
    return _OPEN[path]


def count_near(count_below, sigma: float, what: str) -> tuple[float, int]:
    """(shift used, ``count_below(shift)``): the number of eigenvalues of D below σ, the shift moved by a
    hair (up to 6 times) while it is numerically an eigenvalue; ``what`` names the matrix in errors."""
    step = 1e-9 * max(abs(sigma), 1e-300)
    for attempt in range(6):
        try:
            return sigma, count_below(sigma)
        except SingularShift:
            sigma += step * (-2) ** attempt
    raise SingularShift(f"{what}: no regular shift near {sigma!r}")


def count_task(path: str, backend: str, sigma: float) -> tuple[float, int]:
    """(shift used, eigenvalues of D below it); the shift moves by a hair if it is an eigenvalue."""
    D = opened(path)[0]
    solver = get_backend(backend)
    return count_near(lambda shift: solver.count_below(D, shift), sigma, path)


def scale_task(path: str) -> float:
    """λ_max of the store's D (energy/(length²·mass))."""
    return largest_eigenvalue(opened(path)[0])


def save_slice(save, original, piece: Slice, result: SliceResult, started: float) -> dict:
    """Hand a slice's eigenpairs to ``save`` (vectors (3N, m) from store order to input atom order by
    ``original`` (N,), the store's original_index); returns the slice record."""
    info = {"index": piece.index, "lo": piece.lo, "hi": piece.hi, "expected": piece.expected,
            "found": int(len(result.values)), "seconds": time.perf_counter() - started,
            "max_residual": float(result.residuals.max()) if len(result.values) else 0.0, **result.stats}
    save(piece.index, result.values, to_input_order(result.vectors, original), result.residuals, info)
    return info


def slice_task(path: str, backend: str, piece: Slice, scale: float, settings: LanczosSettings, save) -> dict:
    """Solve one slice and hand it to ``save(index, values, vectors, residuals, info)``; returns its record."""
    started = time.perf_counter()
    D = opened(path)[0]
    result = solve_slice(D, get_backend(backend), piece.lo, piece.hi, piece.expected, scale, settings)
    return save_slice(save, opened(path)[1], piece, result, started)


def lowest_task(path: str, backend: str, k: int, scale: float, zero_tol: float, settings: LanczosSettings,
                save) -> dict | None:
    """The k lowest modes in one pass, proved complete by one count (:func:`solve_lowest`), saved as
    slice 0 of (τ, σ_c]; returns {"plan": its one-slice plan, "record"} or None when the proof fails."""
    started = time.perf_counter()
    D = opened(path)[0]
    found = solve_lowest(D, get_backend(backend), k, scale, zero_tol, settings)
    if found is None:
        return None
    plan = plan_one_pass(scale, zero_tol, k, found.check, found.count, found.n_zero)
    return {"plan": plan, "record": save_slice(save, opened(path)[1], plan.slices[0], found.modes, started)}

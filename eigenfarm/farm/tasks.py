"""Worker-side tasks of a solve job: counts, the spectrum scale, and one slice each.

A worker process keeps the dynamical matrices of the stores it has opened (a small cache keyed by path
and digest), so the many tasks of one store read and mass-weight it once per worker.
"""

from __future__ import annotations

import time
from collections import OrderedDict


from eigenfarm.plan.slicing import Slice
from eigenfarm.solve.backend import SingularShift
from eigenfarm.solve.backends import get_backend
from eigenfarm.solve.dynamical import largest_eigenvalue, load_dynamical, to_input_order
from eigenfarm.solve.slicer import LanczosSettings, solve_slice

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


def count_task(path: str, backend: str, sigma: float) -> tuple[float, int]:
    """(shift used, eigenvalues of D below it); the shift moves by a hair if it is an eigenvalue."""
    D = opened(path)[0]
    solver = get_backend(backend)
    step = 1e-9 * max(abs(sigma), 1e-300)
    for attempt in range(6):
        try:
            return sigma, solver.count_below(D, sigma)
        except SingularShift:
            sigma += step * (-2) ** attempt
    raise SingularShift(f"{path}: no regular shift near {sigma!r}")


def scale_task(path: str) -> float:
    """λ_max of the store's D (energy/(length²·mass))."""
    return largest_eigenvalue(opened(path)[0])


def slice_task(path: str, backend: str, piece: Slice, scale: float, settings: LanczosSettings, save) -> dict:
    """Solve one slice and hand it to ``save(index, values, vectors, residuals, info)`` (vectors in input
    atom order); returns the slice's record."""
    started = time.perf_counter()
    D, original, _ = opened(path)
    result = solve_slice(D, get_backend(backend), piece.lo, piece.hi, piece.expected, scale, settings)
    info = {"index": piece.index, "lo": piece.lo, "hi": piece.hi, "expected": piece.expected,
            "found": int(len(result.values)), "seconds": time.perf_counter() - started,
            "max_residual": float(result.residuals.max()) if len(result.values) else 0.0, **result.stats}
    save(piece.index, result.values, to_input_order(result.vectors, original), result.residuals, info)
    return info

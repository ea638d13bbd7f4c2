"""Cutting a window of eigenvalues into slices whose mode counts are known exactly.

Counts come from a *counter*: a function that, given shifts σ₁…σₖ, returns for each the number of
eigenvalues of D below it (Sylvester's law of inertia on a factorisation of D − σI) — run locally, or
as parallel tasks on the farm.  A counter may move a shift by a hair when it is numerically an
eigenvalue; it returns the shift it used.

Eigenvalues with |λ| ≤ τ = ``zero_tol`` × λ_max are zero modes (translations, rotations, rattlers,
floppy modes), reported apart; eigenvalues below −τ are negative: the configuration is not at a minimum.

Slice boundaries start equally spaced in λ^{3/2} (a Debye density of states, N(ω) ∝ ω³, spreads modes
evenly that way) and slices holding more than 1.5 × the target are split, for a few rounds at most (a degenerate
set cannot be split); empty slices are merged into a neighbour.  Every boundary's count is exact, so every slice knows how
many modes it must return.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Callable

import numpy as np

from eigenfarm.errors import InputError

#: shifts → [(shift used, eigenvalues below it)]
Counter = Callable[[list[float]], list[tuple[float, int]]]

MAX_REFINE_ROUNDS = 4


@dataclass(frozen=True)
class Slice:
    """Eigenvalues lo < λ ≤ hi (energy/(length²·mass)); ``expected`` = N(hi) − N(lo) by inertia."""

    index: int
    lo: float
    hi: float
    expected: int


@dataclass
class Plan:
    """What to solve: slices covering (lo, hi], with the zero/negative census of the whole spectrum."""

    lo: float
    hi: float
    slices: list[Slice]
    scale: float
    zero_tol: float
    n_negative: int
    n_zero: int
    below_lo: int
    request: dict = field(default_factory=dict)
    keep: int | None = None

    @property
    def expected(self) -> int:
        return sum(s.expected for s in self.slices)

    def to_dict(self) -> dict:
        return asdict(self)  # recurses into the slices


@dataclass(frozen=True)
class Census:
    """Counts below −τ (negative modes) and in [−τ, τ] (zero modes); N(τ) = negative + zero."""

    tau: float
    n_negative: int
    n_zero: int


def census(counter: Counter, scale: float, zero_tol: float) -> Census:
    """Negative and zero modes of D from two counts at ∓τ, τ = zero_tol · scale."""
    tau = zero_tol * scale
    (_, below_neg), (_, below_pos) = counter([-tau, tau])
    return Census(tau, below_neg, below_pos - below_neg)


def _debye_guess(lo: float, hi: float, parts: int) -> list[float]:
    """Interior points of (lo, hi] equally spaced in λ^{3/2} (lo clipped at 0)."""
    a, b = max(lo, 0.0) ** 1.5, hi**1.5
    return [float((a + (b - a) * k / parts) ** (2 / 3)) for k in range(1, parts)]


def place_slices(counter: Counter, lo: float, hi: float, n_lo: int, n_hi: int, target: int) -> list[Slice]:
    """Slices of (lo, hi] with at most ~1.5 × ``target`` modes each, given the end counts."""
    points = {lo: n_lo, hi: n_hi}
    parts = max(1, int(np.ceil((n_hi - n_lo) / target)))
    pending = _debye_guess(lo, hi, parts)
    for _ in range(MAX_REFINE_ROUNDS):
        if not pending:
            break
        for shift, count in counter(pending):
            points[shift] = count
        pending = []
        bounds = sorted(points)
        for a, b in zip(bounds[:-1], bounds[1:]):
            if points[b] - points[a] > 1.5 * target and (b - a) > 1e-9 * max(abs(b), 1e-300):
                pending.append(0.5 * (a + b) if a < 0 else float(((a**1.5 + b**1.5) / 2) ** (2 / 3)))
    bounds = sorted(points)
    counts = [points[b] for b in bounds]
    if any(c2 < c1 for c1, c2 in zip(counts[:-1], counts[1:])):
        raise RuntimeError(f"inertia counts are not monotone in the shift: {list(zip(bounds, counts))}")
    # a boundary next to an empty slice is dropped, merging that slice into its neighbour
    last = len(bounds) - 1
    bounds = [b for k, b in enumerate(bounds)
              if k in (0, last) or points[bounds[0]] < points[b] < points[bounds[k + 1]]]
    return [Slice(k, a, b, points[b] - points[a]) for k, (a, b) in enumerate(zip(bounds[:-1], bounds[1:]))]


def plan_window(counter: Counter, scale: float, lam_lo: float, lam_hi: float, target: int,
                zero_tol: float) -> Plan:
    """Slices for all modes with lam_lo < λ ≤ lam_hi outside the zero band |λ| ≤ τ."""
    if not lam_hi > lam_lo:
        raise InputError(f"empty window: upper end {lam_hi:g} is not above lower end {lam_lo:g} (eigenvalue units)")
    zeros = census(counter, scale, zero_tol)
    segments = []
    if lam_lo < -zeros.tau:
        segments.append((lam_lo, min(lam_hi, -zeros.tau)))
    if lam_hi > zeros.tau:
        segments.append((max(lam_lo, zeros.tau), lam_hi))
    if not segments:
        raise InputError("the window holds only zero modes (|λ| ≤ zero tolerance); raise its upper end")
    slices, ends = [], []
    for a, b in segments:
        (a, n_a), (b, n_b) = counter([a, b])
        ends.append((a, n_a, b))
        slices += place_slices(counter, a, b, n_a, n_b, target)
    slices = [Slice(k, s.lo, s.hi, s.expected) for k, s in enumerate(slices)]
    return Plan(ends[0][0], ends[-1][2], slices, scale, zero_tol, zeros.n_negative, zeros.n_zero, ends[0][1],
                {"window": [lam_lo, lam_hi]})


def plan_lowest(counter: Counter, scale: float, k: int, target: int, zero_tol: float, n: int) -> Plan:
    """Slices holding (at least) the ``k`` lowest modes above the zero band (λ > τ)."""
    zeros = census(counter, scale, zero_tol)
    base = zeros.n_negative + zeros.n_zero
    if k < 1:
        raise InputError(f"--lowest must be at least 1, got {k}")
    if base + k > n:
        raise InputError(f"--lowest {k}: the matrix has only {n - base} modes above the zero band "
                         f"({n} in all, {zeros.n_zero} zero, {zeros.n_negative} negative)")
    hi, count = _bracket_kth(counter, zeros.tau, scale, base, k)
    slices = place_slices(counter, zeros.tau, hi, base, count, target)
    return Plan(zeros.tau, hi, slices, scale, zero_tol, zeros.n_negative, zeros.n_zero, base,
                {"lowest": k}, keep=k)


def plan_one_pass(scale: float, zero_tol: float, k: int, check: float, count: int, n_zero: int) -> Plan:
    """The plan of a ``--lowest k`` solved in one pass from below the spectrum
    (:func:`eigenfarm.solve.slicer.solve_lowest`): one slice (τ, σ_c] holding the count − n_zero modes
    found above the zero band, proved by the count N(σ_c) = ``count``; no negative modes (the pass
    gives up when it meets one)."""
    tau = zero_tol * scale
    piece = Slice(0, tau, check, count - n_zero)
    return Plan(tau, check, [piece], scale, zero_tol, 0, n_zero, n_zero, {"lowest": k, "one_pass": True}, keep=k)


def _bracket_kth(counter: Counter, tau: float, scale: float, base: int, k: int) -> tuple[float, int]:
    """A shift hi with k ≤ N(hi) − base, not far above: Debye-law extrapolation from probe counts
    (N ∝ λ^{3/2}), then geometric bisection while more than 2k modes lie below."""
    below, probe = (tau, 0), max(1e-4 * scale, 10 * tau)
    for _ in range(60):
        (probe, count), = counter([probe])
        found = count - base
        if found >= k:
            if found <= 2 * k or probe <= below[0] * (1 + 1e-6):
                return probe, count
            above, probe = (probe, count), float(np.sqrt(below[0] * probe))
            return _narrow(counter, below[0], above, base, k)
        below = (probe, found)
        growth = (1.3 * k / found) ** (2 / 3) if found > 0 else 8.0
        probe = probe * max(growth, 1.2)
    raise RuntimeError(f"could not bracket the {k} lowest modes (last probe {probe:g}, {found} found)")


def _narrow(counter: Counter, lo: float, above: tuple[float, int], base: int, k: int) -> tuple[float, int]:
    """Shrink (lo, above] geometrically while the upper end holds more than 2k modes and its lower end
    fewer than k (at most 12 counts: a degenerate shell may make 2k unreachable)."""
    for _ in range(12):
        mid = float(np.sqrt(lo * above[0]))
        (mid, count), = counter([mid])
        if count - base >= k:
            above = (mid, count)
            if count - base <= 2 * k:
                break
        else:
            lo = mid
    return above

"""Whole-spectrum density of states of D = M^-½ H M^-½ without eigenpairs: the kernel polynomial method.

Reference: A. Weiße, G. Wellein, A. Alvermann and H. Fehske, "The kernel polynomial method",
Rev. Mod. Phys. 78, 275 (2006) — the formulas below are from memory of that review; the kernel width
and the interval integral are re-derived here.  docs/whole-spectrum-density.md explains the method,
its resolution, error bars and cost at 10⁶–10⁷ atoms.

1. **Bounds** [lo, hi] ⊇ spectrum of D by ``lanczos_steps`` of Lanczos from a random start: the
   extreme Ritz values θ, widened by their residual norms β_k|s_k| (each θ has an eigenvalue within
   that distance) and by a margin of ``margin`` × (θ_max − θ_min).  The moments check the bounds:
   for a spectrum inside [lo, hi], |μ_n| ≤ 1 for every probe; if a moment exceeds 1 the run is repeated
   once with a ten times wider margin, then :class:`ConvergenceError`.  Negative λ are covered like any other.
2. **Moments** μ_n = tr T_n(D̃)/3N of D̃ = (D − c)/h, c = (hi + lo)/2, h = (hi − lo)/2, estimated per
   Rademacher probe r (Hutchinson's trace estimator) as μ_n^r = ⟨r, T_n(D̃) r⟩/3N.  With α_n = T_n(D̃) r
   (α_{n+1} = 2D̃α_n − α_{n−1}) two moments come from each product: μ_2n = 2⟨α_n, α_n⟩ − μ_0 and
   μ_2n−1 = 2⟨α_n, α_n−1⟩ − μ_1, so M moments cost M/2 products D·X with X = (3N, R).
3. **Jackson kernel** g_n = [(M − n + 1) cos(πn/(M+1)) + sin(πn/(M+1)) cot(π/(M+1))]/(M + 1).
4. **Density** per degree of freedom ρ(x) = [g_0μ_0 + 2Σ_{n≥1} g_n μ_n T_n(x)] / (π√(1 − x²)),
   x = (λ − c)/h, then ρ(λ) = ρ(x)/h and D(f) = ρ(λ)|dλ/df| in the reported frequency f; ∫D(f) df = 1.
5. **Counts**: with θ = arccos x, the fraction of modes below x is
   F(x) = g_0μ_0(π − θ)/π − (2/π) Σ_{n≥1} g_n μ_n sin(nθ)/n  (exact integral of the damped series).
6. **Resolution**: the damped series turns δ(x − a) into a peak of variance
   σ²(a) = ½[1 + g_2(2a² − 1)] − g_1²a² (from ∫T_m ρ dx = g_m μ_m; ≈ (π/M)²(1 − a²) for large M).
7. **Error bars**: every quantity is computed per probe; its standard error is the spread over the R
   probes / √R.

Units: λ in energy/(length²·mass) of the store's units, frequencies in ``units.frequency_unit``.
"""

from __future__ import annotations

import contextlib
import functools
import time
from collections import deque
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.linalg import eigh_tridiagonal

from eigenfarm.analysis.sharded import ShardedDynamical
from eigenfarm.errors import ConvergenceError, InputError
from eigenfarm.farm.runner import runner_for
from eigenfarm.store import HessianStore, open_store
from eigenfarm.structure.units import UnitSystem

DEFAULT_MOMENTS = 512
DEFAULT_PROBES = 16
DEFAULT_LANCZOS_STEPS = 40
DEFAULT_MARGIN = 0.01


class BoundsExceeded(ConvergenceError):
    """A Chebyshev moment exceeded 1: the spectrum reaches outside the estimated bounds."""


@dataclass(frozen=True)
class SpectralBounds:
    """An interval [lo, hi] (energy/(length²·mass)) holding the spectrum of D, and how it was made:
    extreme Ritz values, their residual norms, the margin added on each side, Lanczos steps taken."""

    lo: float
    hi: float
    ritz: tuple[float, float]
    residual: tuple[float, float]
    margin: float
    steps: int

    def widened(self, factor: float) -> "SpectralBounds":
        """The same estimate with a margin ``factor`` times larger."""
        extra = (factor - 1) * self.margin
        return replace(self, lo=self.lo - extra, hi=self.hi + extra, margin=factor * self.margin)


def lanczos_bounds(op: ShardedDynamical, steps: int = DEFAULT_LANCZOS_STEPS, seed: int = 0,
                   margin: float = DEFAULT_MARGIN, progress=None) -> SpectralBounds:
    """Bounds of D's spectrum (see the module docstring, item 1) from ``steps`` Lanczos steps
    (fewer on breakdown) without reorthogonalisation; the start vector is Rademacher, stream 1 of ``seed``."""
    w = op.random(1, seed, stream=1)
    scale, beta, previous = 1.0 / np.sqrt(op.n_dof), 0.0, None
    alphas, betas = [], []
    limit = min(steps, op.n_dof)
    for j in range(limit):
        terms = [] if previous is None else [(-beta * previous[1], previous[0])]
        u = op.combine(scale, w, terms)  # D v_j − β_j v_{j−1}, v_j = scale·w
        alphas.append(scale * op.dots([(w, u)])[0, 0])
        w_next = op.combine(0.0, None, [(1.0, u), (-alphas[-1] * scale, w)])
        beta = float(np.sqrt(max(op.dots([(w_next, w_next)])[0, 0], 0.0)))
        betas.append(beta)
        op.release(u, *([] if previous is None else [previous[0]]))
        previous, w = (w, scale), w_next
        if beta <= 1e-12 * max(np.abs(alphas).max(), 1e-300):
            break  # invariant subspace: the Ritz values are eigenvalues
        scale = 1.0 / beta
        if progress:
            progress("spectral bounds", j + 1, limit)
    if progress:
        progress("spectral bounds", limit, limit)
    op.release(w, previous[0])
    theta, S = eigh_tridiagonal(np.array(alphas), np.array(betas[:-1]))
    residual = betas[-1] * np.abs(S[-1, [0, -1]])
    pad = margin * (theta[-1] - theta[0]) + 1e-9 * np.abs(theta).max()
    if not pad > 0:
        raise InputError("the dynamical matrix is zero: there is no spectrum to estimate")
    return SpectralBounds(float(theta[0] - residual[0] - pad), float(theta[-1] + residual[1] + pad),
                          (float(theta[0]), float(theta[-1])), (float(residual[0]), float(residual[1])),
                          float(pad), len(alphas))


def chebyshev_moments(op: ShardedDynamical, lo: float, hi: float, n_moments: int, n_probes: int,
                      seed: int = 0, progress=None, start: list | None = None) -> np.ndarray:
    """(n_moments, n_probes) per-probe moments μ_n^r of D scaled from [lo, hi] to [−1, 1] (module
    docstring, item 2); probes are Rademacher, stream 0 of ``seed``, divided by 3N — or the unit columns
    of the blocked vector ``start`` (then μ_n is ⟨w, T_n w⟩ itself, the spectral measure of each column
    w).  Raises :class:`BoundsExceeded`."""
    c, h = (hi + lo) / 2, (hi - lo) / 2
    steps = n_moments // 2
    mu = np.zeros((2 * steps + 1, n_probes))
    previous = op.random(n_probes, seed, stream=0) if start is None else start
    norm = op.n_dof if start is None else 1.0
    current = op.combine(1 / h, previous, [(-c / h, previous)])
    d = op.dots([(previous, previous), (current, previous), (current, current)]) / norm
    mu[0], mu[1], mu[2] = d[0], d[1], 2 * d[2] - d[0]
    if progress:
        progress("Chebyshev moments", 1, steps)
    pending = deque()  # (n, inner-product tasks) submitted, not yet collected

    def collect():
        n, tasks = pending.popleft()
        d = op.collect(tasks) / norm
        mu[2 * n], mu[2 * n - 1] = 2 * d[0] - mu[0], 2 * d[1] - mu[1]
        if progress:
            progress("Chebyshev moments", n, steps)

    for n in range(2, steps + 1):
        following = op.combine(2 / h, current, [(-2 * c / h, current), (-1.0, previous)])
        pending.append((n, op.submit_dots([(following, following), (following, current)])))
        while len(pending) > op.lookahead:
            collect()
        op.release(previous)  # its last consumer has run (in process) or holds it until it has (dask)
        previous, current = current, following
    while pending:
        collect()
    op.release(previous, current)
    worst = float(np.abs(mu).max())
    if not worst <= 1 + 1e-6:
        raise BoundsExceeded(f"Chebyshev moment of size {worst:.3g} > 1: the spectrum of D reaches "
                             f"outside the estimated bounds [{lo:.6g}, {hi:.6g}]")
    return mu[:n_moments]


def jackson(n_moments: int) -> np.ndarray:
    """Jackson damping factors g_n, n = 0 … n_moments − 1 (module docstring, item 3)."""
    phi = np.pi / (n_moments + 1)
    n = np.arange(n_moments)
    return ((n_moments - n + 1) * np.cos(phi * n) + np.sin(phi * n) / np.tan(phi)) / (n_moments + 1)


@dataclass
class DensityEstimate:
    """A KPM estimate of D's spectrum: per-probe moments (M, R), the bounds used, 3N, the store's units.

    Frequencies f are signed (negative for λ < 0) in ``units.frequency_unit``; densities are per degree
    of freedom per frequency unit; counts are numbers of the 3N eigenvalues.  Methods take f as a scalar
    or array and return arrays of its shape: (estimate, standard error).
    """

    probe_moments: np.ndarray
    bounds: SpectralBounds
    n_dof: int
    units: UnitSystem
    seed: int
    store: dict = field(default_factory=dict)
    seconds: dict = field(default_factory=dict)

    @property
    def n_moments(self) -> int:
        return self.probe_moments.shape[0]

    @property
    def n_probes(self) -> int:
        return self.probe_moments.shape[1]

    @functools.cached_property
    def kernel(self) -> np.ndarray:
        """(M,) Jackson factors."""
        return jackson(self.n_moments)

    @property
    def _scale(self) -> tuple[float, float]:
        return (self.bounds.hi + self.bounds.lo) / 2, (self.bounds.hi - self.bounds.lo) / 2

    def frequency_range(self) -> tuple[float, float]:
        """Frequencies of the bounds, (f(lo), f(hi))."""
        return float(self.units.frequency(self.bounds.lo)), float(self.units.frequency(self.bounds.hi))

    def grid(self, points: int) -> np.ndarray:
        """(points,) frequencies: midpoints of ``points`` equal bins spanning :meth:`frequency_range`."""
        lo, hi = self.frequency_range()
        return lo + (np.arange(points) + 0.5) * (hi - lo) / points

    def _angle(self, frequency) -> np.ndarray:
        c, h = self._scale
        return np.arccos(np.clip((self.units.eigenvalue(frequency) - c) / h, -1.0, 1.0))

    def _mean(self, per_probe: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return per_probe.mean(axis=-1), per_probe.std(axis=-1, ddof=1) / np.sqrt(self.n_probes)

    def density(self, frequency) -> tuple[np.ndarray, np.ndarray]:
        """D(f) per degree of freedom per frequency unit, and its standard error."""
        f = np.asarray(frequency, dtype=float)
        theta = self._angle(f)
        n = np.arange(self.n_moments)
        weights = self.kernel[:, None] * self.probe_moments * np.where(n == 0, 1.0, 2.0)[:, None]
        series = np.cos(theta[..., None] * n) @ weights  # (..., R)
        inside = (theta > 0) & (theta < np.pi)
        jacobian = 2 * np.abs(f) / self.units.frequency_factor**2 / self._scale[1]  # dx/dλ · |dλ/df|
        factor = np.where(inside, jacobian / (np.pi * np.sin(np.where(inside, theta, 1.0))), 0.0)
        return self._mean(series * factor[..., None])

    def modes_below(self, frequency) -> tuple[np.ndarray, np.ndarray]:
        """Number of eigenvalues with frequency below f, and its standard error."""
        theta = self._angle(np.asarray(frequency, dtype=float))[..., None]
        n = np.arange(1, self.n_moments)
        g, mu = self.kernel, self.probe_moments
        fraction = (g[0] * mu[0] * (np.pi - theta) - 2 * (np.sin(theta * n) / n) @ (g[1:, None] * mu[1:])) / np.pi
        return self._mean(self.n_dof * fraction)

    def count(self, f1: float, f2: float) -> tuple[float, float]:
        """Number of eigenvalues with f1 < f ≤ f2, and its standard error."""
        theta = self._angle(np.array([f1, f2]))[:, None]
        n = np.arange(1, self.n_moments)
        g, mu = self.kernel, self.probe_moments
        between = g[0] * mu[0] * (theta[0] - theta[1]) + 2 * ((np.sin(theta[0] * n) - np.sin(theta[1] * n)) / n) @ (
            g[1:, None] * mu[1:])
        value, error = self._mean(self.n_dof * between / np.pi)
        return float(value), float(error)

    def resolution(self, frequency) -> tuple[np.ndarray, np.ndarray]:
        """Kernel width at f: σ_λ (energy/(length²·mass)) and the corresponding frequency width
        σ_f = |f(λ + σ_λ) − f(λ − σ_λ)|/2 (module docstring, item 6)."""
        c, h = self._scale
        lam = self.units.eigenvalue(np.asarray(frequency, dtype=float))
        x = np.clip((lam - c) / h, -1.0, 1.0)
        g1, g2 = self.kernel[1], self.kernel[2]
        sigma = h * np.sqrt(np.maximum(0.5 * (1 + g2 * (2 * x**2 - 1)) - (g1 * x) ** 2, 0.0))
        width = np.abs(self.units.frequency(lam + sigma) - self.units.frequency(lam - sigma)) / 2
        return sigma, width


def check_settings(moments: int, probes: int) -> None:
    """:class:`InputError` unless there are at least 2 moments and 2 probes."""
    if moments < 2 or probes < 2:
        raise InputError(f"need at least 2 moments and 2 probes (got {moments} and {probes}); "
                         "the error bars come from the spread over probes")


def _require_valid(store: HessianStore) -> None:
    if not store.validation.get("passed"):
        raise InputError(f"{store.path}: failed validation; see 'eigenfarm hessian {store.path}' for the verdict")


def estimate_density(store, moments: int = DEFAULT_MOMENTS, probes: int = DEFAULT_PROBES, seed: int = 0,
                     client=None, progress=None, *, lanczos_steps: int = DEFAULT_LANCZOS_STEPS,
                     margin: float = DEFAULT_MARGIN, cache_bytes: int | None = None) -> DensityEstimate:
    """KPM density of states of the Hessian store ``store`` (path or :class:`HessianStore`).

    ``moments`` M ≥ 2 Chebyshev moments from ``probes`` R ≥ 2 Rademacher vectors drawn from ``seed``;
    products D·X (X of shape (3N, R)) stream the store's shards on ``client`` (None: in this process),
    one task per shard, with each worker caching its shards' rows up to ``cache_bytes`` (None: a quarter
    of its memory limit).  ``progress(stage, done, total)`` reports "read shards", "spectral bounds" and
    "Chebyshev moments".  The result does not depend on the client or the number of workers.
    """
    check_settings(moments, probes)
    store = store if isinstance(store, HessianStore) else open_store(store)
    _require_valid(store)
    seconds, started = {}, time.perf_counter()
    op = ShardedDynamical(store, runner_for(client), cache_bytes, progress)
    try:
        seconds["read shards"] = time.perf_counter() - started
        bounds = lanczos_bounds(op, lanczos_steps, seed, margin, progress)
        seconds["spectral bounds"] = time.perf_counter() - started - sum(seconds.values())
        try:
            mu = chebyshev_moments(op, bounds.lo, bounds.hi, moments, probes, seed, progress)
        except BoundsExceeded:
            bounds = bounds.widened(10.0)
            mu = chebyshev_moments(op, bounds.lo, bounds.hi, moments, probes, seed, progress)
        seconds["Chebyshev moments"] = time.perf_counter() - started - sum(seconds.values())
    except BaseException:
        with contextlib.suppress(Exception):
            op.close()
        raise
    op.close()
    info = {"path": str(store.path), "digest": store.digest, "n_atoms": store.n_atoms, "n_shards": store.n_shards}
    return DensityEstimate(mu, bounds, op.n_dof, store.units, seed, info, seconds)


def plane_wave_moments(store: HessianStore, block: np.ndarray, moments: int, client=None,
                       *, lanczos_steps: int = DEFAULT_LANCZOS_STEPS) -> tuple[np.ndarray, SpectralBounds]:
    """(moments, columns) Chebyshev moments ⟨w, T_n(D̃) w⟩ of the unit columns w of ``block`` (3N, c), in
    the store's atom order, and the bounds used — the spectral measure of given vectors (used to place
    plane-wave bands, :mod:`eigenfarm.analysis.wavebands`)."""
    runner = runner_for(client)
    op = ShardedDynamical(store, runner)
    try:
        bounds = lanczos_bounds(op, lanczos_steps)
        rows = 3 * np.asarray(op.bounds)
        start = [runner.scatter(np.ascontiguousarray(block[a:b])) for a, b in zip(rows[:-1], rows[1:])]
        try:
            mu = chebyshev_moments(op, bounds.lo, bounds.hi, moments, block.shape[1], start=start)
        except BoundsExceeded:
            bounds = bounds.widened(10.0)
            mu = chebyshev_moments(op, bounds.lo, bounds.hi, moments, block.shape[1], start=start)
    finally:
        op.close()
    return mu, bounds

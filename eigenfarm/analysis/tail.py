"""Binning-free fit of the low-frequency tail D(f) = A f^β of a glass's vibrational spectrum, with intervals.

Sample s (an independent glass with n_dof_s = 3 N_s degrees of freedom) contributes its mode frequencies
in (f_lo, f_c,s], treated as a Poisson process of intensity n_dof_s · A · f^β (D per degree of freedom).
With a = β + 1, n modes in all and Z(β) = Σ_s n_dof_s (f_c,s^a − f_lo^a) / a, the log-likelihood is
ℓ(A, β) = n ln A + β Σ_i ln f_i − A Z(β) + const, maximised in A by Â(β) = n / Z(β).  The profile
ℓ_p(β) = β Σ ln f_i − n ln Z(β) + const is concave (ln Z is a log-moment generating function), so β̂ is
the root of a rising score, found by bracketed Newton steps on β ∈ (−1, 60) for all bootstrap replicates
at once.  Derivations, intervals and caveats: docs/tail-fit.md.

Units: frequencies in the catalogue's reported unit f (THz for metal units, ω for reduced units);
β is dimensionless; A is in dof⁻¹ · f^−(β+1).

Example::

    fit = fit_tail([f1, f2, f3], n_dof=[3000, 3000, 6000], cutoffs=0.4, f_lo=0.0)
    fit.exponent.value, fit.exponent.profile, fit.fixed_prefactor.value
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field, replace
from typing import NamedTuple, Sequence

import numpy as np
from scipy import special, stats

from eigenfarm.errors import InputError

MIN_TAIL_MODES = 5
"""Fewest modes (all samples together) inside the fit range for a fit to be attempted."""
FEW_SAMPLES = 20
"""Below this many samples the bootstrap interval is reported but flagged unreliable (docs/tail-fit.md)."""
EXPONENT_RANGE = (-1.0, 60.0)
"""β is searched in this open bracket; a maximum at its edge is reported, not hidden."""

_A_LO, _A_HI = 1e-6, EXPONENT_RANGE[1] + 1.0  # the bracket for a = β + 1
_BISECTIONS, _MAX_STEPS, _GRID = 60, 200, 257


@dataclass(frozen=True)
class TailData:
    """Validated input: per sample, the modes inside (f_lo, cutoff] (unit f), its dof count and cutoff."""

    frequencies: tuple[np.ndarray, ...]  # sorted, unit f
    n_dof: np.ndarray  # (S,) integers, 3 N_s
    cutoffs: np.ndarray  # (S,) unit f
    f_lo: float  # unit f

    @property
    def n_samples(self) -> int:
        return len(self.frequencies)

    @property
    def modes_per_sample(self) -> tuple[int, ...]:
        return tuple(len(f) for f in self.frequencies)


@dataclass(frozen=True)
class Estimate:
    """A fitted value with its profile-likelihood interval and, from ≥ 2 samples, a bootstrap interval."""

    value: float
    profile: tuple[float, float]
    bootstrap: tuple[float, float] | None = None


@dataclass(frozen=True)
class LowestModeCheck:
    """Each sample's lowest mode against the pure-tail prediction P(f_min > x).

    ``grid`` (G,) runs from f_lo to the smallest cutoff (unit f); ``predicted`` (G,) is the survival
    averaged over samples, ``observed`` (G,) the fraction of samples whose lowest mode lies above x.
    The KS test compares F_s(f_min,s) / F_s(f_c,s) (uniform under the model, F_s = 1 − survival) for
    the ``n_tested`` samples that have a mode in range; its p-value is approximate (A and β were
    fitted to the same modes, which makes it conservative).
    """

    grid: np.ndarray
    predicted: np.ndarray
    observed: np.ndarray
    ks_statistic: float
    ks_pvalue: float
    n_tested: int


@dataclass(frozen=True)
class TailFit:
    """Everything a report prints about one tail fit.  ``prefactor`` is A with β fitted, in
    dof⁻¹·f^−(β̂+1); ``fixed_prefactor`` is A with β held at ``fixed_exponent``; ``n_modes`` counts
    the modes in the fit range over all samples."""

    exponent: Estimate
    prefactor: Estimate
    fixed_exponent: float
    fixed_prefactor: Estimate
    lowest: LowestModeCheck
    n_modes: int
    modes_per_sample: tuple[int, ...]
    n_dof: tuple[int, ...]
    cutoffs: tuple[float, ...]
    f_lo: float
    unit: str
    confidence: float
    n_boot: int
    seed: int
    bootstrap_reliable: bool
    notes: tuple[str, ...] = ()
    methods: dict[str, str] = field(default_factory=dict)

    @property
    def n_samples(self) -> int:
        return len(self.modes_per_sample)

    def to_dict(self) -> dict:
        """Plain JSON-ready values (floats, ints, strings, lists, None)."""
        plain = json.dumps({**asdict(self), "n_samples": self.n_samples}, default=lambda v: v.tolist())
        return json.loads(plain)


def select_tail(frequencies: Sequence[np.ndarray], n_dof, cutoffs, f_lo: float = 0.0) -> TailData:
    """Check per-sample input and keep each sample's modes in (f_lo, cutoff_s].

    ``frequencies``: one 1-D array per sample (unit f); ``n_dof``: 3 N_s per sample, or one integer for
    all; ``cutoffs``: f_c,s per sample or one value for all (unit f); ``f_lo`` ≥ 0 (unit f).  Modes above
    a cutoff or at/below f_lo are left out; frequencies ≤ 0 with f_lo = 0 (zero or unstable modes) are
    refused, as is a fit range holding fewer than :data:`MIN_TAIL_MODES` modes.
    """
    arrays = [np.asarray(f, dtype=float) for f in frequencies]
    n, f_lo = len(arrays), float(f_lo)
    if n == 0:
        raise InputError("tail fit: no samples given")
    if not np.isfinite(f_lo) or f_lo < 0:
        raise InputError(f"tail fit: f_lo must be finite and ≥ 0, got {f_lo}")
    dof, cuts = _per_sample(n_dof, n, "n_dof"), _per_sample(cutoffs, n, "cutoffs")
    if np.any(dof <= 0) or np.any(dof != np.round(dof)):
        raise InputError(f"tail fit: n_dof must be positive integers, got {dof.tolist()}")
    for s, (f, c) in enumerate(zip(arrays, cuts)):
        _check_sample(s, f, c, f_lo)
    kept = tuple(np.sort(f[(f > f_lo) & (f <= c)]) for f, c in zip(arrays, cuts))
    total = sum(len(f) for f in kept)
    if total < MIN_TAIL_MODES:
        shown = ", ".join(f"{c:g}" for c in np.unique(cuts))
        raise InputError(f"tail fit: only {total} modes lie in ({f_lo:g}, f_c] with cutoffs f_c = {shown} "
                         f"over {n} samples; at least {MIN_TAIL_MODES} are needed (raise the cutoffs or "
                         "add samples)")
    return TailData(kept, dof.astype(np.int64), cuts, f_lo)


def fit_tail(frequencies: Sequence[np.ndarray], n_dof, cutoffs, f_lo: float = 0.0, *,
             fixed_exponent: float = 4.0, confidence: float = 0.95, n_boot: int = 2000,
             seed: int = 0, unit: str = "") -> TailFit:
    """Fit β and A of D(f) = A f^β (per dof) to the modes below each sample's cutoff.

    Inputs as in :func:`select_tail` (frequencies in unit f; ``unit`` only labels the result).  Intervals
    at ``confidence``: profile likelihood (Wilks, χ²₁) always; percentile bootstrap over whole samples
    (``n_boot`` replicates, ``seed``) when there are ≥ 2 samples and ``n_boot`` > 0.  Also fits A with β
    held at ``fixed_exponent`` and compares each sample's lowest mode with the fitted tail.
    """
    data, point, drop = _prepare(frequencies, n_dof, cutoffs, f_lo, confidence, n_boot, fixed_exponent)
    exponent, prefactor, notes = _fitted(point, drop)
    fixed = _fixed_estimate(point, fixed_exponent + 1, drop)
    draws = _draws(data, n_boot, seed)
    if draws is not None:
        a = _fit_a(draws)
        values = (a - 1, np.exp(_log_prefactor(a, draws)),
                  np.exp(_log_prefactor(np.full(len(a), fixed_exponent + 1), draws)))
        exponent, prefactor, fixed = (replace(e, bootstrap=_percentiles(v, confidence))
                                      for e, v in zip((exponent, prefactor, fixed), values))
        notes += _bootstrap_notes(a, data.n_samples)
    notes.append("lowest-mode KS p-value is approximate: A and β were fitted to the same modes")
    return TailFit(exponent, prefactor, float(fixed_exponent), fixed,
                   check_lowest_modes(data, exponent.value, prefactor.value), int(point.n[0]),
                   data.modes_per_sample, tuple(int(d) for d in data.n_dof),
                   tuple(float(c) for c in data.cutoffs), data.f_lo, unit, confidence, n_boot, seed,
                   draws is not None and data.n_samples >= FEW_SAMPLES, tuple(notes),
                   _methods(confidence, 0 if draws is None else n_boot, seed))


def fit_prefactor(frequencies: Sequence[np.ndarray], n_dof, cutoffs, f_lo: float = 0.0, *,
                  exponent: float = 4.0, confidence: float = 0.95, n_boot: int = 2000,
                  seed: int = 0) -> Estimate:
    """A (dof⁻¹·f^−(β+1)) with β held at ``exponent``: Â = n (β+1) / Σ_s n_dof_s (f_c,s^(β+1) − f_lo^(β+1)).

    Same inputs and intervals as :func:`fit_tail` (the bootstrap uses the same resamples for a seed).
    """
    data, point, drop = _prepare(frequencies, n_dof, cutoffs, f_lo, confidence, n_boot, exponent)
    estimate = _fixed_estimate(point, exponent + 1, drop)
    draws = _draws(data, n_boot, seed)
    if draws is None:
        return estimate
    values = np.exp(_log_prefactor(np.full(len(draws.n), exponent + 1), draws))
    return replace(estimate, bootstrap=_percentiles(values, confidence))


def minimum_survival(x, n_dof, exponent: float, prefactor: float, f_lo: float = 0.0) -> np.ndarray:
    """P(f_min > x) = exp(−n_dof A (x^(β+1) − f_lo^(β+1)) / (β+1)) for x ≥ f_lo below the cutoff.

    ``x`` in unit f, ``prefactor`` A in dof⁻¹·f^−(β+1); ``x`` and ``n_dof`` broadcast together.
    """
    return np.exp(-_expected_count(x, n_dof, exponent, prefactor, f_lo))


def check_lowest_modes(data: TailData, exponent: float, prefactor: float,
                       n_grid: int = 200) -> LowestModeCheck:
    """Compare each sample's lowest mode in range with :func:`minimum_survival` (see LowestModeCheck)."""
    lowest = np.array([f[0] if len(f) else np.inf for f in data.frequencies])
    has, args = np.isfinite(lowest), (exponent, prefactor, data.f_lo)
    mass_at = -np.expm1(-_expected_count(lowest[has], data.n_dof[has], *args))
    mass_cut = -np.expm1(-_expected_count(data.cutoffs[has], data.n_dof[has], *args))
    ks = stats.kstest(mass_at / mass_cut, "uniform")
    grid = np.linspace(data.f_lo, data.cutoffs.min(), n_grid)
    predicted = minimum_survival(grid[:, None], data.n_dof[None, :], *args).mean(axis=1)
    observed = (lowest[None, :] > grid[:, None]).mean(axis=1)
    return LowestModeCheck(grid, predicted, observed, float(ks.statistic), float(ks.pvalue), int(has.sum()))


# --- input checks -------------------------------------------------------------------------------------

def _per_sample(value, n: int, name: str) -> np.ndarray:
    out = np.asarray(value, dtype=float)
    out = np.full(n, float(out)) if out.ndim == 0 else out
    if out.shape != (n,) or not np.all(np.isfinite(out)):
        raise InputError(f"tail fit: {name} needs {n} finite values (one per sample), got {out.tolist()}")
    return out


def _check_sample(s: int, f: np.ndarray, cut: float, f_lo: float) -> None:
    if f.ndim != 1:
        raise InputError(f"tail fit: sample {s}: frequencies must be a 1-D array, got shape {f.shape}")
    if not np.all(np.isfinite(f)):
        raise InputError(f"tail fit: sample {s}: {np.sum(~np.isfinite(f))} frequencies are NaN or infinite")
    if cut <= f_lo:
        raise InputError(f"tail fit: sample {s}: cutoff {cut:g} is not above f_lo = {f_lo:g}")
    if f_lo == 0 and np.any(f <= 0):
        raise InputError(f"tail fit: sample {s}: {np.sum(f <= 0)} frequencies ≤ 0 (zero or unstable "
                         "modes) lie in the fit range starting at f_lo = 0; remove them or raise f_lo")


def _prepare(frequencies, n_dof, cutoffs, f_lo, confidence, n_boot, exponent):
    """Validated data, the one-row pool of all its samples and the Wilks drop χ²₁(confidence) / 2."""
    if not 0 < confidence < 1:
        raise InputError(f"tail fit: confidence must lie in (0, 1), got {confidence}")
    if n_boot != 0 and n_boot < 100:
        raise InputError(f"tail fit: n_boot must be 0 (no bootstrap) or ≥ 100, got {n_boot}")
    if not EXPONENT_RANGE[0] < exponent < EXPONENT_RANGE[1]:
        raise InputError(f"tail fit: a fixed exponent must lie in {EXPONENT_RANGE}, got {exponent}")
    data = select_tail(frequencies, n_dof, cutoffs, f_lo)
    return data, _pool(data, np.ones((1, data.n_samples))), stats.chi2.ppf(confidence, 1) / 2


# --- likelihood -------------------------------------------------------------------------------------

class _Pool(NamedTuple):
    """B (re)samples pooled, frequencies divided by ``scale`` (the largest cutoff): mode counts n (B,),
    Σ ln(f / scale) (B,), dof per distinct cutoff (B, U), the distinct cutoffs (U,) and f_lo, scaled."""

    n: np.ndarray
    logsum: np.ndarray
    weights: np.ndarray
    cuts: np.ndarray
    lo: float
    scale: float


def _pool(data: TailData, multiplicity: np.ndarray) -> _Pool:
    """Pool samples taken with multiplicities (B, S): ones for the data, resample counts for the bootstrap."""
    scale = float(data.cutoffs.max())
    cuts, column = np.unique(data.cutoffs / scale, return_inverse=True)
    exposure = np.zeros((data.n_samples, len(cuts)))
    exposure[np.arange(data.n_samples), column] = data.n_dof
    logsums = np.array([np.log(f / scale).sum() for f in data.frequencies])
    return _Pool(multiplicity @ np.array(data.modes_per_sample, dtype=float), multiplicity @ logsums,
                 multiplicity @ exposure, cuts, data.f_lo / scale, scale)


def _moments(a: np.ndarray, pool: _Pool) -> tuple[np.ndarray, ...]:
    """Z(a) = Σ_u w_u (c_u^a − lo^a) / a and its first two a-derivatives, for a (G,) and a pool of G rows
    or one; scaled units.  From a T = c^a − lo^a: T' = (c^a ln c − lo^a ln lo − T) / a and
    T'' = (c^a ln²c − lo^a ln²lo − 2 T') / a."""
    a = np.asarray(a, dtype=float)[:, None]
    at_cut, at_lo = pool.cuts**a, pool.lo**a
    log_cut, log_lo = np.log(pool.cuts), (np.log(pool.lo) if pool.lo > 0 else 0.0)
    terms = (at_cut - at_lo) / a
    slopes = (at_cut * log_cut - at_lo * log_lo - terms) / a
    bends = (at_cut * log_cut**2 - at_lo * log_lo**2 - 2 * slopes) / a
    return tuple((pool.weights * t).sum(axis=1) for t in (terms, slopes, bends))


def _fit_a(pool: _Pool) -> np.ndarray:
    """â = β̂ + 1 per pooled row (NaN without modes), by Newton steps kept inside a shrinking bracket.

    The score Z'/Z − mean ln f_i is E_a[ln f] − mean ln f_i under the density ∝ f^β on the fit range,
    which rises with a (its slope is Var_a[ln f]); a Newton step leaving the bracket is replaced by
    the bracket's midpoint, so a maximum at the bracket's edge is approached by bisection.
    """
    low, high, a = (np.full(pool.n.shape, v) for v in (_A_LO, _A_HI, 5.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_log = pool.logsum / pool.n
        for _ in range(_MAX_STEPS):
            z, dz, d2z = _moments(a, pool)
            score, slope = dz / z - mean_log, d2z / z - (dz / z) ** 2
            low, high = np.where(score < 0, a, low), np.where(score > 0, a, high)
            step = a - score / slope
            step = np.where((step > low) & (step < high), step, 0.5 * (low + high))
            done, a = np.all(np.abs(step - a) <= 1e-13 * a), step
            if done:
                break
    return np.where(pool.n > 0, a, np.nan)


def _at_edge(a) -> np.ndarray:
    return (np.abs(a - _A_LO) < 1e-9) | (np.abs(a - _A_HI) < 1e-9)


def _profile(a: np.ndarray, pool: _Pool) -> np.ndarray:
    """ℓ_p(β) = ℓ(Â(β), β) up to a constant, for a = β + 1 (G,) and a one-row pool."""
    z = _moments(a, pool)[0]
    return (a - 1) * pool.logsum - pool.n * np.log(z) + pool.n * (np.log(pool.n) - 1)


def _log_prefactor(a: np.ndarray, pool: _Pool) -> np.ndarray:
    """ln Â(β) in dof⁻¹·f^−a (unit f, not scaled): ln(n / Z(a)) − a ln scale; −∞ for a row without
    modes, NaN where a is NaN."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(pool.n / _moments(a, pool)[0]) - a * np.log(pool.scale)


# --- intervals ---------------------------------------------------------------------------------------

def _fitted(point: _Pool, drop: float) -> tuple[Estimate, Estimate, list[str]]:
    """β̂ and Â (unit f) with their profile intervals; refuses a maximum at the edge of the search."""
    a_hat = _fit_a(point)[0]
    if _at_edge(a_hat):
        raise InputError(f"tail fit: the likelihood is largest at the edge of β ∈ {EXPONENT_RANGE} "
                         f"(β → {a_hat - 1:.3g}); the {point.n[0]:g} modes do not follow a power law there")
    a_ends, notes = _exponent_profile(a_hat, point, drop)
    exponent = Estimate(float(a_hat - 1), (float(a_ends[0] - 1), float(a_ends[1] - 1)))
    prefactor = Estimate(float(np.exp(_log_prefactor(np.array([a_hat]), point)[0])),
                         _prefactor_profile(a_ends, a_hat, point, drop))
    return exponent, prefactor, notes


def _exponent_profile(a_hat: float, pool: _Pool, drop: float) -> tuple[np.ndarray, list[str]]:
    """a where ℓ_p falls ``drop`` below its maximum, left and right of â (by bisection, as ℓ_p is
    concave); the bracket's edge where it never does, with a note."""
    floor = _profile(np.array([a_hat]), pool)[0] - drop
    left, right = np.array([_A_LO, a_hat]), np.array([a_hat, _A_HI])
    to_right = np.array([False, True])
    for _ in range(_BISECTIONS):
        mid = 0.5 * (left + right)
        past = (_profile(mid, pool) >= floor) != to_right  # the crossing lies below mid
        left, right = np.where(past, left, mid), np.where(past, mid, right)
    open_ends = _profile(np.array([_A_LO, _A_HI]), pool) >= floor
    notes = [f"profile interval of β reaches the search edge β = {e - 1:g}"
             for e, is_open in zip((_A_LO, _A_HI), open_ends) if is_open]
    return 0.5 * (left + right), notes


def _wilks_ratios(excess: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The roots y_low ≤ 1 ≤ y_high of y − 1 − ln y = excess ≥ 0 (Lambert W branches 0 and −1).

    Next to the branch point (excess < 1e-10) the series y = 1 ∓ √(2 excess) replaces W, which
    loses accuracy there and fails at −1/e itself.
    """
    arg = -np.exp(-1.0 - np.maximum(excess, 1e-10))
    low, high = -special.lambertw(arg, 0).real, -special.lambertw(arg, -1).real
    near, step = excess < 1e-10, np.sqrt(2 * excess)
    return np.where(near, 1 - step, low), np.where(near, 1 + step, high)


def _prefactor_profile(a_ends, a_hat, pool: _Pool, drop: float) -> tuple[float, float]:
    """Profile interval of A (unit f) with β free: the projection of {2(ℓ̂ − ℓ(A, β)) ≤ q} onto A.

    At fixed a the section is A = y Â(a) with y − 1 − ln y = (ℓ_p(a) − ℓ̂ + drop) / n; its ends are
    extremised over a inside the profile interval of β.
    """
    floor = _profile(np.array([a_hat]), pool)[0] - drop

    def ends(a, which):
        ratio = _wilks_ratios(np.maximum(_profile(a, pool) - floor, 0.0) / pool.n)[which]
        return _log_prefactor(a, pool) + np.log(ratio)

    return (float(np.exp(-_largest(lambda a: -ends(a, 0), *a_ends))),
            float(np.exp(_largest(lambda a: ends(a, 1), *a_ends))))


def _largest(fn, lo: float, hi: float) -> float:
    """Maximum of a smooth function on [lo, hi] by a grid refined once around its best point."""
    for _ in range(2):
        x = np.linspace(lo, hi, _GRID)
        values = fn(x)
        k = int(np.argmax(values))
        lo, hi = x[max(k - 1, 0)], x[min(k + 1, _GRID - 1)]
    return float(values[k])


def _fixed_estimate(pool: _Pool, a: float, drop: float) -> Estimate:
    """Â at fixed β = a − 1, with its profile interval y Â, y − 1 − ln y = drop / n."""
    value = float(np.exp(_log_prefactor(np.array([a]), pool)[0]))
    low, high = _wilks_ratios(np.array([drop]) / pool.n)
    return Estimate(value, (value * float(low[0]), value * float(high[0])))


def _draws(data: TailData, n_boot: int, seed: int) -> _Pool | None:
    """Pooled resamples of whole samples with replacement (None with one sample or n_boot = 0)."""
    n = data.n_samples
    if n < 2 or n_boot == 0:
        return None
    picks = np.random.default_rng(seed).integers(0, n, size=(n_boot, n)) + n * np.arange(n_boot)[:, None]
    return _pool(data, np.bincount(picks.ravel(), minlength=n_boot * n).reshape(n_boot, n).astype(float))


def _bootstrap_notes(a: np.ndarray, n_samples: int) -> list[str]:
    notes = []
    if n_samples < FEW_SAMPLES:
        notes.append(f"bootstrap over {n_samples} samples (< {FEW_SAMPLES}): interval unreliable")
    if np.isnan(a).any():
        notes.append(f"{int(np.isnan(a).sum())} of {len(a)} bootstrap replicates drew no modes; "
                     "left out of the intervals of β and A")
    if _at_edge(a).any():
        notes.append(f"{int(_at_edge(a).sum())} bootstrap replicates put β at the edge of {EXPONENT_RANGE}")
    return notes


def _percentiles(values: np.ndarray, confidence: float) -> tuple[float, float]:
    low, high = np.nanpercentile(values, [50 * (1 - confidence), 50 * (1 + confidence)])
    return float(low), float(high)


# --- lowest modes and method strings ------------------------------------------------------------------

def _expected_count(x, n_dof, exponent: float, prefactor: float, f_lo: float) -> np.ndarray:
    """n_dof A (x^a − f_lo^a) / a: the expected number of modes in (f_lo, x], a = β + 1."""
    a = exponent + 1
    return np.asarray(n_dof) * prefactor * (np.asarray(x, dtype=float) ** a - f_lo**a) / a


def _methods(confidence: float, n_boot: int, seed: int) -> dict[str, str]:
    level = f"{100 * confidence:g} %"
    return {
        "fit": "maximum likelihood for a Poisson process of intensity n_dof·A·f^β on (f_lo, f_c] per "
               f"sample; β from the concave profile likelihood, Newton steps in the bracket {EXPONENT_RANGE}",
        "profile": f"{level} likelihood-ratio interval, 2Δℓ ≤ χ²₁ quantile (Wilks); A with β free: "
                   "projection of the joint region",
        "bootstrap": (f"{level} percentile interval from {n_boot} resamples of whole samples with "
                      f"replacement, seed {seed}") if n_boot else "not computed (one sample or n_boot = 0)",
        "lowest": "KS test of each sample's lowest mode against the fitted tail's survival "
                  "exp(−n_dof·A·(x^(β+1) − f_lo^(β+1))/(β+1)), given at least one mode in range",
    }

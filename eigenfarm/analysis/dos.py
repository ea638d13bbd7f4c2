"""Density of states from mode catalogues: histograms, the reduced DOS and the cumulative count.

Normalisation: per degree of freedom.  A sample of N atoms has 3N modes; its D(f) counts modes per unit
of the reported frequency f divided by 3N, so that ∫D df = 1 over the whole spectrum.  A catalogue holds
only part of the spectrum, so each D(f) is given only where every sample's catalogue is complete
(``ModeTable.covered``).  The trivial zero modes (3 for a periodic cell) are never in a catalogue; they
and any negative modes are counted separately and stated next to the numbers.

The ensemble D(f) is the mean of the samples' D(f); its error is the standard error of that mean over
samples (none for one sample).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.analysis.scan import ModeTable
from eigenfarm.errors import InputError


@dataclass(frozen=True)
class Histogram:
    """``edges`` (B+1,) reported frequency; ``density`` (B,) ensemble-mean D per dof per frequency unit;
    ``error`` (B,) standard error over samples (NaN for one sample); ``counts`` (B,) modes of all samples;
    ``binning`` "linear" or "log"."""

    edges: np.ndarray
    density: np.ndarray
    error: np.ndarray
    counts: np.ndarray
    binning: str

    @property
    def centres(self) -> np.ndarray:
        """Bin centres (B,): arithmetic for linear, geometric for log binning."""
        if self.binning == "log":
            return np.sqrt(self.edges[1:] * self.edges[:-1])
        return 0.5 * (self.edges[1:] + self.edges[:-1])

    @property
    def reduced(self) -> tuple[np.ndarray, np.ndarray]:
        """The reduced DOS D(f)/f² and its error (B,) at :attr:`centres`."""
        f2 = self.centres**2
        return self.density / f2, self.error / f2


def common_range(tables: list[ModeTable]) -> tuple[float, float]:
    """The frequency range (lo, hi] every catalogue covers completely."""
    lo = max(max(t.covered[0], 0.0) for t in tables)
    hi = min(t.covered[1] for t in tables)
    if not hi > lo:
        raise InputError("the catalogues share no complete frequency range: "
                         + ", ".join(f"{t.path} ({t.covered[0]:.4g}, {t.covered[1]:.4g}]" for t in tables))
    return lo, hi


def _positive(table: ModeTable, lo: float, hi: float) -> np.ndarray:
    f = table.frequency
    return f[(f > lo) & (f <= hi)]


def bin_edges(tables: list[ModeTable], bins: int, binning: str) -> np.ndarray:
    """``bins`` + 1 edges over the common range: equal widths, or equal ratios from just below the
    lowest positive frequency for ``binning="log"``."""
    lo, hi = common_range(tables)
    if binning == "linear":
        return np.linspace(lo, hi, bins + 1)
    if binning != "log":
        raise ValueError(f"binning must be 'linear' or 'log', got {binning!r}")
    lowest = min((f.min() for t in tables if len(f := _positive(t, lo, hi))), default=None)
    if lowest is None:
        raise InputError("no positive frequency inside the catalogues' common range")
    start = max(lo, 0.999 * lowest)
    return np.geomspace(start, hi, bins + 1)


def histogram(tables: list[ModeTable], bins: int = 30, binning: str = "linear") -> Histogram:
    """Ensemble DOS of ``tables`` (one per sample) in ``bins`` bins."""
    edges = bin_edges(tables, bins, binning)
    per_sample = np.array([np.histogram(_positive(t, edges[0], edges[-1]), edges)[0] for t in tables], float)
    dofs = np.array([t.n_dof for t in tables], float)
    density = per_sample / dofs[:, None] / np.diff(edges)[None, :]
    mean = density.mean(axis=0)
    error = density.std(axis=0, ddof=1) / np.sqrt(len(tables)) if len(tables) > 1 else np.full_like(mean, np.nan)
    return Histogram(edges, mean, error, per_sample.sum(axis=0).astype(int), binning)


def cumulative(tables: list[ModeTable]) -> tuple[np.ndarray, np.ndarray]:
    """(f, N(f)): the ensemble-mean count of modes at or below f per dof, as a step function evaluated at
    every catalogue frequency inside the common range (sorted, (K,) each).  Exact, no binning."""
    lo, hi = common_range(tables)
    pooled = np.sort(np.concatenate([_positive(t, lo, hi) for t in tables]))
    count = np.zeros(len(pooled))
    for t in tables:
        count += np.searchsorted(np.sort(_positive(t, lo, hi)), pooled, side="right") / t.n_dof
    return pooled, count / len(tables)

"""The report's plots (matplotlib, Agg backend), each saved as PNG and SVG.

Every function takes the :class:`~eigenfarm.analysis.ensemble.Analysis` and a path stem and returns the
stem's file name, or None when the data for that plot are absent (e.g. no tail fit).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from eigenfarm.analysis.ensemble import Analysis, SizeGroup  # noqa: E402
from eigenfarm.analysis.finite_size import size_table  # noqa: E402
from eigenfarm.analysis.phonons import BEYOND, LOCAL, MIXED, PHONON  # noqa: E402

CLASS_COLOURS = {PHONON: "tab:blue", LOCAL: "tab:red", MIXED: "tab:orange", BEYOND: "0.6"}


def _save(fig, stem: Path) -> str:
    fig.tight_layout()
    for suffix in (".png", ".svg"):
        fig.savefig(stem.with_suffix(suffix), dpi=130)
    plt.close(fig)
    return stem.name


def _finish(fig, ax, stem: Path, legend_size: int = 7, **settings) -> str:
    """Apply the axis ``settings`` (scales, labels, title), draw the legend and save both files."""
    ax.set(**settings)
    ax.legend(fontsize=legend_size)
    return _save(fig, stem)


def _label(group: SizeGroup) -> str:
    return f"N = {group.n_atoms} ({group.n_samples} sample{'s' if group.n_samples > 1 else ''})"


def _freq_label(analysis: Analysis) -> str:
    units = analysis.units
    return f"frequency ({units.frequency_unit})" if units.name == "metal" else f"ω ({units.frequency_unit})"


def dos_loglog(analysis: Analysis, stem: Path) -> str:
    """Log-binned D(f) per size with error bars, the fitted tail A f^β and the Debye level."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for index, group in enumerate(analysis.groups):
        colour = f"C{index}"
        hist = group.log
        shown = hist.density > 0
        ax.errorbar(hist.centres[shown], hist.density[shown], yerr=np.nan_to_num(hist.error[shown]), fmt="o",
                    ms=3.5, color=colour, label=_label(group))
        f = np.geomspace(hist.edges[0], hist.edges[-1], 100)
        if group.tail is not None:
            beta, a = group.tail.exponent.value, group.tail.prefactor.value
            below = f <= group.cutoff
            ax.plot(f[below], a * f[below] ** beta, "-", color=colour,
                    label=f"tail fit β = {beta:.2f} (f ≤ {group.cutoff:.3g})")
        if group.speeds is not None and group.speeds.debye_frequency is not None:
            ax.plot(f, group.speeds.debye_density(f), "--", color=colour, lw=1, label="Debye 3f²/f_D³")
    return _finish(fig, ax, stem, xscale="log", yscale="log", xlabel=_freq_label(analysis), ylabel="D(f) per dof",
                   title="Density of states (harmonic, T = 0, zero modes excluded)")


def dos_reduced(analysis: Analysis, stem: Path) -> str:
    """Linear-binned reduced DOS D(f)/f² per size and the Debye level 3/f_D³."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for index, group in enumerate(analysis.groups):
        hist = group.linear
        reduced, error = hist.reduced
        ax.errorbar(hist.centres, reduced, yerr=np.nan_to_num(error), fmt="o-", ms=3, lw=0.8,
                    color=f"C{index}", label=_label(group))
        if group.speeds is not None and group.speeds.debye_frequency is not None:
            ax.axhline(3 / group.speeds.debye_frequency**3, ls="--", color=f"C{index}", lw=1, label="Debye level")
    return _finish(fig, ax, stem, xlabel=_freq_label(analysis), ylabel="D(f) / f²", title="Reduced density of states")


def cumulative(analysis: Analysis, stem: Path) -> str:
    """N(f) per dof (exact step function) and the tail's A f^(β+1)/(β+1)."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for index, group in enumerate(analysis.groups):
        f, count = group.cumulative
        ax.step(f, count, where="post", color=f"C{index}", label=_label(group))
        if group.tail is not None:
            beta, a = group.tail.exponent.value, group.tail.prefactor.value
            x = np.geomspace(f[0], group.cutoff, 50)
            ax.plot(x, a * x ** (beta + 1) / (beta + 1), ":", color=f"C{index}", label="tail fit, integrated")
    return _finish(fig, ax, stem, xscale="log", yscale="log", xlabel=_freq_label(analysis),
                   ylabel="modes ≤ f per dof", title="Cumulative count")


def participation(analysis: Analysis, stem: Path) -> str:
    """Participation ratio against frequency for every mode, coloured by class."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for name, colour in CLASS_COLOURS.items():
        f = np.concatenate([t.frequency[c == name] for g in analysis.groups for t, c in zip(g.tables, g.classes)])
        p = np.concatenate([t.participation[c == name] for g in analysis.groups for t, c in zip(g.tables, g.classes)])
        if len(f):
            ax.scatter(f, p, s=8, color=colour, label=f"{name} ({len(f)})", alpha=0.8)
    for group in analysis.groups:
        if group.cutoff:
            ax.axvline(group.cutoff, color="0.3", ls=":", lw=1)
    return _finish(fig, ax, stem, yscale="log", xlabel=_freq_label(analysis), ylabel="participation ratio P",
                   title="Localization by class (dotted: tail cutoff)")


def lowest_mode(analysis: Analysis, stem: Path) -> str | None:
    """Observed fraction of samples whose lowest mode lies above x, and the pure-tail prediction."""
    groups = [g for g in analysis.groups if g.tail is not None]
    if not groups:
        return None
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for index, group in enumerate(groups):
        check = group.tail.lowest
        ax.step(check.grid, check.observed, where="post", color=f"C{index}", label=f"{_label(group)} observed")
        ax.plot(check.grid, check.predicted, "--", color=f"C{index}",
                label=f"pure tail, KS p ≈ {check.ks_pvalue:.2g}")
    return _finish(fig, ax, stem, xlabel=_freq_label(analysis), ylabel="P(f_min > x)",
                   title="Lowest mode of each sample")


def profiles(analysis: Analysis, stem: Path, most: int = 6) -> str | None:
    """Radial profiles of |e|² around the centres of the most localised modes."""
    kept = sorted(((t.participation[m], t, m, prof) for g in analysis.groups for t in g.tables
                   for m, prof in t.profiles.items()), key=lambda item: item[0])[:most]
    if not kept:
        return None
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for p, table, mode, prof in kept:
        ax.plot(prof.radius, prof.weight, "o-", ms=3, lw=0.8,
                label=f"f = {table.frequency[mode]:.3g}, P = {p:.3g} ({Path(table.path).name} #{mode})")
    return _finish(fig, ax, stem, legend_size=6, yscale="log",
                   xlabel=f"distance from centre ({analysis.units.length})", ylabel="mean |e_a|²",
                   title="Radial decay of the most localized modes")


def _errorbar_rows(ax, x, rows, key, **style):
    value = np.array([np.nan if r[key] is None else r[key] for r in rows], float)
    low = np.array([np.nan if r.get(f"{key}_low") is None else r[f"{key}_low"] for r in rows], float)
    high = np.array([np.nan if r.get(f"{key}_high") is None else r[f"{key}_high"] for r in rows], float)
    ax.errorbar(x, value, yerr=np.nan_to_num([value - low, high - value]), fmt="o-", **style)


def finite_size(analysis: Analysis, stem: Path) -> str:
    """Four panels against N: first band vs c_T·2π/L, quasi-localised modes per sample, β, and A."""
    rows = size_table(analysis)
    n = np.array([r["n_atoms"] for r in rows], float)
    fig, axes = plt.subplots(2, 2, figsize=(8.4, 6.4))
    ax = axes[0, 0]
    band = np.array([np.nan if r["first_band"] is None else r["first_band"] for r in rows], float)
    err = np.array([np.nan if r["first_band_error"] is None else r["first_band_error"] for r in rows], float)
    ax.errorbar(n, band, yerr=np.nan_to_num(err), fmt="o", label="first transverse band")
    ax.plot(n, [np.nan if r["continuum_first_band"] is None else r["continuum_first_band"] for r in rows], "s--",
            mfc="none", label="c_T·2π/L (c_T of the largest N)")
    ax.set(xscale="log", xlabel="N", ylabel=_freq_label(analysis))
    ax.legend(fontsize=7)
    ax = axes[0, 1]
    for key, name in (("local_below_cutoff", "below the tail cutoff"), ("local_all", "all in catalogue")):
        ax.errorbar(n, [np.nan if r[key] is None else r[key] for r in rows],
                    yerr=np.nan_to_num([np.nan if r[f"{key}_error"] is None else r[f"{key}_error"] for r in rows]),
                    fmt="o-", label=name)
    ax.set(xscale="log", xlabel="N", ylabel="quasi-localized modes per sample")
    ax.legend(fontsize=7)
    _errorbar_rows(axes[1, 0], n, rows, "exponent")
    axes[1, 0].set(xscale="log", xlabel="N", ylabel="tail exponent β")
    _errorbar_rows(axes[1, 1], n, rows, "prefactor", label="A (β fitted)")
    _errorbar_rows(axes[1, 1], n, rows, "fixed_prefactor", label=f"A at β = {analysis.settings.fixed_exponent:g}")
    axes[1, 1].set(xscale="log", yscale="log", xlabel="N", ylabel="prefactor A")
    axes[1, 1].legend(fontsize=7)
    fig.suptitle("Finite-size comparison")
    return _save(fig, stem)


def bands(analysis: Analysis, stem: Path) -> str | None:
    """Band frequency against |k| (T and L), with the first-band sound-speed lines (dispersion)."""
    groups = [g for g in analysis.groups if g.bands]
    if not groups:
        return None
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    for index, group in enumerate(groups):
        for pol, marker in (("T", "o"), ("L", "s")):
            chosen = [b for b in group.bands if b.polarisation == pol and b.covered]
            if chosen:
                ax.errorbar([b.k for b in chosen], [b.frequency for b in chosen], yerr=[b.width for b in chosen],
                            fmt=marker, mfc="none" if pol == "L" else None, color=f"C{index}",
                            label=f"{_label(group)} {pol}")
    return _finish(fig, ax, stem, xlabel=f"|k| (1/{analysis.units.length})", ylabel=_freq_label(analysis),
                   title="Plane-wave bands (covered ones; bars: width)")


ALL = (("dos-loglog", dos_loglog), ("dos-reduced", dos_reduced), ("cumulative", cumulative),
       ("participation", participation), ("lowest-mode", lowest_mode), ("profiles", profiles),
       ("bands", bands), ("finite-size", finite_size))


def draw_all(analysis: Analysis, out: Path) -> dict[str, str]:
    """Every figure into ``out``; returns {figure name: file stem} for those drawn."""
    drawn = {}
    for name, draw in ALL:
        stem = draw(analysis, out / name)
        if stem:
            drawn[name] = stem
    return drawn

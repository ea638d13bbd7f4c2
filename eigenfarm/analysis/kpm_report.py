"""Writing a KPM density estimate (:mod:`eigenfarm.analysis.kpm`) to a folder, atomically.

The folder holds ``density.csv`` (frequency, density, its standard error, modes below, its standard
error), ``density.png`` and ``density.svg`` (the density with a ±2 s.e. band over the cumulative
count), ``density.md`` (bounds, settings, resolution, mode counts in frequency bands, assumptions) and
``density.json`` (the same numbers and the per-probe moments, so the estimate can be re-evaluated).
It is built in a hidden sibling directory and renamed into place when complete; an existing folder
is replaced only with ``overwrite`` and only if it is such a folder.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from eigenfarm import __version__
from eigenfarm.analysis.kpm import DensityEstimate
from eigenfarm.store.atomic import PartialStore

KIND = "eigenfarm-density"
FILES = ("density.csv", "density.png", "density.svg", "density.md", "density.json")
COLUMNS = ("frequency", "density", "density_stderr", "modes_below", "modes_below_stderr")
#: rows of density.csv: at least this many, and at least 4 per Chebyshev moment
MIN_POINTS = 1000


def is_density_folder(path) -> bool:
    """Whether ``path`` is a folder this module wrote (its density.json says so; no foreign files)."""
    path = Path(path)
    try:
        ours = json.loads((path / "density.json").read_text()).get("kind") == KIND
    except (OSError, ValueError, AttributeError):
        return False
    return ours and path.is_dir() and all(p.name in FILES for p in path.iterdir())


def write_density(estimate: DensityEstimate, out, overwrite: bool = False) -> Path:
    """Write ``estimate`` into the folder ``out`` (see the module docstring); returns its path."""
    partial = PartialStore(out, overwrite, is_density_folder, "density folder")
    try:
        partial.path.mkdir()
        table = density_table(estimate)
        _write_csv(partial.path / "density.csv", table)
        _plot(estimate, table, partial.path)
        (partial.path / "density.md").write_text(summary(estimate, Path(out).name))
        (partial.path / "density.json").write_text(json.dumps(_record(estimate), indent=1))
    except BaseException:
        partial.abort()
        raise
    return partial.commit()


def density_table(estimate: DensityEstimate) -> dict:
    """:data:`COLUMNS` as arrays on a uniform grid of max(1000, 4M) frequencies spanning the bounds."""
    f = estimate.grid(max(MIN_POINTS, 4 * estimate.n_moments))
    return dict(zip(COLUMNS, (f, *estimate.density(f), *estimate.modes_below(f))))


def _write_csv(path: Path, table: dict) -> None:
    with path.open("w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(table)
        writer.writerows(zip(*(np.char.mod("%.10g", column) for column in table.values())))


def _frequency_label(estimate: DensityEstimate) -> str:
    return f"frequency ({estimate.units.frequency_unit})"


def _plot(estimate: DensityEstimate, table: dict, folder: Path) -> None:
    from matplotlib.figure import Figure  # no pyplot: saved through the Agg canvas, no GUI, no global state

    f = table["frequency"]
    fig = Figure(figsize=(7, 6))
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(2, 1))
    for axis, key, label in ((top, "density", f"D(f) per dof per {estimate.units.frequency_unit}"),
                             (bottom, "modes_below", "modes below f")):
        value, error = table[key], table[f"{key}_stderr"]
        axis.fill_between(f, value - 2 * error, value + 2 * error, color="tab:blue", alpha=0.25, lw=0,
                          label="±2 standard errors")
        axis.plot(f, value, color="tab:blue", lw=1)
        axis.set_ylabel(label)
        axis.axvline(0.0, color="grey", lw=0.5)
    top.legend(loc="upper left", frameon=False)
    top.set_title(f"{Path(estimate.store.get('path', '')).name}: KPM, {estimate.n_moments} moments, "
                  f"{estimate.n_probes} probes, Jackson kernel", fontsize=10)
    bottom.set_xlabel(_frequency_label(estimate))
    fig.tight_layout()
    for suffix in ("png", "svg"):
        fig.savefig(folder / f"density.{suffix}", dpi=150)


def bands(estimate: DensityEstimate, count: int = 5) -> list[tuple[float, float]]:
    """Frequency bands for the summary: [f(lo), 0) when the bounds reach below zero, then at most
    ``count`` bands of a round width (1, 2, 2.5 or 5 × 10^k) from 0 past f(hi)."""
    lo, hi = estimate.frequency_range()
    raw = hi / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw)
    edges = step * np.arange(math.ceil(hi / step - 1e-9) + 1)
    out = [(lo, 0.0)] if lo < 0 else []
    return out + [(float(a), float(b)) for a, b in zip(edges[:-1], edges[1:])]


def _g(value: float) -> str:
    return f"{value:.4g}"


def summary(estimate: DensityEstimate, name: str = "") -> str:
    """The readable summary written to density.md."""
    u, b, s = estimate.units, estimate.bounds, estimate.store
    unit, lam = u.frequency_unit, f"{u.energy}/({u.length}²·{u.mass})"
    f_lo, f_hi = estimate.frequency_range()
    centre = u.frequency((b.lo + b.hi) / 2)
    sigma_centre, _ = estimate.resolution(centre)
    probe_f = np.array([f_hi * q for q in (0.05, 0.25, 0.5, 0.75)])
    _, widths = estimate.resolution(probe_f)
    lines = [
        f"# Density of states{' — ' + name if name else ''} (kernel polynomial method)", "",
        f"- Store: `{s.get('path')}` (digest {str(s.get('digest'))[:12]}…), {s.get('n_atoms')} atoms, "
        f"{estimate.n_dof} degrees of freedom, {u.name} units; frequencies in {unit}, eigenvalues λ = ω² in {lam}.",
        f"- Estimate: {estimate.n_moments} Chebyshev moments, {estimate.n_probes} Rademacher probe vectors "
        f"(seed {estimate.seed}), Jackson kernel; eigenfarm {__version__}; "
        + ", ".join(f"{k} {v:.1f} s" for k, v in estimate.seconds.items()) + ".",
        f"- Spectral bounds: λ ∈ [{_g(b.lo)}, {_g(b.hi)}] {lam}, i.e. f ∈ [{_g(f_lo)}, {_g(f_hi)}] {unit}: "
        f"extreme Ritz values {_g(b.ritz[0])} and {_g(b.ritz[1])} after {b.steps} Lanczos steps, widened by "
        f"their residual norms ({_g(b.residual[0])}, {_g(b.residual[1])}) and a margin of {_g(b.margin)}.",
        f"- Resolution (kernel standard deviation): σ_λ = {_g(float(sigma_centre))} {lam} mid-spectrum, "
        "narrower towards the bounds; in frequency σ_f = "
        + ", ".join(f"{_g(w)} at f = {_g(f)}" for f, w in zip(probe_f, widths)) + f" {unit}.",
        "", "## Modes per frequency band", "",
        f"| band ({unit}) | modes | standard error | fraction of {estimate.n_dof} |", "|---|---|---|---|",
    ]
    for f1, f2 in bands(estimate):
        value, error = estimate.count(f1, f2)
        lines.append(f"| {_g(f1)} … {_g(f2)} | {value:.1f} | {error:.1f} | {value / estimate.n_dof:.4f} |")
    lines += [
        "",
        f"The band edges are smeared by the kernel (σ_f above): the bands next to f = 0 each hold about half "
        f"of the zero modes (3 translations in a periodic cell, more with rattlers), so a count below 0 is "
        f"evidence of negative eigenvalues only when it clearly exceeds that.",
        "", "## Assumptions", "",
        "- Harmonic approximation: the spectrum of the Hessian at the stored configuration, nothing anharmonic.",
        "- Zero temperature: the configuration is taken as it is (ideally an energy minimum; negative λ mean it "
        "is not), with no thermal motion.",
        f"- Finite size: one sample of {s.get('n_atoms')} atoms; its lowest modes are discrete, and below the "
        "first plane waves of the cell the density is not that of the bulk.",
        "- Stochastic estimate: traces from random probe vectors; error bars are one standard error over the "
        "probes (∝ 1/√(R·3N)) and do not include the kernel's smoothing, which is a resolution, not an error.",
        "", f"Files: density.csv (columns {', '.join(COLUMNS)}; frequency in {unit}, density per dof per {unit}), "
        "density.png/.svg (the plot), density.json (all numbers and the per-probe moments).", ""]
    return "\n".join(lines)


def _record(estimate: DensityEstimate) -> dict:
    b = estimate.bounds
    return {"kind": KIND, "eigenfarm": __version__, "store": estimate.store, "units": estimate.units.name,
            "frequency_unit": estimate.units.frequency_unit, "method": "kernel polynomial method, Jackson kernel",
            "moments": estimate.n_moments, "probes": estimate.n_probes, "seed": estimate.seed,
            "bounds": {"lo": b.lo, "hi": b.hi, "ritz": list(b.ritz), "residual": list(b.residual),
                       "margin": b.margin, "lanczos_steps": b.steps},
            "seconds": estimate.seconds,
            "bands": [{"from": f1, "to": f2, "modes": v, "stderr": e}
                      for (f1, f2) in bands(estimate) for v, e in [estimate.count(f1, f2)]],
            "probe_moments": estimate.probe_moments.tolist()}

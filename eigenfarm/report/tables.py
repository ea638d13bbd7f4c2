"""The report's CSV tables, one writer per table, each a plain header row plus data rows.

Frequencies are in the catalogues' reported unit (THz for metal, ω for reduced units); densities are
per degree of freedom per frequency unit; speeds in the unit system's speed unit (m/s for metal).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from eigenfarm.analysis.ensemble import Analysis, SizeGroup
from eigenfarm.analysis.finite_size import size_table
from eigenfarm.analysis.phonons import plane_wave_weight


def _write(path: Path, header: list[str], rows) -> str:
    with open(path, "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(header)
        for row in rows:
            writer.writerow(["" if v is None else (f"{v:.10g}" if isinstance(v, float) else v) for v in row])
    return path.name


def sample_name(path: str) -> str:
    """A catalogue's file name without the directory (the sample's label in every table)."""
    return Path(path).name


def _mode_rows(group: SizeGroup):
    for table, classes in zip(group.tables, group.classes):
        weight = plane_wave_weight(table)
        centre = table.centre if table.centre is not None else np.full((table.n_modes, 3), np.nan)
        for i in range(table.n_modes):
            yield (sample_name(table.path), table.n_atoms, i, float(table.frequency[i]), float(table.eigenvalue[i]),
                   float(table.participation[i]), float(table.ipr[i]), float(weight[i]), classes[i],
                   *map(float, centre[i]))


def _band_rows(group: SizeGroup):
    for b in group.bands:
        yield (group.n_atoms, b.shell + 1, b.label, b.polarisation, b.k, b.multiplicity, b.expected, b.modes,
               "yes" if b.covered else "no", b.source, b.frequency, b.low, b.width, b.speed)


def _dos_rows(group: SizeGroup):
    debye = group.speeds.debye_density if group.speeds else (lambda f: np.full_like(f, np.nan))
    for hist in (group.linear, group.log):
        reduced, reduced_err = hist.reduced
        level = debye(hist.centres)
        for j in range(len(hist.density)):
            yield (group.n_atoms, hist.binning, float(hist.edges[j]), float(hist.edges[j + 1]),
                   float(hist.centres[j]), float(hist.density[j]), float(hist.error[j]), float(reduced[j]),
                   float(reduced_err[j]), int(hist.counts[j]), float(level[j]))


def _profile_rows(group: SizeGroup):
    for table in group.tables:
        for mode, profile in sorted(table.profiles.items()):
            for r, w, n in zip(profile.radius, profile.weight, profile.atoms):
                yield (sample_name(table.path), mode, float(table.frequency[mode]), float(table.participation[mode]),
                       float(r), float(w), int(n))


def _lowest_rows(group: SizeGroup):
    if group.tail is None:
        return
    check = group.tail.lowest
    for x, p, o in zip(check.grid, check.predicted, check.observed):
        yield group.n_atoms, float(x), float(p), float(o)


def write_tables(analysis: Analysis, out: Path) -> list[str]:
    """Write every table into directory ``out``; returns the file names."""
    groups = analysis.groups
    tables = [
        ("modes.csv", ["sample", "n_atoms", "mode", "frequency", "eigenvalue", "participation",
                       "inverse_participation", "plane_wave_weight", "class", "centre_x", "centre_y", "centre_z"],
         (r for g in groups for r in _mode_rows(g))),
        ("bands.csv", ["n_atoms", "shell", "label", "polarisation", "k", "multiplicity", "modes_expected",
                       "modes_found", "covered", "source", "frequency", "lower_edge", "width", "speed"],
         (r for g in groups for r in _band_rows(g))),
        ("dos.csv", ["n_atoms", "binning", "lo", "hi", "centre", "density", "density_error", "reduced",
                     "reduced_error", "modes", "debye_density"], (r for g in groups for r in _dos_rows(g))),
        ("cumulative.csv", ["n_atoms", "frequency", "modes_per_dof"],
         ((g.n_atoms, float(f), float(c)) for g in groups for f, c in zip(*g.cumulative))),
        ("profiles.csv", ["sample", "mode", "frequency", "participation", "radius", "mean_weight", "atoms"],
         (r for g in groups for r in _profile_rows(g))),
        ("lowest_mode_survival.csv", ["n_atoms", "frequency", "predicted", "observed"],
         (r for g in groups for r in _lowest_rows(g))),
    ]
    names = [_write(out / name, header, rows) for name, header, rows in tables]
    rows = size_table(analysis)
    names.append(_write(out / "finite_size.csv", list(rows[0]), (list(r.values()) for r in rows)))
    return names

"""The one-page summary: every number with its uncertainty, the assumptions next to them, the figures.

Built once as :mod:`~eigenfarm.report.document` blocks and rendered to ``summary.md`` and ``summary.html``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from eigenfarm.analysis.ensemble import Analysis, SizeGroup
from eigenfarm.analysis.finite_size import size_table
from eigenfarm.analysis.phonons import CLASSES
from eigenfarm.report.document import Figure, Heading, Items, Table, Text

CAPTIONS = {
    "dos-loglog": "Density of states per degree of freedom (log bins, error bars: standard error over samples), "
                  "the fitted tail and the Debye level.",
    "dos-reduced": "Reduced density of states D(f)/f² (linear bins) and the Debye level 3/f_D³.",
    "cumulative": "Modes at or below f per degree of freedom (exact, no binning) and the integrated tail fit.",
    "participation": "Participation ratio against frequency, coloured by class; dotted: tail cutoff.",
    "lowest-mode": "Each sample's lowest mode: observed survival against the pure-tail prediction.",
    "profiles": "Mean |e_a|² against distance from the mode's centre for the most localized modes.",
    "bands": "Plane-wave bands: weighted band frequency against |k| (bars: band width).",
    "finite-size": "Finite-size comparison across system sizes.",
}


def num(value, digits: int = 4) -> str:
    """A number for the page ('–' for None/NaN)."""
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "–"
    return f"{value:.{digits}g}"


def estimate(est, confidence: float, digits: int = 4) -> str:
    """'value [low, high] (interval kind)' of a tail Estimate, bootstrap interval preferred."""
    if est is None:
        return "–"
    if est.bootstrap is not None:
        low, high, kind = *est.bootstrap, "bootstrap over samples"
    else:
        low, high, kind = *est.profile, "profile likelihood"
    return f"{num(est.value, digits)} [{num(low, digits)}, {num(high, digits)}] ({confidence:.0%} {kind})"


#: per-sample bookkeeping in preparation records, not part of the recipe
_PER_SAMPLE = {"seed", "sample"}


def _number(value):
    """``value`` as a float when it reads as one (records carried through XYZ comments are text)."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return value


def _preparation(group: SizeGroup) -> str:
    """The samples' recorded preparation: shared settings once, varying numbers as their range."""
    records = [t.preparation for t in group.tables if t.preparation]
    if not records:
        return "not recorded in the catalogues (say how the samples were prepared when quoting these numbers)"
    parts = []
    for key in sorted({k for r in records for k in r} - _PER_SAMPLE):
        values = [_number(r[key]) for r in records if key in r]
        if all(v == values[0] for v in values):
            parts.append(f"{key} = {values[0]}")
        elif all(isinstance(v, float) for v in values):
            parts.append(f"{key} {num(min(values))} … {num(max(values))}")
        else:
            parts.append(f"{key} varies")
    if any(_number(r.get("anneal_steps")) == 0 for r in records):
        parts.insert(0, "instant quench (no anneal) — a very poorly annealed glass")
    missing = len(group.tables) - len(records)
    return "; ".join(parts) + (f" ({missing} sample(s) without a record)" if missing else "")


def assumptions(analysis: Analysis) -> Items:
    units = analysis.units
    zero = sorted({t.zero_modes for g in analysis.groups for t in g.tables})
    negative = sum(t.negative_modes for g in analysis.groups for t in g.tables)
    items = [
        "Harmonic approximation at zero temperature: modes of the Hessian at the stored configuration; no "
        "anharmonicity, no thermal population.",
        f"Finite size: periodic cells of {', '.join(str(g.n_atoms) for g in analysis.groups)} atoms; no wave "
        "longer than the cell exists, so the tail below the first band is cut off by the cell.",
        f"Zero modes excluded from every density and fit: {', '.join(map(str, zero))} per sample (3 = rigid "
        f"translations of a periodic cell). Negative modes left out: {negative}.",
        f"Densities are per degree of freedom (3N) per {units.frequency_unit}; frequencies are "
        + ("ν = ω/2π in THz." if units.name == "metal" else "angular ω in reduced units."),
    ]
    items += [f"Preparation, N = {g.n_atoms}: {_preparation(g)}" for g in analysis.groups]
    items.append("Only the frequency range every catalogue covers completely enters the densities: "
                 + "; ".join(f"N = {g.n_atoms}: up to {num(g.linear.edges[-1])}" for g in analysis.groups))
    return Items(tuple(items))


def _class_counts(group: SizeGroup) -> str:
    counts = {name: sum(int(np.count_nonzero(c == name)) for c in group.classes) for name in CLASSES}
    return ", ".join(f"{name} {count}" for name, count in counts.items() if count)


def _band_table(group: SizeGroup, shells: int = 4) -> Table:
    rows = tuple((b.label, b.polarisation, num(b.expected, 3), num(b.modes, 4),
                  b.source if b.covered else "no", num(b.frequency), num(b.width, 3), num(b.speed))
                 for b in group.bands if b.shell < shells)
    return Table(("shell", "pol.", "modes expected", "weight in catalogues", "placed from", "median", "lower width",
                  f"speed ({group.tables[0].units.speed_unit})"), rows)


def group_blocks(group: SizeGroup, analysis: Analysis) -> list:
    conf = analysis.settings.confidence
    rule = analysis.settings.rule
    blocks = [Heading(f"N = {group.n_atoms} atoms, {group.n_samples} sample(s)", 2)]
    speeds = group.speeds
    if speeds is not None:
        blocks.append(Text(
            f"Sound speeds from the first plane-wave shell: c_T = {num(speeds.transverse)}, c_L = "
            f"{num(speeds.longitudinal)} {speeds.unit}; Debye frequency f_D = {num(speeds.debye_frequency)} "
            + ("" if speeds.debye_frequency else "(needs both first bands in the catalogues; solve more modes)")))
        blocks.append(_band_table(group))
    blocks.append(Text(f"Mode classes (P ≤ {rule.local_participation:g} and plane-wave weight < "
                       f"{rule.phonon_weight:g}: quasi-localized; weight ≥ {rule.phonon_weight:g}: phonon): "
                       f"{_class_counts(group)}."))
    blocks += _tail_blocks(group, conf)
    return blocks


def _tail_blocks(group: SizeGroup, conf: float) -> list:
    if group.tail is None:
        return [Text(f"Tail: not fitted — {group.tail_note or group.cutoff_rule}.")]
    tail = group.tail
    unit = tail.unit
    check = tail.lowest
    blocks = [Table(("tail quantity", "value"), (
        ("fit range", f"{num(tail.f_lo)} < f ≤ {num(group.cutoff)} {unit} ({group.cutoff_rule})"),
        ("modes used", f"{tail.n_modes} from {tail.n_samples} sample(s)"),
        ("exponent β (fitted)", estimate(tail.exponent, conf)),
        ("prefactor A (β fitted)", estimate(tail.prefactor, conf, 3) + f" per dof per {unit}^(β+1)"),
        (f"prefactor A at β = {tail.fixed_exponent:g}", estimate(tail.fixed_prefactor, conf, 3)),
        ("lowest modes vs pure tail", f"KS statistic {num(check.ks_statistic, 3)}, p ≈ {num(check.ks_pvalue, 2)} "
                                      f"({check.n_tested} samples)"),
    ))]
    return blocks + ([Items(tail.notes)] if tail.notes else [])


def finite_size_block(analysis: Analysis) -> list:
    rows = size_table(analysis)
    conf_note = "intervals: bootstrap over samples where ≥ 2 samples, else profile likelihood"
    table = Table(("N", "samples", "L", "first band", "c_T·2π/L", "ratio", "QLM/sample below cutoff",
                   "β", "A"), tuple(
        (str(r["n_atoms"]), str(r["samples"]), num(r["edge"]),
         f"{num(r['first_band'])} ± {num(r['first_band_error'], 2)}", num(r["continuum_first_band"]),
         num(r["first_band_over_continuum"], 3),
         f"{num(r['local_below_cutoff'], 3)} ± {num(r['local_below_cutoff_error'], 2)}",
         f"{num(r['exponent'], 3)} [{num(r['exponent_low'], 3)}, {num(r['exponent_high'], 3)}]",
         f"{num(r['prefactor'], 3)} [{num(r['prefactor_low'], 3)}, {num(r['prefactor_high'], 3)}]")
        for r in rows))
    return [Heading("Finite-size table", 2), table, Text(f"± is the standard error over samples; {conf_note}.")]


def summary_blocks(analysis: Analysis, figures: dict[str, str], tables: list[str], sources: list[str]) -> list:
    """The whole page."""
    blocks = [Heading("eigenfarm analysis", 1),
              Text(f"{sum(g.n_samples for g in analysis.groups)} catalogue(s): " + ", ".join(
                  Path(s).name for s in sources[:8]) + (" …" if len(sources) > 8 else "")),
              Heading("Read these numbers with", 2), assumptions(analysis)]
    if analysis.notes:
        blocks += [Heading("Notes and warnings", 2), Items(tuple(analysis.notes))]
    for group in analysis.groups:
        blocks += group_blocks(group, analysis)
    blocks += finite_size_block(analysis)
    blocks.append(Heading("Figures", 2))
    blocks += [Figure(f"{stem}.png", CAPTIONS[name]) for name, stem in figures.items()]
    blocks += [Heading("Tables", 2), Items(tuple(tables + ["analysis.json (everything above, machine-readable)"]))]
    return blocks

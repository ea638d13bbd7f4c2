"""The readable summary of a mode catalogue printed by the command line."""

from __future__ import annotations

import json

import numpy as np

#: slice rows shown in full; longer tables show the first and last few and every mismatched slice
TABLE_ROWS = 12
LOWEST_SHOWN = 8


def _slice_rows(slices: list[dict], mismatched: set[int]) -> list[str]:
    head = (f"    {'slice':>6} {'from':>11} {'to':>11} {'expected':>9} {'found':>7} {'returned':>9} "
            f"{'duplicates':>10}")
    shown = range(len(slices))
    if len(slices) > TABLE_ROWS:
        shown = sorted({*range(3), *range(len(slices) - 3, len(slices)),
                        *(i for i, s in enumerate(slices) if s["index"] in mismatched)})
    lines, last = [head], -1
    for i in shown:
        if i != last + 1:
            lines.append(f"    {'…':>6} ({i - last - 1} more, matching their counts)")
        s, last = slices[i], i
        flag = "  ✗" if s["index"] in mismatched else ""
        lines.append(f"    {s['index']:>6} {s['frequency'][0]:>11.5g} {s['frequency'][1]:>11.5g} {s['expected']:>9} "
                     f"{s['found']:>7} {s['returned']:>9} {s['duplicates']:>10}{flag}")
    return lines


def _zero_lines(attrs: dict, lam_unit: str) -> list[str]:
    zero, negative = attrs["zero_modes"], attrs["negative_modes"]
    trivial = zero.get("expected_trivial")
    expect = "unknown cell" if trivial is None else f"{trivial} trivial expected for the cell"
    lines = [f"  zero modes     {zero['count']} in the whole spectrum ({expect}), |λ| ≤ {zero['tolerance']:.3g} "
             f"{lam_unit}; reported apart, {zero['in_catalogue']} in the catalogue"]
    if negative["count"]:
        lines.append(f"  NEGATIVE       {negative['count']} eigenvalues below −{zero['tolerance']:.3g}: the "
                     f"configuration is not at an energy minimum ({negative['in_catalogue']} in the catalogue)")
    else:
        lines.append("  negative       none")
    return lines


def format_summary(catalogue) -> str:
    """Multi-line text: modes, window, completeness per slice, zero and negative modes, residuals,
    solver settings, lowest frequencies and the physical assumptions of ``catalogue``."""
    attrs, units = catalogue.attrs, catalogue.units
    lam_unit = f"{units.energy}/({units.length}²·{units.mass})"
    window, verdict, merge = attrs["window"], attrs["completeness"], attrs["merge"]
    freq = catalogue.frequencies
    positive = freq[np.abs(catalogue.eigenvalues) > attrs["zero_modes"]["tolerance"]]
    residual = f"max {catalogue.residuals.max():.3g}" if catalogue.n_modes else "none (no modes)"
    lines = [
        f"Mode catalogue  {catalogue.path}",
        f"  modes          {catalogue.n_modes:,} with {window['frequency'][0]:.6g} < f ≤ {window['frequency'][1]:.6g} "
        f"{units.frequency_unit} (λ {window['eigenvalue'][0]:.6g} … {window['eigenvalue'][1]:.6g} {lam_unit})"
        + _kept(attrs.get("keep_lowest"), catalogue.n_modes),
        f"  system         {catalogue.n_atoms:,} atoms ({catalogue.n_dof:,} dof), units {units.name}, "
        f"Hessian {attrs['hessian_digest'][:16]}…",
        f"  completeness   {'COMPLETE' if verdict['complete'] else 'INCOMPLETE'}: {verdict['reason']}",
        f"  slices         {len(attrs['slices'])} (frequencies in {units.frequency_unit})",
        *_slice_rows(attrs["slices"], set(verdict["mismatched_slices"])),
        *_zero_lines(attrs, lam_unit),
        f"  residuals      {residual} (‖D e − λ e‖ / λ_max, λ_max = {attrs['spectrum_scale']:.6g} {lam_unit})",
        f"  merge          {sum(s['duplicates'] for s in attrs['slices'])} duplicates removed, "
        f"{merge['recombined_modes']} modes re-orthonormalised across slices (tolerance {merge['tolerance']:.3g})",
        f"  solver         {json.dumps(attrs.get('solver'))}",
        "  lowest         " + (" ".join(f"{f:.5g}" for f in positive[:LOWEST_SHOWN]) + f" {units.frequency_unit}"
                                 if len(positive) else "none"),
        f"  assumptions    harmonic modes at zero temperature of one finite sample ({catalogue.n_atoms:,} atoms, "
        "one configuration): no anharmonicity, no thermal or sample-to-sample averaging",
        f"  created        {attrs.get('created', '?')} by eigenfarm {attrs.get('eigenfarm_version', '?')}",
    ]
    return "\n".join(lines)


def _kept(asked: int | None, held: int) -> str:
    """How a lowest-K request was met: K modes, or more to complete the K-th mode's degenerate level."""
    if not asked:
        return ""
    if held > asked:
        return f": the lowest {asked} asked, {held} kept to complete the degenerate level of the {asked}th"
    return f": the lowest {asked}"

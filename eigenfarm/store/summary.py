"""The readable summary of a Hessian store printed by ``eigenfarm hessian H.zarr``."""

from __future__ import annotations

import json
import os

_LABELS = {"structure": "structure", "finite": "finite", "sum_rule": "sum rule", "symmetry": "symmetry",
           "masses": "masses", "digests": "digests"}


def disk_bytes(path) -> int:
    """Total size (bytes) of the files under ``path``."""
    return sum(os.path.getsize(os.path.join(root, f)) for root, _, files in os.walk(path) for f in files)


def _size(n: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.1f} {unit}" if unit != "B" else f"{int(n)} B"
        n /= 1024


def _check_line(name: str, check: dict) -> str:
    state = {True: "ok", False: "FAIL" if check["severity"] == "error" else "WARN", None: "n/a"}[check["passed"]]
    details = []
    if check.get("value") is not None:
        details.append(f"{check['value']:.3g} (tolerance {check['tolerance']:g})")
    if "worst_atom" in check:
        details.append(f"worst atom {check['worst_atom']}")
    if check.get("worst") and check["passed"] is False:
        w = check["worst"]
        details.append(f"worst H[{w['row']},{w['col']}] = {w['value']:.6g} vs H[{w['col']},{w['row']}] = {w['mirror']:.6g}")
    if "first_atoms" in check:
        details.append(f"first non-finite block: atoms {check['first_atoms']}")
    if "first_atom" in check:
        details.append(f"first bad atom {check['first_atom']}")
    for key in ("problems", "mismatched_shards", "note"):
        if key in check:
            details.append(f"{key.replace('_', ' ')}: {check[key]}")
    return f"    {_LABELS.get(name, name):<12} {state:<5} {', '.join(details)}".rstrip()


def _validation_lines(verdict: dict) -> list[str]:
    if not verdict:
        return ["  validation     none recorded"]
    head = "PASSED" if verdict["passed"] else "FAILED"
    lines = [f"  validation     {head} (max |H| entry {verdict['max_abs_entry']:.4g})"]
    lines += [_check_line(name, check) for name, check in verdict["checks"].items()]
    lines += [f"    warning: {w}" for w in verdict.get("warnings", [])]
    return lines


def _provenance_lines(provenance: dict) -> list[str]:
    source = provenance.get("source", {})
    where = source.get("file") or source.get("description", "")
    lines = ["  provenance", f"    source       {source.get('kind', '?')}  {where}"]
    if source.get("sha256"):
        lines.append(f"    sha256       {source['sha256']}")
    if source.get("kind") == "matrix-market":
        lines.append(f"    matrix       {source.get('symmetry')} {source.get('field')}, {source.get('entries'):,} entries")
        lines.append(f"    masses       {json.dumps(provenance.get('masses', {}))}")
    if "potential" in provenance:
        lines.append(f"    potential    {json.dumps(provenance['potential'])}")
    lines.append(f"    created      {provenance.get('created', '?')} by eigenfarm {provenance.get('eigenfarm_version', '?')}")
    return lines


def format_summary(store) -> str:
    """Multi-line text: size, nnz, units, digest, validation verdict, provenance of ``store``."""
    n, units = store.n_atoms, store.units
    blocks = store.n_blocks()
    bounds = store.shard_bounds
    largest = int((bounds[1:] - bounds[:-1]).max()) if len(bounds) > 1 else 0
    order = store.attrs.get("ordering", {}).get("curve", "?")
    masses = store.masses
    lines = [
        f"Hessian store  {store.path}",
        f"  atoms          {n:,} (matrix {3 * n:,} × {3 * n:,}), {store.n_shards} shards of ≤ {largest:,} atoms, "
        f"{order} order",
        f"  stored         {blocks:,} blocks of 3×3, nnz {9 * blocks:,} ({blocks / max(n, 1):.1f} blocks per row)",
        f"  units          {units.name}: H in {units.energy}/{units.length}², masses in {units.mass}, "
        f"frequencies in {units.frequency_unit}",
        f"  masses         {masses.min():.6g} .. {masses.max():.6g}" if n else "  masses         none",
        f"  digest         {store.digest}",
        f"  on disk        {_size(disk_bytes(store.path))}",
    ]
    return "\n".join(lines + _validation_lines(store.validation) + _provenance_lines(store.provenance))

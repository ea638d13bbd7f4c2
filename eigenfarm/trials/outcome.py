"""What one trial produced, read back from its catalogue (or a reference's eigenvalue file)."""

from __future__ import annotations

import json

import numpy as np

from eigenfarm.catalogue import open_catalogue
from eigenfarm.trials.watch import Watched


def _runs(attrs: dict) -> list[dict]:
    return [piece.get("run", {}) for piece in attrs.get("slices", [])]


def trial_row(label: str, settings: dict, watched: Watched, catalogue) -> dict:
    """A table row for an ``eigenfarm solve`` trial whose catalogue is at ``catalogue``."""
    row = {"label": label, **settings, **_watched(watched)}
    if watched.status != 0:
        return {**row, "failure": watched.stderr.strip().splitlines()[-1] if watched.stderr.strip() else "failed"}
    cat = open_catalogue(catalogue)
    runs = _runs(cat.attrs)
    nnz = [r.get("factor_factor_nnz") for r in runs if r.get("factor_factor_nnz") is not None]
    return {**row, "modes": cat.n_modes, "complete": cat.complete, "slices": len(runs),
            "krylov_runs": int(sum(r.get("runs", 1) for r in runs)),
            "factor_nnz_max": max(nnz) if nnz else None,
            "factor_seconds": float(sum(r.get("factor_seconds", 0.0) for r in runs)),
            "max_residual": float(cat.residuals.max()) if cat.n_modes else None,
            "eigenvalues": cat.eigenvalues.tolist()}


def reference_row(method: str, watched: Watched, path) -> dict:
    """A table row for a reference run that wrote its eigenvalues to ``path``."""
    row = {"label": f"reference: {method}", "backend": method, **_watched(watched)}
    if watched.status != 0:
        return {**row, "failure": watched.stderr.strip().splitlines()[-1] if watched.stderr.strip() else "failed"}
    with open(path) as handle:
        values = json.load(handle)["eigenvalues"]
    return {**row, "modes": len(values), "eigenvalues": values}


def _watched(watched: Watched) -> dict:
    return {"seconds": watched.seconds, "peak_process_mib": watched.peak_process_mib,
            "peak_total_mib": watched.peak_total_mib}


def agreement(rows: list[dict]) -> None:
    """Add ``max_rel_diff`` to every row: the largest relative eigenvalue difference from the first
    successful reference (dense preferred) over the modes both hold, and ``count_matches``."""
    refs = [r for r in rows if r["label"].startswith("reference") and "eigenvalues" in r]
    if not refs:
        return
    ref = next((r for r in refs if r["backend"] == "dense"), refs[0])
    target = np.asarray(ref["eigenvalues"])
    for row in rows:
        if "eigenvalues" not in row:
            continue
        mine = np.asarray(row["eigenvalues"])
        n = min(len(mine), len(target))
        row["count_matches"] = len(mine) == len(target)
        row["max_rel_diff"] = float(np.max(np.abs(mine[:n] - target[:n]) / np.abs(target[:n]))) if n else None

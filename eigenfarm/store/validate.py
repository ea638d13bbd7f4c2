"""Validating a Hessian store shard by shard: the checks pipeline and the verdict.

Two passes, each one task per shard (in this process or on dask, see :mod:`eigenfarm.farm.runner`):

1. *inspect*: read shard k, report finiteness, block-row sums, the largest |entry|, its digest and the
   shards its columns touch; keep its cross-shard blocks transposed, on the worker, for pass 2.
2. *symmetry*: read shard s again and compare it with the transposed blocks of the shards that touch it
   (with spatial ordering only a few), giving max |H_ij − H_jiᵀ| exactly without the whole matrix.

Verdict (``validation`` attribute; every relative number is divided by the largest |entry| max|H|)::

    {"passed": bool, "max_abs_entry": float, "warnings": [str, ...],
     "checks": {"structure": {...}, "finite": {...}, "sum_rule": {...}, "symmetry": {...},
                "masses": {...}, "digests": {...}}}

each check with ``passed`` (bool, or None when it could not be evaluated) and ``severity`` ("error":
failing it fails the verdict; "warning": it is listed in ``warnings``).  Atoms and dofs (3·atom +
component, 0-based) are in input order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eigenfarm.store import layout
from eigenfarm.store.checks import (ShardReport, SymmetryReport, inspect_shard, symmetry_of_shard,
                                    transposed_parts)
from eigenfarm.farm.runner import Runner

#: max |Σ_j H_ij| / max|H| accepted for the translational sum rule
SUM_RULE_TOL = 1e-9
#: max |H_ij − H_jiᵀ| / max|H| accepted for symmetry
SYMMETRY_TOL = 1e-12

_EMPTY_PART = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((0, 3, 3)))


def _inspect_task(path: str, k: int, bounds: np.ndarray):
    shard = layout.read_shard(path, k)
    report = inspect_shard(k, shard, bounds)
    return report, ({} if report.structure else transposed_parts(shard, bounds))


def _report_of(inspected) -> ShardReport:
    return inspected[0]


def _part_for(inspected, s: int):
    return inspected[1].get(s, _EMPTY_PART)


def _symmetry_task(path: str, k: int, n_atoms: int, parts: list, threshold: float) -> SymmetryReport:
    return symmetry_of_shard(k, layout.read_shard(path, k), n_atoms, parts, threshold)


@dataclass
class CheckResults:
    """Per-shard reports of both passes; ``symmetry`` is None when a shard is malformed."""

    reports: list[ShardReport]
    symmetry: list[SymmetryReport] | None
    max_abs: float


def run_checks(runner: Runner, path, bounds: np.ndarray, symmetry_tol: float = SYMMETRY_TOL,
               progress=None) -> CheckResults:
    """Both passes over the store at ``path`` with shard ``bounds`` (n_shards + 1,)."""
    path, n_shards, n_atoms = str(path), len(bounds) - 1, int(bounds[-1])
    inspected = [runner.submit(_inspect_task, path, k, bounds) for k in range(n_shards)]
    picks = [runner.submit(_report_of, h) for h in inspected]
    reports = runner.gather(picks, "check", progress)
    runner.release(picks)
    max_abs = max((r.max_abs for r in reports), default=0.0)
    if any(r.structure for r in reports):
        runner.release(inspected)
        return CheckResults(reports, None, max_abs)
    sources: dict[int, list[int]] = {s: [] for s in range(n_shards)}
    for report in reports:
        for t in report.touches:
            sources[t].append(report.index)
    parts = [[runner.submit(_part_for, inspected[t], s) for t in sources[s]] for s in range(n_shards)]
    tasks = [runner.submit(_symmetry_task, path, s, n_atoms, parts[s], symmetry_tol * max_abs)
             for s in range(n_shards)]
    symmetry = runner.gather(tasks, "symmetry", progress)
    runner.release(tasks + [p for group in parts for p in group] + inspected)
    return CheckResults(reports, symmetry, max_abs)


def _dof(store_dof: int, original_index: np.ndarray) -> int:
    return int(3 * original_index[store_dof // 3] + store_dof % 3)


def _element(entry, original_index) -> dict:
    row, col, value, mirror = entry
    return {"row": _dof(row, original_index), "col": _dof(col, original_index), "value": value,
            "mirror": mirror}


def _symmetry_check(results: CheckResults, original_index, tol: float) -> dict:
    if results.symmetry is None:
        return {"passed": None, "severity": "error", "value": None, "tolerance": tol,
                "note": "not evaluated: a shard is malformed"}
    worst = max(results.symmetry, key=lambda r: r.max_diff)
    scale = results.max_abs or 1.0
    first = min((r.first_over for r in results.symmetry if r.first_over), default=None)
    value = worst.max_diff / scale
    check = {"passed": bool(value <= tol), "severity": "error", "value": value, "tolerance": tol,
             "entries_over": int(sum(r.n_over for r in results.symmetry))}
    if worst.worst and worst.max_diff > 0:
        check["worst"] = _element(worst.worst, original_index)
    if first:
        check["first"] = _element(first, original_index)
    return check


def _sum_rule_check(results: CheckResults, original_index, severity: str) -> dict:
    worst = max(results.reports, key=lambda r: r.row_sum)
    value = worst.row_sum / (results.max_abs or 1.0)
    return {"passed": bool(value <= SUM_RULE_TOL), "severity": severity, "value": value,
            "tolerance": SUM_RULE_TOL, "worst_atom": int(original_index[worst.row_sum_atom])}


def _finite_check(results: CheckResults, original_index) -> dict:
    bad = next((r.nonfinite for r in results.reports if r.nonfinite), None)
    check = {"passed": bad is None, "severity": "error"}
    if bad:
        check["first_atoms"] = [int(original_index[bad[0]]), int(original_index[bad[1]])]
    return check


def _masses_check(masses: np.ndarray, original_index) -> dict:
    bad = np.flatnonzero(~(np.isfinite(masses) & (masses > 0)))
    check = {"passed": not len(bad), "severity": "error",
             "min": float(masses.min()) if len(masses) else None}
    if len(bad):
        check["first_atom"] = int(original_index[bad[0]])
    return check


def _structure_check(results: CheckResults) -> dict:
    bad = [f"shard {r.index}: {r.structure}" for r in results.reports if r.structure]
    return {"passed": not bad, "severity": "error", **({"problems": bad[:10]} if bad else {})}


def _digest_check(results: CheckResults, recorded) -> dict:
    mismatched = [r.index for r, d in zip(results.reports, recorded) if r.digest != d]
    return {"passed": not mismatched, "severity": "error",
            **({"mismatched_shards": mismatched[:20]} if mismatched else {})}


def make_verdict(results: CheckResults, masses, original_index, recorded_digests, *,
                 sum_rule_severity: str = "error", symmetry_tol: float = SYMMETRY_TOL) -> dict:
    """The verdict dict (see module doc) from :func:`run_checks` results; ``recorded_digests`` are the
    shard digests the writer recorded (compared with those of the data read back)."""
    original_index = np.asarray(original_index)
    checks = {
        "structure": _structure_check(results),
        "finite": _finite_check(results, original_index),
        "sum_rule": _sum_rule_check(results, original_index, sum_rule_severity),
        "symmetry": _symmetry_check(results, original_index, symmetry_tol),
        "masses": _masses_check(np.asarray(masses), original_index),
        "digests": _digest_check(results, recorded_digests),
    }
    failed = [name for name, c in checks.items() if c["passed"] is not True]
    warnings = [f"{name} check failed (value {checks[name].get('value')})" for name in failed
                if checks[name]["severity"] == "warning"]
    return {"passed": not any(checks[n]["severity"] == "error" for n in failed),
            "max_abs_entry": results.max_abs, "warnings": warnings, "checks": checks}


def sum_rule_severity(provenance: dict) -> str:
    """Imported matrices only warn about the sum rule (their source may not be translation-invariant);
    matrices built from a potential must satisfy it."""
    return "warning" if provenance.get("source", {}).get("kind") == "matrix-market" else "error"


def validate_store(path, client=None, progress=None, symmetry_tol: float = SYMMETRY_TOL) -> dict:
    """Re-run every check on the store at ``path`` from what is on disk; returns a fresh verdict.

    Also compares each shard's digest with the one recorded at write time and the recomputed content
    digest with the store's ``digest`` attribute (``checks.digests``).
    """
    from eigenfarm.farm.runner import runner_for

    attrs = layout.read_attrs(path)
    bounds = np.asarray(attrs["shard_bounds"], dtype=np.int64)
    masses = layout.read_array(path, "masses")
    original = layout.read_array(path, "original_index")
    recorded = [layout.shard_attrs(path, k).get("digest") for k in range(len(bounds) - 1)]
    results = run_checks(runner_for(client), path, bounds, symmetry_tol, progress)
    verdict = make_verdict(results, masses, original, recorded, symmetry_tol=symmetry_tol,
                           sum_rule_severity=sum_rule_severity(attrs.get("provenance", {})))
    digest = layout.root_digest(len(masses), masses, original, [r.digest for r in results.reports])
    if digest != attrs.get("digest"):
        verdict["checks"]["digests"].update(passed=False, content_digest=digest)
        verdict["passed"] = False
    return verdict

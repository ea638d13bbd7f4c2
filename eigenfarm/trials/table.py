"""The gauge table: CSV, Markdown and a plot of wall time, memory and factor fill, with ratios.

Ratios are against the baseline row: the plain ``eigsh`` reference when it ran, else the dense one,
else the first trial.  Wall times include process start-up and, for trials with workers, starting the
local dask cluster — what a user waits for.
"""

from __future__ import annotations

import csv
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

COLUMNS = ("label", "backend", "method", "slice_modes", "ncv", "tol", "workers", "ranks", "seconds", "speedup",
           "peak_process_mib", "peak_total_mib", "factor_nnz_max", "factor_seconds", "slices", "krylov_runs",
           "modes", "complete", "max_residual", "max_rel_diff", "count_matches", "failure")


def baseline(rows: list[dict]) -> dict:
    ok = [r for r in rows if "failure" not in r]
    for method in ("eigsh", "dense"):
        for row in ok:
            if row["label"] == f"reference: {method}":
                return row
    return ok[0] if ok else rows[0]


def add_ratios(rows: list[dict]) -> None:
    """``speedup`` = baseline seconds / row seconds."""
    base = baseline(rows)["seconds"]
    for row in rows:
        row["speedup"] = base / row["seconds"] if row.get("seconds") else None


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def write_csv(rows: list[dict], path: Path) -> None:
    with open(path, "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(COLUMNS)
        for row in rows:
            writer.writerow([_cell(row.get(c)) for c in COLUMNS])


def markdown(rows: list[dict], header: str) -> str:
    shown = [c for c in COLUMNS if any(row.get(c) is not None for row in rows)]
    lines = [header, "", "| " + " | ".join(shown) + " |", "|" + "---|" * len(shown)]
    lines += ["| " + " | ".join(_cell(row.get(c)).replace("|", "\\|") for c in shown) + " |" for row in rows]
    base = baseline(rows)
    lines += ["", f"speedup = {base['label']} wall time / row wall time. Memory: resident set size of the "
                  "child process tree, polled every 0.05 s (peak of the largest process, and of the sum).", ""]
    return "\n".join(lines)


def plot(rows: list[dict], stem: Path) -> None:
    ok = [r for r in rows if "failure" not in r]
    labels = [r["label"] for r in ok]
    fig, axes = plt.subplots(1, 3, figsize=(12, 0.5 * len(ok) + 2), sharey=True)
    panels = (("seconds", "wall time (s)"), ("peak_process_mib", "peak memory per process (MiB)"),
              ("factor_nnz_max", "largest factor (nonzeros)"))
    for ax, (key, title) in zip(axes, panels):
        ax.barh(range(len(ok)), [r.get(key) or 0 for r in ok], color="tab:blue")
        ax.set(title=title)
    axes[0].set_yticks(range(len(ok)), labels, fontsize=7)
    axes[0].invert_yaxis()
    fig.tight_layout()
    for suffix in (".png", ".svg"):
        fig.savefig(stem.with_suffix(suffix), dpi=120)
    plt.close(fig)

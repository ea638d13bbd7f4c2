"""A gauge run: every trial and reference in turn, in child processes, into a results folder.

Folder (written under a hidden name, renamed when complete; never replaces what is not a gauge folder)::

    DIR/gauge.json   kind="eigenfarm-gauge", the store, the request, every row (with eigenvalues)
    DIR/gauge.csv, gauge.md, gauge.png, gauge.svg
"""

from __future__ import annotations

import json
import shutil
import sys
import tempfile
from pathlib import Path

from eigenfarm.store import open_store
from eigenfarm.store.atomic import PartialStore, check_destination
from eigenfarm.store.provenance import jsonable, stamp
from eigenfarm.trials.grid import Trial, solve_command
from eigenfarm.trials.outcome import agreement, reference_row, trial_row
from eigenfarm.trials.table import add_ratios, markdown, plot, write_csv
from eigenfarm.trials.watch import run_watched

KIND = "eigenfarm-gauge"
LABEL = "gauge folder"
#: dense references are refused above this many degrees of freedom (n³ time, 8n² bytes)
DENSE_MAX_DOF = 12_000


def is_gauge(path) -> bool:
    try:
        return json.loads((Path(path) / "gauge.json").read_text()).get("kind") == KIND
    except (OSError, ValueError, AttributeError):
        return False


def check_gauge_destination(out, overwrite: bool) -> None:
    check_destination(out, overwrite, is_gauge, LABEL)


def _request_args(lowest: int | None, window) -> list[str]:
    return ["--lowest", str(lowest)] if lowest is not None else ["--window", f"{window[0]!r}:{window[1]!r}"]


def _references(methods, store: str, n_dof: int, lowest, window, scratch: Path, progress) -> list[dict]:
    rows = []
    for method in methods:
        if method == "dense" and n_dof > DENSE_MAX_DOF:
            rows.append({"label": "reference: dense", "backend": "dense",
                         "failure": f"skipped: {n_dof} dof > {DENSE_MAX_DOF} (dense eigh is n³)"})
            continue
        out = scratch / f"{method}.json"
        argv = [sys.executable, "-m", "eigenfarm.trials.reference", method, store, str(out)]
        argv += ["--lowest", str(lowest)] if lowest is not None else ["--window", *map(repr, window)]
        rows.append(reference_row(method, run_watched(argv), out))
        progress(f"reference {method}")
    return rows


def gauge(store: str, out, trials: list[Trial], references: list[str], lowest: int | None = None,
          window=None, overwrite: bool = False, progress=print) -> Path:
    """Run ``references`` ("dense", "eigsh") and ``trials`` on ``store`` for ``lowest`` K modes or the
    ``window`` (lo, hi) in the store's frequency unit; write the folder ``out``; returns its path."""
    handle = open_store(store)
    partial = PartialStore(out, overwrite, is_gauge, LABEL)
    scratch = Path(tempfile.mkdtemp(prefix=".gauge-", dir=Path(out).resolve().parent))
    try:
        rows = _references(references, store, 3 * handle.n_atoms, lowest, window, scratch, progress)
        for index, trial in enumerate(trials):
            catalogue = scratch / f"trial-{index}.modes.zarr"
            watched = run_watched(solve_command(trial, store, str(catalogue), _request_args(lowest, window)))
            rows.append(trial_row(trial.label, trial.to_dict(), watched, catalogue))
            progress(f"trial {index + 1}/{len(trials)}: {trial.label} {watched.seconds:.1f} s")
        agreement(rows)
        add_ratios(rows)
        _write(partial.path, store, handle, lowest, window, rows)
    except BaseException:
        partial.abort()
        raise
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    return partial.commit()


def _write(folder: Path, store: str, handle, lowest, window, rows: list[dict]) -> None:
    folder.mkdir(parents=True)
    request = f"lowest {lowest}" if lowest is not None else f"window {window[0]}:{window[1]} {handle.units.frequency_unit}"
    header = (f"# Solver settings on {store}\n\n{handle.n_atoms} atoms, {request}; this machine, one run "
              "per row (timings on a shared machine vary by tens of per cent: read ratios, not digits).")
    write_csv(rows, folder / "gauge.csv")
    (folder / "gauge.md").write_text(markdown(rows, header))
    plot(rows, folder / "gauge")
    record = {"kind": KIND, "store": str(Path(store).resolve()), "n_atoms": handle.n_atoms,
              "request": {"lowest": lowest, "window": window}, "rows": rows, **stamp()}
    (folder / "gauge.json").write_text(json.dumps(jsonable(record), indent=1))

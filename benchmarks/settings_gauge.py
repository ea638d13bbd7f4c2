"""Solver settings side by side on one disordered network, through ``eigenfarm gauge``'s own machinery.

The sample is factorisation_choices.py's stress-free jittered-FCC spring network (4·cells³ atoms, two
masses, ~12 neighbours) imported through Matrix Market, so the store is what a user's own code would
hand us.  One run of ``eigenfarm.trials.run.gauge`` for the lowest K modes gives, in one table and as
ratios: dense LAPACK eigh (when n ≤ 12,000), one plain scipy eigsh call, and eigenfarm's backends —
auto, superlu, slepc in one process and on 2 MPI ranks (when installed) — each in a fresh process,
watched for wall time and resident memory.

    python benchmarks/settings_gauge.py --cells 10 --lowest 50      # 4,000 atoms
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import tempfile
from pathlib import Path

import numpy as np
import scipy.io
from factorisation_choices import network_sample
from result_files import write_results

from eigenfarm.store.importer import import_matrix_market
from eigenfarm.trials.grid import expand
from eigenfarm.trials.run import gauge


def backends() -> list[str]:
    """auto (CHOLMOD below the spectrum where installed, SuperLU for the proving count) and superlu
    always; slepc where PETSc/SLEPc are installed.  cholmod alone is not a complete backend: it has no
    inertia for the count that proves a lowest-K result."""
    return ["auto", "superlu"] + (["slepc"] if importlib.util.find_spec("slepc4py") else [])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=10)
    parser.add_argument("--lowest", type=int, default=50)
    args = parser.parse_args()
    H, masses, neighbours = network_sample(args.cells)
    n_atoms = len(masses)
    with tempfile.TemporaryDirectory(dir=Path(__file__).parent) as scratch:
        scratch = Path(scratch)
        scipy.io.mmwrite(scratch / "H.mtx", H, symmetry="symmetric")
        np.save(scratch / "masses.npy", masses)
        import_matrix_market(scratch / "H.mtx", np.load(scratch / "masses.npy"), "reduced", scratch / "H.zarr")
        chosen = backends()
        trials = expand(chosen, [40], [None], [1e-12], [0], [1, 2] if "slepc" in chosen else [1])
        out = gauge(str(scratch / "H.zarr"), scratch / "gauge", trials, ["dense", "eigsh"], lowest=args.lowest)
        record = json.loads((out / "gauge.json").read_text())
        table = (out / "gauge.md").read_text()
    for row in record["rows"]:
        row.pop("eigenvalues", None)
    name = f"settings_gauge-{n_atoms}"
    header = (f"# Solver settings on a {n_atoms}-atom spring network (lowest {args.lowest})\n\n"
              f"Mean neighbours {neighbours:.1f}; produced by benchmarks/settings_gauge.py --cells {args.cells}.\n\n")
    write_results(name, {"n_atoms": n_atoms, "lowest": args.lowest, "rows": record["rows"]},
                  header + table.split("\n", 2)[2])


if __name__ == "__main__":
    main()

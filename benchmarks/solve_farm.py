"""Benchmark: the lowest 100 modes of a 13,500-atom disordered solid — eigenfarm vs a plain scipy call,
the farm against inline, and 2 workers against 1.

Sample: the stress-free disordered spring network of benchmarks/factorisation_choices.py
(``network_sample``: jittered FCC at density 1.2, ~12 springs per atom, two masses), written as Matrix
Market and imported as a Hessian store (reduced units), exactly as a user would bring their own matrix.

Measured (wall time; every run in a fresh process with 1 BLAS thread per process):

* ``plain``: ``scipy.sparse.linalg.eigsh(H, k=103, M=M, sigma=σ)`` — the one call a user would
  otherwise write (SuperLU with its default COLAMD ordering on H − σM), σ = half the lowest
  non-trivial eigenvalue;
* ``inline``: ``eigenfarm solve --lowest 100 --inline`` through the library (every task in one process;
  --lowest up to 200 runs in one pass: one factorisation below the spectrum, one proving count);
* ``farm-1`` / ``farm-2``: the same job on a local dask cluster of 1 / 2 workers (cluster start-up
  excluded, reported apart);
* ``many slices``: the window holding those modes, ``--window 0:f₁₀₀``, cut into ~16 slices
  (``slice_modes`` 7), inline, on 1 and on 2 workers.

Targets (issue 3): plain / farm ≥ 15; farm-1 / inline ≤ 1.10; 16-slice farm-1 / farm-2 ≥ 1.7.
Usage:  python benchmarks/solve_farm.py [--cells 15] [--skip-plain]
Results: benchmarks/results/solve_farm.{json,md}.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from result_files import write_results

HERE = Path(__file__).resolve().parent
ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
K = 100


def make_store(cells: int, folder: Path) -> tuple[Path, Path, Path]:
    """Matrix Market file, masses file and imported store of the network sample."""
    import numpy as np
    import scipy.io

    sys.path.insert(0, str(HERE))
    from factorisation_choices import network_sample

    from eigenfarm.store import import_matrix_market

    H, masses, _ = network_sample(cells)
    mtx, mass_file, store = folder / "H.mtx", folder / "masses.npy", folder / "H.zarr"
    scipy.io.mmwrite(str(mtx), H, symmetry="symmetric")
    np.save(mass_file, masses)
    import_matrix_market(mtx, str(mass_file), "reduced", store)
    return mtx, mass_file, store


def child(args) -> None:
    """One measured run in this (fresh) process; prints a JSON record."""
    import numpy as np

    record = {"case": args.case}
    if args.case == "plain":
        import scipy.io
        import scipy.sparse as sp
        import scipy.sparse.linalg as sla

        H = scipy.io.mmread(args.mtx).tocsc()
        M = sp.diags(np.repeat(np.load(args.masses), 3)).tocsc()
        started = time.perf_counter()
        values = sla.eigsh(H, k=K + 3, M=M, sigma=args.sigma, return_eigenvectors=False)
        record.update(seconds=time.perf_counter() - started, lowest=sorted(values.tolist())[3:6])
    else:
        from eigenfarm.catalogue import open_catalogue
        from eigenfarm.farm import solvejob
        from eigenfarm.farm.cluster import open_client
        from eigenfarm.farm.runner import runner_for
        from eigenfarm.solve.slicer import LanczosSettings

        if args.window_hi:
            request = solvejob.SolveRequest(window=(0.0, args.window_hi), slice_modes=args.slice_modes)
        else:
            request = solvejob.SolveRequest(lowest=K, slice_modes=args.slice_modes, lanczos=LanczosSettings())
        client_start = time.perf_counter()
        with (open_client(args.workers) if args.workers else _nothing()) as client:
            record["cluster_start_seconds"] = time.perf_counter() - client_start
            runner = runner_for(client)
            started = time.perf_counter()
            job = solvejob.prepare(runner, args.store, args.out, request, True, lambda text: None)
            out = solvejob.run(runner, [job], request, overwrite=True)[0]
            record["seconds"] = time.perf_counter() - started
        cat = open_catalogue(out)
        record.update(slices=len(cat.attrs["slices"]), complete=bool(cat.complete), n_modes=cat.n_modes,
                      max_residual=float(cat.residuals.max()), lowest=cat.eigenvalues[:3].tolist(),
                      top_frequency=float(cat.frequencies[-1]))
    print(json.dumps(record))


class _nothing:
    def __enter__(self):
        return None

    def __exit__(self, *exc):
        return False


def measure(case: str, timeout: float, **options) -> dict:
    cmd = [sys.executable, __file__, "--child", case] + [f"--{k.replace('_', '-')}={v}" for k, v in options.items()]
    env = {**os.environ, **ONE_THREAD}
    try:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)
    except subprocess.TimeoutExpired:
        return {"case": case, "seconds": None, "note": f"stopped after {timeout:.0f} s"}
    if done.returncode:
        return {"case": case, "seconds": None, "note": done.stderr.strip().splitlines()[-1][:200]}
    return json.loads(done.stdout.strip().splitlines()[-1])


def ratio(a, b):
    return None if not a or not b else a / b


def markdown(report: dict) -> str:
    rows = "\n".join(f"| {name} | {r.get('seconds') and round(r['seconds'], 1)} | {r.get('slices', '')} | "
                     f"{r.get('complete', '')} | {r.get('max_residual', '') and format(r['max_residual'], '.1e')} | "
                     f"{r.get('cluster_start_seconds') and round(r['cluster_start_seconds'], 1) or ''} | {r.get('note', '')} |"
                     for name, r in report["runs"].items())
    ratios = "\n".join(f"| {k} | {v and round(v, 2)} | {report['targets'][k]} |" for k, v in report["ratios"].items())
    return f"""# Lowest {K} modes of a {report['atoms']:,}-atom disordered solid

Machine: {report['machine']}; date {report['date']}; 1 BLAS thread per process.  Shared machine: read
ratios, not absolute seconds.

| run | seconds | slices | complete | max residual | cluster start (s) | note |
|---|---:|---:|---|---:|---:|---|
{rows}

| ratio | measured | target |
|---|---:|---|
{ratios}
"""


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=15)
    parser.add_argument("--skip-plain", action="store_true")
    parser.add_argument("--timeout", type=float, default=900)
    parser.add_argument("--child")
    for name in ("mtx", "masses", "store", "out"):
        parser.add_argument(f"--{name}")
    parser.add_argument("--sigma", type=float)
    parser.add_argument("--workers", type=int, default=0)
    parser.add_argument("--slice-modes", type=int, default=40)
    parser.add_argument("--window-hi", type=float, default=0.0)
    args = parser.parse_args(argv)
    if args.child:
        args.case = args.child
        child(args)
        return 0
    with tempfile.TemporaryDirectory(dir=os.environ.get("EIGENFARM_BENCH_TMP")) as tmp:
        folder = Path(tmp)
        mtx, masses, store = make_store(args.cells, folder)
        common = {"store": store, "out": folder / "m.zarr"}
        runs = {"inline": measure("inline", args.timeout, **common),
                "farm-1": measure("farm", args.timeout, workers=1, **common),
                "farm-2": measure("farm", args.timeout, workers=2, **common)}
        sliced = {**common, "slice_modes": 7, "window_hi": 1.0001 * runs["inline"]["top_frequency"]}
        runs.update({"many slices inline": measure("inline", args.timeout, **sliced),
                     "many slices farm-1": measure("farm", args.timeout, workers=1, **sliced),
                     "many slices farm-2": measure("farm", args.timeout, workers=2, **sliced)})
        if not args.skip_plain:
            sigma = 0.5 * runs["inline"]["lowest"][0]
            runs["plain"] = measure("plain", args.timeout, mtx=mtx, masses=masses, sigma=sigma)
    sec = {k: v.get("seconds") for k, v in runs.items()}
    best = min(s for k, s in sec.items() if s and k in ("inline", "farm-1", "farm-2"))
    report = {"atoms": 4 * args.cells**3, "machine": f"{os.cpu_count()} cores, {platform.machine()}",
              "date": time.strftime("%Y-%m-%d %H:%M"), "runs": runs,
              "ratios": {"plain / best eigenfarm": ratio(sec.get("plain"), best),
                         "farm-1 / inline": ratio(sec["farm-1"], sec["inline"]),
                         "many slices: farm-1 / farm-2": ratio(sec["many slices farm-1"], sec["many slices farm-2"])},
              "targets": {"plain / best eigenfarm": "≥ 15", "farm-1 / inline": "≤ 1.10",
                          "many slices: farm-1 / farm-2": "≥ 1.7"}}
    write_results("solve_farm", report, markdown(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())

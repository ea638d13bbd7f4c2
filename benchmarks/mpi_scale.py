"""Scale runs of the slepc backend on this machine (issue 5, part 5): MPI ranks against one process.

Samples: factorisation_choices.py's stress-free jittered-FCC spring network (4·cells³ atoms, two masses,
~12 neighbours; cells 30 → 108,000 atoms), written straight into a Hessian store (the BSR blocks of H cut
into shards of ``--shard-atoms`` atoms, validated by the store's own checks) so that every MPI rank reads
only its own shards.

Two measurements, each run in a fresh process (or a fresh ``mpiexec`` job) watched by
:func:`eigenfarm.trials.watch.run_watched` for wall time and resident memory (largest process of the
tree and the sum over it, polled every 0.05 s), with the load average of the machine before and after:

1. ``factor``: one MUMPS LDLᵀ of D − σI through the slepc backend on P = 1 and P = 2 ranks — σ below
   the spectrum (−10⁻⁴‖D‖₁) and optionally an interior σ (the eigenvalue with a tenth of the spectrum
   below it, from a 500-atom sample of the same recipe).  The job (``factor-job``, this file under
   ``mpiexec``) reads its rows of D from the store (eigenfarm.solve.sharded), then times, between
   barriers, MUMPS's analysis + factorisation (``KSP.setUp``; PETSc's MatCholFctrSym/MatCholFctrNum
   events split it into analysis and numerical factorisation) and one solve; each rank reports its
   peak resident memory (VmHWM) and MUMPS's own numbers (entries in the factors INFOG(29), flops
   RINFOG(3), memory INFOG(21)/(22) and per rank INFO(22), negative pivots INFOG(12)).
2. ``lowest``: ``eigenfarm solve H.zarr --lowest 50`` (a) in one process with ``--backend auto
   --inline`` (CHOLMOD below the spectrum) and (b) ``mpiexec -n 2 … --backend slepc``; a run still going
   after ``--timeout`` seconds is stopped (SIGTERM, then SIGKILL) and recorded as "> timeout".

Every process gets 1 BLAS thread (OMP_NUM_THREADS = OPENBLAS_NUM_THREADS = 1).  The raw records are
appended to ``--scratch``/runs.jsonl as they come in; ``report`` turns them into
results/mpi_scale.{json,md}.

    python benchmarks/mpi_scale.py factor --cells 30 --ranks 1 2 [--interior]
    python benchmarks/mpi_scale.py lowest --cells 20 30 40 --timeout 600
    python benchmarks/mpi_scale.py report
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parent))
from result_files import write_results  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
PYTHON = str(ROOT / ".venv" / "bin" / "python")
ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
MPIEXEC = ["mpiexec", "--allow-run-as-root", "--oversubscribe"]
DEFAULT_SCRATCH = Path("/tmp/eigenfarm-mpi-scale")


# ------------------------------------------------------------------------------------------ the store
def write_network_store(cells: int, out: Path, shard_atoms: int) -> dict:
    """The network of ``cells``³ FCC cells as a Hessian store at ``out`` (replaced if present)."""
    from factorisation_choices import network_sample

    from eigenfarm.farm.runner import runner_for
    from eigenfarm.store import layout
    from eigenfarm.store.atomic import PartialStore
    from eigenfarm.store.provenance import stamp
    from eigenfarm.store.writer import finalise, root_attributes, store_summary

    started = time.perf_counter()
    H, masses, neighbours = network_sample(cells)
    n = len(masses)
    blocks = sp.bsr_matrix(H, blocksize=(3, 3))
    del H
    blocks.sort_indices()
    bounds = layout.plan_bounds(n, shard_atoms)
    original = np.arange(n, dtype=np.int64)
    provenance = {"source": {"kind": "benchmark", "recipe": "benchmarks/mpi_scale.py network_sample",
                             "cells": cells}, **stamp()}
    partial = PartialStore(out, overwrite=True)
    layout.create_root(partial.path, root_attributes(n, "reduced", bounds, provenance, {"curve": "input"}),
                       masses, original)
    digests = []
    for k in range(len(bounds) - 1):
        first, stop = int(bounds[k]), int(bounds[k + 1])
        pointer = blocks.indptr[first:stop + 1]
        part = slice(int(pointer[0]), int(pointer[-1]))
        shard = layout.Shard(first, stop, (pointer - pointer[0]).astype(np.int64),
                             blocks.indices[part].astype(np.int64), np.ascontiguousarray(blocks.data[part]))
        digests.append(layout.write_shard(partial.path, k, shard))
    runner = runner_for(None)
    verdict, digest, n_blocks = finalise(runner, partial.path, bounds, masses, original, digests,
                                         sum_rule_severity="warning")
    summary = store_summary(partial.commit(), bounds, verdict, digest, n_blocks, started)
    return {"n_atoms": n, "neighbours": neighbours, "n_shards": summary["n_shards"], "nnz": summary["nnz"],
            "valid": verdict.get("valid", verdict) if isinstance(verdict, dict) else str(verdict),
            "seconds": summary["seconds"]}


def store_for(cells: int, scratch: Path, shard_atoms: int) -> Path:
    """The store of ``cells`` under ``scratch`` (built once, in its own process so it leaves no memory)."""
    path = scratch / f"network-{cells}.zarr"
    if not path.exists():
        scratch.mkdir(parents=True, exist_ok=True)
        import subprocess

        subprocess.run([PYTHON, __file__, "--shard-atoms", str(shard_atoms), "store", "--cells", str(cells),
                        "--out", str(path)], check=True, env={**os.environ, **ONE_THREAD})
    return path


def interior_shift(seed_cells: int = 5, fraction: float = 0.1) -> float:
    """The eigenvalue of D with ``fraction`` of the spectrum below it, from a small sample (dense eigvalsh;
    the density of states is intensive)."""
    from factorisation_choices import mass_weighted, network_sample

    small = mass_weighted(*network_sample(seed_cells)[:2])
    return float(np.quantile(np.linalg.eigvalsh(small.toarray()), fraction))


# ------------------------------------------------------------------------------ the factorisation job
def factor_job(store: str, sigma_kind: str, sigma_value: float | None, out: str, ordering: str = "auto") -> None:
    """Run under mpiexec (or alone): read D, factor D − σI with MUMPS through the slepc backend, record."""
    begun = time.perf_counter()
    from eigenfarm.solve.backends.slepc import SlepcBackend, mumps_statistics, require
    from eigenfarm.solve.sharded import local_rows, ShardedMatrix

    PETSc, _ = require()
    PETSc.Log.begin()
    comm = PETSc.COMM_WORLD
    mpi = comm.tompi4py()
    marks = {"imports": time.perf_counter() - begun}
    cpu = {"imports": time.process_time()}
    clock = [time.process_time()]

    def mark(name: str, since: float) -> float:
        cpu[name] = time.process_time() - clock[0]  # this rank's own CPU time in the phase, before the barrier
        mpi.Barrier()
        now = time.perf_counter()
        clock[0] = time.process_time()
        marks[name] = now - since
        return now

    t = mark("startup_barrier", time.perf_counter())
    rows, layout, shards, original = local_rows(store, comm)
    t = mark("read_rows", t)
    D = ShardedMatrix.assemble(rows, layout, shards, original)
    del rows
    t = mark("assemble", t)
    norm = D.mat.norm(PETSc.NormType.NORM_1)
    sigma = -1e-4 * norm if sigma_kind == "below" else float(sigma_value)
    backend = SlepcBackend(ordering=ordering)
    A = D.shifted(sigma)
    t = mark("shift", t)
    ksp = backend._factored(A, sigma)  # MUMPS analysis + numerical factorisation, collectively
    t = mark("factor", t)
    F = ksp.getPC().getFactorMatrix()
    status = {"infog1": int(F.getMumpsInfog(1)), "infog2": int(F.getMumpsInfog(2)), "info1": int(F.getMumpsInfo(1)),
              "info2": int(F.getMumpsInfo(2)), "pc_failed_reason": str(ksp.getPC().getFailedReason())}
    below, zero, above = F.getInertia()
    rhs, x = layout.vector(), layout.vector()
    rhs.setRandom()
    ksp.solve(rhs, x)
    residual = A.createVecLeft()
    A.mult(x, residual)
    residual.axpy(-1.0, rhs)
    backward = residual.norm() / (norm * x.norm() + rhs.norm())
    t = mark("one_solve", t)
    events = {name: PETSc.Log.Event(name).getPerfInfo().get("time")
              for name in ("MatCholFctrSym", "MatCholFctrNum", "MatSolve")}
    here = {"rank": comm.getRank(), "rows": layout.local, "shards": list(shards),
            "peak_rss_mib": _status_mib("VmHWM"), "rss_mib": _status_mib("VmRSS"),
            "mumps_info22_mib": int(F.getMumpsInfo(22)), "mumps_status": status, "mumps_info16_mib": int(F.getMumpsInfo(16)),
            "events_seconds": events, "marks": marks, "cpu_seconds": cpu, "host": platform.node()}
    everyone = mpi.gather(here, root=0)
    if comm.getRank() == 0:
        record = {"sigma_kind": sigma_kind, "sigma": sigma, "norm_1": norm, "n": layout.n, "ranks": comm.getSize(),
                  "inertia": [int(below), int(zero), int(above)], "mumps_status": status, "backward_error": backward,
                  **mumps_statistics(F), "total_mib_infog22": int(F.getMumpsInfog(22)),
                  "flops_rinfog3": float(F.getMumpsRinfog(3)), "negative_pivots_infog12": int(F.getMumpsInfog(12)),
                  "icntl": {str(k): int(F.getMumpsIcntl(k)) for k in (7, 13, 14, 18, 28, 29)},
                  "per_rank": everyone, "wall_in_job": time.perf_counter() - begun}
        Path(out).write_text(json.dumps(record, indent=1, default=float))


def _status_mib(key: str) -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1]) / 1024
    raise KeyError(key)


# ------------------------------------------------------------------------------------- watched runs
def watched(argv: list[str], timeout: float | None) -> dict:
    """``argv`` in a fresh process tree watched by run_watched, stopped after ``timeout`` s (coreutils
    ``timeout``: SIGTERM, which mpiexec passes to its ranks, then SIGKILL 30 s later)."""
    from eigenfarm.trials.watch import run_watched

    if timeout:
        argv = ["timeout", "--kill-after=30", str(int(timeout)), *argv]
    load_before = os.getloadavg()
    run = run_watched(argv, env=ONE_THREAD)
    return {"argv": argv, "petsc_options": os.environ.get("PETSC_OPTIONS", ""), "status": run.status, "seconds": run.seconds, "timed_out": run.status in (124, 137),
            "peak_process_mib": run.peak_process_mib, "peak_total_mib": run.peak_total_mib,
            "loadavg_before": list(load_before), "loadavg_after": list(os.getloadavg()),
            "stderr_tail": run.stderr[-600:] if run.status else ""}


def log(scratch: Path, record: dict) -> None:
    record["when"] = time.strftime("%Y-%m-%dT%H:%M:%S")
    with open(scratch / "runs.jsonl", "a") as handle:
        handle.write(json.dumps(record, default=float) + "\n")
    print(json.dumps({k: v for k, v in record.items() if k not in ("job", "argv")}, default=float)[:600], flush=True)


def run_factor(args) -> None:
    sigmas = [("below", None)] + ([("interior", interior_shift())] if args.interior else [])
    for cells in args.cells:
        store = store_for(cells, args.scratch, args.shard_atoms)
        for kind, value in sigmas:
            for ranks in args.ranks:
                out = args.scratch / f"factor-{cells}-{kind}-{ranks}.json"
                out.unlink(missing_ok=True)
                job = [PYTHON, __file__, "factor-job", str(store), "--sigma-kind", kind, "--json", str(out),
                       "--ordering", args.ordering]
                if value is not None:
                    job += ["--sigma", repr(value)]
                run = watched(MPIEXEC + ["-n", str(ranks)] + job if ranks > 1 or args.mpiexec_one else job,
                              args.timeout)
                record = {"kind": "factor", "cells": cells, "n_atoms": 4 * cells**3, "ranks": ranks,
                          "sigma_kind": kind, "ordering_asked": args.ordering, **run}
                if out.exists():
                    record["job"] = json.loads(out.read_text())
                log(args.scratch, record)


GEMM = ("import time, numpy as np; a = np.random.rand(3000, 3000); b = a.T.copy(); a @ b; t = time.perf_counter()\n"
        "for _ in range(5): a @ b\nprint(5 * 2 * 3000**3 / (time.perf_counter() - t) / 1e9)")


def run_cores(args) -> None:
    """Single-threaded 3000 × 3000 matrix products (numpy's BLAS) in one process, then in two processes at
    once: GFlop/s each — how far dense kernels on both cores scale on this machine."""
    import subprocess

    def start():
        return subprocess.Popen([PYTHON, "-c", GEMM], stdout=subprocess.PIPE, text=True, env={**os.environ, **ONE_THREAD})

    load_before = list(os.getloadavg())
    alone = float(start().communicate()[0])
    pair = [start(), start()]
    together = [float(proc.communicate()[0]) for proc in pair]
    log(args.scratch, {"kind": "cores", "alone_gflops": alone, "together_gflops": together,
                       "loadavg_before": load_before, "loadavg_after": list(os.getloadavg())})


def run_lowest(args) -> None:
    spent, stopped = 0.0, set()
    for cells in args.cells:
        store = store_for(cells, args.scratch, args.shard_atoms)
        for variant in args.variants:
            if spent > args.budget or variant in stopped:
                print(f"skipping cells {cells} {variant}: budget of {args.budget} s spent or a smaller run failed")
                continue
            out = args.scratch / f"modes-{cells}-{variant}.zarr"
            common = [PYTHON, "-m", "eigenfarm.cli", "solve", str(store), "--out", str(out), "--lowest",
                      str(args.lowest), "--overwrite"]
            if variant == "auto-inline":
                argv = common + ["--backend", "auto", "--inline"]
            else:
                argv = MPIEXEC + ["-n", "2"] + common + ["--backend", "slepc"]
            run = watched(argv, args.timeout)
            spent += run["seconds"]
            if run["status"] != 0:
                stopped.add(variant)  # a larger sample will not finish either
            record = {"kind": "lowest", "cells": cells, "n_atoms": 4 * cells**3, "variant": variant,
                      "lowest": args.lowest, **run}
            record.update(catalogue_summary(out) if run["status"] == 0 else {})
            log(args.scratch, record)


def catalogue_summary(path: Path) -> dict:
    """What the finished catalogue says: mode count, completeness verdict, eigenvalue range."""
    try:
        import zarr

        root = zarr.open_group(str(path), mode="r")
        attrs = dict(root.attrs)
        keep = {k: attrs[k] for k in ("complete", "completeness", "verdict", "n_modes") if k in attrs}
        return {"catalogue": keep or sorted(attrs)[:20]}
    except Exception as exc:  # noqa: BLE001 (a summary only)
        return {"catalogue_error": f"{type(exc).__name__}: {exc}"}


# ------------------------------------------------------------------------------------------- report
#: MUMPS INFOG(7), the ordering used (MUMPS user guide, ICNTL(7) — from memory)
MUMPS_ORDERINGS = {0: "AMD", 1: "given", 2: "AMF", 3: "SCOTCH", 4: "PORD", 5: "METIS", 6: "QAMD"}


def report(args) -> None:
    records = [json.loads(line) for line in (args.scratch / "runs.jsonl").read_text().splitlines() if line.strip()]
    if args.drop_before:
        records = [r for r in records if r["when"] >= args.drop_before]
    factor_rows, lowest_rows, ratios, by_case, cores = [], [], [], {}, []
    for r in records:
        load = f"{r['loadavg_before'][0]:.1f} → {r['loadavg_after'][0]:.1f}"
        if r["kind"] == "cores":
            pair = r["together_gflops"]
            cores.append(f"| {r['when'][:16]} | {r['alone_gflops']:.1f} | {pair[0]:.1f} + {pair[1]:.1f} | "
                         f"{sum(pair) / r['alone_gflops']:.2f} |")
        elif r["kind"] == "factor":
            job = r.get("job")
            if not job:
                factor_rows.append(f"| {r['when'][:16]} | {r['n_atoms']:,} | {r['sigma_kind']} | {r['ranks']} | "
                                   f"{r.get('ordering_asked', 'auto')} | | no result: status {r['status']} | | | | "
                                   f"{r['seconds']:.0f} | | {r['peak_process_mib']:,.0f} | {r['peak_total_mib']:,.0f} | "
                                   f"| | {load} |")
                continue
            ranks = job["per_rank"]
            ev = [p["events_seconds"] for p in ranks]
            sym = max(e["MatCholFctrSym"] or 0 for e in ev)
            num = max(e["MatCholFctrNum"] or 0 for e in ev)
            wall = ranks[0]["marks"]["factor"]
            cpu = [p.get("cpu_seconds", {}).get("factor", float("nan")) for p in ranks]
            peaks = [p["peak_rss_mib"] for p in ranks]
            whole = f"{r['seconds']:.0f}" + (f" (status {r['status']})" if r["status"] else "")
            infog1 = job.get("mumps_status", {}).get("infog1", "not recorded")
            good = np.isfinite(job["backward_error"]) and infog1 in (0, "not recorded")
            outcome = (f"{job['backward_error']:.1e}" if good else
                       f"**failed** (backward error {job['backward_error']}, INFOG(1) = {infog1})")
            factor_rows.append(
                f"| {r['when'][:16]} | {r['n_atoms']:,} | {r['sigma_kind']} (σ = {job['sigma']:.3g}) | {r['ranks']} | "
                f"{r.get('ordering_asked', 'auto')} → {MUMPS_ORDERINGS.get(job['ordering'], job['ordering'])} | "
                f"{job['icntl']['14']} | {outcome} | {wall:.0f} | "
                f"{sym:.1f} / {num:.0f} | {' / '.join(f'{c:.0f}' for c in cpu)} | {whole} | "
                f"{' / '.join(f'{m:,.0f}' for m in peaks)} | {r['peak_process_mib']:,.0f} | {r['peak_total_mib']:,.0f} | "
                f"{job['factor_nnz']:.3g} | {job['flops_rinfog3']:.3g} | {load} |")
            if good:
                case = (r["n_atoms"], r["sigma_kind"], MUMPS_ORDERINGS.get(job["ordering"], job["ordering"]))
                by_case.setdefault(case, {})[r["ranks"]] = (wall, max(cpu), max(peaks), sum(peaks))
        else:
            verdict = "> {:.0f} (stopped)".format(args.timeout) if r["timed_out"] else (
                f"{r['seconds']:.0f}" if r["status"] == 0 else f"failed (status {r['status']}) at {r['seconds']:.0f}")
            complete = r.get("catalogue", {}).get("completeness", {}).get("complete", "")
            lowest_rows.append(f"| {r['when'][:16]} | {r['n_atoms']:,} | {r['variant']} | {verdict} | {complete} | "
                               f"{r['peak_process_mib']:,.0f} | {r['peak_total_mib']:,.0f} | {load} |")
    for (atoms, kind, ordering), runs in sorted(by_case.items()):
        if 1 in runs and 2 in runs:
            one, two = runs[1], runs[2]
            ratios.append(f"| {atoms:,} | {kind} | {ordering} | {one[0] / two[0]:.2f} | {one[1] / two[1]:.2f} | "
                          f"{two[2] / one[2]:.2f} | {two[3] / one[3]:.2f} |")
    table = ["# MPI scale runs (issue 5, part 5)", "",
             f"Machine: {os.cpu_count()} cores, 24 GiB (1-minute load average before → after each run; the "
             "notes say which runs shared the machine). 1 BLAS thread per process. Produced by benchmarks/mpi_scale.py; samples are "
             "factorisation_choices.py's network_sample (4·cells³ atoms), stores of 4,096-atom shards.", "",
             "## MUMPS LDLᵀ of D − σI through the slepc backend, 1 vs 2 MPI ranks", "",
             "factor s: KSP.setUp (MUMPS analysis + numerical factorisation) between barriers; CPU s: each rank's "
             "own CPU time in it; whole s: the watched process tree, start to exit; peak per rank: VmHWM of each "
             "rank; largest/sum: the watcher's polled RSS.", "",
             "| when | atoms | σ | ranks | ordering asked → used (INFOG(7)) | ICNTL(14) | backward error of one solve | factor s | analysis / numeric s (PETSc events, slowest rank) | CPU s per rank | "
             "whole s | peak RSS per rank MiB | largest MiB | sum MiB | MUMPS factor entries | MUMPS flops | load |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|", *factor_rows, "",
             "| atoms | σ | ordering | speed-up 1→2 ranks (factor wall) | speed-up (CPU of the slowest rank) | "
             "peak memory per rank, 2 ranks / 1 | summed memory, 2 ranks / 1 |", "|---|---|---|---|---|---|---|",
             *ratios, "", "(Ratios from the latest successful run of each rank count.)", "",
             "## Do both cores scale? (`cores`: single-threaded 3000 × 3000 numpy matrix products)", "",
             "| when | GFlop/s alone | GFlop/s, two processes at once | together / alone |", "|---|---|---|---|",
             *cores, "",
             f"## Lowest {args.lowest} non-trivial modes (`eigenfarm solve --lowest {args.lowest}`), stopped at "
             f"{args.timeout:.0f} s", "",
             "| when | atoms | run | wall s | complete | largest process MiB | sum MiB | load |",
             "|---|---|---|---|---|---|---|---|", *lowest_rows, ""]
    if args.notes:
        table += ["## Notes", "", Path(args.notes).read_text().strip(), ""]
    write_results("mpi_scale", {"machine": {"cores": os.cpu_count(), "platform": platform.platform()},
                                "records": records}, "\n".join(table) + "\n")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scratch", type=Path, default=DEFAULT_SCRATCH, help="stores, catalogues, runs.jsonl")
    parser.add_argument("--shard-atoms", type=int, default=4096)
    parser.add_argument("--timeout", type=float, default=600.0)
    sub = parser.add_subparsers(dest="command", required=True)
    store = sub.add_parser("store")
    store.add_argument("--cells", type=int, required=True)
    store.add_argument("--out", type=Path, required=True)
    job = sub.add_parser("factor-job")
    job.add_argument("store")
    job.add_argument("--sigma-kind", choices=["below", "interior"], default="below")
    job.add_argument("--sigma", type=float)
    job.add_argument("--json", required=True)
    job.add_argument("--ordering", default="auto", help="MUMPS ICNTL(7) by name (eigenfarm slepc backend ORDERINGS)")
    factor = sub.add_parser("factor")
    factor.add_argument("--cells", type=int, nargs="+", default=[30])
    factor.add_argument("--ranks", type=int, nargs="+", default=[1, 2])
    factor.add_argument("--interior", action="store_true")
    factor.add_argument("--ordering", default="auto", help="MUMPS ordering asked for (auto, amd, amf, scotch, pord, "
                        "metis, qamd); INFOG(7) in the record says which one MUMPS used")
    sub.add_parser("cores", help="dense matrix products on 1 and on 2 cores at once: does the machine scale?")
    factor.add_argument("--mpiexec-one", action="store_true", help="run the 1-rank job under mpiexec -n 1 too")
    lowest = sub.add_parser("lowest")
    lowest.add_argument("--cells", type=int, nargs="+", default=[20, 30, 40])
    lowest.add_argument("--variants", nargs="+", default=["auto-inline", "slepc-2"])
    lowest.add_argument("--lowest", type=int, default=50)
    lowest.add_argument("--budget", type=float, default=2100.0, help="stop starting runs after this many seconds")
    rep = sub.add_parser("report")
    rep.add_argument("--lowest", type=int, default=50)
    rep.add_argument("--notes", help="a Markdown file of notes to append")
    rep.add_argument("--drop-before", help="ignore records before this ISO time")
    args = parser.parse_args()
    if args.command == "store":
        print(json.dumps(write_network_store(args.cells, args.out, args.shard_atoms), default=str))
    elif args.command == "factor-job":
        factor_job(args.store, args.sigma_kind, args.sigma, args.json, args.ordering)
    elif args.command == "cores":
        run_cores(args)
    elif args.command == "factor":
        run_factor(args)
    elif args.command == "lowest":
        run_lowest(args)
    else:
        report(args)


if __name__ == "__main__":
    main()

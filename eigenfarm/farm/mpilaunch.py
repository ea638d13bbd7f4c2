"""MPI jobs from the dask farm: each store of a job is one task that runs ``mpiexec -n P`` as a subprocess.

The model (docs/parallel-solves.md): dask schedules whole stores; each store is solved by an MPI job of
P ranks (:mod:`eigenfarm.farm.mpijob`) that plans, solves and merges it on its own, in one node
allocation.  A dask worker running such a task holds P cores, so a node of C cores runs C / P workers
(``--workers``).  Slices are not spread over MPI jobs: each would read the store and factor again, and
the plan must be made before its slices exist; one MPI job per store shares one set of ranks and its
factorisations' memory for the whole store.
"""

from __future__ import annotations

import os
import shlex
import subprocess
import sys
from pathlib import Path

from eigenfarm.errors import InputError
from eigenfarm.farm.runner import Runner

#: the launcher; EIGENFARM_MPIEXEC overrides it (e.g. "srun --mpi=pmix" inside a SLURM allocation)
MPIEXEC = "mpiexec"


def mpiexec(ranks: int) -> list[str]:
    """The command prefix starting ``ranks`` MPI processes here.  As root Open MPI must be told it may
    run (``--allow-run-as-root``) and may place more ranks than cores (``--oversubscribe``)."""
    launcher = os.environ.get("EIGENFARM_MPIEXEC")
    if launcher:
        return shlex.split(launcher) + ["-n", str(int(ranks))]
    root = ["--allow-run-as-root", "--oversubscribe"] if os.geteuid() == 0 else []
    return [MPIEXEC, *root, "-n", str(int(ranks))]


def request_options(request, overwrite: bool) -> list[str]:
    """``eigenfarm solve`` options that reproduce ``request`` (a SolveRequest) in the MPI job."""
    which = (["--window", f"{request.window[0]!r}:{request.window[1]!r}"] if request.window
             else ["--lowest", str(request.lowest)])
    options = [*which, "--backend", request.backend, "--slice-method", request.slice_method,
               "--slice-modes", str(request.slice_modes), "--tol", repr(request.lanczos.tol),
               "--zero-tol", repr(request.zero_tol)]
    if request.lanczos.ncv:
        options += ["--ncv", str(request.lanczos.ncv)]
    return options + ["--strict"] * request.strict + ["--overwrite"] * overwrite


def store_task(store: str, out: str, ranks: int, options: list[str]) -> str:
    """Solve ``store`` into ``out`` with an MPI job of ``ranks`` ranks; returns ``out``.  Its one-line
    error becomes this task's InputError."""
    command = [*mpiexec(ranks), sys.executable, "-m", "eigenfarm.cli", "solve", store, "--out", out, *options]
    # os.environ explicitly: a process that has started MPI (a singleton, e.g. a dask worker that used the
    # slepc backend) carries Open MPI's variables in its C environment, and they derail a nested mpiexec
    done = subprocess.run(command, capture_output=True, text=True, env=dict(os.environ))
    if done.returncode:
        lines = [line for line in done.stderr.splitlines() if line.startswith("eigenfarm: error:")]
        reason = lines[0].removeprefix("eigenfarm: error: ") if lines else (done.stderr.strip() or "no message")
        raise InputError(f"{store}: MPI job of {ranks} ranks failed (status {done.returncode}): {reason}")
    return out


def solve_stores(runner: Runner, stores: list[str], outs: list, request, ranks: int, overwrite: bool,
                 progress=None) -> list[Path]:
    """One task per store on ``runner``, each an MPI job of ``ranks`` ranks; the catalogues' paths."""
    if request.backend != "slepc":
        raise InputError(f"--ranks runs MPI jobs, which need --backend slepc (not {request.backend!r})")
    options = request_options(request, overwrite)
    handles = [runner.submit(store_task, str(store), str(out), ranks, options) for store, out in zip(stores, outs)]
    return [Path(path) for path in runner.gather(handles, "stores", progress)]

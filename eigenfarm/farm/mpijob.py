"""A solve job on MPI ranks: ``mpiexec -n P eigenfarm solve H.zarr --out m.zarr … --backend slepc``.

Every rank runs the same code (single program, multiple data).  Per store:

1. rank 0 opens the job (store validation, destination check, work folder, a saved plan to resume);
2. every rank reads only its own shards of the store into the distributed D
   (:class:`eigenfarm.solve.sharded.ShardedMatrix`);
3. unless resumed, the plan is made as in the dask job: λ_max by Krylov–Schur; ``--lowest K`` with
   K ≤ 200 first in one Krylov–Schur pass from below the spectrum, proved complete by one count
   (:func:`eigenfarm.solve.slicer.solve_lowest` — two factorisations in all), otherwise slices
   (:func:`eigenfarm.farm.solvejob.plan_slices`), each count one collective MUMPS factorisation with
   inertia;
4. each unfinished slice is solved collectively (:mod:`eigenfarm.solve.slepc_slices`, ``krylov-schur``
   or ``interval``); its vectors are gathered to rank 0, which saves the part in the work folder;
5. rank 0 merges the parts into the catalogue with the same code as the dask job
   (:func:`eigenfarm.farm.solvejob.finish`): same catalogue contract, same completeness verdict.

Only rank 0 writes files or prints.  A failure on any rank is agreed on by all (:func:`_agreed`): every
rank raises the same :class:`RankError` (an InputError), so each prints nothing but rank 0 prints the one
line ``eigenfarm: error: …`` and all exit non-zero.  Anything that escapes this agreement aborts the MPI
job (MPI_Abort) so no rank waits forever.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

from eigenfarm.errors import ConvergenceError, InputError
from eigenfarm.farm import solvejob
from eigenfarm.farm.tasks import count_near, save_slice
from eigenfarm.plan.slicing import plan_one_pass
from eigenfarm.solve.backends.slepc import SlepcBackend, require
from eigenfarm.solve.slicer import IncompleteSlice


class RankError(InputError):
    """A failure on some rank, raised on every rank alike."""


#: variables an MPI launcher sets in each rank's environment (Open MPI, MPICH/Hydra and Intel MPI, PMIx/srun)
LAUNCHER_VARIABLES = ("OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_RANK")


def launched_by_mpi() -> bool:
    """True in a process started by mpiexec/srun (any number of ranks, one included).  Read from the
    environment, so this process does not start MPI to ask (a process that has started MPI would hand
    its state to dask workers it spawns, and theirs would fail to start)."""
    return any(name in os.environ for name in LAUNCHER_VARIABLES)


def slice_method(backend: str, asked: str | None, ranks: int | None) -> str:
    """The slice solver for ``--slice-method`` ``asked`` (None: ARPACK "lanczos" in one process,
    SLEPc "krylov-schur" for MPI runs of the slepc backend); InputError for a combination that cannot run."""
    from eigenfarm.solve.slepc_slices import SOLVERS

    if asked in SOLVERS and backend != "slepc":
        raise InputError(f"--slice-method {asked} runs SLEPc, which needs --backend slepc")
    if ranks and backend != "slepc":
        raise InputError(f"--ranks runs MPI jobs, which need --backend slepc (not {backend!r})")
    if asked == "lanczos" and launched_by_mpi():
        raise InputError("--slice-method lanczos runs in one process; under mpiexec choose krylov-schur or interval")
    if launched_by_mpi() and not (backend == "slepc" or ranks):
        raise InputError(f"under mpiexec use --backend slepc (backend {backend!r} would solve the whole job on every rank)")
    if asked:
        return asked
    return "krylov-schur" if backend == "slepc" and (ranks or launched_by_mpi()) else "lanczos"


def runs_here(request) -> bool:
    """True when this process is to solve ``request`` as a rank of an MPI job (this module): the slepc
    backend with a SLEPc slice method."""
    from eigenfarm.solve.slepc_slices import SOLVERS

    return request.backend == "slepc" and request.slice_method in SOLVERS


def _message(exc: BaseException) -> str:
    if isinstance(exc, IncompleteSlice):
        return f"{exc}; finished slices are kept, rerun the same command to resume"
    if isinstance(exc, (InputError, ConvergenceError)):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


def _agreed(fn, *args, root_only: bool = False):
    """``fn(*args)`` on every rank (on rank 0 only with ``root_only``, whose result is then sent to all);
    if it fails on any rank, every rank raises the same :class:`RankError`."""
    mpi = require()[0].COMM_WORLD.tompi4py()
    result, failure = None, None
    if not root_only or mpi.Get_rank() == 0:
        try:
            result = fn(*args)
        except Exception as exc:  # noqa: BLE001 (every failure must reach every rank)
            failure = _message(exc)
    failures = mpi.allgather(failure)
    for rank, text in enumerate(failures):
        if text is not None:
            raise RankError(text if mpi.Get_size() == 1 else f"{text} (rank {rank} of {mpi.Get_size()})")
    return mpi.bcast(result, root=0) if root_only else result


def _open(store: str, out, request, overwrite: bool):
    work, info, handle = solvejob.open_job(store, out, request, overwrite)
    return work, info, handle.units, work.plan, work.finished()


def _slices(D, backend: SlepcBackend, request, units, scale: float):
    count = lambda shifts: [count_near(lambda s: backend.count_below(D, s), float(shift), "D")  # noqa: E731
                            for shift in shifts]
    return solvejob.plan_slices(count, scale, request, units, D.layout.n)


def _one_pass(D, backend: SlepcBackend, request, scale: float):
    """``--lowest K`` (K ≤ ONE_PASS_MAX) in one Krylov–Schur pass from below the spectrum, proved by one
    count (:func:`eigenfarm.solve.slicer.solve_lowest`): (plan, its one slice's result) or None when
    the proof fails and the job slices instead."""
    from eigenfarm.solve.slepc_slices import KrylovSchurEngine
    from eigenfarm.solve.slicer import solve_lowest

    if not solvejob.tries_one_pass(request):
        return None
    found = solve_lowest(D, backend, request.lowest, scale, request.zero_tol, request.lanczos, KrylovSchurEngine())
    if found is None:
        return None
    return plan_one_pass(scale, request.zero_tol, request.lowest, found.check, found.count, found.n_zero), found.modes


def _plan(D, backend: SlepcBackend, request, units, work):
    """The plan (saved on rank 0): one pass for a small ``--lowest``, slices otherwise."""
    from eigenfarm.solve.slepc_slices import largest_eigenvalue

    started = time.perf_counter()
    scale = _agreed(largest_eigenvalue, D)
    one_pass = _agreed(_one_pass, D, backend, request, scale)
    if one_pass is None:
        plan = _agreed(_slices, D, backend, request, units, scale)
    else:
        plan, modes = one_pass
        _agreed(save_slice, work.save_part, D.original_index, plan.slices[0], modes, started, root_only=True)
    _agreed(work.save_plan, plan, root_only=True)
    return plan


def solve_store(store: str, out, request, overwrite: bool = False, notice=print, progress=None) -> Path:
    """Solve one store on all ranks of COMM_WORLD (module doc); the catalogue's path on every rank."""
    from eigenfarm.solve.sharded import ShardedMatrix, local_rows
    from eigenfarm.solve.slepc_slices import SOLVERS

    if request.slice_method not in SOLVERS:
        raise InputError(f"--slice-method {request.slice_method!r} does not run on MPI ranks: choose one of "
                         f"{', '.join(SOLVERS)}")
    work, info, units, plan, done = _agreed(_open, store, out, request, overwrite, root_only=True)
    D = _agreed(ShardedMatrix.assemble, *_agreed(local_rows, store))
    backend = _agreed(SlepcBackend)
    if plan is None:
        plan = _plan(D, backend, request, units, work)
        done = _agreed(work.finished, root_only=True)
    _agreed(solvejob.census_notice, plan, info, request, store, notice, root_only=True)
    todo = [piece for piece in plan.slices if piece.index not in done]
    for number, piece in enumerate(todo, 1):
        started = time.perf_counter()
        result = _agreed(SOLVERS[request.slice_method], D, backend, piece.lo, piece.hi, piece.expected,
                         plan.scale, request.lanczos)
        _agreed(save_slice, work.save_part, D.original_index, piece, result, started, root_only=True)
        if progress and D.layout.rank == 0:
            progress("slices", number, len(todo))
    job = solvejob.StoreJob(store, Path(out), plan, work, info)
    return _agreed(solvejob.finish, job, request, overwrite, progress, root_only=True)


def solve_stores(stores: list[str], outs: list, request, overwrite: bool, notice, progress) -> list[Path]:
    """:func:`solve_store` for each store in turn; ranks other than 0 print nothing.  Anything that
    escapes the agreement of :func:`_agreed` (a bug) aborts all ranks after one line on stderr."""
    mpi = require()[0].COMM_WORLD.tompi4py()
    if mpi.Get_rank():
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 (for the life of this process)
        sys.stderr = sys.stdout
    try:
        return [solve_store(store, out, request, overwrite, notice, progress) for store, out in zip(stores, outs)]
    except RankError:
        raise
    except BaseException as exc:
        if mpi.Get_size() == 1:
            raise
        print(f"eigenfarm: error: rank {mpi.Get_rank()}: {_message(exc)}", file=sys.__stderr__, flush=True)
        mpi.Abort(3)

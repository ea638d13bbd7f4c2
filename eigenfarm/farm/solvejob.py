"""A solve job: Hessian stores → plans → slice tasks → mode catalogues, on a runner (dask or inline).

For every store: estimate the spectrum's scale (one Lanczos task), plan the slices (inertia counts, one
task per shift, in parallel), then run one task per unfinished slice; each task saves its slice into
the job's work folder as soon as it is done, so a job interrupted for any reason and rerun with the
same command recomputes only the missing slices.  When a store's slices are all in, they are merged
into its catalogue.  Slices of all stores of an ensemble share the cluster.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

from eigenfarm import __version__
from eigenfarm.catalogue import WorkFolder, write_catalogue
from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.catalogue.writer import check_destination
from eigenfarm.errors import InputError
from eigenfarm.farm import tasks
from eigenfarm.farm.runner import Runner
from eigenfarm.plan.slicing import Plan, plan_lowest, plan_window
from eigenfarm.solve.dynamical import trivial_zero_modes
from eigenfarm.solve.slicer import LanczosSettings
from eigenfarm.store import open_store


@dataclass(frozen=True)
class SolveRequest:
    """What to compute and how.

    ``window``: (lo, hi) frequencies in the store's reported unit (THz for metal, ω for reduced), or
    ``lowest``: the K lowest modes above the zero band.  ``backend``: factorisation backend name;
    ``slice_modes``: target modes per slice; ``zero_tol``: zero band |λ| ≤ zero_tol·λ_max;
    ``strict``: negative eigenvalues are an error instead of a warning; ``slice_method``: "lanczos"
    (ARPACK in one process, any backend) or, with the slepc backend, "krylov-schur" or "interval"
    (SLEPc on MPI ranks, :mod:`eigenfarm.farm.mpijob`).
    """

    window: tuple[float, float] | None = None
    lowest: int | None = None
    backend: str = "auto"
    slice_modes: int = 40
    zero_tol: float = 1e-8
    strict: bool = False
    slice_method: str = "lanczos"
    lanczos: LanczosSettings = field(default_factory=LanczosSettings)

    def settings(self) -> dict:
        """The request as recorded in a catalogue (JSON-serialisable)."""
        out = asdict(self)
        out["window"] = list(self.window) if self.window else None
        return out


@dataclass
class StoreJob:
    """One store's part of a job: where it reads and writes, its plan and its work folder."""

    store: str
    out: Path
    plan: Plan
    work: WorkFolder
    info: dict


def _counter(runner: Runner, store: str, backend: str):
    def count(shifts):
        handles = [runner.submit(tasks.count_task, store, backend, float(s)) for s in shifts]
        return runner.gather(handles)

    return count


#: --lowest K up to this many modes is first tried in one Lanczos pass from below the spectrum
#: (memory ~ 2K vectors of 3N doubles); larger K, or a failed completeness proof, slices the window
ONE_PASS_MAX = 200


def tries_one_pass(request: SolveRequest) -> bool:
    """Whether ``request`` is first tried in one pass (``--lowest K`` with K ≤ :data:`ONE_PASS_MAX`), in
    the dask job and on MPI ranks alike."""
    return request.lowest is not None and request.lowest <= ONE_PASS_MAX


def _plan(runner: Runner, store: str, request: SolveRequest, units, n: int, work: WorkFolder) -> Plan:
    scale = runner.gather([runner.submit(tasks.scale_task, store)])[0]
    if tries_one_pass(request):
        plan = _one_pass(runner, store, request, scale, work)
        if plan is not None:
            return plan
    return plan_slices(_counter(runner, store, request.backend), scale, request, units, n)


def plan_slices(count, scale: float, request: SolveRequest, units, n: int) -> Plan:
    """The slices of ``request`` (window or lowest K) for a D of size n × n with λ_max = ``scale``,
    counting with ``count`` (a :data:`eigenfarm.plan.slicing.Counter`)."""
    if request.lowest is not None:
        return plan_lowest(count, scale, request.lowest, request.slice_modes, request.zero_tol, n)
    lo, hi = (float(units.eigenvalue(f)) for f in request.window)
    return plan_window(count, scale, lo, hi, request.slice_modes, request.zero_tol)


def _one_pass(runner: Runner, store: str, request: SolveRequest, scale: float, work: WorkFolder) -> Plan | None:
    """The lowest K in one task (tasks.lowest_task); its modes are saved as slice 0 of the plan returned."""
    found = runner.gather([runner.submit(tasks.lowest_task, store, request.backend, request.lowest, scale,
                                         request.zero_tol, request.lanczos, work.save_part)])[0]
    return None if found is None else found["plan"]


def open_job(store, out, request: SolveRequest, overwrite: bool) -> tuple[WorkFolder, dict, object]:
    """(work folder, catalogue info, store handle) of the job writing ``out`` from ``store``; refuses an
    invalid store or an output that may not be written before any work."""
    handle = open_store(store)
    _refuse_invalid(store, handle.validation)
    out = Path(out)
    check_destination(out, overwrite)  # refuse now, not after hours of solving
    fingerprint = {"hessian_digest": handle.digest, "request": request.settings(), "eigenfarm": __version__}
    work = WorkFolder(out, fingerprint)
    info = {"units": handle.units.name, "hessian_digest": handle.digest, "n_atoms": handle.n_atoms,
            "trivial_zero_modes": trivial_zero_modes(None if handle.box is None else handle.box.pbc),
            "store": str(Path(store).resolve()),
            "preparation": handle.provenance.get("source", {}).get("history")}
    return work, info, handle


def prepare(runner: Runner, store: str, out, request: SolveRequest, overwrite: bool,
            notice: Callable[[str], None]) -> StoreJob:
    """Open ``store``, plan its slices (or reuse the plan of an interrupted run) and open its work folder."""
    work, info, handle = open_job(store, out, request, overwrite)
    plan = work.plan
    if plan is None:
        plan = _plan(runner, str(store), request, handle.units, 3 * handle.n_atoms, work)
        work.save_plan(plan)
    census_notice(plan, info, request, store, notice)
    return StoreJob(str(store), Path(out), plan, work, info)


def _refuse_invalid(store, verdict: dict) -> None:
    """A store whose validation failed (non-finite, asymmetric, …) cannot be solved: say which check."""
    if verdict.get("passed"):
        return
    failed = [name for name, check in verdict.get("checks", {}).items()
              if check.get("passed") is False and check.get("severity") == "error"]
    raise InputError(f"{store}: failed validation ({', '.join(failed) or 'unknown check'}); "
                     "see 'eigenfarm hessian STORE' for the verdict")


def census_notice(plan: Plan, info: dict, request: SolveRequest, store, notice) -> None:
    if plan.n_negative:
        message = (f"{store}: {plan.n_negative} NEGATIVE eigenvalue(s) below −{plan.zero_tol:g}·λ_max: "
                   "the configuration is not at an energy minimum (relax it first)")
        if request.strict:
            raise InputError(message)
        notice("WARNING " + message)
    trivial = info["trivial_zero_modes"]
    if trivial is not None and plan.n_zero != trivial:
        notice(f"{store}: {plan.n_zero} zero modes where the cell implies {trivial} trivial ones "
               f"({plan.n_zero - trivial:+d}: rattlers, floppy modes or broken invariance)")


def run(runner: Runner, jobs: list[StoreJob], request: SolveRequest, overwrite: bool = False,
        progress=None) -> list[Path]:
    """Solve every unfinished slice of every job, then merge each job's catalogue; returns the paths."""
    handles = []
    for job in jobs:
        done = job.work.finished()
        for piece in job.plan.slices:
            if piece.index not in done:
                handles.append(runner.submit(tasks.slice_task, job.store, request.backend, piece,
                                             job.plan.scale, request.lanczos, job.work.save_part))
    if handles:
        runner.gather(handles, "slices", progress)
    return [finish(job, request, overwrite, progress) for job in jobs]


def finish(job: StoreJob, request: SolveRequest, overwrite: bool = False, progress=None) -> Path:
    """Merge the finished slices of ``job`` into its catalogue; returns its path."""
    return write_catalogue(job.out, job.work, job.plan, {**job.info, "solver": request.settings()},
                           geometry=Geometry.from_store(open_store(job.store)), overwrite=overwrite,
                           progress=progress)

"""The grid of settings a gauge run tries: one :class:`Trial` per combination, and the command it runs."""

from __future__ import annotations

import itertools
import sys
from dataclasses import asdict, dataclass

from eigenfarm.farm.mpilaunch import mpiexec


@dataclass(frozen=True)
class Trial:
    """One setting: ``backend`` name, ``slice_modes`` target modes per slice, ``ncv`` Lanczos basis size
    (None: the solver's default), ``tol`` Lanczos tolerance, ``workers`` dask workers (0: in-process),
    ``ranks`` MPI ranks (more than 1: the solve runs under mpiexec, slepc backend), ``method`` the slice
    method (None: the command's default)."""

    backend: str
    slice_modes: int
    ncv: int | None
    tol: float
    workers: int
    ranks: int = 1
    method: str | None = None

    @property
    def label(self) -> str:
        ncv = "auto" if self.ncv is None else str(self.ncv)
        where = f"{self.ranks} ranks" if self.ranks > 1 else ("inline" if self.workers == 0 else f"{self.workers}w")
        method = f" {self.method}" if self.method else ""
        return f"{self.backend}{method} m{self.slice_modes} ncv{ncv} tol{self.tol:g} {where}"

    def to_dict(self) -> dict:
        return asdict(self)


def expand(backends, slice_modes, ncvs, tols, workers, ranks=(1,), methods=(None,)) -> list[Trial]:
    """Every combination of the given lists, in the order given.  MPI ranks > 1 apply to the slepc
    backend only (and make ``workers`` moot: the MPI job is the whole solve); slice methods other than
    the default apply to slepc only; combinations that would repeat a run are dropped."""
    trials = []
    for backend, m, ncv, tol, w, p, method in itertools.product(backends, slice_modes, ncvs, tols, workers,
                                                                ranks, methods):
        if backend != "slepc" and (p > 1 or method is not None):
            continue
        trial = Trial(backend, m, ncv, tol, 0 if p > 1 else w, p, method)
        if trial not in trials:
            trials.append(trial)
    return trials


def solve_command(trial: Trial, store: str, out: str, request: list[str]) -> list[str]:
    """argv of the ``eigenfarm solve`` run for ``trial``; ``request`` is ["--lowest", K] or ["--window", …]."""
    argv = [sys.executable, "-m", "eigenfarm.cli", "solve", store, "--out", out, *request,
            "--backend", trial.backend, "--slice-modes", str(trial.slice_modes), "--tol", repr(trial.tol)]
    if trial.ncv is not None:
        argv += ["--ncv", str(trial.ncv)]
    if trial.method is not None:
        argv += ["--slice-method", trial.method]
    if trial.ranks > 1:
        return [*mpiexec(trial.ranks), *argv]
    return argv + (["--inline"] if trial.workers == 0 else ["--workers", str(trial.workers)])

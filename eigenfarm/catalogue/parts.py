"""The work folder of a solve job: one part per finished slice, so an interrupted job can resume.

A job writing ``modes.zarr`` keeps its work in ``modes.zarr.work/`` beside it::

    modes.zarr.work/
      job.json             {"fingerprint": {...}, "eigenfarm_version", "created"}: whose work this is
      plan.json            the job's slice plan (optional; saved once, reused on resume)
      slice-000003/        one finished slice, complete or absent (written as .slice-000003.tmp-*, renamed)
        eigenvalues.npy    (m,)   float64  λ in energy/(length²·mass)
        residuals.npy      (m,)   float64  relative residuals as the solver reports them
        vectors.npy        (n, m) float64  mass-weighted eigenvectors, column-major (one mode contiguous)
        info.json          the solver's record of the slice (JSON)

Rerunning the same command reopens the folder: the fingerprint must match, finished slices are reused.
Parts are read back one at a time as memory maps (:meth:`WorkFolder.load_part`); no process ever needs
all of them in memory.
"""

from __future__ import annotations

import json
import os
import shutil
import uuid
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.plan.slicing import Plan, Slice
from eigenfarm.store.provenance import jsonable, stamp

JOB_FILE = "job.json"
PLAN_FILE = "plan.json"
SUFFIX = ".work"
_PART = "slice-{:06d}"


def work_path(out) -> Path:
    """The work folder of a job writing ``out``: ``out`` + ``.work``, beside it."""
    out = Path(out)
    return out.with_name(out.name + SUFFIX)


@dataclass
class Part:
    """One finished slice: ``eigenvalues`` (m,), ``residuals`` (m,), ``vectors`` (n, m) — a read-only
    memory map whose columns (modes) are contiguous on disk — and the solver's ``info``."""

    index: int
    eigenvalues: np.ndarray
    residuals: np.ndarray
    vectors: np.ndarray
    info: dict

    @property
    def n_modes(self) -> int:
        return len(self.eigenvalues)


def _write_json(path: Path, record: dict) -> None:
    """Write ``record`` to ``path`` through a temporary file and a rename (never half-written)."""
    tmp = path.with_name(f".{path.name}.tmp-{uuid.uuid4().hex}")
    tmp.write_text(json.dumps(jsonable(record), indent=1))
    os.replace(tmp, path)


def _read_json(path: Path, what: str) -> dict:
    try:
        return json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: unreadable {what} ({exc})") from None


def _differences(old: dict, new: dict) -> list[str]:
    return sorted(k for k in set(old) | set(new) if old.get(k) != new.get(k))


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _check_part(k, eigenvalues, vectors, residuals) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    lam = np.asarray(eigenvalues, dtype=np.float64)
    res = np.asarray(residuals, dtype=np.float64)
    vec = np.asarray(vectors, dtype=np.float64)
    m = lam.shape[0] if lam.ndim == 1 else -1
    if lam.ndim != 1 or res.shape != (m,) or vec.ndim != 2 or vec.shape[1] != m:
        raise ValueError(f"slice {k}: want eigenvalues (m,), vectors (n, m), residuals (m,); got "
                         f"{lam.shape}, {vec.shape}, {res.shape}")
    if not (np.isfinite(lam).all() and np.isfinite(res).all() and np.isfinite(vec).all()):
        raise ValueError(f"slice {k}: non-finite eigenvalues, residuals or vectors")
    return lam, vec, res


class WorkFolder:
    """The work folder of the job writing ``out`` (see the module docstring for its layout).

    ``fingerprint``: JSON-ready dict identifying the job (e.g. Hessian digest, request, solver
    settings).  A new folder records it; an existing one must hold the same, else :class:`InputError`
    (the folder belongs to another job).  Safe to pickle to workers: :meth:`save_part` only writes files.
    """

    def __init__(self, out, fingerprint: dict):
        self.out = Path(out)
        self.path = work_path(self.out)
        self.fingerprint = jsonable(fingerprint)
        if not self.path.exists():
            self._create()
        self._check_owner()

    def _create(self) -> None:
        if not self.out.parent.is_dir():
            raise InputError(f"{self.out}: directory {self.out.parent} does not exist")
        tmp = self.path.with_name(f".{self.path.name}.tmp-{uuid.uuid4().hex}")
        tmp.mkdir()
        _write_json(tmp / JOB_FILE, {"fingerprint": self.fingerprint, **stamp()})
        try:
            os.rename(tmp, self.path)
        except OSError:  # another process created it first: check that one instead
            shutil.rmtree(tmp, ignore_errors=True)

    def _check_owner(self) -> None:
        job = self.path / JOB_FILE
        if not self.path.is_dir() or not job.is_file():
            raise InputError(f"{self.path}: exists and is not an eigenfarm work folder; remove it or use "
                             "another --out")
        recorded = _read_json(job, "work-folder record").get("fingerprint", {})
        if recorded != self.fingerprint:
            raise InputError(f"{self.path}: work folder belongs to another job (different "
                             f"{', '.join(_differences(recorded, self.fingerprint))}); remove it or use "
                             "another --out")

    # -- the plan --------------------------------------------------------------------------------
    @property
    def plan(self) -> Plan | None:
        """The plan saved by an earlier run of this job, or None."""
        path = self.path / PLAN_FILE
        if not path.is_file():
            return None
        record = _read_json(path, "plan")
        return Plan(**{**record, "slices": [Slice(**s) for s in record["slices"]]})

    def save_plan(self, plan: Plan) -> None:
        """Record ``plan`` so a rerun solves exactly the same slices."""
        _write_json(self.path / PLAN_FILE, plan.to_dict())

    # -- parts -----------------------------------------------------------------------------------
    def part_path(self, k: int) -> Path:
        return self.path / _PART.format(k)

    def save_part(self, k: int, eigenvalues, vectors, residuals, info: dict) -> Path:
        """Save slice ``k``: eigenvalues (m,) in energy/(length²·mass), vectors (n, m) mass-weighted,
        residuals (m,), ``info`` the solver's JSON-ready record.

        Written under a temporary name, synced, then renamed: a part is complete or absent.  If slice
        ``k`` is already saved (a retried task), the first copy is kept.  Returns the part's path.
        """
        k = int(k)
        if k < 0:
            raise ValueError(f"slice index must be non-negative, got {k}")
        lam, vec, res = _check_part(k, eigenvalues, vectors, residuals)
        final = self.part_path(k)
        if final.exists():
            return final
        tmp = self.path / f".{final.name}.tmp-{os.getpid()}-{uuid.uuid4().hex[:8]}"
        tmp.mkdir()
        try:
            np.save(tmp / "eigenvalues.npy", lam)
            np.save(tmp / "residuals.npy", res)
            out = np.lib.format.open_memmap(tmp / "vectors.npy", mode="w+", dtype=np.float64,
                                            shape=vec.shape, fortran_order=True)
            out[...] = vec
            out.flush()
            del out
            (tmp / "info.json").write_text(json.dumps(jsonable(info)))
            for name in ("eigenvalues.npy", "residuals.npy", "vectors.npy", "info.json"):
                _fsync(tmp / name)
            os.rename(tmp, final)
        except OSError:
            shutil.rmtree(tmp, ignore_errors=True)
            if final.is_dir():  # a concurrent copy of the same slice won the rename
                return final
            raise
        return final

    def finished(self) -> set[int]:
        """Indices of the slices saved so far."""
        prefix = _PART.split("{")[0]
        return {int(p.name[len(prefix):]) for p in self.path.iterdir()
                if p.name.startswith(prefix) and p.name[len(prefix):].isdigit()}

    def load_part(self, k: int) -> Part:
        """Slice ``k`` as a :class:`Part` (vectors memory-mapped read-only); InputError if absent."""
        path = self.part_path(k)
        if not path.is_dir():
            raise InputError(f"{path}: slice {k} is not finished; rerun the same command to finish it")
        try:
            lam = np.load(path / "eigenvalues.npy")
            res = np.load(path / "residuals.npy")
            vec = np.load(path / "vectors.npy", mmap_mode="r")
        except (OSError, ValueError) as exc:
            raise InputError(f"{path}: damaged slice part ({exc}); remove it and rerun") from None
        info = _read_json(path / "info.json", "slice record")
        if lam.ndim != 1 or res.shape != lam.shape or vec.ndim != 2 or vec.shape[1] != len(lam):
            raise InputError(f"{path}: inconsistent slice part (eigenvalues {lam.shape}, vectors "
                             f"{vec.shape}, residuals {res.shape}); remove it and rerun")
        return Part(int(k), lam, res, vec, info)

    def remove(self) -> None:
        """Delete the work folder (once the catalogue is safely in place)."""
        shutil.rmtree(self.path)

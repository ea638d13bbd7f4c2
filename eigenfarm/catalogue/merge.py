"""Merging a job's slice parts into its mode catalogue.

Parts are read one at a time (memory-mapped) in slice order and stitched into one eigenvalue-ordered
stream (:mod:`eigenfarm.catalogue.stitch`: modes outside their slice's reach dropped, duplicates across
boundaries removed, near-degenerate sets spanning slices re-orthonormalised), each mode's participation
ratio and frequency computed, and the catalogue written atomically (:mod:`eigenfarm.catalogue.writer`).
The work folder is deleted only once the catalogue is in place; if anything fails, the parts stay and
no catalogue (or the previous one) is at ``out``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from eigenfarm.catalogue.geometry import Geometry
from eigenfarm.catalogue.parts import WorkFolder
from eigenfarm.catalogue.stitch import Stitcher
from eigenfarm.catalogue.verdict import catalogue_attributes
from eigenfarm.catalogue.writer import CatalogueWriter
from eigenfarm.errors import InputError
from eigenfarm.plan.slicing import Plan
from eigenfarm.structure.units import get_units

#: eigenvalues closer than this × λ_max may be one (degenerate) level where slices meet; the slice
#: solver keeps modes up to 1e-10 × λ_max beyond its slice, so its copies fall well within
CLUSTER_TOL = 1e-9


class _Sink:
    """Receives the stitched modes: remembers every eigenvalue (for the counts), writes the lowest
    ``keep`` modes (all when None) and the rest of the degenerate level the ``keep``-th mode belongs to
    (eigenvalues within ``tol`` of it), so a lowest-K catalogue never holds part of a level."""

    def __init__(self, writer: CatalogueWriter, keep: int | None, tol: float):
        self.writer, self.keep, self.tol = writer, keep, tol
        self.eigenvalues: list[np.ndarray] = []
        self.written = 0
        self.level_top: float | None = None

    def __call__(self, eigenvalues, residuals, slices, vectors) -> None:
        eigenvalues = np.asarray(eigenvalues, dtype=float)
        self.eigenvalues.append(eigenvalues)
        take = len(eigenvalues) if self.keep is None else self._take(eigenvalues)
        if take:
            self.writer.append(eigenvalues[:take], residuals[:take], slices[:take], vectors[:take])
            self.written += take

    def _take(self, eigenvalues: np.ndarray) -> int:
        take = max(0, min(len(eigenvalues), self.keep - self.written))
        if self.level_top is None and self.written + take == self.keep and take:
            self.level_top = float(eigenvalues[take - 1]) + self.tol
        if self.level_top is not None:
            while take < len(eigenvalues) and eigenvalues[take] <= self.level_top:
                take += 1
        return take

    def all_eigenvalues(self) -> np.ndarray:
        return np.concatenate(self.eigenvalues) if self.eigenvalues else np.zeros(0)


def _check_plan(plan: Plan, work: WorkFolder) -> None:
    for a, b in zip(plan.slices, plan.slices[1:] + [None]):
        if not a.lo < a.hi or (b is not None and b.lo < a.hi):
            raise InputError(f"{work.path}: plan slice {a.index} ({a.lo!r}, {a.hi!r}] is empty or overlaps "
                             "the next; remove the work folder and rerun")
    missing = [s.index for s in plan.slices if s.index not in work.finished()]
    if missing:
        shown = ", ".join(map(str, missing[:8])) + (" …" if len(missing) > 8 else "")
        raise InputError(f"{work.path}: {len(missing)} slice(s) not finished ({shown}); rerun the same "
                         "command to finish them")


def write_catalogue(out, work: WorkFolder, plan: Plan, info: dict, *, geometry: Geometry | None = None,
                    overwrite: bool = False, cluster_tol: float = CLUSTER_TOL, progress=None) -> Path:
    """Merge the finished slices of ``plan`` in ``work`` into a catalogue at ``out``; returns its path.

    ``info``: ``units`` (name), ``hessian_digest``, ``n_atoms``, and optionally ``trivial_zero_modes``,
    ``store`` and ``solver`` (JSON-ready settings), recorded as attributes.  ``geometry``: the sample's
    masses, positions and cell in input atom order, copied into the catalogue.  ``overwrite`` replaces an
    existing catalogue (only once the new one is complete).  ``cluster_tol``: eigenvalue tolerance
    relative to ``plan.scale`` for treating modes of neighbouring slices as one level.
    ``progress(stage, done, total)`` is called as parts are merged.  InputError when a slice is not
    finished or ``out`` may not be written; the work folder is removed only after success.
    """
    units = get_units(info["units"])
    _check_plan(plan, work)
    tol = cluster_tol * plan.scale
    with CatalogueWriter(out, int(info["n_atoms"]), units, overwrite=overwrite) as writer:
        sink = _Sink(writer, plan.keep, tol)
        stitcher = Stitcher(plan.slices, writer.n_dof, plan.scale, tol, sink, writer.block_modes)
        runs = {}
        for done, piece in enumerate(plan.slices, 1):
            part = work.load_part(piece.index)
            runs[piece.index] = part.info
            stitcher.add(part)
            del part  # unmap this part before the next one is mapped
            if progress:
                progress("merge", done, len(plan.slices))
        stitcher.close()
        attrs = catalogue_attributes(plan, info, units, sink.all_eigenvalues(), sink.written,
                                     stitcher.records, runs, tol, stitcher.recombined)
        path = writer.finish(attrs, geometry)
    work.remove()
    return path

"""Importing a Matrix Market Hessian (3N × 3N) into a Hessian store.

There are no positions, so atoms keep the file's order (dof 3a+c is atom a, component c).  The body is
streamed (:mod:`eigenfarm.store.matrixmarket`): each piece of entries is sorted by destination shard
and appended to per-shard spill files inside the partial store (a symmetric file's off-diagonal entries
also go to their mirror position); then one task per shard sums its spill into 3×3 blocks (duplicate
entries add up, as in scipy's readers) and writes the shard.  The checks of
:mod:`eigenfarm.store.validate` follow; a general file that is not symmetric is refused, naming the
first offending pair, while a failed translational sum rule is only a warning in the verdict.
"""

from __future__ import annotations

import os
import shutil
import time

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.store import layout
from eigenfarm.store.atomic import PartialStore, check_live
from eigenfarm.store.masses import read_masses
from eigenfarm.store.matrixmarket import MatrixMarketReader
from eigenfarm.store.provenance import jsonable, stamp
from eigenfarm.farm.runner import runner_for
from eigenfarm.store.validate import SYMMETRY_TOL
from eigenfarm.store.writer import finalise, root_attributes, store_summary
from eigenfarm.structure.units import get_units

SPILL = ".spill"
#: one scalar entry in a spill file: 0-based dof row and column, value
SPILL_DTYPE = np.dtype([("row", "<i8"), ("col", "<i8"), ("value", "<f8")])


def _spill_path(path, k: int) -> str:
    return os.path.join(str(path), SPILL, f"{k:06d}.bin")


def spill_entries(path, bounds, rows, cols, values, symmetric: bool) -> None:
    """Append entries (0-based dofs) to the spill file of the shard owning each row."""
    if symmetric:
        off = rows != cols
        rows, cols, values = (np.concatenate([rows, cols[off]]), np.concatenate([cols, rows[off]]),
                              np.concatenate([values, values[off]]))
    shard = layout.shard_of(rows // 3, bounds)
    order = np.argsort(shard, kind="stable")
    records = np.empty(len(rows), SPILL_DTYPE)
    records["row"], records["col"], records["value"] = rows[order], cols[order], values[order]
    shard = shard[order]
    starts = np.flatnonzero(np.r_[True, shard[1:] != shard[:-1]])
    for a, b in zip(starts, np.r_[starts[1:], len(shard)]):
        with open(_spill_path(path, int(shard[a])), "ab") as handle:
            records[a:b].tofile(handle)


def _assemble_spilled(path: str, k: int, first: int, stop: int, n_atoms: int) -> str:
    """Worker task: sum shard k's spilled entries into BSR blocks and write the shard; returns its digest."""
    check_live(path)
    spill = _spill_path(path, k)
    records = np.fromfile(spill, SPILL_DTYPE) if os.path.exists(spill) else np.empty(0, SPILL_DTYPE)
    key = (records["row"] // 3 - first) * n_atoms + records["col"] // 3
    unique, inverse = np.unique(key, return_inverse=True)
    flat = inverse * 9 + (records["row"] % 3) * 3 + records["col"] % 3
    blocks = np.bincount(flat, weights=records["value"], minlength=9 * len(unique)).reshape(-1, 3, 3)
    local = unique // n_atoms
    indptr = np.searchsorted(local, np.arange(stop - first + 1)).astype(np.int64)
    shard = layout.Shard(first, stop, indptr, (unique % n_atoms).astype(np.int64), blocks)
    check_live(path)
    digest = layout.write_shard(path, k, shard)
    if os.path.exists(spill):
        os.remove(spill)
    return digest


def _refuse_asymmetry(path: str, verdict: dict) -> None:
    check = verdict["checks"]["symmetry"]
    first = check.get("first")
    if check["passed"] is False and first:
        raise InputError(
            f"{path}: not symmetric: entry (row {first['row'] + 1}, col {first['col'] + 1}) = "
            f"{first['value']!r} but (row {first['col'] + 1}, col {first['row'] + 1}) = {first['mirror']!r} "
            f"(a general matrix must be symmetric to {check['tolerance']:g} × max|H|)")


def _stream(reader: MatrixMarketReader, path, bounds, progress) -> None:
    total = max(os.path.getsize(reader.path), 1)
    os.mkdir(os.path.join(str(path), SPILL))
    symmetric = reader.header.symmetry == "symmetric"
    for rows, cols, values in reader.chunks():
        spill_entries(path, bounds, rows, cols, values, symmetric)
        if progress:
            progress("read", min(reader.handle.tell(), total), total)


def import_matrix_market(path, masses, units, out, *, shard_atoms: int | None = None, client=None,
                         overwrite: bool = False, progress=None, symmetry_tol: float = SYMMETRY_TOL) -> dict:
    """Import the Matrix Market file ``path`` (real coordinate, general or symmetric, 3N × 3N) as a store.

    ``masses``: one number for all atoms, a text file (one mass per line), a ``.npy`` file or an array
    (N,), in the mass unit of ``units`` (``metal``/``reduced``); the matrix is taken to be in
    energy/length² of ``units``.  ``symmetry_tol``: largest |H_ij − H_ji| / max|H| a general file may
    have.  Other arguments as :func:`eigenfarm.store.writer.build_store`.  Returns the same summary dict.
    Raises :class:`InputError` naming file and line/row/col for a malformed header or line, a non-finite
    entry, an asymmetric general matrix, a dimension not a multiple of 3, or masses that do not fit.
    """
    started = time.perf_counter()
    reader = MatrixMarketReader(path)
    header, n_atoms = reader.header, reader.header.dimension // 3
    try:
        masses, mass_record = read_masses(masses, n_atoms, header.dimension, str(path))
        unit_name = get_units(units).name
        partial = PartialStore(out, overwrite)
    except BaseException:
        reader.handle.close()
        raise
    runner = runner_for(client)
    try:
        bounds = layout.plan_bounds(n_atoms, shard_atoms)
        original = np.arange(n_atoms, dtype=np.int64)
        source = {"kind": "matrix-market", "file": os.path.abspath(str(path)), "symmetry": header.symmetry,
                  "field": header.field, "entries": header.entries}
        provenance = {"source": source, "masses": mass_record, **stamp()}
        attrs = root_attributes(n_atoms, unit_name, bounds, provenance, {"curve": "input"})
        layout.create_root(partial.path, attrs, masses, original)
        _stream(reader, partial.path, bounds, progress)
        source["sha256"] = reader.sha256
        layout.update_attrs(partial.path, {"provenance": jsonable(provenance)})
        tasks = [runner.submit(_assemble_spilled, str(partial.path), k, int(bounds[k]), int(bounds[k + 1]),
                               n_atoms) for k in range(len(bounds) - 1)]
        digests = runner.gather(tasks, "assemble", progress)
        shutil.rmtree(os.path.join(str(partial.path), SPILL))
        verdict, digest, n_blocks = finalise(runner, partial.path, bounds, masses, original, digests,
                                             sum_rule_severity="warning", symmetry_tol=symmetry_tol,
                                             progress=progress)
        if header.symmetry == "general":
            _refuse_asymmetry(str(path), verdict)
    except BaseException:
        partial.abort(runner)
        raise
    return store_summary(partial.commit(), bounds, verdict, digest, n_blocks, started)

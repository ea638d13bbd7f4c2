"""Building a Hessian store from a configuration and a potential, one atom shard per task.

Atoms are first put in Morton order (:mod:`eigenfarm.store.ordering`), so each shard of consecutive
atoms is a compact region.  The reordered configuration is scattered to the workers once; each task
asks the potential for its shard's rows only, on the sub-configuration of the atoms those rows can
depend on (:mod:`eigenfarm.store.halo`), sums them into BSR arrays and writes its shard group.
No process ever holds the whole matrix.  The checks of :mod:`eigenfarm.store.validate` then read the
shards back, and the digest and verdict are recorded before the store is renamed into place (:mod:`eigenfarm.store.atomic`).
"""

from __future__ import annotations

import time

import numpy as np

from eigenfarm.errors import InputError
from eigenfarm.potentials.base import Potential, sum_blocks
from eigenfarm.store import layout
from eigenfarm.store.atomic import PartialStore, check_live
from eigenfarm.store.checks import finite_blocks
from eigenfarm.store.halo import CellGrid, cell_grid, neighbourhood
from eigenfarm.store.ordering import BITS, morton_order
from eigenfarm.store.provenance import configuration_sha256, file_record, jsonable, stamp
from eigenfarm.farm.runner import Runner, runner_for
from eigenfarm.store.validate import SYMMETRY_TOL, make_verdict, run_checks
from eigenfarm.structure.configuration import Configuration


def root_attributes(n_atoms: int, units: str, bounds: np.ndarray, provenance: dict, ordering: dict) -> dict:
    """Root attributes present from the start; ``digest`` and ``validation`` are added when complete."""
    return jsonable({"kind": layout.KIND, "format_version": layout.FORMAT_VERSION, "n_atoms": int(n_atoms),
                     "units": units, "n_shards": len(bounds) - 1, "shard_bounds": bounds.tolist(),
                     "ordering": ordering, "provenance": provenance})


def finalise(runner: Runner, path, bounds, masses, original_index, written_digests, *,
             sum_rule_severity: str, symmetry_tol: float = SYMMETRY_TOL, progress=None):
    """Check the written shards, record ``digest`` and ``validation``; returns (verdict, digest,
    number of stored blocks)."""
    results = run_checks(runner, path, bounds, symmetry_tol, progress)
    verdict = make_verdict(results, masses, original_index, written_digests,
                           sum_rule_severity=sum_rule_severity, symmetry_tol=symmetry_tol)
    digest = layout.root_digest(len(masses), masses, original_index, [r.digest for r in results.reports])
    layout.update_attrs(path, {"digest": digest, "validation": jsonable(verdict)})
    return verdict, digest, sum(r.n_blocks for r in results.reports)


def store_summary(path, bounds, verdict, digest, n_blocks: int, started: float) -> dict:
    """What a writer returns: path, sizes, digest, verdict and wall time (s)."""
    return {"path": str(path), "n_atoms": int(bounds[-1]), "n_shards": len(bounds) - 1,
            "n_blocks": int(n_blocks), "nnz": 9 * int(n_blocks), "digest": digest, "validation": verdict,
            "seconds": time.perf_counter() - started}


def _assemble_shard(path: str, config: Configuration, potential: Potential, grid: CellGrid,
                    original: np.ndarray, k: int, first: int, stop: int) -> str:
    """Worker task: Hessian rows of atoms first..stop-1 of the (reordered) ``config`` → shard k.

    Works on the sub-configuration of the atoms those rows can depend on (:mod:`eigenfarm.store.halo`).
    Returns the shard digest.  A non-finite block names its atoms by input index.
    """
    check_live(path)
    near = neighbourhood(grid, first, stop)
    local = config.take(near)
    offset = int(np.searchsorted(near, first))
    with np.errstate(all="ignore"):  # non-finite blocks are found and reported below
        row, col, blocks = potential.hessian_rows(local, np.arange(offset, offset + stop - first))
        indptr, indices, data = sum_blocks(near[row], near[col], blocks, stop - first, config.n_atoms,
                                           row_offset=first)
    del row, col, blocks, local
    shard = layout.Shard(first, stop, indptr, indices, data)
    _, bad = finite_blocks(shard)
    if bad:
        raise InputError(f"{config.source}: atom {original[bad[0]]}: Hessian block with atom "
                         f"{original[bad[1]]} is not finite (coincident atoms or a singular potential?)")
    check_live(path)
    return layout.write_shard(path, k, shard)


def _provenance(config: Configuration, potential: Potential, source_file) -> dict:
    source = {"kind": "configuration", "description": config.source,
              "configuration_sha256": configuration_sha256(config)}
    history = {k: v for k, v in config.info.items() if k not in ("Lattice", "Properties", "pbc")}
    if history:  # preparation notes carried by the configuration (e.g. a demo glass's quench record)
        source["history"] = history
    if source_file is not None:
        source.update(file_record(source_file))
    return {"source": source, "potential": potential.describe(), **stamp()}


def _create(path, stored: Configuration, order: np.ndarray, bounds, provenance: dict) -> None:
    names = stored.species_names
    attrs = root_attributes(stored.n_atoms, stored.units.name, bounds, provenance,
                            {"curve": "morton", "bits": BITS})
    layout.create_root(path, attrs, stored.masses, order, positions=stored.positions,
                       species_codes=stored.species_index, species_names=names,
                       cell=stored.box.cell, pbc=stored.box.pbc)


def build_store(config: Configuration, potential: Potential, out, *, shard_atoms: int | None = None,
                client=None, overwrite: bool = False, progress=None, source_file=None) -> dict:
    """Assemble the Hessian of ``config`` under ``potential`` and write it as a store at ``out``.

    ``shard_atoms``: atoms per shard (default :data:`layout.DEFAULT_SHARD_ATOMS`); ``client``: a
    ``distributed.Client`` (see :func:`eigenfarm.farm.cluster.open_client`) running one task per
    shard, or None to work in this process; workers must see ``out``'s directory.  ``overwrite``: replace
    an existing store (only once the new one is complete).  ``progress(stage, done, total)`` is called
    as shards finish.  ``source_file``: the file ``config`` was read from, recorded with its sha256.

    The matrix is in energy/length² of ``config.units``, rows in Morton order (``original_index`` maps
    back); stored positions are wrapped into the cell along periodic directions (the Hessian does not
    depend on which periodic image an atom is given at).  Returns :func:`store_summary`'s dict.  Raises :class:`InputError` for an existing ``out``,
    species the potential does not know, or a non-finite Hessian block (naming the atoms).
    """
    started = time.perf_counter()
    potential.types(config)
    provenance = _provenance(config, potential, source_file)
    partial = PartialStore(out, overwrite)
    runner = runner_for(client)
    try:
        order = morton_order(config.positions, config.box)
        stored = config.take(order)
        stored = stored.with_positions(stored.box.wrap(stored.positions))
        bounds = layout.plan_bounds(stored.n_atoms, shard_atoms)
        _create(partial.path, stored, order, bounds, provenance)
        grid = cell_grid(stored.positions, stored.box, potential.cutoff * (potential.halo + 1) * (1 + 1e-9))
        shared, cells, original = runner.scatter(stored), runner.scatter(grid), runner.scatter(order)
        tasks = [runner.submit(_assemble_shard, str(partial.path), shared, potential, cells, original, k,
                               int(bounds[k]), int(bounds[k + 1])) for k in range(len(bounds) - 1)]
        digests = runner.gather(tasks, "assemble", progress)
        runner.release(tasks)
        verdict, digest, n_blocks = finalise(runner, partial.path, bounds, stored.masses, order, digests,
                                             sum_rule_severity="error", progress=progress)
    except BaseException:
        partial.abort(runner)
        raise
    return store_summary(partial.commit(), bounds, verdict, digest, n_blocks, started)


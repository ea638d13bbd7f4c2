"""Shard neighbourhoods from the cell grid: every atom within reach is found (brute-force reference)."""

import numpy as np
import pytest

from eigenfarm.store import build_store, open_store
from eigenfarm.store.halo import cell_grid, neighbourhood
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration


@pytest.mark.parametrize("pbc", [(True, True, True), (True, False, True)])
def test_neighbourhood_holds_every_atom_within_reach(pbc):
    rng = np.random.default_rng(9)
    box = Box(np.array([[9.0, 0, 0], [2.5, 8.0, 0], [-1.5, 1.0, 10.0]]), pbc)
    fractional = rng.random((1500, 3))
    positions = box.wrap(box.cartesian(fractional[np.argsort(fractional[:, 0])]))  # rows 200..259: a slab
    reach = 1.7
    grid = cell_grid(positions, box, reach)
    first, stop = 200, 260
    near = neighbourhood(grid, first, stop)
    # reference: brute force over all pairs with the minimum image (exact: reach < half the widths)
    d = box.minimum_image(positions[None, first:stop] - positions[:, None])
    within = np.flatnonzero((np.linalg.norm(d, axis=2) < reach).any(axis=1))
    assert set(within) <= set(near.tolist())
    assert np.all(np.diff(near) > 0) and set(range(first, stop)) <= set(near.tolist())
    assert len(near) < len(positions)


def test_triclinic_slab_store_matches_potential_hessian(tmp_path, potential, input_dofs):
    rng = np.random.default_rng(10)
    box = Box(np.array([[7.0, 0, 0], [1.5, 7.0, 0], [0, 0, 7.0]]), (True, True, False))
    positions = box.wrap(box.cartesian(rng.random((400, 3))))
    config = Configuration(positions, np.full(400, "A"), box, "reduced")
    pot = potential("ipl")
    build_store(config, pot, tmp_path / "H.zarr", shard_atoms=50)
    store = open_store(tmp_path / "H.zarr")
    reference = pot.hessian(config).toarray()  # reference: the potential's whole-matrix assembly
    dofs = input_dofs(store.original_index)
    stored = np.empty_like(reference)
    stored[np.ix_(dofs, dofs)] = store.matrix("csr").toarray()
    assert np.allclose(stored, reference, rtol=0, atol=1e-12 * np.abs(reference).max())
    assert store.validation["passed"]

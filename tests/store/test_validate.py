"""Validation on demand: symmetry, finiteness, structure and digests of stores written by hand."""

import numpy as np
import zarr

from eigenfarm.store import layout, open_store, validate_store
from eigenfarm.store.provenance import stamp
from eigenfarm.store.writer import root_attributes


def _shard_from_dense(dense: np.ndarray, a: int, b: int) -> layout.Shard:
    """Rows of atoms a..b-1 of ``dense`` as a shard holding every block with a non-zero (or NaN) entry."""
    n = dense.shape[1] // 3
    tiles = dense[3 * a:3 * b].reshape(b - a, 3, n, 3).transpose(0, 2, 1, 3)
    rows, cols = np.nonzero((tiles != 0).any(axis=(2, 3)))
    indptr = np.searchsorted(rows, np.arange(b - a + 1)).astype(np.int64)
    return layout.Shard(a, b, indptr, cols.astype(np.int64), tiles[rows, cols])


def _craft(path, dense: np.ndarray, shard_atoms: int, unsorted: bool = False):
    """Write ``dense`` (3N × 3N) as a store by hand, bypassing the writer's checks."""
    n = dense.shape[0] // 3
    bounds = layout.plan_bounds(n, shard_atoms)
    attrs = root_attributes(n, "reduced", bounds, {"source": {"kind": "configuration"}, **stamp()},
                            {"curve": "input"})
    layout.create_root(path, attrs, np.ones(n), np.arange(n))
    digests = []
    for k in range(len(bounds) - 1):
        shard = _shard_from_dense(dense, int(bounds[k]), int(bounds[k + 1]))
        if unsorted and k == 0:  # swap the first two blocks of the first row that has two
            at = shard.indptr[np.flatnonzero(np.diff(shard.indptr) >= 2)[0]]
            shard.indices[at:at + 2] = shard.indices[at:at + 2][::-1].copy()
        digests.append(layout.write_shard(path, k, shard))
    layout.update_attrs(path, {"digest": layout.root_digest(n, np.ones(n), np.arange(n), digests)})


def _random_symmetric(n_atoms: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    mask = np.kron(rng.random((n_atoms, n_atoms)) < 0.3, np.ones((3, 3)))
    a = rng.normal(size=(3 * n_atoms, 3 * n_atoms)) * mask
    return a + a.T


def test_symmetry_error_matches_dense_reference(tmp_path):
    h = _random_symmetric(12, seed=1)
    h[4, 31] += 0.3          # cross-shard: atoms 1 and 10
    h[7, 8] -= 0.2           # inside shard 0: atom 2 with itself
    h[33, 3] = 0.0           # structural: block (11, 1) keeps other entries, make one pair one-sided
    h[3, 33] = 0.9
    _craft(tmp_path / "H.zarr", h, shard_atoms=4)
    verdict = validate_store(tmp_path / "H.zarr")
    check = verdict["checks"]["symmetry"]
    reference = np.abs(h - h.T)  # reference: dense numpy
    assert check["passed"] is False and not verdict["passed"]
    assert np.isclose(check["value"] * verdict["max_abs_entry"], reference.max(), rtol=1e-14)
    assert {check["worst"]["row"], check["worst"]["col"]} == {3, 33}
    assert (check["first"]["row"], check["first"]["col"]) == (3, 33)
    assert check["first"]["value"] == 0.9 and check["first"]["mirror"] == 0.0
    assert check["entries_over"] == 2 * np.count_nonzero(np.triu(reference, 1) > 0)


def test_symmetric_store_passes_on_dask(tmp_path, client):
    _craft(tmp_path / "H.zarr", _random_symmetric(10, seed=2), shard_atoms=3)
    verdict = validate_store(tmp_path / "H.zarr", client)
    assert verdict["checks"]["symmetry"]["value"] == 0.0 and verdict["checks"]["symmetry"]["passed"]
    assert verdict["checks"]["digests"]["passed"]


def test_non_finite_entry_named(tmp_path):
    h = _random_symmetric(8, seed=3)
    h[14, 22] = h[22, 14] = np.nan  # atoms 4 and 7
    _craft(tmp_path / "H.zarr", h, shard_atoms=3)
    verdict = validate_store(tmp_path / "H.zarr")
    assert verdict["checks"]["finite"] == {"passed": False, "severity": "error", "first_atoms": [4, 7]}
    assert not verdict["passed"]
    assert verdict["checks"]["symmetry"]["passed"]  # over the finite entries


def test_changed_shard_fails_digests(tmp_path, lattice, potential):
    from eigenfarm.store import build_store

    build_store(lattice(3), potential(), tmp_path / "H.zarr", shard_atoms=40)
    blocks = zarr.open_array(str(tmp_path / "H.zarr" / "shards" / "000001" / "blocks"), mode="r+")
    blocks[0, 0, 0] = blocks[0, 0, 0] * (1 + 1e-9)
    verdict = open_store(tmp_path / "H.zarr").validate()
    assert verdict["checks"]["digests"]["passed"] is False
    assert verdict["checks"]["digests"]["mismatched_shards"] == [1]
    assert not verdict["passed"]


def test_malformed_shard_reported(tmp_path):
    _craft(tmp_path / "H.zarr", np.ones((18, 18)), shard_atoms=3, unsorted=True)
    verdict = validate_store(tmp_path / "H.zarr")
    assert verdict["checks"]["structure"]["problems"] == [
        "shard 0: block columns are not strictly increasing within a row"]
    assert verdict["checks"]["symmetry"]["passed"] is None and not verdict["passed"]

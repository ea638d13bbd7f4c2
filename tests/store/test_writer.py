"""Writing stores from a configuration: round trip, determinism across workers, atomicity, errors."""

import os

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.farm.cluster import open_client
from eigenfarm.store import build_store, open_store


@pytest.fixture(scope="module")
def sample():
    from conftest import jittered_fcc, pair_potential

    return jittered_fcc(4, species=("A", "B"), seed=1), pair_potential("lj", ("A", "B"))  # 256 atoms


def test_round_trip_matches_dense_hessian(sample, tmp_path, input_dofs):
    config, pot = sample
    summary = build_store(config, pot, tmp_path / "H.zarr", shard_atoms=60)
    store = open_store(tmp_path / "H.zarr")
    assert summary["n_shards"] == 5 and store.n_atoms == 256 and store.units.name == "reduced"
    # reference: the potential's own whole-matrix assembly, dense (numpy), mapped back to input order
    reference = pot.hessian(config).toarray()
    dofs = input_dofs(store.original_index)
    stored = np.empty_like(reference)
    stored[np.ix_(dofs, dofs)] = store.matrix("csr").toarray()
    assert np.allclose(stored, reference, rtol=0, atol=1e-12 * np.abs(reference).max())
    assert summary["nnz"] == pot.hessian(config).nnz
    assert summary["validation"]["passed"] and store.validation["passed"]


def test_per_atom_arrays_map_back_to_input(sample, tmp_path):
    config, pot = sample
    build_store(config, pot, tmp_path / "H.zarr", shard_atoms=100)
    store = open_store(tmp_path / "H.zarr")
    back = np.argsort(store.original_index)
    assert sorted(store.original_index.tolist()) == list(range(256))
    assert np.array_equal(store.masses[back], config.masses)
    assert np.array_equal(store.species[back], config.species)
    assert np.allclose(store.positions[back], config.positions, atol=1e-12)
    assert np.array_equal(store.box.cell, config.box.cell)


def test_shards_are_spatially_compact(tmp_path, lattice, potential):
    config = lattice(8)  # 2048 atoms in 64 shards of 32: a 4×4×4 arrangement of compact pieces
    build_store(config, potential(), tmp_path / "H.zarr", shard_atoms=32)
    store = open_store(tmp_path / "H.zarr")
    from eigenfarm.store.layout import read_shard, shard_of

    touched = [len(set(shard_of(read_shard(store.path, k).indices, store.shard_bounds))) for k in range(64)]
    assert max(touched) <= 27 + 8  # a cube and its 26 neighbours, plus a margin for the jitter


def test_identical_digest_in_process_and_on_one_or_two_workers(sample, tmp_path, client):
    config, pot = sample
    local = build_store(config, pot, tmp_path / "local.zarr", shard_atoms=50)
    two = build_store(config, pot, tmp_path / "two.zarr", shard_atoms=50, client=client)
    with open_client(workers=1) as single:
        one = build_store(config, pot, tmp_path / "one.zarr", shard_atoms=50, client=single)
    assert local["digest"] == one["digest"] == two["digest"]
    assert open_store(tmp_path / "two.zarr").validate(client)["passed"]


def test_progress_reports_every_stage(sample, tmp_path):
    config, pot = sample
    seen = []
    build_store(config, pot, tmp_path / "H.zarr", shard_atoms=100, progress=lambda *a: seen.append(a))
    assert {s for s, _, _ in seen} == {"assemble", "check", "symmetry"}
    assert ("assemble", 3, 3) in seen


def test_existing_output_refused_unless_overwrite(sample, tmp_path):
    config, pot = sample
    out = tmp_path / "H.zarr"
    first = build_store(config, pot, out, shard_atoms=100)
    with pytest.raises(InputError, match="already exists"):
        build_store(config, pot, out)
    again = build_store(config, pot, out, shard_atoms=64, overwrite=True)
    assert open_store(out).n_shards == 4 and again["digest"] != first["digest"]
    other = tmp_path / "notes"
    other.mkdir()
    with pytest.raises(InputError, match="not a Hessian store"):
        build_store(config, pot, other, overwrite=True)


def _coincident(config):
    positions = config.positions.copy()
    positions[17] = positions[3]
    return config.with_positions(positions)


@pytest.mark.parametrize("on_dask", [False, True])
def test_failed_build_leaves_old_store_and_no_partial(sample, tmp_path, client, on_dask):
    config, pot = sample
    out = tmp_path / "H.zarr"
    old = build_store(config, pot, out, shard_atoms=100)
    with pytest.raises(InputError, match=r"atom (3|17): Hessian block with atom (3|17) is not finite"):
        build_store(_coincident(config), pot, out, shard_atoms=40, overwrite=True,
                    client=client if on_dask else None)
    assert sorted(os.listdir(tmp_path)) == ["H.zarr"]
    assert open_store(out).digest == old["digest"]
    assert open_store(out).validate()["passed"]


def test_failed_first_build_leaves_nothing(sample, tmp_path):
    config, pot = sample
    with pytest.raises(InputError):
        build_store(_coincident(config), pot, tmp_path / "H.zarr", shard_atoms=40)
    assert os.listdir(tmp_path) == []


def test_unknown_species_named(sample, tmp_path, potential):
    config, _ = sample
    with pytest.raises(InputError, match="atom .*: species .*B.* has no parameters"):
        build_store(config, potential("lj", ("A",)), tmp_path / "H.zarr")
    assert os.listdir(tmp_path) == []

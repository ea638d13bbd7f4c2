"""Reading stores: opening, shards, the whole matrix, streamed products, the summary."""

import numpy as np
import pytest

from eigenfarm.errors import InputError
from eigenfarm.store import build_store, layout, open_store


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    from conftest import jittered_fcc, pair_potential

    out = tmp_path_factory.mktemp("reader") / "H.zarr"
    build_store(jittered_fcc(4, seed=6), pair_potential("ipl"), out, shard_atoms=70, source_file=__file__)
    return open_store(out)


def test_open_store_refuses_what_is_not_a_store(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        open_store(tmp_path / "missing.zarr")
    (tmp_path / "plain").mkdir()
    with pytest.raises(InputError, match=r"plain: not a Hessian store"):
        open_store(tmp_path / "plain")
    (tmp_path / "file.zarr").write_text("x")
    with pytest.raises(InputError, match="not a Hessian store"):
        open_store(tmp_path / "file.zarr")
    layout.create_root(tmp_path / "half.zarr", {"kind": "hessian", "format_version": 1}, np.ones(2), np.arange(2))
    with pytest.raises(InputError, match="incomplete Hessian store"):
        open_store(tmp_path / "half.zarr")


def test_shards_tile_the_whole_matrix(store):
    whole = store.matrix("csr")
    assert whole.shape == (768, 768) and store.n_shards == 4
    for k, (a, b) in enumerate(zip(store.shard_bounds[:-1], store.shard_bounds[1:])):
        bsr, csr = store.read_shard(k), store.read_shard(k, "csr")
        assert bsr.blocksize == (3, 3) and bsr.shape == (3 * (b - a), 768)
        assert (abs(bsr - csr)).max() == 0 and (abs(csr - whole[3 * a:3 * b])).max() == 0
    assert (abs(store.matrix("bsr") - whole)).max() == 0
    with pytest.raises(IndexError):
        store.read_shard(4)


@pytest.mark.parametrize("on_dask", [False, True])
def test_streamed_products_equal_whole_matrix_product(store, client, on_dask):
    rng = np.random.default_rng(8)
    x, X = rng.normal(size=768), rng.normal(size=(768, 5))
    whole = store.matrix("csr")  # reference: scipy's whole-matrix product
    c = client if on_dask else None
    assert np.allclose(store.matvec(x, c), whole @ x, rtol=1e-13, atol=1e-12)
    assert np.allclose(store.matmat(X, c), whole @ X, rtol=1e-13, atol=1e-12)
    with pytest.raises(ValueError, match="shape"):
        store.matvec(np.ones(767))


def test_summary_reports_size_units_digest_verdict_provenance(store):
    text = store.summary()
    assert "256 (matrix 768 × 768), 4 shards" in text
    assert f"nnz {9 * store.n_blocks():,}" in text
    assert "units          reduced" in text and store.digest in text
    assert "validation     PASSED" in text and "sum rule     ok" in text
    assert "test_reader.py" in text and '"form": "ipl"' in text
    assert store.provenance["source"]["sha256"] and store.provenance["eigenfarm_version"]

"""Opening catalogues, reading vectors chunk by chunk, the summary."""

import numpy as np
import pytest
import xarray as xr
import zarr

from eigenfarm.catalogue import open_catalogue, write_catalogue
from eigenfarm.catalogue.layout import vector_chunks
from eigenfarm.catalogue.writer import CatalogueWriter
from eigenfarm.errors import InputError
from eigenfarm.structure.units import REDUCED


@pytest.fixture
def catalogue(make_job):
    job = make_job()
    return open_catalogue(write_catalogue(job.out, job.work, job.plan, job.info))


def test_non_catalogues_are_refused(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        open_catalogue(tmp_path / "missing.zarr")
    (tmp_path / "plain").mkdir()
    with pytest.raises(InputError, match="plain: not a mode catalogue"):
        open_catalogue(tmp_path / "plain")
    (tmp_path / "file.zarr").write_text("x")
    with pytest.raises(InputError, match="not a mode catalogue"):
        open_catalogue(tmp_path / "file.zarr")
    zarr.open_group(str(tmp_path / "H.zarr"), mode="w", attributes={"kind": "hessian"})
    with pytest.raises(InputError, match="not a mode catalogue"):
        open_catalogue(tmp_path / "H.zarr")
    zarr.open_group(str(tmp_path / "half.zarr"), mode="w", attributes={"kind": "modes", "format_version": 1})
    with pytest.raises(InputError, match="incomplete mode catalogue"):
        open_catalogue(tmp_path / "half.zarr")
    zarr.open_group(str(tmp_path / "new.zarr"), mode="w", attributes={"kind": "modes", "format_version": 99})
    with pytest.raises(InputError, match="newer than this eigenfarm"):
        open_catalogue(tmp_path / "new.zarr")


@pytest.mark.parametrize("chunk", [None, 1, 7, 60, 100])
def test_chunked_iteration_equals_whole_read(catalogue, chunk):
    whole = catalogue.read_vectors(0, catalogue.n_modes)
    pieces = list(catalogue.iter_vectors(chunk))
    step = chunk or catalogue.chunk_modes
    assert all(sl.stop - sl.start == len(v) <= step for sl, v in pieces)
    assert np.array_equal(np.concatenate([v for _, v in pieces]), whole)
    assert [sl.start for sl, _ in pieces] == list(range(0, catalogue.n_modes, step))
    assert np.array_equal(xr.open_zarr(catalogue.path).vector.values, whole)


def test_per_mode_arrays(catalogue):
    assert catalogue.n_modes == 60 and catalogue.n_dof == 60 and catalogue.n_atoms == 20
    assert catalogue.units.name == "metal"
    assert np.array_equal(catalogue.frequencies, catalogue.units.frequency(catalogue.eigenvalues))
    assert catalogue.residuals.shape == catalogue.participation.shape == catalogue.slices.shape == (60,)
    assert set(catalogue.slices) == {0, 1, 2, 3}
    with pytest.raises(IndexError):
        catalogue.read_vectors(50, 61)


def test_summary_tells_what_a_user_needs(catalogue):
    text = catalogue.summary()
    assert "60 with " in text and "THz" in text
    assert "COMPLETE: every slice holds the 60 modes its inertia counts say" in text
    assert "zero modes     3 in the whole spectrum (3 trivial expected for the cell)" in text
    assert "negative       none" in text
    assert "2 duplicates removed, 2 modes re-orthonormalised" in text
    assert '"backend": "dense-test"' in text
    lowest = f"{catalogue.frequencies[0]:.5g}"
    assert f"lowest         {lowest} " in text
    assert "harmonic modes at zero temperature of one finite sample (20 atoms" in text
    for k in range(4):   # one row per slice: index, bounds, expected, found
        s = catalogue.attrs["slices"][k]
        assert any(line.split()[:1] == [str(k)] and line.split()[3:5] == [str(s["expected"]), str(s["found"])]
                   for line in text.splitlines())


def test_vectors_larger_than_a_chunk_are_split_along_dofs(tmp_path):
    assert vector_chunks(60, 16 * 2**20) == (16 * 2**20 // 480, 60)
    assert vector_chunks(3_000_000, 16 * 2**20) == (1, 1_500_000)
    rng = np.random.default_rng(4)
    vectors = rng.normal(size=(5, 30))
    with CatalogueWriter(tmp_path / "c.zarr", 10, REDUCED, chunk_bytes=100) as writer:
        assert writer.chunks == (1, 10)
        writer.append(np.arange(3.0), np.zeros(3), np.zeros(3), vectors[:3])
        writer.append(np.arange(3.0, 5.0), np.zeros(2), np.ones(2), vectors[3:])
        with pytest.raises(ValueError, match="ascending"):
            writer.append(np.array([1.0]), np.zeros(1), np.zeros(1), vectors[:1])
        writer.finish({"units": "reduced", "n_atoms": 10, "completeness": {"complete": True}})
    cat = open_catalogue(tmp_path / "c.zarr")
    assert np.array_equal(cat.read_vectors(0, 5), vectors)
    assert np.array_equal(np.concatenate([v for _, v in cat.iter_vectors(2)]), vectors)
    assert xr.open_zarr(tmp_path / "c.zarr").vector.encoding["chunks"] == (1, 10)

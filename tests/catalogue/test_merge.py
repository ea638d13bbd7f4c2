"""Merging slice parts into a catalogue, checked against dense LAPACK (numpy.linalg.eigh) on the
synthetic job of conftest.py."""

import json
import warnings

import numpy as np
import pytest
import xarray as xr

from eigenfarm.catalogue import open_catalogue, participation_ratio, write_catalogue
from eigenfarm.catalogue.stitch import Stitcher
from eigenfarm.errors import InputError
from eigenfarm.structure.units import METAL


def _all_vectors(cat):
    return np.concatenate([v for _, v in cat.iter_vectors()]) if cat.n_modes else np.zeros((0, cat.n_dof))


def test_round_trip_removes_duplicates_and_is_orthonormal_across_boundaries(make_job):
    job = make_job()
    path = write_catalogue(job.out, job.work, job.plan, job.info)
    assert path == job.out and not job.work.path.exists()
    cat = open_catalogue(path)
    vectors = _all_vectors(cat)
    # count right: every designed eigenvalue once (two duplicates planted, one split pair)
    assert cat.n_modes == len(job.values) == 60
    assert np.allclose(cat.eigenvalues, job.values, rtol=0, atol=6e-11)  # planted estimate errors ≤ 5e-11
    assert np.all(np.diff(cat.eigenvalues) >= 0)
    assert np.abs(vectors @ vectors.T - np.eye(cat.n_modes)).max() < 1e-12
    # each catalogue mode is an eigenpair of D (reference: the dense matrix itself)
    true = np.linalg.norm(job.D @ vectors.T - vectors.T * cat.eigenvalues, axis=0)
    assert true.max() < 1e-8
    assert np.all(true <= cat.residuals + 1e-15)       # recorded residuals (or bounds) hold
    # the span of the catalogue equals the reference eigenspace (numpy.linalg.eigh)
    overlap = vectors @ job.vectors
    assert np.allclose(np.sort(np.linalg.svd(overlap, compute_uv=False)), 1, atol=1e-12)
    # the duplicate with the smaller residual (slice 2's exact copy) is the one kept
    d = job.duplicated
    assert cat.slices[d] == 2 and np.array_equal(vectors[d], job.vectors[:, d])
    records = {s["index"]: s for s in cat.attrs["slices"]}
    assert [records[k]["duplicates"] for k in range(4)] == [0, 1, 0, 1]
    assert [records[k]["returned"] for k in range(4)] == [
        job.plan.slices[0].expected - 1, job.plan.slices[1].expected + 1,
        job.plan.slices[2].expected + 1, job.plan.slices[3].expected + 1]
    assert cat.attrs["merge"]["recombined_modes"] == 2
    assert cat.complete and cat.attrs["completeness"]["mismatched_slices"] == []
    assert [records[k]["found"] for k in range(4)] == [s.expected for s in job.plan.slices]


def test_variables_follow_the_contract_and_xarray_opens_it_plainly(make_job):
    job = make_job()
    write_catalogue(job.out, job.work, job.plan, job.info)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ds = xr.open_zarr(job.out)
    assert dict(ds.sizes) == {"mode": 60, "dof": 60}
    assert {"eigenvalue", "frequency", "residual", "participation", "slice", "vector"} <= set(ds.data_vars)
    for name in ("eigenvalue", "frequency", "residual", "participation", "slice"):
        assert ds[name].dims == ("mode",)
    assert ds.vector.dims == ("mode", "dof") and ds.vector.dtype == np.float64
    assert ds.vector.encoding["chunks"][1] == 60          # chunked by whole modes
    assert list(ds.mode.values) == list(range(60)) and "atom" in ds.coords
    assert np.array_equal(ds.atom.values, np.arange(60) // 3)
    assert np.array_equal(ds.frequency.values, METAL.frequency(ds.eigenvalue.values))
    assert np.allclose(ds.participation.values, participation_ratio(ds.vector.values), rtol=1e-14)
    assert ds.eigenvalue.attrs["units"] == "eV/(Å²·amu)" and ds.frequency.attrs["units"] == "THz"
    attrs = ds.attrs
    json.dumps(attrs)
    assert attrs["kind"] == "modes" and attrs["units"] == "metal" and attrs["hessian_digest"] == "f" * 64
    assert attrs["n_atoms"] == 20 and attrs["n_modes"] == 60
    assert attrs["window"]["eigenvalue"] == [0.02, 1.0]
    assert attrs["window"]["frequency"] == pytest.approx(METAL.frequency([0.02, 1.0]).tolist())
    assert attrs["zero_modes"]["count"] == 3 and attrs["zero_modes"]["expected_trivial"] == 3
    assert attrs["negative_modes"]["count"] == 0
    assert attrs["solver"] == {"backend": "dense-test", "tol": 1e-12}
    assert [s["expected"] for s in attrs["slices"]] == [s.expected for s in job.plan.slices]
    assert attrs["slices"][0]["run"]["index"] == 0
    assert attrs["completeness"]["complete"] is True and "eigenfarm_version" in attrs and "created" in attrs


def test_missing_mode_makes_the_verdict_incomplete(make_job, tmp_path):
    job = make_job()
    part = job.work.load_part(3)
    lam, vec, res = np.array(part.eigenvalues), np.array(part.vectors), np.array(part.residuals)
    job.work.part_path(3).rename(tmp_path / "gone")
    keep = np.argsort(lam)[:-1]                                        # the solver lost its top mode
    job.work.save_part(3, lam[keep], vec[:, keep], res[keep], part.info)
    cat = open_catalogue(write_catalogue(job.out, job.work, job.plan, job.info))
    verdict = cat.attrs["completeness"]
    assert not cat.complete and verdict["mismatched_slices"] == [3]
    assert verdict["found"] == 59 and verdict["expected"] == 60


def test_lowest_k_keeps_the_lowest_modes(make_job):
    job = make_job(keep=25)
    cat = open_catalogue(write_catalogue(job.out, job.work, job.plan, job.info))
    assert cat.n_modes == 25 and np.allclose(cat.eigenvalues, job.values[:25], atol=6e-11), (np.abs(cat.eigenvalues - job.values).max(), cat.eigenvalues - job.values)
    assert cat.attrs["keep_lowest"] == 25 and cat.complete


def test_unfinished_slices_and_occupied_outputs_are_refused(make_job, tmp_path):
    job = make_job(skip=(2,))
    with pytest.raises(InputError, match=r"1 slice\(s\) not finished \(2\); rerun the same command"):
        write_catalogue(job.out, job.work, job.plan, job.info)
    other = tmp_path / "other"
    other.mkdir()
    job2 = make_job()
    with pytest.raises(InputError, match="already exists"):
        write_catalogue(other, job2.work, job2.plan, job2.info)
    with pytest.raises(InputError, match="is not a mode catalogue; not replacing it"):
        write_catalogue(other, job2.work, job2.plan, job2.info, overwrite=True)
    assert job2.work.finished() == {0, 1, 2, 3}


def test_crash_mid_merge_leaves_no_catalogue_and_keeps_the_parts(make_job, monkeypatch, tmp_path):
    job = make_job()
    calls = []

    def crash_on_third(self, part):
        calls.append(part.index)
        if len(calls) == 3:
            raise MemoryError("simulated crash")
        return original(self, part)

    original = Stitcher.add
    monkeypatch.setattr(Stitcher, "add", crash_on_third)
    with pytest.raises(MemoryError):
        write_catalogue(job.out, job.work, job.plan, job.info)
    assert not job.out.exists() and [p.name for p in tmp_path.iterdir()] == ["modes.zarr.work"]
    assert job.work.finished() == {0, 1, 2, 3}
    monkeypatch.setattr(Stitcher, "add", original)
    assert open_catalogue(write_catalogue(job.out, job.work, job.plan, job.info)).n_modes == 60


def test_old_catalogue_survives_a_failed_overwrite_and_is_replaced_by_a_good_one(make_job, monkeypatch):
    job = make_job(keep=10)
    write_catalogue(job.out, job.work, job.plan, job.info)
    job = make_job()
    monkeypatch.setattr(Stitcher, "close", lambda self: (_ for _ in ()).throw(OSError("disk full")))
    with pytest.raises(OSError):
        write_catalogue(job.out, job.work, job.plan, job.info, overwrite=True)
    assert open_catalogue(job.out).n_modes == 10
    monkeypatch.undo()
    with pytest.raises(InputError, match="already exists"):
        write_catalogue(job.out, job.work, job.plan, job.info)
    assert open_catalogue(write_catalogue(job.out, job.work, job.plan, job.info, overwrite=True)).n_modes == 60
    assert sorted(p.name for p in job.out.parent.iterdir()) == ["modes.zarr"]


def test_negative_modes_below_the_zero_band_get_negative_frequencies(tmp_path):
    from eigenfarm.catalogue import WorkFolder
    from eigenfarm.plan.slicing import Plan, Slice

    # 4 atoms, 3 zero modes, 2 negative eigenvalues (a configuration off its minimum); reference eigh
    values = np.array([-0.3, -0.1, 0, 0, 0, 0.2, 0.3, 0.45, 0.5 - 1e-3, 0.6, 0.7, 0.9])
    q, _ = np.linalg.qr(np.random.default_rng(5).normal(size=(12, 12)))
    lam, vec = np.linalg.eigh((q * values) @ q.T)
    slices = [Slice(0, -0.5, -1e-8, 2), Slice(1, 1e-8, 0.5, 4), Slice(2, 0.5, 1.0, 3)]
    plan = Plan(-0.5, 1.0, slices, 1.0, 1e-8, 2, 3, 0, {"window": [-0.5, 1.0]})
    work = WorkFolder(tmp_path / "neg.zarr", {"job": "negative"})
    for s in slices:
        pick = (lam > s.lo) & (lam <= s.hi)
        work.save_part(s.index, lam[pick], vec[:, pick], np.full(pick.sum(), 1e-15), {})
    info = {"units": "reduced", "hessian_digest": "e" * 64, "n_atoms": 4, "trivial_zero_modes": 3}
    cat = open_catalogue(write_catalogue(tmp_path / "neg.zarr", work, plan, info))
    assert cat.n_modes == 9 and cat.complete
    # reduced units: frequency = sign(λ)·√|λ| (the contract's signed frequency)
    assert np.allclose(cat.frequencies[:2], [-np.sqrt(0.3), -np.sqrt(0.1)], rtol=1e-12)
    assert cat.attrs["negative_modes"] == {"count": 2, "in_catalogue": 2}
    assert cat.attrs["zero_modes"]["count"] == 3 and cat.attrs["zero_modes"]["in_catalogue"] == 0
    assert "NEGATIVE       2 eigenvalues below" in cat.summary()

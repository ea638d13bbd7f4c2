"""The work folder: fingerprints, atomic parts, resume."""

import pickle

import numpy as np
import pytest

from eigenfarm.catalogue import WorkFolder, work_path
from eigenfarm.errors import InputError
from eigenfarm.plan.slicing import Plan, Slice

FINGERPRINT = {"hessian_digest": "a" * 64, "request": {"window": [0.1, 2.0], "backend": "scipy"}}


def _part(rng, n=12, m=3):
    lam = np.sort(rng.uniform(0.1, 1.0, m))
    vec, _ = np.linalg.qr(rng.normal(size=(n, m)))
    return lam, vec, rng.uniform(1e-14, 1e-12, m)


def test_parts_round_trip_and_mode_columns_are_contiguous(tmp_path):
    rng = np.random.default_rng(0)
    work = WorkFolder(tmp_path / "modes.zarr", FINGERPRINT)
    assert work.path == tmp_path / "modes.zarr.work" == work_path(tmp_path / "modes.zarr")
    assert work.finished() == set()
    saved = {k: _part(rng) for k in (0, 2)}
    for k, (lam, vec, res) in saved.items():
        work.save_part(k, lam, np.ascontiguousarray(vec) if k else np.asfortranarray(vec), res, {"shift": 0.5, "k": k})
    assert work.finished() == {0, 2}
    for k, (lam, vec, res) in saved.items():
        part = work.load_part(k)
        assert np.array_equal(part.eigenvalues, lam) and np.array_equal(part.residuals, res)
        assert np.array_equal(part.vectors, vec) and part.vectors.flags.f_contiguous
        assert part.info == {"shift": 0.5, "k": k} and part.n_modes == 3
    with pytest.raises(InputError, match="slice 1 is not finished"):
        work.load_part(1)


def test_reopening_with_the_same_fingerprint_resumes(tmp_path):
    rng = np.random.default_rng(1)
    WorkFolder(tmp_path / "m.zarr", FINGERPRINT).save_part(4, *_part(rng), {})
    again = WorkFolder(tmp_path / "m.zarr", dict(FINGERPRINT))
    assert again.finished() == {4}


def test_a_different_job_is_refused(tmp_path):
    WorkFolder(tmp_path / "m.zarr", FINGERPRINT)
    other = {**FINGERPRINT, "request": {"window": [0.1, 3.0], "backend": "scipy"}}
    with pytest.raises(InputError, match=r"m.zarr.work: work folder belongs to another job \(different request\);"
                                         r" remove it or use another --out"):
        WorkFolder(tmp_path / "m.zarr", other)
    (tmp_path / "x.zarr.work").mkdir()
    with pytest.raises(InputError, match="not an eigenfarm work folder"):
        WorkFolder(tmp_path / "x.zarr", FINGERPRINT)
    with pytest.raises(InputError, match="does not exist"):
        WorkFolder(tmp_path / "nowhere" / "m.zarr", FINGERPRINT)


def test_a_retried_slice_keeps_the_first_copy_and_leftovers_are_ignored(tmp_path):
    rng = np.random.default_rng(2)
    work = WorkFolder(tmp_path / "m.zarr", FINGERPRINT)
    first, second = _part(rng), _part(rng)
    work.save_part(0, *first, {"try": 1})
    work.save_part(0, *second, {"try": 2})
    assert work.load_part(0).info == {"try": 1} and np.array_equal(work.load_part(0).eigenvalues, first[0])
    (work.path / ".slice-000001.tmp-999-dead").mkdir()  # a writer killed mid-way
    assert work.finished() == {0}


def test_work_folder_pickles_to_workers(tmp_path):
    rng = np.random.default_rng(3)
    work = WorkFolder(tmp_path / "m.zarr", FINGERPRINT)
    save = pickle.loads(pickle.dumps(work.save_part))
    save(7, *_part(rng), {"on": "worker"})
    assert work.finished() == {7}


def test_plan_round_trip(tmp_path):
    work = WorkFolder(tmp_path / "m.zarr", FINGERPRINT)
    assert work.plan is None
    plan = Plan(0.1, 2.0, [Slice(0, 0.1, 0.7, 5), Slice(1, 0.7, 2.0, 6)], 9.5, 1e-8, 0, 3, 3, {"window": [0.1, 2.0]})
    work.save_plan(plan)
    assert WorkFolder(tmp_path / "m.zarr", FINGERPRINT).plan == plan


def test_bad_parts_are_rejected(tmp_path):
    work = WorkFolder(tmp_path / "m.zarr", FINGERPRINT)
    with pytest.raises(ValueError, match=r"vectors \(n, m\)"):
        work.save_part(0, np.ones(3), np.ones((12, 2)), np.ones(3), {})
    with pytest.raises(ValueError, match="non-finite"):
        work.save_part(0, np.array([np.nan]), np.ones((12, 1)), np.ones(1), {})
    assert work.finished() == set()

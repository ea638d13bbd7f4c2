"""The solve job on dask: worker counts, interruption and resume, a worker killed mid-job."""

import os
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pytest

from eigenfarm.catalogue import open_catalogue
from eigenfarm.catalogue.parts import work_path
from eigenfarm.farm import solvejob, tasks
from eigenfarm.farm.cluster import open_client
from eigenfarm.farm.runner import LocalRunner, runner_for
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.store import build_store

REQUEST = solvejob.SolveRequest(window=(0.0, 4.5), backend="superlu", slice_modes=12)


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    config = make_sample(Recipe(300), seed=5, sample=0)
    path = tmp_path_factory.mktemp("farm") / "H.zarr"
    build_store(config, demo_potential(), path)
    return path


def run_job(runner, store, out, request=REQUEST):
    job = solvejob.prepare(runner, str(store), out, request, False, lambda text: None)
    return open_catalogue(solvejob.run(runner, [job], request)[0])


def vectors(cat):
    return np.concatenate([chunk for _, chunk in cat.iter_vectors()])


@pytest.fixture(scope="module")
def inline(store, tmp_path_factory):
    return run_job(LocalRunner(), store, tmp_path_factory.mktemp("inline") / "m.zarr")


def test_one_and_two_workers_and_inline_give_identical_catalogues(store, inline, tmp_path):
    assert inline.complete and len(inline.attrs["slices"]) >= 4
    for workers in (1, 2):
        with open_client(workers) as client:
            cat = run_job(runner_for(client), store, tmp_path / f"w{workers}.zarr")
        np.testing.assert_array_equal(cat.eigenvalues, inline.eigenvalues)
        np.testing.assert_array_equal(np.abs(vectors(cat)), np.abs(vectors(inline)))
        assert cat.attrs["completeness"] == inline.attrs["completeness"]


class StopAfter(LocalRunner):
    """Runs slice tasks in this process and counts them; interrupts the job after ``limit`` slices."""

    def __init__(self, limit=None):
        self.limit, self.slices = limit, 0

    def submit(self, fn, *args):
        if fn is tasks.slice_task:
            def counted(*a):
                if self.limit is not None and self.slices >= self.limit:
                    raise KeyboardInterrupt("job interrupted")
                self.slices += 1
                return fn(*a)
            return super().submit(counted, *args)
        return super().submit(fn, *args)


def test_interrupted_job_resumes_and_recomputes_only_unfinished_slices(store, inline, tmp_path):
    out = tmp_path / "m.zarr"
    first = StopAfter(limit=2)
    with pytest.raises(KeyboardInterrupt):
        run_job(first, store, out)
    assert not out.exists() and work_path(out).exists()
    total = len(inline.attrs["slices"])
    second = StopAfter()
    cat = run_job(second, store, out)
    assert second.slices == total - 2
    np.testing.assert_array_equal(cat.eigenvalues, inline.eigenvalues)
    np.testing.assert_array_equal(np.abs(vectors(cat)), np.abs(vectors(inline)))
    assert not work_path(out).exists()


def test_a_worker_killed_mid_job_loses_no_slice(store, inline, tmp_path):
    out = tmp_path / "m.zarr"
    request = solvejob.SolveRequest(window=(0.0, 4.5), backend="superlu", slice_modes=4)
    with open_client(2) as client:
        pids = list(client.run(os.getpid).values())
        killed = []

        def kill_once_work_started():
            parts = work_path(out)
            for _ in range(600):
                if parts.exists() and any(p.name.startswith("slice-") for p in parts.iterdir()):
                    os.kill(pids[0], signal.SIGKILL)
                    killed.append(pids[0])
                    return
                time.sleep(0.01)

        killer = threading.Thread(target=kill_once_work_started)
        killer.start()
        cat = run_job(runner_for(client), store, out, request)
        killer.join()
    assert killed, "no worker was killed: the job finished before any slice was saved"
    assert cat.complete
    np.testing.assert_allclose(cat.eigenvalues, inline.eigenvalues, rtol=1e-12)


def test_cli_solve_and_modes_and_unreachable_scheduler(store, tmp_path):
    exe = [sys.executable, "-m", "eigenfarm.cli"]
    out = tmp_path / "cli.zarr"
    run = subprocess.run(exe + ["solve", str(store), "--out", str(out), "--lowest", "20", "--workers", "1"],
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert "COMPLETE" in run.stdout and "dask dashboard" in run.stdout
    shown = subprocess.run(exe + ["modes", str(out)], capture_output=True, text=True, timeout=120)
    assert shown.returncode == 0 and "the lowest 20" in shown.stdout
    again = subprocess.run(exe + ["solve", str(store), "--out", str(out), "--lowest", "20", "--inline"],
                           capture_output=True, text=True, timeout=300)
    assert again.returncode != 0 and "already exists" in again.stderr.strip().splitlines()[-1]
    bad = subprocess.run(exe + ["solve", str(store), "--out", str(tmp_path / "x.zarr"), "--lowest", "5",
                                "--scheduler", "tcp://127.0.0.1:9"], capture_output=True, text=True, timeout=120)
    last = bad.stderr.strip().splitlines()[-1]
    assert bad.returncode != 0 and last.startswith("eigenfarm: error: scheduler tcp://127.0.0.1:9: cannot connect")
    assert "Traceback" not in bad.stderr

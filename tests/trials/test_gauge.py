"""`eigenfarm gauge`: settings tried in child processes, checked against dense LAPACK and plain eigsh."""

import csv
import json
import sys

import pytest

from eigenfarm.cli import main
from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential
from eigenfarm.store import build_store
from eigenfarm.trials.grid import Trial, expand, solve_command
from eigenfarm.trials.watch import run_watched


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    path = tmp_path_factory.mktemp("gauge") / "H.zarr"
    build_store(make_sample(Recipe(150), seed=4, sample=0), demo_potential(), path)
    return str(path)


def test_gauge_rows_agree_with_dense_lapack(store, tmp_path, capsys):
    out = tmp_path / "g"
    assert main(["gauge", store, "--out", str(out), "--lowest", "12", "--backends", "superlu,dense",
                 "--ncv", "none,40"]) == 0
    assert "| label |" in capsys.readouterr().out
    record = json.loads((out / "gauge.json").read_text())
    rows = record["rows"]
    assert [r["label"] for r in rows[:2]] == ["reference: dense", "reference: eigsh"]
    assert len(rows) == 2 + 4 and all("failure" not in r for r in rows)
    for row in rows:
        # reference: dense LAPACK (numpy.linalg.eigh) on the same D, run by the gauge itself
        assert row["modes"] == 12 and row["count_matches"] and row["max_rel_diff"] < 1e-9, row["label"]
        assert row["seconds"] > 0 and row["peak_process_mib"] > 20
    trials = rows[2:]
    assert all(r["complete"] and r["max_residual"] < 1e-10 for r in trials)
    assert {r["ncv"] for r in trials} == {None, 40} and {r["backend"] for r in trials} == {"superlu", "dense"}
    with open(out / "gauge.csv", newline="") as handle:
        table = list(csv.DictReader(handle))
    assert len(table) == 6 and float(table[1]["speedup"]) == pytest.approx(1.0)  # eigsh is the baseline
    assert (out / "gauge.png").stat().st_size > 1000 and (out / "gauge.svg").exists()


def test_gauge_refuses_bad_requests(store, tmp_path, capsys):
    assert main(["gauge", store, "--out", str(tmp_path / "a"), "--window", "0:2", "--references", "eigsh"]) == 2
    assert "needs --lowest" in capsys.readouterr().err
    assert main(["gauge", store, "--out", str(tmp_path / "b"), "--lowest", "5", "--backends", "nosuch"]) == 2
    assert "nosuch" in capsys.readouterr().err
    (tmp_path / "c").mkdir()
    assert main(["gauge", store, "--out", str(tmp_path / "c"), "--lowest", "5", "--overwrite"]) == 2
    assert "not a gauge folder" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c"]


def test_watch_sees_a_child_allocation():
    # A child holding 300 MiB must show at least that much resident memory (psutil RSS; common practice).
    code = "import numpy as np, time; a = np.ones(300 * 2**20 // 8); time.sleep(0.5)"
    watched = run_watched([sys.executable, "-c", code])
    assert watched.status == 0 and watched.peak_process_mib > 300 and watched.seconds > 0.5


def test_grid_is_the_cartesian_product_and_runs_the_real_command():
    trials = expand(["a", "b"], [10, 20], [None], [1e-10], [0, 2])
    assert len(trials) == 8 and trials[0] == Trial("a", 10, None, 1e-10, 0)
    # ranks and slice methods apply to slepc only; an MPI job ignores the dask worker count
    mixed = expand(["superlu", "slepc"], [10], [None], [1e-10], [0, 2], [1, 2], [None, "interval"])
    assert [t.label for t in mixed] == [
        "superlu m10 ncvauto tol1e-10 inline", "superlu m10 ncvauto tol1e-10 2w",
        "slepc m10 ncvauto tol1e-10 inline", "slepc interval m10 ncvauto tol1e-10 inline",
        "slepc m10 ncvauto tol1e-10 2 ranks", "slepc interval m10 ncvauto tol1e-10 2 ranks",
        "slepc m10 ncvauto tol1e-10 2w", "slepc interval m10 ncvauto tol1e-10 2w"]
    mpi = solve_command(mixed[4], "H.zarr", "o.zarr", ["--lowest", "5"])
    assert "-n" in mpi and mpi[mpi.index("-n") + 1] == "2" and "--workers" not in mpi and "--inline" not in mpi
    argv = solve_command(trials[1], "H.zarr", "o.zarr", ["--lowest", "5"])
    assert argv[1:4] == ["-m", "eigenfarm.cli", "solve"] and argv[-2:] == ["--workers", "2"]
    assert "--ncv" not in argv and "--inline" in solve_command(trials[0], "H", "o", ["--lowest", "5"])


def test_gauge_runs_slepc_on_two_ranks(store, tmp_path):
    pytest.importorskip("slepc4py", reason="PETSc/SLEPc not installed (make slepc)")
    out = tmp_path / "g"
    assert main(["gauge", store, "--out", str(out), "--lowest", "8", "--backends", "slepc", "--ranks", "2",
                 "--references", "dense"]) == 0
    rows = json.loads((out / "gauge.json").read_text())["rows"]
    mpi = rows[1]
    assert mpi["ranks"] == 2 and mpi["complete"] and "failure" not in mpi
    # reference: dense LAPACK (numpy.linalg.eigh), run by the gauge itself
    assert mpi["count_matches"] and mpi["max_rel_diff"] < 1e-9
    assert mpi["peak_total_mib"] > mpi["peak_process_mib"]  # two rank processes were watched

"""The ``eigenfarm`` command line run as users run it: a separate process, its exit status and its output.

The contract (DESIGN.md § Command line): exit status 0 on success; on any failure a non-zero status and
one line ``eigenfarm: error: …`` on stderr naming what is wrong and where, never a traceback.  Progress
bars also go to stderr; they may come before the error line but nothing else may.

Local dask clusters are started with --workers 1 on tiny systems to keep this module short.
"""

from __future__ import annotations

import hashlib
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from eigenfarm.potentials.spec import load_potential
from eigenfarm.structure.box import Box
from eigenfarm.structure.configuration import Configuration
from eigenfarm.structure.xyz import read_xyz, write_xyz

#: Lennard-Jones in reduced units, cut (and smoothed) at 2σ: a small FCC box is stable under it
LJ = "lj:eps=1,sigma=1,rc=2.0"
PROGRESS_LINE = re.compile(r"^\S+ \[[# ]*\] \d+/\d+ +\d+\.\d s$")
_SCRIPT = Path(sys.executable).with_name("eigenfarm")


def eigenfarm(*args, cwd: Path) -> subprocess.CompletedProcess:
    """Run the installed console script (or ``python -m eigenfarm.cli`` without one) in ``cwd``."""
    command = [str(_SCRIPT)] if _SCRIPT.exists() else [sys.executable, "-m", "eigenfarm.cli"]
    return subprocess.run(command + [str(a) for a in args], cwd=cwd, capture_output=True, text=True,
                          timeout=300, stdin=subprocess.DEVNULL)


def assert_one_line_error(result: subprocess.CompletedProcess, *fragments: str) -> str:
    """Non-zero exit, no traceback, one error line last on stderr (after progress lines only)."""
    where = f"\nstdout:\n{result.stdout}\nstderr:\n{result.stderr}"
    assert result.returncode != 0, where
    assert "Traceback" not in result.stderr + result.stdout, where
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    others = [line for line in lines if not PROGRESS_LINE.match(line)]
    assert len(others) == 1 and lines[-1] == others[0], where
    message = others[0]
    assert message.startswith("eigenfarm: error: "), where
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in {message!r}"
    return message


def tree_digest(path: Path) -> str:
    """sha256 over every file's relative path and bytes under ``path``."""
    h = hashlib.sha256()
    for root, dirs, files in sorted(os.walk(path)):
        dirs.sort()
        for name in sorted(files):
            full = Path(root, name)
            h.update(str(full.relative_to(path)).encode() + b"\0" + full.read_bytes())
    return h.hexdigest()


def fcc(cells: int = 2, jitter: float = 0.03, seed: int = 0) -> Configuration:
    """FCC at the LJ nearest-neighbour distance 2^(1/6) σ, atoms moved by ~``jitter``."""
    a = 2 ** (1 / 6) * np.sqrt(2)
    basis = np.array([[0, 0, 0], [0, .5, .5], [.5, 0, .5], [.5, .5, 0]])
    grid = np.stack(np.meshgrid(*[np.arange(cells)] * 3, indexing="ij"), -1).reshape(-1, 1, 3)
    positions = ((grid + basis) * a).reshape(-1, 3)
    positions += np.random.default_rng(seed).normal(scale=jitter, size=positions.shape)
    return Configuration(positions, ["A"] * len(positions), Box.cubic(cells * a), "reduced")


@pytest.fixture(scope="module")
def work(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("cli")
    write_xyz(path / "perturbed.xyz", fcc())
    return path


@pytest.fixture(scope="module")
def relaxed(work) -> subprocess.CompletedProcess:
    """``eigenfarm relax`` of the perturbed crystal (no cluster: FIRE runs in the process)."""
    return eigenfarm("relax", "perturbed.xyz", "--potential", LJ, "--out", "relaxed.xyz", cwd=work)


@pytest.fixture(scope="module")
def store(work, relaxed) -> subprocess.CompletedProcess:
    assert relaxed.returncode == 0, relaxed.stderr
    return eigenfarm("hessian", "relaxed.xyz", "--potential", LJ, "--out", "H.zarr", "--workers", 1, cwd=work)


def test_relax_reaches_the_force_tolerance(work, relaxed):
    assert relaxed.returncode == 0, relaxed.stderr
    assert "relaxed.xyz: energy" in relaxed.stdout
    before, after = read_xyz(work / "perturbed.xyz"), read_xyz(work / "relaxed.xyz")
    potential = load_potential(LJ)
    # forces recomputed here, not taken from the command's report
    assert np.abs(potential.energy_forces(before)[1]).max() > 1.0
    assert np.linalg.norm(potential.energy_forces(after)[1], axis=1).max() < 1e-10
    assert potential.energy(after) < potential.energy(before)
    assert after.n_atoms == before.n_atoms and after.species.tolist() == before.species.tolist()
    np.testing.assert_array_equal(after.box.cell, before.box.cell)


def test_relax_refuses_to_replace_its_output(work, relaxed):
    assert relaxed.returncode == 0
    kept = (work / "relaxed.xyz").read_bytes()
    result = eigenfarm("relax", "perturbed.xyz", "--potential", LJ, "--out", "relaxed.xyz", cwd=work)
    assert_one_line_error(result, "relaxed.xyz: already exists", "--overwrite")
    assert (work / "relaxed.xyz").read_bytes() == kept


def test_hessian_build_then_describe(work, store):
    assert store.returncode == 0, store.stderr
    assert "Traceback" not in store.stderr
    described = eigenfarm("hessian", "H.zarr", cwd=work)
    assert described.returncode == 0, described.stderr
    text = described.stdout
    assert re.search(r"^\s+validation\s+PASSED", text, re.M), text
    assert re.search(r"^\s+atoms\s+32 \(matrix 96 × 96\)", text, re.M), text
    assert "units          reduced" in text
    for check in ("structure", "finite", "sum rule", "symmetry"):
        assert re.search(rf"^\s+{check}\s+ok", text, re.M), text
    # the build printed the same summary
    assert text.split("\n", 1)[1] == store.stdout.split("Hessian store", 1)[1].split("\n", 1)[1]


def test_hessian_refuses_existing_store_and_leaves_it_unchanged(work, store):
    assert store.returncode == 0
    before = tree_digest(work / "H.zarr")
    result = eigenfarm("hessian", "relaxed.xyz", "--potential", LJ, "--out", "H.zarr", "--workers", 1, cwd=work)
    assert_one_line_error(result, "H.zarr", "already exists")
    assert tree_digest(work / "H.zarr") == before
    assert not [p for p in work.iterdir() if p.name.startswith(".H.zarr")]  # no partial store left


@pytest.fixture(scope="module")
def bad_configs(work, relaxed) -> Path:
    """Variants of the relaxed crystal: an unknown species, two overlapping atoms, a malformed line."""
    assert relaxed.returncode == 0
    config = read_xyz(work / "relaxed.xyz")
    species = config.species.copy()
    species[5] = "Q"
    write_xyz(work / "species.xyz", Configuration(config.positions, species, config.box, "reduced"))
    positions = config.positions.copy()
    positions[7] = positions[3] + [0.01, 0.0, 0.0]
    write_xyz(work / "overlap.xyz", config.with_positions(positions))
    lines = (work / "relaxed.xyz").read_text().splitlines()
    lines[10] = " ".join(lines[10].split()[:3])  # atom 8 on line 11 loses its z coordinate
    (work / "malformed.xyz").write_text("\n".join(lines) + "\n")
    return work


def test_unknown_species_names_the_atom(bad_configs):
    result = eigenfarm("hessian", "species.xyz", "--potential", "demo-soft-spheres", "--out", "S.zarr",
                       "--workers", 1, cwd=bad_configs)
    assert_one_line_error(result, "species.xyz", "atom 5", "'Q'", "demo-soft-spheres")
    assert not (bad_configs / "S.zarr").exists()


def test_overlapping_atoms_name_the_pair(bad_configs):
    result = eigenfarm("hessian", "overlap.xyz", "--potential", LJ, "--out", "O.zarr", "--workers", 1,
                       cwd=bad_configs)
    message = assert_one_line_error(result, "overlap.xyz", "overlap")
    assert "atoms 3 and 7" in message or "atoms 7 and 3" in message, message
    assert not (bad_configs / "O.zarr").exists()


def test_malformed_xyz_names_the_line(bad_configs):
    result = eigenfarm("hessian", "malformed.xyz", "--potential", LJ, "--out", "X.zarr", "--workers", 1,
                       cwd=bad_configs)
    assert_one_line_error(result, "malformed.xyz: line 11: atom 8: expected 4 columns, found 3")


def test_missing_potential(work, relaxed):
    result = eigenfarm("hessian", "relaxed.xyz", "--out", "P.zarr", cwd=work)
    assert_one_line_error(result, "relaxed.xyz", "--potential")


@pytest.mark.parametrize("spec, fragments", [
    ("no-such-set", ("unknown potential 'no-such-set'",)),
    ("lj:eps=1,rc=2", ("lj:eps=1,rc=2", "missing sigma")),
    ("nosuchform:k=1", ("unknown form 'nosuchform'",)),
])
def test_unknown_or_broken_potential_spec(work, relaxed, spec, fragments):
    result = eigenfarm("hessian", "relaxed.xyz", "--potential", spec, "--out", "P.zarr", "--workers", 1, cwd=work)
    assert_one_line_error(result, *fragments)
    assert not (work / "P.zarr").exists()


def write_mtx(path: Path, entries, n: int = 6, symmetry: str = "general") -> None:
    """A Matrix Market coordinate file (Boisvert, Pozo & Remington, NIST, 1996) with 1-based entries."""
    lines = [f"%%MatrixMarket matrix coordinate real {symmetry}", "% eigenfarm test matrix", f"{n} {n} {len(entries)}"]
    lines += [f"{i} {j} {v}" for i, j, v in entries]
    path.write_text("\n".join(lines) + "\n")


#: two atoms joined by a unit spring along x: H = k [[1, −1], [−1, 1]] ⊗ e_x e_xᵀ
SPRING = [(1, 1, "1.0"), (1, 4, "-1.0"), (4, 1, "-1.0"), (4, 4, "1.0")]


@pytest.fixture(scope="module")
def matrices(work) -> Path:
    write_mtx(work / "spring.mtx", SPRING)
    write_mtx(work / "asym.mtx", [SPRING[0], (1, 4, "-1.5"), *SPRING[2:]])
    write_mtx(work / "inf.mtx", [SPRING[0], SPRING[1], (4, 1, "inf"), SPRING[3]])
    (work / "three.txt").write_text("1.0\n2.0\n3.0\n")
    return work


def test_mtx_import_and_describe(matrices):
    result = eigenfarm("hessian", "spring.mtx", "--masses", "2.5", "--units", "reduced", "--out", "M.zarr",
                       "--workers", 1, cwd=matrices)
    assert result.returncode == 0, result.stderr
    assert re.search(r"^\s+validation\s+PASSED", result.stdout, re.M), result.stdout
    assert re.search(r"^\s+atoms\s+2 \(matrix 6 × 6\)", result.stdout, re.M), result.stdout
    assert "masses         2.5 .. 2.5" in result.stdout


def test_mtx_masses_count_mismatch(matrices):
    result = eigenfarm("hessian", "spring.mtx", "--masses", "three.txt", "--units", "reduced", "--out", "A.zarr",
                       "--workers", 1, cwd=matrices)
    assert_one_line_error(result, "three.txt", "3 masses", "spring.mtx", "2 atoms")
    assert not (matrices / "A.zarr").exists()


def test_mtx_not_symmetric(matrices):
    result = eigenfarm("hessian", "asym.mtx", "--masses", "1", "--units", "reduced", "--out", "B.zarr",
                       "--workers", 1, cwd=matrices)
    assert_one_line_error(result, "asym.mtx", "not symmetric", "row 1, col 4", "row 4, col 1")
    assert not (matrices / "B.zarr").exists()
    assert not [p for p in matrices.iterdir() if p.name.startswith(".B.zarr")]


def test_mtx_non_finite_entry(matrices):
    result = eigenfarm("hessian", "inf.mtx", "--masses", "1", "--units", "reduced", "--out", "C.zarr",
                       "--workers", 1, cwd=matrices)
    assert_one_line_error(result, "inf.mtx: line 6", "not finite")
    assert not (matrices / "C.zarr").exists()


def test_mtx_without_masses(matrices):
    result = eigenfarm("hessian", "spring.mtx", "--out", "D.zarr", cwd=matrices)
    assert_one_line_error(result, "spring.mtx", "--masses", "--units")


def test_glass_is_deterministic_and_resumable(tmp_path):
    """The same seed gives byte-identical samples, whatever the number of workers; a rerun keeps the
    files it finds; another seed gives other glasses."""
    args = ("glass", "--atoms", 64, "--samples", 2, "--seed", 3, "--out")
    first = eigenfarm(*args, "one", "--workers", 1, cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    second = eigenfarm(*args, "two", "--workers", 2, cwd=tmp_path)
    assert second.returncode == 0, second.stderr
    names = ["sample-000.xyz", "sample-001.xyz"]
    assert sorted(p.name for p in (tmp_path / "one").iterdir()) == names
    for name in names:
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes()
    a, b = (read_xyz(tmp_path / "one" / name) for name in names)
    assert a.n_atoms == b.n_atoms == 64 and not np.array_equal(a.positions, b.positions)
    assert float(a.info["fmax"]) < 1e-10
    stamps = {name: (tmp_path / "one" / name).stat().st_mtime_ns for name in names}
    contents = {name: (tmp_path / "one" / name).read_bytes() for name in names}
    again = eigenfarm(*args, "one", "--workers", 1, cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    for name in names:
        assert (tmp_path / "one" / name).stat().st_mtime_ns == stamps[name]
        assert (tmp_path / "one" / name).read_bytes() == contents[name]
    other = eigenfarm("glass", "--atoms", 64, "--samples", 1, "--seed", 4, "--out", "other", "--workers", 1,
                      cwd=tmp_path)
    assert other.returncode == 0, other.stderr
    assert (tmp_path / "other" / names[0]).read_bytes() != contents[names[0]]


@pytest.mark.parametrize("args, fragments", [
    (("hessian", "relaxed.xyz", "--potential", LJ, "--out", "W.zarr", "--workers", "-1"), ("--workers", "-1")),
    (("hessian", "relaxed.xyz", "--potential", LJ, "--out", "W.zarr", "--workers", "0"), ("--workers", "0")),
    (("hessian", "relaxed.xyz", "--potential", LJ, "--out", "W.zarr", "--shard-atoms", "-2"), ("--shard-atoms",)),
    (("hessian", "relaxed.xyz", "--potential", LJ, "--out", "W.zarr", "--workers", "two"), ("--workers", "two")),
    (("glass", "--out", "G", "--atoms", "10", "--density", "-1"), ("--density", "-1")),
    (("glass", "--out", "G", "--atoms", "10", "--density", "inf"), ("--density", "inf")),
    (("relax", "relaxed.xyz", "--potential", LJ, "--out", "r.xyz", "--fmax", "0"), ("--fmax",)),
    (("relax", "relaxed.xyz"), ("--potential", "--out")),  # required options missing
    (("solidify",), ("solidify",)),  # no such sub-command
])
def test_bad_options_give_one_line(work, relaxed, args, fragments):
    """Option mistakes are failures like any other: one line, no usage dump, no traceback."""
    result = eigenfarm(*args, cwd=work)
    assert_one_line_error(result, *fragments)
    assert not (work / "W.zarr").exists() and not (work / "G").exists()


def test_describing_a_missing_store_says_it_is_missing(work):
    result = eigenfarm("hessian", "typo.zarr", cwd=work)
    assert_one_line_error(result, "typo.zarr", "no such")


def test_existing_store_refused_before_any_cluster_starts(work, store):
    """The refusal names the command-line option and comes before a dask cluster is started."""
    assert store.returncode == 0
    result = eigenfarm("hessian", "relaxed.xyz", "--potential", LJ, "--out", "H.zarr", "--workers", 1, cwd=work)
    assert_one_line_error(result, "H.zarr: already exists", "--overwrite")
    assert "dask dashboard" not in result.stdout


def test_error_inside_a_worker_task_is_one_line(work, relaxed):
    """An input error found by a dask task (here an inverse power 5000 that overflows to a non-finite
    Hessian) reaches the user as the same single line: no worker log, traceback or numpy warning."""
    result = eigenfarm("hessian", "relaxed.xyz", "--potential", "ipl:eps=1,sigma=2,n=5000,rc=2.5", "--out", "N.zarr",
                       "--workers", 1, cwd=work)
    assert_one_line_error(result, "relaxed.xyz", "is not finite")
    assert not (work / "N.zarr").exists()

"""Importing Matrix Market files: round trips against scipy.io, and every bad input named precisely."""

import os

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from eigenfarm.errors import InputError
from eigenfarm.store import import_matrix_market, open_store
from eigenfarm.store.matrixmarket import MatrixMarketReader


@pytest.fixture(scope="module")
def hessian():
    from conftest import jittered_fcc, pair_potential

    return pair_potential("ipl").hessian(jittered_fcc(3, seed=2)).tocsr()  # 108 atoms, 324 × 324


@pytest.mark.parametrize("symmetry", ["symmetric", "general"])
def test_round_trip_against_scipy(hessian, tmp_path, symmetry, client):
    path = tmp_path / f"h-{symmetry}.mtx"
    scipy.io.mmwrite(path, hessian, symmetry=symmetry)
    assert symmetry in path.read_text().splitlines()[0]
    summary = import_matrix_market(path, 2.5, "metal", tmp_path / "H.zarr", shard_atoms=25, client=client)
    store = open_store(tmp_path / "H.zarr")
    reference = scipy.io.mmread(path).toarray()  # reference reader: scipy.io
    assert np.array_equal(store.matrix("csr").toarray(), reference)
    assert np.array_equal(store.original_index, np.arange(108)) and store.positions is None
    assert store.units.name == "metal" and np.all(store.masses == 2.5)
    assert summary["validation"]["passed"] and summary["validation"]["warnings"] == []
    source = store.provenance["source"]
    assert source["kind"] == "matrix-market" and source["symmetry"] == symmetry
    import hashlib
    assert source["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()


def test_masses_from_text_and_npy(hessian, tmp_path):
    path = tmp_path / "h.mtx"
    scipy.io.mmwrite(path, hessian)
    masses = np.linspace(1, 2, 108)
    (tmp_path / "m.txt").write_text("\n".join(repr(float(m)) for m in masses) + "\n")
    np.save(tmp_path / "m.npy", masses)
    a = import_matrix_market(path, str(tmp_path / "m.txt"), "reduced", tmp_path / "a.zarr")
    b = import_matrix_market(path, tmp_path / "m.npy", "reduced", tmp_path / "b.zarr")
    assert a["digest"] == b["digest"]
    assert np.array_equal(open_store(tmp_path / "a.zarr").masses, masses)


def test_sum_rule_failure_is_a_warning(tmp_path):
    rng = np.random.default_rng(5)
    a = sp.random(12, 12, density=0.4, random_state=rng)
    path = tmp_path / "spd.mtx"
    scipy.io.mmwrite(path, (a @ a.T + sp.eye(12)).tocoo(), symmetry="symmetric")
    verdict = import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")["validation"]
    assert verdict["passed"] and verdict["checks"]["sum_rule"]["passed"] is False
    assert verdict["checks"]["sum_rule"]["severity"] == "warning" and verdict["warnings"]
    assert "WARN" in open_store(tmp_path / "H.zarr").summary()


HEADER = "%%MatrixMarket matrix coordinate real {sym}\n% a comment\n{n} {n} {nnz}\n"


def _write(tmp_path, body: str, sym="general", n=6, nnz=None, name="bad.mtx"):
    lines = [line for line in body.strip().splitlines()]
    path = tmp_path / name
    path.write_text(HEADER.format(sym=sym, n=n, nnz=len(lines) if nnz is None else nnz) + "\n".join(lines) + "\n")
    return path


GOOD = "1 1 2.0\n2 2 2.0\n3 3 2.0\n4 4 2.0\n5 5 2.0\n6 6 2.0"


@pytest.mark.parametrize("text, message", [
    ("%%MatrixMarket matrix array real general\n6 6\n", r"line 1: format 'array' is not supported"),
    ("%%MatrixMarket matrix coordinate complex general\n6 6 0\n", r"line 1: field 'complex'"),
    ("%%MatrixMarket matrix coordinate real skew-symmetric\n6 6 0\n", r"line 1: symmetry 'skew-symmetric'"),
    ("hello\n", r"line 1: not a Matrix Market file"),
    ("%%MatrixMarket matrix coordinate real general\n%c\n6 6\n", r"line 3: expected the size line"),
    ("%%MatrixMarket matrix coordinate real general\n6 5 0\n", r"line 2: the matrix is 6 × 5, not square"),
    ("%%MatrixMarket matrix coordinate real general\n7 7 0\n", r"line 2: dimension 7 is not a positive multiple of 3"),
])
def test_bad_header_names_line(tmp_path, text, message):
    path = tmp_path / "bad.mtx"
    path.write_text(text)
    with pytest.raises(InputError, match=f"^{path}: {message}"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")
    assert not (tmp_path / "H.zarr").exists()


@pytest.mark.parametrize("body, sym, message", [
    (GOOD.replace("4 4 2.0", "4 4"), "general", r"line 7: expected 'row col value', got '4 4'"),
    (GOOD.replace("4 4 2.0", "4 4 two"), "general", r"line 7: expected 'row col value'"),
    (GOOD.replace("4 4 2.0", "4 4 nan"), "general", r"line 7: entry \(row 4, col 4\) is not finite \(nan\)"),
    (GOOD.replace("5 5 2.0", "5 5 -inf"), "general", r"line 8: entry \(row 5, col 5\) is not finite \(-inf\)"),
    (GOOD.replace("2 2 2.0", "2 9 2.0"), "general", r"line 5: row/col \(2, 9\) is not an index in 1..6"),
    (GOOD.replace("2 2 2.0", "2 3 2.0"), "symmetric", r"line 5: entry \(row 2, col 3\) lies above the diagonal"),
])
def test_bad_entry_names_line(tmp_path, body, sym, message):
    path = _write(tmp_path, body, sym)
    with pytest.raises(InputError, match=f"^{path}: {message}"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")
    assert os.listdir(tmp_path) == ["bad.mtx"]


def test_entry_count_checked(tmp_path):
    path = _write(tmp_path, GOOD, nnz=7)
    with pytest.raises(InputError, match=r"file ends after 6 of the 7 entries the size line \(line 3\)"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")
    path = _write(tmp_path, GOOD, nnz=5)
    with pytest.raises(InputError, match=r"line 9: more entries than the 5"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")


def test_asymmetric_general_names_first_pair_and_values(tmp_path):
    body = GOOD + "\n2 5 0.75\n5 2 0.5\n1 6 0.25\n6 1 0.25\n4 3 -1.0\n3 4 -1.5"
    path = _write(tmp_path, body)
    with pytest.raises(InputError, match=r"not symmetric: entry \(row 2, col 5\) = 0\.75 but \(row 5, col 2\) = 0\.5"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr", shard_atoms=1)
    assert os.listdir(tmp_path) == ["bad.mtx"]


@pytest.mark.parametrize("masses, message", [
    ("3", None), ("-1", r"mass -1.0 is not positive"),
])
def test_mass_number(tmp_path, masses, message):
    path = _write(tmp_path, GOOD)
    if message is None:
        assert np.all(import_matrix_market(path, masses, "reduced", tmp_path / "H.zarr") and
                      open_store(tmp_path / "H.zarr").masses == 3.0)
    else:
        with pytest.raises(InputError, match=message):
            import_matrix_market(path, masses, "reduced", tmp_path / "H.zarr")


def test_mass_file_errors(tmp_path):
    path = _write(tmp_path, GOOD)
    text = tmp_path / "m.txt"
    text.write_text("1.0\n2.0\n3.0\n")
    with pytest.raises(InputError, match=rf"^{text}: 3 masses, but {path} has dimension 6 = 3 × 2 atoms"):
        import_matrix_market(path, str(text), "reduced", tmp_path / "H.zarr")
    text.write_text("1.0\n0.0\n")
    with pytest.raises(InputError, match=rf"^{text}: line 2: mass 0.0 is not positive"):
        import_matrix_market(path, str(text), "reduced", tmp_path / "H.zarr")
    text.write_text("1.0\nheavy\n")
    with pytest.raises(InputError, match=rf"^{text}: line 2: 'heavy' is not a mass"):
        import_matrix_market(path, str(text), "reduced", tmp_path / "H.zarr")
    npy = tmp_path / "m.npy"
    np.save(npy, np.array([1.0, -2.0]))
    with pytest.raises(InputError, match=rf"^{npy}: entry 1: mass -2.0 is not positive"):
        import_matrix_market(path, npy, "reduced", tmp_path / "H.zarr")
    with pytest.raises(InputError, match="unknown unit system"):
        import_matrix_market(path, 1.0, "cgs", tmp_path / "H.zarr")
    assert not (tmp_path / "H.zarr").exists()


def test_line_numbers_survive_chunking(tmp_path):
    rows = [f"{k % 300 + 1} {k % 300 + 1} 1.0" for k in range(900)]
    rows[700] = "5 5 oops"
    path = tmp_path / "big.mtx"
    path.write_text(HEADER.format(sym="general", n=300, nnz=900) + "\n".join(rows) + "\n")
    reader = MatrixMarketReader(path, chunk_bytes=97)
    with pytest.raises(InputError, match=r"line 704: expected 'row col value', got '5 5 oops'"):
        for _ in reader.chunks():
            pass
    rows[700] = "5 5 1.0"
    path.write_text(HEADER.format(sym="general", n=300, nnz=900) + "\n".join(rows))  # no final newline
    reader = MatrixMarketReader(path, chunk_bytes=97)
    total = sum(len(r) for r, _, _ in reader.chunks())
    assert total == 900


def test_existing_output_refused(tmp_path):
    path = _write(tmp_path, GOOD)
    import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")
    with pytest.raises(InputError, match="already exists"):
        import_matrix_market(path, 1.0, "reduced", tmp_path / "H.zarr")

"""The exact FCC modes behind benchmarks/analysis_memory.py: a complete orthonormal eigenbasis (against
dense LAPACK, numpy.linalg.eigh, on eigenfarm's spring Hessian), and a catalogue of them read back by the
streamed scan with the participation ratios of standing plane waves."""

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from eigenfarm.analysis.scan import scan_catalogue
from eigenfarm.catalogue import open_catalogue

SCRIPT = Path(__file__).resolve().parents[2] / "benchmarks" / "analysis_memory.py"


@pytest.fixture(scope="module")
def bench():
    spec = importlib.util.spec_from_file_location("analysis_memory_benchmark", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.parametrize("cells", [2, 3, 4])  # odd and even: L points (q ≡ −q) exist only for even cells
def test_standing_waves_are_the_eigenbasis(bench, cells):
    check = bench.check_modes(cells)
    assert check["passed"], check
    # q ≡ −q at Γ and the three X points, plus the four L points when cells is even
    assert check["self_conjugate_classes"] == (8 if cells % 2 == 0 else 4)


def test_catalogue_of_every_mode(bench, tmp_path):
    # cells = 4: 256 atoms, all 765 non-zero modes in chunks of 64 modes
    cells, n_dof = 4, 768
    path = tmp_path / "fcc.modes.zarr"
    facts = bench.write_crystal_catalogue(path, cells, factor=100, chunk_bytes=64 * 8 * n_dof)
    assert facts["modes"] == n_dof - 3 and facts["chunk_modes"] == 64 and facts["max_residual"] < 1e-13
    waves = bench.standing_waves(cells)
    kept = slice(3, n_dof)
    cat = open_catalogue(path)
    np.testing.assert_allclose(cat.eigenvalues, waves.eigenvalue[kept], rtol=1e-14)
    table = scan_catalogue(path, shells=4, write_back=False)
    # P of a standing wave cos(q·r)ε or sin(q·r)ε: (Σf²)²/(N Σf⁴) = 2/3, or 1/2 where 4q is a reciprocal
    # lattice vector (f² is 0 or 1), and 1 for q ≡ −q (|cos| = 1) (DESIGN.md reference: 2/3 for a standing
    # plane wave; the other two by the same sum)
    angle = 4 * waves.q[kept] @ waves.positions.T
    quarter = np.all(np.isclose(np.cos(angle), 1.0), axis=1)
    expected = np.where(waves.self_conjugate[kept], 1.0, np.where(quarter, 0.5, 2 / 3))
    assert {0.5, 1.0} <= set(expected.tolist())
    np.testing.assert_allclose(table.participation, expected, rtol=1e-12)
    # every mode is either one plane wave of the first shells or orthogonal to all of them, and the
    # 3N − 3 modes together hold each shell's 3 polarisations × multiplicity
    total = table.transverse.sum(1) + table.longitudinal.sum(1)
    assert np.all(np.isclose(total, 0, atol=1e-12) | np.isclose(total, 1, rtol=1e-12))
    np.testing.assert_allclose(table.transverse.sum(0), 2 * table.shells.multiplicity, rtol=1e-12)
    np.testing.assert_allclose(table.longitudinal.sum(0), table.shells.multiplicity, rtol=1e-12)
    with xr.open_zarr(path) as ds:
        assert ds["vector"].dims == ("mode", "dof") and ds["vector"].shape == (n_dof - 3, n_dof)

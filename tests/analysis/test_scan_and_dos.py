"""The streamed scan equals the in-memory computation; DOS normalisation and counts against dense LAPACK."""

import shutil

import numpy as np
import pytest
import xarray as xr
import zarr

from eigenfarm.analysis.dos import cumulative, histogram
from eigenfarm.analysis.localization import inverse_participation, mode_centres
from eigenfarm.analysis.planewaves import Projector, allowed_shells
from eigenfarm.analysis.scan import scan_catalogue
from eigenfarm.catalogue import open_catalogue
from eigenfarm.catalogue.participation import atom_weights, participation_ratio


def test_scan_in_chunks_equals_in_memory(glass_modes):
    path = glass_modes[0][0]
    cat = open_catalogue(path)
    V = cat.read_vectors(0, cat.n_modes)  # everything at once: the in-memory reference
    geo = cat.geometry
    shells = allowed_shells(geo.box.cell, 5)
    T, L = Projector(geo.positions, geo.masses, shells, cache_bytes=0).weights(V)  # phases rebuilt per call
    for chunk in (1, 7, cat.n_modes):
        table = scan_catalogue(path, shells=5, chunk_modes=chunk, wave_share=1.0, write_back=False)
        np.testing.assert_allclose(table.participation, participation_ratio(V), rtol=1e-13)
        np.testing.assert_allclose(table.ipr, inverse_participation(atom_weights(V)), rtol=1e-13)
        np.testing.assert_allclose(table.centre, mode_centres(atom_weights(V), geo), rtol=1e-13, atol=1e-12)
        np.testing.assert_allclose(table.transverse, T, rtol=1e-10, atol=1e-14)
        np.testing.assert_allclose(table.longitudinal, L, rtol=1e-10, atol=1e-14)
        assert sorted(table.profiles) == sorted(np.argsort(participation_ratio(V), kind="stable")[:6].tolist())
    assert np.all(table.transverse.sum(0) <= 2 * shells.multiplicity + 1e-9)


def test_missing_participation_is_computed_and_stored_back(glass_modes, tmp_path):
    copy = tmp_path / "copy.modes.zarr"
    shutil.copytree(glass_modes[1][0], copy)
    shutil.rmtree(copy / "participation")
    with pytest.warns(UserWarning, match="Consolidated metadata"):
        zarr.consolidate_metadata(str(copy))
    assert np.all(np.isnan(open_catalogue(copy).participation))
    table = scan_catalogue(copy, shells=2)
    reopened = open_catalogue(copy)
    np.testing.assert_array_equal(reopened.participation, table.participation)
    assert len(table.profiles) == 6
    with xr.open_zarr(copy) as ds:  # still a plain-xarray dataset, with the geometry on its own dimension
        np.testing.assert_array_equal(ds["participation"].values, table.participation)
        assert ds["position"].dims == ("site", "xyz") and ds["vector"].dims == ("mode", "dof")


def test_dos_of_whole_spectra(glass_modes):
    # Each catalogue holds all 3N − 3 non-zero modes (dense LAPACK, numpy.linalg.eigh): the DOS per
    # dof integrates to (3N − 3)/3N over the common range, and N(f) is the exact mean count.
    tables = [scan_catalogue(p, shells=1, write_back=False) for p, _ in glass_modes]
    n_dof = tables[0].n_dof
    lin = histogram(tables, bins=40)
    inside = np.mean([np.count_nonzero((t.frequency > lin.edges[0]) & (t.frequency <= lin.edges[-1]))
                      for t in tables])
    assert np.sum(lin.density * np.diff(lin.edges)) == pytest.approx(inside / n_dof, rel=1e-12)
    assert lin.counts.sum() == 3 * inside and np.all(np.isfinite(lin.error))
    log = histogram(tables, bins=25, binning="log")
    assert log.edges[0] <= min(t.frequency.min() for t in tables)
    assert np.sum(log.density * np.diff(log.edges)) == pytest.approx(inside / n_dof, rel=1e-12)
    reduced, _ = log.reduced
    np.testing.assert_allclose(reduced, log.density / log.centres**2)
    f, count = cumulative(tables)
    x = np.median(f)
    exact = np.mean([np.count_nonzero(np.sqrt(w[w > 1e-8 * w[-1]]) <= x) / n_dof for _, w in glass_modes])
    assert count[np.searchsorted(f, x, side="right") - 1] == pytest.approx(exact, rel=1e-12)

"""Session fixtures shared by the analysis and report tests: catalogues of exactly known modes."""

import pytest
from exact_modes import exact_catalogue
from lattices import fcc_crystal

from eigenfarm.samples.prepare import Recipe, make_sample
from eigenfarm.samples.scenario import demo_potential


@pytest.fixture(scope="session")
def fcc_modes(tmp_path_factory):
    """FCC spring crystal, 5³ conventional cells (500 atoms), every mode."""
    config, potential = fcc_crystal(5)
    return (*exact_catalogue(tmp_path_factory.mktemp("fcc") / "fcc.modes.zarr", config, potential), config)


@pytest.fixture(scope="session")
def glass_modes(tmp_path_factory):
    """Three 250-atom demo glasses, every mode (paths, eigenvalue arrays)."""
    folder = tmp_path_factory.mktemp("glasses")
    out = []
    for sample in range(3):
        config = make_sample(Recipe(250), seed=5, sample=sample)
        out.append(exact_catalogue(folder / f"g{sample}.modes.zarr", config, demo_potential())[:2])
    return out

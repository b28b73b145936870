"""Shared fixtures for mixsolve's tests.

All data here are invented (Gaussian bands, seeded noise); nothing is measured.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
import xarray as xr
from helpers_cli import Cli
from helpers_core import COMPONENT_BANDS, COMPONENT_MOLAR_MASS, SEED, gaussian_bands

import mixsolve as ms


@pytest.fixture(scope="session")
def cli() -> Cli:
    """The command line in-process: ``cli(*args)`` runs ``mixsolve ARGS`` (``str()`` of each
    argument) and returns click's Result; ``cli.ok(*args)`` also checks it succeeded."""
    return Cli()


@pytest.fixture
def rng() -> np.random.Generator:
    """Seeded random generator, fresh for every test."""
    return np.random.default_rng(SEED)


@pytest.fixture
def wl_grid() -> np.ndarray:
    """Library wavelength grid, 400-700 nm in 5 nm steps."""
    return np.arange(400.0, 701.0, 5.0)


@pytest.fixture
def absorptivity_array(wl_grid: np.ndarray) -> xr.DataArray:
    """Invented molar absorptivities (component, wavelength) in L/(mol*cm)."""
    values = np.vstack([gaussian_bands(wl_grid, b) for b in COMPONENT_BANDS.values()])
    return xr.DataArray(values, dims=("component", "wavelength"),
                        coords={"component": list(COMPONENT_BANDS), "wavelength": wl_grid})


@pytest.fixture
def molar_library(absorptivity_array: xr.DataArray) -> xr.Dataset:
    """Three-component molar library (L/(mol*cm)) with molar masses."""
    return ms.import_absorptivities(absorptivity_array, "L/(mol*cm)",
                                    molar_mass_g_per_mol=COMPONENT_MOLAR_MASS,
                                    source="invented bands")


@pytest.fixture
def molar_library_no_mass(absorptivity_array: xr.DataArray) -> xr.Dataset:
    """Same library without molar masses."""
    return ms.import_absorptivities(absorptivity_array, "L/(mol*cm)")


@pytest.fixture
def mix_spectra(molar_library: xr.Dataset) -> Callable[..., xr.DataArray]:
    """Factory: noiseless Beer-Lambert spectra of given concentrations (mol/L) on the grid."""

    def make(conc: np.ndarray, pathlength_cm: float = 1.0) -> xr.DataArray:
        conc = np.atleast_2d(np.asarray(conc, dtype=float))
        eps = molar_library["absorptivity"].values
        return ms.make_spectra(pathlength_cm * conc @ eps,
                               molar_library["wavelength"].values)

    return make

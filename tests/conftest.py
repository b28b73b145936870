"""Shared fixtures for mixsolve's tests.

All data here are invented (Gaussian bands, seeded noise); nothing is measured.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
import xarray as xr

import mixsolve as ms

SEED = 20240611


def gaussian_bands(wl: np.ndarray, bands: list[tuple[float, float, float]]) -> np.ndarray:
    """Sum of Gaussian bands (height, centre nm, width nm) evaluated at ``wl`` (nm)."""
    wl = np.asarray(wl, dtype=float)
    return sum(h * np.exp(-0.5 * ((wl - c) / w) ** 2) for h, c, w in bands)


#: Invented components: molar absorptivity bands (L/(mol*cm)), centre and width in nm.
COMPONENT_BANDS: dict[str, list[tuple[float, float, float]]] = {
    "yellow": [(12000.0, 440.0, 25.0), (3000.0, 520.0, 30.0)],
    "red": [(15000.0, 510.0, 30.0)],
    "blue": [(9000.0, 610.0, 35.0), (4000.0, 660.0, 20.0)],
}
#: Invented molar masses (g/mol).
COMPONENT_MOLAR_MASS = {"yellow": 350.0, "red": 480.0, "blue": 790.0}


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

"""Fitted and residual spectra computed on demand (mixsolve.solve.model_spectra).

Reference: Beer–Lambert for non-interacting absorbers (ASTM E169, §3; CHECKS.md "seen"):
the fitted spectrum is Σₖ b·εₖ(λ)·cₖ plus the baseline terms, evaluated here directly
from the library and the result's concentrations; the residual is measured − fitted.
Data invented (Gaussian bands, seeded noise).
"""

from __future__ import annotations

import pickle

import numpy as np
import pytest
import xarray as xr

import mixsolve as ms
from mixsolve.solve.model_spectra import model_variable


@pytest.fixture
def run(molar_library: xr.Dataset, rng: np.random.Generator
        ) -> tuple[xr.DataArray, xr.Dataset, xr.Dataset]:
    """Noisy invented spectra with an offset, the library, and their unmix result."""
    wl = np.arange(400.0, 701.0, 5.0)
    eps = molar_library["absorptivity"].transpose("component", "wavelength").values
    conc = rng.uniform(1e-5, 4e-5, (12, 3))
    values = 2.0 * conc @ eps + 0.02 + 0.003 * rng.standard_normal((12, wl.size))
    values[2, 5] = np.nan
    spectra = ms.make_spectra(values, wl, pathlength_cm=2.0)
    return spectra, molar_library, ms.unmix(spectra, molar_library, baseline="offset")


def test_fitted_is_beer_lambert_of_the_result(run) -> None:
    """fitted = b Σ εₖ cₖ + offset (ASTM E169), computed from the result's own numbers."""
    spectra, lib, result = run
    eps = lib["absorptivity"].transpose("component", "wavelength").values
    conc = result["concentration"].transpose("sample", "component").values
    offset = result["baseline"].sel(baseline_term="offset").values
    want = 2.0 * conc @ eps + offset[:, None]
    np.testing.assert_allclose(result["fitted"].values, want, rtol=1e-10)
    measured = spectra.values
    np.testing.assert_allclose(result["residual"].values, measured - want, rtol=1e-8,
                               atol=1e-13)
    assert np.isnan(result["residual"].values[2, 5]) and np.isfinite(
        result["fitted"].values[2, 5])


def test_parts_are_computed_as_read(run) -> None:
    """Selecting one spectrum or a few wavelengths gives those values of the whole (to the
    last bits: a product over fewer rows may round differently)."""
    _, _, result = run
    whole = result["residual"].values
    scale = np.nanmax(np.abs(result["fitted"].values))
    close = {"rtol": 1e-14, "atol": 1e-15 * scale}
    np.testing.assert_allclose(result["residual"].isel(sample=4).values, whole[4], **close)
    np.testing.assert_allclose(
        result["residual"].isel(sample=[1, 7], wavelength=slice(3, 9)).values,
        whole[[1, 7], 3:9], **close)
    np.testing.assert_allclose(result["fitted"].sel(wavelength=500.0).values,
                               result["fitted"].values[:, 20], **close)
    assert result["fitted"].transpose("wavelength", "sample").shape == (61, 12)


def test_loaded_results_keep_their_values(run) -> None:
    """After .load() the spectra are held: later changes of the input do not reach them;
    copies and pickles carry the same values."""
    spectra, _, result = run
    loaded = result.load()
    before = loaded["residual"].values.copy()
    spectra.values[:] = 0.0
    np.testing.assert_array_equal(loaded["residual"].values, before)
    again = pickle.loads(pickle.dumps(result))
    np.testing.assert_array_equal(again["residual"].values, before)
    np.testing.assert_array_equal(result.copy(deep=True)["fitted"].values,
                                  result["fitted"].values)


def test_results_write_and_read_back(run, tmp_path) -> None:
    """netCDF round trip of an eager result: the spectra are computed and written."""
    _, _, result = run
    path = tmp_path / "result.nc"
    result.drop_vars("flags").to_netcdf(path, engine="h5netcdf")
    back = xr.open_dataset(path, engine="h5netcdf").load()
    np.testing.assert_array_equal(back["residual"].values, result["residual"].values)


def test_model_variable_without_other_dims() -> None:
    """One spectrum (dims only wavelength): D·x and a − D·x."""
    design = np.array([[1.0, 0.0], [0.5, 1.0], [0.0, 2.0]])
    coef = np.array([2.0, 1.0])
    values = np.array([2.5, 2.0, 1.0])
    fitted = model_variable(("wavelength",), coef, design)
    residual = model_variable(("wavelength",), coef, design, values)
    np.testing.assert_array_equal(fitted.values, [2.0, 2.0, 2.0])
    np.testing.assert_array_equal(residual.values, [0.5, 0.0, -1.0])

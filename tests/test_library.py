"""Tests for mixsolve.library: build_library, import_absorptivities, resample_library."""

from __future__ import annotations

import json
import re
import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_core import gaussian_bands
from scipy import stats

import mixsolve as ms
from mixsolve.errors import InputError, LinearityWarning, RenamedWarning, UnitError

WL = np.arange(400.0, 701.0, 2.0)
TRUE_EPS = {  # invented molar absorptivities, L/(mol*cm)
    "alpha": gaussian_bands(WL, [(12000.0, 440.0, 25.0), (3000.0, 520.0, 30.0)]),
    "beta": gaussian_bands(WL, [(15000.0, 560.0, 30.0)]),
    "gamma": gaussian_bands(WL, [(8000.0, 640.0, 35.0)]),
}
LEVELS_UMOL = np.array([10.0, 20.0, 40.0, 60.0, 80.0])
REPLICATES = 2
SIGMA = 0.002  # AU, white noise on every reading


def _standards(rng: np.random.Generator, *, levels: np.ndarray = LEVELS_UMOL,
               replicates: int = REPLICATES, offset: np.ndarray | None = None,
               curvature: float = 0.0, sigma: float = SIGMA,
               comps: tuple[str, ...] = tuple(TRUE_EPS),
               ) -> tuple[xr.DataArray, pd.DataFrame]:
    """Invented pure-standard spectra and their sheet (µmol/L, 1 cm)."""
    data, rows = [], []
    for comp in comps:
        for i, level in enumerate(levels):
            for r in range(replicates):
                name = f"{comp}_{i}_{r}"
                c = level * 1e-6
                a = TRUE_EPS[comp] * c * (1.0 - curvature * level / levels.max())
                if offset is not None:
                    a = a + offset
                data.append(a + sigma * rng.standard_normal(WL.size))
                rows.append({"sample": name, "component": comp, "concentration": level,
                             "unit": "umol/L"})
    names = [r["sample"] for r in rows]
    return ms.make_spectra(np.array(data), WL, names), pd.DataFrame(rows)


def _true(lib: xr.Dataset) -> np.ndarray:
    return np.vstack([TRUE_EPS[str(c)] for c in lib["component"].values])


# ----------------------------------------------------------------------------- build_library


def test_build_names_its_inputs_spectra_and_standards(rng: np.random.Generator) -> None:
    """``standards`` is the standards sheet, as in ``build_library_files`` and the CLI's
    ``--standards``; ``standards_name`` names it in messages. The old keywords ``sheet``,
    ``sheet_name`` and ``standards=<spectra>`` still work, each with a RenamedWarning that
    names the new spelling and points at the caller."""
    spectra, sheet = _standards(rng)
    new = ms.build_library(spectra=spectra, standards=sheet)
    with pytest.warns(RenamedWarning) as caught:
        old = ms.build_library(standards=spectra, sheet=sheet)
    assert [str(w.message).split(";")[0] for w in caught] == [
        "standards is now called spectra", "sheet is now called standards"]
    assert {w.filename for w in caught} == {__file__}
    xr.testing.assert_identical(old, new)
    bad = sheet.assign(unit="furlong")
    with pytest.raises(InputError, match=r"^std\.csv, line 2: unit: 'furlong'"):
        ms.build_library(spectra, bad, standards_name="std.csv")
    with pytest.warns(RenamedWarning, match=r"^sheet_name is now called standards_name; "), \
            pytest.raises(InputError, match=r"^std\.csv, line 2: unit: 'furlong'"):
        ms.build_library(spectra, bad, sheet_name="std.csv")
    with pytest.raises(InputError, match=r"^sheet is the old name of standards; give "
                                         r"standards only$"):
        ms.build_library(spectra, sheet, sheet=sheet)


def test_build_recovers_absorptivity_within_uncertainty(rng: np.random.Generator) -> None:
    """Recovered ε lies within 3 u(ε) at nearly all wavelengths (Student t, ν = n − 1)."""
    spectra, sheet = _standards(rng)
    lib = ms.build_library(spectra, sheet)
    assert lib.attrs["unit"] == "L/(mol*cm)"
    assert lib.attrs["concentration_unit"] == "mol/L"
    z = (lib["absorptivity"].values - _true(lib)) / lib["u_absorptivity"].values
    nu = LEVELS_UMOL.size * REPLICATES - 1
    # P(|t_9| > 3) ≈ 1.5 %; allow up to 5 % of the 453 values outside.
    assert np.mean(np.abs(z) <= 3.0) >= 0.95
    # Reported u(ε) uses s from ν dof, so z follows t_ν: SD √(ν/(ν − 2)) ≈ 1.13.
    assert z.std() == pytest.approx(np.sqrt(nu / (nu - 2)), rel=0.12)


def test_build_uncertainty_chi_square(rng: np.random.Generator) -> None:
    """Chi-square checks: with the true σ, Σz² ~ χ²_N (SD of z near 1); and ν·s²/σ² summed
    over all wavelengths ~ χ²_{Nν}, so u(ε) is neither too small nor too large."""
    spectra, sheet = _standards(rng)
    lib = ms.build_library(spectra, sheet)
    sxx = REPLICATES * np.sum((LEVELS_UMOL * 1e-6) ** 2)
    err = lib["absorptivity"].values - _true(lib)
    z_true = err / (SIGMA / np.sqrt(sxx))
    n = z_true.size
    lo, hi = stats.chi2.ppf([0.001, 0.999], n)
    assert lo < np.sum(z_true**2) < hi
    assert z_true.std() == pytest.approx(1.0, abs=0.12)
    nu = LEVELS_UMOL.size * REPLICATES - 1
    q = np.sum(nu * lib["u_absorptivity"].values ** 2 * sxx / SIGMA**2)
    lo, hi = stats.chi2.ppf([0.001, 0.999], n * nu)
    assert lo < q < hi


def test_build_figures_and_provenance(rng: np.random.Generator) -> None:
    """Per-component figures: counts, levels, range (mol/L), peak, R², provenance."""
    spectra, sheet = _standards(rng)
    lib = ms.build_library(spectra, sheet, solvent="water", bandwidth_nm=2.0)
    np.testing.assert_array_equal(lib["n_standards"].values, [10, 10, 10])
    np.testing.assert_array_equal(lib["n_levels"].values, [5, 5, 5])
    np.testing.assert_allclose(lib["concentration_min"].values, 10e-6)
    np.testing.assert_allclose(lib["concentration_max"].values, 80e-6)
    # The peak is the argmax of the noisy ε: within a grid step or two of the band centre.
    np.testing.assert_allclose(lib["peak_wavelength_nm"].values, [440.0, 560.0, 640.0], atol=4)
    assert np.all(lib["r_squared"].values > 0.999)
    assert np.all(lib["residual_sd"].values == pytest.approx(SIGMA, rel=0.5))
    assert lib.attrs["solvent"] == "water"
    assert lib.attrs["bandwidth_nm"] == 2.0
    prov = json.loads(lib.attrs["provenance"])
    assert prov["method"] == "built from standards"
    assert prov["fit"] == "through the origin"
    assert len(prov["standards"]["alpha"]) == 10
    assert "intercept" not in lib


def test_build_pathlength_from_sheet(rng: np.random.Generator) -> None:
    """Pathlengths come from the sheet's pathlength_cm column, else the pathlength_cm argument."""
    spectra, sheet = _standards(rng, sigma=0.0, comps=("alpha",))
    sheet["pathlength_cm"] = 2.0
    lib = ms.build_library(spectra, sheet)
    np.testing.assert_allclose(lib["absorptivity"].sel(component="alpha").values,
                               TRUE_EPS["alpha"] / 2.0, rtol=1e-10, atol=1e-9)
    lib = ms.build_library(spectra, sheet.drop(columns="pathlength_cm"), pathlength_cm=0.5)
    np.testing.assert_allclose(lib["absorptivity"].sel(component="alpha").values,
                               TRUE_EPS["alpha"] * 2.0, rtol=1e-10, atol=1e-9)


def test_build_mass_units(rng: np.random.Generator) -> None:
    """Standards in mg/L give a specific-absorptivity library in L/(g*cm)."""
    spectra, sheet = _standards(rng, sigma=0.0, comps=("beta",))
    sheet["unit"] = "mg/L"  # concentration numbers now mean mg/L
    lib = ms.build_library(spectra, sheet)
    assert lib.attrs["unit"] == "L/(g*cm)"
    # A = ε_molar·c_µmol; read as mg/L, ε_specific = ε_molar·1e-6 / 1e-3 L/(g*cm).
    np.testing.assert_allclose(lib["absorptivity"].sel(component="beta").values,
                               TRUE_EPS["beta"] * 1e-3, rtol=1e-10, atol=1e-12)


def test_intercept_recovers_blank_offset(rng: np.random.Generator) -> None:
    """intercept=True exposes a blank offset a₀(λ) and leaves ε unbiased."""
    offset = 0.02 + 5e-5 * (WL - 400.0)
    spectra, sheet = _standards(rng, offset=offset)
    lib = ms.build_library(spectra, sheet, intercept=True)
    assert json.loads(lib.attrs["provenance"])["fit"] == "slope and intercept"
    icpt, u_icpt = lib["intercept"].values, lib["u_intercept"].values
    z_icpt = (icpt - offset) / u_icpt
    assert np.mean(np.abs(z_icpt) <= 3.0) >= 0.95
    np.testing.assert_allclose(icpt.mean(axis=1), offset.mean(), atol=5 * SIGMA / 10)
    # Straight-line fit (common practice): u(a₀)/u(ε) = √(Sxx/n + x̄²), same s for both.
    x = np.repeat(LEVELS_UMOL * 1e-6, REPLICATES)
    ratio = np.sqrt(np.sum((x - x.mean()) ** 2) / x.size + x.mean() ** 2)
    np.testing.assert_allclose(u_icpt / lib["u_absorptivity"].values, ratio, rtol=1e-10)
    # With the true σ, u(a₀) = σ·√(1/n + x̄²/Sxx): Σz² ~ χ²_N over all wavelengths.
    z_sigma = (icpt - offset) / (SIGMA * ratio / np.sqrt(np.sum((x - x.mean()) ** 2)))
    lo, hi = stats.chi2.ppf([0.001, 0.999], z_sigma.size)
    assert lo < np.sum(z_sigma**2) < hi
    z = (lib["absorptivity"].values - _true(lib)) / lib["u_absorptivity"].values
    assert np.mean(np.abs(z) <= 3.0) >= 0.95
    # Without the intercept the offset leaks into ε: many wavelengths are far off.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LinearityWarning)
        plain = ms.build_library(spectra, sheet)
    z_plain = (plain["absorptivity"].values - _true(plain)) / plain["u_absorptivity"].values
    assert np.mean(np.abs(z_plain) > 3.0) > 0.5


def test_good_series_gives_no_linearity_warning(rng: np.random.Generator) -> None:
    """A linear five-level series passes the default criteria silently."""
    spectra, sheet = _standards(rng)
    with warnings.catch_warnings():
        warnings.simplefilter("error", LinearityWarning)
        ms.build_library(spectra, sheet)


def test_linearity_warning_few_levels(rng: np.random.Generator) -> None:
    """Fewer than 3 concentration levels triggers a LinearityWarning naming the component."""
    spectra, sheet = _standards(rng, levels=np.array([20.0, 60.0]), comps=("gamma",))
    with pytest.warns(LinearityWarning, match=r"'gamma'.*only 2 concentration level"):
        lib = ms.build_library(spectra, sheet)
    assert int(lib["n_levels"].item()) == 2


def test_linearity_warning_curved_series(rng: np.random.Generator) -> None:
    """A saturating (curved) series fails R² or the 5 % deviation limit at the peak."""
    spectra, sheet = _standards(rng, curvature=0.3, comps=("alpha",))
    with pytest.warns(LinearityWarning, match=r"'alpha' at 440 nm: .*(R²|deviates)"):
        lib = ms.build_library(spectra, sheet)
    assert float(lib["worst_relative_deviation"].item()) > 0.05


def test_sheet_with_mixture_refused(rng: np.random.Generator) -> None:
    """A sample listed for two components is a mixture, not a pure standard."""
    spectra, sheet = _standards(rng, comps=("alpha", "beta"))
    extra = sheet.iloc[[0]].assign(component="beta")
    with pytest.raises(InputError, match=r"'alpha_0_0' lists more than one component"):
        ms.build_library(spectra, pd.concat([sheet, extra], ignore_index=True))


def test_sheet_unknown_sample_refused(rng: np.random.Generator) -> None:
    """A sheet row whose sample has no spectrum is refused with its line number."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    sheet.loc[3, "sample"] = "nosuch"
    with pytest.raises(InputError, match=r"line 5: sample 'nosuch' has no spectrum"):
        ms.build_library(spectra, sheet)


def test_sheet_negative_concentration_refused(rng: np.random.Generator) -> None:
    """A negative concentration is refused."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    sheet.loc[0, "concentration"] = -1.0
    with pytest.raises(InputError, match=r"line 2, concentration: -1 is not a number ≥ 0$"):
        ms.build_library(spectra, sheet)


def test_sheet_mixed_amount_and_mass_units_refused(rng: np.random.Generator) -> None:
    """Amount (mol/L) and mass (g/L) concentrations cannot be mixed in one library."""
    spectra, sheet = _standards(rng, comps=("alpha", "beta"))
    sheet.loc[sheet["component"] == "beta", "unit"] = "mg/L"
    with pytest.raises(InputError, match=r"'mg/L' is mass-based but line 2 uses 'umol/L'"):
        ms.build_library(spectra, sheet)


def test_sheet_unknown_unit_refused(rng: np.random.Generator) -> None:
    """A unit pint does not know is refused, naming the line."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    sheet.loc[2, "unit"] = "blorp/L"
    with pytest.raises(UnitError, match=r"line 4.*unknown unit 'blorp/L'"):
        ms.build_library(spectra, sheet)


def test_spectrum_without_sheet_row_refused(rng: np.random.Generator) -> None:
    """Every standards spectrum needs a row in the sheet."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    with pytest.raises(InputError, match=r"'alpha_4_1' have no row"):
        ms.build_library(spectra, sheet.iloc[:-1])


def test_standard_with_missing_reading_refused(rng: np.random.Generator) -> None:
    """A standard must have a full spectrum."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    spectra = spectra.copy()
    spectra[1, 10] = np.nan
    with pytest.raises(InputError, match=r"'alpha_0_1' has no reading at 420 nm"):
        ms.build_library(spectra, sheet)


def test_all_zero_concentrations_refused(rng: np.random.Generator) -> None:
    """A series of blanks only has no slope."""
    spectra, sheet = _standards(rng, comps=("alpha",))
    sheet["concentration"] = 0.0
    with pytest.raises(InputError, match="concentration 0"):
        ms.build_library(spectra, sheet)


# ----------------------------------------------------------------------- import_absorptivities


def _table() -> pd.DataFrame:
    return pd.DataFrame({"p": [1.0, 2.0, 3.0], "q": [4.0, 5.0, 6.0]}, index=[500.0, 400.0, 450.0])


@pytest.mark.parametrize("unit", ["furlong", "blorp", "mol/L", "L/cm", "g/L"])
def test_import_refuses_non_absorptivity_units(unit: str) -> None:
    """Unknown units and units that are not volume/(amount or mass · length) are refused."""
    with pytest.raises(UnitError, match=re.escape(f"'{unit}'")):
        ms.import_absorptivities(_table(), unit)


@pytest.mark.parametrize(("unit", "unit_out", "factor"), [
    ("L/(g*cm)", "L/(g*cm)", 1.0),
    ("mL/(mg*cm)", "L/(g*cm)", 1.0),
    ("L/(mg*cm)", "L/(g*cm)", 1000.0),
    ("L/(mol*cm)", "L/(mol*cm)", 1.0),
    ("L/(mmol*cm)", "L/(mol*cm)", 1000.0),
    ("M^-1 cm^-1", "L/(mol*cm)", 1.0),
    ("L mol^-1 mm^-1", "L/(mol*cm)", 10.0),
    ("cm^2/mol", "L/(mol*cm)", 1e-3),
])
def test_import_converts_units(unit: str, unit_out: str, factor: float) -> None:
    """Values are converted to the canonical unit of their kind (1 mL/(mg·cm) = 1 L/(g·cm))."""
    lib = ms.import_absorptivities(_table(), unit, source="tab.csv")
    assert lib.attrs["unit"] == unit_out
    assert lib["absorptivity"].attrs["units"] == unit_out
    np.testing.assert_allclose(lib["absorptivity"].sel(component="p").values,
                               np.array([2.0, 3.0, 1.0]) * factor, rtol=1e-12)
    np.testing.assert_array_equal(lib["wavelength"].values, [400.0, 450.0, 500.0])
    assert np.all(np.isnan(lib["u_absorptivity"].values))
    assert json.loads(lib.attrs["provenance"])["unit_given"] == unit


def test_import_uncertainty_and_molar_mass() -> None:
    """u_absorptivity is converted with the same factor; molar masses are kept."""
    u = _table() * 0.01
    lib = ms.import_absorptivities(_table(), "L/(mmol*cm)", u_absorptivity=u,
                                   molar_mass_g_per_mol={"q": 250.0})
    np.testing.assert_allclose(lib["u_absorptivity"].sel(component="q").values,
                               [50.0, 60.0, 40.0])
    mm = lib["molar_mass_g_per_mol"]
    assert float(mm.sel(component="q")) == 250.0
    assert np.isnan(float(mm.sel(component="p")))


def test_import_dataarray_input(absorptivity_array: xr.DataArray) -> None:
    """A (component, wavelength) DataArray is accepted in either dimension order."""
    lib_a = ms.import_absorptivities(absorptivity_array, "L/(mol*cm)")
    lib_b = ms.import_absorptivities(absorptivity_array.T, "L/(mol*cm)")
    xr.testing.assert_equal(lib_a["absorptivity"], lib_b["absorptivity"])


def test_import_refuses_bad_tables() -> None:
    """Non-finite values, unknown molar-mass components and bad molar masses are refused."""
    table = _table()
    table.loc[450.0, "q"] = np.nan
    with pytest.raises(InputError, match=r"'q' at 450 nm is missing"):
        ms.import_absorptivities(table, "L/(g*cm)")
    with pytest.raises(InputError, match=r"molar mass given for 'r'"):
        ms.import_absorptivities(_table(), "L/(g*cm)", molar_mass_g_per_mol={"r": 1.0})
    with pytest.raises(InputError, match=r"^molar_mass_g_per_mol of 'p': -3 g/mol is not a "
                                         r"positive number$"):
        ms.import_absorptivities(_table(), "L/(g*cm)", molar_mass_g_per_mol={"p": -3.0})
    dup = pd.DataFrame([[1.0, 2.0]], columns=["p", "p"], index=[400.0])
    with pytest.raises(InputError, match=r"'p' appears twice"):
        ms.import_absorptivities(dup, "L/(g*cm)")


# ---------------------------------------------------------------------------- resample_library


@pytest.fixture
def linear_library() -> xr.Dataset:
    """Library whose ε is linear in λ (so interpolation is exact) on 400-500 nm, 10 nm steps."""
    wl = np.arange(400.0, 501.0, 10.0)
    table = pd.DataFrame({"p": 1000.0 + 2.0 * (wl - 400.0), "q": 500.0 - 3.0 * (wl - 400.0)},
                         index=wl)
    return ms.import_absorptivities(table, "L/(mol*cm)", u_absorptivity=table * 0.01)


def test_resample_interpolates_inside(linear_library: xr.Dataset) -> None:
    """Off-grid targets inside the range are linearly interpolated, on-grid ones kept."""
    target = np.array([400.0, 403.0, 455.5, 500.0])
    out, outside = ms.resample_library(linear_library, target)
    assert outside.size == 0
    np.testing.assert_array_equal(out["wavelength"].values, target)
    np.testing.assert_allclose(out["absorptivity"].sel(component="p").values,
                               1000.0 + 2.0 * (target - 400.0), rtol=1e-12)
    np.testing.assert_allclose(out["u_absorptivity"].sel(component="q").values,
                               0.01 * (500.0 - 3.0 * (target - 400.0)), rtol=1e-12)
    assert out.attrs["unit"] == "L/(mol*cm)"


def test_resample_between_neighbours(molar_library: xr.Dataset) -> None:
    """Interpolation is linear between the two neighbouring grid points."""
    out, _ = ms.resample_library(molar_library, np.array([441.0]))
    lo = molar_library["absorptivity"].sel(wavelength=440.0)
    hi = molar_library["absorptivity"].sel(wavelength=445.0)
    np.testing.assert_allclose(out["absorptivity"].isel(wavelength=0).values,
                               (lo + (hi - lo) * 0.2).values, rtol=1e-12)


def test_resample_reports_outside_and_never_extrapolates(linear_library: xr.Dataset) -> None:
    """Targets outside the library's range are returned as ``outside`` and dropped."""
    target = np.array([380.0, 399.9, 420.0, 480.0, 500.1, 600.0])
    out, outside = ms.resample_library(linear_library, target)
    np.testing.assert_array_equal(outside, [380.0, 399.9, 500.1, 600.0])
    np.testing.assert_array_equal(out["wavelength"].values, [420.0, 480.0])
    assert np.all(np.isfinite(out["absorptivity"].values))
    assert out["absorptivity"].sel(component="q").values.tolist() == pytest.approx(
        [440.0, 260.0])


def test_resample_all_outside(linear_library: xr.Dataset) -> None:
    """No target inside: an empty library on no wavelength, all targets outside."""
    out, outside = ms.resample_library(linear_library, np.array([300.0, 350.0]))
    assert out.sizes["wavelength"] == 0
    np.testing.assert_array_equal(outside, [300.0, 350.0])


def test_resample_descending_library(linear_library: xr.Dataset) -> None:
    """A library Dataset stored with descending wavelengths is resampled correctly."""
    reversed_lib = linear_library.isel(wavelength=slice(None, None, -1))
    target = np.array([405.0, 450.0, 520.0])
    out, outside = ms.resample_library(reversed_lib, target)
    np.testing.assert_array_equal(outside, [520.0])
    np.testing.assert_allclose(out["absorptivity"].sel(component="p").values,
                               [1010.0, 1100.0], rtol=1e-12)


def test_resample_refuses_non_library() -> None:
    """Anything but a library Dataset is refused."""
    with pytest.raises(InputError, match="not a mixsolve library"):
        ms.resample_library(xr.Dataset(), np.array([400.0]))

"""Unit tests for mixsolve.solve: the public ``unmix`` and its design/solver helpers."""

from __future__ import annotations

import json
import re
import warnings
from collections.abc import Callable

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_core import COMPONENT_MOLAR_MASS

import mixsolve as ms
from mixsolve.errors import ExtrapolationWarning, InputError, SolveError, UnitError
from mixsolve.solve.cls import DEPENDENT, MISSING, NO_DOF, TOO_FEW

CONC = np.array([[2.0e-5, 1.0e-5, 3.0e-5],
                 [0.5e-5, 4.0e-5, 1.0e-5]])  # mol/L; components yellow, red, blue
COMPS = ["yellow", "red", "blue"]
MixFactory = Callable[..., xr.DataArray]


#: Flag codes the solver itself sets; other diagnostics may add further codes (docs/flags.md).
SOLVER_CODES = ("no_dof", "missing_readings", "too_few_readings", "rank_deficient",
                "at_zero", "negative")
SOLVER_BITS = NO_DOF | MISSING | TOO_FEW | DEPENDENT


def _solver_flags(result: xr.Dataset) -> list[set[str]]:
    """Per spectrum, the set of solver flag codes (diagnostic codes left out)."""
    return [{c for c in str(f).split(";") if c.partition(":")[0] in SOLVER_CODES}
            for f in result["flags"].values.ravel()]


def _conc(result: xr.Dataset) -> np.ndarray:
    return result["concentration"].transpose("sample", "component").sel(component=COMPS).values


def _small_library(values: dict[str, list[float]], wl: list[float]) -> xr.Dataset:
    return ms.import_absorptivities(pd.DataFrame(values, index=wl), "L/(mol*cm)")


# ------------------------------------------------------------------------------------ basics


@pytest.mark.parametrize("method", ["ols", "nnls"])
def test_noiseless_mixture_recovered(molar_library: xr.Dataset, mix_spectra: MixFactory,
                                     method: str) -> None:
    """Exact Beer–Lambert spectra give back their concentrations, with clean flags."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method=method)
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)
    assert result.attrs["method"] == method
    assert result.attrs["unit"] == "mol/L"
    assert result["concentration"].attrs["units"] == "mol/L"
    assert _solver_flags(result) == [set(), set()]
    np.testing.assert_array_equal(result["status"].values & SOLVER_BITS, 0)
    np.testing.assert_array_equal(result["dof"].values, 61 - 3)
    assert float(np.abs(result["residual"]).max()) < 1e-12
    assert result["fitted"].dims == ("sample", "wavelength")


def test_default_method_is_nnls(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """DESIGN.md: the default method is nnls, the default baseline none."""
    result = ms.unmix(mix_spectra(CONC), molar_library)
    assert result.attrs["method"] == "nnls"
    assert result.attrs["baseline"] == "none"
    assert result.sizes["baseline_term"] == 0


def test_noisy_uncertainty_is_reasonable(molar_library: xr.Dataset, mix_spectra: MixFactory,
                                         rng: np.random.Generator) -> None:
    """With noise, the errors are of the size the reported uncertainties say."""
    conc = np.tile(CONC[0], (200, 1))
    clean = mix_spectra(conc)
    noisy = clean + 0.003 * rng.standard_normal(clean.shape)
    result = ms.unmix(noisy, molar_library, method="ols")
    z = (_conc(result) - conc) / result["std_uncertainty"].sel(component=COMPS).values
    assert np.all(result["std_uncertainty"].values > 0)
    assert z.std() == pytest.approx(1.0, abs=0.1)
    assert float(result["rms_residual"].mean()) == pytest.approx(0.003, rel=0.1)


def test_extra_dimensions(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """Spectra with dims (row, col, wavelength), as from a plate, keep their dims."""
    flat = mix_spectra(np.vstack([CONC, CONC[::-1]]))
    plate = xr.DataArray(flat.values.reshape(2, 2, -1), dims=("row", "col", "wavelength"),
                         coords={"row": ["A", "B"], "col": [1, 2],
                                 "wavelength": flat["wavelength"].values})
    result = ms.unmix(plate, molar_library, method="ols")
    assert result["concentration"].dims == ("row", "col", "component")
    np.testing.assert_allclose(
        result["concentration"].sel(row="B", col=1, component=COMPS).values, CONC[1],
        rtol=1e-9)
    assert result["flags"].dims == ("row", "col")


# ------------------------------------------------------------------------------------- flags


def test_flag_no_dof(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """As many wavelengths as unknowns: exact fit, dof 0, uncertainty NaN, flag no_dof."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols",
                      wavelengths=[440.0, 510.0, 610.0])
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)
    assert _solver_flags(result) == [{"no_dof"}, {"no_dof"}]
    np.testing.assert_array_equal(result["dof"].values, 0)
    assert np.all(result["status"].values & NO_DOF)
    assert np.all(np.isnan(result["std_uncertainty"].values))


def test_flag_at_zero_nnls(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """NNLS holds a component that would come out negative at exactly 0 and says so."""
    conc = np.array([[2e-5, 1e-5, -0.5e-5], [2e-5, 1e-5, 1e-5]])
    result = ms.unmix(mix_spectra(conc), molar_library, method="nnls")
    assert _solver_flags(result) == [{"at_zero:blue"}, set()]
    assert float(result["concentration"].sel(sample="sample_1", component="blue")) == 0.0
    at_zero = result["at_zero"].sel(component=COMPS).values
    np.testing.assert_array_equal(at_zero, [[False, False, True], [False, False, False]])


def test_flag_negative_ols(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """OLS returns the negative value and flags it; at_zero stays false."""
    conc = np.array([[2e-5, -1e-5, 1e-5]])
    result = ms.unmix(mix_spectra(conc), molar_library, method="ols")
    assert _solver_flags(result) == [{"negative:red"}]
    np.testing.assert_allclose(_conc(result), conc, rtol=1e-9)
    assert not result["at_zero"].values.any()


def test_flag_missing_readings(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """A NaN reading: fitted on the rest, flagged missing_readings, one dof fewer."""
    spectra = mix_spectra(CONC).copy()
    spectra[0, 7] = np.nan
    result = ms.unmix(spectra, molar_library, method="ols")
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)
    assert _solver_flags(result) == [{"missing_readings"}, set()]
    np.testing.assert_array_equal(result["dof"].values, [57, 58])
    assert result["status"].values[0] & MISSING
    assert np.isnan(result["residual"].values[0, 7])
    assert np.isfinite(result["fitted"].values[0, 7])


def test_flag_too_few_readings(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """Fewer readings left than unknowns: NaN results, flagged too_few_readings."""
    spectra = mix_spectra(CONC).copy()
    spectra[1, spectra["wavelength"].values == 510.0] = np.nan
    result = ms.unmix(spectra, molar_library, method="nnls", wavelengths=[440.0, 510.0, 610.0])
    assert _solver_flags(result) == [{"no_dof"}, {"missing_readings", "too_few_readings"}]
    assert np.all(np.isnan(_conc(result)[1]))
    assert result["status"].values[1] & TOO_FEW
    np.testing.assert_allclose(_conc(result)[0], CONC[0], rtol=1e-9)


def test_flag_rank_deficient_after_missing() -> None:
    """The readings left make the design rank deficient: NaN results, rank_deficient."""
    lib = _small_library({"p": [1.0, 1.0, 1.0, 2.0], "q": [2.0, 2.0, 2.0, 1.0]},
                         [400.0, 410.0, 420.0, 430.0])
    spectra = ms.make_spectra([[3.0, 3.0, 3.0, 3.0], [3.0, 3.0, 3.0, np.nan]],
                              [400.0, 410.0, 420.0, 430.0])
    result = ms.unmix(spectra, lib, method="ols")
    np.testing.assert_allclose(result["concentration"].values[0], [1.0, 1.0], rtol=1e-9)
    assert _solver_flags(result) == [set(), {"missing_readings", "rank_deficient"}]
    assert result["status"].values[1] & DEPENDENT
    assert np.all(np.isnan(result["concentration"].values[1]))


# ------------------------------------------------------------------------------- SolveError


def test_underdetermined_refused(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """Fewer wavelengths than unknowns is a SolveError naming the counts and the terms."""
    with pytest.raises(SolveError, match=r"underdetermined: 2 wavelength\(s\) for 3 unknowns "
                                         r"\(yellow, red, blue\)"):
        ms.unmix(mix_spectra(CONC), molar_library, wavelengths=[440.0, 510.0])
    with pytest.raises(SolveError, match=r"3 wavelength\(s\) for 5 unknowns .*offset, slope"):
        ms.unmix(mix_spectra(CONC), molar_library, wavelengths=[440.0, 510.0, 610.0],
                 baseline="linear")


@pytest.mark.parametrize("method", ["ols", "nnls"])
def test_collinear_components_refused(method: str) -> None:
    """Proportional spectra cannot be told apart: SolveError naming both components."""
    wl = [400.0, 420.0, 440.0, 460.0, 480.0]
    p = [1.0, 5.0, 9.0, 4.0, 2.0]
    lib = _small_library({"p": p, "q": [2.5 * v for v in p], "r": [3, 1, 0.5, 2, 6]}, wl)
    spectra = ms.make_spectra([[1.0, 2.0, 3.0, 2.0, 1.0]], wl)
    with pytest.raises(SolveError, match=r"rank deficient: 'p' and 'q' are linearly dependent"):
        ms.unmix(spectra, lib, method=method)


def test_offset_collinear_with_flat_component() -> None:
    """A flat spectrum and the offset baseline are linearly dependent."""
    wl = [400.0, 420.0, 440.0, 460.0]
    lib = _small_library({"flat": [3.0, 3.0, 3.0, 3.0], "peak": [1.0, 4.0, 2.0, 0.5]}, wl)
    spectra = ms.make_spectra([[1.0, 2.0, 3.0, 2.0]], wl)
    with pytest.raises(SolveError, match=r"'flat' and 'offset' are linearly dependent"):
        ms.unmix(spectra, lib, baseline="offset")


def test_zero_absorptivity_in_selection_refused() -> None:
    """A component that absorbs nowhere in the selection is refused by name."""
    wl = [400.0, 420.0, 440.0, 460.0]
    lib = _small_library({"p": [1.0, 2.0, 0.0, 0.0], "q": [1.0, 1.0, 2.0, 3.0]}, wl)
    spectra = ms.make_spectra([[1.0, 2.0, 3.0, 2.0]], wl)
    with pytest.raises(SolveError, match=r"'p' has zero absorptivity"):
        ms.unmix(spectra, lib, window=(440.0, 460.0))


def test_solve_error_is_input_error() -> None:
    """SolveError derives from InputError (exit code 2 on the command line)."""
    assert issubclass(SolveError, InputError)
    assert issubclass(InputError, ValueError)


# ----------------------------------------------------------------------- wavelength selection


def test_window_includes_both_ends(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """A window low-high uses the measured wavelengths from low to high, both included."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols", window=(440.0, 610.0))
    used = json.loads(result.attrs["wavelengths_nm"])
    assert used[0] == 440.0
    assert used[-1] == 610.0
    assert len(used) == 35
    np.testing.assert_array_equal(result["fitted"]["wavelength"].values, used)
    assert result.attrs["window_nm"] == "440-610"
    np.testing.assert_array_equal(result["dof"].values, 35 - 3)


def test_window_between_grid_points(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """Window ends between measured wavelengths use only those inside."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols", window=(437.5, 452.5))
    assert json.loads(result.attrs["wavelengths_nm"]) == [440.0, 445.0, 450.0]


def test_discrete_wavelengths_any_order(molar_library: xr.Dataset,
                                        mix_spectra: MixFactory) -> None:
    """A list of wavelengths is used as a set (sorted); within 0.01 nm of a measured one."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols",
                      wavelengths=[610.0, 440.005, 510.0, 560.0])
    assert json.loads(result.attrs["wavelengths_nm"]) == [440.0, 510.0, 560.0, 610.0]
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)


def test_wavelength_not_measured(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """A requested wavelength that was not measured is an InputError naming the nearest."""
    with pytest.raises(InputError, match=r"441 nm was not measured \(nearest measured: 435, "
                                         r"440, 445 nm\)"):
        ms.unmix(mix_spectra(CONC), molar_library, wavelengths=[441.0, 510.0, 610.0])
    with pytest.raises(InputError, match="listed twice"):
        ms.unmix(mix_spectra(CONC), molar_library, wavelengths=[440.0, 440.0, 610.0])


def test_window_and_wavelengths_exclusive(molar_library: xr.Dataset,
                                          mix_spectra: MixFactory) -> None:
    """Giving both selectors is refused; so is an empty or reversed window."""
    spectra = mix_spectra(CONC)
    with pytest.raises(InputError, match="not both"):
        ms.unmix(spectra, molar_library, window=(400, 500), wavelengths=[440.0, 450.0, 460.0])
    with pytest.raises(InputError, match="holds no measured wavelength"):
        ms.unmix(spectra, molar_library, window=(441.0, 444.0))
    with pytest.raises(InputError, match="not an increasing pair"):
        ms.unmix(spectra, molar_library, window=(500.0, 400.0))


def _wide_spectra(molar_library: xr.Dataset) -> xr.DataArray:
    """Spectra measured 380-720 nm, beyond the 400-700 nm library."""
    wl = np.arange(380.0, 721.0, 5.0)
    inside = molar_library.interp(wavelength=wl)["absorptivity"].fillna(0.0).values
    return ms.make_spectra(CONC @ inside, wl)


def test_selection_outside_library_refused(molar_library: xr.Dataset) -> None:
    """A window or wavelength list reaching outside the library is an InputError."""
    spectra = _wide_spectra(molar_library)
    with pytest.raises(InputError, match=r"380, 385, 390, 395 nm lie outside the library "
                                         r"\(400-700 nm\)"):
        ms.unmix(spectra, molar_library, window=(380.0, 500.0))
    with pytest.raises(InputError, match=r"710 nm lie outside the library"):
        ms.unmix(spectra, molar_library, wavelengths=[440.0, 510.0, 610.0, 710.0])


def test_unselected_outside_wavelengths_left_out(molar_library: xr.Dataset) -> None:
    """Without a selection, wavelengths outside the library are left out with a warning."""
    spectra = _wide_spectra(molar_library)
    with pytest.warns(ExtrapolationWarning, match=r"8 measured wavelength\(s\) outside"):
        result = ms.unmix(spectra, molar_library, method="ols")
    left_out = json.loads(result.attrs["left_out_wavelengths_nm"])
    assert left_out == [380.0, 385.0, 390.0, 395.0, 705.0, 710.0, 715.0, 720.0]
    assert result.sizes["wavelength"] == 61
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)


def test_off_grid_measurements_interpolated(molar_library: xr.Dataset) -> None:
    """Measured wavelengths between library points use the interpolated library."""
    wl = np.arange(402.5, 700.0, 5.0)
    eps = molar_library["absorptivity"].interp(wavelength=wl).sel(component=COMPS).values
    result = ms.unmix(ms.make_spectra(CONC @ eps, wl), molar_library, method="ols")
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)


def test_independent_of_wavelength_order(molar_library: xr.Dataset, mix_spectra: MixFactory,
                                         rng: np.random.Generator) -> None:
    """Reversed or shuffled wavelength order in the input gives the same results."""
    spectra = mix_spectra(CONC)
    spectra = spectra + 0.002 * rng.standard_normal(spectra.shape)
    ref = ms.unmix(spectra, molar_library, method="nnls", baseline="linear")
    for order in (np.arange(spectra.sizes["wavelength"])[::-1],
                  rng.permutation(spectra.sizes["wavelength"])):
        raw = xr.DataArray(spectra.values[:, order], dims=("sample", "wavelength"),
                           coords={"sample": spectra["sample"].values,
                                   "wavelength": spectra["wavelength"].values[order]})
        got = ms.unmix(raw, molar_library, method="nnls", baseline="linear")
        np.testing.assert_allclose(got["concentration"].values, ref["concentration"].values,
                                   rtol=1e-10)
        np.testing.assert_allclose(got["std_uncertainty"].values,
                                   ref["std_uncertainty"].values, rtol=1e-10)
        np.testing.assert_allclose(got["baseline"].values, ref["baseline"].values,
                                   rtol=1e-8, atol=1e-14)


def test_independent_of_library_wavelength_order(molar_library: xr.Dataset,
                                                 mix_spectra: MixFactory) -> None:
    """A library Dataset with descending wavelengths gives the same results."""
    spectra = mix_spectra(CONC)
    reversed_lib = molar_library.isel(wavelength=slice(None, None, -1))
    result = ms.unmix(spectra, reversed_lib, method="ols", window=(450.0, 650.0))
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-9)


# --------------------------------------------------------------------------------- pathlength


@pytest.mark.parametrize("b", [0.1, 0.5, 2.0, 5.0])
def test_pathlength_scalar(molar_library: xr.Dataset, mix_spectra: MixFactory, b: float) -> None:
    """c ∝ 1/b: the same spectra read at pathlength b give concentrations / b."""
    spectra = mix_spectra(CONC)
    result = ms.unmix(spectra, molar_library, method="ols", pathlength_cm=b)
    np.testing.assert_allclose(_conc(result), CONC / b, rtol=1e-9)
    assert float(result["pathlength_cm"]) == b
    # Spectra simulated at b and read at b give the true concentrations.
    back = ms.unmix(mix_spectra(CONC, pathlength_cm=b), molar_library, method="ols",
                    pathlength_cm=b)
    np.testing.assert_allclose(_conc(back), CONC, rtol=1e-9)


def test_pathlength_per_sample(molar_library: xr.Dataset, mix_spectra: MixFactory,
                               rng: np.random.Generator) -> None:
    """A per-sample DataArray of pathlengths scales each sample by its own 1/b."""
    spectra = mix_spectra(CONC) + 0.001 * rng.standard_normal((2, 61))
    ref = ms.unmix(spectra, molar_library, method="ols")
    b = xr.DataArray([0.5, 2.0], dims="sample", coords={"sample": spectra["sample"].values})
    result = ms.unmix(spectra, molar_library, method="ols", pathlength_cm=b)
    np.testing.assert_allclose(_conc(result), _conc(ref) / b.values[:, None], rtol=1e-9)
    np.testing.assert_allclose(
        result["std_uncertainty"].transpose("sample", "component").values,
        ref["std_uncertainty"].transpose("sample", "component").values / b.values[:, None],
        rtol=1e-9)


def test_pathlength_per_sample_by_label(molar_library: xr.Dataset,
                                        mix_spectra: MixFactory) -> None:
    """Per-sample pathlengths are matched by sample label, not by position."""
    spectra = mix_spectra(CONC)
    b = xr.DataArray([2.0, 0.5], dims="sample", coords={"sample": ["sample_2", "sample_1"]})
    result = ms.unmix(spectra, molar_library, method="ols", pathlength_cm=b)
    np.testing.assert_allclose(_conc(result), CONC / np.array([[0.5], [2.0]]), rtol=1e-9)


@pytest.mark.parametrize(("value", "message"), [
    ("long", r"pathlength_cm: 'long' is not a number"),
    (0.0, r"pathlength_cm: 0 cm is not a positive number"),
    (float("inf"), r"pathlength_cm: inf cm is not a finite number"),
    (xr.DataArray([1.0, -2.0], dims="sample"), r"pathlength_cm: -2 cm is not a positive number"),
    (xr.DataArray([np.nan, 1.0], dims="sample"), r"pathlength_cm: nan cm is not a finite number"),
])
def test_pathlength_that_is_not_a_positive_number(molar_library: xr.Dataset,
                                                  mix_spectra: MixFactory, value: object,
                                                  message: str) -> None:
    """One value or one per spectrum, the same one-line refusal naming the value."""
    with pytest.raises(InputError, match=rf"^{message}$"):
        ms.unmix(mix_spectra(CONC), molar_library, pathlength_cm=value)


def test_pathlength_per_sample_must_cover_spectra(molar_library: xr.Dataset,
                                                  mix_spectra: MixFactory) -> None:
    """A pathlength array lacking a sample, or on a foreign dimension, is refused (not
    silently aligned away)."""
    spectra = mix_spectra(CONC)
    partial = xr.DataArray([1.0], dims="sample", coords={"sample": ["sample_1"]})
    with pytest.raises(InputError, match=r"^pathlength_cm: no value for sample 'sample_2'"):
        ms.unmix(spectra, molar_library, pathlength_cm=partial)
    with pytest.raises(InputError, match=r"^pathlength_cm: dimension 'well'"):
        ms.unmix(spectra, molar_library, pathlength_cm=xr.DataArray([1.0, 2.0], dims="well"))
    with pytest.raises(InputError, match=r"^pathlength_cm: 3 value\(s\) along 'sample' for 2 "
                                         r"spectra"):
        ms.unmix(spectra, molar_library, pathlength_cm=xr.DataArray([1.0, 2.0, 3.0],
                                                                     dims="sample"))


def test_pathlength_from_spectra_attrs(molar_library: xr.Dataset,
                                       mix_spectra: MixFactory) -> None:
    """Without pathlength_cm, the spectra's pathlength_cm attribute is used."""
    spectra = mix_spectra(CONC)
    spectra.attrs["pathlength_cm"] = 0.25
    result = ms.unmix(spectra, molar_library, method="ols")
    np.testing.assert_allclose(_conc(result), CONC * 4, rtol=1e-9)


@pytest.mark.parametrize("b", [0.0, -1.0, np.nan, np.inf])
def test_bad_pathlength_refused(molar_library: xr.Dataset, mix_spectra: MixFactory,
                                b: float) -> None:
    """A pathlength that is not a positive finite number is refused."""
    with pytest.raises(InputError, match="pathlength"):
        ms.unmix(mix_spectra(CONC), molar_library, pathlength_cm=b)


# --------------------------------------------------------------------------------------- units


def test_unit_same_basis(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """mol/L → µmol/L (and the µ spelling) multiplies by 1e6, uncertainties too."""
    ref = ms.unmix(mix_spectra(CONC), molar_library, method="ols")
    for unit in ("umol/L", "µmol/L", "uM"):
        result = ms.unmix(mix_spectra(CONC), molar_library, method="ols", unit=unit)
        np.testing.assert_allclose(_conc(result), CONC * 1e6, rtol=1e-9)
        assert result.attrs["unit"] == unit
        assert result["std_uncertainty"].attrs["units"] == unit
        np.testing.assert_allclose(result["std_uncertainty"].values,
                                   ref["std_uncertainty"].values * 1e6, rtol=1e-9)


def test_unit_amount_to_mass(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """mol/L → mg/L uses each component's molar mass (g/mol)."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols", unit="mg/L")
    mm = np.array([COMPONENT_MOLAR_MASS[c] for c in COMPS])
    np.testing.assert_allclose(_conc(result), CONC * mm * 1e3, rtol=1e-9)


def test_unit_mass_to_amount() -> None:
    """A mass library (L/(g*cm)) gives g/L; µmol/L divides by the molar mass."""
    wl = [400.0, 450.0, 500.0, 550.0]
    table = pd.DataFrame({"p": [10.0, 30.0, 5.0, 1.0], "q": [2.0, 4.0, 20.0, 8.0]}, index=wl)
    lib = ms.import_absorptivities(table, "L/(g*cm)", molar_mass_g_per_mol={"p": 200.0,
                                                                            "q": 500.0})
    conc_g = np.array([0.01, 0.02])
    spectra = ms.make_spectra([conc_g @ table.to_numpy().T], wl)
    assert ms.unmix(spectra, lib, method="ols").attrs["unit"] == "g/L"
    result = ms.unmix(spectra, lib, method="ols", unit="umol/L")
    np.testing.assert_allclose(result["concentration"].sel(component=["p", "q"]).values[0],
                               conc_g / np.array([200.0, 500.0]) * 1e6, rtol=1e-9)


def test_unit_conversion_needs_molar_mass(molar_library_no_mass: xr.Dataset,
                                          mix_spectra: MixFactory) -> None:
    """Amount ↔ mass without molar masses is refused; same-basis conversion still works."""
    spectra = mix_spectra(CONC)
    with pytest.raises(UnitError, match=r"converting mol/L to mg/L needs the molar mass"):
        ms.unmix(spectra, molar_library_no_mass, unit="mg/L")
    result = ms.unmix(spectra, molar_library_no_mass, method="ols", unit="mmol/L")
    np.testing.assert_allclose(_conc(result), CONC * 1e3, rtol=1e-9)


@pytest.mark.parametrize("unit", ["furlong", "L/(mol*cm)", "blorp"])
def test_unit_not_a_concentration(molar_library: xr.Dataset, mix_spectra: MixFactory,
                                  unit: str) -> None:
    """A result unit that is not a concentration is refused."""
    with pytest.raises(UnitError, match=re.escape(f"'{unit}'")):
        ms.unmix(mix_spectra(CONC), molar_library, unit=unit)


# ------------------------------------------------------------------------------ bad arguments


def test_bad_options_refused(molar_library: xr.Dataset, mix_spectra: MixFactory) -> None:
    """Unknown method or baseline, non-array spectra and non-library libraries are refused."""
    spectra = mix_spectra(CONC)
    with pytest.raises(InputError, match=r"method: 'pls' is not one of"):
        ms.unmix(spectra, molar_library, method="pls")  # type: ignore[arg-type]
    with pytest.raises(InputError, match=r"baseline: 'quadratic' is not one of"):
        ms.unmix(spectra, molar_library, baseline="quadratic")  # type: ignore[arg-type]
    with pytest.raises(InputError, match=r"expected an xarray\.DataArray"):
        ms.unmix(spectra.values, molar_library)  # type: ignore[arg-type]
    with pytest.raises(InputError, match="not a mixsolve library"):
        ms.unmix(spectra, spectra.to_dataset(name="x"))


def test_ols_with_baseline_recovers_offset(molar_library: xr.Dataset,
                                           mix_spectra: MixFactory) -> None:
    """A constant offset and a linear slope are fitted and reported in AU and AU/nm."""
    spectra = mix_spectra(CONC)
    wl = spectra["wavelength"].values
    shifted = spectra + 0.04 + 1e-4 * (wl - wl.mean())
    result = ms.unmix(shifted, molar_library, method="nnls", baseline="linear")
    np.testing.assert_allclose(_conc(result), CONC, rtol=1e-8)
    np.testing.assert_allclose(result["baseline"].sel(baseline_term="offset").values, 0.04,
                               rtol=1e-8)
    np.testing.assert_allclose(result["baseline"].sel(baseline_term="slope").values, 1e-4,
                               rtol=1e-7)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        plain = ms.unmix(shifted, molar_library, method="ols")
    assert not np.allclose(_conc(plain), CONC, rtol=1e-3)


def test_ill_conditioned_design_warns_and_says_it_once():
    """Scaled condition number between 10³ and 10⁶: a warning and the run note
    ``ill_conditioned_design`` (once, with the condition number), no per-sample flag.

    Two components whose spectra differ by 0.1 % of a second band are nearly collinear;
    the condition number (numpy.linalg.cond on unit columns) lies in that range.
    """
    from mixsolve.errors import IllConditionedWarning

    wl = np.arange(400.0, 701.0, 5.0)
    a = np.exp(-0.5 * ((wl - 500) / 40) ** 2)
    b = a + 1e-3 * np.exp(-0.5 * ((wl - 620) / 30) ** 2)
    cond = np.linalg.cond(np.stack([a / np.linalg.norm(a), b / np.linalg.norm(b)], axis=1))
    assert 1e3 < cond < 1e6
    table = xr.DataArray(np.stack([a, b]) * 1e4, dims=("component", "wavelength"),
                         coords={"component": ["a", "b"], "wavelength": wl})
    lib = ms.import_absorptivities(table, "L/(mol*cm)")
    spectra = ms.make_spectra(np.atleast_2d((a + b) * 0.5), wl)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = ms.unmix(spectra, lib, method="ols")
    assert any(issubclass(w.category, IllConditionedWarning) for w in caught)
    assert result.attrs["condition_number"] == pytest.approx(cond, rel=1e-6)
    assert "ill_conditioned" not in str(result["flags"].values[0])
    from mixsolve.flags import run_notes_of

    notes = [n for n in run_notes_of(result.attrs) if n.code == "ill_conditioned_design"]
    assert len(notes) == 1
    assert f"scaled condition number {cond:.3g}" in notes[0].text
    assert "mixsolve wavelengths" in notes[0].fix


def test_numerically_singular_design_is_refused():
    """Proportional spectra rounded to 6 digits (condition number > 10⁶) are refused."""
    wl = np.arange(400.0, 701.0, 10.0)
    a = np.round(np.exp(-0.5 * ((wl - 500) / 40) ** 2), 6)
    table = xr.DataArray(np.stack([a, np.round(2.5 * a, 6)]), dims=("component", "wavelength"),
                         coords={"component": ["a", "b"], "wavelength": wl})
    lib = ms.import_absorptivities(table, "L/(mol*cm)")
    with pytest.raises(SolveError, match="rank deficient: 'a' and 'b'"):
        ms.unmix(ms.make_spectra(np.atleast_2d(a), wl), lib)


def test_result_variables_do_not_inherit_the_input_labels():
    """A concentration is not an 'absorbance' from the input file: attrs describe the variable."""
    wl = np.arange(400.0, 701.0, 10.0)
    a = np.exp(-0.5 * ((wl - 480) / 40) ** 2)
    b = np.exp(-0.5 * ((wl - 620) / 30) ** 2)
    table = xr.DataArray(np.stack([a, b]) * 1e4, dims=("component", "wavelength"),
                         coords={"component": ["a", "b"], "wavelength": wl})
    lib = ms.import_absorptivities(table, "L/(mol*cm)")
    spectra = ms.make_spectra(np.atleast_2d(a + b), wl, source="samples.csv")
    result = ms.unmix(spectra, lib)
    assert result["concentration"].attrs == {"units": "mol/L"}
    assert "quantity" not in result["residual"].attrs
    assert result.attrs["source"] == "samples.csv"

"""The uncertainty budget (mixsolve.uncertainty.budget, mixsolve.uncertainty.measurement_model,
mixsolve.uncertainty.montecarlo, mixsolve.uncertainty.sensitivity) and ``unmix --budget``.

All data are invented: Gaussian bands (tests/conftest.py), seeded noise.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from helpers_io import MIXTURES, WL, leftovers, mixture_absorbance, write_library_file, write_wide

import mixsolve as ms
from mixsolve.uncertainty.budget import SOURCES
from mixsolve.uncertainty.inputs import BudgetInputs
from mixsolve.uncertainty.volumetric import Dilution, parse_dilution

CONC = np.array([[4.0e-5, 2.0e-5, 3.0e-5], [1.0e-5, 5.0e-5, 2.0e-5]])  # mol/L, invented


def one_band_library(u_rel: float | None = None) -> xr.Dataset:
    """A single invented component, ε = 1e4·exp(−½((λ−500)/40)²) L/(mol*cm), 400–600 nm."""
    wl = np.arange(400.0, 601.0, 5.0)
    eps = 1.0e4 * np.exp(-0.5 * ((wl - 500.0) / 40.0) ** 2)
    frame = pd.DataFrame({"dye": eps}, index=wl)
    u = None if u_rel is None else pd.DataFrame({"dye": u_rel * eps}, index=wl)
    return ms.import_absorptivities(frame, "L/(mol*cm)", u_absorptivity=u)


@pytest.fixture
def uncertain_library(absorptivity_array: xr.DataArray) -> xr.Dataset:
    """The conftest library with u(ε) = 1 % of ε + 5 L/(mol*cm) at every wavelength."""
    u = 0.01 * absorptivity_array + 5.0
    return ms.import_absorptivities(absorptivity_array, "L/(mol*cm)", u_absorptivity=u)


@pytest.fixture
def noisy_result(uncertain_library, rng) -> xr.Dataset:
    """OLS fit of two invented mixtures with 0.002 AU noise."""
    eps = uncertain_library["absorptivity"].values
    wl = uncertain_library["wavelength"].values
    spectra = ms.make_spectra(CONC @ eps + rng.normal(0, 0.002, (2, wl.size)), wl, ["s1", "s2"])
    return ms.unmix(spectra, uncertain_library, method="ols")


def test_gum_two_sources_by_hand() -> None:
    """GUM law of propagation, worked by hand: pathlength and dilution only.

    Noise-free data (spectral noise 0), u(ε) not stated, λ tolerance 0, no stray light.
    c found = 5e-5 mol/L, b = 1 cm, u(b) = 0.002 cm; dilution 1 mL (class A pipette,
    ±0.008 mL) to 10 mL (class A flask, ±0.025 mL), rectangular:
    u(V₁)/V₁ = 0.008/√3 = 0.0046188; u(V₂)/V₂ = 0.025/√3/10 = 0.0014434;
    u(F)/F = √(0.0046188² + 0.0014434²) = 0.0048391; y = 10·c = 5.0e-4 mol/L;
    u_c/y = √(0.002² + 0.0048391²) = √(4.0e-6 + 2.34167e-5) = 0.0052361;
    shares: 4.0e-6/2.74167e-5 = 0.14590 (pathlength), 0.85410 (dilution).
    """
    lib = one_band_library()
    wl = lib["wavelength"].values
    spectra = ms.make_spectra(5.0e-5 * lib["absorptivity"].values, wl, ["x"])
    result = ms.unmix(spectra, lib, method="ols")
    budget = ms.uncertainty_budget(result, lib, pathlength_u_cm=0.002,
                                   dilution=parse_dilution("1/10"), wavelength_tolerance_nm=0.0,
                                   stray_fraction=0.0)
    y = float(budget["value"].item())
    assert y == pytest.approx(5.0e-4, rel=1e-9)
    assert float(budget["combined_uncertainty"].item()) == pytest.approx(0.0052361 * y, rel=1e-4)
    assert float(budget["expanded_uncertainty"].item()) == pytest.approx(2 * 0.0052361 * y,
                                                                         rel=1e-4)
    share = budget["share"].sel(sample="x", component="dye")
    assert float(share.sel(source="pathlength")) == pytest.approx(0.14590, abs=2e-5)
    assert float(share.sel(source="dilution")) == pytest.approx(0.85410, abs=2e-5)
    assert float(budget["input_uncertainty"].sel(sample="x", source="dilution")) == \
        pytest.approx(10 * 0.0048391, rel=1e-4)
    assert json.loads(budget.attrs["not_stated"]) == ["absorptivity"]


def test_shares_sum_to_one_and_combined_is_root_sum_square(noisy_result, uncertain_library
                                                           ) -> None:
    """Shares of the stated sources add up to 1; u_c² = Σ uᵢ²; U = 2 u_c."""
    budget = ms.uncertainty_budget(noisy_result, uncertain_library, pathlength_u_cm=0.001,
                                   dilution=parse_dilution("2/25"), carryover_ul=30,
                                   stray_fraction=2e-4)
    assert np.allclose(budget["share"].sum("source"), 1.0)
    contrib = budget["contribution"].values
    assert np.allclose(np.sqrt((contrib**2).sum(-1)), budget["combined_uncertainty"].values)
    assert np.allclose(budget["expanded_uncertainty"], 2 * budget["combined_uncertainty"])
    assert json.loads(budget.attrs["not_stated"]) == []
    assert (contrib[..., [list(SOURCES).index(s) for s in
                          ("spectral_noise", "absorptivity", "pathlength", "dilution",
                           "carryover", "wavelength", "stray_light")]] > 0).all()


def test_monte_carlo_agrees_with_the_linear_budget(noisy_result, uncertain_library) -> None:
    """JCGM 101 check on a non-trivial case: the u and mean of 20 000 seeded draws lie within
    the stated tolerance (5 % of u_c) of the linear budget, and u within 3 %."""
    budget = ms.uncertainty_budget(noisy_result, uncertain_library, pathlength_u_cm=0.002,
                                   dilution=parse_dilution("1/10"), stray_fraction=5e-4,
                                   wavelength_tolerance_nm=0.3, carryover_ul=20,
                                   monte_carlo=20000, seed=7)
    ratio = budget["mc_standard_uncertainty"] / budget["combined_uncertainty"]
    assert np.all(np.abs(ratio - 1) < 0.03), ratio.values
    assert budget["mc_agrees"].all()
    again = ms.uncertainty_budget(noisy_result, uncertain_library, pathlength_u_cm=0.002,
                                  dilution=parse_dilution("1/10"), stray_fraction=5e-4,
                                  wavelength_tolerance_nm=0.3, carryover_ul=20,
                                  monte_carlo=20000, seed=7)
    assert np.array_equal(again["mc_low_95"].values, budget["mc_low_95"].values)


def test_monte_carlo_sees_an_absorptivity_error_the_noise_alone_misses(uncertain_library,
                                                                       rng) -> None:
    """The linearised absorptivity term (∂x/∂ε) is checked by Monte Carlo alone: with a
    stated u(ε) of 2-3 % (taken as fully correlated within each component, so it does not
    average out over wavelengths) and noise-free data it is the only source, and both agree
    (larger errors make the model visibly non-linear: c ∝ 1/ε)."""
    eps = uncertain_library["absorptivity"]
    lib = ms.import_absorptivities(eps, "L/(mol*cm)", u_absorptivity=0.02 * eps + 10.0)
    spectra = ms.make_spectra(CONC[:1] @ eps.values, eps["wavelength"].values, ["s"])
    result = ms.unmix(spectra, lib, method="ols")
    budget = ms.uncertainty_budget(result, lib, wavelength_tolerance_nm=0.0, stray_fraction=0,
                                   monte_carlo=20000, seed=3)
    share = budget["share"].sel(source="absorptivity")
    assert np.all(share > 0.99)
    ratio = budget["mc_standard_uncertainty"] / budget["combined_uncertainty"]
    assert np.all(np.abs(ratio - 1) < 0.03), ratio.values


def test_linear_absorptivity_term_matches_finite_differences() -> None:
    """One component: ∂c/∂ε(λᵢ) from the formula equals a finite difference of the fit."""
    lib = one_band_library(u_rel=0.02)
    wl = lib["wavelength"].values
    rng = np.random.default_rng(11)
    values = 6.0e-5 * lib["absorptivity"].values[0] + rng.normal(0, 0.003, wl.size)
    result = ms.unmix(ms.make_spectra(values, wl, ["x"]), lib, method="ols")
    budget = ms.uncertainty_budget(result, lib)
    eps = lib["absorptivity"].values[0]
    u = lib["u_absorptivity"].values[0]
    c0 = np.sum(eps * values) / np.sum(eps**2)
    grads = []
    for i in range(wl.size):
        e = eps.copy()
        e[i] += 1e-3
        grads.append((np.sum(e * values) / np.sum(e**2) - c0) / 1e-3)
    # a stated u(ε) is one error of the whole spectrum (fully correlated over wavelengths,
    # mixsolve.library_error "declared_u"): the signed sensitivities add before squaring
    expected = abs(float(np.sum(np.array(grads) * u)))
    got = float(budget["contribution"].sel(sample="x", component="dye", source="absorptivity"))
    assert got == pytest.approx(expected, rel=1e-4)


def test_wavelength_term_is_the_shift_bias_over_root_three(noisy_result, uncertain_library
                                                           ) -> None:
    """Rectangular ±a: u = |shift_bias_per_nm|·a/√3 (the result's own shift bias)."""
    budget = ms.uncertainty_budget(noisy_result, uncertain_library, wavelength_tolerance_nm=1.5)
    expected = np.abs(noisy_result["shift_bias_per_nm"]) * 1.5 / math.sqrt(3)
    got = budget["contribution"].sel(source="wavelength")
    assert np.allclose(got.values, expected.transpose(*got.dims).values, rtol=1e-6)
    normal = ms.uncertainty_budget(noisy_result, uncertain_library, wavelength_u_nm=0.2)
    assert np.allclose(normal["contribution"].sel(source="wavelength").values,
                       np.abs(noisy_result["shift_bias_per_nm"]).values * 0.2, rtol=1e-6)


def test_stray_light_term_is_the_bias_it_would_cause(molar_library, mix_spectra) -> None:
    """δc = c(spectra read with stray light) − c(clean); the budget gives |δc|/√3."""
    clean = mix_spectra(CONC)
    s = 1e-3
    model = ms.NoiseModel(k0=1e-4, stray=s)
    read = clean.copy(data=model.apparent_absorbance(clean.values))
    c_clean = ms.unmix(clean, molar_library, method="ols")
    c_read = ms.unmix(read, molar_library, method="ols")["concentration"]
    delta = np.abs(c_read - c_clean["concentration"]).values
    budget = ms.uncertainty_budget(c_clean, molar_library, stray_fraction=s)
    got = budget["contribution"].sel(source="stray_light").values
    assert np.allclose(got, delta / math.sqrt(3), rtol=0.02)


def test_carryover_by_hand(molar_library, mix_spectra) -> None:
    """20 µL left in a 2000 µL fill: f = 20/2020; previous mode uses the sample before
    (the first follows the solvent); solvent mode always c_prev = 0."""
    result = ms.unmix(mix_spectra(CONC), molar_library, method="ols")
    conc = result["concentration"].values
    f = 20.0 / 2020.0
    prev = ms.uncertainty_budget(result, molar_library, carryover_ul=20, fill_volume_ul=2000)
    got = prev["contribution"].sel(source="carryover").values
    assert np.allclose(got[0], f * conc[0] / math.sqrt(3))
    assert np.allclose(got[1], f * np.abs(conc[0] - conc[1]) / math.sqrt(3))
    solvent = ms.uncertainty_budget(result, molar_library, carryover_ul=20, fill_volume_ul=2000,
                                    carryover_from="solvent")
    assert np.allclose(solvent["contribution"].sel(source="carryover").values,
                       f * conc / math.sqrt(3))


def test_repeat_scan_sd_replaces_the_fit_scatter(noisy_result, uncertain_library) -> None:
    """Given σ per wavelength equal to the fit's s, the propagated noise equals the fit's
    noise term u_noise without its correlated-noise inflation; doubling σ doubles it; the
    basis is recorded."""
    dof = noisy_result["dof"].values
    rss = (noisy_result["residual"] ** 2).sum("wavelength").values
    s = np.sqrt(rss / dof)
    wl = uncertain_library["wavelength"]
    for i, name in enumerate(["s1", "s2"]):
        sd = xr.DataArray(np.full(wl.size, s[i]), dims="wavelength", coords={"wavelength": wl})
        budget = ms.uncertainty_budget(noisy_result.sel(sample=[name]), uncertain_library,
                                       noise_sd=sd)
        got = budget["contribution"].sel(source="spectral_noise").values[0]
        # u_noise is s·√diag(...)/b times the correlated-noise inflation f; σ = s gives f = 1
        expected = noisy_result["u_noise"].values[i] / noisy_result["noise_inflation"].values[i]
        assert np.allclose(got, expected, rtol=1e-8)
        assert budget.attrs["noise_from"] == "repeat scans"
        twice = ms.uncertainty_budget(noisy_result.sel(sample=[name]), uncertain_library,
                                      noise_sd=2 * sd)
        assert np.allclose(twice["contribution"].sel(source="spectral_noise").values[0],
                           2 * got)


def test_repeatability_dataset_feeds_the_budget(noisy_result, uncertain_library, rng) -> None:
    """ms.repeatability(scans) can be passed as noise_sd directly (its sd is used)."""
    wl = uncertain_library["wavelength"].values
    scans = ms.make_spectra(0.5 + rng.normal(0, 0.001, (6, wl.size)), wl)
    stats = ms.repeatability(scans)
    a = ms.uncertainty_budget(noisy_result, uncertain_library, noise_sd=stats)
    b = ms.uncertainty_budget(noisy_result, uncertain_library, noise_sd=stats["sd"])
    assert np.array_equal(a["contribution"].values, b["contribution"].values, equal_nan=True)


def test_weighted_and_missing_readings_are_handled(uncertain_library, rng) -> None:
    """A weighted fit with a missing reading: the noise term equals the fit's std_uncertainty
    when σ is rebuilt from the weighted residual, and the row is not NaN."""
    eps = uncertain_library["absorptivity"].values
    wl = uncertain_library["wavelength"].values
    values = CONC @ eps + rng.normal(0, 0.002, (2, wl.size))
    values[0, 5] = np.nan
    result = ms.unmix(ms.make_spectra(values, wl), uncertain_library, method="ols",
                      weights="noise", noise="benchtop_double_beam")
    budget = ms.uncertainty_budget(result, uncertain_library, monte_carlo=4000, seed=1)
    assert np.all(np.isfinite(budget["combined_uncertainty"]))
    ratio = budget["mc_standard_uncertainty"] / budget["combined_uncertainty"]
    assert np.all(np.abs(ratio - 1) < 0.06), ratio.values


def test_no_result_gives_nan_rows(molar_library, mix_spectra) -> None:
    """A spectrum without readings has no budget (NaN), the others do."""
    spectra = mix_spectra(CONC)
    spectra[1] = np.nan
    result = ms.unmix(spectra, molar_library)
    budget = ms.uncertainty_budget(result, molar_library, pathlength_u_cm=0.001)
    assert np.all(np.isnan(budget["combined_uncertainty"].values[1]))
    assert np.all(np.isfinite(budget["combined_uncertainty"].values[0]))


def test_budget_table_is_tidy(noisy_result, uncertain_library) -> None:
    """One row per sample × component × source, with the documented columns."""
    budget = ms.uncertainty_budget(noisy_result, uncertain_library, monte_carlo=1000)
    table = ms.budget_table(budget)
    assert len(table) == 2 * 3 * len(SOURCES)
    assert list(table.columns[:6]) == ["sample", "component", "value", "unit", "source",
                                       "evaluation"]
    assert {"share", "contribution", "expanded_uncertainty", "mc_agrees"} <= set(table.columns)
    one = table[(table["sample"] == "s2") & (table["component"] == "red")]
    assert one["share"].sum() == pytest.approx(1.0)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"pathlength_u_cm": -0.1}, r"^pathlength_u_cm: -0\.1 cm is not a number ≥ 0$"),
    ({"wavelength_u_nm": 0.1, "wavelength_tolerance_nm": 1.0}, r"not both"),
    ({"monte_carlo": 10}, r"^monte_carlo: 10 draws is not a whole number ≥ 1000 draws$"),
    ({"monte_carlo": 1500.5}, r"^monte_carlo: 1500\.5 draws is not a whole number ≥ 1000"),
    ({"carryover_from": "air"}, r"carryover_from: 'air' is not"),
    ({"coverage_factor": 0}, r"^coverage_factor: 0 is not a positive number$"),
    ({"stray_fraction": 1.5}, r"^stray_fraction: 1\.5 is not a number ≥ 0 and below 1$"),
    ({"fill_volume_ul": 0}, r"^fill_volume_ul: 0 µL is not a positive number$"),
    ({"carryover_ul": np.nan}, r"^carryover_ul: nan µL is not a finite number$"),
    ({"dilution": "1/x"}, r"^dilution: 'x' in step '1/x' is not a volume in mL"),
    ({"noise_sd": [0.001]}, r"^noise_sd: list is not a DataArray"),
])
def test_bad_budget_options(noisy_result, uncertain_library, kwargs, message) -> None:
    """Each bad option is refused with a message naming it and the value, and already
    when the inputs are made (before any work)."""
    with pytest.raises(ms.InputError, match=message):
        ms.uncertainty_budget(noisy_result, uncertain_library, **kwargs)
    with pytest.raises(ms.InputError, match=message):
        BudgetInputs(**kwargs)


def test_budget_inputs_as_one_record(noisy_result, uncertain_library) -> None:
    """The budget takes its inputs as one BudgetInputs or by name, with the same result;
    names given beside a record replace its fields, and dilution text is read once."""
    inputs = BudgetInputs(pathlength_u_cm=0.002, dilution="1/10", carryover_ul=15.0)
    assert isinstance(inputs.dilution, Dilution) and inputs.dilution.factor == 10.0
    assert inputs.changed() == ["pathlength_u_cm", "dilution", "carryover_ul"]
    by_record = ms.uncertainty_budget(noisy_result, uncertain_library, inputs)
    by_name = ms.uncertainty_budget(noisy_result, uncertain_library, pathlength_u_cm=0.002,
                                    dilution="1/10", carryover_ul=15.0)
    xr.testing.assert_identical(by_record, by_name)
    mixed = ms.uncertainty_budget(noisy_result, uncertain_library, inputs, carryover_ul=None)
    assert (mixed["contribution"].sel(source="carryover") == 0).all()
    assert not (by_record["contribution"].sel(source="carryover") == 0).all()
    with pytest.raises(TypeError, match="pathlength_u"):
        ms.uncertainty_budget(noisy_result, uncertain_library, pathlength_u=0.002)


def test_budget_refuses_another_library_or_a_non_ls_result(noisy_result) -> None:
    """The library must be the one fitted; a PLS-like result is refused."""
    with pytest.raises(ms.InputError, match=r"the library's components \(dye\) are not"):
        ms.uncertainty_budget(noisy_result, one_band_library())
    fake = noisy_result.assign_attrs(method="pls")
    with pytest.raises(ms.InputError, match=r"method 'pls' is not a least-squares fit"):
        ms.uncertainty_budget(fake, one_band_library())


# --- command line -------------------------------------------------------------------------


@pytest.fixture
def files(tmp_path, rng):
    """A library file and a noisy two-mixture spectra file (helpers_io data)."""
    lib = write_library_file(tmp_path / "lib.nc")
    columns = {name: mixture_absorbance(mix) + rng.normal(0, 0.002, WL.size)
               for name, mix in MIXTURES.items()}
    return lib, write_wide(tmp_path / "mix.csv", columns)


def test_cli_budget_writes_the_table_and_reports_top_contributors(files, tmp_path, cli) -> None:
    """``unmix --budget`` writes the tidy budget and prints the largest shares."""
    lib, spectra = files
    out = tmp_path / "budget.csv"
    run = cli("unmix", lib, spectra, "--budget", out, "--pathlength-u", "0.001",
              "--dilution", "1/10", "--carryover", "15", "--stray", "1e-4",
              "--wavelength-tolerance", "1", "--monte-carlo", "1000")
    assert run.exit_code == 0, run.output
    table = pd.read_csv(out, comment="#")
    assert len(table) == 2 * 2 * len(SOURCES)
    assert table["value"].iloc[0] == pytest.approx(10 * 2.0e-5, rel=0.05)
    assert "Uncertainty budget (JCGM 100:2008)" in run.stdout
    assert "largest shares of u_c²" in run.stdout
    assert "dilution factor 10" in run.stdout
    assert f"wrote {out}" in run.stderr


def test_cli_budget_failure_leaves_no_file(files, tmp_path, cli) -> None:
    """A bad dilution (no 7 mL class A flask) fails before anything is written."""
    lib, spectra = files
    run = cli("unmix", lib, spectra, "--out", tmp_path / "r.csv", "--budget",
              tmp_path / "b.csv", "--dilution", "1/7")
    assert_cli_error(run, "no 7 mL flask-A in the table", literal=True,
                     must_not_exist=[tmp_path / "r.csv", tmp_path / "b.csv"])
    assert leftovers(tmp_path) == []


def test_cli_budget_setting_without_budget_is_refused(files, cli) -> None:
    """--dilution alone would be silently ignored, so it is an error."""
    lib, spectra = files
    run = cli("unmix", lib, spectra, "--dilution", "1/10")
    assert_cli_error(run, "error: --dilution: a budget setting; give --budget FILE.csv too",
                     literal=True)


def test_cli_repeat_scans_are_the_type_a_noise(files, tmp_path, rng, cli) -> None:
    """--repeat-scans FILE: the noise term comes from the scans' SD (0.004 AU here, twice
    the spectra's own 0.002 AU), so it is larger than the fit's."""
    lib, spectra = files
    scans = write_wide(tmp_path / "scans.csv",
                       {f"s{j}": 0.4 + rng.normal(0, 0.004, WL.size) for j in range(8)})
    common = ["unmix", lib, spectra, "--method", "ols"]
    assert cli(*common, "--budget", tmp_path / "fit.csv").exit_code == 0
    run = cli(*common, "--budget", tmp_path / "rep.csv", "--repeat-scans", scans)
    assert run.exit_code == 0, run.output
    assert "noise         repeat scans" in run.stdout

    def noise(path):
        table = pd.read_csv(path, comment="#")
        return table[table["source"] == "spectral_noise"]["contribution"].to_numpy()

    assert np.all(noise(tmp_path / "rep.csv") > 1.3 * noise(tmp_path / "fit.csv"))

"""Stray-light correction (mixsolve.solve.stray) and its use in unmix, the budget and the CLI.

The convention is that of ../shared/CHECKS.md ("Stray light"): a reading of true
transmittance T at stray fraction s shows T_app = (T + s)/(1 + s); the tests compute it
themselves, independently of mixsolve. Derivatives are checked against central finite
differences (numpy). The calibration tests are seeded simulations of a **synthetic**
scenario like condition "5 stray" of benchmarks/coverage_sim.py: an exact library of three
invented Gaussian-band components, s = 0.001, peak true absorbance up to 3 AU, white noise
σ_A = 0.002 AU added to the apparent reading. For an honest u, z = (ĉ − c)/u is near
N(0, 1): P(|z| < 2) ≈ 0.954 (target band 0.90–0.99, issue 14), mean z ≈ 0.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error

import mixsolve as ms
from mixsolve.errors import MixsolveWarning
from mixsolve.solve.stray import (
    StrayCorrectedNoise,
    corrected_absorbance,
    darkness_limit,
    noise_gain,
    stray_sensitivity,
    too_dark,
)

S = 0.001  #: stray fraction of the scenario (0.1 %T, typical single monochromator, ASTM E387)
SIGMA = 0.002  #: AU
WL = np.arange(400.0, 701.0, 2.0)
#: invented components (synthetic): (height L/(g*cm), centre nm, SD nm)
BANDS = [[(60.0, 455.0, 28.0), (15.0, 515.0, 30.0)], [(70.0, 520.0, 32.0)],
         [(50.0, 585.0, 38.0), (20.0, 640.0, 25.0)]]
NAMES = ["yellow", "red", "blue"]


def apparent(true_au: np.ndarray, s: float) -> np.ndarray:
    """CHECKS.md convention, written out here: A_app = −log10((10^−A + s)/(1 + s))."""
    return -np.log10((np.power(10.0, -true_au) + s) / (1.0 + s))


def absorptivity() -> np.ndarray:
    return np.vstack([sum(h * np.exp(-0.5 * ((WL - c) / w) ** 2) for h, c, w in bands)
                      for bands in BANDS])


def exact_library() -> xr.Dataset:
    table = xr.DataArray(absorptivity(), dims=("component", "wavelength"),
                         coords={"component": NAMES, "wavelength": WL})
    return ms.import_absorptivities(table, "L/(g*cm)", source="synthetic, exact")


def draw(rng: np.random.Generator, n: int) -> np.ndarray:
    """True concentrations (mg/L), each spectrum's peak true absorbance uniform in 0.1–3."""
    eps = absorptivity()
    shares = rng.uniform(0.2, 1.0, (n, 3))
    peak = (shares @ eps).max(axis=1) / 1000.0
    return shares * (rng.uniform(0.1, 3.0, n) / peak)[:, None]


def read(conc: np.ndarray, s: float, rng: np.random.Generator) -> xr.DataArray:
    true = conc @ absorptivity() / 1000.0
    noisy = apparent(true, s) + SIGMA * rng.standard_normal(true.shape)
    return ms.make_spectra(noisy, WL, pathlength_cm=1.0)


def stated_noise(s: float) -> ms.NoiseModel:
    """σ_A constant at SIGMA: σ_T = k2·T with k2 = σ_A·ln 10."""
    return ms.NoiseModel(k2=SIGMA * np.log(10.0), stray=s, name="simulated")


def z_scores(spectra: xr.DataArray, conc: np.ndarray, **options: object
             ) -> tuple[np.ndarray, xr.Dataset]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        result = ms.unmix(spectra, exact_library(), unit="mg/L", **options)
    z = (result["concentration"].values - conc) / result["std_uncertainty"].values
    return z.ravel(), result


# --- the pure module ----------------------------------------------------------------------

def test_round_trip_recovers_the_true_absorbance() -> None:
    """apparent (CHECKS.md convention, computed here) → corrected = true, 0 to 2.9 AU."""
    true = np.linspace(-0.05, 2.9, 60)
    for s in (1e-5, 5e-4, S):
        np.testing.assert_allclose(corrected_absorbance(apparent(true, s), s), true,
                                   rtol=0, atol=1e-9)
    np.testing.assert_array_equal(corrected_absorbance(np.array([np.nan]), S), [np.nan])


def test_sensitivity_and_noise_gain_against_finite_differences() -> None:
    """∂A/∂s at fixed apparent readings, and dA/dA_app, against central differences."""
    true = np.linspace(0.0, 2.8, 30)
    shown = apparent(true, S)
    h = 1e-7
    numeric = (corrected_absorbance(shown, S + h) - corrected_absorbance(shown, S - h)) / (2 * h)
    np.testing.assert_allclose(stray_sensitivity(true, S), numeric, rtol=1e-5, atol=1e-6)
    h = 1e-6
    gain = (corrected_absorbance(shown + h, S) - corrected_absorbance(shown - h, S)) / (2 * h)
    np.testing.assert_allclose(noise_gain(true, S), gain, rtol=1e-6)
    assert stray_sensitivity(np.array([0.0]), S)[0] == 0.0  # no correction at T = 1


def test_the_corrected_noise_model_matches_a_simulation(rng) -> None:
    """σ of corrected readings: noise drawn on the apparent reading, corrected, its SD
    against StrayCorrectedNoise.sigma_absorbance at the true absorbance (synthetic)."""
    model = StrayCorrectedNoise(k2=SIGMA * np.log(10.0), stray=S)
    for true in (0.5, 2.0, 2.6):
        draws = apparent(np.array(true), S) + SIGMA * rng.standard_normal(200_000)
        sd = np.std(corrected_absorbance(draws, S))
        assert sd == pytest.approx(float(model.sigma_absorbance(true)), rel=0.01)


def test_too_dark_mask() -> None:
    """Too dark where the corrected T is not above max(s, 10·u(s)); a saturated reading
    (A_app = −log10(s/(1+s)), CHECKS.md: cannot be corrected) and beyond are too dark."""
    assert darkness_limit(S, 0.0) == S
    assert darkness_limit(S, 2e-4) == pytest.approx(2e-3)
    true_t = np.array([0.5, 1.01e-3, 0.99e-3, 1e-5])
    shown = apparent(-np.log10(true_t), S)
    np.testing.assert_array_equal(too_dark(shown, S, 0.0), [False, False, True, True])
    np.testing.assert_array_equal(too_dark(shown, S, 2e-4), [False, True, True, True])
    saturated = -np.log10(S / (1 + S))
    assert too_dark(np.array([saturated, saturated + 0.5]), S, 0.0).all()
    assert not too_dark(np.array([np.nan]), S, 0.0).any()


# --- unmix --------------------------------------------------------------------------------

def test_u_stray_is_the_finite_difference_of_the_result(rng) -> None:
    """u_stray/u(s) = |∂c/∂s|: central difference of unmix's concentrations over the
    stated fraction, on noise-free readings (OLS and a weighted fit)."""
    conc = draw(rng, 6)
    spectra = read(conc, S, np.random.default_rng(0)).copy()
    spectra.values[:] = apparent(conc @ absorptivity() / 1000.0, S)
    spectra.values[0, 3] = np.nan  # one spectrum with a missing reading
    h = 2e-6
    for options in ({"method": "ols"},
                    {"method": "ols", "noise": stated_noise(0.0), "weights": "noise"}):
        c = {d: z_scores(spectra, conc, stray_fraction=S + d, u_stray_fraction=0.0,
                         **options)[1]["concentration"].values for d in (-h, h)}
        result = z_scores(spectra, conc, stray_fraction=S, u_stray_fraction=1e-6,
                          **options)[1]
        np.testing.assert_allclose(result["u_stray"].values / 1e-6,
                                   np.abs(c[h] - c[-h]) / (2 * h), rtol=2e-3)


def test_exact_stray_corrected_covers_and_is_unbiased(rng) -> None:
    """Condition 5 with s known exactly (u(s) = 0): uncorrected results are biased low;
    corrected, through unmix with and without noise= weights, P(|z|<2) in [0.90, 0.99]
    and mean z near 0."""
    conc = draw(rng, 300)
    spectra = read(conc, S, rng)
    z_raw, _ = z_scores(spectra, conc)
    assert np.mean(z_raw) < -3  # the bias the correction removes
    for options in ({"stray_fraction": S, "u_stray_fraction": 0.0},
                    {"noise": stated_noise(S), "u_stray_fraction": 0.0},
                    {"noise": stated_noise(S), "weights": "noise", "u_stray_fraction": 0.0}):
        z, result = z_scores(spectra, conc, **options)
        assert 0.90 <= np.mean(np.abs(z) < 2) <= 0.99, options
        assert abs(np.mean(z)) < 0.15, options
        assert result.attrs["stray_fraction"] == S
        assert (result["u_stray"] == 0).all()


def test_uncertain_stray_fraction_covers(rng) -> None:
    """Each run's true s drawn N(s, u) with u = 20 % of s and stated as (s, u): u_stray,
    shared by the spectra of a run, brings P(|z|<2) into [0.90, 0.99] with and without
    weights; without u_stray (u stated 0) the same results under-cover."""
    u = 0.2 * S
    fits = {"plain": {"stray_fraction": S},
            "weighted": {"noise": stated_noise(S), "weights": "noise"}}
    z: dict[str, list[np.ndarray]] = {"plain": [], "weighted": [], "u = 0": []}
    dark = []
    for _ in range(40):
        true_s = S + u * rng.standard_normal()
        conc = draw(rng, 12)
        spectra = read(conc, true_s, rng)
        for name, options in fits.items():
            values, result = z_scores(spectra, conc, u_stray_fraction=u, **options)
            z[name].append(values)
        dark.append(result["status"].values & 1024 > 0)
        z["u = 0"].append(z_scores(spectra, conc, stray_fraction=S, u_stray_fraction=0.0)[0])
    for name in fits:
        all_z = np.concatenate(z[name])
        assert 0.90 <= np.mean(np.abs(all_z) < 2) <= 0.99, name
        assert abs(np.mean(all_z)) < 0.2, name
    assert np.mean(np.abs(np.concatenate(z["u = 0"])) < 2) < 0.90
    assert 0 < np.mean(np.concatenate(dark)) < 0.5  # some spectra had readings left out


def test_too_dark_readings_are_left_out_and_flagged(rng) -> None:
    """A spectrum with readings darker than the limit: those readings NaN in the
    residual, the flag too_dark_for_stray (not missing_readings), a result from the rest;
    a spectrum with no dark reading is not flagged."""
    conc = np.array([[0.0, 60.0, 0.0], [0.0, 5.0, 0.0]])  # peak 4.2 AU and 0.35 AU
    spectra = read(conc, S, rng)
    _, result = z_scores(spectra, conc, stray_fraction=S)
    flags = [str(f).split(";") for f in result["flags"].values]
    assert "too_dark_for_stray" in flags[0] and "missing_readings" not in flags[0]
    assert "too_dark_for_stray" not in flags[1]
    assert np.isnan(result["residual"].values[0]).any()
    assert not np.isnan(result["residual"].values[1]).any()
    assert np.isfinite(result["concentration"].values).all()
    assert ms.flags.FLAG_MEANINGS["too_dark_for_stray"]
    assert "corrected" in result.attrs["stray_correction"]


def test_options_are_checked_and_recorded(rng) -> None:
    """stray_fraction and the noise model's stray must agree; u(s) needs a fraction and
    must leave readings to correct (10·u(s) < 1); the default u(s) is s/√3; without a
    fraction nothing is corrected and u_stray is 0."""
    conc = draw(rng, 3)
    spectra = read(conc, S, rng)
    lib = exact_library()
    with pytest.raises(ms.InputError, match=r"^stray_fraction: 0\.002 disagrees with the "
                       r"noise model's stray 0\.001; give one of them, or the same value$"):
        ms.unmix(spectra, lib, noise=stated_noise(S), stray_fraction=0.002)
    with pytest.raises(ms.InputError, match=r"^u_stray_fraction: 0\.0001 given without a "
                       r"stray fraction; state stray_fraction"):
        ms.unmix(spectra, lib, u_stray_fraction=1e-4)
    with pytest.raises(ms.InputError, match=r"^stray_fraction: 1 is not a number ≥ 0 and "
                       r"below 1$"):
        ms.unmix(spectra, lib, stray_fraction=1.0)
    # a relative u(s) (0.2 for 20 %) given as the absolute one: every reading too dark
    with pytest.raises(ms.InputError, match=r"^u_stray_fraction: 0\.2 leaves no reading to "
                       r"correct .* e\.g\. 0\.0002 for 0\.001 known to 20 %$"):
        ms.unmix(spectra, lib, stray_fraction=S, u_stray_fraction=0.2)
    same = ms.unmix(spectra, lib, noise=stated_noise(S), stray_fraction=S)
    assert same.attrs["u_stray_fraction"] == pytest.approx(S / np.sqrt(3))
    plain = ms.unmix(spectra, lib)
    assert plain.attrs["stray_fraction"] == 0 and plain.attrs["stray_correction"] == ""
    assert (plain["u_stray"] == 0).all()
    assert plain["u_stray"].attrs["units"] == plain.attrs["unit"]


def test_dask_backed_spectra_give_the_eager_result(rng) -> None:
    """The correction happens per block: chunked spectra, same numbers and flags."""
    pytest.importorskip("dask")
    conc = draw(rng, 40)
    spectra = read(conc, S, rng)
    eager = ms.unmix(spectra, exact_library(), stray_fraction=S)
    lazy = ms.unmix(spectra.chunk({"sample": 7}), exact_library(), stray_fraction=S).compute()
    for name in ("concentration", "std_uncertainty", "u_stray", "residual"):
        np.testing.assert_allclose(lazy[name].values, eager[name].values, rtol=1e-9,
                                   atol=1e-12, equal_nan=True)
    np.testing.assert_array_equal(lazy["flags"].values, eager["flags"].values)


# --- budget and command line -------------------------------------------------------------

def test_budget_propagates_u_of_s_for_a_corrected_result(rng) -> None:
    """The budget's stray_light term of a corrected result is u_stray (not the bias), the
    spectral-noise term does not count it twice, and Monte Carlo agrees (JCGM 101)."""
    conc = draw(rng, 4)
    spectra = read(conc, S, rng)
    lib = exact_library()
    result = ms.unmix(spectra, lib, stray_fraction=S, u_stray_fraction=2e-4, method="ols",
                      unit="mg/L")
    budget = ms.uncertainty_budget(result, lib, wavelength_tolerance_nm=0.0,
                                   monte_carlo=5000, seed=1)
    stray = budget["contribution"].sel(source="stray_light").values
    np.testing.assert_allclose(stray, result["u_stray"].values, rtol=1e-6)
    np.testing.assert_allclose(budget["combined_uncertainty"].values,
                               result["std_uncertainty"].values, rtol=1e-6)
    ratio = budget["mc_standard_uncertainty"] / budget["combined_uncertainty"]
    assert np.all(np.abs(ratio - 1) < 0.05), ratio.values
    with pytest.raises(ms.InputError, match=r"^stray_fraction: 0\.002 disagrees with the "
                       r"fraction 0\.001 the result was corrected with$"):
        ms.uncertainty_budget(result, lib, stray_fraction=0.002)


def test_cli_stray_corrects_like_the_api(rng, tmp_path, cli) -> None:
    """``unmix --stray S --u-stray U`` gives the API's corrected concentrations and
    u_stray; without --stray the results differ (biased low)."""
    conc = draw(rng, 5)
    spectra = read(conc, S, rng)
    spectra = spectra.assign_coords(sample=[f"s{i}" for i in range(5)])
    lib = exact_library()
    ms.write_library(lib, tmp_path / "lib.nc")
    frame = pd.DataFrame(spectra.values.T, columns=spectra["sample"].values)
    frame.insert(0, "wavelength_nm", WL)
    frame.to_csv(tmp_path / "s.csv", index=False, float_format="%.17g")
    api = ms.unmix(spectra, lib, stray_fraction=S, u_stray_fraction=1e-4, unit="mg/L")
    cli.ok("unmix", tmp_path / "lib.nc", tmp_path / "s.csv", "--stray", S, "--u-stray", 1e-4,
           "--unit", "mg/L", "--out", tmp_path / "r.csv")
    cli.ok("unmix", tmp_path / "lib.nc", tmp_path / "s.csv", "--unit", "mg/L",
           "--out", tmp_path / "raw.csv")
    table = pd.read_csv(tmp_path / "r.csv", comment="#").set_index(["sample", "component"])
    raw = pd.read_csv(tmp_path / "raw.csv", comment="#").set_index(["sample", "component"])
    want = api["concentration"].to_series()
    got = table["concentration"].reindex(want.index)
    np.testing.assert_allclose(got.values, want.values, rtol=1e-5)  # 6 digits in the CSV
    np.testing.assert_allclose(table["std_uncertainty"].reindex(want.index).values,
                               api["std_uncertainty"].to_series().values, rtol=1e-5)
    assert (raw["concentration"].reindex(want.index).values < got.values).sum() >= 10
    refused = cli("unmix", tmp_path / "lib.nc", tmp_path / "s.csv", "--stray", S, "--u-stray",
                  0.2, "--out", tmp_path / "none.csv")
    assert_cli_error(refused, "--u-stray: 0.2 leaves no reading to correct", literal=True,
                     must_not_exist=[tmp_path / "none.csv"])


def test_plate_command_states_the_stray_fraction_like_the_api(tmp_path, cli) -> None:
    """mixsolve plate --stray/--u-stray reach analyse_plate (the demo plate, synthetic): the
    wells' uncertainties are the API's with the same fraction, to the digits written, and
    not those of a run without it."""
    from mixsolve.workflows.demo import demo_file

    lib = tmp_path / "lib.nc"
    cli.ok("library", "build", demo_file("standards_spectra.csv"), "--standards",
           demo_file("standards.csv"), "--out", lib)
    cli.ok("plate", lib, demo_file("plate_export.csv"), "--layout",
           demo_file("plate_layout.csv"), "--out", tmp_path / "run", "--volume-ul", "300",
           "--well-diameter-mm", "6.96", "--stray", "0.001", "--u-stray", "0.0002")
    wells = pd.read_csv(next((tmp_path / "run").rglob("wells.csv")))
    args = (ms.read_plate(demo_file("plate_export.csv")),
            ms.read_layout(demo_file("plate_layout.csv")), ms.read_library(lib))
    api = ms.analyse_plate(*args, volume_ul=300, well_diameter_mm=6.96, stray_fraction=0.001,
                           u_stray_fraction=0.0002).wells
    plain = ms.analyse_plate(*args, volume_ul=300, well_diameter_mm=6.96).wells
    got = wells.set_index(["well", "component"])["std_uncertainty"].dropna()
    assert np.allclose(got, api.set_index(["well", "component"]).loc[got.index,
                                                                     "std_uncertainty"],
                       rtol=1e-5)
    before = plain.set_index(["well", "component"]).loc[got.index, "std_uncertainty"]
    assert not np.allclose(got, before, rtol=1e-3)  # the correction reached the fit

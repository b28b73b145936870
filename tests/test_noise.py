"""The photometric noise model (mixsolve.noise) and its use as fit weights.

The theory checks against Rothman, Crouch & Ingle live in
``tests/external/test_photometric_error.py``; here are the model's own formulas, its
validation, presets, ``noise_model`` resolution, a Monte Carlo check of the error
propagation, and ``unmix(weights="noise")``. All spectra are invented (Gaussian bands,
seeded noise).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
import xarray as xr
from scipy import stats

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.noise import DEFAULT_ABSORBANCE_RANGE, LN10, PRESETS, NoiseModel, noise_model

SEED = 3141


def gaussian(wl: np.ndarray, height: float, centre: float, width: float) -> np.ndarray:
    """One Gaussian band (height at ``centre`` nm, standard width ``width`` nm)."""
    return height * np.exp(-0.5 * ((wl - centre) / width) ** 2)


@pytest.fixture
def two_band_library() -> xr.Dataset:
    """Invented two-component library, 400-700 nm every 5 nm, L/(mol*cm)."""
    wl = np.arange(400.0, 701.0, 5.0)
    eps = np.vstack([gaussian(wl, 2.0e4, 470.0, 30.0), gaussian(wl, 1.5e4, 580.0, 35.0)])
    da = xr.DataArray(eps, dims=("component", "wavelength"),
                      coords={"component": ["p", "q"], "wavelength": wl})
    return ms.import_absorptivities(da, "L/(mol*cm)")


# --- formulas ------------------------------------------------------------------------------

def test_sigma_transmittance_is_root_sum_of_squares_of_the_three_terms():
    """σ_T = √(k0² + k1² T + k2² T²): constant, shot (∝ √T) and flicker (∝ T) terms."""
    m = NoiseModel(k0=3e-4, k1=2e-3, k2=5e-4)
    t = np.array([1.0, 0.5, 0.1, 0.01])
    expected = np.sqrt((3e-4) ** 2 + (2e-3 * np.sqrt(t)) ** 2 + (5e-4 * t) ** 2)
    np.testing.assert_allclose(m.sigma_transmittance(t), expected, rtol=1e-14)


def test_sigma_absorbance_propagates_sigma_t_through_minus_log10():
    """σ_A = σ_T/(T ln 10); a measured absorbance below 0 is evaluated at 0."""
    m = NoiseModel(k0=1e-3, k1=1e-3)
    a = np.array([0.0, 0.5, 1.0, 2.0])
    t = 10.0**-a
    expected = np.sqrt(1e-6 + 1e-6 * t) / (t * np.log(10.0))
    np.testing.assert_allclose(m.sigma_absorbance(a), expected, rtol=1e-14)
    assert m.sigma_absorbance(-0.3) == pytest.approx(float(m.sigma_absorbance(0.0)), rel=1e-14)


def test_sigma_absorbance_matches_monte_carlo_of_transmittance_readings():
    """Simulated readings T + N(0, σ_T) give A = −log10 T with the predicted spread.

    Assumes constant plus shot noise (k0, k1); 200 000 seeded readings at each of three
    absorbances; the sample SD of A agrees with σ_A to 2 % (its sampling error ≈ 0.2 %).
    """
    rng = np.random.default_rng(SEED)
    m = NoiseModel(k0=2e-4, k1=1e-3)
    for a in (0.2, 1.0, 2.0):
        t = 10.0**-a
        readings = t + m.sigma_transmittance(t) * rng.standard_normal(200_000)
        sd = np.std(-np.log10(readings), ddof=1)
        assert sd == pytest.approx(float(m.sigma_absorbance(a)), rel=0.02)


def test_apparent_absorbance_without_stray_light_is_the_true_absorbance():
    """With s = 0, −log10((T + s)/(1 + s)) is −log10 T."""
    m = NoiseModel(k0=1e-3)
    a = np.array([0.0, 0.3, 1.5, 4.0])
    np.testing.assert_allclose(m.apparent_absorbance(a), a, atol=1e-12)
    assert m.saturation_absorbance() == float("inf")


def test_apparent_absorbance_with_stray_light_is_zero_for_the_blank_and_below_truth():
    """The stray-light convention keeps the blank at 0 AU and reads low elsewhere."""
    m = NoiseModel(k0=1e-3, stray=0.01)
    assert float(m.apparent_absorbance(0.0)) == pytest.approx(0.0, abs=1e-14)
    a = np.linspace(0.1, 4.0, 40)
    assert np.all(m.apparent_absorbance(a) < a)
    assert np.all(np.diff(m.apparent_absorbance(a)) > 0)


def test_relative_error_is_infinite_at_and_below_zero_absorbance():
    """σ_c/c has no meaning where there is no signal: inf for A ≤ 0."""
    m = NoiseModel(k0=1e-3)
    out = m.relative_concentration_error(np.array([-0.1, 0.0, 0.5]))
    assert np.isinf(out[:2]).all()
    assert np.isfinite(out[2])


def test_reliable_range_ends_where_the_error_is_twice_its_minimum():
    """``reliable_range(f)``: σ_c/c at both ends is f × the minimum, and the best A is inside.

    Constant σ_T (k0 only) is assumed.
    """
    m = NoiseModel(k0=1e-3)
    low, high = m.reliable_range(factor=2.0)
    best = m.relative_concentration_error(m.best_absorbance())
    assert low < m.best_absorbance() < high
    for end in (low, high):
        assert m.relative_concentration_error(end) == pytest.approx(2 * best, rel=0.01)
    wide = m.reliable_range(factor=3.0)
    assert wide[0] < low and wide[1] > high


def test_reliable_range_is_open_ended_for_flicker_limited_noise():
    """Pure flicker noise (k2 only) never rises again: the upper end is inf."""
    assert NoiseModel(k2=1e-3).reliable_range()[1] == float("inf")


def test_default_absorbance_range_is_the_common_practice_0_3_to_2():
    """0.3–2 AU for a benchtop double-beam instrument (common practice, CHECKS.md)."""
    assert DEFAULT_ABSORBANCE_RANGE == (0.3, 2.0)


# --- validation ----------------------------------------------------------------------------

@pytest.mark.parametrize(("kwargs", "message"), [
    ({"k0": -1e-3}, r"^noise model, k0: -0\.001 is not a number ≥ 0$"),
    ({"k1": float("nan")}, r"^noise model, k1: nan is not a finite number$"),
    ({"k0": 1e-3, "stray": -0.1}, r"^noise model, stray: -0\.1 is not a number ≥ 0 and below 1$"),
    ({}, r"k0, k1 and k2 are all 0"),
    ({"k0": 1e-3, "stray": 1.0}, r"^noise model, stray: 1 is not a number ≥ 0 and below 1$"),
])
def test_noise_model_rejects_bad_parameters(kwargs, message):
    """Negative, NaN, all-zero terms and stray ≥ 1 are InputErrors naming the parameter."""
    with pytest.raises(InputError, match=message):
        NoiseModel(**kwargs)


def test_noise_model_is_frozen_and_round_trips_through_json():
    """A model is immutable; ``to_dict`` is JSON-safe and rebuilds the same model."""
    m = NoiseModel(k0=1e-4, k1=2e-3, k2=3e-4, stray=1e-3, name="mine")
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.k0 = 1.0  # type: ignore[misc]
    assert NoiseModel(**json.loads(json.dumps(m.to_dict()))) == m


# --- resolution and presets ----------------------------------------------------------------

def test_noise_model_resolves_none_instances_presets_and_floats():
    """None stays None, a model passes through, a name picks a preset, a float is a constant
    σ_A at every absorbance (σ_T ∝ T; σ_A = σ_T/(T ln 10), the propagation of A = −log10 T)."""
    m = NoiseModel(k1=1e-3)
    assert noise_model(None) is None
    assert noise_model(m) is m
    assert noise_model("diode_array") is PRESETS["diode_array"]
    flat = noise_model(0.002)
    assert flat is not None
    for a in (0.0, 1.0, 2.5):
        assert float(flat.sigma_absorbance(a)) == pytest.approx(0.002, rel=1e-12)
    assert flat.k2 == pytest.approx(0.002 * LN10)
    assert flat.k0 == flat.k1 == flat.stray == 0


def test_noise_model_rejects_unknown_presets_and_non_positive_sigma():
    """An unknown name lists the presets; σ_A ≤ 0 or NaN is refused."""
    with pytest.raises(InputError, match=r"unknown preset 'benchtop'; presets are "
                                         r"benchtop_double_beam, diode_array"):
        noise_model("benchtop")
    for bad, message in ((0.0, "0 AU is not a positive number"),
                         (-0.001, "-0.001 AU is not a positive number"),
                         (float("nan"), "nan AU is not a finite number")):
        with pytest.raises(InputError, match=rf"^noise: {message}$"):
            noise_model(bad)


@pytest.mark.parametrize("name", sorted(PRESETS))
def test_presets_are_named_after_their_key_and_have_a_best_absorbance(name):
    """Each preset is labelled with its key, has stray light, and a finite optimum below
    its saturation absorbance (preset values are from memory; only consistency is tested).
    """
    m = PRESETS[name]
    assert m.name == name
    assert 0 < m.stray < 0.01
    assert 0.3 < m.best_absorbance() < m.saturation_absorbance()


# --- weights="noise" -----------------------------------------------------------------------

def _replicates(library: xr.Dataset, model: NoiseModel, conc: np.ndarray, n: int,
                seed: int) -> xr.DataArray:
    """``n`` spectra of one mixture with heteroscedastic noise σ_A(A) drawn from ``model``."""
    rng = np.random.default_rng(seed)
    wl = library["wavelength"].values
    clean = conc @ library["absorptivity"].values
    noise = model.sigma_absorbance(clean) * rng.standard_normal((n, wl.size))
    return ms.make_spectra(clean + noise, wl)


def test_noise_weighted_fit_is_more_precise_under_heteroscedastic_noise(two_band_library):
    """Constant σ_T (k0 only) makes σ_A grow as 10^A: readings near the 1.9 AU peak are
    ~80× noisier than the baseline. Over 400 seeded replicates the weighted fit's spread
    is well below the unweighted one for both components (F-test p < 1e-6 and a variance
    ratio below 0.75; about 0.06 and 0.5 are expected, seeds move them by ±0.03), its
    mean is unbiased, and its reported uncertainty matches the observed spread.
    """
    model = NoiseModel(k0=2e-3)
    conc = np.array([0.95e-4, 0.6e-4])  # mol/L: peaks ≈ 1.9 and 0.9 AU at 1 cm
    spectra = _replicates(two_band_library, model, conc, 400, SEED)
    plain = ms.unmix(spectra, two_band_library, method="ols")
    weighted = ms.unmix(spectra, two_band_library, method="ols", weights="noise",
                        noise=model)
    assert weighted.attrs["weights"] == "noise"
    c_u = plain["concentration"].values
    c_w = weighted["concentration"].values
    var_u = c_u.var(axis=0, ddof=1)
    var_w = c_w.var(axis=0, ddof=1)
    ratio = var_w / var_u
    assert np.all(ratio < 0.75), ratio
    p = stats.f.sf(var_u / var_w, 399, 399)
    assert np.all(p < 1e-6)
    sd_w = np.sqrt(var_w)
    assert np.all(np.abs(c_w.mean(axis=0) - conc) < 4 * sd_w / np.sqrt(400))
    reported = weighted["std_uncertainty"].values.mean(axis=0)
    np.testing.assert_allclose(reported, sd_w, rtol=0.15)


def test_noise_weighted_fit_equals_plain_fit_when_noise_is_constant_in_absorbance(
        two_band_library):
    """Weights that do not vary (σ_A constant: here every reading near A = 0, where σ_A is
    flat to < 1 %) leave the least-squares solution practically unchanged.
    """
    model = NoiseModel(k0=1e-3)
    conc = np.array([1.0e-7, 1.0e-7])  # peaks ≈ 0.002 AU: σ_A(A) ≈ σ_A(0)
    spectra = _replicates(two_band_library, model, conc, 20, SEED + 1)
    plain = ms.unmix(spectra, two_band_library, method="ols")
    weighted = ms.unmix(spectra, two_band_library, method="ols", weights="noise",
                        noise=model)
    scale = np.abs(plain["concentration"].values).max()
    np.testing.assert_allclose(weighted["concentration"].values,
                               plain["concentration"].values, atol=0.02 * scale)


def test_noise_weights_without_a_noise_model_are_refused(two_band_library):
    """weights="noise" needs noise=...; the message lists the presets."""
    spectra = _replicates(two_band_library, NoiseModel(k0=1e-3), np.array([1e-5, 1e-5]), 2,
                          SEED)
    with pytest.raises(InputError, match=r"weights='noise' needs a noise model: give noise= "
                                         r"a preset name \(benchtop_double_beam"):
        ms.unmix(spectra, two_band_library, weights="noise")
    with pytest.raises(InputError, match=r"weights: 'sigma' is not one of 'none', 'noise'"):
        ms.unmix(spectra, two_band_library, weights="sigma")  # type: ignore[arg-type]


def test_unmix_records_the_noise_model_and_accepts_preset_names(two_band_library):
    """The noise model used is stored as JSON in the result; a preset name works too."""
    spectra = _replicates(two_band_library, NoiseModel(k0=1e-3), np.array([3e-5, 2e-5]), 3,
                          SEED)
    result = ms.unmix(spectra, two_band_library, weights="noise", noise="benchtop_double_beam")
    stored = json.loads(result.attrs["noise_model"])
    assert NoiseModel(**stored) == PRESETS["benchtop_double_beam"]
    assert ms.unmix(spectra, two_band_library).attrs["noise_model"] == ""

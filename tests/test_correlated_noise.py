"""Correlated noise (issue 14, build item 4): the inflated noise term covers, the
structured-residual flag does not blame an absorber for it, the engines agree.

Simulation-based calibration with the synthetic scenario of benchmarks/coverage_sim.py
(three invented components, 400–700 nm at 1 nm, σ = 0.002 AU, exact library): for an
honest standard uncertainty P(|z| < 2) lies in [0.90, 0.99] (issue 14's band; N(0, 1)
gives 0.954). Noise smoothed by a Gaussian of 4 nm FWHM makes neighbouring readings
correlated (ρ₁ ≈ 0.92); the fit's std_error, which assumes independent readings, is then
about 2.5× too small (P ≈ 0.57 before this change). All data synthetic and seeded.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from test_coverage_harness import cs  # benchmarks/coverage_sim.py, loaded once there

import mixsolve as ms
from mixsolve.errors import MixsolveWarning
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.trust import structure_lag

SEED = 14


@pytest.mark.parametrize("key", ["1", "4"])
def test_noise_term_covers_white_and_correlated_noise(key: str) -> None:
    """Exact library; white noise (condition 1) and noise correlated over 4 nm FWHM
    (condition 4): P(|z| < 2) in [0.90, 0.99] with std_uncertainty = u_noise."""
    cond = cs.condition(key)
    (row,) = cs.run_condition(cond, n_labs=4, n_samples=60, seed=SEED, fits=("defaults",))
    low, high = cs.TARGET_BAND
    assert low <= row.p_within_2u <= high, row
    assert abs(row.mean_z) < 3.0 / np.sqrt(row.n_results) * 1.5, row  # unbiased


def _flag_rate(fwhm_nm: float, absorber_peak_au: float, rng: np.random.Generator,
               n: int = 300) -> float:
    """Fraction of n spectra flagged structured_residual (exact library, NNLS)."""
    lib = cs.lab_library(cs.Condition("flag", "flag study", noise_fwhm_nm=fwhm_nm), rng)
    conc = cs.draw_samples(cs.condition("1"), rng, n)
    true_au = conc @ cs.absorptivity() / 1000.0 + absorber_peak_au * ABSORBER
    readings = true_au + cs.correlated_noise(rng, true_au.shape, fwhm_nm)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        result = ms.unmix(ms.make_spectra(readings, cs.WAVELENGTHS_NM), lib,
                          window=cs.WINDOW_NM, unit=cs.CONCENTRATION_UNIT)
    return float(np.mean(["structured_residual" in f for f in result["flags"].values]))


#: A fourth, unmodelled band (synthetic): centre 480 nm, SD 12 nm. Narrower than the
#: library's bands (SD 25–38 nm) so the fit cannot absorb it, wider than the 5 nm over
#: which noise may be correlated (trust.NOISE_SPAN_NM), as a real impurity band would be.
ABSORBER = np.exp(-0.5 * ((cs.WAVELENGTHS_NM - 480.0) / 12.0) ** 2)


def test_structured_residual_flag_rates() -> None:
    """False alarms: white noise and 4 nm noise, no absorber: at p = 0.001 per spectrum
    about 0.3 of 300 expected; at most 3 allowed (binomial P ≈ 0.004). Hits: the
    absorber at 10σ (0.02 AU peak) is flagged in ≥ 95 % of spectra under either noise, at
    5σ in ≥ 90 % under white noise (measured: 100 %, 100 %, 100 %; 5σ under 4 nm noise
    about 50 %, reported, not asserted)."""
    rng = np.random.default_rng(SEED)
    sigma = cs.SIGMA_AU
    assert _flag_rate(0.0, 0.0, rng) <= 3 / 300
    assert _flag_rate(4.0, 0.0, rng) <= 3 / 300
    assert _flag_rate(0.0, 10 * sigma, rng) >= 0.95
    assert _flag_rate(4.0, 10 * sigma, rng) >= 0.95
    assert _flag_rate(0.0, 5 * sigma, rng) >= 0.90


def test_structure_lag_counts_readings_within_five_nm() -> None:
    """s = ⌊5 nm / median spacing⌋: 5 at 1 nm, 1 at 5 nm, 0 above 5 nm or one reading."""
    assert structure_lag(np.arange(400.0, 701.0, 1.0)) == 5
    assert structure_lag(np.arange(400.0, 701.0, 5.0)) == 1
    assert structure_lag(np.arange(400.0, 701.0, 0.5)) == 10
    assert structure_lag(np.arange(400.0, 701.0, 10.0)) == 0
    assert structure_lag(np.array([500.0])) == 0
    gap = np.concatenate([np.arange(400.0, 450.0), np.arange(600.0, 650.0)])
    assert structure_lag(gap) == 5  # a skipped range leaves the median spacing


def _problem(rng: np.random.Generator, n: int, fwhm: float) -> tuple[np.ndarray, np.ndarray]:
    design = cs.absorptivity().T / 1000.0
    conc = rng.uniform(5.0, 15.0, (n, design.shape[1]))
    return design, conc @ design.T + cs.correlated_noise(rng, (n, design.shape[0]), fwhm)


@pytest.mark.parametrize("method", ["nnls", "ols"])
def test_engines_agree_on_the_lag_figures(method: str) -> None:
    """numpy and compiled engines: the same f, L and structure z to rounding (complete
    rows, exact zeros and missing readings, which both summarise in numpy)."""
    pytest.importorskip("numba")
    rng = np.random.default_rng(SEED + 1)
    design, spectra = _problem(rng, 200, 4.0)
    spectra[:3] = 0.0  # residual all zero: f = 1, L = 0, z NaN
    spectra[5, 40:60] = np.nan
    fits = [fit_spectra(spectra, design, 3, method, engine=engine, structure_lag=5)
            for engine in ("numpy", "compiled")]
    for name in ("noise_inflation", "noise_lags", "structure_z"):
        a, b = (getattr(f.summary, name) for f in fits)
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12, equal_nan=True,
                                   err_msg=name)
    summary = fits[0].summary
    assert np.all(summary.noise_inflation[:3] == 1) and np.all(summary.noise_lags[:3] == 0)
    assert np.all(np.isnan(summary.structure_z[:3]))
    assert np.all(summary.noise_inflation[3:] > 1.5)  # 4 nm noise: f ≈ 2.2–2.5
    assert np.isfinite(summary.noise_inflation[5])


def test_weighted_shift_and_missing_readings_are_inflated() -> None:
    """The weighted fit (f of √w·r), the shift fit and a spectrum with missing readings
    all carry f > 1.5 under 4 nm noise and u_noise = std_uncertainty."""
    rng = np.random.default_rng(SEED + 2)
    lib = cs.lab_library(cs.condition("4"), rng)
    conc = cs.draw_samples(cs.condition("4"), rng, 20)
    readings = cs.measure(conc @ cs.absorptivity() / 1000.0, cs.condition("4"), rng)
    readings[0, 100:110] = np.nan
    spectra = ms.make_spectra(readings, cs.WAVELENGTHS_NM)
    noise = cs.condition("4").noise_model()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        results = [ms.unmix(spectra, lib, window=(410.0, 690.0)),
                   ms.unmix(spectra, lib, window=(410.0, 690.0), noise=noise,
                            weights="noise"),
                   ms.unmix(spectra, lib, window=(410.0, 690.0), fit_shift=True)]
    for result in results:
        f = result["noise_inflation"].values
        assert np.all(f > 1.5), f
        np.testing.assert_array_equal(result["u_noise"].values,
                                      result["std_uncertainty"].values)

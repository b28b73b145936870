"""The correlated-noise inflation of unmix's noise term against statsmodels' HAC covariance.

Source: Newey & West 1987, "A simple, positive semi-definite, heteroskedasticity and
autocorrelation consistent covariance matrix", Econometrica 55:703–708: the long-run
variance Σ_{|l|≤L} w_l γ̂_l with Bartlett weights w_l = 1 − l/(L + 1), in the sandwich
(XᵀX)⁻¹ (Σ_l w_l Σᵢ xᵢuᵢuᵢ₊ₗxᵢ₊ₗᵀ) (XᵀX)⁻¹. statsmodels implements it as
``OLS(...).fit(cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": False})``
(``sandwich_covariance.cov_hac_simple``: autocovariance sums without a divisor, weights
``1 − l/(L + 1)``, no small-sample factor; ``use_correction=True`` multiplies by
n/(n − p)). mixsolve chooses L (Newey & West 1994) and uses the same L here, so both sides
estimate with one window. All spectra are synthetic (seeded).

How the definitions meet (mixsolve.solve.residuals.lag_figures): mixsolve's
u_noise² = s² f² diag((DᵀD)⁻¹) with s² = RSS/(n − p) and
f² = f²_NW (n − p)/(n − p(L + 1)), f²_NW = 1 + 2 Σ w_l ρ̂_l. For a regression on a
constant (p = 1, D = a column of ones) statsmodels' variance of the mean is f²_NW·RSS/n²,
so statsmodels = u_noise² (n − 1 − L)/n exactly, unless mixsolve clipped f at 1 (then
statsmodels' value is the smaller).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

import mixsolve as ms
from mixsolve.solve.residuals import lag_figures

sm = pytest.importorskip("statsmodels.api")

SEED = 1987
WL = np.arange(400.0, 701.0, 1.0)


def smoothed_noise(rng: np.random.Generator, shape: tuple[int, int], fwhm: float
                   ) -> np.ndarray:
    """Synthetic noise: white noise smoothed by a Gaussian of ``fwhm`` readings (σ ≈ 1)."""
    sd = fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    half = int(np.ceil(5 * sd))
    kernel = np.exp(-0.5 * (np.arange(-half, half + 1) / sd) ** 2)
    kernel /= np.sqrt(np.sum(kernel**2))
    white = rng.standard_normal((shape[0], shape[1] + 2 * half))
    return np.stack([np.convolve(row, kernel, mode="valid") for row in white])


def library(columns: np.ndarray, names: list[str]) -> xr.Dataset:
    table = xr.DataArray(columns, dims=("component", "wavelength"),
                         coords={"component": names, "wavelength": WL})
    return ms.import_absorptivities(table, "L/(mol*cm)", source="synthetic")


def spectra(values: np.ndarray) -> xr.DataArray:
    return ms.make_spectra(values, WL, pathlength_cm=1.0)


@pytest.mark.parametrize("fwhm", [0.0, 2.0, 4.0])
def test_mean_of_a_series_equals_statsmodels_hac(fwhm: float) -> None:
    """Regression on a constant (one flat component, OLS): unmix's u_noise gives
    statsmodels' HAC variance of the mean to rounding, statsmodels given mixsolve's
    window L (Newey & West 1987; the conversion in the module docstring)."""
    rng = np.random.default_rng(SEED)
    n_spec = 8
    noise = 0.002 * (rng.standard_normal((n_spec, WL.size)) if fwhm == 0
                     else smoothed_noise(rng, (n_spec, WL.size), fwhm))
    values = 0.5 + noise
    result = ms.unmix(spectra(values), library(np.ones((1, WL.size)), ["flat"]),
                      method="ols", unit="mol/L")
    u_noise = result["u_noise"].values[:, 0]
    residual = result["residual"].values
    n = WL.size
    f, window, _ = lag_figures(residual, 1)  # p = 1: the constant
    np.testing.assert_allclose(result["noise_inflation"].values, f, rtol=1e-12)
    for i in range(n_spec):
        lags = int(window[i])
        fit = sm.OLS(values[i], np.ones(n)).fit(
            cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False})
        var_mean = float(fit.cov_params()[0, 0])
        if f[i] > 1:
            assert u_noise[i] ** 2 * (n - 1 - lags) / n == pytest.approx(var_mean, rel=1e-10)
        else:  # clipped at 1: the Newey–West estimate lies below the independent one
            assert var_mean <= u_noise[i] ** 2 * (n - 1 - lags) / n * (1 + 1e-10)
    clipped = int(np.sum(f == 1))
    assert clipped < n_spec  # the exact comparison ran
    if fwhm >= 4:
        assert np.all(f > 1.5)  # strongly correlated noise is seen


def test_smooth_two_band_design_close_to_statsmodels_hac() -> None:
    """Two broad overlapping bands (synthetic), noise smoothed over 4 readings, OLS: u_noise
    against statsmodels' HAC standard errors (Newey & West 1987) with mixsolve's L.

    Not equal, by design: mixsolve uses the long-run-variance ratio of the whole residual,
    exact when the design is constant over L readings (then Σᵢ dᵢdᵢ₊ₗᵀ = DᵀD), where
    statsmodels forms the full sandwich from Σᵢ dᵢrᵢrᵢ₊ₗdᵢ₊ₗᵀ. They differ by how much
    the bands change over L ≈ 10 readings (band SDs 30–40 nm here) and, mostly, by the
    sampling noise of the sandwich, whose scores dᵢrᵢ live on the band alone and sum to
    exactly zero (Dᵀr = 0), which also biases it low (measured with 300 spectra: pooled
    variance ratio 1.03–1.10, single ratios 0.79–1.46 between the 5th and 95th
    percentiles). Compared on one footing: mixsolve's degrees-of-freedom factor
    n/(n − p(L + 1)) is taken out (statsmodels without correction divides RSS by n).
    Tolerances (judgement, from those numbers): the variance pooled over 60 spectra within
    −10 %/+20 % per component; the 5th and 95th percentiles of the single ratios of
    standard errors within 0.7–1.0 and 1.0–1.6.
    """
    rng = np.random.default_rng(SEED + 1)
    bands = np.vstack([np.exp(-0.5 * ((WL - 500.0) / 40.0) ** 2),
                       np.exp(-0.5 * ((WL - 580.0) / 30.0) ** 2)])
    n_spec, n, p = 60, WL.size, 2
    conc = rng.uniform(0.2, 1.0, (n_spec, p))
    values = conc @ bands + 0.002 * smoothed_noise(rng, (n_spec, n), 4.0)
    result = ms.unmix(spectra(values), library(bands, ["band_a", "band_b"]), method="ols",
                      unit="mol/L")
    u_noise = result["u_noise"].transpose("sample", "component").values
    _, window, _ = lag_figures(result["residual"].values, p)
    ours, theirs = [], []
    for i in range(n_spec):
        lags = int(window[i])
        fit = sm.OLS(values[i], bands.T).fit(
            cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False})
        ours.append(u_noise[i] ** 2 * (n - p * (lags + 1)) / n)
        theirs.append(fit.bse**2)
    ours, theirs = np.array(ours), np.array(theirs)
    pooled = ours.mean(axis=0) / theirs.mean(axis=0)
    assert np.all((pooled > 0.90) & (pooled < 1.20)), pooled
    low, high = np.percentile(np.sqrt(ours / theirs), [5, 95])
    assert 0.7 < low < 1.0 < high < 1.6, (low, high)

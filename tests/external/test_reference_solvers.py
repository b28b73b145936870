"""mixsolve's solvers against reference libraries and textbook formulas.

References (CHECKS.md, "Non-negative least squares"): ``numpy.linalg.lstsq`` for OLS,
``scipy.optimize.nnls`` (Lawson & Hanson 1974, ch. 23, active set) for NNLS and
``scipy.optimize.lsq_linear`` (bounded-variable least squares) for NNLS with free baseline
terms. These are reference implementations run inside the test, so no recalled number
is involved. The uncertainty is checked against the textbook OLS covariance s²(DᵀD)⁻¹,
s² = RSS/(n − p) (common practice), and the NNLS solution against the Karush–Kuhn–Tucker
conditions of min ½‖a − Dx‖² subject to x_k ≥ 0 as Lawson & Hanson state them (from memory;
they hold exactly for any true minimiser, so they check by internal consistency).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy.optimize import lsq_linear, nnls

import mixsolve as ms

SIZES = [(12, 2, 3), (40, 3, 5), (120, 5, 4), (301, 6, 2)]  # wavelengths, components, samples


def _problem(rng: np.random.Generator, n_wl: int, n_comp: int, n_samp: int,
             noise: float = 0.01) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Random well-posed problem: wavelengths (nm), ε (n_wl × n_comp), A (n_samp × n_wl)."""
    wl = np.linspace(400.0, 700.0, n_wl)
    centres = np.linspace(420.0, 680.0, n_comp) + rng.uniform(-10, 10, n_comp)
    widths = rng.uniform(30.0, 60.0, n_comp)
    eps = rng.uniform(0.5, 2.0, n_comp) * np.exp(
        -0.5 * ((wl[:, None] - centres[None, :]) / widths[None, :]) ** 2)
    eps = eps + rng.uniform(0.0, 0.05, eps.shape)  # keep it full rank at small n_wl
    conc = rng.uniform(-0.2, 1.0, (n_samp, n_comp))  # some negative: NNLS constraints bite
    absorbance = conc @ eps.T + noise * rng.standard_normal((n_samp, n_wl))
    return wl, eps, absorbance


def _library(wl: np.ndarray, eps: np.ndarray) -> xr.Dataset:
    names = [f"k{j}" for j in range(eps.shape[1])]
    return ms.import_absorptivities(pd.DataFrame(eps, index=wl, columns=names), "L/(g*cm)")


def _design(wl: np.ndarray, eps: np.ndarray, baseline: str) -> np.ndarray:
    """Design matrix built here from the documented definition of the baseline columns."""
    cols = [eps]
    if baseline in ("offset", "linear"):
        cols.append(np.ones((wl.size, 1)))
    if baseline == "linear":
        cols.append((wl - wl.mean())[:, None])
    return np.hstack(cols)


def _coefficients(result: xr.Dataset) -> np.ndarray:
    conc = result["concentration"].transpose("sample", "component").values
    base = result["baseline"].transpose("sample", "baseline_term").values
    return np.hstack([conc, base])


@pytest.mark.parametrize("baseline", ["none", "offset", "linear"])
@pytest.mark.parametrize("size", SIZES)
def test_ols_matches_numpy_lstsq(rng: np.random.Generator, size: tuple[int, int, int],
                                 baseline: str) -> None:
    """numpy.linalg.lstsq (reference library named in CHECKS.md, run here): OLS coefficients,
    including the offset and slope columns on the augmented matrix, agree to 1e-9."""
    wl, eps, absorbance = _problem(rng, *size)
    absorbance = absorbance + 0.03 + 2e-4 * (wl - 550.0)  # something for the baseline to fit
    design = _design(wl, eps, baseline)
    result = ms.unmix(ms.make_spectra(absorbance, wl), _library(wl, eps), method="ols",
                      baseline=baseline)
    want = np.linalg.lstsq(design, absorbance.T, rcond=None)[0].T
    got = _coefficients(result)
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-10 * np.abs(want).max())
    assert list(result["baseline_term"].values) == {
        "none": [], "offset": ["offset"], "linear": ["offset", "slope"]}[baseline]
    np.testing.assert_allclose(result["fitted"].values, want @ design.T, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("baseline", ["none", "offset", "linear"])
@pytest.mark.parametrize("size", SIZES)
def test_ols_std_uncertainty_textbook_formula(rng: np.random.Generator,
                                              size: tuple[int, int, int], baseline: str) -> None:
    """Textbook OLS covariance s²(DᵀD)⁻¹ with s² = RSS/(n − p) (common practice; stated in
    mixsolve's uncertainty basis): the reported noise term u_noise, before its
    correlated-noise inflation f (noise_inflation, checked against statsmodels in
    test_newey_west.py), is its diagonal's root / b."""
    wl, eps, absorbance = _problem(rng, *size)
    design = _design(wl, eps, baseline)
    b = 2.0
    result = ms.unmix(ms.make_spectra(absorbance, wl), _library(wl, eps), method="ols",
                      baseline=baseline, pathlength_cm=b)
    n, p = design.shape
    x = np.linalg.lstsq(design, absorbance.T, rcond=None)[0].T
    rss = np.sum((absorbance - x @ design.T) ** 2, axis=1)
    cov_unscaled = np.linalg.inv(design.T @ design)
    want = np.sqrt(np.outer(rss / (n - p), np.diag(cov_unscaled)))[:, : eps.shape[1]] / b
    got = (result["u_noise"] / result["noise_inflation"]).transpose("sample", "component")
    np.testing.assert_allclose(got.values, want, rtol=1e-7)
    np.testing.assert_array_equal(result["dof"].values, n - p)


@pytest.mark.parametrize("size", SIZES)
def test_nnls_matches_scipy_nnls(rng: np.random.Generator, size: tuple[int, int, int]) -> None:
    """scipy.optimize.nnls (Lawson & Hanson active set; reference library named in
    CHECKS.md, run here): same concentrations and the same components held at zero."""
    wl, eps, absorbance = _problem(rng, *size)
    result = ms.unmix(ms.make_spectra(absorbance, wl), _library(wl, eps), method="nnls")
    got = result["concentration"].transpose("sample", "component").values
    want = np.vstack([nnls(eps, a)[0] for a in absorbance])
    np.testing.assert_allclose(got, want, rtol=1e-8, atol=1e-10)
    assert np.all(got >= 0)
    np.testing.assert_array_equal(result["at_zero"].transpose("sample", "component").values,
                                  want == 0)


@pytest.mark.parametrize("baseline", ["offset", "linear"])
@pytest.mark.parametrize("size", SIZES)
def test_nnls_free_baseline_matches_lsq_linear(rng: np.random.Generator,
                                               size: tuple[int, int, int],
                                               baseline: str) -> None:
    """scipy.optimize.lsq_linear with bounds 0 (components) and −inf (baseline terms), BVLS
    (reference library named in CHECKS.md, run here): NNLS with a free baseline gives the
    same minimiser."""
    wl, eps, absorbance = _problem(rng, *size)
    absorbance = absorbance - 0.05 + 3e-4 * (wl - 550.0)
    design = _design(wl, eps, baseline)
    n_comp = eps.shape[1]
    lower = np.r_[np.zeros(n_comp), np.full(design.shape[1] - n_comp, -np.inf)]
    result = ms.unmix(ms.make_spectra(absorbance, wl), _library(wl, eps), method="nnls",
                      baseline=baseline)
    got = _coefficients(result)
    want = np.vstack([lsq_linear(design, a, bounds=(lower, np.inf), method="bvls",
                                 tol=1e-14).x for a in absorbance])
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-8)
    # Same objective value: neither solution is better than the other.
    rss_got = np.sum((absorbance - got @ design.T) ** 2, axis=1)
    rss_want = np.sum((absorbance - want @ design.T) ** 2, axis=1)
    np.testing.assert_allclose(rss_got, rss_want, rtol=1e-9)


@pytest.mark.parametrize("baseline", ["none", "offset", "linear"])
@pytest.mark.parametrize("size", SIZES)
def test_nnls_kkt_conditions(rng: np.random.Generator, size: tuple[int, int, int],
                             baseline: str) -> None:
    """KKT conditions of NNLS (Lawson & Hanson 1974, ch. 23; from memory): with
    g = Dᵀ(Dx − a), g_k ≥ −tol where x_k = 0, g_k ≈ 0 where x_k > 0 and for free terms."""
    wl, eps, absorbance = _problem(rng, *size)
    design = _design(wl, eps, baseline)
    n_comp = eps.shape[1]
    result = ms.unmix(ms.make_spectra(absorbance, wl), _library(wl, eps), method="nnls",
                      baseline=baseline)
    x = _coefficients(result)
    assert np.all(x[:, :n_comp] >= 0)
    grad = (x @ design.T - absorbance) @ design  # (samples, terms)
    tol = 1e-8 * np.linalg.norm(design, axis=0) * np.linalg.norm(absorbance, axis=1)[:, None]
    zero = np.zeros_like(x, dtype=bool)
    zero[:, :n_comp] = x[:, :n_comp] == 0
    assert zero.any() or baseline != "none", "the problems should hold some active bounds"
    assert np.all(grad[zero] >= -tol[zero])
    assert np.all(np.abs(grad[~zero]) <= tol[~zero])


def test_nnls_equals_ols_when_unconstrained(rng: np.random.Generator) -> None:
    """Lawson & Hanson 1974, ch. 23 (from memory; follows from convexity): when the OLS
    solution is positive, NNLS returns it."""
    wl, eps, _ = _problem(rng, 60, 3, 1)
    conc = rng.uniform(0.3, 1.0, (6, 3))
    absorbance = conc @ eps.T + 0.002 * rng.standard_normal((6, wl.size))
    spectra, lib = ms.make_spectra(absorbance, wl), _library(wl, eps)
    ols = ms.unmix(spectra, lib, method="ols")["concentration"].values
    nn = ms.unmix(spectra, lib, method="nnls")["concentration"].values
    assert np.all(ols > 0)
    np.testing.assert_allclose(nn, ols, rtol=1e-9)

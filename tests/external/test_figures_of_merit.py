"""Net-analyte-signal figures of merit and conditioning against independent numpy code.

Sources: Lorber 1986, Anal. Chem. 58:1167, and Olivieri et al. 2006, "Uncertainty
estimation and figures of merit for multivariate calibration" (IUPAC Technical Report),
Pure Appl. Chem. 78:633–661 — definitions **seen** (citation and abstract, CHECKS.md):
SENₖ = ‖NASₖ‖, the part of kₖ orthogonal to the other columns; SELₖ = SENₖ/‖kₖ‖;
σ(cₖ) ≈ σ_A/SENₖ; LOD ≈ 3.3·σ_A/SENₖ; LOQ ≈ 10·σ_A/SENₖ. The test computes the NAS by
projection (QR or lstsq) and compares it with mixsolve's 1/‖row k of K⁺‖, an identity
that holds exactly. Condition numbers are checked against ``numpy.linalg.cond`` on
unit-column-scaled matrices and, for two columns, the closed form √((1 + ρ)/(1 − ρ))
(ρ the cosine between them; linear algebra, **common practice**). All spectra are
invented.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

import mixsolve as ms
from mixsolve.wavelengths.check import check_wavelengths
from mixsolve.wavelengths.merit import (
    net_analyte_sensitivity,
    overlap_matrix,
    scaled_condition_number,
)

SEED = 1986


def make_library(eps: np.ndarray, wl: np.ndarray, names: list[str]) -> xr.Dataset:
    """Library (L/(mol*cm)) from a (component, wavelength) array."""
    da = xr.DataArray(eps, dims=("component", "wavelength"),
                      coords={"component": names, "wavelength": wl})
    return ms.import_absorptivities(da, "L/(mol*cm)")


def nas_norm_qr(k: np.ndarray, col: int) -> float:
    """‖part of column ``col`` orthogonal to the other columns‖, by QR projection."""
    others = np.delete(k, col, axis=1)
    q, _ = np.linalg.qr(others)
    kk = k[:, col]
    return float(np.linalg.norm(kk - q @ (q.T @ kk)))


def nas_norm_lstsq(k: np.ndarray, col: int) -> float:
    """Same, projecting with the least-squares fit of column ``col`` on the others."""
    others = np.delete(k, col, axis=1)
    coef = np.linalg.lstsq(others, k[:, col], rcond=None)[0]
    return float(np.linalg.norm(k[:, col] - others @ coef))


@pytest.fixture
def overlapping() -> tuple[np.ndarray, np.ndarray]:
    """Three strongly overlapping invented Gaussian bands, 400-700 nm every 2 nm."""
    wl = np.arange(400.0, 701.0, 2.0)
    eps = np.vstack([1.2e4 * np.exp(-0.5 * ((wl - c) / w) ** 2)
                     for c, w in ((470.0, 40.0), (520.0, 45.0), (600.0, 50.0))])
    return eps, wl


def test_sen_is_the_norm_of_the_net_analyte_signal_random_matrix():
    """Lorber 1986 / Olivieri et al. 2006 (seen): SEN = ‖NAS‖ = 1/‖row of K⁺‖.

    A seeded random 25 × 4 matrix; NAS by QR and by lstsq, independently of mixsolve.
    """
    k = np.random.default_rng(SEED).normal(size=(25, 4)) + 0.5
    sen = net_analyte_sensitivity(k)
    for col in range(4):
        assert sen[col] == pytest.approx(nas_norm_qr(k, col), rel=1e-10)
        assert sen[col] == pytest.approx(nas_norm_lstsq(k, col), rel=1e-10)
        assert sen[col] <= np.linalg.norm(k[:, col]) * (1 + 1e-12)


def test_sen_selectivity_lod_loq_of_an_overlapping_library(overlapping):
    """check_wavelengths against hand formulas (Olivieri et al. 2006, definitions seen):
    SEN by QR projection, SEL = SEN/‖k‖, u = σ/SEN, LOD = 3.3σ/SEN, LOQ = 10σ/SEN,
    γ = SEN/σ, for σ_A = 0.004 AU at 1 cm over a 440-640 nm window.
    """
    eps, wl = overlapping
    lib = make_library(eps, wl, ["a", "b", "c"])
    sigma = 0.004
    check = check_wavelengths(lib, window=(440, 640), noise=sigma)
    used = (wl >= 440) & (wl <= 640)
    k = eps[:, used].T
    assert check.attrs["wavelengths_nm"] == list(wl[used])
    for i, name in enumerate(["a", "b", "c"]):
        sen = nas_norm_qr(k, i)
        fig = check.sel(component=name)
        assert float(fig["sensitivity"]) == pytest.approx(sen, rel=1e-9)
        assert float(fig["selectivity"]) == pytest.approx(sen / np.linalg.norm(k[:, i]),
                                                          rel=1e-9)
        assert 0 < float(fig["selectivity"]) < 1
        assert float(fig["predicted_uncertainty"]) == pytest.approx(sigma / sen, rel=1e-9)
        assert float(fig["lod"]) == pytest.approx(3.3 * sigma / sen, rel=1e-9)
        assert float(fig["loq"]) == pytest.approx(10.0 * sigma / sen, rel=1e-9)
        assert float(fig["analytical_sensitivity"]) == pytest.approx(sen / sigma, rel=1e-9)
    assert check["sensitivity"].attrs["units"] == "AU per mol/L at 1 cm"
    assert check["lod"].attrs["units"] == "mol/L"


def test_two_component_selectivity_is_sqrt_one_minus_cosine_squared():
    """For two columns at cosine ρ the NAS of each is ‖k‖·√(1 − ρ²), so SEL = √(1 − ρ²)
    for both (geometry of the NAS definition, Lorber 1986, seen).
    """
    wl = np.arange(400.0, 701.0, 5.0)
    eps = np.vstack([1e4 * np.exp(-0.5 * ((wl - 500) / 40) ** 2),
                     2e4 * np.exp(-0.5 * ((wl - 540) / 40) ** 2)])
    check = check_wavelengths(make_library(eps, wl, ["x", "y"]))
    rho = eps[0] @ eps[1] / (np.linalg.norm(eps[0]) * np.linalg.norm(eps[1]))
    np.testing.assert_allclose(check["selectivity"].values, np.sqrt(1 - rho**2), rtol=1e-9)
    assert float(check["overlap"].sel(component="x", other="y")) == pytest.approx(rho,
                                                                                  rel=1e-12)


def test_orthogonal_components_have_selectivity_one():
    """Bands on disjoint wavelength ranges (exact zeros elsewhere): NAS = k, SEL = 1,
    condition number 1, overlap the identity (Lorber 1986 / Olivieri et al. 2006, seen).
    """
    wl = np.arange(400.0, 701.0, 10.0)
    eps = np.zeros((3, wl.size))
    for row, (lo, hi) in enumerate(((400, 450), (500, 550), (600, 650))):
        inside = (wl >= lo) & (wl <= hi)
        eps[row, inside] = 1e3 * (1 + np.arange(inside.sum()))
    check = check_wavelengths(make_library(eps, wl, ["u", "v", "w"]), noise=0.002)
    np.testing.assert_allclose(check["selectivity"].values, 1.0, rtol=1e-12)
    np.testing.assert_allclose(check["sensitivity"].values, np.linalg.norm(eps, axis=1),
                               rtol=1e-12)
    assert check.attrs["condition_number"] == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(check["overlap"].values, np.eye(3), atol=1e-15)


@pytest.mark.parametrize("matrix", [
    [[1.0, 0.2], [0.3, 1.0]],
    [[5000.0, 4800.0], [1000.0, 1100.0]],
    [[1.0, 0.0, 0.5], [0.2, 1.0, 0.5], [0.0, 0.3, 1.0]],
    [[12000.0, 300.0], [4000.0, 9000.0], [100.0, 2000.0]],
])
def test_condition_number_of_hand_built_systems(matrix):
    """2-norm condition number with unit-length columns, against numpy.linalg.cond (the
    reference routine; the scaling is the issue's definition, common practice).

    Hand-built systems (wavelengths × components); through check_wavelengths on a library
    holding exactly those wavelengths as well as through the merit function.
    """
    k = np.asarray(matrix)
    expected = np.linalg.cond(k / np.linalg.norm(k, axis=0))
    assert scaled_condition_number(k) == pytest.approx(expected, rel=1e-12)
    wl = 500.0 + 20.0 * np.arange(k.shape[0])
    names = [f"c{i}" for i in range(k.shape[1])]
    check = check_wavelengths(make_library(k.T, wl, names))
    assert check.attrs["condition_number"] == pytest.approx(expected, rel=1e-12)


def test_two_column_condition_number_has_the_closed_form():
    """Unit columns at cosine ρ have singular values √(1 ± ρ): κ = √((1 + ρ)/(1 − ρ))
    (linear algebra, common practice; holds by construction).
    """
    k = np.array([[3.0, 1.0], [1.0, 2.0], [0.5, 2.5]])
    unit = k / np.linalg.norm(k, axis=0)
    rho = unit[:, 0] @ unit[:, 1]
    assert scaled_condition_number(k) == pytest.approx(np.sqrt((1 + rho) / (1 - rho)),
                                                       rel=1e-12)


def test_condition_number_does_not_depend_on_column_scale():
    """Scaling a component (mg vs g, ε ×1000) leaves the scaled condition number alone
    (internal consistency of the unit-column definition, common practice).
    """
    k = np.array([[1.0, 0.4], [0.2, 1.0], [0.6, 0.6]])
    assert scaled_condition_number(k * [1e4, 1e-2]) == pytest.approx(
        scaled_condition_number(k), rel=1e-12)


def test_overlap_is_cosine_similarity(overlapping):
    """overlap[i, j] = kᵢ·kⱼ/(‖kᵢ‖‖kⱼ‖), computed here with numpy (cosine similarity,
    the issue's definition; common practice).
    """
    eps, _ = overlapping
    k = eps.T
    expected = np.array([[k[:, i] @ k[:, j] / (np.linalg.norm(k[:, i]) * np.linalg.norm(k[:, j]))
                          for j in range(3)] for i in range(3)])
    np.testing.assert_allclose(overlap_matrix(k), expected, rtol=1e-12)


def test_sen_with_a_baseline_column_is_orthogonal_to_the_offset_too(overlapping):
    """With an offset term the NAS must be orthogonal to the constant column as well, and
    the condition number counts that column (definitions as above, seen).
    """
    eps, wl = overlapping
    check = check_wavelengths(make_library(eps, wl, ["a", "b", "c"]), baseline="offset")
    design = np.column_stack([eps.T, np.ones(wl.size)])
    for i in range(3):
        assert float(check["sensitivity"].values[i]) == pytest.approx(nas_norm_qr(design, i),
                                                                      rel=1e-9)
    assert check.attrs["condition_number"] == pytest.approx(
        np.linalg.cond(design / np.linalg.norm(design, axis=0)), rel=1e-10)


def test_predicted_uncertainty_matches_the_spread_of_ols_fits(overlapping):
    """σ(cₖ) ≈ σ_A/SENₖ (Olivieri et al. 2006, seen) is the OLS standard error for white
    noise of constant σ_A; 2000 seeded replicates agree with it within 8 % (the sampling
    error of an SD from 2000 draws is ≈ 1.6 %).
    """
    eps, wl = overlapping
    lib = make_library(eps, wl, ["a", "b", "c"])
    sigma = 0.003
    check = check_wavelengths(lib, noise=sigma)
    rng = np.random.default_rng(SEED)
    conc = np.array([3e-5, 2e-5, 4e-5])
    clean = conc @ eps
    spectra = ms.make_spectra(clean + sigma * rng.standard_normal((2000, wl.size)), wl)
    result = ms.unmix(spectra, lib, method="ols")
    sd = result["concentration"].std("sample", ddof=1).values
    np.testing.assert_allclose(sd, check["predicted_uncertainty"].values, rtol=0.08)

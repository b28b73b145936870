"""PLS calibration checked against outside sources (see ../shared/CHECKS.md for the marks).

- Predictions: scikit-learn's ``PLSRegression`` (the reference implementation mixsolve
  composes) fitted here on data preprocessed here with ``scipy.signal.savgol_filter``.
- Hotelling T² limit for a new observation: a(n − 1)(n + 1)/(n(n − a)) · F(a, n − a),
  Tracy, Young & Mason 1992, J. Qual. Technol. 24:88 (from memory), with the F quantile of
  ``scipy.stats.f``, and checked by simulation, which needs no recalled constant.
- Q limit: Jackson & Mudholkar 1979, Technometrics 21:341 (formula from memory), recomputed
  here from eigenvalues found independently, against the exact chi-square case and against
  simulated quadratic forms.
- Additivity: Beer–Lambert for non-interacting absorbers, ASTM E169 §3 (seen): where it
  holds, CLS is the right model; where a band moves with another component's
  concentration, it fails and inverse calibration (PLS) does not (common practice).

All data are invented and seeded.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from scipy import stats
from scipy.signal import savgol_filter
from sklearn.cross_decomposition import PLSRegression

import mixsolve as ms
from mixsolve.pls.limits import q_limit, t2_limit

WL = np.arange(420.0, 681.0, 4.0)
BANDS = {"amber": (450.0, 22.0, 0.10), "rose": (525.0, 25.0, 0.08), "teal": (610.0, 28.0, 0.11)}
NAMES = list(BANDS)


def mixtures(rng: np.random.Generator, n: int, shift_per_rose: float = 0.0,
             noise_au: float = 0.002) -> tuple[xr.DataArray, xr.DataArray]:
    """Invented mixtures (mg/L); teal's band moves ``shift_per_rose`` nm per mg/L of rose."""
    conc = rng.uniform([1.0, 0.5, 0.5], [10.0, 10.0, 10.0], (n, 3))
    absorbance = np.zeros((n, WL.size))
    for k, (centre, width, height) in enumerate(BANDS.values()):
        moved = centre + (shift_per_rose * conc[:, [1]] if k == 2 else 0.0)
        absorbance += conc[:, [k]] * height * np.exp(-0.5 * ((WL - moved) / width) ** 2)
    absorbance += noise_au * rng.standard_normal(absorbance.shape)
    names = [f"m{i:02d}" for i in range(n)]
    reference = xr.DataArray(conc, dims=("sample", "component"),
                             coords={"sample": names, "component": NAMES},
                             attrs={"unit": "mg/L"})
    return ms.make_spectra(absorbance, WL, names), reference


@pytest.fixture
def data() -> tuple[xr.DataArray, xr.DataArray, xr.DataArray]:
    """Calibration (20 mixtures) and test (6 mixtures) spectra with the calibration reference."""
    rng = np.random.default_rng(20261204)
    cal, ref = mixtures(rng, 20)
    new, _ = mixtures(rng, 6)
    return cal, ref, new


@pytest.mark.parametrize(("scale", "derivative"), [
    ("none", None), ("autoscale", None), ("none", 7), ("autoscale", 9)])
@pytest.mark.parametrize("n_latent", [1, 3, 5])
def test_pls2_predictions_equal_scikit_learn(data, scale, derivative, n_latent) -> None:
    """Source: scikit-learn ``PLSRegression`` (seen: its documented fit/predict). With
    autoscaling, mixsolve's preprocessing is exactly ``PLSRegression(scale=True)``; without,
    Y is still divided by its standard deviation (documented) and X only centred."""
    cal, ref, new = data
    model = ms.calibrate(cal, ref, latent=n_latent, mode="pls2", scale=scale,
                         derivative=derivative, folds=4, max_latent=6)
    ours = ms.predict(new, model)["concentration"].transpose("sample", "component").values

    def prep(a: xr.DataArray) -> np.ndarray:
        if derivative is None:
            return a.values
        return savgol_filter(a.values, derivative, 2, deriv=1, delta=4.0, axis=-1)

    x, y = prep(cal), ref.values
    if scale == "autoscale":
        reference = PLSRegression(n_latent, scale=True).fit(x, y).predict(prep(new))
    else:
        sy = y.std(axis=0, ddof=1)
        reference = PLSRegression(n_latent, scale=False).fit(x, y / sy).predict(prep(new)) * sy
    np.testing.assert_allclose(ours, reference, rtol=1e-8, atol=1e-10)


@pytest.mark.parametrize("scale", ["none", "autoscale"])
def test_pls1_predictions_equal_scikit_learn(data, scale) -> None:
    """Source: scikit-learn ``PLSRegression`` with one target (seen). For PLS1 the scaling
    of Y has no effect, so each component equals a plain ``PLSRegression`` of its own."""
    cal, ref, new = data
    model = ms.calibrate(cal, ref, latent=3, mode="pls1", scale=scale, folds=4, max_latent=6)
    ours = ms.predict(new, model)["concentration"].transpose("sample", "component").values
    for k in range(3):
        pls = PLSRegression(3, scale=scale == "autoscale").fit(cal.values, ref.values[:, k])
        np.testing.assert_allclose(ours[:, k], pls.predict(new.values).ravel(), rtol=1e-8)


def test_t2_limit_is_the_f_distribution_formula() -> None:
    """Source: Tracy, Young & Mason 1992 (from memory): the normal-theory T² limit for a new
    observation, a(n − 1)(n + 1)/(n(n − a)) · F(α; a, n − a), F from scipy.stats. Models
    no longer use it (their limit comes from cross-validated T², checked against
    scikit-learn fits in tests/test_pls_limits.py); it stays as the reference form."""
    n, a = 20, 3
    for conf in (0.95, 0.99):
        expected = a * (n - 1) * (n + 1) / (n * (n - a)) * stats.f.ppf(conf, a, n - a)
        assert t2_limit(a, n, conf) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(("n", "a"), [(12, 2), (30, 4)])
def test_t2_limit_holds_its_confidence_by_simulation(n, a) -> None:
    """Source: none recalled; by construction. Scores of n calibration samples and of one
    new sample drawn from one normal distribution: the new sample's T² (with the
    calibration's mean and covariance) exceeds the 95 % / 99 % limits 5 % / 1 % of the
    time, within binomial error."""
    rng = np.random.default_rng(7)
    reps = 20000
    scores = rng.standard_normal((reps, n, a))
    new = rng.standard_normal((reps, a))
    centred = scores - scores.mean(axis=1, keepdims=True)
    cov = np.einsum("rni,rnj->rij", centred, centred) / (n - 1)
    diff = new - scores.mean(axis=1)
    t2 = np.einsum("ri,rij,rj->r", diff, np.linalg.inv(cov), diff)
    for conf in (0.95, 0.99):
        rate = np.mean(t2 > t2_limit(a, n, conf))
        assert rate == pytest.approx(1 - conf, abs=4 * np.sqrt(conf * (1 - conf) / reps))


def _jackson_mudholkar(eigenvalues: np.ndarray, conf: float) -> float:
    """The Q limit written out again here (Jackson & Mudholkar 1979, from memory)."""
    th = [np.sum(eigenvalues**i) for i in (1, 2, 3)]
    h0 = 1 - 2 * th[0] * th[2] / (3 * th[1] ** 2)
    ca = stats.norm.ppf(conf)
    return th[0] * (ca * np.sqrt(2 * th[1] * h0**2) / th[0] + 1
                    + th[1] * h0 * (h0 - 1) / th[0] ** 2) ** (1 / h0)


def test_q_limit_from_independently_computed_residual_eigenvalues(data) -> None:
    """Source: Jackson & Mudholkar 1979, Technometrics 21:341 (formula from memory). The
    eigenvalues are those of the residuals of new samples, estimated from cross-validated
    residuals (docs/calibration.md); they are found here with numpy.linalg.eigvalsh from
    scikit-learn fits on each fold's training set, not from mixsolve's."""
    cal, ref, _ = data
    model = ms.calibrate(cal, ref, latent=3, mode="pls2", folds=4, max_latent=6)
    x, y, fold = cal.values, ref.values, model["fold"].values
    cv_residual = np.empty_like(x)
    for f in range(4):
        train, test = fold != f, fold == f
        mean = x[train].mean(axis=0)
        pls = PLSRegression(3, scale=False).fit(x[train] - mean,
                                                y[train] / y[train].std(axis=0, ddof=1))
        scores = pls.transform(x[test] - mean)
        cv_residual[test] = x[test] - mean - scores @ pls.x_loadings_.T
    lam = np.linalg.eigvalsh(cv_residual.T @ cv_residual / len(x))
    lam = lam[lam > lam.max() * 1e-12]
    for j, conf in enumerate((0.95, 0.99)):
        assert float(model["q_limit"].values[0, j]) == pytest.approx(
            _jackson_mudholkar(lam, conf), rel=1e-6)
    assert json.loads(model["q_limit"].attrs["method"]) == {"all": "jackson-mudholkar"}
    np.testing.assert_allclose(model["cv_q"].values[:, 0], np.sum(cv_residual**2, axis=1),
                               rtol=1e-8)
    centred = x - x.mean(axis=0)
    pls = PLSRegression(3, scale=False).fit(centred, y / y.std(axis=0, ddof=1))
    np.testing.assert_allclose(model["calibration_q"].values[:, 0],
                               np.sum((centred - pls.x_scores_ @ pls.x_loadings_.T) ** 2,
                                      axis=1), rtol=1e-8)


@pytest.mark.parametrize("shift_per_rose", [0.0, 1.5])
def test_q_limit_is_not_too_tight_for_new_samples(shift_per_rose) -> None:
    """Source: none recalled; by construction. New mixtures drawn like the 30 calibration
    mixtures may exceed the 95 % and 99 % Q limits at most about 5 % and 1 % of the time
    (averaged over three calibrations, with room for limits estimated from 30 mixtures).
    Limits from the residuals of the fit itself fail this (with the moving band, 25 % of
    new mixtures above the 95 % limit and 7 % above the 99 % one: the fit absorbs part of
    its own mixtures' noise); limits from cross-validated residuals pass. They are
    somewhat conservative when there are more wavelengths than mixtures (the estimated
    residual eigenvalues spread more than the true ones), so the limit must also stay
    within twice the simulated quantile, lest the check lose its power."""
    rates, ratios = [], []
    for seed in range(3):
        rng = np.random.default_rng(100 + seed)
        cal, ref = mixtures(rng, 30, shift_per_rose=shift_per_rose)
        new, _ = mixtures(rng, 1500, shift_per_rose=shift_per_rose)
        result = ms.predict(new, ms.calibrate(cal, ref, mode="pls2", max_latent=8))
        q = result["q_residual"].values[:, 0]
        limits = [float(result[f"q_limit_{c}"].values[0]) for c in (95, 99)]
        rates.append([np.mean(q > limits[0]), np.mean(q > limits[1])])
        ratios.append([limits[0] / np.quantile(q, 0.95), limits[1] / np.quantile(q, 0.99)])
    rate_95, rate_99 = np.mean(rates, axis=0)
    assert rate_95 <= 0.07, rates
    assert rate_99 <= 0.02, rates
    assert np.max(ratios) < 2.0, ratios


@pytest.mark.parametrize("m", [3, 10, 30])
def test_q_limit_matches_chi_square_for_equal_eigenvalues(m) -> None:
    """Source: exact case (no recalled constant): with m equal eigenvalues λ, Q/λ is χ²(m),
    so the limit must be close to λ·χ²(α; m) (the approximation is good to < 1 %)."""
    for conf in (0.95, 0.99):
        limit, method = q_limit(np.full(m, 0.25), conf)
        assert method == "jackson-mudholkar"
        assert limit == pytest.approx(0.25 * stats.chi2.ppf(conf, m), rel=0.01)


@pytest.mark.parametrize(("eigenvalues", "method", "tolerance"), [
    (np.geomspace(1.0, 1e-3, 40), "jackson-mudholkar", 0.04),
    (np.r_[1.0, np.full(100, 0.1)], "box", 0.08),
])
def test_q_limit_against_simulated_quadratic_forms(eigenvalues, method, tolerance) -> None:
    """Source: none recalled; by construction. Q = Σ λⱼ zⱼ² with standard normal zⱼ; the
    limit must match the simulated quantile within the stated tolerance. The second case
    (one large eigenvalue among many small ones) makes h₀ ≤ 0, where the fallback applies."""
    rng = np.random.default_rng(11)
    q = (rng.standard_normal((100000, eigenvalues.size)) ** 2) @ eigenvalues
    for conf in (0.95, 0.99):
        limit, used = q_limit(eigenvalues, conf)
        assert used == method
        assert limit == pytest.approx(np.quantile(q, conf), rel=tolerance)


def test_pls_beats_cls_when_a_band_moves_with_another_component() -> None:
    """Source: ASTM E169 §3 (seen) states additivity for non-interacting components; here the
    teal band moves 1.5 nm per mg/L of rose (an invented interaction), so CLS, which
    assumes fixed absorptivities, must lose to PLS on the same folds (common practice)."""
    spectra, ref = mixtures(np.random.default_rng(3), 30, shift_per_rose=1.5)
    model = ms.calibrate(spectra, ref, compare=True, folds=10, max_latent=8)
    ratio = model["cls_rmsecv"].values / model["rmsecv"].values
    assert np.all(ratio > 2.0), ratio


def test_cls_is_at_least_as_good_when_the_spectra_are_additive() -> None:
    """Source: ASTM E169 §3 (seen): for additive spectra, CLS is the model that holds, so its
    cross-validated error is no worse than PLS's on the same folds, within 10 % per
    component for the noise of 30 mixtures (and 5 % on average)."""
    spectra, ref = mixtures(np.random.default_rng(3), 30)
    model = ms.calibrate(spectra, ref, compare=True, folds=10, max_latent=8)
    ratio = model["cls_rmsecv"].values / model["rmsecv"].values
    assert np.all(ratio <= 1.10), ratio
    assert ratio.mean() <= 1.05, ratio

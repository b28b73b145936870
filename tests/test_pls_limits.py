"""PLS Hotelling T² limits that hold on new samples like the calibration mixtures.

The simulation is synthetic (invented bands from ``helpers_pls``, seeded compositions and
noise); nothing here is measured. Checks against sources outside mixsolve: scipy.stats
(chi2, F, beta), scikit-learn's ``PLSRegression`` for the cross-validated T², and the
binomial standard deviation of a count of exceedances.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from helpers_pls import simulate
from scipy import stats
from sklearn.cross_decomposition import PLSRegression

import mixsolve as ms
from mixsolve.errors import FileFormatError
from mixsolve.pls.limits import cv_false_alarm, cv_limit, t2_limit
from mixsolve.report.calibration_text import format_calibration

WL = np.arange(420.0, 681.0, 6.0)


def _skewed(rng: np.random.Generator, n: int) -> np.ndarray:
    """Synthetic compositions (mg/L) of three absorbers, log-normal (σ = 0.35 in log units):
    skewed like real batches, so the PLS scores are not normal."""
    return rng.lognormal(np.log(4.0), 0.35, (n, 3))


def _calibrate(rng: np.random.Generator, n: int) -> tuple[xr.Dataset, np.ndarray, np.ndarray]:
    """A PLS1 model of amber with rose and teal as unlisted absorbers that vary: 3 latent
    variables, 10 contiguous folds. Returns the model, its spectra and compositions."""
    conc, absorbance = simulate(rng, n, conc=_skewed(rng, n), wl=WL)
    spectra = ms.make_spectra(absorbance, WL, [f"cal_{i}" for i in range(n)])
    reference = xr.DataArray(conc[:, :1], dims=("sample", "component"),
                             coords={"sample": spectra["sample"].values,
                                     "component": ["amber"]}, attrs={"unit": "mg/L"})
    model = ms.calibrate(spectra, reference, latent=3, max_latent=3, folds=10)
    return model, absorbance, conc


def test_t2_false_alarm_rate_is_near_nominal_on_new_samples_like_the_calibration() -> None:
    """Synthetic: 40 calibrations of 40 mixtures, each followed by 100 new mixtures drawn from
    the same skewed distribution (seed 14). The share of new mixtures above the 95 % and 99 %
    T² limits must be within 3 standard errors of 5 % and 1 %.

    The count pooled over R calibrations is a sum of R independent counts; its standard
    error is estimated from their spread, sd(rate per calibration)/√R, which holds the
    binomial SD of each count, √(n_new·α(1 − α)) (common practice), plus the spread of the
    limits between calibrations; never less than the binomial SD of the pooled count,
    √(α(1 − α)/(R·n_new)). The normal-theory limit a(n² − 1)/(n(n − a))·F(a, n − a)
    (Tracy, Young & Mason 1992, from memory), which mixsolve used before, fails this: about
    7 % and 3 % (skewed scores have heavier tails than normal ones).
    """
    rng = np.random.default_rng(14)
    reps, n_cal, n_new = 40, 40, 100
    rates = np.empty((reps, 2))
    for r in range(reps):
        model, _, _ = _calibrate(rng, n_cal)
        _, absorbance = simulate(rng, n_new, conc=_skewed(rng, n_new), wl=WL)
        result = ms.predict(ms.make_spectra(absorbance, WL, [f"new_{i}" for i in range(n_new)]),
                            model)
        t2 = result["t2"].values[:, 0]
        rates[r] = [np.mean(t2 > float(result[f"t2_limit_{c}"].values[0])) for c in (95, 99)]
    for j, alpha in enumerate((0.05, 0.01)):
        se = max(rates[:, j].std(ddof=1) / np.sqrt(reps),
                 np.sqrt(alpha * (1 - alpha) / (reps * n_new)))
        assert abs(rates[:, j].mean() - alpha) <= 3 * se, (alpha, rates[:, j].mean(), se)


@pytest.mark.parametrize("dof", [2, 5, 12])
def test_cv_limit_is_the_chi_square_quantile_for_chi_square_values(dof) -> None:
    """Source: scipy.stats.chi2. Values that are χ²(k) have mean k and variance 2k, so the
    moment-matched g·χ²(h) is χ²(k) itself (Box 1954, from memory), and with many values
    the F(h, n·h) factor tends to χ²(h)/h: the limit must be the χ²(k) quantile, within the
    sampling error of 200 000 values (< 1 %)."""
    values = np.random.default_rng(dof).chisquare(dof, 200_000)
    for conf in (0.95, 0.99):
        assert cv_limit(values, conf) == pytest.approx(stats.chi2.ppf(conf, dof), rel=0.01)


def test_cv_limit_for_few_values_is_wider_than_the_chi_square_form() -> None:
    """Source: scipy.stats (F against chi2): with a mean estimated from n values the limit is
    m·F(conf; h, n·h) > g·χ²(conf; h) and tends to it as n grows; NaN without spread."""
    values = np.random.default_rng(3).chisquare(3, 30)
    m, s2 = values.mean(), values.var(ddof=1)
    h = 2 * m * m / s2
    for conf in (0.95, 0.99):
        chi_form = s2 / (2 * m) * stats.chi2.ppf(conf, h)
        assert cv_limit(values, conf) == pytest.approx(m * stats.f.ppf(conf, h, 30 * h))
        assert cv_limit(values, conf) > chi_form
    assert np.isnan(cv_limit(np.full(5, 2.0), 0.95))
    assert np.isnan(cv_limit(np.array([1.0]), 0.95))


def test_future_observation_f_form_is_wider_than_the_calibration_set_beta_form() -> None:
    """Sources: Tracy, Young & Mason 1992 (from memory): a calibration sample's own T² is
    (n − 1)²/n · Beta(a/2, (n − a − 1)/2); a future observation's is
    a(n² − 1)/(n(n − a)) · F(a, n − a). Checked by simulation of normal scores
    (scipy.stats.beta, scipy.stats.f; seed 5), and the Beta form is the tighter of the two:
    a limit from it would flag new samples too often."""
    rng = np.random.default_rng(5)
    n, a, reps = 25, 3, 4000
    scores = rng.standard_normal((reps, n + 1, a))
    cal, new = scores[:, :n], scores[:, n]
    centred = cal - cal.mean(axis=1, keepdims=True)
    inv = np.linalg.inv(np.einsum("rni,rnj->rij", centred, centred) / (n - 1))
    t2_cal = np.einsum("rni,rij,rnj->rn", centred, inv, centred)[:, 0]
    diff = new - cal.mean(axis=1)
    t2_new = np.einsum("ri,rij,rj->r", diff, inv, diff)
    for conf in (0.95, 0.99):
        beta = (n - 1) ** 2 / n * stats.beta.ppf(conf, a / 2, (n - a - 1) / 2)
        tol = 4 * np.sqrt(conf * (1 - conf) / reps)
        assert np.mean(t2_cal > beta) == pytest.approx(1 - conf, abs=tol)
        assert np.mean(t2_new > t2_limit(a, n, conf)) == pytest.approx(1 - conf, abs=tol)
        assert t2_limit(a, n, conf) > beta


def test_cv_t2_is_each_mixture_under_the_model_fitted_without_its_fold() -> None:
    """Source: scikit-learn's PLSRegression fitted here on each training fold: the model's
    ``cv_t2`` is the left-out mixtures' Σ t²/var(training scores, ddof 1); the model's
    limits are :func:`cv_limit` of it, and the reported false-alarm rates are fractions."""
    model, absorbance, conc = _calibrate(np.random.default_rng(2), 30)
    fold = model["fold"].values
    expected = np.empty(30)
    for f in np.unique(fold):
        train, test = fold != f, fold == f
        mean = absorbance[train].mean(axis=0)
        y = conc[train, :1]
        pls = PLSRegression(3, scale=False).fit(absorbance[train] - mean,
                                                (y - y.mean()) / y.std(ddof=1))
        var = pls.x_scores_.var(axis=0, ddof=1)
        expected[test] = np.sum(pls.transform(absorbance[test] - mean) ** 2 / var, axis=1)
    np.testing.assert_allclose(model["cv_t2"].values[:, 0], expected, rtol=1e-8)
    for j, conf in enumerate((0.95, 0.99)):
        assert float(model["t2_limit"].values[0, j]) == pytest.approx(cv_limit(expected, conf))
    for var in ("t2_false_alarm_cv", "q_false_alarm_cv"):
        rates = model[var].values
        assert np.all((rates >= 0) & (rates <= 1))
        assert np.allclose(rates * 30, np.round(rates * 30))  # whole mixtures of 30


def test_cv_false_alarm_counts_values_above_their_own_folds_limit() -> None:
    """Source: the definition (a count): 2 of 6 values exceed the limit of their fold."""
    values = np.array([1.0, 5.0, 2.0, 2.0, 9.0, 0.5])
    fold = np.array([0, 0, 1, 1, 2, 2])
    assert cv_false_alarm(values, fold, np.array([4.0, 3.0, 8.0])) == pytest.approx(2 / 6)
    assert cv_false_alarm(values, fold, np.array([4.0, np.nan, 8.0])) == pytest.approx(2 / 4)
    assert np.isnan(cv_false_alarm(values, fold, np.full(3, np.nan)))


def test_model_file_keeps_the_rates_and_older_models_still_load(tmp_path) -> None:
    """The new variables survive a write and read; a model written without them (before
    they existed) still loads and predicts; a rate outside 0..1 is refused in one line."""
    model, absorbance, _ = _calibrate(np.random.default_rng(4), 30)
    path = ms.write_model(model, tmp_path / "model.nc")
    back = ms.read_model(path)
    for var in ("cv_t2", "t2_false_alarm_cv", "q_false_alarm_cv"):
        np.testing.assert_array_equal(back[var].values, model[var].values)
    assert "False alarms measured in cross-validation" in format_calibration(back)
    old = model.drop_vars(["cv_t2", "t2_false_alarm_cv", "q_false_alarm_cv"])
    old_back = ms.read_model(ms.write_model(old, tmp_path / "old.nc"))
    assert "False alarms" not in format_calibration(old_back)
    spectra = ms.make_spectra(absorbance[:3], WL, ["a", "b", "c"])
    assert np.all(np.isfinite(ms.predict(spectra, old_back)["t2"].values))
    bad = model.copy()
    bad["t2_false_alarm_cv"] = bad["t2_false_alarm_cv"] + 2.0
    with pytest.raises(FileFormatError, match="t2_false_alarm_cv"):
        ms.read_model(ms.write_model(bad, tmp_path / "bad.nc"))

"""PLS calibration, scatter corrections and grouped folds checked against outside sources.

- Real data: 21 mid-infrared spectra of glucose standards with HPLC glucose, shipped under
  the MIT licence in the `chemotools` 0.5.0 wheel (tests/data/fermentation_mir/README.md:
  source, licence, citation). **seen** (the files as shipped, cut to 950–1550 cm⁻¹).
- Reference pipeline: scikit-learn's ``PLSRegression(scale=False)`` with ``KFold`` /
  ``GroupKFold`` and ``cross_val_predict``, written here independently of mixsolve's code.
- Standard normal variate: (x − x̄)/s per spectrum, Barnes, Dhanoa & Lister 1989, Appl.
  Spectrosc. 43:772 (s with p − 1 in the denominator, from memory), in plain numpy here.
- Multiplicative scatter correction: x = a + b·m fitted by least squares against the mean
  spectrum m, then (x − a)/b, Geladi, MacDougall & Martens 1985, Appl. Spectrosc. 39:491
  (from memory), fitted here with ``numpy.polyfit``.

The mixture data of the grouped-fold checks are invented (synthetic, seeded); the
fermentation spectra are not.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import GroupKFold, KFold, cross_val_predict
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer

import mixsolve as ms
from mixsolve.pls.preprocessing import correct_scatter, msc_reference

DATA = Path(__file__).resolve().parents[1] / "data" / "fermentation_mir"
FOLDS = 7


def fermentation() -> tuple[xr.DataArray, pd.DataFrame, np.ndarray]:
    """The shipped spectra (the cm⁻¹ axis given as the spectra's axis: PLS uses it only as
    labels here, no derivative) and the glucose reference table."""
    table = pd.read_csv(DATA / "spectra.csv", index_col=0)
    glucose = pd.read_csv(DATA / "glucose.csv")
    axis = table.columns.astype(float).to_numpy()
    spectra = ms.make_spectra(table.to_numpy(), axis, list(table.index))
    reference = pd.DataFrame({"sample": glucose["sample"], "component": "glucose",
                              "concentration": glucose["glucose"], "unit": "g/L"})
    return spectra, reference, glucose["glucose"].to_numpy()


def snv(x: np.ndarray) -> np.ndarray:
    """Standard normal variate, one spectrum at a time (Barnes et al. 1989)."""
    return np.array([(row - row.mean()) / row.std(ddof=1) for row in x])


def msc(x: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Multiplicative scatter correction against ``reference`` (Geladi et al. 1985)."""
    out = []
    for row in x:
        slope, intercept = np.polyfit(reference, row, 1)
        out.append((row - intercept) / slope)
    return np.array(out)


@pytest.mark.parametrize("scatter", ["none", "snv", "msc"])
def test_fermentation_rmsecv_and_predictions_match_scikit_learn(scatter: str) -> None:
    """Same RMSECV (every number of latent variables), CV predictions and predictions as an
    independent scikit-learn pipeline on the shipped fermentation data (**seen**).

    Contiguous K-fold (the 21 standards carry no grouping). MSC's reference is the mean of
    all 21 calibration spectra in both (mixsolve's documented choice, also inside CV).
    """
    spectra, reference, y = fermentation()
    model = ms.calibrate(spectra, reference, folds=FOLDS, latent=4, max_latent=8,
                         scatter=scatter)
    x = spectra.values
    steps = {"none": [], "snv": [FunctionTransformer(snv)],
             "msc": [FunctionTransformer(msc, kw_args={"reference": x.mean(axis=0)})]}
    folds = KFold(n_splits=FOLDS)
    curve = []
    for a in range(1, 9):
        pipeline = make_pipeline(*steps[scatter], PLSRegression(n_components=a, scale=False))
        cv_pred = cross_val_predict(pipeline, x, y, cv=folds).ravel()
        curve.append(np.sqrt(np.mean((cv_pred - y) ** 2)))
        if a == 4:
            np.testing.assert_allclose(model["cv_predicted"].values[:, 0], cv_pred,
                                       rtol=1e-7, atol=1e-9)
            fitted = pipeline.fit(x, y)
            np.testing.assert_allclose(model["fitted"].values[:, 0],
                                       fitted.predict(x).ravel(), rtol=1e-7, atol=1e-9)
            new = x[::-1] * 1.05 + 0.01  # other spectra: scaled and shifted copies
            mine = ms.predict(ms.make_spectra(new, spectra["wavelength"].values,
                                              [f"n{i}" for i in range(len(new))]), model)
            np.testing.assert_allclose(mine["concentration"].values[:, 0],
                                       fitted.predict(new).ravel(), rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(
        model["cv_rmsecv"].sel(cv_mode="pls1").values[0], curve, rtol=1e-7)
    assert float(model["rmsecv"].values[0]) == pytest.approx(curve[3], rel=1e-7)


def test_snv_and_msc_against_plain_numpy() -> None:
    """mixsolve's SNV and MSC equal the textbook formulas coded here (Barnes et al. 1989;
    Geladi et al. 1985), on the shipped spectra (**seen**) and at prediction with the stored
    reference; offset removal is x − x̄ per spectrum."""
    spectra, _, _ = fermentation()
    x = spectra.values
    np.testing.assert_allclose(correct_scatter(x, "snv"), snv(x), rtol=1e-10, atol=1e-12)
    m = msc_reference(x)
    np.testing.assert_allclose(m, x.mean(axis=0))
    np.testing.assert_allclose(correct_scatter(x, "msc", m), msc(x, m), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(correct_scatter(x, "offset"), x - x.mean(axis=1, keepdims=True))
    # MSC removes what it models: a spectrum scaled and offset from the reference comes back
    # as the reference itself (Geladi et al. 1985: x = a + b·m exactly).
    np.testing.assert_allclose(correct_scatter((0.2 + 1.7 * m)[None], "msc", m)[0], m,
                               rtol=1e-10)


def test_grouped_folds_match_group_kfold_and_never_split_a_group() -> None:
    """With a group column the folds are scikit-learn's ``GroupKFold`` and RMSECV that of
    ``cross_val_predict`` with those folds (synthetic data: each mixture measured 3 times
    with seeded noise and a seeded scale change, as a temperature series would be)."""
    rng = np.random.default_rng(16)
    wl = np.arange(400.0, 600.0, 2.0)
    bands = np.stack([np.exp(-0.5 * ((wl - c) / w) ** 2) for c, w in ((450, 20), (520, 25))])
    conc = np.repeat(rng.uniform(0.1, 1.0, (10, 2)), 3, axis=0)
    x = conc @ bands * rng.uniform(0.97, 1.03, (30, 1)) + 0.003 * rng.standard_normal((30, 100))
    names = [f"mix{i // 3}_t{i % 3}" for i in range(30)]
    groups = [f"mix{i // 3}" for i in range(30)]
    reference = pd.DataFrame([
        {"sample": s, "component": c, "concentration": conc[i, k], "unit": "% v/v",
         "group": g}
        for i, (s, g) in enumerate(zip(names, groups, strict=True))
        for k, c in enumerate(("a", "b"))])
    model = ms.calibrate(ms.make_spectra(x, wl, names), reference, folds=4, latent=2,
                         mode="pls1")
    fold = model["fold"].values
    for g in set(groups):
        assert len(set(fold[np.asarray(groups) == g])) == 1
    expected = np.empty(30, dtype=int)
    for f, (_, test) in enumerate(GroupKFold(n_splits=4).split(x, groups=groups)):
        expected[test] = f
    np.testing.assert_array_equal(fold, expected)
    for k in range(2):
        cv_pred = cross_val_predict(PLSRegression(n_components=2, scale=False), x,
                                    conc[:, k], cv=GroupKFold(n_splits=4), groups=groups)
        assert float(model["rmsecv"].values[k]) == pytest.approx(
            np.sqrt(np.mean((cv_pred.ravel() - conc[:, k]) ** 2)), rel=1e-7)
    assert model.attrs["unit"] == "% v/v"

"""Which model fits? Classical least squares cross-validated on the folds of a PLS model.

On each training set the absorptivities are estimated from the mixtures themselves
(K = argmin ‖A − CK‖, through the origin) and the left-out spectra are resolved with
mixsolve's own CLS kernel; the ratio of the two RMSECVs says whether the chemistry looks
additive (docs/calibration.md).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from mixsolve.solve.cls import fit_spectra

#: CLS/PLS RMSECV ratio above which PLS is clearly better (our rule of thumb).
CLEARLY_BETTER = 1.5
#: CLS/PLS RMSECV ratio at or below which CLS does as well; it allows for the optimism of
#: a cross-validated choice of latent variables on the same folds (our rule of thumb).
AS_GOOD = 1.2
Verdict = Literal["no_verdict", "pls_better", "additive", "mildly_non_additive"]


def cls_cross_validate(x: np.ndarray, y: np.ndarray, fold: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """CLS predictions with absorptivities estimated from the mixtures themselves.

    Parameters
    ----------
    x : array, shape (n_samples, n_wavelengths)
        Preprocessed (not centred) spectra of the calibration mixtures: AU, or AU/nm
        after a derivative.
    y : array, shape (n_samples, n_components)
        Reference concentrations (model unit).
    fold : array of int, shape (n_samples,)
        Fold of each sample, as in the PLS cross-validation.

    Returns
    -------
    cv : array, shape (n_samples, n_components)
        Cross-validated predictions (model unit); NaN for a fold whose training
        concentrations do not separate the components (rank below n_components).
    fitted : array, shape (n_samples, n_components)
        Predictions of the fit on all mixtures.

    Notes
    -----
    K = argmin ‖A − C K‖ by ``numpy.linalg.lstsq`` (through the origin, AU per unit of
    concentration), then ordinary least squares with :func:`mixsolve.solve.cls.fit_spectra`.
    """
    def fit_predict(train: np.ndarray, spectra: np.ndarray) -> np.ndarray:
        c = y[train]
        if np.linalg.matrix_rank(c) < c.shape[1]:
            return np.full((spectra.shape[0], y.shape[1]), np.nan)
        k_matrix = np.linalg.lstsq(c, x[train], rcond=None)[0]  # (n_y, n_wl), AU per unit
        return fit_spectra(spectra, k_matrix.T, y.shape[1], "ols").coef

    cv = np.empty(y.shape)
    for f in np.unique(fold):
        cv[fold == f] = fit_predict(fold != f, x[fold == f])
    return cv, fit_predict(np.ones(len(y), dtype=bool), x)


def compare_verdict(cls_rmsecv: np.ndarray, pls_rmsecv: np.ndarray) -> Verdict:
    """Say from the two RMSECVs whether the mixtures behave additively.

    Parameters
    ----------
    cls_rmsecv, pls_rmsecv : array, shape (n_components,)
        RMSECV of CLS and of PLS on the same folds (same unit).

    Returns
    -------
    {"no_verdict", "pls_better", "additive", "mildly_non_additive"}
        ``no_verdict`` when a ratio CLS/PLS is not finite (CLS could not be fitted on
        some fold); ``pls_better`` when some ratio exceeds :data:`CLEARLY_BETTER`;
        ``additive`` when every ratio is at most :data:`AS_GOOD`; else
        ``mildly_non_additive``.
    """
    ratio = np.asarray(cls_rmsecv, dtype=float) / np.asarray(pls_rmsecv, dtype=float)
    if not np.all(np.isfinite(ratio)):
        return "no_verdict"
    if np.any(ratio > CLEARLY_BETTER):
        return "pls_better"
    if np.all(ratio <= AS_GOOD):
        return "additive"
    return "mildly_non_additive"

"""Which model fits? Classical least squares cross-validated on the folds of a PLS model.

On each training set the absorptivities are estimated from the mixtures themselves
(K = argmin ‖A − CK‖, through the origin) and the left-out spectra are resolved with
mixsolve's own CLS kernel; the ratio of the two RMSECVs says whether the chemistry looks
additive (docs/calibration.md).

Fairness: PLS absorbs a cell offset or a sloping baseline in a latent variable; CLS must be
given the same freedom before a worse CLS error is read as non-additivity. The classical
fit is therefore run with each baseline of :data:`CLS_BASELINES` (its columns preprocessed
as the spectra are: a derivative removes the offset) and the one with the lowest
cross-validated error is kept and named (:func:`cls_compare`). Whether PLS is better is
judged from the ratio's sampling spread, a bootstrap over the mixtures of the paired
cross-validated errors (:func:`ratio_lower_bound`), not from the ratio alone.
"""

from __future__ import annotations

from typing import Any, Literal, NamedTuple

import numpy as np

from mixsolve.pls.preprocessing import preprocess
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.design import design_matrix

#: CLS/PLS RMSECV ratio above which PLS is clearly better (our rule of thumb).
CLEARLY_BETTER = 1.5
#: CLS/PLS RMSECV ratio at or below which CLS does as well; it allows for the optimism of
#: a cross-validated choice of latent variables on the same folds (our rule of thumb).
AS_GOOD = 1.2
Verdict = Literal["no_verdict", "pls_better", "additive", "mildly_non_additive"]
#: Baselines the classical fit is given in the comparison (scatter with the fixed λ⁻⁴ shape
#: of :data:`mixsolve.solve.design.NOMINAL_SCATTER_EXPONENT`: a linear model, as PLS is).
CLS_BASELINES: tuple[str, ...] = ("none", "offset", "linear", "scatter")
#: Bootstrap resamples of the mixtures for the ratio's spread, and their seed (fixed: the
#: same calibration gives the same verdict).
BOOTSTRAP_RESAMPLES = 2000
BOOTSTRAP_SEED = 20261203
#: One-sided level of the ratio's lower bound.
RATIO_LOWER_QUANTILE = 0.05


class ClsComparison(NamedTuple):
    """The classical fit chosen for the comparison (:func:`cls_compare`)."""

    baseline: str  #: the baseline kept (lowest cross-validated error)
    cv: np.ndarray  #: (n_samples, n_components) its cross-validated predictions
    fitted: np.ndarray  #: (n_samples, n_components) its predictions fitted on all mixtures
    #: (n_baselines, n_components) RMSECV of every baseline tried, in ``CLS_BASELINES``
    #: order (NaN where it could not be fitted on every fold)
    rmsecv_by_baseline: np.ndarray


def baseline_basis(wavelengths_nm: np.ndarray, baseline: str,
                   derivative: dict[str, Any] | None) -> np.ndarray:
    """The baseline columns (m, t) of ``baseline`` preprocessed as the spectra are; columns
    a derivative removes (the offset) are dropped."""
    raw = design_matrix(np.zeros((wavelengths_nm.size, 0)), wavelengths_nm,
                        baseline)  # type: ignore[arg-type]
    if not raw.shape[1]:
        return raw
    columns = preprocess(raw.T, derivative).T
    norms = np.linalg.norm(columns, axis=0)
    return columns[:, norms > 1e-9 * np.linalg.norm(raw, axis=0)]


def cls_compare(x: np.ndarray, y: np.ndarray, fold: np.ndarray, wavelengths_nm: np.ndarray,
                derivative: dict[str, Any] | None) -> ClsComparison:
    """CLS cross-validated with each baseline of ``CLS_BASELINES``; keep the best.

    Parameters
    ----------
    x, y, fold
        As for :func:`cls_cross_validate`.
    wavelengths_nm : array, shape (n_wavelengths,)
    derivative : dict or None
        The spectra's preprocessing (:func:`mixsolve.pls.preprocessing.check_derivative`).

    Returns
    -------
    ClsComparison

    Notes
    -----
    The baseline kept minimises Σⱼ RMSECVⱼ²/var(yⱼ), the normalised error PLS's choice of
    latent variables also uses; a choice on the same folds, as PLS's is (both a little
    optimistic alike).
    """
    var = y.var(axis=0, ddof=1)
    best: tuple[float, str, np.ndarray, np.ndarray] | None = None
    errors = np.full((len(CLS_BASELINES), y.shape[1]), np.nan)
    for i, name in enumerate(CLS_BASELINES):
        basis = baseline_basis(wavelengths_nm, name, derivative)
        if i and not basis.shape[1]:
            continue  # nothing left after preprocessing: the same as "none"
        cv, fitted = cls_cross_validate(x, y, fold, basis)
        errors[i] = np.sqrt(np.mean((cv - y) ** 2, axis=0))
        score = float(np.sum(errors[i] ** 2 / var))
        if np.isfinite(score) and (best is None or score < best[0]):
            best = (score, name, cv, fitted)
    if best is None:  # no baseline fitted on every fold: report the plain fit
        cv, fitted = cls_cross_validate(x, y, fold)
        return ClsComparison("none", cv, fitted, errors)
    return ClsComparison(best[1], best[2], best[3], errors)


def ratio_lower_bound(cls_cv: np.ndarray, pls_cv: np.ndarray, y: np.ndarray) -> np.ndarray:
    """One-sided lower bound of RMSECV(CLS)/RMSECV(PLS) per component from its spread.

    Parameters
    ----------
    cls_cv, pls_cv : arrays, shape (n_samples, n_components)
        Cross-validated predictions of the two models on the same folds.
    y : array, shape (n_samples, n_components)
        Reference concentrations.

    Returns
    -------
    array, shape (n_components,)
        The ``RATIO_LOWER_QUANTILE`` quantile of the ratio over ``BOOTSTRAP_RESAMPLES``
        resamples of the mixtures with replacement, both models' errors of a mixture kept
        together (paired; percentile bootstrap, Efron & Tibshirani, *An Introduction to the
        Bootstrap*, 1993, §13.3, from memory). NaN where a prediction is not finite.
    """
    e_cls, e_pls = (cls_cv - y) ** 2, (pls_cv - y) ** 2
    rng = np.random.default_rng(BOOTSTRAP_SEED)
    n = y.shape[0]
    idx = rng.integers(0, n, (BOOTSTRAP_RESAMPLES, n))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.sqrt(e_cls[idx].mean(axis=1) / e_pls[idx].mean(axis=1))
    low = np.quantile(ratio, RATIO_LOWER_QUANTILE, axis=0)
    finite = np.isfinite(e_cls).all(axis=0) & np.isfinite(e_pls).all(axis=0)
    return np.where(finite, low, np.nan)


def cls_cross_validate(x: np.ndarray, y: np.ndarray, fold: np.ndarray,
                       basis: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
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
    basis : array, shape (n_wavelengths, t), optional
        Baseline columns (preprocessed like ``x``) each spectrum may carry in any amount.

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
    With a baseline B each training spectrum's baseline is unknown, so K is estimated from
    the spectra projected off B, A(I − BB⁺) = C K(I − BB⁺), and the new spectra are
    resolved with the design [K(I − BB⁺)ᵀ | B], whose span is that of [Kᵀ | B].
    """
    n_y = y.shape[1]
    project = None
    if basis is not None and basis.shape[1]:
        project = np.eye(x.shape[1]) - basis @ np.linalg.pinv(basis)

    def fit_predict(train: np.ndarray, spectra: np.ndarray) -> np.ndarray:
        c = y[train]
        if np.linalg.matrix_rank(c) < c.shape[1]:
            return np.full((spectra.shape[0], n_y), np.nan)
        a = x[train] if project is None else x[train] @ project
        k_matrix = np.linalg.lstsq(c, a, rcond=None)[0]  # (n_y, n_wl), AU per unit
        design = k_matrix.T if project is None else np.hstack([k_matrix.T, basis])
        return fit_spectra(spectra, design, n_y, "ols").coef[:, :n_y]

    cv = np.empty(y.shape)
    for f in np.unique(fold):
        cv[fold == f] = fit_predict(fold != f, x[fold == f])
    return cv, fit_predict(np.ones(len(y), dtype=bool), x)


def compare_verdict(cls_rmsecv: np.ndarray, pls_rmsecv: np.ndarray,
                    ratio_low: np.ndarray | None = None) -> Verdict:
    """Say from the two RMSECVs whether the mixtures behave additively.

    Parameters
    ----------
    cls_rmsecv, pls_rmsecv : array, shape (n_components,)
        RMSECV of CLS and of PLS on the same folds (same unit).
    ratio_low : array, shape (n_components,), optional
        The ratio's one-sided 95 % lower bound (:func:`ratio_lower_bound`); models made
        before it existed are judged by the fixed ratios.

    Returns
    -------
    {"no_verdict", "pls_better", "additive", "mildly_non_additive"}
        ``no_verdict`` when a ratio CLS/PLS (or its bound) is not finite (CLS could not be
        fitted on some fold). With ``ratio_low``: ``pls_better`` when some bound exceeds
        :data:`AS_GOOD` (PLS better beyond the ratio's spread and beyond the optimism of its
        choice of latent variables); ``additive`` when no bound exceeds 1 (no sign that PLS
        does better); else ``mildly_non_additive``. Without: ``pls_better`` when some ratio
        exceeds :data:`CLEARLY_BETTER`, ``additive`` when every ratio is at most
        :data:`AS_GOOD`, else ``mildly_non_additive``.
    """
    ratio = np.asarray(cls_rmsecv, dtype=float) / np.asarray(pls_rmsecv, dtype=float)
    if not np.all(np.isfinite(ratio)):
        return "no_verdict"
    if ratio_low is not None:
        low = np.asarray(ratio_low, dtype=float)
        if not np.all(np.isfinite(low)):
            return "no_verdict"
        if np.any(low > AS_GOOD):
            return "pls_better"
        return "additive" if np.all(low <= 1.0) else "mildly_non_additive"
    if np.any(ratio > CLEARLY_BETTER):
        return "pls_better"
    if np.all(ratio <= AS_GOOD):
        return "additive"
    return "mildly_non_additive"

"""One PLS block: fitted with scikit-learn's ``PLSRegression``, and spectra projected on it.

A block predicts some components from the spectra: ``pls2`` has one block for all of
them, ``pls1`` one block per component. These functions work on preprocessed, centred
(and scaled) float64 arrays; the callers label the results.
"""

from __future__ import annotations

import numpy as np
from sklearn.cross_decomposition import PLSRegression


def block_groups(n_components: int, mode: str) -> list[list[int]]:
    """Component indices predicted by each block.

    Parameters
    ----------
    n_components : int
        Number of components calibrated.
    mode : {"pls2", "pls1"}
        One block for all components, or one per component.

    Returns
    -------
    list of list of int
        ``[[0, 1, ...]]`` for ``pls2``, ``[[0], [1], ...]`` for ``pls1``.
    """
    return [list(range(n_components))] if mode == "pls2" else [[k] for k in range(n_components)]


def fit_block(xs: np.ndarray, ys: np.ndarray, n_latent: int) -> dict[str, np.ndarray]:
    """Fit one PLS block with scikit-learn.

    Parameters
    ----------
    xs : array, shape (n_samples, n_wavelengths)
        Preprocessed spectra, centred (and scaled) with the training set's statistics.
    ys : array, shape (n_samples, n_block_components)
        Concentrations, centred and divided by their standard deviation (dimensionless).
    n_latent : int
        Number of latent variables.

    Returns
    -------
    dict of arrays
        ``weights`` W and ``rotations`` R = W(PᵀW)⁻¹ and ``loadings`` P, each
        (n_wavelengths, n_latent); ``y_loadings`` Q (n_block_components, n_latent).

    Notes
    -----
    ``sklearn.cross_decomposition.PLSRegression(scale=False)`` (NIPALS): centring and
    scaling are done by the caller, so that they can be recorded in the model.
    """
    pls = PLSRegression(n_components=n_latent, scale=False).fit(xs, ys)
    return {"rotations": pls.x_rotations_, "loadings": pls.x_loadings_,
            "weights": pls.x_weights_, "y_loadings": pls.y_loadings_}


def project(xs: np.ndarray, rotations: np.ndarray, loadings: np.ndarray,
            score_variance: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Scores, Hotelling T², residual and Q of spectra in one block.

    Parameters
    ----------
    xs : array, shape (n_samples, n_wavelengths)
        Preprocessed spectra, centred and scaled as in calibration.
    rotations, loadings : array, shape (n_wavelengths, n_latent)
        R and P of the block.
    score_variance : array, shape (n_latent,)
        Variance of each score over the calibration mixtures (ddof 1).

    Returns
    -------
    scores : array, shape (n_samples, n_latent)
        t = x R.
    t2 : array, shape (n_samples,)
        T² = Σₐ tₐ² / s²ₐ (dimensionless).
    residual : array, shape (n_samples, n_wavelengths)
        e = x − t Pᵀ, in preprocessed (and scaled) units.
    q : array, shape (n_samples,)
        Q = ‖e‖², in preprocessed (and scaled) units².
    """
    scores = xs @ rotations
    t2 = np.sum(scores**2 / score_variance, axis=1)
    residual = xs - scores @ loadings.T
    return scores, t2, residual, np.sum(residual**2, axis=1)

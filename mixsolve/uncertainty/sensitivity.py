"""Linearised sensitivities of a least-squares solution to its data and its design matrix.

For one spectrum with readings A (n used wavelengths), weights W = diag(w) (1 for an
unweighted fit) and design matrix D (n × p: absorptivities at 1 cm, then baseline
columns), the fitted coefficients are

    x = G A,   G = M Dᵀ W,   M = (Dᵀ W D)⁻¹,   residual r = A − D x.

Data. A perturbation δA moves x by G δA, so independent reading errors of standard
deviation σᵢ give u²(x_k) = Σᵢ G_kᵢ² σᵢ², and a fully correlated bias vector δA gives
δx = G δA.

Design. Differentiating the normal equations (Dᵀ W D) x = Dᵀ W A with respect to one
element D_ij gives

    ∂x/∂D_ij = M[:, j] wᵢ rᵢ − G[:, i] x_j,

the second term the dominant one (a larger ε_j at λᵢ explains the same absorbance with
less of component j), the first a correction proportional to the residual. For
independent absorptivity errors u(ε_j(λᵢ)) this gives u²(x_k) = Σᵢⱼ (∂x_k/∂D_ij)² u²_ij.

These are first-order (linearised) results; the Monte Carlo propagation of
:mod:`mixsolve.uncertainty.montecarlo` checks them.
"""

from __future__ import annotations

import numpy as np


def ls_operators(design: np.ndarray, weights: np.ndarray | None = None
                 ) -> tuple[np.ndarray, np.ndarray]:
    """G = M DᵀW and M = (DᵀWD)⁻¹ for one spectrum.

    Parameters
    ----------
    design : array, shape (n, p)
        Rows of the wavelengths actually used (missing readings removed).
    weights : array, shape (n,), optional
        wᵢ = 1/σᵢ²; None for an unweighted fit.

    Returns
    -------
    G : ndarray, shape (p, n)
    M : ndarray, shape (p, p)
    """
    w = np.ones(design.shape[0]) if weights is None else np.asarray(weights, dtype=float)
    norms = np.linalg.norm(design, axis=0)
    scaled = design / norms  # column scaling keeps ε (~1e4) and baseline (~1) together
    m_scaled = np.linalg.inv(scaled.T @ (w[:, None] * scaled))
    m = m_scaled / np.outer(norms, norms)
    return m @ design.T * w[None, :], m


def propagate_independent(g: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """u(x) = √(Σᵢ G_kᵢ² σᵢ²) for independent reading errors σ (n,); NaN where σ is."""
    return np.sqrt((g**2) @ (np.asarray(sigma, dtype=float) ** 2))


def design_sensitivity(g: np.ndarray, m: np.ndarray, residual: np.ndarray, coef: np.ndarray,
                       n_components: int, weights: np.ndarray | None = None) -> np.ndarray:
    """∂x/∂D_ij for the absorptivity columns j < ``n_components``.

    Parameters
    ----------
    g, m : ndarray
        From :func:`ls_operators`.
    residual : array, shape (n,)
        r = A − D x at the solution (AU).
    coef : array, shape (p,)
        Fitted coefficients x.
    n_components : int
    weights : array, shape (n,), optional

    Returns
    -------
    ndarray, shape (p, n, n_components)
        Element [k, i, j] = ∂x_k/∂D_ij (coefficient units per absorptivity unit).
    """
    w = np.ones(residual.shape) if weights is None else np.asarray(weights, dtype=float)
    wr = w * residual
    first = m[:, None, :n_components] * wr[None, :, None]
    second = g[:, :, None] * coef[None, None, :n_components]
    return first - second

"""Limits for new samples: Hotelling T² (F distribution) and the Q residual (Jackson–Mudholkar)."""

from __future__ import annotations

import numpy as np
from scipy import stats

#: Confidence levels of the T² and Q limits.
CONFIDENCE: tuple[float, ...] = (0.95, 0.99)


def t2_limit(n_latent: int, n_calibration: int, confidence: float) -> float:
    """Hotelling T² limit for a new sample.

    Notes
    -----
    T²_lim = a (n − 1)(n + 1) / (n (n − a)) · F(confidence; a, n − a), with a latent
    variables and n calibration samples (the limit for a future observation, Tracy, Young &
    Mason 1992, J. Qual. Technol. 24:88; from memory). F quantile from ``scipy.stats.f``.
    """
    a, n = n_latent, n_calibration
    if n - a < 1:
        return float("nan")
    return float(a * (n - 1) * (n + 1) / (n * (n - a)) * stats.f.ppf(confidence, a, n - a))


def q_limit(residual_eigenvalues: np.ndarray, confidence: float) -> tuple[float, str]:
    """Q-residual (squared prediction error) limit.

    Parameters
    ----------
    residual_eigenvalues : array
        Eigenvalues λⱼ of the covariance of the spectral residuals of new samples (in
        preprocessed, scaled units²). :func:`mixsolve.calibrate` estimates it as
        E_cvᵀE_cv/n from the cross-validated residuals of its n mixtures.
    confidence : float
        E.g. 0.95.

    Returns
    -------
    limit : float
        NaN when the calibration leaves no residual (θ₁ = 0).
    method : str
        ``"jackson-mudholkar"`` or ``"box"`` (fallback).

    Notes
    -----
    Jackson & Mudholkar (1979, Technometrics 21:341): with θᵢ = Σⱼ λⱼⁱ (i = 1, 2, 3),
    h₀ = 1 − 2θ₁θ₃/(3θ₂²) and c the standard normal quantile at ``confidence``
    (``scipy.stats.norm.ppf``), Q_lim = θ₁ [c √(2θ₂h₀²)/θ₁ + 1 + θ₂h₀(h₀ − 1)/θ₁²]^(1/h₀).
    When h₀ ≤ 0 or the bracket is not positive (one large eigenvalue among many small
    ones) the approximation breaks down, and Box's (1954) scaled chi-square is used:
    Q_lim = g χ²(confidence; h) with g = θ₂/θ₁, h = θ₁²/θ₂.
    """
    lam = np.clip(np.asarray(residual_eigenvalues, dtype=float), 0.0, None)
    th1, th2, th3 = (float(np.sum(lam**i)) for i in (1, 2, 3))
    if th1 <= 0 or th2 <= 0:
        return float("nan"), "none"
    h0 = 1.0 - 2.0 * th1 * th3 / (3.0 * th2**2)
    c = float(stats.norm.ppf(confidence))
    if h0 > 0:
        base = c * np.sqrt(2.0 * th2 * h0**2) / th1 + 1.0 + th2 * h0 * (h0 - 1.0) / th1**2
        if base > 0:
            return float(th1 * base ** (1.0 / h0)), "jackson-mudholkar"
    g, h = th2 / th1, th1**2 / th2
    return float(g * stats.chi2.ppf(confidence, h)), "box"

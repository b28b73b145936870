"""Limits for new samples: Hotelling T² and the Q residual, and their false-alarm rate in CV.

The T² limit of a model comes from the cross-validated T² of its mixtures
(:func:`cv_limit`); :func:`t2_limit` is the normal-theory F form (models written before
the cross-validated limit hold it). The Q limit is Jackson–Mudholkar's on the eigenvalues
of the cross-validated residuals (:func:`q_limit`). :func:`cv_false_alarm` measures how
often a limit is exceeded by mixtures it was not computed from. Why: docs/calibration.md,
"How the limits were chosen".
"""

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


def cv_limit(values: np.ndarray, confidence: float) -> float:
    """Limit for a new sample from statistics of n mixtures each left out of its model.

    Parameters
    ----------
    values : array, shape (n,)
        A non-negative statistic (T², or Q) of each calibration mixture computed with the
        model fitted without its cross-validation fold; NaN values are ignored.
    confidence : float
        E.g. 0.95.

    Returns
    -------
    float
        m · F(confidence; h, n·h), with m the mean and s² the variance (ddof 1) of the
        values and h = 2m²/s²; NaN with fewer than 2 values, m ≤ 0 or s² = 0.

    Notes
    -----
    The statistic of a new sample is taken as a scaled chi-square g·χ²(h) whose mean and
    variance are those of the cross-validated values, g = s²/(2m), h = 2m²/s² (moment
    matching, Box 1954, Ann. Math. Stat. 25:290; the same form Nomikos & MacGregor 1995,
    Technometrics 37:41, use for the squared prediction error; both from memory). The
    scale g·h = m is itself estimated from n values, so a new value over m behaves as
    (χ²(h)/h)/(χ²(n·h)/(n·h)) = F(h, n·h) rather than χ²(h)/h: the same step from a known
    to an estimated scale that turns the normal-theory T² limit for a new observation into
    an F form (:func:`t2_limit`). Quantiles from ``scipy.stats.f``. Unlike :func:`t2_limit`
    it assumes no shape of the score distribution: its spread is the one the
    cross-validated values show (lighter tails from designed, evenly spread mixtures;
    heavier from skewed compositions).
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size < 2:
        return float("nan")
    m, s2 = float(v.mean()), float(v.var(ddof=1))
    if m <= 0 or s2 <= 0:
        return float("nan")
    h = 2.0 * m * m / s2
    return float(m * stats.f.ppf(confidence, h, v.size * h))


def cv_false_alarm(values: np.ndarray, fold: np.ndarray, fold_limits: np.ndarray) -> float:
    """Fraction of calibration mixtures above a limit computed without their fold.

    Parameters
    ----------
    values : array, shape (n,)
        Cross-validated statistic (T² or Q) of each mixture.
    fold : array of int, shape (n,)
        Cross-validation fold of each mixture, 0 to k − 1.
    fold_limits : array, shape (k,)
        The limit computed the model's way from the mixtures of the other folds only
        (for fold f: from the values, or residuals, of the mixtures not in f).

    Returns
    -------
    float
        (number of mixtures i with value_i > fold_limits[fold(i)]) / (number of mixtures
        with a finite limit): near 1 − confidence when the limit holds; NaN when no limit
        could be computed.

    Notes
    -----
    A limit judged on the values it was computed from would flatter it; leaving each fold
    out of the limit as it was left out of the model keeps the check honest (the limit
    then rests on n(k − 1)/k mixtures, a little fewer than the model's). With n mixtures
    its resolution is 1/n and its binomial standard deviation √(α(1 − α)/n),
    α = 1 − confidence: a rough check from a few dozen mixtures.
    """
    v = np.asarray(values, dtype=float)
    limit = np.asarray(fold_limits, dtype=float)[np.asarray(fold)]
    ok = np.isfinite(limit) & np.isfinite(v)
    return float(np.mean(v[ok] > limit[ok])) if ok.any() else float("nan")


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

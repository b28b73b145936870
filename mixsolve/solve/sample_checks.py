"""Per-spectrum trust checks on a fit: photometric range and residual structure.

All functions take plain arrays with wavelength on the last axis (NaN = missing reading)
and return arrays over the leading axes.

- Absorbance range: the largest and smallest measured absorbance over the used
  wavelengths; the dilution factor d = A_max / A_target (A_target = √(low·high), the
  geometric middle of the reliable range) that would bring the peak there. d > 1: dilute
  d-fold (or use a cell 1/d as long); d < 1: concentrate 1/d-fold or use a cell 1/d longer.
- Lack of fit (needs a noise model): χ² = Σ (rᵢ/σᵢ)² with σᵢ = σ_A(fitted Aᵢ); the ratio
  √(χ²/E[χ²]) is 1 when the residual is as large as the noise (and the library's stated
  error) predicts; p = P(χ²_dof ≥ χ²) for an exact library (:func:`lack_of_fit`).
- Residual structure: the Wald–Wolfowitz runs test on the signs of the residual in
  wavelength order. Too few runs (long stretches of one sign) mean the residual has shape —
  an unmodelled absorber, scatter or a wavelength shift — rather than noise. One-sided
  p = Φ(z), z = (R − μ)/√v, μ = 2n₊n₋/n + 1, v = (μ − 1)(μ − 2)/(n − 1). The lag-1
  autocorrelation r₁ = Σ rᵢrᵢ₊₁ / Σ rᵢ² is reported beside it. Both also respond to noise
  correlated between neighbouring readings, so the structured-residual flag uses the
  autocorrelation beyond the noise's span instead (``structure_z``,
  :func:`mixsolve.solve.residuals.lag_figures`).
"""

from __future__ import annotations

import warnings

import numpy as np

from mixsolve.noise import NoiseModel

#: Fewest residual points for the runs test to mean anything.
MIN_POINTS_RUNS = 10


def absorbance_extent(used: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Largest and smallest measured absorbance (AU) over the used wavelengths."""
    with np.errstate(all="ignore"):
        empty = np.all(np.isnan(used), axis=-1)
        filled = np.where(np.isnan(used), -np.inf, used)
        a_max = np.where(empty, np.nan, filled.max(axis=-1))
        filled = np.where(np.isnan(used), np.inf, used)
        a_min = np.where(empty, np.nan, filled.min(axis=-1))
    return a_max, a_min


def target_absorbance(low: float, high: float) -> float:
    """Geometric middle √(low·high) of a reliable range (AU)."""
    return float(np.sqrt(low * high))


def lack_of_fit(residual: np.ndarray, fitted: np.ndarray, dof: np.ndarray,
                noise: NoiseModel, coef: np.ndarray | None = None,
                library_form: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Ratio √(χ²/E[χ²]) and its p-value per spectrum (NaN where dof = 0).

    Parameters
    ----------
    residual, fitted : arrays, shape (..., m)
        Residual and fitted absorbance (AU); NaN where a reading is missing.
    dof : array, shape (...)
        Degrees of freedom of the fit, n − p.
    noise : NoiseModel
        σ_i = σ_A(fitted Aᵢ).
    coef : array, shape (..., n), optional
        The component coefficients x (with ``library_form``).
    library_form : array, shape (m, n, n), optional
        :func:`mixsolve.library_error.library_residual_form`: the library's error left in
        the residual; None: the library is taken as exact.

    Notes
    -----
    χ² = Σ (rᵢ/σᵢ)². With an exact library E[χ²] = dof. A library with error patterns P_f
    leaves (I − H)·δD·x in the residual, of expected size L = Σᵢ xᵀKᵢx/σᵢ² (readings
    present), so E[χ²] = dof + L: the residual is compared with what the noise *and* the
    library's stated error predict. The test scales the χ² distribution to that mean
    (Satterthwaite's approximation, the library part taken as noise-like over the same
    readings): p = P(χ²_dof ≥ χ²·dof/(dof + L)), ratio = √(χ²/(dof + L)); L = 0 gives the
    plain test, p = P(χ²_dof ≥ χ²). The form Kᵢ is that of the plain fit's hat matrix;
    for weighted and shift fits it is an approximation.
    """
    from scipy import stats  # here, not above: scipy.stats costs ~0.5 s to import

    sigma = noise.sigma_absorbance(np.clip(fitted, 0.0, None))
    chi2 = np.nansum((residual / sigma) ** 2, axis=-1)
    dof = np.asarray(dof, dtype=float)
    expected = dof
    if library_form is not None and coef is not None:
        m, n, _ = library_form.shape
        w = np.reciprocal(sigma, out=sigma)
        w *= w  # 1/σᵢ², 0 where the reading is missing
        missing = np.isnan(residual)
        w = (np.where(missing, 0.0, w) if missing.any() else w).reshape(-1, m)
        x = np.asarray(coef, dtype=float).reshape(-1, n)
        outer = (x[:, :, None] * x[:, None, :]).reshape(-1, n * n)
        extra = np.einsum("sk,sk->s", w @ library_form.reshape(m, n * n), outer)
        expected = dof + np.where(np.isfinite(extra), extra, 0.0).reshape(dof.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(dof > 0, np.sqrt(chi2 / expected), np.nan)
        scaled = chi2 * dof / expected
        p = np.where(dof > 0, stats.chi2.sf(scaled, np.where(dof > 0, dof, 1)), np.nan)
    return ratio, p


def runs_test(residual: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs test z, one-sided p (too few runs) and lag-1 autocorrelation per spectrum.

    NaN where fewer than ``MIN_POINTS_RUNS`` non-zero residuals are available or all share
    one sign.
    """
    from scipy import stats

    lead = residual.shape[:-1]
    flat = residual.reshape(-1, residual.shape[-1])
    z = np.full(flat.shape[0], np.nan)
    lag1 = np.full(flat.shape[0], np.nan)
    for i, row in enumerate(flat):
        r = row[np.isfinite(row)]
        if r.size >= 2 and np.sum(r**2) > 0:
            lag1[i] = float(np.sum(r[:-1] * r[1:]) / np.sum(r**2))
        signs = np.sign(r[r != 0])
        n = signs.size
        n_pos = int(np.sum(signs > 0))
        n_neg = n - n_pos
        if n < MIN_POINTS_RUNS or n_pos == 0 or n_neg == 0:
            continue
        runs = 1 + int(np.sum(signs[1:] != signs[:-1]))
        mu = 2.0 * n_pos * n_neg / n + 1.0
        var = (mu - 1.0) * (mu - 2.0) / (n - 1.0)
        if var > 0:
            z[i] = (runs - mu) / np.sqrt(var)
    p = stats.norm.cdf(z)
    return z.reshape(lead), p.reshape(lead), lag1.reshape(lead)


#: Fewest consecutive readings at the spectrum's maximum that make a flat top (judgement:
#: two equal neighbours happen at any band maximum read finely; three level readings
#: above the reliable range, with the fitted band rising over them, do not).
PLATEAU_READINGS = 3
#: Readings within this many noise SDs of the maximum count as level with it (judgement).
PLATEAU_SDS = 3.0


def spectrum_noise(used: np.ndarray) -> np.ndarray:
    """Noise SD (AU) of each spectrum from its own readings (DER_SNR).

    σ̂ = 1.482602/√6 · median |2fᵢ − fᵢ₋₂ − fᵢ₊₂| (Stoehr et al. 2008, "DER_SNR: a simple
    and general spectroscopic signal-to-noise measurement algorithm", ASP Conf. Ser. 394,
    505): second differences two readings apart remove a straight line exactly (a band's
    curvature over 4 readings is counted as noise, so a finely read band with little noise
    gives a larger σ̂), and the median ignores the few readings on sharp features. NaN with
    fewer than 5 readings; missing readings are skipped.
    """
    if used.shape[-1] < 5:
        return np.full(used.shape[:-1], np.nan)
    second = 2 * used[..., 2:-2] - used[..., :-4] - used[..., 4:]
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows give NaN
        return 1.482602 / np.sqrt(6.0) * np.nanmedian(np.abs(second), axis=-1)


def flat_top(used: np.ndarray, fitted: np.ndarray, high: float,
             noise: NoiseModel | None = None) -> np.ndarray:
    """Whether each spectrum has a reading at the instrument's ceiling (a flat top).

    Parameters
    ----------
    used : array, shape (..., m)
        Measured absorbance (AU) at the used wavelengths, in wavelength order; NaN missing.
    fitted : array, shape (..., m)
        The fitted absorbance at the same readings.
    high : float
        Top of the reliable range (AU).
    noise : NoiseModel, optional
        σ_A of a reading; without it, each spectrum's own DER_SNR noise
        (:func:`spectrum_noise`).

    Returns
    -------
    array of bool, shape (...)

    Notes
    -----
    With A_max the largest reading and σ the noise SD at A_max, a spectrum has a flat top
    when A_max > ``high`` and (1) at least ``PLATEAU_READINGS`` consecutive readings lie
    within ``PLATEAU_SDS``·σ of A_max, and (2) over those readings the fitted band rises
    above A_max by more than ``PLATEAU_SDS``·σ: the data stop where the model of the other
    readings goes on. A detector or converter at its ceiling reads a constant (or its noise)
    however much more the sample absorbs; a real band maximum read finely is level too,
    but the fit follows it, so (2) keeps it out.
    """
    from numpy.lib.stride_tricks import sliding_window_view

    lead = used.shape[:-1]
    flat = used.reshape(-1, used.shape[-1])
    model = np.asarray(fitted, dtype=float).reshape(flat.shape)
    out = np.zeros(flat.shape[0], dtype=bool)
    if flat.shape[-1] < PLATEAU_READINGS:
        return out.reshape(lead)
    with np.errstate(all="ignore"):
        empty = np.isnan(flat).all(axis=-1)
        a_max = np.where(empty, np.nan, np.nanmax(np.where(empty[:, None], 0.0, flat),
                                                  axis=-1))
        rows = np.flatnonzero(a_max > high)
        if not rows.size:
            return out.reshape(lead)
        part = flat[rows]
        sigma = (noise.sigma_absorbance(a_max[rows]) if noise is not None
                 else spectrum_noise(part))
        tol = PLATEAU_SDS * np.where(np.isfinite(sigma), sigma, 0.0)
        level = part >= (a_max[rows] - tol)[:, None]  # NaN readings are not level
        runs = sliding_window_view(level, PLATEAU_READINGS, axis=-1).all(axis=-1)
        above = model[rows] - a_max[rows][:, None] > tol[:, None]
        rises = sliding_window_view(above, PLATEAU_READINGS, axis=-1).any(axis=-1)
        out[rows] = (runs & rises).any(axis=-1)
    return out.reshape(lead)

"""Per-spectrum trust checks of an unmixing result (computed and attached by ``unmix``).

:func:`summary_checks` turns the residual summary of each spectrum
(:class:`~mixsolve.solve.residuals.ResidualSummary`, computed inside the fit while the
spectrum is in cache) into range and residual-structure figures (definitions in
:mod:`mixsolve.solve.sample_checks`); :func:`lack_of_fit_model` adds the lack-of-fit
figures block by block when a noise model is given. ``unmix`` calls both inside the same
``xarray.apply_ufunc`` as the fit, so numpy- and dask-backed spectra alike are read once.
:func:`trust_status` turns them into the status bits of :mod:`mixsolve.flags` in the same
pass, and :func:`shift_bias_matrix` gives the wavelength-shift bias per unit of each
component (all used by :mod:`mixsolve.solve.block`).
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy.special import ndtr

from mixsolve.flags import (
    ABOVE_RANGE,
    BELOW_RANGE,
    DEPENDENT,
    ILL_CONDITIONED,
    LACK_OF_FIT,
    MISSING,
    NO_SIGNAL,
    SHIFTED,
    STRUCTURED,
    TOO_FEW,
)
from mixsolve.library import COMPONENT
from mixsolve.noise import NoiseModel
from mixsolve.solve.design import ILL_CONDITIONED_ABOVE
from mixsolve.solve.residuals import ResidualSummary, model_blocks
from mixsolve.solve.sample_checks import (
    MIN_POINTS_RUNS,
    lack_of_fit,
)
from mixsolve.solve.shift_sensitivity import library_derivative, shift_matrix
from mixsolve.spectra import WAVELENGTH

#: p-value below which lack of fit or residual structure is flagged (judgement; 1 in 1000
#: clean spectra is flagged by chance).
FLAG_P_VALUE = 1e-3
#: Limit of ``structure_z`` (about N(0, 1) when the noise is correlated over at most
#: :func:`structure_lag` readings): its one-sided 0.1 % point, as for the other checks.
STRUCTURE_Z_LIMIT = 3.09
#: RMS residual (AU) below which a fit is exact to rounding and is not tested for shape.
NUMERICAL_ZERO_AU = 1e-10
#: Wavelength accuracy assumed for the shift_risk run note (nm): a typical benchtop, ±0.5 nm
#: (from memory; plate readers are often ±1-2 nm: set it for your instrument).
DEFAULT_WAVELENGTH_TOLERANCE_NM = 0.5
#: Span (nm) over which instrument noise may be correlated without raising the
#: structured-residual flag (judgement: smoothing and oversampled slits correlate noise over
#: about 1–4 nm FWHM; noise correlated more widely raises false alarms, measured in
#: tests/test_correlated_noise.py).
NOISE_SPAN_NM = 5.0
#: Names of the figures :func:`summary_checks` returns, in order.
CHECK_NAMES = ("absorbance_max", "absorbance_min", "runs_z", "runs_p", "residual_lag1",
               "structure_z", "lack_of_fit_ratio", "lack_of_fit_p")


def structure_lag(wavelengths_nm: np.ndarray) -> int:
    """s: the readings within ``NOISE_SPAN_NM`` of a reading, at the median spacing.

    Lags count in readings (the residual summary's neighbours are the readings used, in
    order), so a span in nm becomes s = ⌊NOISE_SPAN_NM / median spacing⌋ readings: 5 at
    1 nm, 1 at 5 nm, 0 (the lag-1 test of white noise) above 5 nm. With irregular
    spacing, or a window that skips a range, the median spacing stands for all.
    """
    wl = np.sort(np.asarray(wavelengths_nm, dtype=float))
    steps = np.diff(wl)
    steps = steps[steps > 0]
    if not steps.size:
        return 0
    return int(np.floor(NOISE_SPAN_NM / float(np.median(steps)) + 1e-9))


def summary_checks(summary: ResidualSummary,
                   lack: tuple[np.ndarray, np.ndarray] | None = None
                   ) -> tuple[np.ndarray, ...]:
    """Trust figures per spectrum from its residual summary.

    Parameters
    ----------
    summary : ResidualSummary
        Of each spectrum (fields of any one shape).
    lack : (ratio, p), optional
        Lack-of-fit figures (:func:`lack_of_fit_model`); NaN without them.

    Returns
    -------
    tuple of arrays, shaped as the summary fields
        In the order of ``CHECK_NAMES``: A_max and A_min (AU), runs-test z and one-sided p,
        lag-1 autocorrelation of the residual, its structure z beyond the noise's lags
        (:func:`mixsolve.solve.residuals.lag_figures`), lack-of-fit ratio √(χ²/dof) and
        its p-value.
    """
    z, p_runs, lag1 = runs_from_summary(summary)
    if lack is None:
        lack = (np.full(z.shape, np.nan), np.full(z.shape, np.nan))
    return (summary.absorbance_max, summary.absorbance_min, z, p_runs, lag1,
            summary.structure_z, *lack)


def runs_from_summary(summary: ResidualSummary) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs-test z, one-sided p and lag-1 autocorrelation from the residual summary.

    The definitions of :func:`mixsolve.solve.sample_checks.runs_test`: n non-zero
    residuals, n₊ of them positive, R = 1 + sign changes, μ = 2n₊n₋/n + 1,
    v = (μ − 1)(μ − 2)/(n − 1), z = (R − μ)/√v, p = Φ(z); NaN when n < ``MIN_POINTS_RUNS``
    or one sign only. r₁ = Σrᵢrᵢ₊₁ / Σrᵢ² over the readings present (NaN below 2 of them
    or when Σr² = 0).
    """
    n = np.asarray(summary.n_nonzero, dtype=float)
    n_pos = np.asarray(summary.n_positive, dtype=float)
    n_neg = n - n_pos
    runs = 1.0 + np.asarray(summary.sign_changes, dtype=float)
    ss = np.asarray(summary.sum_squares, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mu = 2.0 * n_pos * n_neg / n + 1.0
        var = (mu - 1.0) * (mu - 2.0) / (n - 1.0)
        ok = (n >= MIN_POINTS_RUNS) & (n_pos > 0) & (n_neg > 0) & (var > 0)
        z = np.where(ok, (runs - mu) / np.sqrt(np.where(ok, var, 1.0)), np.nan)
        fine = (np.asarray(summary.n_points) >= 2) & (ss > 0)
        lag1 = np.where(fine, np.asarray(summary.lag_sum) / np.where(fine, ss, 1.0), np.nan)
    return z, ndtr(z), lag1


def lack_of_fit_model(values: np.ndarray, coef: np.ndarray, design: np.ndarray,
                      dof: np.ndarray, noise: NoiseModel,
                      library_form: np.ndarray | None = None
                      ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`~mixsolve.solve.sample_checks.lack_of_fit` of r = values − coef·Dᵀ.

    Parameters
    ----------
    values : array, shape (..., m)
        Measured absorbance (AU), NaN where missing.
    coef : array, shape (..., p)
    design : array, shape (m, p)
    dof : array of int, shape (...)
    noise : NoiseModel
    library_form : array, shape (m, n, n), optional
        The library's error left in the residual
        (:func:`mixsolve.library_error.library_residual_form`), n the leading components
        of ``coef``; None: the library is taken as exact.

    Returns
    -------
    ratio, p : arrays, shape (...)
        Computed block by block; the fitted and residual spectra are never held whole.
    """
    lead = values.shape[:-1]
    flat = values.reshape(-1, values.shape[-1])
    coef = coef.reshape(-1, coef.shape[-1])
    dof = np.asarray(dof).reshape(-1)
    ratio = np.full(flat.shape[0], np.nan)
    p = np.full(flat.shape[0], np.nan)
    for rows, _, fitted, residual in model_blocks(flat, coef, design):
        n = 0 if library_form is None else library_form.shape[1]
        ratio[rows], p[rows] = lack_of_fit(residual, fitted, dof[rows], noise,
                                           coef[rows, :n], library_form)
    return ratio.reshape(lead), p.reshape(lead)


def trust_status(checks: tuple[np.ndarray, ...], rms: np.ndarray, n_used: int,
                 absorbance_range: tuple[float, float], noise_given: bool) -> np.ndarray:
    """Status bits of the trust checks (:mod:`mixsolve.flags`) from their figures.

    Parameters
    ----------
    checks : tuple of arrays
        :func:`summary_checks` output, in ``CHECK_NAMES`` order.
    rms : array
        RMS residual (AU): an exact fit (below ``NUMERICAL_ZERO_AU``) is not tested for
        shape, since rounding error has signs that mean nothing.
    n_used : int
        Wavelengths in the fit.
    absorbance_range : (float, float)
        Reliable range (AU).
    noise_given : bool
        Whether the lack-of-fit figures exist.

    Returns
    -------
    array of int64
        ``ABOVE_RANGE``/``BELOW_RANGE`` (A_max outside the range), ``NO_SIGNAL`` (every
        used reading exactly 0 AU, A_max = A_min = 0, instead of ``BELOW_RANGE``),
        ``STRUCTURED`` (structure z > ``STRUCTURE_Z_LIMIT`` with n ≥ ``MIN_POINTS_RUNS``:
        residual structure wider than the s readings over which noise may be correlated;
        the runs test and r₁, which also fire on correlated noise alone, are reported but
        do not set it), ``LACK_OF_FIT`` (p < ``FLAG_P_VALUE``). NaN figures set none.
    """
    a_max, a_min, _, _, _, structure_z, _, lack_p = checks
    low, high = absorbance_range
    with np.errstate(invalid="ignore"):
        silent = (a_max == 0) & (a_min == 0)  # -0.0 included; NaN (no reading) is not
        status = np.where(a_max > high, ABOVE_RANGE, 0) | np.where(
            (a_max < low) & ~silent, BELOW_RANGE, 0) | np.where(silent, NO_SIGNAL, 0)
        shaped = (structure_z > STRUCTURE_Z_LIMIT) & (n_used >= MIN_POINTS_RUNS)
        status |= np.where(shaped & (rms > NUMERICAL_ZERO_AU), STRUCTURED, 0)
        if noise_given:
            status |= np.where(lack_p < FLAG_P_VALUE, LACK_OF_FIT, 0)
    return status.astype(np.int64)


def shift_bias_matrix(library: xr.Dataset, design: np.ndarray, used_wl: np.ndarray
                      ) -> np.ndarray:
    """S (components × components): concentration bias per +1 nm per unit of each component.

    The component rows of D⁺K′ (:func:`mixsolve.solve.shift_sensitivity.shift_matrix`), K′ the
    library's dε/dλ at the used wavelengths; bias(c) = S c per nm, in the unit of c.
    NaN when the library carries no slope (fewer than 3 wavelengths).
    """
    n = library.sizes[COMPONENT]
    deriv = library_derivative(library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values,
                               library[WAVELENGTH].values, used_wl)
    if not np.isfinite(deriv).all():
        return np.full((n, n), np.nan)
    return shift_matrix(design, deriv)[:n]


#: |δ|/u(δ) above which a fitted wavelength shift is significant: the two-sided 0.1 % point
#: of N(0, 1) (3.29), as strict as the other checks.
SHIFT_Z_LIMIT = 3.29
#: Smallest fitted shift (nm) worth flagging ``shifted`` (judgement: below 0.2 nm a
#: wavelength error moves even steep-flank results by less than the usual 1-2 % and is
#: within the accuracy of a good benchtop; a high signal-to-noise spectrum makes smaller
#: shifts significant without mattering).
SHIFT_PRACTICAL_NM = 0.2


def shifted_status(shift_nm: np.ndarray, u_shift_nm: np.ndarray) -> np.ndarray:
    """``SHIFTED`` where |δ| > ``SHIFT_PRACTICAL_NM`` and |δ|/u(δ) > ``SHIFT_Z_LIMIT``
    (NaN figures set nothing)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        on = (np.abs(shift_nm) > SHIFT_PRACTICAL_NM) & (
            np.abs(shift_nm) > SHIFT_Z_LIMIT * u_shift_nm)
    return np.where(on, SHIFTED, 0).astype(np.int64)


def own_design_status(spectra: np.ndarray, design: np.ndarray, status: np.ndarray
                      ) -> np.ndarray:
    """``ILL_CONDITIONED`` for spectra whose own design, on the readings they have, is ill
    conditioned (scaled condition number above ``ILL_CONDITIONED_ABOVE``).

    Only spectra with missing readings that were fitted (``MISSING`` without ``TOO_FEW``
    or ``DEPENDENT``) are looked at, one condition number per pattern of readings present
    (numpy.linalg.cond of the design rows with unit-length columns).
    """
    out = np.zeros(status.shape, dtype=np.int64)
    rows = np.flatnonzero((status & MISSING).astype(bool) & ~(status & (TOO_FEW | DEPENDENT))
                          .astype(bool))
    if not rows.size:
        return out
    patterns, group = np.unique(~np.isnan(spectra[rows]), axis=0, return_inverse=True)
    group = group.ravel()
    for g, mask in enumerate(patterns):
        sub = design[mask]
        norms = np.linalg.norm(sub, axis=0)
        if (norms == 0).any():
            continue  # cannot be fitted: rank_deficient says it
        if np.linalg.cond(sub / norms) > ILL_CONDITIONED_ABOVE:
            out[rows[group == g]] = ILL_CONDITIONED
    return out

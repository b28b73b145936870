"""Per-spectrum trust checks of an unmixing result (computed and attached by ``unmix``).

:func:`spectrum_checks` computes range, residual-structure and lack-of-fit figures on plain
arrays (definitions in :mod:`mixsolve.diagnostics.sample_checks`); ``unmix`` calls it on
every block of spectra inside the same ``xarray.apply_ufunc`` as the fit, so numpy- and
dask-backed spectra alike are read once. :func:`add_trust_checks` then attaches those
figures, sets the status bits of :mod:`mixsolve.flags` and adds the wavelength-shift bias;
it uses only xarray operations, so it stays lazy on dask-backed results.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr
from scipy.special import ndtr

from mixsolve.diagnostics.sample_checks import (
    MIN_POINTS_RUNS,
    absorbance_extent,
    lack_of_fit,
    runs_test,
    target_absorbance,
)
from mixsolve.diagnostics.shift import library_derivative, shift_matrix
from mixsolve.flags import ABOVE_RANGE, BELOW_RANGE, LACK_OF_FIT, STRUCTURED
from mixsolve.library import COMPONENT
from mixsolve.noise import NoiseModel
from mixsolve.spectra import WAVELENGTH

#: p-value below which lack of fit or residual structure is flagged (judgement; 1 in 1000
#: clean spectra is flagged by chance).
FLAG_P_VALUE = 1e-3
#: Lag-1 autocorrelation limit: under white noise r₁√n is about standard normal, and 3.09 is
#: its one-sided 0.1 % point. It catches a narrow unmodelled band that the runs test,
#: which sees only signs, can miss.
LAG1_Z_LIMIT = 3.09
#: RMS residual (AU) below which a fit is exact to rounding and is not tested for shape.
NUMERICAL_ZERO_AU = 1e-10
#: A component is flagged shift-sensitive when a wavelength error of the stated tolerance
#: would move a quantifiable concentration by more than this fraction (judgement).
SHIFT_FLAG_FRACTION = 0.02
#: Wavelength accuracy assumed for that flag (nm): a typical benchtop instrument, ±0.5 nm
#: (from memory; plate readers are often ±1-2 nm: set it for your instrument).
DEFAULT_WAVELENGTH_TOLERANCE_NM = 0.5
#: Names of the figures :func:`spectrum_checks` returns, in order.
CHECK_NAMES = ("absorbance_max", "absorbance_min", "runs_z", "runs_p", "residual_lag1",
               "lack_of_fit_ratio", "lack_of_fit_p")


def spectrum_checks(used: np.ndarray, residual: np.ndarray, fitted: np.ndarray,
                    dof: np.ndarray, noise: NoiseModel | None,
                    sum_squares: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
    """Trust figures per spectrum, wavelength on the last axis (NaN = missing reading).

    Parameters
    ----------
    used : array, shape (..., n_wavelengths)
        Measured absorbance (AU) at the used wavelengths.
    residual, fitted : arrays, shape (..., n_wavelengths)
        Residual and fitted absorbance (AU).
    dof : array of int, shape (...)
        Residual degrees of freedom.
    noise : NoiseModel, optional
        Without one, the lack-of-fit figures are NaN.
    sum_squares : array, shape (...), optional
        Σ r² over each residual (NaN where a reading is missing), if already computed.

    Returns
    -------
    tuple of arrays, shape (...)
        In the order of ``CHECK_NAMES``: A_max and A_min (AU), runs-test z and one-sided p,
        lag-1 autocorrelation of the residual, lack-of-fit ratio √(χ²/dof) and its p-value.
    """
    a_max, a_min = _extent(used)
    z, p_runs, lag1 = residual_runs(residual, sum_squares)
    if noise is not None:
        ratio, p_fit = lack_of_fit(residual, fitted, dof, noise)
    else:
        ratio = p_fit = np.full(a_max.shape, np.nan)
    return a_max, a_min, z, p_runs, lag1, ratio, p_fit


def _extent(used: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`~mixsolve.diagnostics.sample_checks.absorbance_extent` without temporaries.

    Plain max/min propagate NaN; only spectra with a missing reading are redone.
    """
    a_max, a_min = used.max(axis=-1), used.min(axis=-1)
    missing = np.isnan(a_max)
    if missing.any():
        a_max[missing], a_min[missing] = absorbance_extent(used[missing])
    return a_max, a_min


def residual_runs(residual: np.ndarray, sum_squares: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The runs test of :func:`mixsolve.diagnostics.sample_checks.runs_test`, vectorised.

    Same definitions and results; spectra whose residual holds a NaN or an exact zero are
    passed to ``runs_test`` itself, which drops those points first. ``sum_squares``: Σ r²
    per spectrum if already known (saves a pass over the residual).
    """
    lead = residual.shape[:-1]
    flat = residual.reshape(-1, residual.shape[-1])
    n_spec, n = flat.shape
    z = np.full(n_spec, np.nan)
    lag1 = np.full(n_spec, np.nan)
    with np.errstate(invalid="ignore"):
        ss = np.einsum("ij,ij->i", flat, flat) if sum_squares is None \
            else np.asarray(sum_squares, dtype=float).reshape(-1)
        lag = np.einsum("ij,ij->i", flat[:, :-1], flat[:, 1:])
        pos = flat > 0
    clean = np.isfinite(ss) & (np.count_nonzero(flat, axis=1) == n)
    n_pos = np.count_nonzero(pos, axis=1)
    n_neg = n - n_pos
    runs = 1 + np.count_nonzero(pos[:, 1:] != pos[:, :-1], axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        mu = 2.0 * n_pos * n_neg / n + 1.0
        var = (mu - 1.0) * (mu - 2.0) / (n - 1.0)
        ok = clean & (n >= MIN_POINTS_RUNS) & (n_pos > 0) & (n_neg > 0) & (var > 0)
        z[ok] = (runs[ok] - mu[ok]) / np.sqrt(var[ok])
        fine = clean & (n >= 2) & (ss > 0)
        lag1[fine] = lag[fine] / ss[fine]
    p = ndtr(z)  # the standard normal CDF, Φ(z), as a plain ufunc
    other = np.flatnonzero(~clean)
    if other.size:
        z[other], p[other], lag1[other] = runs_test(flat[other])
    return z.reshape(lead), p.reshape(lead), lag1.reshape(lead)


def add_trust_checks(result: xr.Dataset, checks: Mapping[str, xr.DataArray],
                     library: xr.Dataset, design: np.ndarray,
                     absorbance_range: tuple[float, float],
                     noise: NoiseModel | None) -> xr.Dataset:
    """Return ``result`` with the figures of ``checks``, updated ``status`` and shift bias.

    ``checks`` maps each name of ``CHECK_NAMES`` to its per-spectrum DataArray (output of
    :func:`spectrum_checks` under ``apply_ufunc``). Lazy for dask-backed inputs.
    """
    low, high = absorbance_range
    a_max = checks["absorbance_max"]
    status = result["status"]
    status = status | xr.where(a_max > high, ABOVE_RANGE, 0) \
        | xr.where(a_max < low, BELOW_RANGE, 0)
    n_used = result.sizes[WAVELENGTH]
    lag_z = checks["residual_lag1"] * np.sqrt(n_used)
    shaped = (checks["runs_p"] < FLAG_P_VALUE) | (
        (lag_z > LAG1_Z_LIMIT) & (n_used >= MIN_POINTS_RUNS))
    # An exact fit leaves only rounding error (~1e-16 AU), whose signs mean nothing.
    shaped = shaped & (result["rms_residual"] > NUMERICAL_ZERO_AU)
    status = status | xr.where(shaped, STRUCTURED, 0)
    if noise is not None:
        status = status | xr.where(checks["lack_of_fit_p"] < FLAG_P_VALUE, LACK_OF_FIT, 0)
    out = result.assign(
        absorbance_max=a_max.assign_attrs(units="AU"),
        absorbance_min=checks["absorbance_min"].assign_attrs(units="AU"),
        suggested_dilution=(a_max / target_absorbance(low, high)).assign_attrs(
            units="1", meaning="dilution factor bringing the peak to sqrt(low*high) AU"),
        runs_z=checks["runs_z"], runs_p=checks["runs_p"],
        residual_lag1=checks["residual_lag1"],
        lack_of_fit_ratio=checks["lack_of_fit_ratio"], lack_of_fit_p=checks["lack_of_fit_p"],
    )
    out["status"] = status.astype(np.int64)
    out["shift_bias_per_nm"] = _shift_bias(out, library, design,
                                           np.asarray(result[WAVELENGTH].values))
    return out


def _shift_bias(result: xr.Dataset, library: xr.Dataset, design: np.ndarray,
                used_wl: np.ndarray) -> xr.DataArray:
    """Concentration bias per +1 nm of wavelength error at the fitted composition."""
    n = library.sizes[COMPONENT]
    deriv = library_derivative(library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values,
                               library[WAVELENGTH].values, used_wl)
    s = shift_matrix(design, deriv)[:n] if np.isfinite(deriv).all() else np.full((n, n), np.nan)
    factor = result["unit_factor"]
    canonical = result["concentration"] / factor
    matrix = xr.DataArray(s, dims=(COMPONENT, "_source"))
    bias = xr.dot(matrix, canonical.rename({COMPONENT: "_source"}), dim="_source") * factor
    return bias.transpose(*result["concentration"].dims).assign_attrs(
        units=f"{result.attrs['unit']} per nm")

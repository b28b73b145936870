"""Attach the per-spectrum trust checks to an unmixing result (called by ``unmix``).

Adds range, residual and wavelength-shift figures (definitions in
:mod:`mixsolve.diagnostics.sample_checks` and :mod:`mixsolve.diagnostics.shift`) and sets
the status bits of :mod:`mixsolve.flags`. Works lazily on dask-backed results.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from mixsolve.diagnostics.sample_checks import (
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
#: A component is flagged shift-sensitive when a wavelength error of the stated tolerance
#: would move a quantifiable concentration by more than this fraction (judgement).
SHIFT_FLAG_FRACTION = 0.02
#: Wavelength accuracy assumed for that flag (nm): a typical benchtop instrument, ±0.5 nm
#: (from memory; plate readers are often ±1-2 nm: set it for your instrument).
DEFAULT_WAVELENGTH_TOLERANCE_NM = 0.5


def add_trust_checks(result: xr.Dataset, used: xr.DataArray, library: xr.Dataset,
                     design: np.ndarray, absorbance_range: tuple[float, float],
                     noise: NoiseModel | None) -> xr.Dataset:
    """Return ``result`` with range, residual and shift figures and updated ``status``."""
    low, high = absorbance_range
    core = [[WAVELENGTH]]
    a_max, a_min = xr.apply_ufunc(absorbance_extent, used, input_core_dims=core,
                                  output_core_dims=[[], []], dask="parallelized",
                                  output_dtypes=[float, float])
    status = result["status"]
    status = status | xr.where(a_max > high, ABOVE_RANGE, 0) \
        | xr.where(a_max < low, BELOW_RANGE, 0)
    z, p_runs, lag1 = xr.apply_ufunc(runs_test, result["residual"], input_core_dims=core,
                                     output_core_dims=[[], [], []], dask="parallelized",
                                     output_dtypes=[float, float, float])
    status = status | xr.where(p_runs < FLAG_P_VALUE, STRUCTURED, 0)
    out = result.assign(
        absorbance_max=a_max.assign_attrs(units="AU"),
        absorbance_min=a_min.assign_attrs(units="AU"),
        suggested_dilution=(a_max / target_absorbance(low, high)).assign_attrs(
            units="1", meaning="dilution factor bringing the peak to sqrt(low*high) AU"),
        runs_z=z, runs_p=p_runs, residual_lag1=lag1,
    )
    if noise is not None:
        ratio, p_fit = xr.apply_ufunc(
            lack_of_fit, result["residual"], result["fitted"], result["dof"],
            kwargs={"noise": noise}, input_core_dims=[core[0], core[0], []],
            output_core_dims=[[], []], dask="parallelized", output_dtypes=[float, float])
        status = status | xr.where(p_fit < FLAG_P_VALUE, LACK_OF_FIT, 0)
        out = out.assign(lack_of_fit_ratio=ratio, lack_of_fit_p=p_fit)
    else:
        nan = xr.full_like(a_max, np.nan)
        out = out.assign(lack_of_fit_ratio=nan, lack_of_fit_p=nan)
    out["status"] = status.astype(np.int64)
    out["shift_bias_per_nm"] = _shift_bias(out, library, design, used[WAVELENGTH].values)
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

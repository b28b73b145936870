"""The library's standards-scatter error patterns against statsmodels' HC2 covariance.

At every wavelength a library built from standards fits one straight line (through the
origin, or with an intercept) of absorbance against b·c. Without a declared preparation
uncertainty its error patterns must reproduce, wavelength by wavelength, the
heteroskedasticity-consistent covariance of that line's slope in the HC2 form
(MacKinnon & White, J. Econometrics 29 (1985) 305), as statsmodels computes it
(``OLS(...).fit(cov_type="HC2")``): Σ_f P_f(λ)² = bse(slope)². Synthetic standards.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import xarray as xr

import mixsolve as ms
from mixsolve.errors import MixsolveWarning
from mixsolve.library_error import error_patterns


def _library(intercept: bool) -> tuple[xr.Dataset, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(85)
    wl = np.arange(450.0, 561.0, 10.0)
    eps = 1.0e4 * np.exp(-0.5 * ((wl - 500.0) / 30.0) ** 2)
    conc = np.array([1e-5, 2e-5, 3e-5, 4e-5, 5e-5, 6e-5])
    absorb = (np.outer(conc * (1 + 0.02 * rng.standard_normal(conc.size)), eps)
              + 0.003 * rng.standard_normal((conc.size, wl.size)) * (1 + conc[:, None] / 3e-5))
    names = [f"s{i}" for i in range(conc.size)]
    sheet = pd.DataFrame({"sample": names, "component": "dye", "concentration": conc,
                          "unit": "mol/L"})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        lib = ms.build_library(ms.make_spectra(absorb, wl, names), sheet, intercept=intercept)
    return lib, conc, absorb


@pytest.mark.parametrize("intercept", [False, True])
def test_patterns_give_the_hc2_variance_of_each_wavelengths_slope(intercept: bool) -> None:
    lib, conc, absorb = _library(intercept)
    variance = np.sum(error_patterns(lib)[:, 0, :] ** 2, axis=0)
    for j in range(absorb.shape[1]):
        design = sm.add_constant(conc) if intercept else conc[:, None]
        fit = sm.OLS(absorb[:, j], design).fit(cov_type="HC2")
        slope_se = fit.bse[-1]
        assert fit.params[-1] == pytest.approx(lib["absorptivity"].values[0, j], rel=1e-9)
        assert np.sqrt(variance[j]) == pytest.approx(slope_se, rel=1e-9)

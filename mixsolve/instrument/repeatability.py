"""Repeatability of repeated scans of one solution: SD per wavelength and drift over the run.

With m scans Aⱼ(λ), j = 1…m in the order they were read:

- mean Ā(λ) and standard deviation s(λ) = √(Σ (Aⱼ − Ā)²/(m − 1)) (AU): the Type A noise
  of one reading, which the uncertainty budget uses in place of the fit's scatter when it
  is given (:func:`mixsolve.uncertainty_budget`, ``noise_sd``);
- drift: the least-squares slope d(λ) of A against the scan index (AU per scan), its
  standard uncertainty, and the drift over the run d·(m − 1) (AU);
- pooled figures over wavelengths: √(mean s²) and the mean drift.

A drift that is large against s inflates s (part of s is then systematic): the result says
so (``drift_significant``: |t| = |d|/u(d) above the two-sided 99 % Student quantile).
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy import stats

from mixsolve.errors import InputError
from mixsolve.spectra import WAVELENGTH, check_spectra

#: Two-sided probability of the drift test (judgement).
DRIFT_TEST_P = 0.01


def repeatability(scans: xr.DataArray) -> xr.Dataset:
    """Statistics of repeated scans of one solution.

    Parameters
    ----------
    scans : DataArray with dims (scan, "wavelength")
        Absorbance (AU); the non-wavelength dimension (e.g. ``sample`` as read from a
        file, one column per scan) is the scan order. At least 2 scans; 3 for drift.

    Returns
    -------
    Dataset
        ``mean`` and ``sd`` (wavelength, AU); ``drift_per_scan`` and
        ``u_drift_per_scan`` (wavelength, AU per scan); ``drift_over_run`` (wavelength, AU);
        ``drift_significant`` (wavelength, bool); scalars ``n_scans``, ``pooled_sd`` (AU),
        ``mean_drift_over_run`` (AU). Drift figures are NaN for 2 scans.

    Raises
    ------
    InputError
        Fewer than 2 scans, more than one non-wavelength dimension, or a missing reading.
    """
    scans = check_spectra(scans, "repeat scans")
    others = [d for d in scans.dims if d != WAVELENGTH]
    if len(others) != 1:
        raise InputError(f"repeat scans: expected dims (scan, wavelength), got {scans.dims}")
    data = scans.transpose(others[0], WAVELENGTH).values
    wl = scans[WAVELENGTH].values
    m = data.shape[0]
    if m < 2:
        raise InputError(f"repeat scans: {m} scan; at least 2 are needed for a standard "
                         "deviation")
    if np.isnan(data).any():
        j, i = np.argwhere(np.isnan(data))[0]
        raise InputError(f"repeat scans: scan {j + 1} has no reading at {wl[i]:g} nm")
    mean = data.mean(axis=0)
    sd = data.std(axis=0, ddof=1)
    drift = np.full(wl.shape, np.nan)
    u_drift = np.full(wl.shape, np.nan)
    if m >= 3:
        t = np.arange(m, dtype=float) - (m - 1) / 2.0
        sxx = float(np.sum(t * t))
        drift = t @ (data - mean) / sxx
        resid = data - mean - np.outer(t, drift)
        u_drift = np.sqrt(np.sum(resid**2, axis=0) / (m - 2) / sxx)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_stat = np.abs(drift) / u_drift
    limit = stats.t.ppf(1 - DRIFT_TEST_P / 2, m - 2) if m >= 3 else np.inf
    significant = np.where(u_drift > 0, t_stat > limit, np.abs(drift) > 0) & np.isfinite(drift)
    dims, coords = (WAVELENGTH,), {WAVELENGTH: wl}
    return xr.Dataset(
        {
            "mean": (dims, mean, {"units": "AU"}),
            "sd": (dims, sd, {"units": "AU", "meaning": "SD of one reading, m - 1 divisor"}),
            "drift_per_scan": (dims, drift, {"units": "AU per scan"}),
            "u_drift_per_scan": (dims, u_drift, {"units": "AU per scan"}),
            "drift_over_run": (dims, drift * (m - 1), {"units": "AU"}),
            "drift_significant": (dims, significant),
            "n_scans": m,
            "pooled_sd": float(np.sqrt(np.mean(sd**2))),
            "mean_drift_over_run": float(np.mean(drift) * (m - 1)) if m >= 3 else np.nan,
        },
        coords=coords,
        attrs={"source": scans.attrs.get("source", ""), "drift_test_p": DRIFT_TEST_P},
    )

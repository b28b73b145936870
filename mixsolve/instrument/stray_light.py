"""Stray-light check with a cut-off filter solution (potassium chloride, 12 g/L).

A 12 g/L potassium chloride solution in 1 cm absorbs practically all light at 200 nm, so
what the detector still sees there is stray light. The European Pharmacopoeia limit quoted
in ../shared/CHECKS.md (**seen**) is A(200 nm) > 2.0, read against water.

With the noise model's convention A_app = −log10((T + s)/(1 + s)) and T ≈ 0, the reading
bounds the stray fraction: s ≤ 10^−A / (1 − 10^−A). That bound (an upper limit, since T is
not exactly 0) can be given to the uncertainty budget as ``stray_fraction``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from mixsolve.instrument.result import (
    CheckResult,
    items_frame,
    reading_at,
    scans_of,
)
from mixsolve.spectra import check_number

#: **Seen** (CHECKS.md): 12 g/L KCl, A at 200 nm above 2.0.
KCL_WAVELENGTH_NM = 200.0
KCL_LIMIT_AU = 2.0
KCL_CONCENTRATION_G_L = 12.0


def stray_fraction_bound(absorbance: float) -> float:
    """Upper bound of the stray fraction from a cut-off reading: 10^−A/(1 − 10^−A)."""
    t = 10.0 ** -float(absorbance)
    return float(t / (1 - t)) if t < 1 else float("inf")


def check_stray_light(spectra: xr.DataArray, *, wavelength_nm: float = KCL_WAVELENGTH_NM,
                      limit_au: float = KCL_LIMIT_AU,
                      bandwidth_nm: float | None = None) -> CheckResult:
    """Check stray light from cut-off filter readings.

    Parameters
    ----------
    spectra : DataArray with dims (sample, "wavelength")
        Absorbance (AU) of the filter solution (one or more readings).
    wavelength_nm : float
        Where the limit applies (nm).
    limit_au : float
        Each reading must be above this absorbance (AU).
    bandwidth_nm : float, optional
        Spectral bandwidth (nm), recorded.

    Returns
    -------
    CheckResult
        One item per reading; ``summary["stray_fraction_bound"]`` from the lowest reading.

    Raises
    ------
    InputError
        A bad limit or wavelength, or no reading near ``wavelength_nm``.
    """
    if bandwidth_nm is not None:  # recorded in the log: a number or nothing
        bandwidth_nm = check_number(bandwidth_nm, "bandwidth_nm", "nm", positive=True)
    check_number(limit_au, "limit_au", "AU", positive=True)
    check_number(wavelength_nm, "wavelength_nm", "nm", positive=True)
    labels, wl, values = scans_of(spectra, "cut-off filter spectrum")
    rows, readings = [], []
    for i, label in enumerate(labels):
        a = reading_at(wl, values[i], wavelength_nm, f"cut-off filter spectrum {label!r}")
        readings.append(a)
        rows.append({"item": f"{label} at {wavelength_nm:g} nm", "measured": a,
                     "expected": limit_au, "low": limit_au, "high": np.nan, "unit": "AU",
                     "passed": bool(a > limit_au),
                     "note": f"stray fraction ≤ {stray_fraction_bound(a):.2g}"})
    lowest = float(min(readings))
    return CheckResult(
        check="stray_light", items=items_frame(rows),
        summary={"lowest_absorbance": lowest, "stray_fraction_bound": stray_fraction_bound(lowest)},
        settings={"wavelength_nm": float(wavelength_nm), "limit_au": float(limit_au),
                  "solution": f"KCl {KCL_CONCENTRATION_G_L:g} g/L (if the default limit is used)",
                  "bandwidth_nm": bandwidth_nm},
        notes=[] if bandwidth_nm is not None else ["spectral bandwidth not stated"])

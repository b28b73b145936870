"""Wavelength-scale check: band positions of a holmium oxide solution, found to sub-nm.

Holmium oxide in perchloric acid has narrow absorption bands at certified positions; the
European Pharmacopoeia (2.2.25, ../shared/CHECKS.md, **seen**) lists, among others,
241.15, 287.15, 361.5 and 536.3 nm, with a tolerance of ±1 nm in the ultraviolet and ±3 nm
in the visible. The positions depend on the spectral bandwidth (state it).

Each band is located in two steps: the largest reading within ± ``search_nm`` of the
certified position (it must be a local maximum inside that window), then a fit over the
readings within ± ``fit_half_width_nm`` of it:

- ``gaussian`` (default): A(λ) = h·exp(−(λ − μ)²/(2w²)) + a₀ + a₁(λ − λ_max) by
  ``scipy.optimize.curve_fit``; position μ, u(μ) from the covariance scaled by the residual
  variance (needs ≥ 6 readings, else the quadratic is used and noted);
- ``quadratic``: A = p₀ + p₁t + p₂t², t = λ − λ_max, by least squares; position
  λ_max − p₁/(2p₂), u from the covariance by the delta method (≥ 3 readings).

The offset of the scale is δ = mean(position − certified) over the bands found; its
standard uncertainty is √(max(s²/n, mean u²(μ)/n) + u_ref²) with s the SD of the band
offsets (n ≥ 2; for one band u(μ)), u_ref the uncertainty of the certified positions
(``reference_u_nm``, default 0). A positive δ means the instrument reads too high; feed
it to ``unmix --wavelength-offset`` to correct the axis.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import xarray as xr
from scipy.optimize import curve_fit

from mixsolve.errors import InputError
from mixsolve.instrument.result import CheckResult, items_frame, scans_of
from mixsolve.spectra import check_number, check_option, check_wavelength_list

#: Certified band positions (nm) checked by default. **Seen** (CHECKS.md, Ph. Eur. 2.2.25).
HOLMIUM_BANDS_NM: tuple[float, ...] = (241.15, 287.15, 361.5, 536.3)
#: Tolerances (nm): ultraviolet below 400 nm, visible from 400 nm. **Seen** (CHECKS.md).
UV_TOLERANCE_NM = 1.0
VIS_TOLERANCE_NM = 3.0
UV_VIS_BOUNDARY_NM = 400.0
DEFAULT_FIT_HALF_WIDTH_NM = 3.0
BandFit = Literal["gaussian", "quadratic"]
BAND_FITS: tuple[str, ...] = ("gaussian", "quadratic")


def _gauss(lam: np.ndarray, h: float, mu: float, w: float, a0: float, a1: float) -> np.ndarray:
    return h * np.exp(-0.5 * ((lam - mu) / w) ** 2) + a0 + a1 * lam


def _quadratic(t: np.ndarray, a: np.ndarray) -> tuple[float, float]:
    design = np.vstack([np.ones_like(t), t, t * t]).T
    coef, *_ = np.linalg.lstsq(design, a, rcond=None)
    p1, p2 = coef[1], coef[2]
    if p2 >= 0:
        return float("nan"), float("nan")
    dof = t.size - 3
    pos = -p1 / (2 * p2)
    if dof <= 0:
        return float(pos), float("nan")
    s2 = float(np.sum((a - design @ coef) ** 2) / dof)
    cov = s2 * np.linalg.inv(design.T @ design)
    grad = np.array([0.0, -1 / (2 * p2), p1 / (2 * p2**2)])
    return float(pos), float(np.sqrt(max(grad @ cov @ grad, 0.0)))


def band_position(wl: np.ndarray, absorbance: np.ndarray, near_nm: float, *,
                  search_nm: float, fit_half_width_nm: float = DEFAULT_FIT_HALF_WIDTH_NM,
                  method: BandFit = "gaussian") -> tuple[float, float, str]:
    """Sub-nm position of the band nearest ``near_nm`` (see the module docstring).

    Returns
    -------
    (position_nm, u_nm, note) : tuple
        NaN position (and a note saying why) when no local maximum lies in the window or
        the fit fails.
    """
    ok = np.isfinite(absorbance)
    wl, absorbance = wl[ok], absorbance[ok]
    window = np.flatnonzero(np.abs(wl - near_nm) <= search_nm)
    if window.size < 3:
        return float("nan"), float("nan"), f"fewer than 3 readings within ±{search_nm:g} nm"
    top = window[np.argmax(absorbance[window])]
    if top in (0, wl.size - 1) or top in (window[0], window[-1]):
        return float("nan"), float("nan"), f"no band maximum within ±{search_nm:g} nm"
    lam0 = wl[top]
    near = np.abs(wl - lam0) <= fit_half_width_nm
    t, a = wl[near] - lam0, absorbance[near]
    note = ""
    if method == "gaussian" and t.size >= 6:
        p0 = [a.max() - a.min(), 0.0, max(fit_half_width_nm / 2, 0.1), a.min(), 0.0]
        try:
            popt, pcov = curve_fit(_gauss, t, a, p0=p0, maxfev=5000)
        except (RuntimeError, ValueError):
            popt, pcov = None, None
        if popt is not None and abs(popt[1]) <= fit_half_width_nm:
            u = float(np.sqrt(pcov[1, 1])) if np.isfinite(pcov[1, 1]) else float("nan")
            return float(lam0 + popt[1]), u, note
        note = "Gaussian fit failed; quadratic used"
    elif method == "gaussian":
        note = f"{t.size} readings in ±{fit_half_width_nm:g} nm: quadratic used"
    if t.size < 3:
        return float("nan"), float("nan"), f"fewer than 3 readings within ±{fit_half_width_nm:g} nm"
    pos, u = _quadratic(t, a)
    if not np.isfinite(pos) or abs(pos) > fit_half_width_nm:
        return float("nan"), float("nan"), "the readings around the maximum are not a peak"
    return float(lam0 + pos), u, note


def check_wavelength_scale(
    spectra: xr.DataArray,
    *,
    bands_nm: Sequence[float] = HOLMIUM_BANDS_NM,
    uv_tolerance_nm: float = UV_TOLERANCE_NM,
    vis_tolerance_nm: float = VIS_TOLERANCE_NM,
    search_nm: float | None = None,
    fit_half_width_nm: float = DEFAULT_FIT_HALF_WIDTH_NM,
    method: BandFit = "gaussian",
    reference_u_nm: float = 0.0,
    bandwidth_nm: float | None = None,
) -> CheckResult:
    """Check the wavelength scale with a holmium oxide spectrum.

    Parameters
    ----------
    spectra : DataArray with dims (sample, "wavelength")
        Absorbance (AU) of the holmium solution; several scans are averaged first.
    bands_nm : sequence of float
        Certified positions (nm) to check.
    uv_tolerance_nm, vis_tolerance_nm : float
        Acceptance ± (nm) below and from 400 nm.
    search_nm : float, optional
        Half-width of the search window (nm); default each band's tolerance + 2 nm.
    fit_half_width_nm : float
        Half-width of the fitted region around the maximum (nm).
    method : {"gaussian", "quadratic"}
    reference_u_nm : float
        Standard uncertainty of the certified positions (nm).
    bandwidth_nm : float, optional
        Spectral bandwidth (nm), recorded: band positions depend on it.

    Returns
    -------
    CheckResult
        Items ``band <position> nm`` (found position, nm); ``summary`` holds
        ``offset_nm``, ``u_offset_nm`` and ``bands_found``.

    Raises
    ------
    InputError
        Bad tolerances or method, or no certified band inside the measured range.
    """
    check_option(method, BAND_FITS, "method")
    for name, value in (("uv_tolerance_nm", uv_tolerance_nm),
                        ("vis_tolerance_nm", vis_tolerance_nm),
                        ("fit_half_width_nm", fit_half_width_nm),
                        ("search_nm", search_nm), ("bandwidth_nm", bandwidth_nm)):
        if value is not None:  # bandwidth_nm is recorded in the log: a number or nothing
            check_number(value, name, "nm", positive=True)
    check_number(reference_u_nm, "reference_u_nm", "nm", low=0)
    bandwidth_nm = None if bandwidth_nm is None else float(bandwidth_nm)
    bands_nm = check_wavelength_list(bands_nm, "bands_nm")
    labels, wl, values = scans_of(spectra, "holmium spectrum")
    mean = np.nanmean(values, axis=0) if len(labels) > 1 else values[0]
    inside = [b for b in bands_nm if wl[0] < b < wl[-1]]
    if not inside:
        raise InputError(f"holmium spectrum: measured {wl[0]:g}-{wl[-1]:g} nm holds none of "
                         f"the bands {', '.join(f'{b:g}' for b in bands_nm)} nm")
    rows, offsets, u_fit = [], [], []
    for band in bands_nm:
        tol = uv_tolerance_nm if band < UV_VIS_BOUNDARY_NM else vis_tolerance_nm
        if band not in inside:
            rows.append({"item": f"band {band:g} nm", "measured": np.nan, "expected": band,
                         "low": band - tol, "high": band + tol, "unit": "nm",
                         "passed": False, "note": "not in the measured range"})
            continue
        pos, u, note = band_position(wl, mean, band, search_nm=search_nm or tol + 2.0,
                                     fit_half_width_nm=fit_half_width_nm, method=method)
        found = bool(np.isfinite(pos))
        if found:
            offsets.append(pos - band)
            u_fit.append(u if np.isfinite(u) else 0.0)
            note = (f"offset {pos - band:+.3f} ± {u:.3f} nm" + (f"; {note}" if note else ""))
        rows.append({"item": f"band {band:g} nm", "measured": pos, "expected": band,
                     "low": band - tol, "high": band + tol, "unit": "nm",
                     "passed": found and abs(pos - band) <= tol, "note": note})
    n = len(offsets)
    offset = float(np.mean(offsets)) if n else float("nan")
    if n >= 2:
        spread = float(np.var(offsets, ddof=1)) / n
        u_off = float(np.sqrt(max(spread, float(np.mean(np.square(u_fit)) / n))
                              + reference_u_nm**2))
    elif n == 1:
        u_off = float(np.hypot(u_fit[0], reference_u_nm))
    else:
        u_off = float("nan")
    notes = []
    if len(labels) > 1:
        notes.append(f"{len(labels)} scans averaged before locating the bands")
    if bandwidth_nm is None:
        notes.append("spectral bandwidth not stated: band positions depend on it")
    return CheckResult(
        check="wavelength", items=items_frame(rows),
        summary={"offset_nm": offset, "u_offset_nm": u_off, "bands_found": n},
        settings={"bands_nm": [float(b) for b in bands_nm], "uv_tolerance_nm": uv_tolerance_nm,
                  "vis_tolerance_nm": vis_tolerance_nm, "search_nm": search_nm,
                  "fit_half_width_nm": fit_half_width_nm, "method": method,
                  "reference_u_nm": reference_u_nm, "bandwidth_nm": bandwidth_nm},
        notes=notes)

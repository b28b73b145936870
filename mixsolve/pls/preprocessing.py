"""Preprocessing of PLS spectra: wavelength window, scatter correction (offset removal, SNV,
MSC), Savitzky–Golay derivative, centring, scaling.

The same steps, with the settings and means recorded in the model, are applied to the
calibration mixtures and to every spectrum predicted later (docs/calibration.md).
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np
import xarray as xr
from scipy.signal import savgol_filter

from mixsolve.errors import InputError
from mixsolve.spectra import (
    SAMPLE,
    WAVELENGTH,
    WAVENUMBER_AXIS,
    check_number,
    nm_from_wavenumber,
)

Scale = Literal["none", "autoscale"]
SCALES: tuple[str, ...] = ("none", "autoscale")
Scatter = Literal["none", "offset", "snv", "msc"]
SCATTERS: tuple[str, ...] = ("none", "offset", "snv", "msc")


def calibration_arrays(spectra: xr.DataArray, window: tuple[float, float] | None
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Absorbance of the calibration mixtures over the window, checked to be complete.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Absorbance (AU), wavelength in nm, validated by :func:`mixsolve.spectra.check_spectra`.
    window : (float, float) or None
        Lowest and highest wavelength (nm) kept, both included; None keeps all.

    Returns
    -------
    absorbance : array, shape (n_samples, n_wavelengths)
        AU.
    wavelengths_nm : array, shape (n_wavelengths,)
        The model's wavelength grid (nm).

    Raises
    ------
    InputError
        Fewer than 2 wavelengths in the window, or a missing reading (NaN) in it.
    """
    wl = spectra[WAVELENGTH].values
    if window is not None:
        tol = 1e-9 * max(1.0, float(wl.max()))
        keep = (wl >= window[0] - tol) & (wl <= window[1] + tol)
        if keep.sum() < 2:
            raise InputError(f"window {window[0]:g}-{window[1]:g} nm holds {int(keep.sum())} "
                             f"measured wavelength(s) (measured {wl[0]:g}-{wl[-1]:g} nm); a "
                             "calibration needs at least 2")
        spectra = spectra.isel({WAVELENGTH: np.flatnonzero(keep)})
    values = spectra.transpose(SAMPLE, WAVELENGTH).values.astype(float)
    if np.isnan(values).any():
        i, j = np.argwhere(np.isnan(values))[0]
        raise InputError(
            f"spectra: calibration sample {str(spectra[SAMPLE].values[i])!r} has no reading at "
            f"{spectra[WAVELENGTH].values[j]:g} nm; calibration spectra must be complete over "
            "the window (narrow it with a window)")
    return values, spectra[WAVELENGTH].values.astype(float)


def check_derivative(window_points: int | None, polyorder: int, wavelengths_nm: np.ndarray,
                     axis: str = "nm") -> dict[str, Any] | None:
    """Validate Savitzky–Golay settings against the grid, on the spectra's own axis.

    Parameters
    ----------
    window_points, polyorder : int
        Savitzky–Golay window (points, odd) and polynomial order.
    wavelengths_nm : array, shape (n_wavelengths,)
        The model's grid (nm), ascending.
    axis : {"nm", "wavenumber_cm-1"}
        The axis the spectra were measured on (``attrs["axis"]``): the grid must be even
        on it, and the derivative is taken along it (an even cm⁻¹ grid is uneven in nm).

    Returns
    -------
    dict or None
        ``{"order": 1, "window_points", "polyorder", "step_nm"}`` on an nm axis;
        ``{"order": 1, "window_points", "polyorder", "axis": "wavenumber_cm-1",
        "step_cm-1"}`` on a wavenumber axis (the step of ν̃ = 10⁷/λ, positive; ν̃ falls
        along the ascending wavelengths); None without a derivative.

    Raises
    ------
    InputError
        An even or too short window, a window longer than the grid, or an uneven grid.
    """
    if window_points is None:
        return None
    w = int(check_number(window_points, "derivative", "points", low=3, integer=True,
                         hint="an odd number of points, e.g. 11"))
    if w % 2 == 0:
        raise InputError(f"derivative: {w} points is not an odd whole number ≥ 3, e.g. 11")
    p = int(check_number(polyorder, "polyorder", low=1, high=w, high_open=True, integer=True,
                         hint=f"the derivative window is {w} points"))
    if w > wavelengths_nm.size:
        raise InputError(f"derivative: window of {w} points is longer than the "
                         f"{wavelengths_nm.size} wavelengths used")
    if axis == WAVENUMBER_AXIS:
        steps = -np.diff(nm_from_wavenumber(wavelengths_nm))
        step = float(np.median(steps))
        if np.any(np.abs(steps - step) > 1e-6 * max(step, 1e-12) + 1e-9):
            raise InputError(
                f"derivative: the wavenumbers used are not evenly spaced (steps "
                f"{steps.min():g}-{steps.max():g} cm-1); a Savitzky–Golay derivative needs "
                "an even grid")
        return {"order": 1, "window_points": w, "polyorder": p, "axis": WAVENUMBER_AXIS,
                "step_cm-1": step}
    steps = np.diff(wavelengths_nm)
    step = float(np.median(steps))
    if np.any(np.abs(steps - step) > 1e-6 * max(step, 1e-12) + 1e-9):
        per_cm = -np.diff(nm_from_wavenumber(wavelengths_nm))
        even_cm = bool(np.all(np.abs(per_cm - np.median(per_cm))
                              <= 1e-6 * float(np.median(per_cm))))
        raise InputError(
            f"derivative: the wavelengths used are not evenly spaced (steps "
            f"{steps.min():g}-{steps.max():g} nm); a Savitzky–Golay derivative needs an even grid"
            + ("; they are even in wavenumber: give the axis in cm-1 (header wavenumber_cm-1) "
               "and the derivative is taken along it" if even_cm else ""))
    return {"order": 1, "window_points": w, "polyorder": p, "step_nm": step}


def preprocess(absorbance: np.ndarray, derivative: dict[str, Any] | None) -> np.ndarray:
    """Apply the per-spectrum preprocessing (last axis: wavelength).

    Parameters
    ----------
    absorbance : array, shape (n_samples, n_wavelengths)
        Absorbance (AU).
    derivative : dict or None
        From :func:`check_derivative`.

    Returns
    -------
    ndarray
        Absorbance (AU) unchanged, or its first derivative dA/dλ (AU/nm) by
        ``scipy.signal.savgol_filter(..., deriv=1, delta=step_nm)`` (edges: polynomial fit
        to the first/last window, the filter's ``mode="interp"``); on a wavenumber axis
        dA/dν̃ (AU·cm) with ``delta=-step_cm-1`` (the columns run along ascending λ, so
        ν̃ falls by one step from each to the next).
    """
    if derivative is None:
        return np.asarray(absorbance, dtype=float)
    delta = (-derivative["step_cm-1"] if derivative.get("axis") == WAVENUMBER_AXIS
             else derivative["step_nm"])
    return savgol_filter(np.asarray(absorbance, dtype=float), derivative["window_points"],
                         derivative["polyorder"], deriv=1, delta=delta,
                         axis=-1, mode="interp")


def centre_scale(x: np.ndarray, scale: str) -> tuple[np.ndarray, np.ndarray]:
    """Means and scales of preprocessed spectra, per wavelength.

    Parameters
    ----------
    x : array, shape (n_samples, n_wavelengths)
        Preprocessed spectra (AU, or AU/nm after a derivative).
    scale : {"none", "autoscale"}
        ``none``: scale 1; ``autoscale``: the standard deviation over samples (ddof 1),
        1 where a wavelength does not vary.

    Returns
    -------
    mean, scale : array, shape (n_wavelengths,)
        Centred and scaled spectra are (x − mean) / scale.
    """
    mean = x.mean(axis=0)
    if scale == "none":
        return mean, np.ones(x.shape[1])
    sd = x.std(axis=0, ddof=1)
    return mean, np.where(sd > 0, sd, 1.0)


def msc_reference(absorbance: np.ndarray) -> np.ndarray:
    """The reference spectrum of multiplicative scatter correction: the mean spectrum.

    Parameters
    ----------
    absorbance : array, shape (n_samples, n_wavelengths)
        Absorbance (AU) of the calibration mixtures over the model's window.

    Returns
    -------
    array, shape (n_wavelengths,)
        Their mean spectrum (AU), stored in the model (``msc_reference``) and used for every
        spectrum predicted later.
    """
    return np.asarray(absorbance, dtype=float).mean(axis=0)


def correct_scatter(absorbance: np.ndarray, scatter: str,
                    reference: np.ndarray | None = None,
                    names: list[str] | None = None) -> np.ndarray:
    """Remove each spectrum's offset, or its offset and scale (SNV, MSC).

    Parameters
    ----------
    absorbance : array, shape (n_samples, n_wavelengths)
        Absorbance (AU) over the model's window.
    scatter : {"none", "offset", "snv", "msc"}
        The correction (see Notes).
    reference : array, shape (n_wavelengths,), optional
        The MSC reference spectrum (AU), :func:`msc_reference` of the calibration mixtures;
        needed for ``msc`` only.
    names : list of str, optional
        Sample names, for messages.

    Returns
    -------
    ndarray, shape (n_samples, n_wavelengths)
        ``none``: absorbance (AU) unchanged; ``offset``: AU; ``snv`` and ``msc``:
        dimensionless (SNV) or on the scale of the reference (MSC, AU).

    Raises
    ------
    InputError
        A spectrum that SNV cannot scale (the same reading everywhere) or that MSC cannot
        match to the reference (slope b ≤ 0: it does not resemble the mean calibration
        spectrum); the message names the sample.

    Notes
    -----
    With x a spectrum over its p wavelengths, x̄ its mean and s its standard deviation
    (ddof 1):

    - offset: x − x̄, a constant baseline removed from each spectrum;
    - standard normal variate (Barnes, Dhanoa & Lister, Appl. Spectrosc. 43 (1989)
      772–777): (x − x̄)/s;
    - multiplicative scatter correction (Geladi, MacDougall & Martens, Appl. Spectrosc.
      39 (1985) 491–500): x = a + b·m + e fitted by least squares against the reference m,
      then (x − a)/b.

    Each acts on one spectrum at a time, so a prediction applies exactly what the
    calibration did (for MSC, with the calibration's reference).
    """
    x = np.asarray(absorbance, dtype=float)
    if scatter == "none":
        return x
    centred = x - x.mean(axis=-1, keepdims=True)
    if scatter == "offset":
        return centred
    if scatter == "snv":
        sd = x.std(axis=-1, ddof=1, keepdims=True)
        _refuse(sd[:, 0] <= 0, names, "has the same reading at every wavelength: SNV cannot "
                "scale it")
        return centred / sd
    if reference is None:
        raise InputError("scatter: multiplicative scatter correction needs its reference "
                         "spectrum")
    m = np.asarray(reference, dtype=float)
    mc = m - m.mean()
    denominator = float(mc @ mc)
    if denominator <= 0:
        raise InputError("scatter: the MSC reference spectrum (the mean calibration spectrum) "
                         "is flat; use snv or offset")
    b = centred @ mc / denominator
    a = x.mean(axis=-1) - b * m.mean()
    _refuse(~(b > 0), names, "does not resemble the mean calibration spectrum (MSC slope "
            "≤ 0): MSC cannot correct it")
    return (x - a[:, None]) / b[:, None]


def _refuse(bad: np.ndarray, names: list[str] | None, what: str) -> None:
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        who = repr(names[i]) if names is not None else f"number {i + 1}"
        raise InputError(f"spectra: sample {who} {what}; remove it or choose another "
                         "scatter correction")

"""Labelled spectra: construction and validation at the public boundary.

A spectra array is an :class:`xarray.DataArray` with a ``wavelength`` dimension
(nm, float, strictly increasing) and any other dimensions (usually ``sample``).
Attributes: ``quantity`` ("absorbance"), ``quantity_read`` (what the numbers were before
:func:`to_absorbance` turned them into absorbance), ``pathlength_cm`` where known, ``source``,
and ``axis`` (:data:`AXES`) when the file gave wavenumbers: the coordinate is still the
wavelength in nm, λ = 10⁷/ν̃ (:func:`nm_from_wavenumber`), and ``axis`` says the grid the
file was measured on (even in cm⁻¹, so uneven in nm; docs/formats.md, "Wavenumber axes").
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.names import check_unique_names

WAVELENGTH = "wavelength"
SAMPLE = "sample"

#: What the numbers of a spectra file or array are (``quantity``); each becomes absorbance
#: on reading (:func:`to_absorbance`).
QUANTITIES = ("absorbance", "transmittance", "percent_transmittance", "milliabsorbance")
Quantity = Literal["absorbance", "transmittance", "percent_transmittance", "milliabsorbance"]
#: Readings whose median is above this (AU) cannot be absorbance: no photometer reads
#: beyond about 4-6 AU (common practice).
NOT_ABSORBANCE_MEDIAN = 10.0
#: ... and if none is above this, they look like percent transmittance (a reading at the
#: blank's level lies a little above 100 %); otherwise like milliabsorbance.
PERCENT_T_MAX = 110.0
#: The spectral axes a file may be given in (``attrs["axis"]``, absent meaning ``"nm"``):
#: wavelength in nm, or wavenumber in cm⁻¹ held as wavelength λ = 10⁷/ν̃ nm.
AXES = ("nm", "wavenumber_cm-1")
WAVENUMBER_AXIS = "wavenumber_cm-1"
#: nm per cm: λ (nm) = 10⁷ / ν̃ (cm⁻¹).
NM_PER_CM = 1e7
#: How each axis is named in messages.
AXIS_WORDS = {"nm": "wavelength in nm", WAVENUMBER_AXIS: "wavenumber in cm⁻¹"}


def nm_from_wavenumber(wavenumber_cm: Any) -> np.ndarray:
    """Wavelength (nm) of wavenumbers (cm⁻¹): λ = 10⁷/ν̃, its own inverse.

    Parameters
    ----------
    wavenumber_cm : array_like
        Wavenumbers ν̃ (cm⁻¹), positive.

    Returns
    -------
    ndarray
        λ (nm); applied to wavelengths (nm) it gives wavenumbers (cm⁻¹).
    """
    return NM_PER_CM / np.asarray(wavenumber_cm, dtype=float)


def native_axis(data: xr.DataArray | xr.Dataset, name: str = "spectra") -> str:
    """The axis ``data`` were given in: ``attrs["axis"]``, ``"nm"`` when absent.

    Raises
    ------
    InputError
        An ``axis`` attribute that is not one of :data:`AXES`.
    """
    axis = data.attrs.get("axis", "nm")
    if axis not in AXES:
        raise InputError(f"{name}: attribute axis {axis!r} is not one of "
                         f"{', '.join(AXES)}")
    return str(axis)


def check_same_axis(first: xr.DataArray | xr.Dataset, first_name: str,
                    second: xr.DataArray | xr.Dataset, second_name: str) -> str:
    """Refuse data given on different axes (nm against cm⁻¹); return the common axis.

    The values would combine correctly (both are held in nm), but a library measured in
    the ultraviolet–visible and spectra from an infrared instrument are almost surely a
    mistake, so mixing them is never silent (docs/formats.md, "Wavenumber axes").

    Raises
    ------
    InputError
        The two ``axis`` attributes differ; the message names both and the fix.
    """
    a, b = native_axis(first, first_name), native_axis(second, second_name)
    if a != b:
        raise InputError(
            f"{second_name}: given as {AXIS_WORDS[b]}, but {first_name} as {AXIS_WORDS[a]}; "
            "the two are not mixed silently: give both on one axis (convert one file, "
            "λ nm = 10⁷/ν̃ cm⁻¹; in Python, set attrs['axis'] of one to the other's)")
    return a


def make_spectra(
    values: Any,
    wavelengths_nm: Sequence[float] | np.ndarray,
    samples: Sequence[str] | None = None,
    *,
    source: str = "",
    pathlength_cm: float | None = None,
    quantity: Quantity | None = None,
) -> xr.DataArray:
    """Build a validated spectra array from plain arrays.

    Parameters
    ----------
    values : array_like, shape (n_samples, n_wavelengths)
        Absorbance (dimensionless, AU), or the ``quantity`` named. NaN marks a missing
        reading.
    wavelengths_nm : array_like, shape (n_wavelengths,)
        Wavelengths in nm, any order; they are sorted ascending.
    samples : sequence of str, optional
        Sample names; ``sample_1``, ``sample_2`` ... when omitted.
    source : str
        Where the spectra came from (file name), kept in ``attrs``.
    pathlength_cm : float, optional
        Cell pathlength, if known, kept in ``attrs``.
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What ``values`` are; converted to absorbance (:func:`to_absorbance`). Omitted,
        values that cannot be absorbance are refused.

    Returns
    -------
    DataArray with dims ("sample", "wavelength")
        Absorbance (AU); ``attrs["quantity_read"]`` says what ``values`` were.
    """
    data = np.atleast_2d(np.asarray(values, dtype=float))
    wl = np.asarray(wavelengths_nm, dtype=float)
    if samples is None:
        samples = [f"sample_{i + 1}" for i in range(data.shape[0])]
    if data.shape != (len(samples), wl.size):
        raise InputError(
            f"spectra values have shape {data.shape}; expected (samples, wavelengths) = "
            f"({len(samples)}, {wl.size})"
        )
    attrs: dict[str, Any] = {"quantity": "absorbance", "source": source}
    if pathlength_cm is not None:
        attrs["pathlength_cm"] = float(pathlength_cm)
    da = xr.DataArray(
        data,
        dims=(SAMPLE, WAVELENGTH),
        coords={SAMPLE: [str(s) for s in samples], WAVELENGTH: wl},
        attrs=attrs,
        name="absorbance",
    )
    return to_absorbance(check_spectra(da.sortby(WAVELENGTH)), quantity, source or "values")


def to_absorbance(spectra: xr.DataArray, quantity: Quantity | None = None,
                  where: str | None = None) -> xr.DataArray:
    """Spectra as absorbance, from the quantity their numbers are.

    Parameters
    ----------
    spectra : DataArray
        Readings as they were measured or exported (numpy- or dask-backed).
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What the readings are: absorbance A (AU); transmittance T = I/I₀ as a fraction
        (0–1); percent transmittance %T = 100·T (0–100); milliabsorbance (mAU, 1/1000 AU).
        None: absorbance, refused when the values cannot be absorbance (see Notes).
    where : str, optional
        The file or array the readings come from, for messages; default
        ``attrs["source"]``, else "spectra".

    Returns
    -------
    DataArray
        Absorbance (AU), same dims and coordinates; ``attrs["quantity"]`` is
        ``"absorbance"``, ``attrs["quantity_read"]`` what the readings were, and for
        numpy-backed transmittance ``attrs["dark_readings"]`` how many were ≤ 0.

    Raises
    ------
    InputError
        ``quantity`` not one of :data:`QUANTITIES`; or ``quantity`` omitted and the values
        cannot be absorbance (one line naming the likely quantity and the option).

    Notes
    -----
    Conversions (IUPAC Gold Book, "absorbance", decadic: A = −log10 T):

    - transmittance: A = −log10(T)
    - percent transmittance: A = 2 − log10(%T), i.e. −log10(%T/100)
    - milliabsorbance: A = mAU / 1000

    A transmittance ≤ 0 (a dark reading: nothing reached the detector, or the dark
    correction overshot) has no absorbance; it becomes NaN, a missing reading, which
    ``unmix`` flags ``missing_readings`` and plates record as the marker ``dark``.
    Transmittance above 1 (100 %) is kept: it gives a small negative absorbance, as a
    reading at the blank's level does.

    Without ``quantity`` the readings are taken as absorbance unless they cannot be one
    (common practice: no photometer reads beyond about 4–6 AU, and a transmittance
    export is on a 0–100 scale). Only numpy-backed arrays are looked at; a lazy cube is
    not read for this. When the median of the finite readings is above 10, most of them
    lie beyond any photometer's range and the readings are refused:

    - none above 110: they look like percent transmittance (a reading at the blank's
      level lies a little above 100 %);
    - otherwise: they look like milliabsorbance.

    Both hints name the option; milliabsorbance readings that all lie below 110 are
    named percent transmittance. Transmittance as a fraction (0–1) is not guessed:
    readings of 0.3–1 are just as likely absorbances of a dilute sample, so such a file
    is read as absorbance unless ``quantity="transmittance"`` says otherwise; nor are
    percent transmittances of strongly absorbing samples (median below 10 %, i.e. most
    absorbances above 1), nor a few mAU near the baseline. Given
    ``quantity="absorbance"``, values are never refused on these grounds.
    """
    if quantity is None:
        _refuse_unlikely_absorbance(spectra, where or spectra.attrs.get("source") or "spectra")
        read = "absorbance"
    else:
        read = check_option(quantity, QUANTITIES, "quantity")
    attrs = {**spectra.attrs, "quantity": "absorbance", "quantity_read": read}
    if read == "absorbance":
        out = spectra.copy(deep=False)
    elif read == "milliabsorbance":
        out = spectra / 1000.0
    else:
        t = spectra / 100.0 if read == "percent_transmittance" else spectra
        lit = t > 0
        out = 0.0 - np.log10(t.where(lit))  # NaN (missing) where T <= 0: dark
        if not _is_dask(spectra):
            attrs["dark_readings"] = int((np.isfinite(t.values) & ~lit.values).sum())
    out.attrs = attrs
    out.name = spectra.name
    return out


def _refuse_unlikely_absorbance(spectra: xr.DataArray, where: str) -> None:
    """Refuse numpy-backed readings that cannot be absorbance (:func:`to_absorbance`)."""
    if _is_dask(spectra):
        return
    values = np.asarray(spectra.values, dtype=float)
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return
    high, median = float(finite.max()), float(np.median(finite))
    if median <= NOT_ABSORBANCE_MEDIAN:
        return
    if high <= PERCENT_T_MAX:
        raise InputError(
            f"{where}: most readings are above {NOT_ABSORBANCE_MEDIAN:g} (median {median:.3g}) "
            f"and none above {PERCENT_T_MAX:g}, which looks like percent transmittance, not "
            "absorbance; give quantity='percent_transmittance' (or quantity='absorbance' if it "
            "really is)")
    raise InputError(
        f"{where}: most readings are above {NOT_ABSORBANCE_MEDIAN:g} (median {median:.4g}, "
        f"largest {high:.4g}), which no absorbance reading is; it looks like milliabsorbance "
        "(mAU): give quantity='milliabsorbance' (or quantity='absorbance' if it really is)")


def check_spectra(spectra: xr.DataArray, name: str = "spectra", *,
                  scan_values: bool = True) -> xr.DataArray:
    """Check a spectra array and return it with float64 wavelengths in ascending order.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
    name : str
        How to refer to the array in error messages.
    scan_values : bool
        Look for infinite absorbances (numpy-backed arrays). ``unmix`` passes False: its
        solver reads every value anyway and refuses an infinity itself (naming the
        spectrum and wavelength for numpy-backed spectra; for dask-backed ones, whose
        values this check never scanned, with this message when the chunk is computed),
        so the data are not read one more time.

    Returns
    -------
    DataArray
        Wavelengths ascending; the text labels of every other dimension (sample or
        component names) in their normal form (:func:`mixsolve.names.normalise_name`).

    Raises
    ------
    InputError
        Not a DataArray, no ``wavelength`` dimension, duplicate or non-finite wavelengths,
        infinite absorbance values, or labels that are empty or differ only in case,
        spacing or Unicode form (:func:`mixsolve.names.check_unique_names`).
    """
    if not isinstance(spectra, xr.DataArray):
        raise InputError(
            f"{name}: expected an xarray.DataArray with a 'wavelength' dimension, got "
            f"{type(spectra).__name__}; build one with mixsolve.make_spectra or read_spectra"
        )
    if WAVELENGTH not in spectra.dims:
        raise InputError(f"{name}: dims {spectra.dims} have no 'wavelength' dimension")
    if WAVELENGTH not in spectra.coords:
        raise InputError(f"{name}: the 'wavelength' dimension has no coordinate (nm)")
    wl = np.asarray(spectra[WAVELENGTH].values, dtype=float)
    if wl.size == 0:
        raise InputError(f"{name}: no wavelengths")
    if not np.all(np.isfinite(wl)):
        raise InputError(f"{name}: wavelength coordinate holds non-finite values")
    if np.any(wl <= 0):
        raise InputError(f"{name}: wavelength {wl[wl <= 0][0]:g} nm is not positive")
    if np.unique(wl).size != wl.size:
        values, counts = np.unique(wl, return_counts=True)
        raise InputError(f"{name}: wavelength {values[counts > 1][0]:g} nm appears twice")
    out = _normal_labels(spectra.assign_coords({WAVELENGTH: wl}), name)
    if np.any(np.diff(wl) < 0):
        out = out.sortby(WAVELENGTH)
    if scan_values and not _is_dask(out) and np.isinf(out.values).any():
        raise InputError(
            f"{name}: absorbance values include infinity; use NaN for a missing reading")
    return out


def _normal_labels(da: xr.DataArray, name: str) -> xr.DataArray:
    """Text labels of every dimension but wavelength in normal form, checked unique."""
    for dim in da.dims:
        if dim == WAVELENGTH or dim not in da.coords or da[dim].dtype.kind not in "UO":
            continue
        labels = da[dim].values.tolist()
        if da[dim].dtype.kind == "O" and not all(isinstance(v, str) for v in labels):
            continue
        normal = check_unique_names(labels, f"{name}, {dim}s")
        if normal != labels:
            da = da.assign_coords({dim: normal})
    return da


def _is_dask(da: xr.DataArray) -> bool:
    return da.chunks is not None


def check_window(window: Any, name: str = "window") -> tuple[float, float] | None:
    """Validate a wavelength window ``(low, high)`` in nm, both ends included."""
    if window is None:
        return None
    try:
        low, high = (float(v) for v in window)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected (low, high) in nm, got {window!r}") from None
    if not (np.isfinite(low) and np.isfinite(high)) or low >= high:
        raise InputError(f"{name}: {low:g}-{high:g} nm is not an increasing pair of wavelengths")
    return low, high


def check_number(value: Any, name: str, unit: str = "", *, low: float | None = None,
                 high: float | None = None, low_open: bool = False, high_open: bool = False,
                 positive: bool = False, integer: bool = False, hint: str = "") -> float:
    """A finite number given as an option, as float, checked against its allowed range.

    The one check of a scalar option or setting: every refusal has the shape
    ``"{name}: {value} {unit} is not {what is allowed}"``, e.g.
    ``"pathlength_cm: 0 cm is not a positive number"`` or
    ``"stray_fraction: 1.5 is not a number ≥ 0 and below 1"``.

    Parameters
    ----------
    value : Any
        The option's value (a number, or text that reads as one).
    name : str
        The option as the caller named it (the API parameter, e.g. ``pathlength_cm``).
    unit : str
        Its unit, for the message (``"nm"``, ``"AU"``); empty for none.
    low, high : float, optional
        Smallest and largest allowed value, included unless ``low_open``/``high_open``.
    low_open, high_open : bool
        Exclude ``low`` (``high``) itself.
    positive : bool
        Refuse zero and negative numbers (``low=0, low_open=True``).
    integer : bool
        Refuse a number that is not whole (``2.5 draws``); the result is still a float.
    hint : str
        A fix appended to the message after ``;`` (e.g. why a bound is there).

    Returns
    -------
    float

    Raises
    ------
    InputError
        Not a number (a bool counts as none), NaN or infinite
        ("bandwidth_nm: nan nm is not a finite number"), not whole when ``integer``, or
        outside the allowed range.
    """
    if positive:
        low, low_open = 0.0, True
    if isinstance(value, bool | np.bool_):
        raise InputError(f"{name}: {value!r} is not a number")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: {value!r} is not a number") from None
    shown = f"{number:g}{' ' + unit if unit else ''}"
    if not np.isfinite(number):
        raise InputError(f"{name}: {shown} is not a finite number")
    below = low is not None and (number <= low if low_open else number < low)
    above = high is not None and (number >= high if high_open else number > high)
    if below or above or (integer and not number.is_integer()):
        allowed = _allowed(unit, low, high, low_open, high_open, integer)
        raise InputError(f"{name}: {shown} is not {allowed}" + (f"; {hint}" if hint else ""))
    return number


def _allowed(unit: str, low: float | None, high: float | None, low_open: bool,
             high_open: bool, integer: bool) -> str:
    """What :func:`check_number` accepts, in words: "a positive number", "a number ≥ 0"."""
    kind = "whole number" if integer else "number"
    if low == 0 and low_open and high is None:
        return f"a positive {kind}"
    if low is not None and high is not None and not (low_open or high_open):
        bounds = f"from {low:g} to {high:g}"
    else:
        parts = []
        if low is not None:
            parts.append(f"{'>' if low_open else '≥'} {low:g}")
        if high is not None:
            parts.append(f"below {high:g}" if high_open else f"≤ {high:g}")
        bounds = " and ".join(parts)
    if not bounds:
        return f"a {kind}"
    nonzero = any(v not in (None, 0) for v in (low, high))
    return f"a {kind} {bounds}" + (f" {unit}" if unit and nonzero else "")


def check_wavelength_list(wavelengths: Any, name: str = "wavelengths") -> np.ndarray:
    """A list of wavelengths (nm) given as an option, as a float array in the given order.

    Raises
    ------
    InputError
        An empty list, or a wavelength that is not a number, not finite or not positive
        (``450, nan, 620`` is refused: NaN matches no measured wavelength).
    """
    try:
        values = np.asarray(list(wavelengths), dtype=float).ravel()
    except (TypeError, ValueError):
        raise InputError(f"{name}: {wavelengths!r} is not a list of wavelengths in nm") \
            from None
    if values.size == 0:
        raise InputError(f"{name}: the list is empty")
    bad = values[~np.isfinite(values) | (values <= 0)]
    if bad.size:
        raise InputError(f"{name}: {bad[0]:g} nm is not a positive finite wavelength")
    return values


def check_option(value: str, allowed: Sequence[str], name: str) -> str:
    """Check a string option against its closed set of values."""
    if value not in allowed:
        raise InputError(f"{name}: {value!r} is not one of {', '.join(map(repr, allowed))}")
    return value

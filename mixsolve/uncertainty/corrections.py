"""Corrections applied to measured spectra before fitting: cell blank, cell ratio, λ offset.

Cell blank. In a double-beam instrument the sample cell and the reference cell are rarely
identical: their windows absorb, reflect and scatter a little differently. Reading the
*sample* cell filled with solvent against the reference cell gives the cell-blank spectrum
A_cb(λ); it is subtracted from every sample spectrum read in that cell.

Cell pathlength ratio. When the sample cell's pathlength differs from the nominal one the
concentrations are computed with, r = b_cell / b_nominal (e.g. from one solution read in
both cells, :func:`pathlength_ratio`). The corrected spectrum is

    A_corr(λ) = (A(λ) − A_cb(λ)) / r,

the absorbance a nominal cell would have shown.

Wavelength offset. A wavelength-scale check (holmium oxide) gives the offset
δ = λ_read − λ_true of the instrument's scale (nm); the corrected axis is λ_read − δ.

The uncertainties of these corrections (of the blank's mean, of r, of δ) enter the
uncertainty budget (:func:`mixsolve.uncertainty_budget`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.spectra import WAVELENGTH, check_number, check_spectra


@dataclass(frozen=True)
class CellCorrection:
    """A cell blank and a pathlength ratio, with their standard uncertainties.

    Attributes
    ----------
    blank : DataArray with dims ("wavelength",) or None
        Mean cell-blank absorbance (AU); None for no blank.
    u_blank : DataArray with dims ("wavelength",) or None
        Standard uncertainty of ``blank`` (AU): SD/√m of m scans; NaN where not stated
        (a single scan without ``u_au``).
    n_scans : int
        Scans averaged into ``blank`` (0 without a blank).
    ratio : float
        r = b_cell / b_nominal (dimensionless).
    u_ratio : float
        Standard uncertainty of r.
    """

    blank: xr.DataArray | None = None
    u_blank: xr.DataArray | None = None
    n_scans: int = 0
    ratio: float = 1.0
    u_ratio: float = 0.0

    def __post_init__(self) -> None:
        check_number(self.ratio, "ratio", positive=True)
        check_number(self.u_ratio, "u_ratio", low=0)


def cell_blank(scans: xr.DataArray, *, u_au: float | None = None, ratio: float = 1.0,
               u_ratio: float = 0.0) -> CellCorrection:
    """Make a cell correction from one or more cell-blank scans.

    Parameters
    ----------
    scans : DataArray with dims (..., "wavelength")
        Absorbance (AU) of the sample cell filled with solvent, read against the reference
        cell; every spectrum along the other dims is one scan.
    u_au : float, optional
        Standard uncertainty of the blank (AU) at every wavelength; default SD/√m of the
        m scans (m ≥ 2), NaN (not stated) for a single scan.
    ratio, u_ratio : float
        Pathlength ratio r = b_cell/b_nominal and its standard uncertainty.

    Returns
    -------
    CellCorrection

    Raises
    ------
    InputError
        A blank with a missing reading, or a negative ``u_au``.
    """
    scans = check_spectra(scans, "cell blank")
    flat = scans.transpose(..., WAVELENGTH).values.reshape(-1, scans.sizes[WAVELENGTH])
    if np.isnan(flat).any():
        i, j = np.argwhere(np.isnan(flat))[0]
        raise InputError(f"cell blank: scan {i + 1} has no reading at "
                         f"{scans[WAVELENGTH].values[j]:g} nm")
    m = flat.shape[0]
    mean = flat.mean(axis=0)
    if u_au is not None:
        u = np.full(mean.shape, check_number(u_au, "u_au", "AU", low=0))
    elif m >= 2:
        u = flat.std(axis=0, ddof=1) / np.sqrt(m)
    else:
        u = np.full(mean.shape, np.nan)
    coords = {WAVELENGTH: scans[WAVELENGTH].values}
    return CellCorrection(
        blank=xr.DataArray(mean, dims=(WAVELENGTH,), coords=coords, attrs={"units": "AU"}),
        u_blank=xr.DataArray(u, dims=(WAVELENGTH,), coords=coords, attrs={"units": "AU"}),
        n_scans=m, ratio=float(ratio), u_ratio=float(u_ratio))


def on_wavelengths(profile: xr.DataArray, wavelengths_nm: np.ndarray, name: str) -> np.ndarray:
    """Interpolate a (wavelength) profile linearly onto ``wavelengths_nm``, never extrapolating.

    Raises
    ------
    InputError
        A target wavelength outside the profile's range (named in the message).
    """
    grid = profile[WAVELENGTH].values
    target = np.asarray(wavelengths_nm, dtype=float)
    tol = 1e-9 * max(1.0, float(grid.max()))
    outside = target[(target < grid[0] - tol) | (target > grid[-1] + tol)]
    if outside.size:
        raise InputError(f"{name}: covers {grid[0]:g}-{grid[-1]:g} nm, but {outside[0]:g} nm is "
                         "needed; measure it over the whole range of the samples")
    return np.interp(target, grid, profile.values)


def correct_cells(spectra: xr.DataArray, correction: CellCorrection) -> xr.DataArray:
    """Return (A − A_cb)/r for every spectrum.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
        Sample absorbance (AU), read in the sample cell against the reference cell.
    correction : CellCorrection
        The blank is interpolated linearly onto the spectra's wavelengths (never
        extrapolated).

    Returns
    -------
    DataArray
        Corrected absorbance (AU), same dims; ``attrs["cell_correction"]`` says what was done.

    Raises
    ------
    InputError
        The blank does not cover the spectra's wavelengths.
    """
    return _correct_cells(check_spectra(spectra), correction)


def _correct_cells(spectra: xr.DataArray, correction: CellCorrection) -> xr.DataArray:
    """:func:`correct_cells` of spectra already checked."""
    out = spectra
    what = []
    if correction.blank is not None:
        blank = on_wavelengths(correction.blank, spectra[WAVELENGTH].values, "cell blank")
        out = out - xr.DataArray(blank, dims=(WAVELENGTH,),
                                 coords={WAVELENGTH: spectra[WAVELENGTH].values})
        what.append(f"cell blank subtracted (mean of {correction.n_scans} scan(s))")
    if correction.ratio != 1.0:
        out = out / correction.ratio
        what.append(f"divided by the pathlength ratio {correction.ratio:g}")
    out = out.transpose(*spectra.dims)
    out.attrs = {**spectra.attrs, "cell_correction": "; ".join(what) or "none"}
    return out


def pathlength_ratio(in_cell: xr.DataArray, in_nominal_cell: xr.DataArray) -> tuple[float, float]:
    """r = b_cell/b_nominal from one absorbing solution read in both cells.

    Parameters
    ----------
    in_cell, in_nominal_cell : DataArray with dims ("wavelength",)
        Blank-corrected absorbance (AU) of the same solution in the cell to be corrected
        and in the nominal cell, at the same wavelengths (choose where A is well above the
        noise, e.g. 0.3–1.5 AU).

    Returns
    -------
    (r, u_r) : tuple of float
        Least-squares slope through the origin r = Σ A_c A_n / Σ A_n² and its standard
        uncertainty s/√Σ A_n², s² = Σ (A_c − r A_n)²/(n − 1) (NaN for n = 1).

    Raises
    ------
    InputError
        Different wavelengths, fewer than one reading, or no absorbance at all.
    """
    a = check_spectra(in_cell, "cell reading")
    n = check_spectra(in_nominal_cell, "nominal-cell reading")
    if a.shape != n.shape or not np.allclose(a[WAVELENGTH].values, n[WAVELENGTH].values):
        raise InputError("pathlength ratio: the two readings must have the same wavelengths")
    x, y = n.values.ravel(), a.values.ravel()
    keep = np.isfinite(x) & np.isfinite(y)
    x, y = x[keep], y[keep]
    sxx = float(np.sum(x * x))
    if x.size == 0 or sxx == 0:
        raise InputError("pathlength ratio: the nominal-cell reading has no absorbance")
    r = float(np.sum(x * y) / sxx)
    s2 = float(np.sum((y - r * x) ** 2) / (x.size - 1)) if x.size > 1 else float("nan")
    return r, float(np.sqrt(s2 / sxx))


#: Largest wavelength-scale offset accepted as a correction (nm): pharmacopoeial
#: tolerances are ±1 nm (UV) and ±3 nm (visible), so ten times that is surely a mistake.
MAX_WAVELENGTH_OFFSET_NM = 10.0


def shift_wavelengths(spectra: xr.DataArray, offset_nm: float) -> xr.DataArray:
    """Correct the wavelength axis by a known scale offset: λ_corrected = λ_read − δ.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
    offset_nm : float
        δ = λ_read − λ_true (nm), as reported by the wavelength-scale check (a positive δ:
        the instrument reads too high).

    Returns
    -------
    DataArray
        Same values on the corrected axis; ``attrs["wavelength_offset_nm"]`` records δ.
        Wavelengths given later for the fit (``--wavelengths``) refer to this axis.

    Raises
    ------
    InputError
        An offset beyond ±``MAX_WAVELENGTH_OFFSET_NM`` (:func:`check_offset`), or one that
        makes a wavelength ≤ 0.
    """
    return _shift(check_spectra(spectra), check_offset(offset_nm))


def check_offset(offset_nm: object, name: str = "offset_nm") -> float:
    """A wavelength-scale offset δ (nm) within ±``MAX_WAVELENGTH_OFFSET_NM``, as float.

    Raises
    ------
    InputError
        Not a finite number, or beyond the limit: an error that large is a fault to
        repair, not to correct for.
    """
    return check_number(offset_nm, name, "nm", low=-MAX_WAVELENGTH_OFFSET_NM,
                        high=MAX_WAVELENGTH_OFFSET_NM,
                        hint="an error that large is a fault to repair, not to correct for "
                             "(check the sign and the unit)")


def _shift(spectra: xr.DataArray, delta: float) -> xr.DataArray:
    """:func:`shift_wavelengths` of spectra and an offset already checked."""
    check_number(delta, "offset_nm", "nm", high=float(spectra[WAVELENGTH].values[0]),
                 high_open=True, hint="the corrected wavelengths (read − offset) must stay "
                                      "above 0 nm")
    wl = spectra[WAVELENGTH].values - delta
    out = spectra.assign_coords({WAVELENGTH: wl})
    out.attrs = {**spectra.attrs, "wavelength_offset_nm": delta}
    return out


def correct_spectra(spectra: xr.DataArray, cell: CellCorrection | None = None,
                    offset_nm: float | None = None
                    ) -> tuple[xr.DataArray, CellCorrection | None]:
    """Apply a measurement's corrections in order: cell blank and ratio, then the axis.

    The one place the corrections of measured spectra are made before fitting
    (``mixsolve unmix --cell-blank/--cell-ratio/--wavelength-offset``). The spectra are
    taken as checked (read by :func:`mixsolve.read_spectra`, made by
    :func:`mixsolve.make_spectra`) and are not scanned again: the fit checks them at its
    own boundary; :func:`correct_cells` and :func:`shift_wavelengths` are the checked
    forms of each step.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
        Measured absorbance (AU), numpy- or dask-backed, or a (wavelength) profile such
        as the SD of repeat scans.
    cell : CellCorrection, optional
        Subtracted and divided first (:func:`correct_cells`).
    offset_nm : float, optional
        δ = λ_read − λ_true (nm), then taken off the axis (:func:`shift_wavelengths`).

    Returns
    -------
    (DataArray, CellCorrection or None)
        The corrected spectra, and ``cell`` with its blank moved onto the corrected axis
        (so that the budget interpolates it where the fit's wavelengths are).
    """
    if cell is not None:
        spectra = _correct_cells(spectra, cell)
    if offset_nm is not None:
        delta = check_offset(offset_nm)
        spectra = _shift(spectra, delta)
        if cell is not None and cell.blank is not None and cell.u_blank is not None:
            cell = dataclasses.replace(cell, blank=_shift(cell.blank, delta),
                                       u_blank=_shift(cell.u_blank, delta))
    return spectra, cell

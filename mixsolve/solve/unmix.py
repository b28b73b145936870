"""The public classical-least-squares entry point, :func:`unmix`."""

from __future__ import annotations

import json
import warnings
from collections.abc import Sequence
from typing import Any

import numpy as np
import xarray as xr

from mixsolve._version import __version__
from mixsolve.errors import ExtrapolationWarning, InputError
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.solve.cls import METHODS, STATUS_CODES, Method, solve_cls
from mixsolve.solve.design import (
    BASELINE_TERMS,
    BASELINES,
    Baseline,
    check_solvable,
    design_matrix,
    select_wavelengths,
)
from mixsolve.spectra import WAVELENGTH, check_option, check_spectra, check_window
from mixsolve.units import conversion_factor

TERM = "term"

UNCERTAINTY_BASIS = (
    "Type A from the fit only: s * sqrt(diag((D^T D)^-1)) / pathlength, s^2 = RSS/(n - p) of "
    "each spectrum; library absorptivity, pathlength and volumetric uncertainties are not "
    "included; NaN when n - p = 0"
)


def unmix(
    spectra: xr.DataArray,
    library: xr.Dataset,
    *,
    window: tuple[float, float] | None = None,
    wavelengths: Sequence[float] | None = None,
    method: Method = "nnls",
    baseline: Baseline = "none",
    pathlength_cm: float | xr.DataArray | None = None,
    unit: str | None = None,
) -> xr.Dataset:
    """Resolve absorbance spectra into component concentrations by classical least squares.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
        Blank-corrected absorbance (AU); wavelength in nm. NaN marks a missing reading:
        that spectrum is fitted on the wavelengths it has and flagged. Numpy- or
        dask-backed (dask stays lazy; chunk along the other dimensions only).
    library : Dataset
        A mixsolve library (:func:`import_absorptivities`, :func:`build_library`).
        It is interpolated onto the measured wavelengths, never extrapolated.
    window : (float, float), optional
        Fit the measured wavelengths from ``low`` to ``high`` nm, both ends included.
    wavelengths : sequence of float, optional
        Fit exactly these measured wavelengths (nm). Without ``window`` or
        ``wavelengths``, every measured wavelength inside the library range is used.
    method : {"nnls", "ols"}
        ``nnls`` constrains concentrations to ≥ 0 (baseline terms stay free);
        ``ols`` is ordinary least squares.
    baseline : {"none", "offset", "linear"}
        Extra columns for a constant offset (AU) and a linear slope (AU/nm, about the
        mean used wavelength), for cell offsets or turbidity.
    pathlength_cm : float or DataArray, optional
        Pathlength b (cm), one value or one per spectrum; default the ``pathlength_cm``
        attribute of ``spectra``, else 1 cm.
    unit : str, optional
        Concentration unit of the result, e.g. ``"mg/L"``, ``"µmol/L"``; default the
        library's (mol/L or g/L). Converting between mass and amount needs the library's
        molar masses.

    Returns
    -------
    Dataset
        ``concentration`` and ``std_uncertainty`` (..., component), in ``attrs["unit"]``;
        ``baseline`` (..., term) in AU and AU/nm; ``fitted`` and ``residual``
        (..., wavelength) over the used wavelengths (AU); ``rms_residual`` (AU);
        ``dof`` (residual degrees of freedom n − p); ``status`` (bit mask, see
        ``mixsolve.solve.cls``); ``at_zero`` (..., component), true where NNLS held a
        component at 0; and, for numpy input, ``flags``: the sample's ``;``-joined flag
        codes (docs/flags.md). ``attrs`` record method, baseline, wavelengths,
        pathlength, unit, the uncertainty basis and the library provenance.

    Raises
    ------
    InputError
        Bad options, a selection outside the data or the library, a non-positive
        pathlength, or an impossible unit conversion.
    SolveError
        Fewer wavelengths than unknowns, or linearly dependent components.

    Warns
    -----
    ExtrapolationWarning
        Measured wavelengths outside the library were left out (no selection given).

    Notes
    -----
    Beer–Lambert for non-interacting absorbers (ASTM E169): A(λ) = b Σₖ εₖ(λ) cₖ
    + baseline(λ) + e(λ). With D the design matrix [ε at 1 cm | baseline columns],
    the fit solves min ‖A − D x‖² (``numpy.linalg.lstsq`` on column-scaled D for
    ``ols``; ``scipy.optimize.nnls`` after projecting out the free baseline columns for
    ``nnls``) and c = x / b. The standard uncertainty is Type A from the fit only:
    u(cₖ) = s √[(DᵀD)⁻¹]ₖₖ / b with s² = RSS/(n − p). For NNLS it is the linearised value
    of the unconstrained model at the solution, ignoring the constraint.

    Examples
    --------
    >>> result = unmix(spectra, lib, window=(400, 700), method="nnls")  # doctest: +SKIP
    >>> result["concentration"].sel(component="chl_a")  # doctest: +SKIP
    """
    spectra = check_spectra(spectra)
    library = check_library(library)
    check_option(method, METHODS, "method")
    check_option(baseline, BASELINES, "baseline")
    window = check_window(window)
    if spectra.chunks is not None:
        axis = spectra.dims.index(WAVELENGTH)
        if len(spectra.chunks[axis]) > 1:
            raise InputError(
                "spectra: the wavelength dimension spans several dask chunks; rechunk with "
                "spectra.chunk({'wavelength': -1})")
    b = _pathlength(spectra, pathlength_cm)

    measured = spectra[WAVELENGTH].values
    lib_wl = library[WAVELENGTH].values
    index, left_out = select_wavelengths(
        measured, (float(lib_wl[0]), float(lib_wl[-1])), window=window, wavelengths=wavelengths)
    if left_out.size:
        warnings.warn(
            f"{left_out.size} measured wavelength(s) outside the library "
            f"({lib_wl[0]:g}-{lib_wl[-1]:g} nm) were left out of the fit",
            ExtrapolationWarning, stacklevel=2)
    used = spectra.isel({WAVELENGTH: index})
    used_wl = measured[index]
    lib_used, _ = resample_library(library, used_wl)
    components = [str(c) for c in library[COMPONENT].values]
    absorptivity = lib_used["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
    design = design_matrix(absorptivity, used_wl, baseline)
    terms = components + list(BASELINE_TERMS[baseline])
    check_solvable(design, terms)

    coef, std_error, fitted, dof, status = xr.apply_ufunc(
        solve_cls, used,
        kwargs={"design": design, "n_components": len(components), "method": method},
        input_core_dims=[[WAVELENGTH]],
        output_core_dims=[[TERM], [TERM], [WAVELENGTH], [], []],
        dask="parallelized",
        output_dtypes=[float, float, float, np.int64, np.int64],
        dask_gufunc_kwargs={"output_sizes": {TERM: len(terms)}},
    )
    coef = coef.assign_coords({TERM: terms})
    std_error = std_error.assign_coords({TERM: terms})

    conc_unit = library.attrs["concentration_unit"]
    factor: Any = 1.0
    if unit is not None:
        factor = conversion_factor(conc_unit, unit, library["molar_mass_g_per_mol"].values)
        conc_unit = unit
    factor = xr.DataArray(np.broadcast_to(factor, (len(components),)), dims=(COMPONENT,),
                          coords={COMPONENT: components})
    n_comp = len(components)
    conc = (coef.isel({TERM: slice(0, n_comp)}).rename({TERM: COMPONENT}) / b) * factor
    u_conc = (std_error.isel({TERM: slice(0, n_comp)}).rename({TERM: COMPONENT}) / b) * factor
    fitted = fitted.assign_coords({WAVELENGTH: used_wl})
    residual = used - fitted
    result = xr.Dataset(
        {
            "concentration": conc.assign_attrs(units=conc_unit),
            "std_uncertainty": u_conc.assign_attrs(units=conc_unit, basis=UNCERTAINTY_BASIS),
            "baseline": coef.isel({TERM: slice(n_comp, None)}).assign_attrs(
                units="AU (offset), AU/nm (slope)"),
            "fitted": fitted.assign_attrs(units="AU"),
            "residual": residual.assign_attrs(units="AU"),
            "rms_residual": np.sqrt((residual**2).mean(WAVELENGTH, skipna=True)).assign_attrs(
                units="AU"),
            "dof": dof,
            "status": status,
            "at_zero": (conc == 0) & (method == "nnls"),
            "pathlength_cm": b,
        },
        attrs={
            "method": method,
            "baseline": baseline,
            "window_nm": "" if window is None else f"{window[0]:g}-{window[1]:g}",
            "wavelengths_nm": json.dumps([float(w) for w in used_wl]),
            "left_out_wavelengths_nm": json.dumps([float(w) for w in left_out]),
            "weights": "none",
            "unit": conc_unit,
            "library_unit": library.attrs["unit"],
            "library_provenance": library.attrs.get("provenance", ""),
            "source": spectra.attrs.get("source", ""),
            "uncertainty_basis": UNCERTAINTY_BASIS,
            "mixsolve_version": __version__,
        },
    )
    result = result.rename({TERM: "baseline_term"})
    if spectra.chunks is None:
        result["flags"] = flag_strings(result)
    return result


def _pathlength(spectra: xr.DataArray, pathlength_cm: Any) -> xr.DataArray:
    if pathlength_cm is None:
        pathlength_cm = spectra.attrs.get("pathlength_cm", 1.0)
    b = pathlength_cm if isinstance(pathlength_cm, xr.DataArray) else xr.DataArray(
        float(pathlength_cm))
    values = np.asarray(b.values, dtype=float)
    if not np.all(np.isfinite(values)) or np.any(values <= 0):
        bad = values[~(np.isfinite(values) & (values > 0))].ravel()[0]
        raise InputError(f"pathlength: {bad:g} cm is not a positive number")
    return b.astype(float).assign_attrs(units="cm")


def flag_strings(result: xr.Dataset) -> xr.DataArray:
    """Join each spectrum's flag codes with ``;`` (empty string when nothing is doubtful).

    Codes: the status codes of ``mixsolve.solve.cls.STATUS_CODES``; ``at_zero:<component>``
    where NNLS held a component at zero; ``negative:<component>`` where OLS returned a
    negative concentration. See docs/flags.md.
    """
    status = result["status"].values
    at_zero = result["at_zero"].values
    conc = result["concentration"].values
    comps = [str(c) for c in result[COMPONENT].values]
    out = np.empty(status.shape, dtype=object)
    for idx in np.ndindex(status.shape):
        codes = [code for bit, code in STATUS_CODES.items() if status[idx] & bit]
        codes += [f"at_zero:{c}" for c, z in zip(comps, at_zero[idx], strict=True) if z]
        if result.attrs["method"] == "ols":
            codes += [f"negative:{c}" for c, v in zip(comps, conc[idx], strict=True) if v < 0]
        out[idx] = ";".join(codes)
    return xr.DataArray(out.astype(str), dims=result["status"].dims,
                        coords=result["status"].coords)

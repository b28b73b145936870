"""The public classical-least-squares entry point, :func:`unmix`."""

from __future__ import annotations

import functools
import json
import warnings
from collections.abc import Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr

from mixsolve._version import __version__
from mixsolve.diagnostics.trust import (
    DEFAULT_WAVELENGTH_TOLERANCE_NM,
    SHIFT_FLAG_FRACTION,
    add_trust_checks,
)
from mixsolve.errors import ExtrapolationWarning, InputError
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.noise import DEFAULT_ABSORBANCE_RANGE, PRESETS, NoiseModel, noise_model
from mixsolve.solve.cls import METHODS, STATUS_CODES, Method, solve_cls
from mixsolve.solve.design import (
    BASELINE_TERMS,
    BASELINES,
    Baseline,
    check_solvable,
    design_matrix,
    select_wavelengths,
)
from mixsolve.solve.shift_fit import fit_with_shift
from mixsolve.spectra import WAVELENGTH, check_option, check_spectra, check_window
from mixsolve.units import conversion_factor

TERM = "term"
Weights = Literal["none", "noise"]
WEIGHTS: tuple[str, ...] = ("none", "noise")

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
    weights: Weights = "none",
    noise: NoiseModel | str | float | None = None,
    absorbance_range: tuple[float, float] = DEFAULT_ABSORBANCE_RANGE,
    fit_shift: bool = False,
    max_shift_nm: float = 3.0,
    wavelength_tolerance_nm: float = DEFAULT_WAVELENGTH_TOLERANCE_NM,
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
    weights : {"none", "noise"}
        ``noise`` weights each reading by 1/σ_A² from the noise model, evaluated at the
        fitted absorbance of a first, unweighted pass (two-pass weighted least squares).
    noise : NoiseModel, preset name or float, optional
        Photometric noise model (:mod:`mixsolve.noise`); a float is a constant σ_A in AU.
        Needed for ``weights="noise"``; when given, each fit is also tested for lack of fit.
    absorbance_range : (float, float)
        Reliable absorbance range (AU) for the range flags; default 0.3–2 (common practice
        for a benchtop double-beam instrument).
    fit_shift : bool
        Also fit one wavelength offset per spectrum (``wavelength_shift_nm``), searched
        within ±``max_shift_nm``.
    max_shift_nm : float
        Bound of the shift search (nm).
    wavelength_tolerance_nm : float
        Wavelength accuracy of the instrument (nm) for the ``shift_sensitive`` flag: a
        component is flagged when an error this large would move it by more than 2 %.

    Returns
    -------
    Dataset
        ``concentration`` and ``std_uncertainty`` (..., component), in ``attrs["unit"]``;
        ``baseline`` (..., term) in AU and AU/nm; ``fitted`` and ``residual``
        (..., wavelength) over the used wavelengths (AU); ``rms_residual`` (AU);
        ``dof`` (residual degrees of freedom n − p); ``status`` (bit mask, see
        ``mixsolve.solve.cls``); ``at_zero`` (..., component), true where NNLS held a
        component at 0; trust checks per spectrum (docs/diagnostics.md):
        ``absorbance_max``/``absorbance_min`` (AU, used wavelengths), ``suggested_dilution``
        (A_max over the middle of the reliable range), ``lack_of_fit_ratio`` and
        ``lack_of_fit_p`` (with a noise model), ``runs_z``/``runs_p``/``residual_lag1``
        (residual structure), ``shift_bias_per_nm`` (..., component; result unit per +1 nm
        of wavelength error), and with ``fit_shift`` ``wavelength_shift_nm`` and
        ``u_wavelength_shift_nm``; and, for numpy input, ``flags``: the sample's
        ``;``-joined flag codes (docs/flags.md). ``attrs`` record method, baseline, wavelengths,
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
    check_option(weights, WEIGHTS, "weights")
    window = check_window(window)
    low, high = check_window(absorbance_range, "absorbance_range")  # type: ignore[misc]
    if low <= 0:
        raise InputError(f"absorbance_range: low end {low:g} AU must be above 0")
    model = noise_model(noise)
    tolerance = float(wavelength_tolerance_nm)
    if not np.isfinite(tolerance) or tolerance < 0:
        raise InputError(f"wavelength_tolerance_nm: {tolerance:g} nm must be a number ≥ 0")
    if weights == "noise" and model is None:
        raise InputError("weights='noise' needs a noise model: give noise= a preset name "
                         f"({', '.join(PRESETS)}), a NoiseModel or σ_A in AU")
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

    n_comp = len(components)
    kernel_kwargs = {"design": design, "n_components": n_comp, "method": method}
    if fit_shift:
        kernel = _shift_kernel(library, used_wl, baseline, method, max_shift_nm)
        kernel_kwargs = {}
        n_out = 7
    elif weights == "noise":
        kernel = functools.partial(_weighted_kernel, noise=model)
        n_out = 5
    else:
        kernel = solve_cls
        n_out = 5
    outputs = xr.apply_ufunc(
        kernel, used,
        kwargs=kernel_kwargs if not fit_shift else {},
        input_core_dims=[[WAVELENGTH]],
        output_core_dims=[[TERM], [TERM], [WAVELENGTH], [], [], [], []][:n_out],
        dask="parallelized",
        output_dtypes=[float, float, float, np.int64, np.int64, float, float][:n_out],
        dask_gufunc_kwargs={"output_sizes": {TERM: len(terms)}},
    )
    coef, std_error, fitted, dof, status = outputs[:5]
    coef = coef.assign_coords({TERM: terms})
    std_error = std_error.assign_coords({TERM: terms})

    conc_unit = library.attrs["concentration_unit"]
    factor: Any = 1.0
    if unit is not None:
        factor = conversion_factor(conc_unit, unit, library["molar_mass_g_per_mol"].values)
        conc_unit = unit
    factor = xr.DataArray(np.broadcast_to(factor, (len(components),)), dims=(COMPONENT,),
                          coords={COMPONENT: components})
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
            "unit_factor": factor.assign_attrs(
                meaning="result unit per library concentration unit"),
        },
        attrs={
            "method": method,
            "baseline": baseline,
            "window_nm": "" if window is None else f"{window[0]:g}-{window[1]:g}",
            "wavelengths_nm": json.dumps([float(w) for w in used_wl]),
            "left_out_wavelengths_nm": json.dumps([float(w) for w in left_out]),
            "unit": conc_unit,
            "library_unit": library.attrs["unit"],
            "library_provenance": library.attrs.get("provenance", ""),
            "source": spectra.attrs.get("source", ""),
            "uncertainty_basis": UNCERTAINTY_BASIS,
            "mixsolve_version": __version__,
        },
    )
    result = result.rename({TERM: "baseline_term"})
    if fit_shift:
        result["wavelength_shift_nm"] = outputs[5].assign_attrs(units="nm")
        result["u_wavelength_shift_nm"] = outputs[6].assign_attrs(units="nm")
    result = add_trust_checks(result, used, library, design, (low, high), model)
    result.attrs.update({
        "weights": weights,
        "noise_model": json.dumps(model.to_dict()) if model is not None else "",
        "absorbance_range": f"{low:g}-{high:g}",
        "fit_shift": int(fit_shift),
        "wavelength_tolerance_nm": tolerance,
    })
    if spectra.chunks is None:
        result["flags"] = flag_strings(result)
    return result


def _weighted_kernel(spectra: np.ndarray, design: np.ndarray, n_components: int,
                     method: Method, noise: NoiseModel) -> tuple[np.ndarray, ...]:
    """Two-pass weighted fit: unweighted pass, then weights 1/σ_A(fitted)²."""
    first = solve_cls(spectra, design, n_components, method)
    fitted = np.where(np.isfinite(first[2]), first[2], spectra)
    weights = 1.0 / noise.sigma_absorbance(np.clip(fitted, 0.0, None)) ** 2
    return solve_cls(spectra, design, n_components, method, weights=weights)


def _shift_kernel(library: xr.Dataset, used_wl: np.ndarray, baseline: Baseline, method: Method,
                  max_shift_nm: float) -> Any:
    grid = library[WAVELENGTH].values
    max_shift = float(max_shift_nm)
    if not np.isfinite(max_shift) or max_shift <= 0:
        raise InputError(f"max_shift_nm: {max_shift:g} nm must be a positive number")
    if grid.size < 3:
        raise InputError("fit_shift: the library has fewer than 3 wavelengths, so it "
                         "carries no slope to fit a shift with")
    if used_wl[0] - max_shift < grid[0] or used_wl[-1] + max_shift > grid[-1]:
        raise InputError(
            f"fit_shift: the used wavelengths {used_wl[0]:g}-{used_wl[-1]:g} nm ± "
            f"{max_shift:g} nm reach outside the library ({grid[0]:g}-{grid[-1]:g} nm); "
            f"narrow the window to {grid[0] + max_shift:g}-{grid[-1] - max_shift:g} nm")
    eps = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    return functools.partial(fit_with_shift, eps=eps, grid_nm=grid, wavelengths_nm=used_wl,
                             baseline=baseline, method=method, max_shift_nm=max_shift)


def _pathlength(spectra: xr.DataArray, pathlength_cm: Any) -> xr.DataArray:
    if pathlength_cm is None:
        pathlength_cm = spectra.attrs.get("pathlength_cm", 1.0)
    b = pathlength_cm if isinstance(pathlength_cm, xr.DataArray) else xr.DataArray(
        float(pathlength_cm))
    for dim in b.dims:
        # One value per spectrum: every dim must be a spectra dim and cover all its labels,
        # else xarray alignment would silently drop spectra or leave NaN results.
        if dim == WAVELENGTH or dim not in spectra.dims:
            raise InputError(f"pathlength: dimension {dim!r} is not one of the spectra's "
                             f"dimensions other than wavelength "
                             f"({', '.join(d for d in spectra.dims if d != WAVELENGTH)})")
        if dim in b.coords and dim in spectra.coords:
            have = set(b[dim].values.tolist())
            lacking = [v for v in spectra[dim].values.tolist() if v not in have]
            if lacking:
                raise InputError(f"pathlength: no value for {dim} {str(lacking[0])!r}")
            b = b.sel({dim: spectra[dim].values})
        elif b.sizes[dim] != spectra.sizes[dim]:
            raise InputError(f"pathlength: {b.sizes[dim]} value(s) along {dim!r} for "
                             f"{spectra.sizes[dim]} spectra")
    values = np.asarray(b.values, dtype=float)
    if not np.all(np.isfinite(values)) or np.any(values <= 0):
        bad = values[~(np.isfinite(values) & (values > 0))].ravel()[0]
        raise InputError(f"pathlength: {bad:g} cm is not a positive number")
    return b.astype(float).assign_attrs(units="cm")


def flag_strings(result: xr.Dataset) -> xr.DataArray:
    """Join each spectrum's flag codes with ``;`` (empty string when nothing is doubtful).

    Codes: the status codes of ``mixsolve.flags.STATUS_CODES``; ``at_zero:<component>``
    where NNLS held a component at zero; ``negative:<component>`` where OLS returned a
    negative concentration; ``shift_sensitive:<component>`` where a wavelength error of
    ``attrs["wavelength_tolerance_nm"]`` would move a quantifiable concentration (c > 3u) by
    more than 2 %. See docs/flags.md.
    """
    status = result["status"].values
    at_zero = result["at_zero"].values
    conc = result["concentration"].values
    u = result["std_uncertainty"].values
    bias = result["shift_bias_per_nm"].values if "shift_bias_per_nm" in result else None
    comps = [str(c) for c in result[COMPONENT].values]
    out = np.empty(status.shape, dtype=object)
    for idx in np.ndindex(status.shape):
        codes = [code for bit, code in STATUS_CODES.items() if status[idx] & bit]
        codes += [f"at_zero:{c}" for c, z in zip(comps, at_zero[idx], strict=True) if z]
        if result.attrs["method"] == "ols":
            codes += [f"negative:{c}" for c, v in zip(comps, conc[idx], strict=True) if v < 0]
        if bias is not None:
            quantified = conc[idx] > 3 * np.where(np.isfinite(u[idx]), u[idx], 0.0)
            tol = result.attrs.get("wavelength_tolerance_nm", DEFAULT_WAVELENGTH_TOLERANCE_NM)
            risky = np.abs(bias[idx]) * tol > SHIFT_FLAG_FRACTION * np.abs(conc[idx])
            codes += [f"shift_sensitive:{c}" for c, q, r in zip(comps, quantified, risky,
                                                                strict=True) if q and r]
        out[idx] = ";".join(codes)
    return xr.DataArray(out.astype(str), dims=result["status"].dims,
                        coords=result["status"].coords)

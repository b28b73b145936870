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
    CHECK_NAMES,
    DEFAULT_WAVELENGTH_TOLERANCE_NM,
    SHIFT_FLAG_FRACTION,
    add_trust_checks,
    spectrum_checks,
)
from mixsolve.errors import ExtrapolationWarning, IllConditionedWarning, InputError
from mixsolve.flags import ILL_CONDITIONED
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.noise import DEFAULT_ABSORBANCE_RANGE, PRESETS, NoiseModel, noise_model
from mixsolve.solve.cls import METHODS, STATUS_CODES, Fit, Method, fit_spectra
from mixsolve.solve.design import (
    BASELINE_TERMS,
    BASELINES,
    ILL_CONDITIONED_ABOVE,
    Baseline,
    check_solvable,
    design_matrix,
    select_wavelengths,
)
from mixsolve.solve.shift_fit import fit_with_shift
from mixsolve.spectra import WAVELENGTH, check_option, check_spectra, check_window
from mixsolve.units import conversion_factor

TERM = "term"
#: Attributes of the input spectra that must not label the result's variables.
INPUT_ATTRS = ("quantity", "source", "layout", "separator", "decimal", "pathlength_cm")
#: Variable-length str dtype (object dtype marked as holding str): lazy flags are written
#: to netCDF and Zarr as strings without being computed first to find their type.
VLEN_STR = np.dtype(object, metadata={"element_type": str})
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
        that spectrum is fitted on the wavelengths it has and flagged. Any other
        dimensions (``sample``; ``y, x`` of an image cube; none for one spectrum); the
        result has the same ones. Numpy- or dask-backed: with dask the whole result,
        flags included, stays lazy and is computed chunk by chunk (chunk along the other
        dimensions only; docs/scale.md).
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
        ``u_wavelength_shift_nm``; and ``flags``: each spectrum's ``;``-joined flag codes
        (docs/flags.md; :func:`flags_of`). ``attrs`` record method, baseline, wavelengths,
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
    the fit solves min ‖A − D x‖² (the SVD pseudo-inverse of column-scaled D, as
    ``numpy.linalg.lstsq``, for ``ols``; for ``nnls`` fast combinatorial active-set NNLS
    over all spectra at once with the baseline columns free, checked against
    ``scipy.optimize.nnls``: :mod:`mixsolve.solve.nnls`) and c = x / b. The standard
    uncertainty is Type A from the fit only: u(cₖ) = s √[(DᵀD)⁻¹]ₖₖ / b with
    s² = RSS/(n − p). For NNLS it is the linearised value of the unconstrained model at
    the solution, ignoring the constraint.

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
    try:
        low, high = (float(v) for v in absorbance_range)
    except (TypeError, ValueError):
        raise InputError(f"absorbance_range: expected (low, high) in AU, got "
                         f"{absorbance_range!r}") from None
    if not (np.isfinite(low) and np.isfinite(high)) or not 0 < low < high:
        raise InputError(f"absorbance_range: {low:g}-{high:g} AU must be two increasing "
                         "absorbances above 0, e.g. 0.3-2")
    model = noise_model(noise)
    tolerance = float(wavelength_tolerance_nm)
    if not np.isfinite(tolerance) or tolerance < 0:
        raise InputError(f"wavelength_tolerance_nm: {tolerance:g} nm must be a number ≥ 0")
    if fit_shift and weights != "none":
        raise InputError("fit_shift: a fitted wavelength shift cannot be combined with "
                         "weights='noise' (the shift search is unweighted); drop one of them")
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
    used = spectra.isel({WAVELENGTH: _as_slice(index)})
    used_wl = measured[index]
    lib_used, _ = resample_library(library, used_wl)
    components = [str(c) for c in library[COMPONENT].values]
    absorptivity = lib_used["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
    design = design_matrix(absorptivity, used_wl, baseline)
    terms = components + list(BASELINE_TERMS[baseline])
    condition = check_solvable(design, terms)
    if condition > ILL_CONDITIONED_ABOVE:
        warnings.warn(
            f"the design is ill conditioned (scaled condition number {condition:.3g}): noise "
            "is amplified that much; choose better wavelengths (mixsolve wavelengths choose)",
            IllConditionedWarning, stacklevel=2)

    n_comp = len(components)
    if fit_shift:
        solver: Any = _shift_solver(library, used_wl, baseline, method, max_shift_nm)
    elif weights == "noise":
        solver = functools.partial(_weighted_fit, design=design, n_components=n_comp,
                                   method=method, noise=model)
    else:  # the fast path: trust figures computed block by block inside the fit
        solver = functools.partial(fit_spectra, design=design, n_components=n_comp,
                                   method=method)
    n_out = len(_OUTPUT_DIMS) + (2 if fit_shift else 0)
    outputs = xr.apply_ufunc(
        _block_kernel, used,
        kwargs={"solver": solver, "noise": model, "n_out": n_out},
        input_core_dims=[[WAVELENGTH]],
        output_core_dims=[list(d) for d in _OUTPUT_DIMS] + [[]] * (n_out - len(_OUTPUT_DIMS)),
        dask="parallelized",
        output_dtypes=[np.int64 if name in ("dof", "status") else float
                       for name in _OUTPUT_NAMES] + [float] * (n_out - len(_OUTPUT_DIMS)),
        dask_gufunc_kwargs={"output_sizes": {TERM: len(terms)}},
    )
    named = dict(zip(_OUTPUT_NAMES, outputs, strict=False))
    coef = named["coef"].assign_coords({TERM: terms})
    std_error = named["std_error"].assign_coords({TERM: terms})
    fitted = named["fitted"].assign_coords({WAVELENGTH: used_wl})
    residual = named["residual"].assign_coords({WAVELENGTH: used_wl})

    conc_unit = library.attrs["concentration_unit"]
    factor: Any = 1.0
    if unit is not None:
        factor = conversion_factor(conc_unit, unit, library["molar_mass_g_per_mol"].values)
        conc_unit = unit
    factor = xr.DataArray(np.broadcast_to(factor, (len(components),)), dims=(COMPONENT,),
                          coords={COMPONENT: components})
    conc = (coef.isel({TERM: slice(0, n_comp)}).rename({TERM: COMPONENT}) / b) * factor
    u_conc = (std_error.isel({TERM: slice(0, n_comp)}).rename({TERM: COMPONENT}) / b) * factor
    result = xr.Dataset(
        {
            "concentration": conc.assign_attrs(units=conc_unit),
            "std_uncertainty": u_conc.assign_attrs(units=conc_unit, basis=UNCERTAINTY_BASIS),
            "baseline": coef.isel({TERM: slice(n_comp, None)}).assign_attrs(
                units="AU (offset), AU/nm (slope)"),
            "fitted": fitted.assign_attrs(units="AU"),
            "residual": residual.assign_attrs(units="AU"),
            "rms_residual": named["rms"].assign_attrs(units="AU"),
            "dof": named["dof"],
            "status": named["status"] | (ILL_CONDITIONED if condition > ILL_CONDITIONED_ABOVE
                                         else 0),
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
            "condition_number": condition,
            "library_unit": library.attrs["unit"],
            "library_provenance": library.attrs.get("provenance", ""),
            "source": spectra.attrs.get("source", ""),
            "uncertainty_basis": UNCERTAINTY_BASIS,
            "mixsolve_version": __version__,
        },
    )
    result = result.rename({TERM: "baseline_term"})
    if fit_shift:
        result["wavelength_shift_nm"] = outputs[len(_OUTPUT_NAMES)].assign_attrs(units="nm")
        result["u_wavelength_shift_nm"] = outputs[len(_OUTPUT_NAMES) + 1].assign_attrs(units="nm")
    checks = {name: named[name] for name in CHECK_NAMES}
    result = add_trust_checks(result, checks, library, design, (low, high), model)
    result.attrs.update({
        "weights": weights,
        "noise_model": json.dumps(model.to_dict()) if model is not None else "",
        "absorbance_range": f"{low:g}-{high:g}",
        "fit_shift": int(fit_shift),
        "wavelength_tolerance_nm": tolerance,
    })
    result["flags"] = flags_of(result)
    # Variables derived from the spectra inherit their attributes; a concentration is not an
    # "absorbance" from "samples.csv": keep only what describes the variable itself.
    for var in result.variables.values():
        for key in INPUT_ATTRS:
            var.attrs.pop(key, None)
    return result


#: Outputs of :func:`_block_kernel` before the optional shift pair, with their core dims.
_OUTPUT_NAMES = ("coef", "std_error", "fitted", "residual", "dof", "status", "rms",
                 *CHECK_NAMES)
_OUTPUT_DIMS: tuple[tuple[str, ...], ...] = ((TERM,), (TERM,), (WAVELENGTH,), (WAVELENGTH,),
                                             *[()] * (3 + len(CHECK_NAMES)))


def _block_kernel(spectra: np.ndarray, solver: Any, noise: NoiseModel | None,
                  n_out: int) -> tuple[np.ndarray, ...]:
    """Fit one block of spectra and compute its trust figures in the same pass over it."""
    if isinstance(solver, functools.partial) and solver.func is fit_spectra:
        lead = spectra.shape[:-1]
        checks = [np.empty(lead).reshape(-1) for _ in CHECK_NAMES]

        def on_block(rows: slice, used: np.ndarray, fitted: np.ndarray,
                     residual: np.ndarray, dof: np.ndarray, sum_squares: np.ndarray) -> None:
            figures = spectrum_checks(used, residual, fitted, dof, noise, sum_squares)
            for store, value in zip(checks, figures, strict=True):
                store[rows] = value

        fit = solver(spectra, on_block=on_block)
        return (*fit, *(c.reshape(lead) for c in checks))
    fit, extra = solver(spectra)
    checks = spectrum_checks(spectra, fit.residual, fit.fitted, fit.dof, noise)
    return (*fit, *checks, *extra)[:n_out]


def _weighted_fit(spectra: np.ndarray, design: np.ndarray, n_components: int,
                  method: Method, noise: NoiseModel) -> tuple[Fit, tuple[np.ndarray, ...]]:
    """Two-pass weighted fit: unweighted pass, then weights 1/σ_A(fitted)²."""
    first = fit_spectra(spectra, design, n_components, method)
    fitted = np.where(np.isfinite(first.fitted), first.fitted, spectra)
    weights = 1.0 / noise.sigma_absorbance(np.clip(fitted, 0.0, None)) ** 2
    return fit_spectra(spectra, design, n_components, method, weights=weights), ()


def _shift_solver(library: xr.Dataset, used_wl: np.ndarray, baseline: Baseline,
                  method: Method, max_shift_nm: float) -> Any:
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
    return functools.partial(_shift_fit, eps=eps, grid_nm=grid, wavelengths_nm=used_wl,
                             baseline=baseline, method=method, max_shift_nm=max_shift)


def _shift_fit(spectra: np.ndarray, **kwargs: Any) -> tuple[Fit, tuple[np.ndarray, ...]]:
    coef, se, fitted, dof, status, shift, u_shift = fit_with_shift(spectra, **kwargs)
    residual = spectra - fitted
    with np.errstate(invalid="ignore"):
        rms = np.sqrt(np.nanmean(residual**2, axis=-1))
    return Fit(coef, se, fitted, residual, dof, status, rms), (shift, u_shift)


def _as_slice(index: np.ndarray) -> np.ndarray | slice:
    """A run of consecutive positions as a slice, so that selecting it copies nothing."""
    if index.size and np.array_equal(index, np.arange(index[0], index[0] + index.size)):
        return slice(int(index[0]), int(index[0]) + index.size)
    return index


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


def flags_of(result: xr.Dataset) -> xr.DataArray:
    """Each spectrum's flag codes joined with ``;`` (empty string when nothing is doubtful).

    Parameters
    ----------
    result : Dataset
        An :func:`unmix` result (numpy- or dask-backed; ``unmix`` already stores this as
        ``result["flags"]``, so call it after editing a result or to rebuild the flags).

    Returns
    -------
    DataArray of str, dims of ``result["status"]``
        Lazy (object dtype) when the result is dask-backed: it is computed with the rest
        of the result, chunk by chunk.

    Notes
    -----
    Codes, in this order: the status codes of ``mixsolve.flags.STATUS_CODES``;
    ``at_zero:<component>`` where NNLS held a component at zero; ``negative:<component>``
    where OLS returned a negative concentration; ``shift_sensitive:<component>`` where a
    wavelength error of ``attrs["wavelength_tolerance_nm"]`` would move a quantifiable
    concentration (c > 3u) by more than 2 %. See docs/flags.md.
    """
    comps = [str(c) for c in result[COMPONENT].values]
    conc = result["concentration"]
    bias = result["shift_bias_per_nm"] if "shift_bias_per_nm" in result else xr.full_like(
        conc, np.nan)
    tol = result.attrs.get("wavelength_tolerance_nm", DEFAULT_WAVELENGTH_TOLERANCE_NM)
    core = [[], [COMPONENT], [COMPONENT], [COMPONENT], [COMPONENT]]
    flags = xr.apply_ufunc(
        _flag_kernel, result["status"], result["at_zero"], conc, result["std_uncertainty"],
        bias, kwargs={"components": comps, "ols": result.attrs["method"] == "ols",
                      "shift": "shift_bias_per_nm" in result, "tolerance_nm": float(tol)},
        input_core_dims=core, dask="parallelized", output_dtypes=[VLEN_STR])
    if flags.chunks is None:
        flags = flags.astype(str)
    return flags.rename("flags")


def _flag_kernel(status: np.ndarray, at_zero: np.ndarray, conc: np.ndarray, u: np.ndarray,
                 bias: np.ndarray, components: list[str], ols: bool, shift: bool,
                 tolerance_nm: float) -> np.ndarray:
    """Flag strings of one block: each distinct combination of codes is joined once."""
    lead = status.shape
    n = len(components)
    status = status.reshape(-1)
    codes = [code for code in STATUS_CODES.values()]
    columns = [(status & bit) != 0 for bit in STATUS_CODES]
    codes += [f"at_zero:{c}" for c in components]
    columns += list(at_zero.reshape(-1, n).T)
    conc, u, bias = (a.reshape(-1, n) for a in (conc, u, bias))
    if ols:
        codes += [f"negative:{c}" for c in components]
        columns += list((conc < 0).T)
    if shift:
        with np.errstate(invalid="ignore"):
            quantified = conc > 3 * np.where(np.isfinite(u), u, 0.0)
            risky = np.abs(bias) * tolerance_nm > SHIFT_FLAG_FRACTION * np.abs(conc)
        codes += [f"shift_sensitive:{c}" for c in components]
        columns += list((quantified & risky).T)
    bits = np.stack(columns, axis=1) if status.size else np.zeros((0, len(codes)), bool)
    packed = np.packbits(bits, axis=1)
    if packed.shape[1] <= 8:  # one integer per spectrum: a fast 1-d unique
        keys = np.zeros((packed.shape[0], 8), dtype=np.uint8)
        keys[:, :packed.shape[1]] = packed
        _, first, index = np.unique(keys.view(np.uint64)[:, 0], return_index=True,
                                    return_inverse=True)
        unique = packed[first]
    else:
        unique, index = np.unique(packed, axis=0, return_inverse=True)
    names = np.asarray(codes)
    texts = [";".join(names[np.unpackbits(row)[:len(codes)].astype(bool)]) for row in unique]
    out = np.empty(status.size, dtype=VLEN_STR)
    if status.size:
        out[:] = np.asarray(texts, dtype=object)[index.ravel()]
    return out.reshape(lead)

"""Predict with a PLS model: :func:`predict`, with T², Q, an uncertainty and flags per sample.

Spectra on another wavelength grid are resampled inside the model's range only.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from mixsolve._version import __version__
from mixsolve.errors import InputError
from mixsolve.flags import (
    INCOMPLETE_SPECTRUM,
    OUTSIDE_RANGE,
    Q_ABOVE_95,
    Q_ABOVE_99,
    T2_ABOVE_95,
    T2_ABOVE_99,
)
from mixsolve.library import COMPONENT
from mixsolve.pls.blocks import project
from mixsolve.pls.model import UNCERTAINTY_BASIS, check_model
from mixsolve.pls.preprocessing import correct_scatter, preprocess
from mixsolve.spectra import (
    SAMPLE,
    WAVELENGTH,
    WAVENUMBER_AXIS,
    check_number,
    check_same_axis,
    check_spectra,
    nm_from_wavenumber,
)
from mixsolve.units import kind_words, reference_unit


def resample_to_model(spectra: xr.DataArray, model_nm: np.ndarray, axis: str = "nm"
                      ) -> np.ndarray:
    """Absorbance at the model's wavelengths, interpolated inside the measured range only.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Absorbance (AU); wavelength in nm, strictly increasing.
    model_nm : array, shape (n_model_wavelengths,)
        The model's wavelength grid (nm), increasing.
    axis : {"nm", "wavenumber_cm-1"}
        The axis of the model and the spectra (``attrs["axis"]``): interpolation is linear
        in λ, or in ν̃ = 10⁷/λ on a wavenumber axis.

    Returns
    -------
    ndarray, shape (n_samples, n_model_wavelengths)
        Absorbance (AU): the reading itself where the model wavelength was measured
        (within 1e-6 nm, or 1e-6 cm⁻¹), else linear interpolation between the two
        neighbouring readings. A NaN reading makes the interpolated values it touches NaN.

    Raises
    ------
    InputError
        The measured range does not cover the model's wavelengths (nothing is extrapolated).
    """
    wl = spectra[WAVELENGTH].values.astype(float)
    values = spectra.transpose(SAMPLE, WAVELENGTH).values.astype(float)
    tol = 1e-6
    if wl[0] > model_nm[0] + tol or wl[-1] < model_nm[-1] - tol:
        raise InputError(
            f"spectra: measured {wl[0]:g}-{wl[-1]:g} nm does not cover the model's "
            f"{model_nm[0]:g}-{model_nm[-1]:g} nm; nothing is extrapolated, so measure the "
            "model's whole range")
    if axis == WAVENUMBER_AXIS:  # −ν̃ rises with λ: linear in wavenumber, order kept
        wl, model_nm = -nm_from_wavenumber(wl), -nm_from_wavenumber(model_nm)
    lo = np.clip(np.searchsorted(wl, model_nm, side="right") - 1, 0, max(wl.size - 2, 0))
    hi = np.minimum(lo + 1, wl.size - 1)
    span = np.where(wl[hi] > wl[lo], wl[hi] - wl[lo], 1.0)
    frac = np.clip((model_nm - wl[lo]) / span, 0.0, 1.0)
    frac[np.abs(model_nm - wl[lo]) <= tol] = 0.0  # on the measured grid: that reading only
    frac[np.abs(model_nm - wl[hi]) <= tol] = 1.0
    out = np.where(frac == 1.0, values[:, hi], values[:, lo])
    mid = (frac > 0.0) & (frac < 1.0)
    out[:, mid] = values[:, lo[mid]] * (1 - frac[mid]) + values[:, hi[mid]] * frac[mid]
    return out


def predict(
    spectra: xr.DataArray,
    model: xr.Dataset,
    *,
    pathlength_cm: float | None = None,
    unit: str | None = None,
) -> xr.Dataset:
    """Predict concentrations with a PLS model, with T², Q and flags per sample.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Blank-corrected absorbance (AU), any wavelength grid covering the model's range.
    model : Dataset
        From :func:`mixsolve.calibrate` or :func:`mixsolve.read_model`.
    pathlength_cm : float, optional
        Pathlength of ``spectra`` (cm); default their ``attrs``, else the calibration's.
        Spectra are rescaled to the calibration pathlength before prediction.
    unit : str, optional
        Concentration unit of the result, of the same kind (amount or mass) as the model's.

    Returns
    -------
    Dataset
        Per (sample, component): ``concentration``, ``std_uncertainty``, ``leverage``,
        ``t2``, ``q_residual`` (of the block predicting the component; the same for all
        components in PLS2) and ``rms_residual`` (√(Q·scale²/n_wavelengths): RMS spectral
        residual in AU, AU/nm after a derivative, AU·cm after one along a wavenumber axis,
        dimensionless (1, 1/nm, cm) after SNV); per component
        ``t2_limit_95``, ``t2_limit_99``, ``q_limit_95``, ``q_limit_99``, ``n_latent`` and ``dof``
        (n_calibration − a − 1); per sample ``flags`` (``;``-joined codes of
        :data:`mixsolve.flags.FLAG_MEANINGS`, docs/flags.md);
        ``attrs["method"] = "pls"``.

    Raises
    ------
    InputError
        Not a model, spectra not covering the model's wavelengths, spectra on another
        axis than the model's (nm against cm⁻¹), a bad pathlength or unit, a spectrum the
        model's scatter correction cannot correct (flat for SNV, MSC slope ≤ 0).

    Notes
    -----
    Preprocessing repeats the calibration's: scatter correction (with the stored MSC
    reference), derivative, centring and scaling. With x the preprocessed spectrum centred
    and scaled as in calibration, a block's scores
    are t = x R (R the x rotations), ŷ = t Qᵀ · s_y + ȳ, T² = Σₐ tₐ²/s²(tₐ) over the
    calibration score variances, Q = ‖x − t Pᵀ‖² (P the x loadings). The uncertainty is an
    approximation: see ``attrs["uncertainty_basis"]``.
    """
    spectra = check_spectra(spectra)
    model = check_model(model)
    if set(spectra.dims) != {SAMPLE, WAVELENGTH}:
        raise InputError(f"spectra: expected dims ('sample', 'wavelength'), got {spectra.dims}")
    b_cal = float(model.attrs["pathlength_cm"])
    b = check_number(spectra.attrs.get("pathlength_cm", b_cal) if pathlength_cm is None
                     else pathlength_cm, "pathlength_cm", "cm", positive=True)
    factor = _unit_factor(model.attrs["unit"], unit)
    axis = check_same_axis(model, "model", spectra, "spectra")
    model_nm = model[WAVELENGTH].values
    raw = resample_to_model(spectra, model_nm, axis) * (b_cal / b)
    prep = json.loads(model.attrs["preprocessing"])
    incomplete = np.isnan(raw).any(axis=1)
    scatter = prep.get("scatter", "none")  # models before scatter corrections have none
    filled = np.where(np.isnan(raw), 0.0, raw)
    if scatter != "none" and (~incomplete).any():  # incomplete spectra give no result anyway
        complete = np.flatnonzero(~incomplete)
        filled[complete] = correct_scatter(
            filled[complete], scatter,
            model["msc_reference"].values if scatter == "msc" else None,
            [str(spectra[SAMPLE].values[i]) for i in complete])
    x = preprocess(filled, prep["derivative"])
    xs = (x - model["x_mean"].values) / model["x_scale"].values
    comps = [str(c) for c in model[COMPONENT].values]
    n, n_y = xs.shape[0], len(comps)
    n_cal = model.sizes[SAMPLE]
    block_of = model["block_of_component"].values
    conc = np.empty((n, n_y))
    per = {k: np.empty((n, n_y)) for k in ("t2", "q_residual", "leverage", "rms_residual")}
    residuals = np.empty((model.sizes["block"], n, model_nm.size))
    for b_i in range(model.sizes["block"]):
        a = int(model["n_latent"].values[b_i])
        rot = model["x_rotations"].values[b_i, :, :a]
        scores, t2, resid, q = project(xs, rot, model["x_loadings"].values[b_i, :, :a],
                                        model["score_variance"].values[b_i, :a])
        residuals[b_i] = resid * model["x_scale"].values
        cols = np.flatnonzero(block_of == b_i)
        yl = model["y_loadings"].values[b_i][cols, :a]
        conc[:, cols] = (scores @ yl.T * model["y_scale"].values[cols]
                         + model["y_mean"].values[cols])
        per["t2"][:, cols] = t2[:, None]
        per["q_residual"][:, cols] = q[:, None]
        per["leverage"][:, cols] = (1.0 / n_cal + t2 / (n_cal - 1))[:, None]
        per["rms_residual"][:, cols] = np.sqrt(np.mean(residuals[b_i] ** 2, axis=1))[:, None]
    a_comp = model["n_latent"].values[block_of]
    h_cal = (1.0 + a_comp) / n_cal
    u = model["rmsecv"].values * np.sqrt((1.0 + per["leverage"]) / (1.0 + h_cal))
    for arr in (conc, u, *per.values()):
        arr[incomplete] = np.nan
    residuals[:, incomplete] = np.nan
    conc_unit = unit or model.attrs["unit"]
    sd = (SAMPLE, COMPONENT)
    t2_lim = model["t2_limit"].values[block_of]
    q_lim = model["q_limit"].values[block_of]
    result = xr.Dataset(
        {
            "concentration": (sd, conc * factor, {"units": conc_unit}),
            "std_uncertainty": (sd, u * factor, {"units": conc_unit,
                                                 "basis": UNCERTAINTY_BASIS}),
            "leverage": (sd, per["leverage"]),
            "t2": (sd, per["t2"]),
            "q_residual": (sd, per["q_residual"], {"units": "preprocessed, scaled units²"}),
            "rms_residual": (sd, per["rms_residual"], {"units": _x_units(prep)}),
            "t2_limit_95": ((COMPONENT,), t2_lim[:, 0]),
            "t2_limit_99": ((COMPONENT,), t2_lim[:, 1]),
            "q_limit_95": ((COMPONENT,), q_lim[:, 0]),
            "q_limit_99": ((COMPONENT,), q_lim[:, 1]),
            "n_latent": ((COMPONENT,), a_comp),
            "dof": ((COMPONENT,), n_cal - a_comp - 1),
            "x_residual": (("block", SAMPLE, WAVELENGTH), residuals,
                           {"units": _x_units(prep)}),
        },
        coords={SAMPLE: [str(s) for s in spectra[SAMPLE].values], COMPONENT: comps,
                "block": model["block"].values, WAVELENGTH: model_nm},
        attrs={
            "method": "pls",
            "mode": model.attrs["mode"],
            "unit": conc_unit,
            "n_calibration": n_cal,
            "pathlength_cm": b,
            "calibration_pathlength_cm": b_cal,
            "wavelengths_nm": json.dumps([float(w) for w in model_nm]),
            "axis": axis,
            "preprocessing": model.attrs["preprocessing"],
            "uncertainty_basis": UNCERTAINTY_BASIS,
            "source": str(spectra.attrs.get("source", "")),
            "model_source": str(model.attrs.get("source", "")),
            "mixsolve_version": __version__,
        },
    )
    result["flags"] = _flags(result, model, incomplete, factor)
    return result


def _x_units(prep: dict) -> str:
    """Unit of preprocessed spectra: AU (1 after SNV); per nm after a derivative along λ,
    times cm after one along ν̃ (cm⁻¹)."""
    base = "1" if prep.get("scatter") == "snv" else "AU"
    derivative = prep["derivative"]
    if not derivative:
        return base
    if derivative.get("axis") == WAVENUMBER_AXIS:
        return "cm" if base == "1" else "AU·cm"
    return f"{base}/nm" if base == "AU" else "1/nm"


def _unit_factor(model_unit: str, unit: str | None) -> float:
    """Factor from the model's concentration unit to ``unit`` (1 when None)."""
    if unit is None:
        return 1.0
    basis_m, f_m = reference_unit(model_unit, "model unit")
    basis_u, f_u = reference_unit(unit, "unit")
    if basis_m != basis_u:
        raise InputError(f"unit: {unit!r} is {kind_words(basis_u)} but the model predicts "
                         f"{model_unit} ({kind_words(basis_m)}); a PLS model holds no molar "
                         "masses or densities to convert")
    return f_m / f_u


def _flags(result: xr.Dataset, model: xr.Dataset, incomplete: np.ndarray,
           factor: float) -> xr.DataArray:
    """Flag codes per sample (``;``-joined), from the limits and the reference range."""
    comps = [str(c) for c in result[COMPONENT].values]
    conc = result["concentration"].values
    u = result["std_uncertainty"].values
    lo = model["reference_min"].values * factor
    hi = model["reference_max"].values * factor
    levels = {}
    for stat, name, code_95, code_99 in (("t2", "t2", T2_ABOVE_95, T2_ABOVE_99),
                                         ("q_residual", "q", Q_ABOVE_95, Q_ABOVE_99)):
        value = result[stat].values
        above_99 = np.any(value > result[f"{name}_limit_99"].values, axis=1)
        above_95 = np.any(value > result[f"{name}_limit_95"].values, axis=1)
        levels[name] = np.where(above_99, code_99, np.where(above_95, code_95, ""))
    margin = np.maximum(u, 1e-6 * (hi - lo))  # exact data: u ≈ 0, allow rounding
    outside = (conc < lo - margin) | (conc > hi + margin)
    out = []
    for i in range(conc.shape[0]):
        if incomplete[i]:
            out.append(INCOMPLETE_SPECTRUM)
            continue
        codes = [str(levels["t2"][i]), str(levels["q"][i])]
        codes += [f"{OUTSIDE_RANGE}:{c}" for k, c in enumerate(comps) if outside[i, k]]
        out.append(";".join(filter(None, codes)))
    return xr.DataArray(np.asarray(out, dtype=str), dims=(SAMPLE,),
                        coords={SAMPLE: result[SAMPLE].values})

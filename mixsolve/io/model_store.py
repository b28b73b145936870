"""Store PLS models as netCDF-4 files (h5netcdf engine), written atomically.

A model file holds the Dataset of :func:`mixsolve.calibrate` as it is: arrays and
attributes (JSON text for nested settings), ``mixsolve_kind = "mixsolve-pls-model"``. No
pickles: any netCDF reader can open it. Reading checks everything prediction uses (the
arrays, their dims and values, the unit, pathlength and preprocessing), so a damaged or
hand-made file is one clear error rather than a failure half-way through a prediction.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.netcdf_store import ENGINE, file_kind, open_kind, write_netcdf
from mixsolve.library import describe_dtype, parse_json_object
from mixsolve.pls.model import MODEL_KIND, check_model
from mixsolve.spectra import WAVENUMBER_AXIS, native_axis
from mixsolve.units import reference_unit

__all__ = ["ENGINE", "file_kind", "read_model", "write_model"]

_MADE_BY = "`mixsolve calibrate`"
#: Arrays prediction reads, with their dims (as :func:`mixsolve.calibrate` writes them).
MODEL_ARRAYS: dict[str, tuple[str, ...]] = {
    "x_mean": ("wavelength",), "x_scale": ("wavelength",),
    "y_mean": ("component",), "y_scale": ("component",),
    "x_rotations": ("block", "wavelength", "latent"),
    "x_loadings": ("block", "wavelength", "latent"),
    "y_loadings": ("block", "component", "latent"),
    "score_variance": ("block", "latent"), "n_latent": ("block",),
    "t2_limit": ("block", "confidence"), "q_limit": ("block", "confidence"),
    "block_of_component": ("component",), "rmsecv": ("component",),
    "reference_min": ("component",), "reference_max": ("component",),
}
#: Arrays checked when present (models written before them lack them and still load).
OPTIONAL_ARRAYS: dict[str, tuple[str, ...]] = {
    "cv_t2": ("sample", "block"),
    "t2_false_alarm_cv": ("block", "confidence"), "q_false_alarm_cv": ("block", "confidence"),
    "msc_reference": ("wavelength",),
}


def write_model(model: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write a PLS model to ``path`` (netCDF-4). A failed write leaves no file behind."""
    return write_netcdf(check_model(model), path)


def read_model(path: str | os.PathLike[str]) -> xr.Dataset:
    """Read a model written by :func:`write_model`.

    Raises
    ------
    FileFormatError
        Missing file, not netCDF, a netCDF file that is not a mixsolve PLS model, or a
        model that is incomplete or damaged: an array missing or with other dims, text
        or true/false values, a non-finite value where prediction reads one, a bad unit,
        pathlength or preprocessing attribute.
    """
    name = Path(path).name
    model = open_kind(path, MODEL_KIND, noun="a model", made_by=_MADE_BY, label="PLS model")
    model = check_model(model, name)
    try:
        return _check_contents(model, name)
    except InputError as exc:
        raise FileFormatError(f"{exc}; a model is written by {_MADE_BY}") from None


def _check_contents(model: xr.Dataset, name: str) -> xr.Dataset:
    """Check what :func:`mixsolve.predict` reads; arrays put in their dims' order."""
    missing = [v for v in MODEL_ARRAYS if v not in model.data_vars]
    if missing:
        hint = " (it holds a library's 'absorptivity')" if "absorptivity" in model else ""
        raise InputError(f"{name}: not a complete PLS model{hint}: no variable "
                         f"{', '.join(map(repr, missing[:3]))}{' ...' if len(missing) > 3 else ''}")
    present = {v: d for v, d in OPTIONAL_ARRAYS.items() if v in model.data_vars}
    for var, dims in {**MODEL_ARRAYS, **present}.items():
        found = model[var].dims
        if sorted(found) != sorted(dims):
            raise InputError(f"{name}: variable {var!r} has dims ({', '.join(found)}), not "
                             f"({', '.join(dims)})")
        kind = model[var].dtype.kind
        if kind not in "iuf":
            raise InputError(f"{name}: variable {var!r} holds {describe_dtype(kind)}, not "
                             "numbers")
        if found != dims:
            model[var] = model[var].transpose(*dims)
    _check_coordinates(model, name)
    n_blocks, n_latent = model.sizes["block"], model.sizes["latent"]
    a = model["n_latent"].values
    if np.any(a != np.round(a)) or np.any(a < 1) or np.any(a > n_latent):
        raise InputError(f"{name}: n_latent {a.tolist()} must be whole numbers from 1 to "
                         f"{n_latent}")
    block_of = model["block_of_component"].values
    if np.any(block_of != np.round(block_of)) or np.any((block_of < 0) | (block_of >= n_blocks)):
        raise InputError(f"{name}: block_of_component {block_of.tolist()} must name blocks "
                         f"0 to {n_blocks - 1}")
    if model.sizes["confidence"] < 2:
        raise InputError(f"{name}: t2_limit and q_limit need the 95 % and 99 % limits")
    if model.sizes.get("sample", 0) < 2:
        raise InputError(f"{name}: the model names fewer than 2 calibration samples")
    for var in ("x_mean", "x_scale", "y_mean", "y_scale"):  # every prediction uses them
        _finite(model, var, name)
    for b in range(n_blocks):  # block arrays are NaN beyond the block's latent variables
        k = int(a[b])
        for var, part in (("x_rotations", model["x_rotations"].values[b, :, :k]),
                          ("x_loadings", model["x_loadings"].values[b, :, :k]),
                          ("y_loadings", model["y_loadings"].values[b, :, :k]),
                          ("score_variance", model["score_variance"].values[b, :k])):
            if not np.all(np.isfinite(part)):
                raise InputError(f"{name}: {var} of block {b} holds a non-finite value within "
                                 f"its {k} latent variable(s)")
    for var in ("t2_false_alarm_cv", "q_false_alarm_cv"):
        rate = model[var].values if var in present else np.array([])
        if np.any(~np.isnan(rate) & ((rate < 0) | (rate > 1))):
            raise InputError(f"{name}: variable {var!r} must hold fractions from 0 to 1 "
                             "(or NaN)")
    if np.any(model["x_scale"].values <= 0) or np.any(model["score_variance"].values <= 0):
        raise InputError(f"{name}: x_scale and score_variance must be positive")
    _check_attributes(model, name)
    return model


def _check_coordinates(model: xr.Dataset, name: str) -> None:
    wl = model["wavelength"].values if "wavelength" in model.coords else np.array([])
    if wl.dtype.kind not in "iuf" or wl.size < 2 or not np.all(np.isfinite(wl)) \
            or np.any(np.diff(wl) <= 0) or wl[0] <= 0:
        raise InputError(f"{name}: the wavelength coordinate must hold at least two positive "
                         "numbers (nm), strictly ascending")
    comps = model["component"].values.tolist() if "component" in model.coords else []
    if not comps or not all(isinstance(c, str) and c.strip() for c in comps):
        raise InputError(f"{name}: the component coordinate must name every component")
    if len(set(comps)) != len(comps):
        dup = next(c for c in comps if comps.count(c) > 1)
        raise InputError(f"{name}: component {dup!r} appears twice")
    if "block" not in model.coords:
        raise InputError(f"{name}: the block coordinate is missing")


def _finite(model: xr.Dataset, var: str, name: str) -> None:
    values = model[var].values
    if not np.all(np.isfinite(values)):
        raise InputError(f"{name}: variable {var!r} holds a non-finite value "
                         f"({values[~np.isfinite(values)].flat[0]})")


def _check_attributes(model: xr.Dataset, name: str) -> None:
    attrs = model.attrs
    try:
        b = float(attrs["pathlength_cm"])
    except (KeyError, TypeError, ValueError):
        b = float("nan")
    if not np.isfinite(b) or b <= 0:
        raise InputError(f"{name}: attribute pathlength_cm {attrs.get('pathlength_cm')!r} is "
                         "not a positive number of cm")
    reference_unit(str(attrs.get("unit", "")), f"{name}: attribute unit")
    if not isinstance(attrs.get("mode"), str):
        raise InputError(f"{name}: attribute mode {attrs.get('mode')!r} is not text")
    prep = parse_json_object(attrs.get("preprocessing"), f"{name}: attribute preprocessing")
    from mixsolve.pls.preprocessing import SCATTERS  # deferred: scipy.signal, read on use

    scatter = prep.get("scatter", "none")
    if scatter not in SCATTERS:
        raise InputError(f"{name}: attribute preprocessing holds scatter {scatter!r}, not one "
                         f"of {', '.join(SCATTERS)}")
    if scatter == "msc":
        if "msc_reference" not in model.data_vars:
            raise InputError(f"{name}: scatter correction msc needs the variable "
                             "'msc_reference'")
        _finite(model, "msc_reference", name)
    derivative = prep.get("derivative", "absent")
    step = "step_cm-1" if isinstance(derivative, dict) \
        and derivative.get("axis") == WAVENUMBER_AXIS else "step_nm"
    if derivative is not None and not (
            isinstance(derivative, dict)
            and all(isinstance(derivative.get(k), int | float)
                    for k in ("window_points", "polyorder", step))):
        raise InputError(f"{name}: attribute preprocessing holds derivative {derivative!r}, "
                         "not null or the window_points, polyorder and step_nm (step_cm-1 "
                         "on a wavenumber axis) of a Savitzky–Golay derivative")
    if step == "step_cm-1" and native_axis(model, name) != WAVENUMBER_AXIS:
        raise InputError(f"{name}: the derivative was taken along wavenumbers, but attribute "
                         f"axis is {model.attrs.get('axis', 'nm')!r}, not 'wavenumber_cm-1'")
    native_axis(model, name)

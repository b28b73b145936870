"""Tidy tables from result Datasets (the Dataset is the source; tables derive from it)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.flags import order_flags
from mixsolve.library import COMPONENT

RESULT_COLUMNS = ("sample", "component", "concentration", "std_uncertainty", "unit",
                  "rms_residual_au", "dof", "flags")
#: Columns added after ``flags`` when the result holds them (the parts of std_uncertainty;
#: a fitted wavelength shift; PLS predictions).
OPTIONAL_COLUMNS = ("u_noise", "u_library", "u_stray", "wavelength_shift_nm",
                    "u_wavelength_shift_nm", "scatter_exponent", "u_scatter_exponent",
                    "scatter_amplitude", "u_scatter_amplitude", "t2", "t2_limit_95",
                    "t2_limit_99", "q_residual", "q_limit_95", "q_limit_99")


def results_table(result: xr.Dataset) -> pd.DataFrame:
    """One row per sample × component.

    Parameters
    ----------
    result : Dataset
        Output of :func:`mixsolve.unmix`: spectra along ``sample``, or along several
        dimensions (``y, x`` of an image), or none (one spectrum); numpy- or dask-backed.

    Returns
    -------
    DataFrame
        Columns ``sample, component, concentration, std_uncertainty, unit,
        rms_residual_au, dof, flags``. ``flags`` holds the sample's ``;``-joined flag codes,
        doubtful ones first (:func:`mixsolve.flags.by_severity`; empty when nothing is
        doubtful). The parts of ``std_uncertainty`` follow when the
        result has them (``u_noise, u_library, u_stray``). With ``fit_shift`` the fitted
        offset adds
        ``wavelength_shift_nm, u_wavelength_shift_nm``; with ``baseline="scatter"``
        ``scatter_exponent, u_scatter_exponent, scatter_amplitude, u_scatter_amplitude``
        (AU at λ₀). Results of
        :func:`mixsolve.predict` (PLS) add
        ``t2, t2_limit_95, t2_limit_99, q_residual, q_limit_95, q_limit_99``; there
        ``rms_residual`` and ``dof`` may differ per component. Over several dimensions,
        ``sample`` joins the labels with ``/`` (``3/17``) and one column per dimension
        (``y``, ``x``) follows the others; one spectrum alone is labelled ``spectrum``.
    """
    conc = result["concentration"].transpose(..., COMPONENT)
    sample_dims = [d for d in conc.dims if d != COMPONENT]
    names = [n for n in ("concentration", "std_uncertainty", "rms_residual", "dof", "flags",
                         *OPTIONAL_COLUMNS) if n in result]
    part = result[names]
    if any(part[n].chunks is not None for n in names):
        part = part.compute()  # one pass over a dask-backed result, not one per column
    if not sample_dims:
        part = part.expand_dims(sample=["spectrum"])
        sample_dims = ["sample"]
    stacked = part.stack(_row=sample_dims) if len(sample_dims) != 1 else part
    row_dim = "_row" if len(sample_dims) != 1 else sample_dims[0]
    conc = stacked["concentration"].transpose(row_dim, COMPONENT).values
    u = stacked["std_uncertainty"].transpose(row_dim, COMPONENT).values
    comps = [str(c) for c in stacked[COMPONENT].values]
    if row_dim == "_row":
        labels = ["/".join(map(str, idx)) if isinstance(idx, tuple) else str(idx)
                  for idx in stacked.indexes["_row"]]
    else:
        labels = [str(s) for s in stacked[row_dim].values]
    flags = stacked["flags"].values if "flags" in stacked else np.full(len(labels), "")
    flags = _by_severity(flags)
    n_c = len(comps)

    def per_row(name: str) -> np.ndarray:
        var = stacked[name]
        if COMPONENT not in var.dims:
            return np.repeat(var.values, n_c)
        full = var.broadcast_like(stacked["concentration"])
        return full.transpose(row_dim, COMPONENT).values.ravel()

    extra = {name: per_row(name) for name in OPTIONAL_COLUMNS if name in stacked}
    if row_dim == "_row":  # one column per dimension of the spectra (y, x of an image)
        index = stacked.indexes["_row"]
        extra.update({dim: np.repeat(np.asarray(index.get_level_values(dim)), n_c)
                      for dim in sample_dims})
    return pd.DataFrame({
        "sample": np.repeat(labels, n_c),
        "component": np.tile(comps, len(labels)),
        "concentration": conc.ravel(),
        "std_uncertainty": u.ravel(),
        "unit": result.attrs["unit"],
        "rms_residual_au": per_row("rms_residual"),
        "dof": per_row("dof"),
        "flags": np.repeat(flags, n_c),
        **extra,
    }, columns=[*RESULT_COLUMNS, *extra])


def _by_severity(flags: np.ndarray) -> np.ndarray:
    """Each flag string with its codes doubtful first, each distinct string ordered once."""
    texts, index = np.unique(np.asarray(flags, dtype=object).astype(str), return_inverse=True)
    return np.array([order_flags(t) for t in texts], dtype=object)[index.ravel()]

"""Fitted and residual spectra of a linear fit, computed when read instead of stored.

A fit of n spectra at m wavelengths with p terms keeps its coefficients (n × p); the
fitted spectra D·x and the residuals a − D·x would each take as much memory as the
spectra themselves. :func:`model_variable` wraps them as an xarray variable whose values
are computed from the coefficients (and, for the residual, the spectra) when they are
read, for just the part that is read (``.sel(sample="s1")`` computes one spectrum), and
kept once read whole, the way xarray treats a variable opened lazily from a file
(``xarray.backends.BackendArray`` with basic indexing; xarray's guide to writing a
backend describes the pattern).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

from mixsolve.spectra import WAVELENGTH


class _ModelSpectra(BackendArray):
    """D·x (or a − D·x) for coefficients x (..., p), design D (m, p) and spectra a."""

    def __init__(self, coef: np.ndarray, design: np.ndarray,
                 values: np.ndarray | None = None) -> None:
        self.coef = coef
        self.design_t = np.ascontiguousarray(design.T)
        self.values = values
        self.shape = (*coef.shape[:-1], design.shape[0])
        self.dtype = np.dtype(float)

    def __getitem__(self, key: indexing.ExplicitIndexer) -> Any:
        return indexing.explicit_indexing_adapter(
            key, self.shape, indexing.IndexingSupport.BASIC, self._read)

    def _read(self, key: tuple[Any, ...]) -> np.ndarray:
        fitted = np.matmul(self.coef[key[:-1]], self.design_t[:, key[-1]])
        if self.values is None:
            return fitted
        return self.values[key] - fitted


def model_variable(dims: tuple[str, ...], coef: np.ndarray, design: np.ndarray,
                   values: np.ndarray | None = None) -> xr.Variable:
    """A lazily computed variable holding D·coef, or ``values`` − D·coef.

    Parameters
    ----------
    dims : tuple of str
        The spectra's dims, ``wavelength`` last.
    coef : array, shape (..., p)
        Coefficients in the units of the design's columns (NaN rows give NaN spectra).
    design : array, shape (m, p)
    values : array, shape (..., m), optional
        The measured spectra: with them the variable is the residual, without it the
        fitted spectra. Held by reference: changing them in place changes the residual
        until it has been read whole (``.load()``).

    Returns
    -------
    xarray.Variable
        Float64 values in AU, computed when read.
    """
    array = _ModelSpectra(np.asarray(coef, dtype=float), np.asarray(design, dtype=float),
                          values)
    return xr.Variable(dims, indexing.MemoryCachedArray(indexing.LazilyIndexedArray(array)))


def fitted_and_residual(spectra: xr.DataArray, coef: xr.DataArray, design: np.ndarray
                        ) -> tuple[xr.DataArray, xr.DataArray]:
    """The fitted and residual spectra (AU) of a fit, labelled like ``spectra``.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
        The spectra fitted, at the used wavelengths (numpy- or dask-backed).
    coef : DataArray with dims (..., "term")
        Coefficients in the units of the design's columns.
    design : array, shape (n_wavelengths, n_terms)

    Returns
    -------
    fitted, residual : DataArray with dims (..., "wavelength")
        Numpy-backed: computed when read (:func:`model_variable`). Dask-backed: lazy, both
        from one task per chunk (:func:`model_and_residual`).

    Notes
    -----
    The dask form is one ``apply_ufunc`` with two outputs rather than ``spectra − fitted``
    in xarray arithmetic: with dask 2026.8 and xarray 2026.9, ``dask.compute`` of a
    Dataset holding a variable derived from another through xarray arithmetic can lose
    a graph key ("Missing dependency"; xarray issue 11329).
    """
    wl = spectra[WAVELENGTH].values
    term = coef.dims[-1]
    if spectra.chunks is not None:
        fitted, residual = xr.apply_ufunc(
            model_and_residual, spectra, coef, np.ascontiguousarray(design.T),
            input_core_dims=[[WAVELENGTH], [term], [term, WAVELENGTH]],
            output_core_dims=[[WAVELENGTH], [WAVELENGTH]], dask="parallelized",
            output_dtypes=[float, float])
        return (fitted.assign_coords({WAVELENGTH: wl}),
                residual.assign_coords({WAVELENGTH: wl}))
    lead = [d for d in coef.dims if d != term]
    ordered = spectra.transpose(*lead, WAVELENGTH)
    coords = dict(ordered.coords.items())
    values = np.asarray(ordered.values)
    c = np.asarray(coef.transpose(*lead, term).values)
    dims = (*lead, WAVELENGTH)
    return (xr.DataArray(model_variable(dims, c, design), coords=coords),
            xr.DataArray(model_variable(dims, c, design, values), coords=coords))


def model_and_residual(values: np.ndarray, coef: np.ndarray, design_t: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """D·x and a − D·x for one block: ``values`` (..., m), ``coef`` (..., p), Dᵀ (p, m)."""
    fitted = np.matmul(coef, design_t)
    return fitted, values - fitted

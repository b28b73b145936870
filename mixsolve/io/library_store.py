"""Store libraries as netCDF-4 files (:mod:`mixsolve.io.netcdf_store`), written atomically."""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path

import numpy as np
import xarray as xr

from mixsolve.errors import FileFormatError, InputError, OutdatedLibraryWarning
from mixsolve.io.netcdf_store import ENGINE, open_kind, open_netcdf, write_netcdf
from mixsolve.library import BUILT_FROM_STANDARDS, LIBRARY_KIND, check_library
from mixsolve.library_error import ERROR_PATTERN

__all__ = ["ENGINE", "open_netcdf", "read_library", "write_library"]


def write_library(library: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write a library to ``path`` (netCDF-4). A failed write leaves no file behind."""
    return write_netcdf(check_library(library), path)


def read_library(path: str | os.PathLike[str]) -> xr.Dataset:
    """Read a library written by :func:`write_library`.

    Raises
    ------
    FileFormatError
        Missing file, not netCDF, or a netCDF file that is not a mixsolve library.

    Warns
    -----
    OutdatedLibraryWarning
        A library built from standards that has no ``error_pattern`` (written before
        libraries kept their error's correlation, docs/uncertainty.md "Library").
    """
    ds = open_kind(path, LIBRARY_KIND, noun="a library",
                   made_by="`mixsolve library import` or `library build`", label="library")
    try:
        library = check_library(ds, Path(path).name)
    except InputError as exc:
        raise FileFormatError(str(exc)) from None
    if _built_without_patterns(library):
        warnings.warn(
            f"{Path(path).name}: built from standards by an older mixsolve, without the "
            "library's error patterns; its u(ε) is taken as fully correlated, which can be "
            "several-fold off: rebuild it with `mixsolve library build`",
            OutdatedLibraryWarning, stacklevel=2)
    return library


def _built_without_patterns(library: xr.Dataset) -> bool:
    """A library from standards (provenance) with stated u(ε) and no ``error_pattern``."""
    if ERROR_PATTERN in library:
        return False
    try:
        method = json.loads(library.attrs.get("provenance", "{}") or "{}").get("method")
    except (ValueError, AttributeError):
        return False
    return method == BUILT_FROM_STANDARDS and bool(
        np.isfinite(library["u_absorptivity"].values).any())

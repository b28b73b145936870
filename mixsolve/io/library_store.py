"""Store libraries as netCDF-4 files (:mod:`mixsolve.io.netcdf_store`), written atomically."""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.netcdf_store import ENGINE, open_kind, open_netcdf, write_netcdf
from mixsolve.library import LIBRARY_KIND, check_library

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
    """
    ds = open_kind(path, LIBRARY_KIND, noun="a library",
                   made_by="`mixsolve library import` or `library build`", label="library")
    try:
        return check_library(ds, Path(path).name)
    except InputError as exc:
        raise FileFormatError(str(exc)) from None

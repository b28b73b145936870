"""Store libraries as netCDF-4 files (h5netcdf engine), written atomically."""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.atomic import atomic_path
from mixsolve.library import LIBRARY_KIND, check_library

ENGINE = "h5netcdf"


def write_library(library: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write a library to ``path`` (netCDF-4). A failed write leaves no file behind."""
    library = check_library(library)
    with atomic_path(path) as tmp:
        library.to_netcdf(tmp, engine=ENGINE, invalid_netcdf=False)
    return Path(path)


def open_netcdf(path: str | os.PathLike[str]) -> xr.Dataset:
    """Load a whole netCDF file into memory and close it, or say why it cannot be read."""
    p = Path(path)
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    if p.is_dir():
        raise FileFormatError(f"{path}: is a folder, not a netCDF file")
    try:
        with warnings.catch_warnings():  # h5netcdf warns about foreign HDF5 layouts
            warnings.simplefilter("ignore")
            with xr.open_dataset(p, engine=ENGINE) as ds:
                return ds.load()
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise FileFormatError(
            f"{p.name}: not a readable netCDF file ({exc.__class__.__name__}); a library is "
            "written by `mixsolve library import` or `library build`") from None


def read_library(path: str | os.PathLike[str]) -> xr.Dataset:
    """Read a library written by :func:`write_library`.

    Raises
    ------
    FileFormatError
        Missing file, not netCDF, or a netCDF file that is not a mixsolve library.
    """
    ds = open_netcdf(path)
    kind = ds.attrs.get("mixsolve_kind")
    if kind != LIBRARY_KIND:
        what = f"a {kind!r} file" if kind else "not written by mixsolve"
        raise FileFormatError(f"{Path(path).name}: not a mixsolve library ({what})")
    try:
        return check_library(ds, Path(path).name)
    except InputError as exc:
        raise FileFormatError(str(exc)) from None

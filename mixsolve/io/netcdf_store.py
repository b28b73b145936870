"""netCDF-4 files of mixsolve (h5netcdf engine): written atomically, read with a clear error.

Libraries and PLS models are both Datasets marked by a ``mixsolve_kind`` attribute; this
module holds what they share, and ``library_store``/``model_store`` add their checks.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import xarray as xr

from mixsolve.errors import FileFormatError
from mixsolve.io.atomic import atomic_path

ENGINE = "h5netcdf"


def write_netcdf(ds: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write ``ds`` to ``path`` (netCDF-4). A failed write leaves no file behind."""
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine=ENGINE, invalid_netcdf=False)
    return Path(path)


def _open(p: Path) -> xr.Dataset:
    with warnings.catch_warnings():  # h5netcdf warns about foreign HDF5 layouts
        warnings.simplefilter("ignore")
        with xr.open_dataset(p, engine=ENGINE) as ds:
            return ds.load()


def open_netcdf(path: str | os.PathLike[str], *,
                made_by: str = "`mixsolve library import` or `library build`",
                noun: str = "a library") -> xr.Dataset:
    """Load a whole netCDF file into memory and close it, or say why it cannot be read.

    ``noun`` and ``made_by`` complete the message for a file that is not netCDF
    ("...; a library is written by `mixsolve library import` or `library build`").
    """
    p = Path(path)
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    if p.is_dir():
        raise FileFormatError(f"{path}: is a folder, not a netCDF file")
    try:
        return _open(p)
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise FileFormatError(
            f"{p.name}: not a readable netCDF file ({exc.__class__.__name__}); {noun} is "
            f"written by {made_by}") from None


def open_kind(path: str | os.PathLike[str], kind: str, *, noun: str, made_by: str,
              label: str) -> xr.Dataset:
    """Open a mixsolve netCDF file and check its ``mixsolve_kind`` is ``kind``.

    ``label`` names the kind in the error ("not a mixsolve <label> (...)").
    """
    ds = open_netcdf(path, made_by=made_by, noun=noun)
    found = ds.attrs.get("mixsolve_kind")
    if found != kind:
        what = f"a {found!r} file" if found else "not written by mixsolve"
        raise FileFormatError(f"{Path(path).name}: not a mixsolve {label} ({what})")
    return ds


def file_kind(path: str | os.PathLike[str]) -> str | None:
    """The ``mixsolve_kind`` attribute of a netCDF file, or None if it has none or is unreadable."""
    try:
        kind = _open(Path(path)).attrs.get("mixsolve_kind")
    except (OSError, ValueError, KeyError, TypeError):
        return None
    return None if kind is None else str(kind)

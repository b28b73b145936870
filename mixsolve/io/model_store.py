"""Store PLS models as netCDF-4 files (h5netcdf engine), written atomically.

A model file holds the Dataset of :func:`mixsolve.calibrate` as it is: arrays and
attributes (JSON text for nested settings), ``mixsolve_kind = "mixsolve-pls-model"``. No
pickles: any netCDF reader can open it.
"""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr

from mixsolve.errors import FileFormatError
from mixsolve.io.atomic import atomic_path
from mixsolve.solve.pls_model import MODEL_KIND, check_model

ENGINE = "h5netcdf"


def write_model(model: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write a PLS model to ``path`` (netCDF-4). A failed write leaves no file behind."""
    model = check_model(model)
    with atomic_path(path) as tmp:
        model.to_netcdf(tmp, engine=ENGINE, invalid_netcdf=False)
    return Path(path)


def file_kind(path: str | os.PathLike[str]) -> str | None:
    """The ``mixsolve_kind`` attribute of a netCDF file, or None if it has none or is unreadable."""
    try:
        with xr.open_dataset(Path(path), engine=ENGINE) as ds:
            kind = ds.attrs.get("mixsolve_kind")
    except (OSError, ValueError, KeyError, TypeError):
        return None
    return None if kind is None else str(kind)


def read_model(path: str | os.PathLike[str]) -> xr.Dataset:
    """Read a model written by :func:`write_model`.

    Raises
    ------
    FileFormatError
        Missing file, not netCDF, or a netCDF file that is not a mixsolve PLS model.
    """
    p = Path(path)
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    if p.is_dir():
        raise FileFormatError(f"{path}: is a folder, not a model file")
    try:
        with xr.open_dataset(p, engine=ENGINE) as ds:
            model = ds.load()
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise FileFormatError(
            f"{p.name}: not a readable netCDF file ({exc.__class__.__name__}); a model is "
            "written by `mixsolve calibrate`") from None
    kind = model.attrs.get("mixsolve_kind")
    if kind != MODEL_KIND:
        what = f"a {kind!r} file" if kind else "not written by mixsolve"
        raise FileFormatError(f"{p.name}: not a mixsolve PLS model ({what})")
    return check_model(model, p.name)

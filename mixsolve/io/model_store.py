"""Store PLS models as netCDF-4 files (h5netcdf engine), written atomically.

A model file holds the Dataset of :func:`mixsolve.calibrate` as it is: arrays and
attributes (JSON text for nested settings), ``mixsolve_kind = "mixsolve-pls-model"``. No
pickles: any netCDF reader can open it.
"""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr

from mixsolve.io.netcdf_store import ENGINE, file_kind, open_kind, write_netcdf
from mixsolve.solve.pls_model import MODEL_KIND, check_model

__all__ = ["ENGINE", "file_kind", "read_model", "write_model"]


def write_model(model: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write a PLS model to ``path`` (netCDF-4). A failed write leaves no file behind."""
    return write_netcdf(check_model(model), path)


def read_model(path: str | os.PathLike[str]) -> xr.Dataset:
    """Read a model written by :func:`write_model`.

    Raises
    ------
    FileFormatError
        Missing file, not netCDF, or a netCDF file that is not a mixsolve PLS model.
    """
    model = open_kind(path, MODEL_KIND, noun="a model", made_by="`mixsolve calibrate`",
                      label="PLS model")
    return check_model(model, Path(path).name)

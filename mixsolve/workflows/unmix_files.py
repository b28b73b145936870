"""Unmix spectra files with a library file, optionally writing the tidy results CSV."""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any

import xarray as xr

from mixsolve.io.library_store import read_library
from mixsolve.io.results_io import write_results
from mixsolve.io.spectra_io import read_spectra
from mixsolve.solve.unmix import unmix

PathLike = str | os.PathLike[str]


def unmix_files(library: PathLike, spectra: PathLike, *,
                window: tuple[float, float] | None = None,
                wavelengths: Sequence[float] | None = None, method: str = "nnls",
                baseline: str = "none", pathlength_cm: float | None = None,
                unit: str | None = None, out: PathLike | None = None,
                **options: Any) -> xr.Dataset:
    """Read both files, run :func:`mixsolve.unmix`, write ``out`` (CSV) when given.

    ``options`` pass on to :func:`mixsolve.unmix` (weights, noise, absorbance_range, ...).
    """
    lib = read_library(library)
    measured = read_spectra(spectra)
    result = unmix(measured, lib, window=window, wavelengths=wavelengths,
                   method=method,  # type: ignore[arg-type]
                   baseline=baseline,  # type: ignore[arg-type]
                   pathlength_cm=pathlength_cm, unit=unit, **options)
    if out is not None:
        write_results(result, out)
    return result

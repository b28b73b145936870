"""The cube demo: a synthetic image cube written to disk and unmixed chunk by chunk.

``mixsolve demo --cube N`` writes the invented demo card of
``reference_spectra_demo/make_demo_cube.py`` as an N × N-pixel Zarr cube with its library,
unmixes it through the same path as ``mixsolve unmix LIB CUBE.zarr --out RESULT.zarr``
(lazy, chunk by chunk, so memory holds a few chunks whatever N), and compares the
concentrations at a grid of pixels with the truth the card was made from. Needs the
``scale`` extra (dask and zarr).
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.io.atomic import ensure_folder
from mixsolve.io.outputs import guard_outputs
from mixsolve.io.results_io import write_table
from mixsolve.library import COMPONENT
from mixsolve.report.unmix_text import format_cube_summary
from mixsolve.spectra import check_number
from mixsolve.workflows.cluster import require_scale
from mixsolve.workflows.unmix_files import unmix_cube_files

#: Pixels per side of the grid of pixels compared with the truth.
CHECK_GRID = 25
CUBE_NOTE = (
    "The cube is synthetic: an invented test card painted with the invented pigments "
    "'amber', 'rose' and 'teal', made by reference_spectra_demo/make_demo_cube.py."
)


@dataclass
class CubeDemoRun:
    """What the cube demo made: files, the (lazily opened) result, the check, the text."""

    folder: Path
    library_path: Path
    cube_path: Path
    result_path: Path
    result: xr.Dataset
    comparison: pd.DataFrame
    seconds: float
    text: str


def run_cube_demo(out_dir: str | os.PathLike[str], pixels: int = 1000,
                  n_wavelengths: int = 191, progress: TextIO | None = None) -> CubeDemoRun:
    """Write the synthetic cube into ``out_dir/cube/`` and unmix it there.

    Parameters
    ----------
    out_dir : path-like
        Parent folder; ``cube/`` inside it receives ``library.nc``, ``cube.zarr``,
        ``result.zarr`` and ``comparison.csv``.
    pixels : int
        The cube is ``pixels`` × ``pixels`` (at least 2).
    n_wavelengths : int
        Wavelengths from 380 to 760 nm (at least 10; 191 is every 2 nm).
    progress : text stream, optional
        Where the progress bars of writing and unmixing go.

    Returns
    -------
    CubeDemoRun

    Raises
    ------
    InputError
        Too few pixels or wavelengths, or the scale extra (dask, zarr) not installed.
    """
    pixels = int(check_number(pixels, "pixels", low=2, integer=True,
                              hint="give the pixels per side, e.g. 1000"))
    n_wavelengths = int(check_number(n_wavelengths, "n_wavelengths", low=10, integer=True,
                                     hint="e.g. 191"))
    require_scale(("dask", "zarr"), "the cube demo needs")
    from mixsolve.reference_spectra_demo.make_demo_cube import concentrations, write_demo_cube

    folder = Path(out_dir) / "cube"
    guard_outputs([folder / "library.nc", folder / "comparison.csv"],
                  stores=[folder / "cube.zarr", folder / "result.zarr"], folders=[folder])
    folder = ensure_folder(folder)
    start = time.perf_counter()
    library_path, cube_path = write_demo_cube(folder, int(pixels), int(n_wavelengths))
    written = time.perf_counter()
    result_path = folder / "result.zarr"
    result = unmix_cube_files(library_path, cube_path, baseline="offset", unit="mg/L",
                              out=result_path, progress=progress)
    seconds = time.perf_counter() - written
    comparison = compare_grid(result, int(pixels), concentrations)
    write_table(comparison, folder / "comparison.csv")
    text = "\n".join([
        CUBE_NOTE, "",
        f"Wrote {cube_path} ({pixels} × {pixels} pixels × {n_wavelengths} wavelengths) in "
        f"{written - start:.0f} s; unmixed it into {result_path} in {seconds:.0f} s "
        f"({int(pixels) ** 2 / max(seconds, 1e-9):,.0f} spectra/s).", "",
        format_cube_summary(result),
        f"Against the truth at {comparison.attrs['pixels']} pixels on a regular grid (mg/L):",
        comparison.to_string(index=False, float_format=lambda v: f"{v:.4f}"), "",
        f"Files: {library_path}, {cube_path}, {result_path}, {folder / 'comparison.csv'}",
    ]) + "\n"
    return CubeDemoRun(folder, library_path, cube_path, result_path, result, comparison,
                       seconds, text)


def compare_grid(result: xr.Dataset, pixels: int,
                 truth_at: Callable[[np.ndarray, np.ndarray, int], np.ndarray]
                 ) -> pd.DataFrame:
    """Median and largest |found − true| per component at a grid of pixels (mg/L).

    ``truth_at(y, x, pixels)`` gives the true concentrations (mg/L) in component order.
    """
    grid = np.unique(np.linspace(0, pixels - 1, min(CHECK_GRID, pixels)).round().astype(int))
    found = result["concentration"].isel(y=grid, x=grid).transpose("y", "x", COMPONENT)
    found = np.asarray(found.values)
    true = truth_at(grid[:, None], grid[None, :], pixels)
    error = np.abs(found - true).reshape(-1, true.shape[-1])
    table = pd.DataFrame({
        "component": [str(c) for c in result[COMPONENT].values],
        "median_abs_error": np.median(error, axis=0),
        "max_abs_error": error.max(axis=0),
        "true_max": true.reshape(-1, true.shape[-1]).max(axis=0),
    })
    table.attrs["pixels"] = grid.size ** 2
    return table

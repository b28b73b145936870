"""Published-equation jobs from files (what `mixsolve equations ...` runs)."""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any, TextIO

import xarray as xr

from mixsolve.equations.apply import apply_equations
from mixsolve.equations.check import EquationCheck, check_equations
from mixsolve.io.equations_io import read_equations
from mixsolve.io.library_store import read_library
from mixsolve.io.outputs import all_or_nothing, guard_outputs
from mixsolve.io.results_io import write_table
from mixsolve.io.spectra_io import read_spectra, spectra_inputs, write_notes
from mixsolve.report.equations_text import equations_table
from mixsolve.spectra import Quantity

PathLike = str | os.PathLike[str]


def check_equations_file(equations: PathLike, *, library: PathLike | None = None,
                         **options: Any) -> EquationCheck:
    """Read a set (a file or a shipped name) and a library (if given); check the set.

    ``options`` pass on to :func:`mixsolve.check_equations` (noise, shift_nm,
    bandpass_nm).
    """
    eq = read_equations(equations)
    lib = read_library(library) if library is not None else None
    return check_equations(eq, library=lib, **options)


def apply_equations_files(equations: PathLike, spectra: PathLike | Sequence[PathLike], *,
                          library: PathLike | None = None, out: PathLike | None = None,
                          quantity: Quantity | None = None, notes: TextIO | None = None,
                          **options: Any) -> xr.Dataset:
    """Read the set, the spectra and a library; apply the set; write ``out`` (tidy CSV).

    ``spectra`` is one file, a folder or a glob, or a list of them
    (:func:`mixsolve.read_spectra`); ``options`` pass on to
    :func:`mixsolve.apply_equations` (pathlength_cm, noise, absorbance_range, method,
    bandwidth_nm). The output is guarded before any work and written all or nothing.
    """
    inputs = [*spectra_inputs(spectra), library]
    if os.path.exists(os.fspath(equations)):
        inputs.append(equations)
    guard_outputs([out], inputs=inputs)
    with all_or_nothing():
        eq = read_equations(equations)
        measured = read_spectra(spectra, quantity=quantity)
        write_notes(measured, notes)
        lib = read_library(library) if library is not None else None
        result = apply_equations(measured, eq, library=lib, **options)
        if out is not None:
            write_table(equations_table(result), out)
    return result

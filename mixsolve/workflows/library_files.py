"""Library jobs from files to a library file (what `mixsolve library ...` runs)."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from typing import TextIO

import xarray as xr

from mixsolve.io.atomic import check_writable
from mixsolve.io.library_store import write_library
from mixsolve.io.spectra_io import (
    read_absorptivity_table,
    read_spectra,
    spectra_inputs,
    write_notes,
)
from mixsolve.io.standards_io import molar_masses_from_sheet, read_standards
from mixsolve.library import build_library, import_absorptivities
from mixsolve.spectra import Quantity

PathLike = str | os.PathLike[str]


def import_library_file(table: PathLike, unit: str, out: PathLike, *,
                        molar_mass: Mapping[str, float] | None = None, solvent: str = "",
                        bandwidth_nm: float | None = None,
                        u_scale_rel: float | Mapping[str, float] | None = None) -> xr.Dataset:
    """Read an absorptivity table, make a library and write it to ``out``."""
    check_writable(out, inputs=[table])
    eps = read_absorptivity_table(table)
    lib = import_absorptivities(eps, unit, molar_mass_g_per_mol=molar_mass, solvent=solvent,
                                bandwidth_nm=bandwidth_nm, source=os.path.basename(table),
                                u_scale_rel=u_scale_rel)
    write_library(lib, out)  # one file, atomic
    return lib


def build_library_files(spectra: PathLike | Sequence[PathLike], standards: PathLike,
                        out: PathLike | None, *,
                        intercept: bool = False, pathlength_cm: float | None = None,
                        molar_mass: Mapping[str, float] | None = None, solvent: str = "",
                        bandwidth_nm: float | None = None,
                        quantity: Quantity | None = None,
                        notes: TextIO | None = None) -> xr.Dataset:
    """Read standards spectra and sheet, build a library and write it to ``out`` (if given).

    ``spectra`` is one file, a folder or a glob, or a list of them (:func:`read_spectra`);
    ``quantity`` says what the spectra files' numbers are; ``notes`` receives what reading
    skipped or decided (``note: ...`` lines).
    """
    check_writable(out, inputs=[*spectra_inputs(spectra), standards])
    measured = read_spectra(spectra, quantity=quantity)
    write_notes(measured, notes)
    sheet = read_standards(standards)
    masses = {**molar_masses_from_sheet(sheet), **(molar_mass or {})}
    lib = build_library(measured, sheet, intercept=intercept, pathlength_cm=pathlength_cm,
                        molar_mass_g_per_mol=masses or None, solvent=solvent,
                        bandwidth_nm=bandwidth_nm, source=str(measured.attrs["source"]),
                        standards_name=os.path.basename(standards))
    if out is not None:
        write_library(lib, out)  # one file, atomic
    return lib

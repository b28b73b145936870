"""The bundled demo: build a library from synthetic standards, unmix synthetic batches.

The data in ``reference_spectra_demo/`` are invented (see its README). The demo shows the
whole job: library from standards, unmixing, results beside the known truth, files written.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.io.atomic import ensure_folder
from mixsolve.io.library_store import write_library
from mixsolve.io.outputs import all_or_nothing, check_own_files, guard_outputs
from mixsolve.io.results_io import record_outputs, write_table
from mixsolve.io.spectra_io import read_spectra
from mixsolve.io.standards_io import molar_masses_from_sheet, read_standards
from mixsolve.library import build_library
from mixsolve.report.tables import results_table
from mixsolve.report.text import format_library, format_results
from mixsolve.solve.unmix import unmix
from mixsolve.workflows.plate import PlateBatch, run_plates

DEMO_PACKAGE = "mixsolve.reference_spectra_demo"
DEMO_UNIT = "mg/L"
#: Fill volume (µL) and well diameter (mm) the synthetic plate was made with.
PLATE_VOLUME_UL = 300.0
PLATE_WELL_DIAMETER_MM = 6.96
SYNTHETIC_NOTE = (
    "The demo data are synthetic: an invented colourant maker, invented pigments 'amber', "
    "'rose' and 'teal', spectra made by reference_spectra_demo/make_demo_data.py."
)


@dataclass
class DemoRun:
    """What the demo made: library, result, comparison with the truth, the printed text."""

    library: xr.Dataset
    result: xr.Dataset
    comparison: pd.DataFrame
    text: str
    out_dir: Path
    plate: PlateBatch | None = None
    plate_comparison: pd.DataFrame | None = None


def demo_file(name: str) -> Path:
    """Path of a bundled demo file (installed package data, else the source checkout)."""
    try:
        path = Path(str(resources.files(DEMO_PACKAGE).joinpath(name)))
    except ModuleNotFoundError:  # imported from a source tree that was not installed
        path = Path(__file__).resolve().parents[2] / "reference_spectra_demo" / name
    return path


def compare_with_truth(result: xr.Dataset, truth: pd.DataFrame) -> pd.DataFrame:
    """Join results with known concentrations: difference and z = difference / u."""
    found = results_table(result)[["sample", "component", "concentration", "std_uncertainty"]]
    known = truth.rename(columns={"concentration": "known"})[["sample", "component", "known"]]
    table = found.merge(known, on=["sample", "component"], how="left", validate="one_to_one")
    table["difference"] = table["concentration"] - table["known"]
    table["z"] = table["difference"] / table["std_uncertainty"]
    table["unit"] = result.attrs["unit"]
    return table


def run_demo(out_dir: str | os.PathLike[str] = "mixsolve-demo") -> DemoRun:
    """Run the demo and write ``library.nc``, ``results.csv``, ``comparison.csv`` to ``out_dir``.

    Returns
    -------
    DemoRun
        With ``text``: the library summary, the results beside the known values, and a
        line on how many results lie within 2 standard uncertainties of the truth.
    """
    top, plate = Path(out_dir), Path(out_dir) / "plate"
    guard_outputs([top / n for n in DEMO_FILES], folders=[top, plate])
    check_own_files(top, DEMO_FILES)  # the user's own files in --out stay theirs
    with all_or_nothing():
        return _run_demo(top)


#: What the demo writes into its folder besides the plate run's own outputs in plate/.
DEMO_FILES = ("library.nc", "results.csv", "comparison.csv", "plate/comparison.csv")


def _run_demo(out_dir: Path) -> DemoRun:
    folder = ensure_folder(out_dir)
    standards = read_spectra(demo_file("standards_spectra.csv"))
    sheet = read_standards(demo_file("standards.csv"))
    library = build_library(standards, sheet, molar_mass_g_per_mol=molar_masses_from_sheet(sheet),
                            solvent="70 % ethanol (invented scenario)", bandwidth_nm=2.0,
                            source="standards_spectra.csv")
    batches = read_spectra(demo_file("batches_spectra.csv"))
    # the invented spectra were made with the library's own 2 nm bandpass: stated, no note
    result = unmix(batches, library, window=(400, 700), method="nnls", unit=DEMO_UNIT,
                   bandwidth_nm=2.0)
    truth = pd.read_csv(demo_file("batches_truth.csv"))
    comparison = compare_with_truth(result, truth)
    write_library(library, folder / "library.nc")
    write_table(results_table(result), folder / "results.csv")
    write_table(comparison, folder / "comparison.csv")
    within = int(np.sum(np.abs(comparison["difference"])
                        <= 2 * comparison["std_uncertainty"].fillna(np.inf)))
    wide_truth = truth.pivot(index="sample", columns="component", values="concentration")
    text = "\n".join([
        SYNTHETIC_NOTE,
        "",
        format_library(library, "built from the demo standards"),
        format_results(result, truth=wide_truth),
        f"{within} of {len(comparison)} results lie within 2 standard uncertainties of the "
        "known value.",
        f"Wrote {folder / 'library.nc'}, {folder / 'results.csv'}, {folder / 'comparison.csv'}",
        "",
    ])
    plate, plate_comparison, plate_text = run_demo_plate(folder / "plate", library)
    record_outputs(folder, DEMO_FILES)
    return DemoRun(library, result, comparison, text + plate_text, folder, plate,
                   plate_comparison)


def run_demo_plate(out_dir: Path, library: xr.Dataset) -> tuple[PlateBatch, pd.DataFrame, str]:
    """The demo's plate run: the synthetic 96-well export, unmixed with the demo library.

    Writes the plate outputs to ``out_dir`` (see :func:`mixsolve.run_plates`) and compares
    each sample's mean with the known concentrations of ``plate_truth.csv``.

    Returns
    -------
    batch : PlateBatch
    comparison : DataFrame
        Samples beside the known values, with difference and z = difference / u.
    text : str
        What the demo prints about the plate.
    """
    batch = run_plates([demo_file("plate_export.csv")], demo_file("plate_layout.csv"),
                       out=out_dir, library=library, volume_ul=PLATE_VOLUME_UL,
                       well_diameter_mm=PLATE_WELL_DIAMETER_MM, window=(400, 700),
                       unit=DEMO_UNIT, bandwidth_nm=2.0)  # as the library's (invented data)
    found = batch.plates[0].samples[["sample", "component", "concentration",
                                     "std_uncertainty", "n_wells", "cv_percent", "flags"]]
    truth = pd.read_csv(demo_file("plate_truth.csv")).rename(columns={"concentration": "known"})
    table = found.merge(truth[["sample", "component", "known"]], on=["sample", "component"],
                        how="left", validate="one_to_one")
    table["difference"] = table["concentration"] - table["known"]
    table["z"] = table["difference"] / table["std_uncertainty"]
    write_table(table, out_dir / "comparison.csv")
    within = int(np.sum(np.abs(table["difference"])
                        <= 2 * table["std_uncertainty"].fillna(np.inf)))
    lines = [
        "",
        "Plate run: a synthetic 96-well export (grid blocks, semicolons, decimal commas), "
        f"{PLATE_VOLUME_UL:g} µL per well in {PLATE_WELL_DIAMETER_MM:g} mm wells, blanks in "
        "column 1, each extract in triplicate at 2- and 4-fold dilution",
        batch.text.rstrip("\n"),
        f"{within} of {len(table)} plate results lie within 2 standard uncertainties of the "
        "known value.",
        f"Wrote {out_dir / 'comparison.csv'} and the plate outputs in {out_dir}",
        "",
    ]
    return batch, table, "\n".join(lines)

"""Plate batches from files to files: what `mixsolve plate` runs.

Every export is read and analysed first, and only when all of them succeeded are the
outputs written (each file atomically), so a bad export leaves no output behind. Each
export gets its own subfolder of the output folder with ``wells.csv``, ``samples.csv``,
``results.xlsx`` and ``report.html``; ``samples.csv`` at the top combines all plates.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.io.atomic import ensure_folder
from mixsolve.io.layout_io import read_layout
from mixsolve.io.library_store import read_library, write_library
from mixsolve.io.outputs import all_or_nothing, check_own_files, guard_outputs, unique_names
from mixsolve.io.plates import read_plate
from mixsolve.io.results_io import record_outputs, write_table, write_text, write_workbook
from mixsolve.plate.analysis import PlateResult, analyse_plate
from mixsolve.report.plate_text import (
    attention_lines,
    counts_text,
    plate_notes,
    plate_settings,
)
from mixsolve.report.text import CAUTION, run_note_lines
from mixsolve.spectra import Quantity

PathLike = str | os.PathLike[str]
#: File suffixes taken from a folder of exports.
EXPORT_SUFFIXES = (".csv", ".tsv", ".txt", ".xlsx")
#: ``progress(done, total, message)``, called after each plate.
Progress = Callable[[int, int, str], None]


@dataclass
class PlateBatch:
    """What a batch made: one result per plate, the combined samples, the summary text."""

    plates: list[PlateResult]
    folders: list[Path]
    samples: pd.DataFrame
    out_dir: Path
    text: str


def find_exports(exports: Sequence[PathLike], *, exclude: Sequence[PathLike] = ()
                 ) -> list[Path]:
    """Expand folders into the export files they hold (.csv, .tsv, .txt, .xlsx), in name order.

    Hidden files and the paths in ``exclude`` (the layout, the library) are skipped.

    Raises
    ------
    InputError
        No export given, a folder without exports, or one file given twice.
    """
    skip = {Path(p).resolve() for p in exclude}
    found: list[Path] = []
    for item in exports:
        path = Path(item)
        if path.is_dir():
            files = sorted(p for p in path.iterdir() if p.is_file() and not
                           p.name.startswith(".") and p.suffix.lower() in EXPORT_SUFFIXES
                           and p.resolve() not in skip)
            if not files:
                raise InputError(f"{path}: no plate exports ({', '.join(EXPORT_SUFFIXES)}) in "
                                 "the folder")
            found += files
        else:
            found.append(path)
    if not found:
        raise InputError("no plate export given")
    seen: set[Path] = set()
    for path in found:
        if path.resolve() in seen:
            raise InputError(f"{path}: export given twice")
        seen.add(path.resolve())
    return found


def plate_arguments(paths: Sequence[str], library: str | None, library_from_plate: bool
                    ) -> tuple[str | None, list[str]]:
    """The library file and the exports of ``mixsolve plate LIBRARY_FILE EXPORTS...``.

    The library comes first, as for ``mixsolve unmix``; with ``--library-from-plate`` (or
    the old ``--library LIB``) every path is an export.

    Raises
    ------
    InputError
        No export after the library, or a first path that is an export or a folder (the
        library was left out).
    """
    first = Path(paths[0])
    if library_from_plate and library is None and first.suffix.lower() == ".nc":
        raise InputError("give either a library or --library-from-plate, not both")
    if library_from_plate or library is not None:
        return library, list(paths)
    if first.is_dir() or first.suffix.lower() in EXPORT_SUFFIXES:
        raise InputError(f"{first}: the first path is the library file (.nc), then the "
                         "exports; give the library first (mixsolve plate LIB.nc EXPORTS...), "
                         "or build it from the plate with --library-from-plate")
    if len(paths) < 2:
        raise InputError(f"no plate export after the library {first}; give "
                         "mixsolve plate LIB.nc EXPORTS...")
    return paths[0], list(paths[1:])


#: Files written for each plate, in its own subfolder (``library.nc`` only when built there).
PLATE_FILES = ("wells.csv", "samples.csv", "results.xlsx", "report.html")
#: The combined table at the top of the output folder.
COMBINED = "samples.csv"


def plate_folder_names(paths: Sequence[Path]) -> list[str]:
    """One safe, unique subfolder name per export, from its file name.

    Never ``.``, ``..``, hidden, or the name of the combined table
    (:func:`mixsolve.io.outputs.unique_names`).
    """
    return unique_names([p.stem for p in paths], fallback="plate", taken=[COMBINED])


def run_plates(
    exports: Sequence[PathLike],
    layout: PathLike,
    *,
    out: PathLike,
    library: xr.Dataset | PathLike | None = None,
    library_from_plate: bool = False,
    sheet: str | None = None,
    layout_sheet: str | None = None,
    plate_size: int | None = None,
    quantity: Quantity | None = None,
    progress: Progress | None = None,
    **options: Any,
) -> PlateBatch:
    """Analyse plate exports with one layout and write every output.

    Parameters
    ----------
    exports : sequence of path-like
        Export files, or folders of them (see :func:`find_exports`).
    layout : path-like
        Layout file (:func:`mixsolve.io.layout_io.read_layout`), the same for every plate.
    out : path-like
        Output folder (created if needed): one subfolder per export, named after it,
        holding ``wells.csv``, ``samples.csv``, ``results.xlsx``, ``report.html`` (and
        ``library.nc`` with ``library_from_plate``); plus ``samples.csv`` for all plates.
    library : Dataset or path-like, optional
        A library or its file; exclusive with ``library_from_plate``.
    library_from_plate : bool
        Build each plate's library from its standard wells.
    sheet, layout_sheet : str, optional
        XLSX sheets of the exports and of the layout; default the first.
    plate_size : {96, 384}, optional
        Plate format; detected by default.
    quantity : str, optional
        What the exports' readings are (:func:`read_plate`): absorbance by default.
    progress : callable, optional
        ``progress(done, total, message)`` after each plate (the CLI shows a bar).
    **options
        Passed to :func:`mixsolve.plate.analysis.analyse_plate` (window,
        wavelengths, method, baseline, unit, pathlength_cm, volume_ul, well_diameter_mm,
        water_band, water_k_au_per_cm, max_cv) and on to :func:`mixsolve.unmix` (weights,
        noise, absorbance_range, fit_shift, ...).

    Returns
    -------
    PlateBatch

    Raises
    ------
    InputError, OutputError
        As :func:`read_plate`, :func:`read_layout` and :func:`analyse_plate`; nothing is
        written when any plate fails.
    """
    library_path = library if isinstance(library, str | os.PathLike) else None
    guard_outputs(folders=[out])  # before the exports are listed: a clear word on --out
    paths = find_exports(exports, exclude=[layout, *([library_path] if library_path else []),
                                           Path(out) / COMBINED])
    names = plate_folder_names(paths)
    files = [*PLATE_FILES, *(["library.nc"] if library_from_plate else [])]
    own = [COMBINED, *(f"{n}/{f}" for n in names for f in files)]
    guard_outputs([Path(out) / name for name in own],
                  folders=[out, *(Path(out) / n for n in names)],
                  inputs=[*paths, layout, library_path])  # before any work is done
    check_own_files(out, own)  # the user's own files in --out stay theirs
    with all_or_nothing():
        return _run_plates(paths, names, own, layout, out=Path(out), library=library,
                           library_path=library_path, library_from_plate=library_from_plate,
                           sheet=sheet, layout_sheet=layout_sheet, plate_size=plate_size,
                           quantity=quantity, progress=progress, **options)


def _run_plates(paths: list[Path], names: list[str], own: list[str], layout: PathLike, *,
                out: Path,
                library: xr.Dataset | PathLike | None, library_path: PathLike | None,
                library_from_plate: bool, sheet: str | None, layout_sheet: str | None,
                plate_size: int | None, quantity: Quantity | None,
                progress: Progress | None, **options: Any) -> PlateBatch:
    """:func:`run_plates` once its outputs are checked; the caller stages them."""
    plan = read_layout(layout, sheet=layout_sheet)
    lib = read_library(library_path) if library_path is not None else library
    from mixsolve.report.plate_page import plate_page  # deferred: matplotlib is heavy

    plates, pages = [], []
    for k, path in enumerate(paths, start=1):
        measured = read_plate(path, sheet=sheet, plate_size=plate_size, quantity=quantity)
        result = analyse_plate(measured, plan, lib,  # type: ignore[arg-type]
                               library_from_plate=library_from_plate, **options)
        plates.append(result)
        pages.append(plate_page(result.wells, result.samples, result=result.result,
                                plate_size=result.plate_size, settings=plate_settings(result),
                                notes=plate_notes(result),
                                title=f"mixsolve plate report: {path.name}"))
        if progress is not None:
            progress(k, len(paths), _summary(result))
    combined = pd.concat([p.samples.assign(plate=n) for p, n in zip(plates, names,
                                                                  strict=True)],
                         ignore_index=True)
    combined = combined[["plate", *plates[0].samples.columns]]
    folder = ensure_folder(out)
    folders = [ensure_folder(folder / name) for name in names]  # all places first, then files
    for result, page, sub in zip(plates, pages, folders, strict=True):
        _write_plate(sub, result, page, library_from_plate)
    write_table(combined, folder / COMBINED)
    record_outputs(folder, own)
    lines = []
    for result, sub in zip(plates, folders, strict=True):
        lines.append(f"{_summary(result)} -> {sub}")
        lines += attention_lines(result.wells)  # first: the wells that need attention
        notes = (run_note_lines(result.result.attrs, indent="    ")
                 if result.result is not None else [])
        if notes:
            lines += ["  Run notes (hold for every well, said once):", *notes]
        lines += [f"  note: {note}" for note in plate_notes(result)]
    lines += [f"Wrote {folder / COMBINED}: {combined['sample'].nunique()} samples from "
              f"{len(plates)} plate(s).", CAUTION, ""]
    return PlateBatch(plates, folders, combined, folder, "\n".join(lines))


def _summary(result: PlateResult) -> str:
    return (f"{result.name}: {result.plate.attrs.get('layout', '')}, {result.plate_size}-well; "
            f"{counts_text(result.wells)}; {result.samples['sample'].nunique()} samples")


def _write_plate(sub: Path, result: PlateResult, page: str, with_library: bool) -> None:
    write_table(result.wells, sub / "wells.csv")
    write_table(result.samples, sub / "samples.csv")
    settings = plate_settings(result)
    sheet = pd.DataFrame({"setting": list(settings), "value": list(settings.values())})
    write_workbook({"wells": result.wells, "samples": result.samples, "settings": sheet},
                   sub / "results.xlsx")
    write_text(page, sub / "report.html")
    if with_library:
        write_library(result.library, sub / "library.nc")

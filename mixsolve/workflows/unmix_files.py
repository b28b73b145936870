"""Unmix spectra files with a library file, optionally writing the results (a tidy or wide
CSV, a workbook, or a cube), each with its provenance (:mod:`mixsolve.io.provenance`).

A PLS model file (``mixsolve calibrate``) is recognised by its ``mixsolve_kind`` attribute
and used in place of a library: the spectra are then predicted by the model.
"""

from __future__ import annotations

import functools
import inspect
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, Literal, TextIO

import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.cubes import NETCDF_ENGINE, chunk_plan, is_cube_path, read_cube, write_cube
from mixsolve.io.library_store import read_library
from mixsolve.io.model_store import file_kind, read_model
from mixsolve.io.outputs import all_or_nothing, guard_outputs, in_run
from mixsolve.io.provenance import run_provenance, with_provenance
from mixsolve.io.results_io import write_results, write_text, write_workbook
from mixsolve.io.spectra_io import (
    SPECTRA_SUFFIXES,
    one_or_many,
    read_spectra,
    spectra_inputs,
    spectra_paths,
    write_notes,
)
from mixsolve.pls.model import MODEL_KIND
from mixsolve.report.tables import SHAPES, results_sheets, results_table
from mixsolve.solve.unmix import unmix
from mixsolve.spectra import Quantity, check_option
from mixsolve.workflows.cluster import compute, dask_client, require_scale
from mixsolve.workflows.measurement import (
    Corrections,
    MeasurementOptions,
    attach_budget,
    attached_budget,
    correct_measurement,
    file_budget_inputs,
    measurement_corrections,
    measurement_options,
)

PathLike = str | os.PathLike[str]
Spectra = PathLike | Sequence[PathLike]
#: Least-squares settings of :func:`mixsolve.unmix`: refused with a PLS model unless left
#: at unmix's own defaults.
LS_ONLY = ("window", "wavelengths", "baseline", "method", "weights", "noise", "fit_shift",
           "absorbance_range", "max_shift_nm", "wavelength_tolerance_nm", "stray_fraction",
           "u_stray_fraction", "bandwidth_nm", "reference_wavelength_nm")
#: Suffix of a results workbook output (any other non-cube suffix: a CSV).
WORKBOOK_SUFFIX = ".xlsx"
Shape = Literal["tidy", "wide"]


def unmix_files(library: PathLike, spectra: Spectra, *,
                window: tuple[float, float] | None = None,
                wavelengths: Sequence[float] | None = None, method: str = "nnls",
                baseline: str = "none", pathlength_cm: float | None = None,
                unit: str | None = None, out: PathLike | None = None,
                report: PathLike | None = None,
                measurement: MeasurementOptions | Mapping[str, Any] | None = None,
                scheduler: str | None = None, workers: int | None = None,
                progress: TextIO | None = None, quantity: Quantity | None = None,
                notes: TextIO | None = None, shape: Shape = "tidy",
                **options: Any) -> xr.Dataset:
    """Read both files, run :func:`mixsolve.unmix`, write ``out`` when given.

    ``out`` by its suffix (docs/formats.md, "Results files"): ``.xlsx`` a results
    workbook (sheets results (wide), tidy, flags explained, run notes, settings;
    :func:`mixsolve.report.tables.results_sheets`); ``.zarr`` or ``.nc`` the whole result
    as a cube; anything else a CSV, tidy or wide as ``shape`` says
    (:func:`mixsolve.results_table`), numbers at full precision. Every output carries the
    run's provenance (:func:`mixsolve.io.provenance.run_provenance`: version, library and
    its SHA-256, spectra files, settings, UTC date): ``#`` lines above a CSV, the settings
    sheet, the cube's ``provenance`` attribute; the returned result holds it in
    ``attrs["provenance"]``.

    ``spectra`` is one file, a folder or a glob, or a list of them
    (:func:`mixsolve.read_spectra`); ``notes`` receives what reading skipped or decided
    (``note: ...`` lines, :func:`mixsolve.io.spectra_io.write_notes`).

    ``quantity`` says what the numbers of every spectra file of the run are (the spectra,
    the cell blank, the repeated scans): absorbance by default, else converted on reading
    (:func:`mixsolve.read_spectra`, :func:`mixsolve.io.cubes.read_cube`).

    ``report`` writes the HTML page of :func:`mixsolve.report.unmix_page.unmix_report`
    (least-squares results only).

    ``options`` pass on to :func:`mixsolve.unmix` (weights, noise, absorbance_range, ...).

    ``measurement`` (:class:`mixsolve.workflows.measurement.MeasurementOptions` or a mapping
    of its fields): cell blank, cell ratio and wavelength offset, applied to the spectra
    before fitting; with ``budget`` the uncertainty budget is built (before any file is
    written), written as CSV and attached to the result (``budget_*`` variables).

    The data take one path: each file is read once, in ``io`` (the spectra and the cell
    blank, then the repeat scans when the budget needs them), the spectra are corrected in
    core (:mod:`mixsolve.uncertainty.corrections`), fitted (the fit checks them at its
    boundary), the budget built, and then reported.

    If ``library`` is a PLS model file, :func:`mixsolve.predict` runs instead; a window,
    a wavelength list or a baseline do not apply to a model (its wavelengths and
    preprocessing were fixed at calibration) and are refused; ``method`` and ``options``
    (least-squares settings) are ignored.

    Cubes: ``spectra`` or ``out`` ending in ``.zarr`` or ``.nc``, or a ``scheduler`` or
    ``workers`` given, run :func:`unmix_cube_files` instead (lazy, chunked, on dask).
    """
    spectra = _spectra_argument(library, spectra)
    if _is_cube(spectra) or (out is not None and is_cube_path(out)) \
            or scheduler is not None or workers is not None:
        return unmix_cube_files(  # which checks its options and outputs the same way
            library, spectra, window=window, wavelengths=wavelengths, method=method,
            baseline=baseline, pathlength_cm=pathlength_cm, unit=unit, out=out,
            report=report, measurement=measurement, scheduler=scheduler, workers=workers,
            progress=progress, quantity=quantity, notes=notes, shape=shape, **options)
    check_option(shape, SHAPES, "shape")
    extra = measurement_options(measurement)
    # Before any work: a bad path costs nothing, and no output may overwrite an input.
    guard_unmix_outputs(library, spectra, out=out, report=report, measurement=extra)
    with all_or_nothing():
        return _unmix_table(library, spectra, extra, window=window, wavelengths=wavelengths,
                            method=method, baseline=baseline, pathlength_cm=pathlength_cm,
                            unit=unit, out=out, report=report, quantity=quantity,
                            notes=notes, shape=shape, **options)


def _spectra_argument(library: PathLike, spectra: Spectra) -> PathLike | list[PathLike]:
    """The spectra as one path or a list; a library named where spectra belong is refused.

    Raises
    ------
    InputError
        A cube among several spectra paths (a cube is read alone).
    FileFormatError
        The library argument is a spectra file by its name (the two swapped, or a table
        of absorptivities not yet made a library).
    """
    if Path(library).suffix.lower() in SPECTRA_SUFFIXES:
        raise FileFormatError(
            f"{os.path.basename(library)}: not a readable netCDF file (a spectra table or "
            "JCAMP-DX file, by its name); a library is written by `mixsolve library import` "
            "or `library build`, and comes first: mixsolve unmix LIBRARY SPECTRA...")
    spectra = one_or_many(spectra)
    if isinstance(spectra, list) and any(is_cube_path(p) for p in spectra):
        raise InputError("spectra: a cube (.zarr, .nc) is read alone; give one cube, or "
                         "spectra tables")
    return spectra


def _is_cube(spectra: PathLike | list[PathLike]) -> bool:
    return not isinstance(spectra, list) and is_cube_path(spectra)


def guard_unmix_outputs(library: PathLike, spectra: Spectra, *, out: PathLike | None,
                        report: PathLike | None, measurement: MeasurementOptions) -> None:
    """Refuse the outputs of an unmix run that cannot or must not be written (before work).

    A ``.zarr`` output is a store replaced whole; ``out``, ``report`` and the budget CSV
    are files. Inputs are the library, the spectra, the cell blank and the repeated scans
    (:func:`mixsolve.io.outputs.guard_outputs`); spectra given as a folder or a glob count
    with the folder and every file they name.
    """
    store = out if out is not None and Path(out).suffix.lower() == ".zarr" else None
    read = [spectra] if _is_cube(one_or_many(spectra)) else spectra_inputs(spectra)
    guard_outputs([None if store else out, report, measurement.budget], stores=[store],
                  inputs=[library, *read, measurement.cell_blank, measurement.repeat_scans])


def _unmix_table(library: PathLike, spectra: Spectra, extra: MeasurementOptions, *,
                 window: tuple[float, float] | None, wavelengths: Sequence[float] | None,
                 method: str, baseline: str, pathlength_cm: float | None, unit: str | None,
                 out: PathLike | None, report: PathLike | None, quantity: Quantity | None,
                 notes: TextIO | None = None, shape: Shape = "tidy",
                 **options: Any) -> xr.Dataset:
    """:func:`unmix_files` for a table in memory; the caller guards and stages the outputs."""
    budget_rows = None
    if file_kind(library) == MODEL_KIND:
        if extra.budget is not None:
            raise InputError("budget: the uncertainty budget covers least-squares results, "
                             "not a PLS model")
        model = read_model(library)
        given = {"window": window, "wavelengths": wavelengths, "baseline": baseline,
                 "method": method, **options}
        defaults = inspect.signature(unmix).parameters
        for name in LS_ONLY:
            if name in given and given[name] != defaults[name].default:
                raise InputError(
                    f"{name}: does not apply to the PLS model {os.path.basename(library)}, "
                    "whose wavelengths and preprocessing were fixed at calibration")
        if report is not None:
            raise InputError("report: the HTML page covers least-squares results; for a PLS "
                             "model use the results CSV and the calibration figures")
        from mixsolve.pls.predict import predict  # scikit-learn: only a PLS model needs it

        measured, done = _corrected(_read(spectra, quantity, notes), extra, quantity)
        result = predict(measured, model, pathlength_cm=pathlength_cm, unit=unit)
    else:
        lib = read_library(library)
        measured, done = _corrected(_read(spectra, quantity, notes), extra, quantity)
        scans = (read_spectra(extra.repeat_scans, quantity=quantity)
                 if extra.repeat_scans is not None else None)
        result = unmix(measured, lib, window=window, wavelengths=wavelengths,
                       method=method,  # type: ignore[arg-type]
                       baseline=baseline,  # type: ignore[arg-type]
                       pathlength_cm=pathlength_cm, unit=unit, **options)
        if extra.budget is not None:  # built before anything is written
            from mixsolve.uncertainty.budget import budget_table, uncertainty_budget

            inputs = file_budget_inputs(extra, done, scans)
            result = attach_budget(result, uncertainty_budget(result, lib, inputs))
            budget_rows = budget_table(attached_budget(result))  # type: ignore[arg-type]
    provenance = run_provenance(result, library, spectra_paths(spectra))
    result = with_provenance(result, provenance)
    page = None
    if report is not None:  # built before anything is written: a failure leaves no file
        from mixsolve.report.unmix_page import unmix_report

        page = unmix_report(result, lib,  # lib is set: PLS was refused above
                            budget=attached_budget(result) if budget_rows is not None
                            else None)
    if out is not None:
        write_results_file(result, out, shape, provenance)
    if page is not None:
        write_text(page, report)  # type: ignore[arg-type]
    if budget_rows is not None:
        write_results(budget_rows, extra.budget, provenance)  # type: ignore[arg-type]
    return result


def write_results_file(result: xr.Dataset, out: PathLike, shape: Shape,
                       provenance: Mapping[str, Any]) -> None:
    """Write a table result as ``out`` says: a workbook (``.xlsx``) or a tidy or wide CSV,
    with its provenance (inside the run's staging)."""
    if Path(out).suffix.lower() == WORKBOOK_SUFFIX:
        write_workbook(results_sheets(result, provenance), out)
    else:
        write_results(results_table(result, shape=shape), out, provenance)


def _read(spectra: Spectra, quantity: Quantity | None, notes: TextIO | None) -> xr.DataArray:
    """The spectra read (:func:`read_spectra`), their reading notes written to ``notes``."""
    measured = read_spectra(spectra, quantity=quantity)
    write_notes(measured, notes)
    return measured


def unmix_cube_files(library: PathLike, spectra: Spectra, *,
                     window: tuple[float, float] | None = None,
                     wavelengths: Sequence[float] | None = None, method: str = "nnls",
                     baseline: str = "none", pathlength_cm: float | None = None,
                     unit: str | None = None, out: PathLike | None = None,
                     report: PathLike | None = None,
                     measurement: MeasurementOptions | Mapping[str, Any] | None = None,
                     scheduler: str | None = None, workers: int | None = None,
                     progress: TextIO | None = None, quantity: Quantity | None = None,
                     notes: TextIO | None = None, shape: Shape = "tidy",
                     **options: Any) -> xr.Dataset:
    """Unmix a spectra cube (or a table) on dask, chunk by chunk, into a cube or a table.

    Parameters
    ----------
    library, spectra : path-like
        A library file; spectra as a ``.zarr`` store or ``.nc`` file
        (:func:`mixsolve.io.cubes.read_cube`) or a table (:func:`read_spectra`).
    out : path-like, optional
        ``.zarr`` or ``.nc``: the whole result Dataset, written as it is computed (memory
        holds a few chunks), its provenance in the ``provenance`` attribute; anything
        else: the results table as for :func:`unmix_files` (``.xlsx`` a workbook, else a
        CSV shaped by ``shape``).
    scheduler, workers
        An existing dask.distributed scheduler's address, or a local cluster of this many
        worker processes (:func:`mixsolve.workflows.cluster.dask_client`); default dask's threads.
    progress : text stream, optional
        Where the progress bar of a long run goes (the CLI passes stderr).
    window, wavelengths, method, baseline, pathlength_cm, unit, measurement, quantity, shape,
    options
        As for :func:`unmix_files`; the uncertainty budget, the HTML report and PLS models
        are not available for cubes.

    Returns
    -------
    Dataset
        With a cube ``out``: the written result, opened lazily from it. Otherwise the
        computed result without the ``fitted`` and ``residual`` spectra.
    """
    spectra = _spectra_argument(library, spectra)
    check_option(shape, SHAPES, "shape")
    if shape != "tidy" and out is not None and is_cube_path(out):
        raise InputError(f"shape: {shape!r} shapes a CSV; a cube ({Path(out).name}) holds "
                         "the whole result; write .csv or .xlsx for a table")
    _require_scale(spectra, out)
    extra = measurement_options(measurement)
    guard_unmix_outputs(library, spectra, out=out, report=report, measurement=extra)
    for option, value in (("--budget", extra.budget), ("--report", report)):
        if value is not None:
            raise InputError(f"{option}: not available for a cube or a dask run; write the "
                             "result as .zarr or .nc and the tidy table as .csv")
    if file_kind(library) == MODEL_KIND:
        raise InputError(f"{os.path.basename(library)}: a PLS model cannot be applied to a "
                         "cube or a dask run yet; unmix the cube with a library")
    with all_or_nothing():
        result = _unmix_cube(library, spectra, extra, window=window, wavelengths=wavelengths,
                             method=method, baseline=baseline, pathlength_cm=pathlength_cm,
                             unit=unit, out=out, scheduler=scheduler, workers=workers,
                             progress=progress, quantity=quantity, notes=notes, shape=shape,
                             **options)
    if out is not None and is_cube_path(out) and not in_run():
        return open_result(out)  # the written store, now in place
    return result


def _unmix_cube(library: PathLike, spectra: PathLike | list[PathLike],
                extra: MeasurementOptions, *,
                window: tuple[float, float] | None, wavelengths: Sequence[float] | None,
                method: str, baseline: str, pathlength_cm: float | None, unit: str | None,
                out: PathLike | None, scheduler: str | None, workers: int | None,
                progress: TextIO | None, quantity: Quantity | None,
                notes: TextIO | None = None, shape: Shape = "tidy",
                **options: Any) -> xr.Dataset:
    """:func:`unmix_cube_files` once checked; the caller guards and stages the outputs."""
    lib = read_library(library)
    measured, _ = _corrected(
        read_cube(spectra, quantity=quantity) if _is_cube(spectra)  # type: ignore[arg-type]
        else _read(spectra, quantity, notes), extra, quantity)
    with dask_client(scheduler, workers) as client:
        if measured.chunks is None:
            measured = measured.chunk(chunk_plan(dict(measured.sizes)))
        result = unmix(measured, lib, window=window, wavelengths=wavelengths,
                       method=method,  # type: ignore[arg-type]
                       baseline=baseline,  # type: ignore[arg-type]
                       pathlength_cm=pathlength_cm, unit=unit, **options)
        provenance = run_provenance(result, library, _cube_inputs(spectra))
        result = with_provenance(result, provenance)
        run = functools.partial(compute, client=client, progress=progress)
        if out is not None and is_cube_path(out):
            write_cube(result, out, compute=run)
            return result.drop_vars(["fitted", "residual"])  # opened from the file below
        small = run(result.drop_vars(["fitted", "residual"]))
    if out is not None:
        write_results_file(small, out, shape, provenance)
    return small


def _cube_inputs(spectra: PathLike | list[PathLike]) -> list[PathLike]:
    """The spectra files of a cube run: the cube itself, or the tables read."""
    return [spectra] if _is_cube(spectra) else list(spectra_paths(spectra))


def _corrected(measured: xr.DataArray, extra: MeasurementOptions,
               quantity: Quantity | None = None) -> tuple[xr.DataArray, Corrections]:
    """The spectra as read, corrected as ``extra`` asks (the cell blank read from its file,
    in the same ``quantity`` as the spectra)."""
    blank = (read_spectra(extra.cell_blank, quantity=quantity)
             if extra.cell_blank is not None else None)
    return correct_measurement(measured, measurement_corrections(extra, blank))


def open_result(path: PathLike) -> xr.Dataset:
    """Open a result written by :func:`unmix_cube_files` (lazily, dask-backed)."""
    p = Path(path)
    if p.suffix.lower() == ".zarr":
        return xr.open_zarr(p, consolidated=None)
    return xr.open_dataset(p, engine=NETCDF_ENGINE, chunks={})


def _require_scale(spectra: PathLike | list[PathLike], out: PathLike | None) -> None:
    """Refuse the chunked path cleanly when the ``scale`` extra is not installed."""
    needed = ["dask"]
    paths = [*(spectra if isinstance(spectra, list) else [spectra]), out]
    if any(str(p).endswith(".zarr") for p in paths if p is not None):
        needed.append("zarr")
    require_scale(needed, "cube files and dask runs need")

"""Unmix spectra files with a library file, optionally writing the tidy results CSV.

A PLS model file (``mixsolve calibrate``) is recognised by its ``mixsolve_kind`` attribute
and used in place of a library: the spectra are then predicted by the model.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any

import xarray as xr

from mixsolve.errors import InputError
from mixsolve.io.library_store import read_library
from mixsolve.io.model_store import file_kind, read_model
from mixsolve.io.results_io import write_results, write_text
from mixsolve.io.spectra_io import read_spectra
from mixsolve.report.text import format_results
from mixsolve.solve.pls import MODEL_KIND, predict
from mixsolve.solve.unmix import unmix

PathLike = str | os.PathLike[str]


def unmix_files(library: PathLike, spectra: PathLike, *,
                window: tuple[float, float] | None = None,
                wavelengths: Sequence[float] | None = None, method: str = "nnls",
                baseline: str = "none", pathlength_cm: float | None = None,
                unit: str | None = None, out: PathLike | None = None,
                report: PathLike | None = None, **options: Any) -> xr.Dataset:
    """Read both files, run :func:`mixsolve.unmix`, write ``out`` (CSV) when given.

    ``report`` writes the HTML page of :func:`mixsolve.report.unmix_page.unmix_report`
    (least-squares results only).

    ``options`` pass on to :func:`mixsolve.unmix` (weights, noise, absorbance_range, ...).

    If ``library`` is a PLS model file, :func:`mixsolve.predict` runs instead; a window,
    a wavelength list or a baseline do not apply to a model (its wavelengths and
    preprocessing were fixed at calibration) and are refused; ``method`` and ``options``
    (least-squares settings) are ignored.
    """
    if file_kind(library) == MODEL_KIND:
        model = read_model(library)
        for option, value, default in (("--window", window, None),
                                       ("--wavelengths", wavelengths, None),
                                       ("--baseline", baseline, "none")):
            if value != default:
                raise InputError(
                    f"{option}: does not apply to the PLS model {os.path.basename(library)}, "
                    "whose wavelengths and preprocessing were fixed at calibration")
        if report is not None:
            raise InputError("--report: the HTML page covers least-squares results; for a PLS "
                             "model use the results CSV and the calibration figures")
        result = predict(read_spectra(spectra), model, pathlength_cm=pathlength_cm, unit=unit)
    else:
        lib = read_library(library)
        measured = read_spectra(spectra)
        result = unmix(measured, lib, window=window, wavelengths=wavelengths,
                       method=method,  # type: ignore[arg-type]
                       baseline=baseline,  # type: ignore[arg-type]
                       pathlength_cm=pathlength_cm, unit=unit, **options)
    page = None
    if report is not None:  # built before anything is written: a failure leaves no file
        from mixsolve.report.unmix_page import unmix_report

        page = unmix_report(result, lib)  # lib is set: PLS was refused above
    if out is not None:
        write_results(result, out)
    if page is not None:
        write_text(page, report)  # type: ignore[arg-type]
    return result


def format_unmix(result: xr.Dataset) -> str:
    """Text summary of an unmix result: CLS (:func:`format_results`) or PLS prediction."""
    if result.attrs.get("method") == "pls":
        from mixsolve.workflows.calibrate import format_prediction

        return format_prediction(result)
    return format_results(result)

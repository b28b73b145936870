"""PLS calibration from files to a model file (what `mixsolve calibrate` runs).

Reads the spectra and the reference table, calls :func:`mixsolve.calibrate`, writes the
model and, when asked, the calibration figure; the summary text comes from
:mod:`mixsolve.report.calibration_text`, the figure from :mod:`mixsolve.report.figures`.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, TextIO

import xarray as xr

from mixsolve.io.atomic import check_writable
from mixsolve.io.figure_io import write_png
from mixsolve.io.model_store import write_model
from mixsolve.io.outputs import all_or_nothing
from mixsolve.io.reference_io import read_reference
from mixsolve.io.spectra_io import read_spectra, spectra_inputs, write_notes
from mixsolve.pls.calibrate import calibrate
from mixsolve.report.calibration_text import format_calibration
from mixsolve.spectra import Quantity

PathLike = str | os.PathLike[str]


@dataclass
class CalibrationRun:
    """What a calibration made: the model and its printed summary."""

    model: xr.Dataset
    text: str


def calibrate_files(spectra: PathLike | Sequence[PathLike], reference: PathLike,
                    out: PathLike | None, *,
                    plot: PathLike | None = None, quantity: Quantity | None = None,
                    notes: TextIO | None = None, **options: Any) -> CalibrationRun:
    """Read spectra and reference, calibrate, write the model (and a plot) when asked.

    Parameters
    ----------
    spectra : path-like, or a sequence of them
        Spectra of the calibration mixtures: a table, a folder or a glob, or a list of them
        (:func:`mixsolve.read_spectra`).
    reference : path-like
        The tidy reference table.
    out : path-like, optional
        Model file (netCDF) to write.
    plot : path-like, optional
        PNG file for the cross-validation curve and predicted-against-reference panels
        (:func:`mixsolve.report.figures.calibration_figure`).
    quantity : str, optional
        What the spectra file's numbers are (:func:`mixsolve.read_spectra`).
    notes : text stream, optional
        Receives what reading skipped or decided (``note: ...`` lines).
    **options
        Passed to :func:`mixsolve.calibrate` (window, latent, folds, split, mode, ...).

    Returns
    -------
    CalibrationRun
        The model and :func:`mixsolve.report.calibration_text.format_calibration` of it.
    """
    check_writable(out, plot, inputs=[*spectra_inputs(spectra), reference])
    measured = read_spectra(spectra, quantity=quantity)
    write_notes(measured, notes)
    model = calibrate(measured, read_reference(reference), **options)
    figure = None
    if plot is not None:  # drawn before anything is written: a failure leaves no file
        from mixsolve.report.figures import calibration_figure  # deferred: matplotlib

        figure = calibration_figure(model)
    with all_or_nothing():  # the model and its plot land together or not at all
        if out is not None:
            write_model(model, out)
        if plot is not None and figure is not None:
            write_png(figure, plot)
    return CalibrationRun(model, format_calibration(model))

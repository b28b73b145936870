"""Instrument checks on files: read the spectra, check, format, append to the log.

Each run returns the :class:`~mixsolve.instrument.result.CheckResult` and the
text to print; with ``log`` it appends one dated record per item to that CSV file
(atomically, :func:`mixsolve.io.log_io.append_log`). A failed check is a result, not an
error: the exit code stays 0 and the text says FAIL.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from datetime import datetime
from pathlib import Path
from typing import Any

import xarray as xr

from mixsolve.instrument.absorbance_scale import check_absorbance_scale
from mixsolve.instrument.repeatability import repeatability
from mixsolve.instrument.result import CheckResult
from mixsolve.instrument.stray_light import check_stray_light
from mixsolve.instrument.wavelength_scale import check_wavelength_scale
from mixsolve.io.log_io import append_log
from mixsolve.io.outputs import guard_outputs
from mixsolve.io.results_io import write_table
from mixsolve.io.spectra_io import read_spectra
from mixsolve.report.instrument_text import format_check, format_repeatability, log_records
from mixsolve.spectra import Quantity

PathLike = str | os.PathLike[str]
CHECKS: dict[str, Callable[..., CheckResult]] = {
    "absorbance": check_absorbance_scale,
    "wavelength": check_wavelength_scale,
    "stray_light": check_stray_light,
}


def run_check(check: str, spectra: PathLike, *, log: PathLike | None = None,
              when: datetime | None = None, quantity: Quantity | None = None,
              **options: Any) -> tuple[CheckResult, str]:
    """Run one instrument check on a spectra file.

    Parameters
    ----------
    check : {"absorbance", "wavelength", "stray_light"}
    spectra : path-like
        Spectra table (docs/formats.md).
    log : path-like, optional
        CSV log to append the dated records to (created when missing).
    when : datetime, optional
        Time stamp of the records; default now, local time with its UTC offset.
    quantity : str, optional
        What the file's numbers are (:func:`mixsolve.read_spectra`).
    **options
        Passed to the check function (tolerances, concentration, bandwidth...).

    Returns
    -------
    (CheckResult, str)
        The result and its text (with a last line naming the log when written).
    """
    guard_outputs([log], inputs=[spectra])  # before any work
    data = read_spectra(spectra, quantity=quantity)
    result = CHECKS[check](data, **options)
    text = format_check(result, os.path.basename(str(spectra)))
    if log is not None:
        stamp = when or datetime.now().astimezone()
        append_log(log_records(result, when=stamp, source=os.path.basename(str(spectra))),
                   log)
        text += f"logged {len(result.items)} record(s) to {log}\n"
    return result, text


def run_repeatability(scans: PathLike, *, out: PathLike | None = None,
                      quantity: Quantity | None = None) -> tuple[xr.Dataset, str]:
    """Repeatability statistics of a file of repeated scans (one column per scan, in order).

    ``out`` writes the per-wavelength table (wavelength_nm, mean, sd, drift_per_scan,
    u_drift_per_scan, drift_over_run, drift_significant) as CSV. ``quantity`` says what
    the file's numbers are (:func:`mixsolve.read_spectra`).
    """
    guard_outputs([out], inputs=[scans])  # before any work
    stats = repeatability(read_spectra(scans, quantity=quantity))
    text = format_repeatability(stats, os.path.basename(str(scans)))
    if out is not None:
        table = stats.drop_vars(["n_scans", "pooled_sd", "mean_drift_over_run"]).to_dataframe()
        write_table(table.reset_index().rename(columns={"wavelength": "wavelength_nm"}), out)
        text += f"wrote {Path(out)}\n"
    return stats, text

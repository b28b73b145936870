"""The ``unmix --report`` page: settings, results, notes and figures in one HTML file."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from mixsolve.noise import DEFAULT_ABSORBANCE_RANGE, PRESETS, NoiseModel
from mixsolve.report import html
from mixsolve.report.budget_text import format_budget
from mixsolve.report.figures import library_figure, precision_figure, sample_figure
from mixsolve.report.tables import results_table
from mixsolve.report.text import _result_notes, run_note_sentences

#: Most sample figures drawn; beyond this the worst fits (largest RMS residual) are shown.
MAX_SAMPLE_FIGURES = 36


def unmix_report(result: xr.Dataset, library: xr.Dataset, *, title: str = "",
                 budget: xr.Dataset | None = None) -> str:
    """Build the HTML page of an :func:`mixsolve.unmix` result.

    Parameters
    ----------
    result : Dataset with a ``sample`` dimension
    library : Dataset
        The library used (its spectra are drawn with the used wavelengths marked).
    title : str
        Page title; default names the spectra source.
    budget : Dataset, optional
        An uncertainty budget (:func:`mixsolve.uncertainty_budget`) to show: its summary
        with the largest contributors, and the tidy table of every source.

    Returns
    -------
    str
        A self-contained HTML page: settings, the run notes (once, with size and fix),
        the results table (flags doubtful first), numbered notes, the
        library figure, measured/fitted/residual spectra per sample (at most
        ``MAX_SAMPLE_FIGURES``, the worst fits first when there are more), the predicted
        relative error against absorbance, and the cautions.
    """
    if budget is not None:  # imported only then: the budget's modules are not cheap
        from mixsolve.uncertainty.budget import budget_table

    samples = [str(s) for s in result["sample"].values]
    used = np.asarray(json.loads(result.attrs["wavelengths_nm"]))
    model_json = result.attrs.get("noise_model", "")
    model = NoiseModel(**json.loads(model_json)) if model_json else PRESETS[
        "benchtop_double_beam"]
    low, high = (float(v) for v in result.attrs.get(
        "absorbance_range", "-".join(map(str, DEFAULT_ABSORBANCE_RANGE))).split("-"))
    settings = {
        "spectra": (result.attrs.get("source", "") or "(in memory)") + (
            f" (read as {result.attrs['quantity_read'].replace('_', ' ')}, converted to "
            "absorbance)" if result.attrs.get("quantity_read", "absorbance") != "absorbance"
            else ""),
        "method": f"{result.attrs['method']}, baseline {result.attrs['baseline']}, "
                  f"weights {result.attrs.get('weights', 'none')}",
        "wavelengths": f"{used.size} used, {used.min():g}-{used.max():g} nm",
        "unit": result.attrs["unit"],
        "noise model": model.name if model_json else "none given (lack of fit not tested)",
        "reliable range": f"{low:g}-{high:g} AU",
        "uncertainty": result.attrs.get("uncertainty_basis", ""),
        "mixsolve": result.attrs.get("mixsolve_version", ""),
    }
    notes = _result_notes(result, samples, json.loads(
        result.attrs.get("left_out_wavelengths_nm", "[]")))
    order = list(range(len(samples)))
    shown_note = ""
    if len(samples) > MAX_SAMPLE_FIGURES:
        rms = np.nan_to_num(result["rms_residual"].values, nan=np.inf)
        order = list(np.argsort(-rms)[:MAX_SAMPLE_FIGURES])
        shown_note = (f"Showing the {MAX_SAMPLE_FIGURES} of {len(samples)} samples with the "
                      "largest RMS residual.")
    figures = [html.figure(sample_figure(result, samples[i]), samples[i]) for i in order]
    table = results_table(result)
    run_notes = run_note_sentences(result.attrs)
    sections = [
        html.section("Settings", html.key_values(settings)),
        *([html.section("Run notes", html.paragraph(
            "These hold for every sample of the run (the design, not one measurement) and "
            "are said once here, each with its size and what to do."),
            html.bullet_list(run_notes, kind="note"))] if run_notes else []),
        html.section("Results", html.table(table, digits=5)),
        html.section("Notes", html.bullet_list(notes, kind="note") if notes
                     else html.paragraph("Nothing doubtful was found by the checks run.")),
        *([html.section(
            "Uncertainty budget",
            html.paragraph("Combined and expanded uncertainty per result, with the largest "
                           "contributors (share of u_c²); the full table follows."),
            f"<pre>{html.escape(format_budget(budget))}</pre>",
            html.table(budget_table(budget), digits=4))] if budget is not None else []),
        html.section("Library and wavelengths", html.figure(
            library_figure(library, used), "library absorptivities; wavelengths used")),
        html.section("Measured, fitted and residual spectra",
                     html.paragraph(shown_note) if shown_note else "", *figures),
        html.section("Photometric precision", html.figure(
            precision_figure(model, (low, high)),
            "predicted relative error of one reading; shaded: the range used for flags")),
        html.cautions(),
    ]
    return html.page(title or f"mixsolve results: {settings['spectra']}", sections)

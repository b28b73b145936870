"""Text of an unmix run: the results table, or a short summary of a large or cube result."""

from __future__ import annotations

import json
import warnings

import numpy as np
import xarray as xr

from mixsolve.library import COMPONENT
from mixsolve.report.text import format_results, run_note_lines

#: Largest result printed as a full table by :func:`format_unmix` (more: a summary).
TABLE_MOST_SPECTRA = 500


def format_unmix(result: xr.Dataset) -> str:
    """Text summary of an unmix result: CLS (:func:`format_results`) or PLS prediction.

    A least-squares result over other dimensions than ``sample`` or of more than
    ``TABLE_MOST_SPECTRA`` spectra gets the short summary of :func:`format_cube_summary`.
    """
    if result.attrs.get("method") == "pls":
        from mixsolve.report.calibration_text import format_prediction

        return format_prediction(result)
    if "flags" in result and (result["flags"].dims != ("sample",)
                              or result["flags"].size > TABLE_MOST_SPECTRA):
        return format_cube_summary(result)
    return format_results(result)


def format_cube_summary(result: xr.Dataset) -> str:
    """Short text summary of a large or many-dimensional result (computes small parts).

    Returns
    -------
    str
        The spectra's dimensions, the fit settings, per component the median and the 5th
        and 95th percentiles of the concentration and how many spectra hold it at zero,
        and how many spectra carry each flag code.
    """
    conc = result["concentration"]
    dims = [d for d in conc.dims if d != COMPONENT]
    sizes = " × ".join(str(result.sizes[d]) for d in dims) or "1"
    n_spec = int(np.prod([result.sizes[d] for d in dims])) if dims else 1
    used = json.loads(result.attrs.get("wavelengths_nm", "[]"))
    unit = result.attrs.get("unit", "")
    values = conc.transpose(..., COMPONENT).values.reshape(-1, conc.sizes[COMPONENT])
    at_zero = result["at_zero"].transpose(..., COMPONENT).values.reshape(values.shape) \
        if "at_zero" in result else np.zeros(values.shape, dtype=bool)
    texts, text_counts = np.unique(np.asarray(result["flags"].values, dtype=object),
                                   return_counts=True)
    lines = [
        f"Unmixed {sizes} spectra ({' × '.join(dims) or 'one spectrum'}) by classical least "
        f"squares ({result.attrs.get('method', '')}, baseline "
        f"{result.attrs.get('baseline', '')})",
        f"  wavelengths   {len(used)} used"
        + (f", {min(used):g}-{max(used):g} nm" if used else ""),
        f"  unit          {unit}",
        *(["", "Run notes (hold for every spectrum of this run, said once):",
           *run_note_lines(result.attrs)] if run_note_lines(result.attrs) else []),
        "",
        f"{'component':<16}{'median':>12}{'5th pct':>12}{'95th pct':>12}{'at zero':>10}",
    ]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns
        q05, q50, q95 = np.nanpercentile(values, [5, 50, 95], axis=0)
    for k, comp in enumerate(result[COMPONENT].values):
        lines.append(f"{comp!s:<16}{q50[k]:>12.4g}{q05[k]:>12.4g}{q95[k]:>12.4g}"
                     f"{int(at_zero[:, k].sum()):>10}")
    counts: dict[str, int] = {}
    for text, count in zip(texts, text_counts, strict=True):
        for code in filter(None, str(text).split(";")):
            counts[code] = counts.get(code, 0) + int(count)
    flagged = int(sum(c for t, c in zip(texts, text_counts, strict=True) if t))
    lines += ["", f"Flags: {flagged} of {n_spec} spectra flagged"
              + (f" ({100 * flagged / n_spec:.1f} %)" if n_spec else "")]
    lines += [f"  {code:<32}{count:>10}" for code, count in sorted(counts.items())]
    return "\n".join(lines) + "\n"

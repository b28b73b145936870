"""Instrument checks as text (the CLI prints it) and as dated log records."""

from __future__ import annotations

import json
from datetime import datetime

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.instrument.result import CheckResult

TITLES = {
    "absorbance": "Absorbance scale (potassium dichromate)",
    "wavelength": "Wavelength scale (holmium oxide)",
    "stray_light": "Stray light (cut-off filter solution)",
}


def _num(value: float) -> str:
    return "-" if value is None or not np.isfinite(value) else f"{value:.6g}"


def _limits(low: float, high: float) -> str:
    if np.isfinite(low) and np.isfinite(high):
        return f"{low:.6g} to {high:.6g}"
    if np.isfinite(low):
        return f"> {low:.6g}"
    return f"≤ {high:.6g}" if np.isfinite(high) else "-"


def format_check(result: CheckResult, source: str = "") -> str:
    """Aligned text: one line per item (PASS/FAIL), the summary figures, then notes.

    Returns
    -------
    str
        Ends with the overall verdict line ``result: PASS`` or ``result: FAIL``.
    """
    items = result.items
    width = max(12, *(len(str(i)) for i in items["item"])) + 2
    lines = [TITLES.get(result.check, result.check) + (f": {source}" if source else "")]
    bw = result.settings.get("bandwidth_nm")
    lines.append(f"  bandwidth     {f'{bw:g} nm' if bw else 'not stated'}")
    lines.append("")
    lines.append(f"{'item':<{width}}{'measured':>12}{'expected':>12}  {'accepted':<22}"
                 f"{'unit':<15}result  note")
    for row in items.itertuples(index=False):
        lines.append(f"{row.item:<{width}}{_num(row.measured):>12}{_num(row.expected):>12}  "
                     f"{_limits(row.low, row.high):<22}{row.unit:<15}"
                     f"{'PASS' if row.passed else 'FAIL':<6}  {row.note}")
    if result.summary:
        lines.append("")
        for key, value in result.summary.items():
            text = _num(value) if isinstance(value, float) else str(value)
            lines.append(f"  {key.replace('_', ' '):<22}{text}")
    lines.append("")
    if result.notes:
        lines.append("Notes:")
        lines += [f" {i}. {text}." for i, text in enumerate(result.notes, start=1)]
    else:
        lines.append("Notes: none.")
    lines.append(f"result: {'PASS' if result.passed else 'FAIL'}")
    return "\n".join(lines) + "\n"


def log_records(result: CheckResult, *, when: datetime, source: str = "") -> pd.DataFrame:
    """One log record per item (columns of :data:`mixsolve.io.log_io.LOG_COLUMNS`).

    Parameters
    ----------
    result : CheckResult
    when : datetime
        Time of the check; written as ISO 8601 to the second, with its UTC offset when
        ``when`` carries a time zone.
    source : str
        The spectra file checked.
    """
    items = result.items
    summary = "; ".join(f"{k}={_num(v) if isinstance(v, float) else v}"
                        for k, v in result.summary.items())
    return pd.DataFrame({
        "timestamp": when.isoformat(timespec="seconds"),
        "check": result.check,
        "item": items["item"].to_numpy(),
        "measured": items["measured"].to_numpy(dtype=float),
        "expected": items["expected"].to_numpy(dtype=float),
        "low": items["low"].to_numpy(dtype=float),
        "high": items["high"].to_numpy(dtype=float),
        "unit": items["unit"].to_numpy(),
        "result": np.where(items["passed"].to_numpy(dtype=bool), "pass", "fail"),
        "source": source,
        "settings": json.dumps(result.settings, sort_keys=True),
        "note": [f"{n}; {summary}".strip("; ") for n in items["note"]],
    })


def format_repeatability(stats: xr.Dataset, source: str = "") -> str:
    """Repeatability of repeated scans: pooled SD, SD range, drift over the run, notes."""
    sd = stats["sd"].values
    wl = stats["wavelength"].values
    drift = stats["drift_over_run"].values
    n = int(stats["n_scans"])
    lines = [f"Repeatability of {n} scans" + (f": {source}" if source else ""),
             f"  wavelengths   {wl.size}, {wl[0]:g}-{wl[-1]:g} nm",
             f"  pooled SD     {float(stats['pooled_sd']):.3g} AU (one reading)",
             f"  SD range      {np.min(sd):.3g} AU at {wl[np.argmin(sd)]:g} nm to "
             f"{np.max(sd):.3g} AU at {wl[np.argmax(sd)]:g} nm"]
    notes = []
    if np.isfinite(drift).any():
        worst = int(np.nanargmax(np.abs(drift)))
        lines.append(f"  drift         {float(stats['mean_drift_over_run']):+.3g} AU over the run "
                     f"(mean); largest {drift[worst]:+.3g} AU at {wl[worst]:g} nm")
        flagged = int(stats["drift_significant"].values.sum())
        if flagged:
            notes.append(f"drift is significant (p < {stats.attrs['drift_test_p']:g}) at "
                         f"{flagged} of {wl.size} wavelengths: part of the SD is systematic; "
                         "let the instrument warm up longer or re-blank during the run")
    else:
        notes.append("drift needs at least 3 scans")
    lines.append("")
    lines += ["Notes:"] + [f" {i}. {t}." for i, t in enumerate(notes, start=1)] if notes \
        else ["Notes: none."]
    return "\n".join(lines) + "\n"

"""Plain-text summaries: pure functions returning ``str`` (the CLI prints them)."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.flags import (
    ABOVE_RANGE,
    BELOW_RANGE,
    FLAG_MEANINGS,
    ILL_CONDITIONED,
    LACK_OF_FIT,
    NO_DOF,
    NO_SIGNAL,
    SATURATED,
    SHIFT_SENSITIVE,
    SHIFTED,
    STATUS_CODES,
    STRUCTURED,
    RunNote,
    by_severity,
    order_flags,
    run_notes_of,
    severity_of,
)
from mixsolve.library import COMPONENT
from mixsolve.library_error import error_patterns, pattern_counts
from mixsolve.spectra import WAVELENGTH

CAUTION = (
    "mixsolve results support, and do not replace, a validated method where results carry "
    "regulatory or clinical weight."
)


def _num(value: float, width: int = 10) -> str:
    if value is None or not np.isfinite(value):
        return f"{'n/a':>{width}}"
    return f"{value:>{width}.4g}"


def value_with_uncertainty(value: float, u: float) -> str:
    """Format ``value ± u`` with u to two significant digits and the value to match (GUM 7.2.6).

    Very small or large magnitudes share one power of ten: ``(7.30 ± 0.12)e-05``.
    """
    if not np.isfinite(value):
        return "n/a"
    if not np.isfinite(u) or u <= 0:
        return f"{value:.4g} ± n/a"
    exponent = 0
    scale = max(abs(value), u)
    if scale < 1e-3 or scale >= 1e6:
        exponent = int(np.floor(np.log10(scale)))
        value, u = value / 10.0**exponent, u / 10.0**exponent
    u = float(f"{u:.2g}")  # two significant digits first: 0.0996 is 0.10, not 0.100
    decimals = max(0, 1 - int(np.floor(np.log10(u))))
    if decimals > 8:  # u negligible against the value (noise-free data): no long digit runs
        text = f"{value:.6g} ± {u:.2g}"
        return f"({text})e{exponent:+03d}" if exponent else text
    text = f"{value:.{decimals}f} ± {u:.{decimals}f}"
    return f"({text})e{exponent:+03d}" if exponent else text


def run_note_lines(attrs: Any, indent: str = "  ") -> list[str]:
    """The run notes of a result (:func:`mixsolve.flags.run_notes_of`), one entry each with
    its size and fix, for the header of a report; an empty list when there are none.

    Any note is shown the same way (its code, text and fix), whoever added it.
    """
    return [indent + line for note in run_notes_of(attrs) for line in _run_note_text(note)]


def _run_note_text(note: RunNote) -> list[str]:
    return [f"[{note.code}] {note.text}.", f"  fix: {note.fix}."]


def run_note_sentences(attrs: Any) -> list[str]:
    """Each run note as one sentence: "text; fix (code, severity)" (HTML and plate pages)."""
    return [f"{note.text}; {note.fix} [{note.code}]" for note in run_notes_of(attrs)]


def _notes(lines: list[str]) -> list[str]:
    if not lines:
        return ["Notes: none."]
    return ["Notes:"] + [f" {i}. {text}" for i, text in enumerate(lines, start=1)]


def format_results(result: xr.Dataset, truth: pd.DataFrame | None = None) -> str:
    """Summarise an :func:`mixsolve.unmix` result as an aligned text table.

    Parameters
    ----------
    result : Dataset with a ``sample`` dimension
    truth : DataFrame, optional
        Known concentrations (index sample, columns component, result unit), printed
        beside each value (used by the demo).

    Returns
    -------
    str
        Header lines, one row per sample with value ± standard uncertainty for every
        component, the RMS residual (AU) and flags, then numbered notes on anything
        doubtful.
    """
    comps = [str(c) for c in result[COMPONENT].values]
    samples = [str(s) for s in result["sample"].values]
    unit = result.attrs["unit"]
    used = json.loads(result.attrs["wavelengths_nm"])
    left_out = json.loads(result.attrs.get("left_out_wavelengths_nm", "[]"))
    b = np.atleast_1d(result["pathlength_cm"].values)
    b_text = f"{b[0]:g} cm" if np.unique(b).size == 1 else f"{b.min():g}-{b.max():g} cm"
    lines = [
        f"Concentrations by classical least squares ({result.attrs['method']}, baseline "
        f"{result.attrs['baseline']})",
        f"  wavelengths   {len(used)} used, {min(used):g}-{max(used):g} nm",
        f"  pathlength    {b_text}",
        f"  unit          {unit}, value ± standard uncertainty"
        + ("  [known value]" if truth is not None else ""),
        f"  uncertainty   {_uncertainty_parts(result)}",
    ]
    read = result.attrs.get("quantity_read", "absorbance")
    if read != "absorbance":
        lines.append(f"  readings      {read.replace('_', ' ')}, converted to absorbance")
    if float(result.attrs.get("stray_fraction", 0.0) or 0.0) > 0:
        noise = json.loads(result.attrs.get("noise_model") or "{}")
        lines.append(f"  stray light   readings corrected for a fraction of "
                     f"{result.attrs['stray_fraction']:g} ± "
                     f"{result.attrs['u_stray_fraction']:g}"
                     + (f" (from the noise model {noise['name']!r})"
                        if noise.get("stray") else ""))
    if float(result.attrs.get("library_broadened_nm", 0.0) or 0.0) > 0:
        lines.append(f"  bandwidth     library broadened from "
                     f"{result.attrs['library_bandwidth_nm']:g} to the spectra's "
                     f"{result.attrs['bandwidth_nm']:g} nm (triangular slit)")
    notes = run_note_lines(result.attrs)
    if notes:
        lines += ["", "Run notes (hold for every sample of this run, said once):", *notes]
    lines.append("")
    name_w = max(8, *(len(s) for s in samples)) + 2
    cell_w = max(26 if truth is None else 34, *(len(c) + 2 for c in comps))
    head = f"{'sample':<{name_w}}" + "".join(f"{c:<{cell_w}}" for c in comps)
    lines.append(head + f"{'rms AU':>9}  flags")
    conc = result["concentration"].transpose("sample", COMPONENT).values
    u = result["std_uncertainty"].transpose("sample", COMPONENT).values
    flags = [order_flags(f) for f in result["flags"].values] if "flags" in result else \
        [""] * len(samples)
    for i, s in enumerate(samples):
        cells = []
        for k, c in enumerate(comps):
            cell = value_with_uncertainty(conc[i, k], u[i, k])
            if truth is not None and s in truth.index and c in truth.columns:
                cell = f"{cell:<20}[{truth.loc[s, c]:.4g}]"
            cells.append(f"{cell:<{cell_w}}")
        rms = float(result["rms_residual"].values[i])
        lines.append(f"{s:<{name_w}}" + "".join(cells) + f"{rms:>9.2g}  {flags[i]}")
    if "wavelength_shift_nm" in result:
        shift = result["wavelength_shift_nm"].values
        u_shift = result["u_wavelength_shift_nm"].values
        lines += ["", "Fitted wavelength shift δ (nm): the spectrum read at λ matches the library "
                  "at λ + δ;", "  the instrument reads λ too high by −δ, so "
                  "--wavelength-offset takes −δ (the sign the holmium check reports)"]
        lines += [f"  {s:<{name_w}}{value_with_uncertainty(shift[i], u_shift[i]):<22}"
                  f"--wavelength-offset {-shift[i]:+.3g}" for i, s in enumerate(samples)]
    lines.append("")
    lines += _notes(_result_notes(result, samples, left_out))
    lines.append(CAUTION)
    return "\n".join(lines) + "\n"


#: What the results page adds to a flag's meaning (:data:`mixsolve.flags.FLAG_MEANINGS`, the
#: one place meanings are kept): what to do about it, by flag code.
FLAG_ADVICE: dict[str, str] = {
    STATUS_CODES[NO_DOF]: "the fit is exact, so the residual says nothing; measure more "
                          "wavelengths",
    STATUS_CODES[LACK_OF_FIT]: "an unmodelled absorber, scatter, a wrong library or a wrong "
                               "noise model",
    STATUS_CODES[ILL_CONDITIONED]: "its missing readings left too few good wavelengths; "
                                   "re-measure the sample",
    STATUS_CODES[SATURATED]: "dilute or use a shorter cell and measure again",
    STATUS_CODES[SHIFTED]: "the fit corrected it; check the wavelength scale (mixsolve "
                           "instrument wavelength)",
    STATUS_CODES[STRUCTURED]: "look at the residual spectrum",
    STATUS_CODES[NO_SIGNAL]: "an empty column, a failed export or a blank subtracted from "
                             "itself; measure the sample",
    SHIFT_SENSITIVE: "check the wavelength scale or measure nearer band maxima",
}


def _result_notes(result: xr.Dataset, samples: list[str], left_out: list[float]) -> list[str]:
    notes = []
    if left_out:
        notes.append(f"{len(left_out)} measured wavelength(s) lie outside the library and were "
                     f"left out ({min(left_out):g}-{max(left_out):g} nm); nothing is "
                     "extrapolated.")
    flags = result["flags"].values if "flags" in result else []
    by_code: dict[str, list[str]] = {}
    for s, text in zip(samples, flags, strict=False):
        for code in filter(None, str(text).split(";")):
            by_code.setdefault(code, []).append(s)
    detail = {
        STATUS_CODES[ABOVE_RANGE]: f"{result.attrs.get('absorbance_range', '')} AU",
        STATUS_CODES[BELOW_RANGE]: f"{result.attrs.get('absorbance_range', '')} AU",
        SHIFT_SENSITIVE: f"wavelength tolerance {result.attrs.get('wavelength_tolerance_nm', '')}"
                         " nm",
    }
    dilution = result["suggested_dilution"].values if "suggested_dilution" in result else None
    for code in by_severity(list(by_code)):
        who = by_code[code]
        base, _, comp = code.partition(":")
        names = ", ".join(who[:6]) + (f" and {len(who) - 6} more" if len(who) > 6 else "")
        text = (f"{comp!r}: " if comp else "") + FLAG_MEANINGS.get(base, base)
        text += (f" ({detail[base]})" if base in detail else "") + (
            f"; {FLAG_ADVICE[base]}" if base in FLAG_ADVICE else "")
        ranged = (STATUS_CODES[ABOVE_RANGE], STATUS_CODES[BELOW_RANGE])
        if base in ranged and dilution is not None:
            factors = [float(dilution[samples.index(s)]) for s in who[:6]]
            verb = "dilute" if base == ranged[0] else "concentrate (or longer cell)"
            text += "; " + verb + " about " + ", ".join(
                _fold(f) for f in factors)
        notes.append(f"{names}: {text} [{code}, {severity_of(code)}].")
    return notes


def _fold(factor: float) -> str:
    """A suggested dilution d as "N-fold" (N = d, or 1/d when d < 1, the concentration
    factor): one decimal, three figures when huge, n/a when there is none (NaN, or a peak
    at or below 0 AU)."""
    if not np.isfinite(factor) or factor <= 0:
        return "n/a"
    fold = factor if factor >= 1 else 1 / factor
    return f"{fold:.1f}-fold" if fold < 1e4 else f"{fold:.3g}-fold"


def format_library(library: xr.Dataset, name: str = "") -> str:
    """Summarise a library: header facts, one line per component, notes.

    Returns
    -------
    str
        Components, unit, wavelength grid, solvent, bandwidth and provenance, then per
        component the peak wavelength (nm), ε and u(ε) at the peak, molar mass and, for
        libraries built from standards, the linearity figures.
    """
    comps = [str(c) for c in library[COMPONENT].values]
    wl = library[WAVELENGTH].values
    prov = json.loads(library.attrs.get("provenance", "{}") or "{}")
    bw = library.attrs.get("bandwidth_nm", float("nan"))
    step = np.unique(np.round(np.diff(wl), 6)) if wl.size > 1 else np.array([])
    grid = f"{wl.size} from {wl[0]:g} to {wl[-1]:g} nm"
    if step.size == 1:
        grid += f" (step {step[0]:g} nm)"
    lines = [
        f"Library {name}".rstrip(),
        f"  components    {len(comps)}: {', '.join(comps)}",
        f"  absorptivity  {library.attrs['unit']} (concentrations in "
        f"{library.attrs['concentration_unit']} at 1 cm)",
        f"  wavelengths   {grid}",
        f"  solvent       {library.attrs.get('solvent') or 'not stated'}",
        f"  bandwidth     {f'{bw:g} nm' if np.isfinite(bw) else 'not stated'}",
        f"  made          {prov.get('method', 'unknown')}"
        + (f" ({prov['fit']})" if "fit" in prov else "")
        + (f" from {prov['source']}" if prov.get("source") else ""),
        "",
    ]
    built = "r_squared" in library
    cw = max(12, *(len(c) for c in comps)) + 2
    head = f"{'component':<{cw}}{'peak nm':>8}{'ε at peak':>12}{'u(ε) fit':>10}{'M g/mol':>9}"
    if built:
        head += f"{'levels':>7}{'range':>16}{'R²':>9}{'sd AU':>9}{'worst':>8}"
    lines.append(head)
    notes = []
    eps = library["absorptivity"].values
    u = library["u_absorptivity"].values
    mm = library["molar_mass_g_per_mol"].values
    for k, c in enumerate(comps):
        peak = int(np.argmax(eps[k]))
        row = (f"{c:<{cw}}{wl[peak]:>8g}{_num(eps[k, peak], 12)}{_num(u[k, peak], 10)}"
               f"{_num(mm[k], 9)}")
        if built:
            lo = float(library["concentration_min"].values[k])
            hi = float(library["concentration_max"].values[k])
            worst = float(library["worst_relative_deviation"].values[k])
            r2 = float(library["r_squared"].values[k])
            levels = int(library["n_levels"].values[k])
            row += (f"{levels:>7d}{f'{lo:.3g}-{hi:.3g}':>16}{r2:>9.5f}"
                    f"{_num(float(library['residual_sd'].values[k]), 9)}"
                    f"{f'{100 * worst:.1f} %' if np.isfinite(worst) else 'n/a':>8}")
            crit = prov.get("criteria", {})
            if levels < crit.get("min_levels", 3):
                notes.append(f"{c}: only {levels} concentration level(s).")
            if np.isfinite(r2) and r2 < crit.get("min_r2", 0.995):
                notes.append(f"{c}: R² {r2:.4f} is below {crit.get('min_r2', 0.995)}.")
            if np.isfinite(worst) and worst > crit.get("max_relative_deviation", 0.05):
                notes.append(f"{c}: a standard lies {100 * worst:.1f} % off the line.")
        lines.append(row)
    if not np.isfinite(bw):
        notes.append("spectral bandwidth not stated: absorptivities of narrow bands depend on "
                     "it, so measure with the bandwidth the library was made with.")
    if built:
        lines.append(f"  (range in {library.attrs['concentration_unit']}; R², sd and worst "
                     "relative deviation at each component's peak)")
    lines.append("")
    lines += _library_error_lines(library, comps, prov, notes)
    lines += _notes(notes)
    return "\n".join(lines) + "\n"


def _uncertainty_parts(result: xr.Dataset) -> str:
    """Which parts the result's standard uncertainties hold, in a few words."""
    parts = ["noise"]
    for name, what in (("u_library", "library"), ("u_stray", "stray light")):
        if name in result and bool(np.nanmax(np.abs(result[name].values), initial=0.0) > 0):
            parts.append(what)
    return " + ".join(parts) + " (docs/uncertainty.md; not pathlength, dilution, wavelength)"


def _library_error_lines(library: xr.Dataset, comps: list[str], prov: dict[str, Any],
                         notes: list[str]) -> list[str]:
    """What the library says of its own error (:mod:`mixsolve.library_error`), a few lines:
    per component the whole relative u of ε at its peak (every pattern: what a result of
    that component alone inherits) and, for a library from standards, its preparation
    part (used, shown by the scatter, declared)."""
    patterns = error_patterns(library)  # (F, component, wavelength)
    if not patterns.shape[0]:
        notes.insert(0, "the library states no error of its own (no u(ε), no scale "
                     "uncertainty): results carry the noise term only (u_library = 0).")
        return []
    lines = ["Library error (correlated over wavelengths; docs/uncertainty.md, \"Library\"):"]
    counts = pattern_counts(library)
    lines.append("  patterns      " + ", ".join(f"{n} {k.replace('_', ' ')}"
                                               for k, n in counts.items()))
    eps = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    peak = np.argmax(eps, axis=1)
    whole = np.array([np.sqrt(np.sum(patterns[:, k, j] ** 2)) / eps[k, j]
                      for k, j in enumerate(peak)])
    built = "u_preparation_rel" in library
    cw = max(12, *(len(c) for c in comps)) + 2
    head = f"  {'component':<{cw}}{'whole u':>9}"
    lines.append(head + (f"{'prep. u':>9}{'scatter':>9}{'declared':>10}" if built else ""))
    for k, c in enumerate(comps):
        row = f"  {c:<{cw}}{_pct(whole[k], 9)}"
        if built:
            used, seen, said = (float(library[v].values[k]) for v in (
                "u_preparation_rel", "u_preparation_rel_scatter", "u_preparation_rel_declared"))
            row += f"{_pct(used, 9)}{_pct(seen, 9)}{_pct(said, 10)}"
        lines.append(row + ("  (none stated: taken as exact)" if whole[k] == 0 else ""))
    lines.append("  (whole u: the relative standard uncertainty of ε at the component's peak from")
    lines.append("  every pattern, stocks included" + (";" if built else ")"))
    if built:
        lines.append("  prep. u: its preparation part, the declared value unless the standards'")
        lines.append("  scatter exceeds it beyond chance, χ² test at 95 %, then the scatter's)")
    for label, u in prov.get("uncertainty", {}).get("stocks", {}).items():
        lines.append(f"  stock {label!r}: {100 * float(u):.3g} % (shared by its standards)")
    lines.append("")
    return lines


def _pct(value: float, width: int) -> str:
    return f"{'n/a':>{width}}" if not np.isfinite(value) else f"{100 * value:>{width - 2}.3g} %"

"""Text summaries of wavelength checks and choices (pure functions returning str)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from mixsolve.library import COMPONENT
from mixsolve.report.text import _notes, _num


def _wavelength_text(values: list[float], most: int = 12) -> str:
    if len(values) > most:
        return f"{len(values)} from {min(values):g} to {max(values):g} nm"
    return ", ".join(f"{w:g}" for w in values) + " nm"


def format_check(check: xr.Dataset) -> str:
    """Figures of merit of :func:`mixsolve.check_wavelengths` as an aligned table.

    Returns
    -------
    str
        Condition number and verdict, then per component SEN, SEL, γ, predicted u, LOD,
        LOQ and shift sensitivity (% per nm), the overlap matrix, and numbered notes.
    """
    unit = check.attrs["concentration_unit"]
    comps = [str(c) for c in check[COMPONENT].values]
    cw = max(12, *(len(c) + 2 for c in comps))
    lines = [
        "Wavelength check",
        f"  wavelengths       {_wavelength_text(list(check.attrs['wavelengths_nm']))}",
        f"  baseline          {check.attrs['baseline']}",
        f"  reading noise     σ_A = {check.attrs['noise_au']:g} AU (constant)",
        f"  condition number  {check.attrs['condition_number']:.4g} (columns scaled to unit "
        "length)",
        f"  verdict           {check.attrs['verdict']}",
        "",
        f"{'component':<{cw}}{'SEN':>11}{'SEL':>8}{'γ':>11}{'u(c)':>11}{'LOD':>11}"
        f"{'LOQ':>11}{'shift %/nm':>12}",
    ]
    for i, c in enumerate(comps):
        shift = float(check["shift_sensitivity"].values[i]) * 100
        lines.append(
            f"{c:<{cw}}{_num(check['sensitivity'].values[i], 11)}"
            f"{check['selectivity'].values[i]:>8.3f}"
            f"{_num(check['analytical_sensitivity'].values[i], 11)}"
            f"{_num(check['predicted_uncertainty'].values[i], 11)}"
            f"{_num(check['lod'].values[i], 11)}{_num(check['loq'].values[i], 11)}"
            f"{_num(shift, 12)}")
    lines += [
        f"  SEN in AU per {unit} at 1 cm; γ = SEN/σ_A in 1/({unit}); u(c), LOD = 3.3σ_A/SEN "
        f"and LOQ = 10σ_A/SEN in {unit} at 1 cm;",
        "  shift: relative change of the component, alone in solution, per +1 nm "
        "wavelength error.",
        "",
        "Overlap (cosine of the angle between library spectra; 1 = same shape)",
        f"{'':<{cw}}" + "".join(f"{c[:10]:>11}" for c in comps),
    ]
    for i, c in enumerate(comps):
        lines.append(f"{c:<{cw}}" + "".join(f"{check['overlap'].values[i, j]:>11.3f}"
                                          for j in range(len(comps))))
    lines.append("")
    lines += _notes(list(check.attrs["notes"]))
    return "\n".join(lines) + "\n"


def format_choice(choice: object) -> str:
    """Summary of :func:`mixsolve.choose_wavelengths`: the set and how it compares."""
    from mixsolve.wavelengths.choose import EQUAL_TIME_MARGIN, WavelengthChoice

    assert isinstance(choice, WavelengthChoice)
    full = choice.full
    comps = [str(c) for c in full[COMPONENT].values]
    cw = max(12, *(len(c) + 2 for c in comps))
    kind = "contiguous window" if choice.contiguous else "wavelength set"
    lines = [
        f"Chosen {kind}: {_wavelength_text(choice.wavelengths_nm, 40)}",
        f"  criterion J (mean variance ratio to the full window, one reading each): "
        f"{choice.criterion:.4g}",
        f"  at equal total measuring time: {choice.criterion_equal_time:.4g} "
        f"(1 = as good as the full window; documented margin {EQUAL_TIME_MARGIN:g})",
        f"  condition number {choice.chosen.attrs['condition_number']:.4g} "
        f"(full window {full.attrs['condition_number']:.4g})",
    ]
    if choice.user is not None:
        lines.append(f"  your set: J = {choice.user_criterion:.4g}, condition number "
                     f"{choice.user.attrs['condition_number']:.4g}")
    lines += ["", f"{'predicted u(c)':<{cw}}{'chosen':>12}{'full window':>14}"
              + (f"{'your set':>12}" if choice.user is not None else "")
              + f"{'shift %/nm':>12}"]
    for i, c in enumerate(comps):
        row = (f"{c:<{cw}}{_num(choice.chosen['predicted_uncertainty'].values[i], 12)}"
               f"{_num(full['predicted_uncertainty'].values[i], 14)}")
        if choice.user is not None:
            row += _num(choice.user["predicted_uncertainty"].values[i], 12)
        row += _num(100 * float(choice.chosen["shift_sensitivity"].values[i]), 12)
        lines.append(row)
    lines += [f"  u(c) in {full.attrs['concentration_unit']} at 1 cm for σ_A = "
              f"{full.attrs['noise_au']:g} AU, one reading per wavelength.", ""]
    notes = list(choice.chosen.attrs["notes"])
    if np.isfinite(choice.criterion_equal_time) and \
            choice.criterion_equal_time > EQUAL_TIME_MARGIN:
        notes.append("even at equal measuring time this set is clearly worse than the full "
                     "window: use more wavelengths or the full window")
    lines += _notes(notes)
    return "\n".join(lines) + "\n"

"""Absorbance-scale check with potassium dichromate, and a linearity check over levels.

A solution of potassium dichromate (about 60 mg/L in 0.005 mol/L sulfuric acid, read in
1 cm against the acid) has tabulated specific absorbances A(1 %, 1 cm), the absorbance of a
1 g/100 mL solution in 1 cm, at four wavelengths (../shared/CHECKS.md, an older
pharmacopoeia table quoted in a calibration procedure, **seen**; basis Burke &
Mavrodineanu 1976, J. Res. NBS 80A:631):

    A(1 %, 1 cm) = A · 10⁴ / (c · b),   c in mg/L, b in cm  (1 % = 10⁴ mg/L).

Each spectrum passes when all four values lie within the table's ranges (or within
± ``tolerance_pct`` of the nominal values when that is given). With three or more distinct
concentrations the check also tests linearity: at each wavelength, every level's specific
absorbance must lie within ± ``linearity_tolerance_pct`` (default 1 %, judgement) of their
mean; R² of A against c (through the origin) is reported.

Potassium dichromate is toxic, carcinogenic and an environmental hazard (docs/
instrument_checks.md).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.instrument.result import (
    CheckResult,
    items_frame,
    reading_at,
    scans_of,
)
from mixsolve.spectra import check_number

#: Wavelength (nm) → (nominal A(1 %, 1 cm), low, high). **Seen** (CHECKS.md); a newer
#: edition may give 106.6 at 350 nm (from memory).
DICHROMATE_SPECIFIC_ABSORBANCE: dict[float, tuple[float, float, float]] = {
    235.0: (124.5, 122.9, 126.2),
    257.0: (144.5, 142.8, 146.2),
    313.0: (48.6, 47.0, 50.3),
    350.0: (107.3, 105.6, 109.0),
}
#: Concentrations (mg/L) the table holds for.
DICHROMATE_RANGE_MG_L = (57.0, 63.0)
#: Linearity: largest relative deviation of a level from the mean specific absorbance (%).
DEFAULT_LINEARITY_TOLERANCE_PCT = 1.0
#: Distinct levels needed for the linearity check.
MIN_LEVELS = 3
MG_L_PER_PERCENT = 1.0e4


def check_absorbance_scale(
    spectra: xr.DataArray,
    concentration_mg_l: float | Sequence[float],
    *,
    pathlength_cm: float = 1.0,
    tolerance_pct: float | None = None,
    linearity_tolerance_pct: float = DEFAULT_LINEARITY_TOLERANCE_PCT,
    bandwidth_nm: float | None = None,
) -> CheckResult:
    """Check the absorbance scale with dichromate spectra.

    Parameters
    ----------
    spectra : DataArray with dims (sample, "wavelength")
        Absorbance (AU) of each dichromate solution against the acid blank.
    concentration_mg_l : float or sequence of float
        Dichromate concentration of each spectrum (mg/L); one value for all.
    pathlength_cm : float
        Cell pathlength (cm).
    tolerance_pct : float, optional
        Accept nominal ± this many per cent instead of the table's ranges.
    linearity_tolerance_pct : float
        Linearity limit (%), used with ≥ 3 distinct concentrations.
    bandwidth_nm : float, optional
        Spectral bandwidth of the instrument (nm), recorded.

    Returns
    -------
    CheckResult
        Items ``<sample> at <λ> nm`` (A(1 %, 1 cm)) and, with enough levels,
        ``linearity at <λ> nm`` (largest deviation, %; R² in the note).

    Raises
    ------
    InputError
        Concentrations not positive or not one per spectrum, a bad tolerance or
        pathlength, a check wavelength not measured.
    """
    if bandwidth_nm is not None:  # recorded in the log: a number or nothing
        bandwidth_nm = check_number(bandwidth_nm, "bandwidth_nm", "nm", positive=True)
    labels, wl, values = scans_of(spectra, "dichromate spectra")
    conc = np.atleast_1d(np.asarray(concentration_mg_l, dtype=float))
    if conc.size == 1:
        conc = np.repeat(conc, len(labels))
    if conc.size != len(labels):
        raise InputError(f"concentration_mg_l: {conc.size} values for {len(labels)} spectra; "
                         "give one, or one per spectrum in file order")
    for value in conc:
        check_number(value, "concentration_mg_l", "mg/L", positive=True)
    b = check_number(pathlength_cm, "pathlength_cm", "cm", positive=True)
    for name, value in (("tolerance_pct", tolerance_pct),
                        ("linearity_tolerance_pct", linearity_tolerance_pct)):
        if value is not None:
            check_number(value, name, "%", positive=True)
    rows, specific = [], np.full((len(labels), len(DICHROMATE_SPECIFIC_ABSORBANCE)), np.nan)
    for i, label in enumerate(labels):
        for j, (lam, (nominal, low, high)) in enumerate(DICHROMATE_SPECIFIC_ABSORBANCE.items()):
            if tolerance_pct is not None:
                low, high = nominal * (1 - tolerance_pct / 100), nominal * (1 + tolerance_pct / 100)
            a = reading_at(wl, values[i], lam, f"dichromate spectrum {label!r}")
            value = a * MG_L_PER_PERCENT / (conc[i] * b)
            specific[i, j] = value
            rows.append({"item": f"{label} at {lam:g} nm", "measured": value,
                         "expected": nominal, "low": low, "high": high,
                         "unit": "A(1 %, 1 cm)", "passed": bool(low <= value <= high),
                         "note": f"A = {a:.4f} at {conc[i]:g} mg/L, {b:g} cm"})
    notes = []
    lo_c, hi_c = DICHROMATE_RANGE_MG_L
    outside = [f"{c:g}" for c in conc if not lo_c <= c <= hi_c]
    if outside:
        notes.append(f"the table holds for {lo_c:g}-{hi_c:g} mg/L; level(s) {', '.join(outside)} "
                     "mg/L test the scale only as far as the solution stays linear")
    levels = np.unique(conc)
    if levels.size >= MIN_LEVELS:
        for j, lam in enumerate(DICHROMATE_SPECIFIC_ABSORBANCE):
            dev = 100 * (specific[:, j] / specific[:, j].mean() - 1)
            a = specific[:, j] * conc * b / MG_L_PER_PERCENT
            slope = np.sum(a * conc) / np.sum(conc**2)
            r2 = 1 - np.sum((a - slope * conc) ** 2) / np.sum((a - a.mean()) ** 2)
            worst = float(np.max(np.abs(dev)))
            rows.append({"item": f"linearity at {lam:g} nm", "measured": worst,
                         "expected": 0.0, "low": np.nan, "high": linearity_tolerance_pct,
                         "unit": "% deviation", "passed": bool(worst <= linearity_tolerance_pct),
                         "note": f"{levels.size} levels {levels.min():g}-{levels.max():g} mg/L, "
                                 f"R² {r2:.5f} (line through the origin, centred R²)"})
    else:
        notes.append(f"linearity not checked: {levels.size} distinct concentration(s), "
                     f"{MIN_LEVELS} needed")
    return CheckResult(
        check="absorbance", items=items_frame(rows),
        summary={"spectra": len(labels), "levels": int(levels.size)},
        settings={"concentration_mg_l": [float(c) for c in conc], "pathlength_cm": b,
                  "tolerance_pct": tolerance_pct, "ranges": "table" if tolerance_pct is None
                  else f"nominal ± {tolerance_pct:g} %",
                  "linearity_tolerance_pct": linearity_tolerance_pct,
                  "bandwidth_nm": bandwidth_nm},
        notes=notes)

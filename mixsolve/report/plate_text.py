"""The words of a plate's results: its settings and the notes for the reader (no I/O).

:func:`plate_settings` and :func:`plate_notes` turn a
:class:`mixsolve.plate.analysis.PlateResult` into display text, shown on the plate page,
in the ``settings`` sheet of ``results.xlsx`` and in the summary ``mixsolve plate`` prints.
:func:`attention_table` lists the wells with a doubtful result and why (the first thing the
plate page and the printed summary show), :func:`well_concern` sorts a well into doubtful,
worth a look or nothing, and :func:`well_counts` counts them.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve._version import __version__
from mixsolve.flags import (
    AT_ZERO,
    BELOW_RANGE,
    DOUBTFUL,
    EMPTY_WELL,
    FLAG_MEANINGS,
    LOOK,
    MARKER,
    NEGATIVE,
    NO_SIGNAL,
    STATUS_CODES,
    STRUCTURED,
    by_severity,
    severity_of,
)
from mixsolve.library import COMPONENT
from mixsolve.plate.analysis import PlateResult
from mixsolve.plate.wells import WELL
from mixsolve.report.text import FLAG_ADVICE
from mixsolve.spectra import WAVELENGTH

#: Codes that never make a well worth listing: a component held at zero, a well empty in
#: the layout. For blanks, a reading near zero is the point, so range, sign and shape codes
#: are routine there too. (A well read but not in the layout, ``not_in_layout``, is worth a
#: look, in case the layout is wrong; it has no result, so it is never crossed.)
ROUTINE = (AT_ZERO, EMPTY_WELL)
ROUTINE_BLANK = (*ROUTINE, STATUS_CODES[BELOW_RANGE], NEGATIVE, STATUS_CODES[STRUCTURED],
                 STATUS_CODES[NO_SIGNAL])
#: What to do about a plate code, beyond what :data:`mixsolve.report.text.FLAG_ADVICE` says.
PLATE_ADVICE = {
    MARKER: "dilute and read again (readings beside a saturated one are near the ceiling too)",
}

#: How the uncertainty of a sample's mean is found
#: (:func:`mixsolve.plate.wells.replicate_statistics`).
SAMPLE_MEAN_RULE = (
    "mean of the wells' unconstrained (OLS) results, held at 0 afterwards with NNLS; "
    "u(mean) = sqrt(u_noise^2 + u_shared^2), u_noise = sqrt(max(SD^2, mean(u_fit^2)) / n) "
    "(replicate scatter, with the wells' mean fit variance as a floor), u_shared = the "
    "wells' mean library and stray-light terms (shared by every well, not divided by "
    "sqrt(n)); n wells with a result, results multiplied by their dilution. Expanded: "
    "U = sqrt((k_noise u_noise)^2 + (2 u_shared)^2), k_noise = t(0.975, n - 1) of Student's "
    "t where the wells' scatter sets u_noise (4.30 for 3 wells), else 2; k = U / u"
)


def plate_settings(done: PlateResult) -> dict[str, str]:
    """The run's settings as display text, in order (setting → text)."""
    plate, layout, library, result = done.plate, done.layout, done.library, done.result
    options = done.options
    attrs = plate.attrs
    wl = plate[WAVELENGTH].values
    counts = layout["role"].value_counts()
    prov = json.loads(library.attrs.get("provenance", "{}") or "{}")
    lengths = _range(done.pathlength_cm.to_numpy(), "cm")
    pathlength = {
        "fixed": f"{lengths} (given)",
        "volume": f"{lengths} from the fill volume and well diameter, b = V / (π (d/2)²)",
        "water band": f"{lengths} per well from the water band, (A(977) − A(900)) / "
                      f"{options.water_k_au_per_cm:g} AU/cm",
    }[options.pathlength_mode]
    sd = done.blank_sd.values
    blank = "none: nothing subtracted" if not options.blank_wells else (
        f"{len(options.blank_wells)} well(s), mean spectrum subtracted; SD "
        f"{np.nanmedian(sd) if np.isfinite(sd).any() else float('nan'):.2g} AU (median over "
        f"wavelengths), {np.nanmax(sd) if np.isfinite(sd).any() else float('nan'):.2g} AU "
        "at most")
    used = json.loads(result.attrs["wavelengths_nm"]) if result is not None else []
    return {
        "export": f"{attrs.get('source', '')} ({attrs.get('layout', 'layout unknown')}, "
                  f"{done.plate_size}-well, separator {attrs.get('separator', '?')}, decimal "
                  f"'{attrs.get('decimal', '.')}'"
                  + (f", {attrs['sheet']}" if attrs.get("sheet") else "") + ")",
        "readings": f"{plate.sizes[WELL]} wells × {wl.size} wavelengths, "
                    f"{wl[0]:g}-{wl[-1]:g} nm",
        "layout": f"{layout.attrs.get('source', '')}: "
                  + ", ".join(f"{counts.get(r, 0)} {r}" for r in
                              ("sample", "standard", "blank", "empty")),
        "library": (f"built from {int((layout['role'] == 'standard').sum())} standard wells "
                    "of this plate" if options.library_from_plate else
                    f"{prov.get('method', 'given')}"
                    + (f" from {prov['source']}" if prov.get("source") else ""))
                   + f"; components {', '.join(map(str, library[COMPONENT].values))}",
        "fit": f"{options.method}, baseline {options.baseline}, "
               + (f"{len(used)} wavelengths {min(used):g}-{max(used):g} nm" if used else
                  "no well fitted"),
        "trust checks": _trust_settings(result),
        "pathlength": pathlength,
        "blank": blank,
        "unit": options.unit,
        "well uncertainty": "std_uncertainty of each well (noise, library, stray light; "
                            "docs/uncertainty.md), times the dilution",
        "sample uncertainty": SAMPLE_MEAN_RULE,
        "high_cv flag": f"CV > {options.max_cv_percent:g} % for a component whose mean exceeds "
                        "3 × its fit uncertainty",
        "mixsolve": __version__,
    }


def plate_notes(done: PlateResult) -> list[str]:
    """Plain sentences on anything the reader of the results should know."""
    plate, result, wells = done.plate, done.result, done.wells
    mode = done.options.pathlength_mode
    notes = []
    if not done.options.blank_wells:
        notes.append("The layout has no blank wells: nothing was subtracted, so the readings "
                     "are taken as blank-corrected already.")
    elif np.isnan(done.blank_mean.values).any():
        missing = plate[WAVELENGTH].values[np.isnan(done.blank_mean.values)]
        notes.append(f"No blank well has a reading at {', '.join(f'{w:g}' for w in missing[:6])}"
                     " nm; those wavelengths are missing readings in every well.")
    if result is not None:
        used = json.loads(result.attrs["wavelengths_nm"])
        wl = plate[WAVELENGTH].values
        other = wl[(wl < min(used)) | (wl > max(used))]
        if other.size:
            notes.append(f"{other.size} wavelength(s) read outside the fitted range "
                         f"({', '.join(f'{w:g}' for w in other[:6])}"
                         f"{' ...' if other.size > 6 else ''} nm) were not fitted"
                         + (" (used for the pathlength)" if mode == "water band" else "") + ".")
    marked = wells.loc[wells["flags"].str.contains(f"{MARKER}:"), "well"].unique()
    if marked.size:
        notes.append(f"{marked.size} well(s) had non-numeric readings (saturation or error "
                     "markers); each was fitted on the wavelengths it has and is flagged.")
    return notes


def _range(values: np.ndarray, unit: str, digits: int = 4) -> str:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return "n/a"
    lo, hi = finite.min(), finite.max()
    return f"{lo:.{digits}g} {unit}" if np.isclose(lo, hi) else \
        f"{lo:.{digits}g}-{hi:.{digits}g} {unit}"


def _trust_settings(result: xr.Dataset | None) -> str:
    if result is None:
        return "n/a"
    attrs = result.attrs
    noise = json.loads(attrs.get("noise_model") or "{}")
    parts = [f"reliable range {attrs.get('absorbance_range', '?')} AU",
             f"weights {attrs.get('weights', 'none')}",
             f"noise model {noise.get('name', 'given') if noise else 'none'}"]
    if attrs.get("fit_shift"):
        parts.append("wavelength shift fitted")
    if "wavelength_tolerance_nm" in attrs:
        parts.append(f"wavelength tolerance {attrs['wavelength_tolerance_nm']:g} nm")
    return ", ".join(parts)


def concerns(flags: str, role: str = "sample") -> list[str]:
    """A well's codes beyond the routine ones for its role, doubtful first."""
    routine = ROUTINE_BLANK if role == "blank" else ROUTINE
    return by_severity([c for c in str(flags).split(";")
                        if c and c.partition(":")[0] not in routine])


def well_concern(flags: str, role: str = "sample") -> str | None:
    """``DOUBTFUL`` when a well has a doubtful code, ``LOOK`` when it has only codes worth a
    look, None when it has none beyond the routine ones (:data:`ROUTINE`)."""
    codes = concerns(flags, role)
    if not codes:
        return None
    return DOUBTFUL if severity_of(codes[0]) == DOUBTFUL else LOOK


def well_counts(wells: pd.DataFrame) -> tuple[int, int, int]:
    """Wells fitted, wells with a doubtful result, wells worth a look (and not doubtful)."""
    per_well = wells.drop_duplicates("well")
    kinds = [well_concern(f, r) for f, r in zip(per_well["flags"], per_well["role"],
                                                strict=True)]
    return (int(per_well["rms_residual_au"].notna().sum()), kinds.count(DOUBTFUL),
            kinds.count(LOOK))


def counts_text(wells: pd.DataFrame) -> str:
    """"53 wells fitted, 1 doubtful, 11 worth a look" (doubtful counted apart)."""
    fitted, doubtful, look = well_counts(wells)
    return f"{fitted} wells fitted, {doubtful} doubtful, {look} worth a look"


def meaning_and_fix(code: str) -> str:
    """One code's meaning (:data:`mixsolve.flags.FLAG_MEANINGS`) and what to do about it."""
    base, _, detail = code.partition(":")
    text = FLAG_MEANINGS.get(base, base) + (f" ({detail})" if detail else "")
    fix = PLATE_ADVICE.get(base) or FLAG_ADVICE.get(base)
    return text + (f"; {fix}" if fix else "")


def attention_table(wells: pd.DataFrame) -> pd.DataFrame:
    """The wells whose result is doubtful, and why: columns ``well, sample, code,
    meaning and fix`` (one row per doubtful code; samples named, other roles in brackets)."""
    per_well = wells.drop_duplicates("well")
    rows = []
    for well, sample, role, flags in per_well[["well", "sample", "role", "flags"]].itertuples(
            index=False):
        for code in concerns(flags, role):
            if severity_of(code) == DOUBTFUL:
                rows.append((well, sample if role == "sample" and sample else f"({role})",
                             code, meaning_and_fix(code)))
    return pd.DataFrame(rows, columns=["well", "sample", "code", "meaning and fix"])


def attention_lines(wells: pd.DataFrame, indent: str = "  ") -> list[str]:
    """:func:`attention_table` as aligned text lines (a line saying none when empty)."""
    table = attention_table(wells)
    if not len(table):
        return [f"{indent}No well has a doubtful result."]
    w_well = max(4, *(len(w) for w in table["well"])) + 2
    w_sample = max(6, *(len(s) for s in table["sample"])) + 2
    w_code = max(4, *(len(c) for c in table["code"])) + 2
    lines = [f"{indent}Wells that need attention (doubtful results):",
             f"{indent}{'well':<{w_well}}{'sample':<{w_sample}}{'code':<{w_code}}why, and "
             "what to do"]
    lines += [f"{indent}{w:<{w_well}}{s:<{w_sample}}{c:<{w_code}}{m}"
              for w, s, c, m in table.itertuples(index=False)]
    return lines

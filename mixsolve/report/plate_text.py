"""The words of a plate's results: its settings and the notes for the reader (no I/O).

:func:`plate_settings` and :func:`plate_notes` turn a
:class:`mixsolve.plate.analysis.PlateResult` into display text, shown on the plate page,
in the ``settings`` sheet of ``results.xlsx`` and in the summary ``mixsolve plate`` prints.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from mixsolve._version import __version__
from mixsolve.flags import MARKER
from mixsolve.library import COMPONENT
from mixsolve.plate.analysis import PlateResult
from mixsolve.plate.wells import WELL
from mixsolve.spectra import WAVELENGTH

#: How the uncertainty of a sample's mean is found
#: (:func:`mixsolve.plate.wells.replicate_statistics`).
SAMPLE_MEAN_RULE = (
    "mean of the wells' unconstrained (OLS) results, held at 0 afterwards with NNLS; "
    "u(mean) = sqrt(u_noise^2 + u_shared^2), u_noise = sqrt(max(SD^2, mean(u_fit^2)) / n) "
    "(replicate scatter, with the wells' mean fit variance as a floor), u_shared = the "
    "wells' mean library and stray-light terms (shared by every well, not divided by "
    "sqrt(n)); n wells with a result, results multiplied by their dilution"
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
        "default": "1 cm (none given)",
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
        "high_cv flag": f"CV > {100 * options.max_cv:g} % for a component whose mean exceeds "
                        "3 × its fit uncertainty",
        "mixsolve": __version__,
    }


def plate_notes(done: PlateResult) -> list[str]:
    """Plain sentences on anything the reader of the results should know."""
    plate, result, wells = done.plate, done.result, done.wells
    mode = done.options.pathlength_mode
    notes = []
    if mode == "default":
        notes.append("No pathlength was given, so 1 cm was assumed: microplate wells are "
                     "usually shorter. Give --pathlength, --volume-ul with "
                     "--well-diameter-mm, or --water-band.")
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

"""Analyse one plate in memory: layout, blank, pathlength, unmixing, replicate statistics.

No files are read or written here (:mod:`mixsolve.workflows.plate` does that); the steps
are those of docs/plates.md, "Processing".
"""

from __future__ import annotations

import json
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import InputError, MixsolveWarning, RenamedWarning
from mixsolve.flags import (
    AT_ZERO,
    COMPONENT_CODES,
    EMPTY_WELL,
    HIGH_CV,
    MARKER,
    NEGATIVE,
    NO_PATHLENGTH,
    NO_RESULT,
    NOT_IN_LAYOUT,
    NOT_READ,
    SINGLE_WELL,
    WELLS_WITHOUT_RESULT,
    by_severity,
)
from mixsolve.library import COMPONENT, build_library, check_library
from mixsolve.plate.wells import (
    DEFAULT_MAX_CV_PERCENT,
    WATER_BAND_AU_PER_CM,
    WELL,
    check_sample_names,
    on_plate,
    parse_well,
    pathlength_from_volume,
    plate_range,
    plate_size_for,
    plate_wells,
    replicate_statistics,
    subtract_blank,
    water_band_pathlength,
)
from mixsolve.slit import fitted_range
from mixsolve.solve.design import Baseline
from mixsolve.solve.engine import Method
from mixsolve.solve.unmix import unmix
from mixsolve.spectra import SAMPLE, WAVELENGTH, check_number, check_spectra

FITTED_ROLES = ("blank", "sample", "standard")
WELL_COLUMNS = ("well", "sample", "role", "component", "concentration", "std_uncertainty",
                "unit", "dilution", "pathlength_cm", "rms_residual_au", "flags")
SAMPLE_COLUMNS = ("sample", "component", "concentration", "std_uncertainty",
                  "coverage_factor", "expanded_uncertainty", "unit", "n_wells",
                  "mean_unconstrained", "sd", "cv_percent", "wells", "flags")
#: Per-well uncertainty parts shared by every well of a run: not averaged down in a mean.
SHARED_PARTS = ("u_library", "u_stray")


@dataclass(frozen=True)
class PlateOptions:
    """The settings one plate was analysed with (the report words them).

    Attributes
    ----------
    pathlength_mode : {"fixed", "volume", "water band"}
        ``pathlength_cm`` given, from ``volume_ul`` and ``well_diameter_mm``, or from the
        water band.
    water_k_au_per_cm : float
        A(977) − A(900) of 1 cm of water (AU/cm), for the water band.
    max_cv_percent : float
        Replicate CV (%) above which a component is flagged ``high_cv``.
    library_from_plate : bool
        Whether the library was built from the plate's standard wells.
    method, baseline : str
        Those of the fit.
    unit : str
        Unit of the concentrations.
    blank_wells : tuple of str
        The blank wells whose mean was subtracted.
    """

    pathlength_mode: str
    water_k_au_per_cm: float
    max_cv_percent: float
    library_from_plate: bool
    method: str
    baseline: str
    unit: str
    blank_wells: tuple[str, ...] = ()


@dataclass
class PlateResult:
    """One analysed plate.

    Attributes
    ----------
    name : str
        The export's file name (or the spectra's ``source``).
    plate, corrected : DataArray with dims ("well", "wavelength")
        Raw and blank-corrected absorbance (AU).
    layout : DataFrame
        The layout as read (:func:`mixsolve.io.layout_io.read_layout`).
    library : Dataset
        The library used (given, or built from the plate's standard wells).
    result : Dataset or None
        :func:`mixsolve.unmix` over the fitted wells; None when no well was fitted.
    wells, samples : DataFrame
        The tidy tables (columns ``WELL_COLUMNS`` and ``SAMPLE_COLUMNS``; docs/plates.md).
    blank_mean, blank_sd : DataArray with dims ("wavelength",)
        Mean blank spectrum subtracted, and its SD (AU).
    pathlength_cm : Series
        Pathlength (cm) per fitted well; NaN where it could not be found.
    plate_size : int
        96 or 384.
    options : PlateOptions
        The settings of the analysis (worded by
        :func:`mixsolve.report.plate_text.plate_settings`; cautions for the reader by
        :func:`mixsolve.report.plate_text.plate_notes`).
    unconstrained : Dataset or None
        The same fit by ordinary least squares (``method="ols"``), whose estimates the
        sample means are formed from; ``result`` itself when that was an OLS fit.
    """

    name: str
    plate: xr.DataArray
    corrected: xr.DataArray
    layout: pd.DataFrame
    library: xr.Dataset
    result: xr.Dataset | None
    wells: pd.DataFrame
    samples: pd.DataFrame
    blank_mean: xr.DataArray
    blank_sd: xr.DataArray
    pathlength_cm: pd.Series
    plate_size: int
    options: PlateOptions
    unconstrained: xr.Dataset | None = None


def analyse_plate(
    plate: xr.DataArray,
    layout: pd.DataFrame,
    library: xr.Dataset | None = None,
    *,
    library_from_plate: bool = False,
    window: tuple[float, float] | None = None,
    wavelengths: Sequence[float] | None = None,
    method: Method = "nnls",
    baseline: Baseline = "none",
    unit: str | None = None,
    pathlength_cm: float | None = None,
    volume_ul: float | None = None,
    well_diameter_mm: float | None = None,
    water_band: bool = False,
    water_k_au_per_cm: float = WATER_BAND_AU_PER_CM,
    max_cv_percent: float = DEFAULT_MAX_CV_PERCENT,
    max_cv: float | None = None,
    **fit_options: Any,
) -> PlateResult:
    """Turn one plate's readings into concentrations per well and per sample.

    Parameters
    ----------
    plate : DataArray with dims ("well", "wavelength")
        Raw absorbance (AU) as from :func:`mixsolve.read_plate`.
    layout : DataFrame
        As from :func:`mixsolve.io.layout_io.read_layout` (columns ``line, well, role,
        sample, dilution, component, concentration, unit``).
    library : Dataset, optional
        A mixsolve library; exclusive with ``library_from_plate``.
    library_from_plate : bool
        Build the library from the plate's standard wells (blank-corrected, each at its
        own pathlength, in-well concentration = concentration / dilution).
    window, wavelengths, method, baseline, unit
        As for :func:`mixsolve.unmix`. Without ``window`` or ``wavelengths`` the fit uses
        the measured wavelengths inside the library's range (others, such as the water
        band, are used for the pathlength only).
    pathlength_cm : float, optional
        One pathlength (cm) for every well.
    volume_ul, well_diameter_mm : float, optional
        Fill volume (µL) and well diameter (mm): b = V / (π (d/2)²).
    water_band : bool
        Pathlength per well from A(977) − A(900) of the raw readings / ``water_k_au_per_cm``.
        Exactly one of ``pathlength_cm``, ``volume_ul`` with ``well_diameter_mm``, or
        ``water_band`` must be given: a well is not 1 cm deep (200 µL in a 96-well plate
        is about 0.5 cm), so no pathlength is assumed.
    water_k_au_per_cm : float
        A(977) − A(900) of 1 cm of water (AU/cm); 0.18 at room temperature (from memory).
    max_cv_percent : float
        Replicate CV (%, 100 · SD / |mean|) above which a clearly detected component is
        flagged ``high_cv``.
    max_cv : float, optional
        Old name of the same limit as a fraction (0.2 for 20 %): converted, with a
        :class:`mixsolve.errors.RenamedWarning`; it works until the next release.
    **fit_options
        Passed to :func:`mixsolve.unmix` (``weights``, ``noise``, ``absorbance_range``,
        ``fit_shift``, ``max_shift_nm``, ``wavelength_tolerance_nm``, ``bandwidth_nm``, the
        reader's bandpass to which a narrower library is broadened): its trust checks flag
        each well; ``reference_wavelength_nm``).

    Returns
    -------
    PlateResult

    Raises
    ------
    InputError
        Layout wells off the plate, two spellings of one sample, no pathlength or
        conflicting pathlength or library options, no standards for
        ``library_from_plate``, and every error of :func:`mixsolve.unmix` and
        :func:`mixsolve.build_library`.

    Notes
    -----
    Every well of the plate and of the layout gets rows in ``wells`` and every sample
    rows in ``samples``, with a result or a flag saying why there is none. The wells are
    fitted as asked; the sample means are formed from the same fit by ordinary least
    squares (same wavelengths, baseline, pathlengths and options), and with ``nnls`` the
    non-negativity is applied to the mean afterwards (a negative mean is reported as 0,
    flagged ``at_zero:<component>``), so a mean of an absent component is not biased
    upwards by the bound. The mean and its uncertainty follow
    :func:`mixsolve.plate.wells.replicate_statistics` (docs/plates.md).
    """
    plate = check_spectra(plate, "plate")
    if max_cv is not None:  # the old name, a fraction
        max_cv = check_number(max_cv, "max_cv", positive=True,
                              hint="a fraction of the mean: 0.2 flags a CV above 20 %")
        warnings.warn("max_cv (a fraction) is now max_cv_percent (a percent: 20 for 0.2); "
                      "the old name works until the next release", RenamedWarning,
                      stacklevel=2)
        max_cv_percent = 100 * max_cv
    max_cv_percent = check_number(max_cv_percent, "max_cv_percent", "%", positive=True,
                                  hint="a percent of the mean: 20 flags a CV above 20 %")
    water_k_au_per_cm = check_number(water_k_au_per_cm, "water_k_au_per_cm", "AU/cm",
                                     positive=True)
    if pathlength_cm is not None:
        pathlength_cm = check_number(pathlength_cm, "pathlength_cm", "cm", positive=True)
    if WELL not in plate.dims:
        raise InputError(f"plate: dims {plate.dims} have no 'well' dimension; read the export "
                         "with mixsolve.read_plate")
    source = str(plate.attrs.get("source", "plate"))
    layout_name = str(layout.attrs.get("source", "layout"))
    read = [str(w) for w in plate[WELL].values]
    size = int(plate.attrs.get("plate_size") or plate_size_for(
        p for p in map(parse_well, read) if p is not None) or 384)
    _check_layout(layout, layout_name, size, source)
    if library is not None and library_from_plate:
        raise InputError("give either a library or library_from_plate, not both")
    if library is None and not library_from_plate:
        raise InputError("no library: give a library, or build it from the plate's standard "
                         "wells (library_from_plate)")
    roles = dict(zip(layout["well"], layout["role"], strict=True))
    fitted = [w for w in read if roles.get(w) in FITTED_ROLES]
    mode = _pathlength_mode(pathlength_cm, volume_ul, well_diameter_mm, water_band)
    blanks = [w for w in fitted if roles[w] == "blank"]
    corrected, blank_mean, blank_sd = subtract_blank(plate, blanks)
    b = _pathlengths(plate, fitted, mode, pathlength_cm, volume_ul, well_diameter_mm,
                     water_k_au_per_cm, source)
    if library_from_plate:
        library = _plate_library(corrected, layout, fitted, b, layout_name, source)
    library = check_library(library)
    if window is None and wavelengths is None:
        window = _overlap(plate[WAVELENGTH].values,  # the broadened library's range
                          np.asarray(fitted_range(library, fit_options.get("bandwidth_nm"))))
    fit_wells = [w for w in fitted if np.isfinite(b[w])]
    result = unconstrained = None
    if fit_wells:
        b_da = xr.DataArray(b[fit_wells].to_numpy(), dims=(WELL,), coords={WELL: fit_wells})
        fit = dict(window=window, wavelengths=wavelengths, baseline=baseline,
                   pathlength_cm=b_da, unit=unit, **fit_options)
        result = unconstrained = unmix(corrected.sel({WELL: fit_wells}), library,
                                       method=method, **fit)
        if method != "ols":
            with warnings.catch_warnings():  # the fit above has said it all
                warnings.simplefilter("ignore", MixsolveWarning)
                unconstrained = unmix(corrected.sel({WELL: fit_wells}), library,
                                      method="ols", **fit)
    out_unit = result.attrs["unit"] if result is not None else (
        unit or library.attrs["concentration_unit"])
    components = [str(c) for c in library[COMPONENT].values]
    all_wells = [w for w in plate_wells(size) if w in set(read) | set(roles)]
    wells = _wells_table(plate, layout, all_wells, read, b, result, components, out_unit)
    samples = _samples_table(layout, wells, unconstrained, components, out_unit, max_cv_percent,
                             non_negative=method != "ols")
    options = PlateOptions(mode, water_k_au_per_cm, max_cv_percent, library_from_plate, method,
                           baseline, out_unit, tuple(blanks))
    return PlateResult(source, plate, corrected, layout, library, result, wells, samples,
                       blank_mean, blank_sd, b, size, options, unconstrained)


def _check_layout(layout: pd.DataFrame, layout_name: str, size: int, source: str) -> None:
    missing = [c for c in ("line", "well", "role", "sample", "dilution") if c not in layout]
    if missing:
        raise InputError(f"layout: missing column(s) {', '.join(missing)}; read it with "
                         "mixsolve.io.layout_io.read_layout")
    for row in layout.itertuples(index=False):
        pos = parse_well(row.well)
        if pos is None or not on_plate(pos, size):
            raise InputError(f"{layout_name}, line {row.line}: well {row.well} is not on the "
                             f"{size}-well plate of {source} ({plate_range(size)})")
    sample_wells = layout[layout["role"] == "sample"]
    check_sample_names(sample_wells["sample"].tolist(), sample_wells["well"].tolist(),
                       layout_name, sample_wells["line"].tolist())


def _pathlength_mode(pathlength_cm: float | None, volume_ul: float | None,
                     well_diameter_mm: float | None, water_band: bool) -> str:
    if (volume_ul is None) != (well_diameter_mm is None):
        raise InputError("volume_ul and well_diameter_mm go together: the pathlength from "
                         "the fill volume needs both")
    given = [m for m, on in (("fixed", pathlength_cm is not None),
                             ("volume", volume_ul is not None), ("water band", water_band)) if on]
    if len(given) > 1:
        raise InputError(f"pathlength given {len(given)} ways ({', '.join(given)}); give one of "
                         "pathlength_cm, volume_ul with well_diameter_mm, or water_band")
    if not given:
        raise InputError(
            "no pathlength: a well is not 1 cm deep (200 µL in a 96-well plate is about "
            "0.5 cm), so give one of pathlength_cm (one value for every well), volume_ul "
            "with well_diameter_mm (fill volume and well geometry), or water_band (per well "
            "from the water band at 900 and 977 nm)")
    return given[0]


def _pathlengths(plate: xr.DataArray, fitted: list[str], mode: str, pathlength_cm: float | None,
                 volume_ul: float | None, well_diameter_mm: float | None, water_k: float,
                 source: str) -> pd.Series:
    """Pathlength (cm) of every fitted well; NaN where the water band gives none."""
    if mode == "water band":
        values = water_band_pathlength(plate.sel({WELL: fitted}), au_per_cm=water_k,
                                       name=source).values
    elif mode == "volume":
        values = np.full(len(fitted), pathlength_from_volume(volume_ul, well_diameter_mm))
    else:
        values = np.full(len(fitted), pathlength_cm)
    return pd.Series(values, index=pd.Index(fitted, name=WELL), dtype=float, name="pathlength_cm")


def _plate_library(corrected: xr.DataArray, layout: pd.DataFrame, fitted: list[str],
                   b: pd.Series, layout_name: str, source: str) -> xr.Dataset:
    standards = layout[(layout["role"] == "standard") & layout["well"].isin(fitted)]
    if standards.empty:
        raise InputError(f"{layout_name}: library_from_plate needs standard wells read in "
                         f"{source}; the layout has none")
    for row in standards.itertuples(index=False):
        if not np.isfinite(b[row.well]):
            raise InputError(f"{layout_name}, line {row.line}, well {row.well}: the standard "
                             "has no pathlength (water band missing or not positive)")
    sheet = pd.DataFrame({
        "sample": standards["well"].to_numpy(),
        "component": standards["component"].to_numpy(),
        "concentration": (standards["concentration"] / standards["dilution"]).to_numpy(),
        "unit": standards["unit"].to_numpy(),
        "pathlength_cm": b[standards["well"]].to_numpy(),
        "line": standards["line"].to_numpy(),
    })
    spectra = corrected.sel({WELL: sheet["sample"].tolist()}).rename({WELL: SAMPLE})
    return build_library(spectra, sheet, source=f"standard wells of {source}")


def _overlap(measured: np.ndarray, library_wl: np.ndarray) -> tuple[float, float] | None:
    low, high = max(measured[0], library_wl[0]), min(measured[-1], library_wl[-1])
    inside = (measured >= low) & (measured <= high)
    return (float(low), float(high)) if low < high and inside.sum() >= 1 else None


def _marker_codes(plate: xr.DataArray) -> dict[str, list[str]]:
    markers = json.loads(plate.attrs.get("markers", "{}") or "{}")
    return {well: list(dict.fromkeys(f"{MARKER}:" + re.sub(r"[^A-Za-z0-9_.+-]", "_", text)
                                     for _, text in items))
            for well, items in markers.items()}


def _well_flags(well: str, role: str | None, is_read: bool, b: pd.Series,
                fit_flags: dict[str, str], markers: dict[str, list[str]]) -> list[str]:
    codes = []
    if role is None:
        codes.append(NOT_IN_LAYOUT)
    elif role == "empty":
        codes.append(EMPTY_WELL)
    if not is_read:
        codes.append(NOT_READ)
    codes += markers.get(well, [])
    if role in FITTED_ROLES and is_read and not np.isfinite(b[well]):
        codes.append(NO_PATHLENGTH)
    codes += [c for c in fit_flags.get(well, "").split(";") if c]
    return codes


def _wells_table(plate: xr.DataArray, layout: pd.DataFrame, all_wells: list[str],
                 read: list[str], b: pd.Series, result: xr.Dataset | None,
                 components: list[str], unit: str) -> pd.DataFrame:
    info = layout.set_index("well")[["role", "sample", "dilution"]].to_dict("index")
    markers = _marker_codes(plate)
    pos = {w: i for i, w in enumerate(all_wells)}
    conc = _per_well(result, "concentration", all_wells, components)
    u = _per_well(result, "std_uncertainty", all_wells, components)
    rms = np.full(len(all_wells), np.nan)
    fit_flags: dict[str, str] = {}
    if result is not None:
        fit = [str(w) for w in result[WELL].values]
        rms[[pos[w] for w in fit]] = result["rms_residual"].values
        fit_flags = dict(zip(fit, map(str, result["flags"].values), strict=True))
    read_set = set(read)
    lengths = b.to_dict()
    per_well = {"well": [], "sample": [], "role": [], "dilution": [], "flags": []}
    for well in all_wells:
        entry = info.get(well)
        role = None if entry is None else str(entry["role"])
        per_well["well"].append(well)
        per_well["sample"].append("" if entry is None else str(entry["sample"]))
        per_well["role"].append(role or "unassigned")
        per_well["dilution"].append(1.0 if entry is None else float(entry["dilution"]))
        per_well["flags"].append(";".join(by_severity(  # doubtful codes first
            _well_flags(well, role, well in read_set, b, fit_flags, markers))))
    dilution = np.asarray(per_well["dilution"])
    n_c = len(components)
    return pd.DataFrame({
        "well": np.repeat(per_well["well"], n_c),
        "sample": np.repeat(per_well["sample"], n_c),
        "role": np.repeat(per_well["role"], n_c),
        "component": np.tile(components, len(all_wells)),
        "concentration": (conc * dilution[:, None]).ravel(),
        "std_uncertainty": (u * dilution[:, None]).ravel(),
        "unit": unit,
        "dilution": np.repeat(dilution, n_c),
        "pathlength_cm": np.repeat([lengths.get(w, np.nan) for w in all_wells], n_c),
        "rms_residual_au": np.repeat(rms, n_c),
        "flags": np.repeat(per_well["flags"], n_c),
    }, columns=list(WELL_COLUMNS))


def _per_well(result: xr.Dataset | None, name: str, all_wells: list[str],
              components: list[str]) -> np.ndarray:
    """``result[name]`` as (well of ``all_wells``, component); NaN for wells not fitted."""
    out = np.full((len(all_wells), len(components)), np.nan)
    if result is not None:
        pos = {w: i for i, w in enumerate(all_wells)}
        out[[pos[str(w)] for w in result[WELL].values]] = \
            result[name].transpose(WELL, COMPONENT).values
    return out


def _samples_table(layout: pd.DataFrame, wells: pd.DataFrame, free: xr.Dataset | None,
                   components: list[str], unit: str, max_cv_percent: float, *,
                   non_negative: bool) -> pd.DataFrame:
    """One row per sample and component from the unconstrained fit ``free`` of the wells.

    Each well's values are multiplied by its dilution. The noise part of a well's
    uncertainty is its ``u_noise``; the parts ``SHARED_PARTS`` are shared by every well.
    """
    n_c = len(components)
    names = list(wells["well"].to_numpy()[::n_c])
    pos = {w: i for i, w in enumerate(names)}
    dilution = wells["dilution"].to_numpy()[::n_c, None]
    conc, u = (dilution * _per_well(free, name, names, components)
               for name in ("concentration", "u_noise"))
    shared = [dilution * _per_well(free, name, names, components)
              for name in SHARED_PARTS if free is not None]
    flags = wells["flags"].to_numpy()[::n_c]
    sample_rows = layout[layout["role"] == "sample"]
    rows = []
    for sample, group in sample_rows.groupby("sample", sort=False):
        members = group["well"].tolist()
        idx = [pos[w] for w in members]
        for k, comp in enumerate(components):
            stats = replicate_statistics(conc[idx, k], u[idx, k],
                                         u_shared=[part[idx, k] for part in shared],
                                         non_negative=non_negative)
            codes = _sample_flags(flags[idx], comp, stats, len(members), max_cv_percent)
            rows.append((sample, comp, stats["value"], stats["std_uncertainty"],
                         stats["coverage_factor"], stats["expanded_uncertainty"], unit,
                         stats["n"], stats["mean"], stats["sd"], stats["cv_percent"],
                         ";".join(members), ";".join(by_severity(codes))))
    return pd.DataFrame(rows, columns=list(SAMPLE_COLUMNS))


def _sample_flags(well_flags: Sequence[str], component: str, stats: dict[str, Any],
                  n_listed: int, max_cv_percent: float) -> list[str]:
    codes: dict[str, None] = {}
    for text in well_flags:
        for code in filter(None, str(text).split(";")):
            base, _, comp = code.partition(":")
            if base in COMPONENT_CODES and (comp != component or base in (AT_ZERO, NEGATIVE)):
                continue  # the bound's codes describe the mean, not its wells
            codes[code] = None
    if stats["at_zero"]:
        codes[f"{AT_ZERO}:{component}"] = None
    elif stats["mean"] < 0:
        codes[f"{NEGATIVE}:{component}"] = None
    n = stats["n"]
    if n == 0:
        codes[NO_RESULT] = None
    elif n < n_listed:
        codes[f"{WELLS_WITHOUT_RESULT}:{n_listed - n}"] = None
    if n == 1:
        codes[SINGLE_WELL] = None
    detected = np.isfinite(stats["u_fit_rms"]) and stats["mean"] > 3 * stats["u_fit_rms"]
    if np.isfinite(stats["cv_percent"]) and stats["cv_percent"] > max_cv_percent and detected:
        codes[HIGH_CV] = None
    return list(codes)

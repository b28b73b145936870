"""Microplate science without I/O: well geometry, blank, pathlength, replicate statistics.

Wells are named by row letter and column number (``A1`` ... ``H12`` on a 96-well plate,
``A1`` ... ``P24`` on a 384-well plate); ``A01`` is read as ``A1``. Spectra of a plate are
a DataArray with dims ``("well", "wavelength")``.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.names import normalise_name
from mixsolve.spectra import WAVELENGTH, check_number

WELL = "well"
#: Plate formats: wells → (rows, columns).
PLATE_SHAPES: dict[int, tuple[int, int]] = {96: (8, 12), 384: (16, 24)}
ROW_LETTERS = "ABCDEFGHIJKLMNOP"
_WELL_NAME = re.compile(r"^([A-Pa-p])0?([1-9]\d?)$")

#: Water band: A(977 nm) − A(900 nm) per cm of water at room temperature (CHECKS.md, from
#: memory; it depends on temperature, so keep it settable).
WATER_BAND_AU_PER_CM = 0.18
WATER_BAND_NM = (900.0, 977.0)
#: How close (nm) a reading must be to a water-band wavelength to count as one.
WATER_BAND_TOLERANCE_NM = 0.5
#: Replicate CV above which a sample is flagged ``high_cv`` (common practice, settable).
DEFAULT_MAX_CV = 0.20


def parse_well(text: object) -> tuple[int, int] | None:
    """Row index (0 = A) and column number (1-based) of a well name, or None.

    ``A1``, ``a1`` and ``A01`` are the same well; rows A–P and columns 1–99 are read
    (whether the well lies on a given plate is :func:`on_plate`'s business). The text is
    put in normal form first (:func:`mixsolve.names.normalise_name`), so a zero-width or
    no-break space around it does not hide the well.
    """
    match = _WELL_NAME.match(normalise_name(text))
    if match is None:
        return None
    return ROW_LETTERS.index(match.group(1).upper()), int(match.group(2))


def well_name(row: int, column: int) -> str:
    """Canonical name of a well: ``well_name(1, 3) == "B3"``."""
    return f"{ROW_LETTERS[row]}{column}"


def plate_wells(size: int) -> list[str]:
    """All wells of a plate in reading order (A1, A2, ..., then B1 ...)."""
    rows, cols = PLATE_SHAPES[size]
    return [well_name(r, c) for r in range(rows) for c in range(1, cols + 1)]


def plate_size_for(positions: Iterable[tuple[int, int]]) -> int | None:
    """Smallest plate format (96 or 384) holding every (row, column), or None."""
    pos = list(positions)
    for size, (rows, cols) in PLATE_SHAPES.items():
        if all(r < rows and 1 <= c <= cols for r, c in pos):
            return size
    return None


def plate_range(size: int) -> str:
    """Display range of a plate's wells, e.g. ``A1-H12``."""
    rows, cols = PLATE_SHAPES[size]
    return f"A1-{ROW_LETTERS[rows - 1]}{cols}"


def on_plate(position: tuple[int, int], size: int) -> bool:
    """Whether a (row, column) position lies on a plate of ``size`` wells."""
    rows, cols = PLATE_SHAPES[size]
    return position[0] < rows and 1 <= position[1] <= cols


def subtract_blank(
    spectra: xr.DataArray, blank_wells: Sequence[str]
) -> tuple[xr.DataArray, xr.DataArray, xr.DataArray]:
    """Subtract the mean blank spectrum from every well.

    Parameters
    ----------
    spectra : DataArray with dims ("well", "wavelength")
        Raw absorbance (AU); NaN marks a missing reading.
    blank_wells : sequence of str
        The blank wells; with none, nothing is subtracted.

    Returns
    -------
    corrected : DataArray
        ``spectra`` minus the blank mean (AU). Where every blank lacks a reading, the
        corrected values are NaN (missing).
    blank_mean, blank_sd : DataArray with dims ("wavelength",)
        Mean and standard deviation (n − 1 denominator) of the blank wells (AU); zero
        and NaN without blanks, NaN SD with a single blank.
    """
    wl = spectra[WAVELENGTH]
    if not blank_wells:
        zero = xr.zeros_like(wl, dtype=float)
        return spectra, zero, zero * np.nan
    blanks = spectra.sel({WELL: list(blank_wells)})
    present = blanks.notnull().sum(WELL)
    mean = blanks.mean(WELL, skipna=True)
    sd = blanks.std(WELL, ddof=1, skipna=True).where(present >= 2)
    return spectra - mean, mean.assign_attrs(units="AU"), sd.assign_attrs(units="AU")


def pathlength_from_volume(volume_ul: float, well_diameter_mm: float) -> float:
    """Pathlength (cm) of a flat-bottomed cylindrical well filled with ``volume_ul``.

    Notes
    -----
    b = V / (π (d/2)²) with V in cm³ (1 µL = 10⁻³ cm³) and d in cm. The meniscus and
    any taper of the well are ignored.

    Raises
    ------
    InputError
        A volume or diameter that is not a positive number.
    """
    volume = check_number(volume_ul, "volume_ul", "µL", positive=True)
    radius_cm = check_number(well_diameter_mm, "well_diameter_mm", "mm", positive=True) / 20.0
    return float(volume * 1e-3 / (np.pi * radius_cm**2))


def water_band_pathlength(
    spectra: xr.DataArray,
    *,
    au_per_cm: float = WATER_BAND_AU_PER_CM,
    wavelengths_nm: tuple[float, float] = WATER_BAND_NM,
    name: str = "spectra",
) -> xr.DataArray:
    """Pathlength (cm) of each well from the near-infrared water band.

    Parameters
    ----------
    spectra : DataArray with dims ("well", "wavelength")
        Raw absorbance (AU), not blank-corrected: the blank holds water too.
    au_per_cm : float
        A(977) − A(900) of 1 cm of water (AU/cm); 0.18 at room temperature (from memory).
    wavelengths_nm : (float, float)
        Reference and band wavelengths (nm), read within 0.5 nm.
    name : str
        How to name the spectra in an error message.

    Returns
    -------
    DataArray with dims ("well",)
        b = (A(977) − A(900)) / ``au_per_cm`` in cm; NaN where a reading is missing or
        the difference is not positive.

    Raises
    ------
    InputError
        A wavelength was not read, or ``au_per_cm`` is not positive.
    """
    au_per_cm = check_number(au_per_cm, "au_per_cm", "AU/cm", positive=True)
    wl = spectra[WAVELENGTH].values
    picked = []
    for target in wavelengths_nm:
        pos = int(np.argmin(np.abs(wl - target)))
        if abs(wl[pos] - target) > WATER_BAND_TOLERANCE_NM:
            raise InputError(
                f"{name}: the water-band pathlength needs readings at {wavelengths_nm[0]:g} and "
                f"{wavelengths_nm[1]:g} nm, but {target:g} nm was not read (read "
                f"{wl[0]:g}-{wl[-1]:g} nm); give pathlength_cm, or volume_ul with "
                "well_diameter_mm, instead")
        picked.append(spectra.isel({WAVELENGTH: pos}, drop=True))
    diff = picked[1] - picked[0]
    b = (diff / au_per_cm).where(diff > 0)
    return b.assign_attrs(units="cm")


def replicate_statistics(values: np.ndarray, u_fit: np.ndarray, *,
                         u_shared: Sequence[np.ndarray] = (),
                         non_negative: bool = False) -> dict[str, float]:
    """Mean, SD, CV and the standard uncertainty of the mean of replicate wells.

    Parameters
    ----------
    values : array, shape (n,)
        Unconstrained concentrations from each well (ordinary least squares, so an absent
        component scatters around 0 on both sides), already multiplied by the well's
        dilution; NaN (no result) entries are left out.
    u_fit : array, shape (n,)
        The noise part of their standard uncertainties (the fit's Type A term, ``u_noise``
        of :func:`mixsolve.unmix`; same unit, same dilution factor).
    u_shared : sequence of arrays, shape (n,) each
        Parts of each well's uncertainty shared by every well of the run (``u_library``,
        ``u_stray``; same unit and dilution factor). Empty: none.
    non_negative : bool
        Apply the non-negativity bound to the mean (the requested fit was NNLS).

    Returns
    -------
    dict
        ``n`` (wells with a result), ``mean`` (of ``values``, unconstrained), ``value``
        (the mean, or 0 where ``non_negative`` and the mean is negative), ``at_zero``
        (whether that happened), ``sd`` (n − 1 denominator; NaN for n < 2), ``cv`` =
        sd / |mean| (NaN for n < 2 or a zero mean), ``u_fit_rms`` = √mean(u_fit²),
        ``u_noise`` and ``u_shared`` (the two parts below) and ``std_uncertainty`` of the
        mean.

    Notes
    -----
    u(mean) = √(u_noise² + u_shared²) with

        u_noise  = √(max(SD², mean(u_fitᵢ²)) / n)
        u_shared = √(Σ_parts mean_i(u_part,i)²)

    Noise part: each well's result scatters by well-to-well effects (pipetting, volume,
    pathlength) plus the measurement noise the fit uncertainty describes, so SD² already
    contains the fit variance and adding the two would count it twice; but SD from two or
    three wells is itself very uncertain and can come out small by chance, so the fit
    variance is kept as a floor: the larger of the "external" (scatter) and "internal"
    (stated uncertainties) estimate, common practice when combining measurements (cf.
    Birge's ratio, R. T. Birge, Phys. Rev. 40, 207 (1932); from memory). With n = 1 this
    is u_fit of that well. A NaN fit uncertainty (``no_dof``) counts as unknown: then only
    SD is used, and with n = 1 the noise part is NaN.

    Shared part: a library or stray-light error moves every well of the run alike
    (correlation +1), so the mean's share of it is the mean of the wells' shares, not
    divided by √n (JCGM 100:2008, 5.2.2 with r = 1: u = Σ cᵢuᵢ, cᵢ = 1/n). A NaN there
    makes the uncertainty NaN.

    Bound: the mean of unconstrained estimates is unbiased; averaging values already held
    at zero is not (an absent component's NNLS values are ≥ 0, so their mean is biased
    upwards by about E[max(0, Z)] = 1/√(2π) ≈ 0.4 u_well whatever n). The bound is
    applied once, to the mean; a mean set to 0 keeps the uncertainty of the unconstrained
    mean. See docs/plates.md.
    """
    values = np.asarray(values, dtype=float)
    u_fit = np.asarray(u_fit, dtype=float)
    keep = np.isfinite(values)
    x, u = values[keep], u_fit[keep]
    shared = [np.asarray(part, dtype=float)[keep] for part in u_shared]
    n = int(x.size)
    nan = float("nan")
    if n == 0:
        return {"n": 0, "mean": nan, "value": nan, "at_zero": False, "sd": nan, "cv": nan,
                "u_fit_rms": nan, "u_noise": nan, "u_shared": nan, "std_uncertainty": nan}
    mean = float(x.mean())
    sd = float(x.std(ddof=1)) if n >= 2 else nan
    cv = sd / abs(mean) if n >= 2 and mean != 0 else nan
    u_rms = float(np.sqrt(np.mean(u**2))) if np.all(np.isfinite(u)) else nan
    variances = [v for v in (sd**2, u_rms**2) if np.isfinite(v)]
    u_noise = float(np.sqrt(max(variances) / n)) if variances else nan
    u_common = float(np.sqrt(sum(np.mean(part) ** 2 for part in shared)))
    at_zero = non_negative and mean < 0
    return {"n": n, "mean": mean, "value": 0.0 if at_zero else mean, "at_zero": at_zero,
            "sd": sd, "cv": cv, "u_fit_rms": u_rms, "u_noise": u_noise,
            "u_shared": u_common, "std_uncertainty": float(np.hypot(u_noise, u_common))}

"""Microplate science without I/O: well geometry, blank, pathlength, replicate statistics.

Wells are named by row letter and column number (``A1`` ... ``H12`` on a 96-well plate,
``A1`` ... ``P24`` on a 384-well plate); ``A01`` is read as ``A1``. Spectra of a plate are
a DataArray with dims ``("well", "wavelength")``.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable, Sequence

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.names import normalise_name
from mixsolve.spectra import WAVELENGTH, check_number

#: Letter case, runs of white space and ``-`` against ``_`` do not tell two samples apart.
_LOOSE_SPACE = re.compile(r"\s+")

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
#: Replicate CV (%) above which a sample is flagged ``high_cv`` (common practice, settable).
DEFAULT_MAX_CV_PERCENT = 20.0
#: Coverage factor of a term whose standard uncertainty is known with many degrees of
#: freedom (the fit's, the library's, stray light's): k = 2, as the budget's
#: (``mixsolve.uncertainty.inputs.DEFAULT_COVERAGE_FACTOR``).
COVERAGE_FACTOR = 2.0
#: Two-sided level of the Student-t coverage factor of a spread estimated from n wells.
T_LEVEL = 0.975


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


def sample_key(name: object) -> str:
    """What two sample names of a layout must not share.

    The normal form (:func:`mixsolve.names.normalise_name`), case-folded, each run of
    white space as one space and ``-`` read as ``_``: ``Ext_03 ``, ``ext-03`` and
    ``EXT_03`` share the key ``ext_03``.
    """
    return _LOOSE_SPACE.sub(" ", normalise_name(name)).casefold().replace("-", "_")


def check_sample_names(samples: Sequence[object], wells: Sequence[str], where: str,
                       lines: Sequence[int] | None = None) -> None:
    """Refuse two spellings of one sample in a layout, naming both, their lines and wells.

    Parameters
    ----------
    samples : sequence
        The sample name of each row as written (empty for rows without one).
    wells : sequence of str
        The well of each row.
    where : str
        The layout's name, for the message.
    lines : sequence of int, optional
        The file line of each row: the first line of each spelling is named.

    Raises
    ------
    InputError
        Two spellings with one :func:`sample_key` (another Unicode form, case, spacing,
        runs of white space, ``-`` against ``_``): pooling them, or splitting one sample
        in two, would be silent. "layout.csv, samples: names 'Ext_03 ' (line 3, well A2)
        and 'ext-03' (line 4, well A3) differ only in case, spacing or - and _; ...".
    """
    spellings: dict[str, dict[str, list[int]]] = {}
    for row, name in enumerate(samples):
        text = str(name)
        if normalise_name(text):
            spellings.setdefault(sample_key(text), {}).setdefault(text, []).append(row)
    for found in spellings.values():
        if len(found) > 1:
            (a, rows_a), (b, rows_b) = list(found.items())[:2]
            shown = (_visible, ascii)[normalise_name(repr(a)) == normalise_name(repr(b))]
            if unicodedata.normalize("NFC", a) == unicodedata.normalize("NFC", b):
                how = "Unicode form"
            elif normalise_name(a).casefold() == normalise_name(b).casefold():
                how = "case or spacing"
            else:
                how = "case, spacing or - and _"

            def place(rows: list[int]) -> str:
                named = [str(wells[r]) for r in rows]
                text = ", ".join(named[:6]) + (f" and {len(named) - 6} more"
                                               if len(named) > 6 else "")
                line = "" if lines is None else f"line {lines[rows[0]]}, "
                return f"{line}well{'s' if len(named) > 1 else ''} {text}"

            raise InputError(
                f"{where}, samples: names {shown(a)} ({place(rows_a)}) and {shown(b)} "
                f"({place(rows_b)}) differ only in {how}; write one name the same way on "
                "every line, or rename one")


def _visible(text: str) -> str:
    """``repr`` with each run of spaces shown as ``\\x20`` escapes (one-line errors
    collapse runs of white space, which would hide the difference)."""
    return re.sub(r" {2,}", lambda m: r"\x20" * len(m.group()), repr(text))


def coverage_factor(dof: float) -> float:
    """Coverage factor of a standard uncertainty with ``dof`` degrees of freedom.

    Notes
    -----
    k = t(0.975, ν), the two-sided 95 % point of Student's t (``scipy.stats.t.ppf``) for
    ν = n − 1 when the spread was estimated from n wells (JCGM 100:2008, G.3 and G.6.4;
    4.30 for n = 3); k = 2 (:data:`COVERAGE_FACTOR`) for ν = inf, a term known with many
    degrees of freedom. NaN for ν < 1.
    """
    if not np.isfinite(dof):
        return COVERAGE_FACTOR
    if dof < 1:
        return float("nan")
    from scipy.stats import t

    return float(t.ppf(T_LEVEL, dof))


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
        (whether that happened), ``sd`` (n − 1 denominator; NaN for n < 2),
        ``cv_percent`` = 100 · sd / |mean| (%; NaN for n < 2 or a zero mean),
        ``u_fit_rms`` = √mean(u_fit²), ``u_noise`` and ``u_shared`` (the two parts below),
        ``std_uncertainty`` of the mean, ``dof`` (degrees of freedom of the noise part:
        n − 1 when the wells' spread sets it, inf when the fit's does), ``coverage_factor``
        k and ``expanded_uncertainty`` U = k · u (below).

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

    Expanded uncertainty: each part keeps its own coverage factor,

        U = √( (k_noise · u_noise)² + (2 · u_shared)² ),   k = U / u(mean)

    with k_noise = t(0.975, n − 1) (Student's t, :func:`coverage_factor`) where the
    noise part is the wells' spread (SD² above the floor, n ≥ 2): an SD from n wells
    has n − 1 degrees of freedom, and mean ± 2 SD/√n covers far less than 95 % for small
    n (JCGM 100:2008, G.3.2 and G.6.4). Where the floor (the fit's variance, from many
    residuals) sets it, k_noise = 2, as for the shared part, whose library and stray
    terms are known with many degrees of freedom and keep k = 2. With n = 3 and the
    spread dominant, k = 4.30.

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
        return {"n": 0, "mean": nan, "value": nan, "at_zero": False, "sd": nan,
                "cv_percent": nan, "u_fit_rms": nan, "u_noise": nan, "u_shared": nan,
                "std_uncertainty": nan, "dof": nan, "coverage_factor": nan,
                "expanded_uncertainty": nan}
    mean = float(x.mean())
    sd = float(x.std(ddof=1)) if n >= 2 else nan
    cv = 100 * sd / abs(mean) if n >= 2 and mean != 0 else nan
    u_rms = float(np.sqrt(np.mean(u**2))) if np.all(np.isfinite(u)) else nan
    variances = [v for v in (sd**2, u_rms**2) if np.isfinite(v)]
    u_noise = float(np.sqrt(max(variances) / n)) if variances else nan
    # the wells' spread sets the noise part: n - 1 degrees of freedom; the fit's floor: many
    dof = float(n - 1) if np.isfinite(sd) and not sd**2 < u_rms**2 else float("inf")
    u_common = float(np.sqrt(sum(np.mean(part) ** 2 for part in shared)))
    u_mean = float(np.hypot(u_noise, u_common))
    expanded = float(np.hypot(coverage_factor(dof) * u_noise, COVERAGE_FACTOR * u_common))
    at_zero = non_negative and mean < 0
    return {"n": n, "mean": mean, "value": 0.0 if at_zero else mean, "at_zero": at_zero,
            "sd": sd, "cv_percent": cv, "u_fit_rms": u_rms, "u_noise": u_noise,
            "u_shared": u_common, "std_uncertainty": u_mean, "dof": dof,
            "coverage_factor": expanded / u_mean if u_mean > 0 else nan,
            "expanded_uncertainty": expanded}

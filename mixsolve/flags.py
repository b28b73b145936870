"""Every flag code and its meaning: status bits of a fitted spectrum and the short codes
they become, the component codes, the codes of plate wells and samples and those of PLS
predictions (docs/flags.md, docs/plates.md).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import NamedTuple

import numpy as np

NO_DOF = 1  # as many unknowns as wavelengths: no residual, uncertainty unknown
MISSING = 2  # some used wavelengths had no reading; fitted on the rest
TOO_FEW = 4  # too few readings left to fit: results are NaN
DEPENDENT = 8  # the wavelengths left make the design rank deficient: results are NaN
ABOVE_RANGE = 16  # peak absorbance above the reliable range
BELOW_RANGE = 32  # peak absorbance below the reliable range
LACK_OF_FIT = 64  # residual larger than the noise model allows
STRUCTURED = 128  # residual has shape beyond the noise's correlation (structure_z)
ILL_CONDITIONED = 256  # the wavelength set amplifies noise > 1000-fold (condition number)
NO_SIGNAL = 512  # every used reading is exactly zero: nothing was measured
TOO_DARK = 1024  # readings too dark to correct for the stated stray light: left out
SHIFTED = 8192  # the fitted wavelength shift is significantly non-zero (fit_shift only)
SATURATED = 16384  # a reading at the instrument's ceiling (a flat top above the range)
SCATTER = 2048  # fitted scatter amplitude significantly non-zero (baseline="scatter")
UNMODELLED_SCATTER = 4096  # scatter-shaped residual while scatter is not modelled

STATUS_CODES: dict[int, str] = {
    NO_DOF: "no_dof",
    MISSING: "missing_readings",
    TOO_FEW: "too_few_readings",
    DEPENDENT: "rank_deficient",
    ABOVE_RANGE: "above_range",
    BELOW_RANGE: "below_range",
    LACK_OF_FIT: "lack_of_fit",
    STRUCTURED: "structured_residual",
    ILL_CONDITIONED: "ill_conditioned",
    NO_SIGNAL: "no_signal",
    TOO_DARK: "too_dark_for_stray",
    SHIFTED: "shifted",
    SATURATED: "saturated_reading",
    SCATTER: "scatter",
    UNMODELLED_SCATTER: "unmodelled_scatter",
}

#: Codes about one component, written ``code:<component>``.
AT_ZERO = "at_zero"  # NNLS held the component at zero
NEGATIVE = "negative"  # OLS gave a negative concentration
#: Written on rows by mixsolve before issue 15 (a risk of the whole design, now the run note
#: ``shift_risk``); kept so that old result files still read and explain.
SHIFT_SENSITIVE = "shift_sensitive"
COMPONENT_CODES: tuple[str, ...] = (AT_ZERO, NEGATIVE, SHIFT_SENSITIVE)

#: Codes of a plate well (docs/plates.md), besides those of its fit.
MARKER = "marker"  # ``marker:<TEXT>``: a non-numeric reading TEXT in the export
NOT_READ = "not_read"
NOT_IN_LAYOUT = "not_in_layout"
EMPTY_WELL = "empty_well"
NO_PATHLENGTH = "no_pathlength"
#: Codes of a plate sample (per component), besides those of its wells.
NO_RESULT = "no_result"
WELLS_WITHOUT_RESULT = "wells_without_result"  # ``wells_without_result:<k>``
SINGLE_WELL = "single_well"
HIGH_CV = "high_cv"

#: Codes of a PLS prediction (docs/flags.md, docs/calibration.md).
T2_ABOVE_95 = "t2_above_95"
T2_ABOVE_99 = "t2_above_99"
Q_ABOVE_95 = "q_above_95"
Q_ABOVE_99 = "q_above_99"
OUTSIDE_RANGE = "outside_range"  # ``outside_range:<component>``
INCOMPLETE_SPECTRUM = "incomplete_spectrum"

#: What each flag code means, in one line (the part of a code before ``:``).
FLAG_MEANINGS: dict[str, str] = {
    STATUS_CODES[MISSING]: "some fitted wavelengths had no reading; fitted on the rest",
    STATUS_CODES[TOO_FEW]: "too few readings left to fit: no result",
    STATUS_CODES[DEPENDENT]: "the readings left cannot separate the components: no result",
    STATUS_CODES[NO_DOF]: "as many unknowns as wavelengths: no fit uncertainty",
    STATUS_CODES[ABOVE_RANGE]: "peak absorbance above the reliable range: dilute",
    STATUS_CODES[BELOW_RANGE]: "peak absorbance below the reliable range: less dilution or "
                               "a longer path",
    STATUS_CODES[NO_SIGNAL]: "every reading is exactly zero: nothing was measured; the zero "
                             "result means nothing",
    STATUS_CODES[LACK_OF_FIT]: "residual larger than the noise model allows",
    STATUS_CODES[TOO_DARK]: "readings too dark to correct for the stated stray light were "
                            "left out; fitted on the rest (dilute or use a shorter path)",
    STATUS_CODES[ILL_CONDITIONED]: "the readings this sample has left (after missing ones) "
                                   "separate the components poorly (scaled condition number "
                                   "above 1000): noise is amplified that much",
    STATUS_CODES[STRUCTURED]: "residual has shape wider than correlated noise: unmodelled "
                              "absorber, scatter or a wavelength shift",
    STATUS_CODES[SCATTER]: "the fitted scatter term a·(λ/λ₀)^-n is significantly non-zero "
                           "(|a| > 3.09 u(a)): a turbid sample; its results are corrected for it",
    STATUS_CODES[UNMODELLED_SCATTER]: "the residual has the λ⁻⁴ shape of scatter, which the "
                                      "fit does not model: refit with baseline scatter or a "
                                      "reference wavelength",
    AT_ZERO: "held at zero by the non-negativity constraint",
    NEGATIVE: "ordinary least squares gave a negative concentration",
    SHIFT_SENSITIVE: "(older result files) a small wavelength error would move this result "
                     "by more than 2 %; now said once for the run (run note shift_risk)",
    STATUS_CODES[SHIFTED]: "the fitted wavelength shift is significantly non-zero: the "
                           "wavelength scale is off by about wavelength_shift_nm",
    STATUS_CODES[SATURATED]: "a reading at the instrument's ceiling (a flat top above the "
                             "reliable range): the readings near the peak are not absorbance",
    MARKER: "non-numeric reading(s) in the export (saturation or error marker): missing at "
            "those wavelengths, fitted on the rest",
    NO_PATHLENGTH: "the water band gave no positive pathlength: no result",
    NOT_READ: "listed in the layout but absent from the export: no result",
    NOT_IN_LAYOUT: "read but not listed in the layout: not fitted",
    EMPTY_WELL: "empty in the layout: not fitted",
    NO_RESULT: "no well of the sample gave a result",
    WELLS_WITHOUT_RESULT: "some wells of the sample gave no result and were left out",
    SINGLE_WELL: "one well only: no SD or CV; the uncertainty is that well's fit uncertainty",
    HIGH_CV: "replicate wells disagree more than the CV limit",
    T2_ABOVE_95: "Hotelling T² above its 95 % limit",
    T2_ABOVE_99: "Hotelling T² above its 99 % limit: outside the calibration space",
    Q_ABOVE_95: "Q residual above its 95 % limit",
    Q_ABOVE_99: "Q residual above its 99 % limit: a spectral feature the calibration does "
                "not explain",
    OUTSIDE_RANGE: "prediction outside the calibrated concentration range",
    INCOMPLETE_SPECTRUM: "missing readings at model wavelengths: no prediction",
}

#: The run note ``shift_risk`` is given when a wavelength error of the stated tolerance
#: would move a quantifiable concentration by more than this fraction (judgement).
SHIFT_FLAG_FRACTION = 0.02
#: Variable-length str dtype (object dtype marked as holding str): netCDF and Zarr store
#: flags as variable-length text, and lazy flags need no computing to find their type.
VLEN_STR = np.dtype(object, metadata={"element_type": str})


def flag_texts(status: np.ndarray, at_zero: np.ndarray, conc: np.ndarray,
               components: list[str], *, ols: bool,
               known: dict[object, str] | None = None) -> np.ndarray:
    """Each spectrum's flag codes joined with ``;`` (docs/flags.md).

    Parameters
    ----------
    status : array of int, shape (...)
        Status bits.
    at_zero : array of bool, shape (..., n_components)
        Components NNLS held at zero.
    conc : array, shape (..., n_components)
        Concentrations.
    components : list of str
    ols : bool
        Add ``negative:<component>`` where a concentration is below zero.
    known : dict, optional
        Texts already built, by bit pattern (shared by the tasks of one call, which must
        have the same components and options); new ones are added.

    Returns
    -------
    array of str (``VLEN_STR``), shape (...)

    Notes
    -----
    Codes in this order: ``STATUS_CODES``, ``at_zero:``, ``negative:`` (reports show them
    doubtful first, :func:`by_severity`). A wavelength error's risk holds for the whole
    design and is a run note (``shift_risk``), not a per-sample code. The codes of a
    spectrum are packed into bits, the distinct bit patterns found by hashing
    (``pandas.factorize``), and each pattern's text is built once, so a million spectra
    cost a few passes over small integer arrays.
    """
    lead = status.shape
    n = len(components)
    status = status.reshape(-1)
    groups = [at_zero.reshape(-1, n)]
    names = [f"{AT_ZERO}:{c}" for c in components]
    if ols:
        groups.append(conc.reshape(-1, n) < 0)
        names += [f"{NEGATIVE}:{c}" for c in components]
    if not status.size:
        return np.empty(lead, dtype=VLEN_STR)
    bits = np.concatenate(groups, axis=1)
    status_bits = max(STATUS_CODES).bit_length()
    if status_bits + bits.shape[1] <= 63:  # one integer key per spectrum
        weights = np.left_shift(1, np.arange(status_bits, status_bits + bits.shape[1]),
                                dtype=np.int64)
        key = status.astype(np.int64) | (bits.view(np.uint8) @ weights)
        index, first = _factorize(key)
        keys: list[object] = key[first].tolist()
    else:  # status and packed code bits as bytes
        rows = np.column_stack([status.astype(np.int64).view(np.uint8).reshape(
            status.size, -1), np.packbits(bits, axis=1, bitorder="little")])
        _, first, index = np.unique(rows, axis=0, return_index=True, return_inverse=True)
        index = index.ravel()
        keys = [row.tobytes() for row in rows[first]]
    known = {} if known is None else known
    texts = np.empty(first.size, dtype=VLEN_STR)
    for k, (i, key_k) in enumerate(zip(first, keys, strict=True)):
        if key_k not in known:
            codes = [code for bit, code in STATUS_CODES.items() if status[i] & bit]
            codes += [name for name, on in zip(names, bits[i], strict=True) if on]
            known[key_k] = ";".join(codes)
        texts[k] = known[key_k]
    return texts[index].reshape(lead)


def _factorize(key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of each key's distinct value, and the first position of each distinct value."""
    import pandas as pd  # xarray imports it already

    index, uniques = pd.factorize(key)
    first = np.full(uniques.size, -1, dtype=np.intp)
    first[index[::-1]] = np.arange(index.size - 1, -1, -1)
    return index, first


# --- Two kinds of doubt (docs/flags.md) --------------------------------------------------
#: Severity of a per-sample code: the result is doubtful, or the sample is worth a look.
DOUBTFUL = "doubtful"
LOOK = "look"
SEVERITIES: tuple[str, ...] = (DOUBTFUL, LOOK)
#: Severity of each per-sample code (the part before ``:``); a code not listed is LOOK.
#: Doubtful: the result should not be used as it is (no result, a reading outside what the
#: instrument can measure, a model that does not fit, a design this sample cannot support,
#: replicates or a calibration that disagree). Everything else is worth a look: the result
#: stands with its uncertainty (docs/flags.md, "Severity").
FLAG_SEVERITY: dict[str, str] = {
    STATUS_CODES[TOO_FEW]: DOUBTFUL,
    STATUS_CODES[DEPENDENT]: DOUBTFUL,
    STATUS_CODES[ABOVE_RANGE]: DOUBTFUL,
    STATUS_CODES[NO_SIGNAL]: DOUBTFUL,
    STATUS_CODES[LACK_OF_FIT]: DOUBTFUL,
    STATUS_CODES[ILL_CONDITIONED]: DOUBTFUL,  # this sample's own design, after missing readings
    STATUS_CODES[SATURATED]: DOUBTFUL,
    MARKER: DOUBTFUL,  # a saturation or error marker in the export
    STATUS_CODES[SCATTER]: LOOK,  # modelled: the result is corrected for it
    STATUS_CODES[UNMODELLED_SCATTER]: DOUBTFUL,  # not modelled: the result is biased
    NO_RESULT: DOUBTFUL,
    NO_PATHLENGTH: DOUBTFUL,
    NOT_READ: DOUBTFUL,
    HIGH_CV: DOUBTFUL,
    INCOMPLETE_SPECTRUM: DOUBTFUL,
    T2_ABOVE_99: DOUBTFUL,
    Q_ABOVE_99: DOUBTFUL,
    OUTSIDE_RANGE: DOUBTFUL,
}


#: Run-note codes of unmix (docs/flags.md, "Run notes"): what each says, in one line.
SHIFT_RISK = "shift_risk"
ILL_CONDITIONED_DESIGN = "ill_conditioned_design"
RUN_NOTE_MEANINGS: dict[str, str] = {
    SHIFT_RISK: "a wavelength error of the stated tolerance would move results by more than "
                "2 % (wavelengths on steep band flanks)",
    ILL_CONDITIONED_DESIGN: "the wavelengths separate the components poorly (scaled "
                            "condition number above 1000): noise is amplified",
}


def order_flags(text: str) -> str:
    """A ``;``-joined flag string with its codes doubtful first (:func:`by_severity`)."""
    return ";".join(by_severity([c for c in str(text).split(";") if c]))


def severity_of(code: str) -> str:
    """The severity (``DOUBTFUL`` or ``LOOK``) of one flag code such as ``at_zero:rose``."""
    return FLAG_SEVERITY.get(code.partition(":")[0], LOOK)


def by_severity(codes: list[str]) -> list[str]:
    """Flag codes ordered doubtful first, keeping their order within a severity."""
    return sorted(codes, key=lambda code: SEVERITIES.index(severity_of(code)))


class RunNote(NamedTuple):
    """A risk that holds for the whole run (the design, not one sample), said once.

    Attributes
    ----------
    code : str
        Short code, e.g. ``shift_risk``, ``bandwidth_mismatch``.
    severity : str
        ``DOUBTFUL`` or ``LOOK``.
    text : str
        One sentence with the risk's size (numbers with units).
    fix : str
        What to do about it, in one clause.
    """

    code: str
    severity: str
    text: str
    fix: str


#: Where a result's run notes are kept: ``attrs[RUN_NOTES_ATTR]``, a JSON list of
#: objects with the fields of :class:`RunNote` (text survives netCDF and Zarr).
RUN_NOTES_ATTR = "run_notes"


def add_run_notes(attrs: dict, notes: list[RunNote]) -> None:
    """Append run notes to a result's attrs (in place; a code already there is replaced)."""
    kept = [n for n in run_notes_of(attrs) if n.code not in {m.code for m in notes}]
    attrs[RUN_NOTES_ATTR] = json.dumps([n._asdict() for n in kept + list(notes)])


def run_notes_of(attrs: Mapping) -> list[RunNote]:
    """The run notes kept in a result's attrs (an empty list when there are none)."""
    return [RunNote(**n) for n in json.loads(attrs.get(RUN_NOTES_ATTR) or "[]")]


#: What to do about each flag code, in one clause (the "what to do" column of docs/flags.md,
#: docs/plates.md and docs/calibration.md); the flags sheet of a results workbook shows it.
FLAG_FIXES: dict[str, str] = {
    STATUS_CODES[MISSING]: "check the instrument export",
    STATUS_CODES[TOO_FEW]: "re-measure the sample",
    STATUS_CODES[DEPENDENT]: "re-measure the sample",
    STATUS_CODES[NO_DOF]: "measure more wavelengths than components, or take the uncertainty "
                          "from replicate measurements",
    STATUS_CODES[ABOVE_RANGE]: "dilute by about suggested_dilution and measure again",
    STATUS_CODES[BELOW_RANGE]: "use a longer cell or less dilution",
    STATUS_CODES[NO_SIGNAL]: "measure the sample; check the export",
    STATUS_CODES[LACK_OF_FIT]: "look at the residual: a missing absorber, scatter, the wrong "
                               "library or noise model",
    STATUS_CODES[TOO_DARK]: "dilute or use a shorter cell",
    STATUS_CODES[ILL_CONDITIONED]: "re-measure the sample",
    STATUS_CODES[STRUCTURED]: "a missing absorber, scatter (--baseline linear or scatter) or a "
                              "wavelength shift (--fit-shift)",
    STATUS_CODES[SCATTER]: "a turbid sample: clarify (centrifuge, filter) if the scatter is "
                           "large beside the absorbance",
    STATUS_CODES[UNMODELLED_SCATTER]: "--baseline scatter, or --reference-wavelength where "
                                      "nothing absorbs; clarify the sample",
    AT_ZERO: "usually absent; if it should be present, check the residual, the library, a "
             "baseline (--baseline offset) or a wavelength shift",
    NEGATIVE: "probably absent, or the model misses something; consider --method nnls",
    SHIFT_SENSITIVE: "as the run note shift_risk: check the wavelength scale",
    STATUS_CODES[SHIFTED]: "check the wavelength scale (mixsolve instrument wavelength); "
                           "correct it with --wavelength-offset",
    STATUS_CODES[SATURATED]: "dilute or use a shorter cell and measure again",
    MARKER: "dilute or re-read the wells; check the export",
    NO_PATHLENGTH: "check the water band readings, or state the pathlength or volume",
    NOT_READ: "check the export and the layout",
    NOT_IN_LAYOUT: "add the well to the layout if it holds a sample",
    EMPTY_WELL: "nothing to do if the well is empty",
    NO_RESULT: "see the flags of the sample's wells",
    WELLS_WITHOUT_RESULT: "see the flags of the wells left out",
    SINGLE_WELL: "measure replicate wells for an SD",
    HIGH_CV: "look at the wells: a pipetting error, a bubble, an outlier",
    T2_ABOVE_95: "compare with the calibration mixtures",
    T2_ABOVE_99: "outside the calibration: extend the calibration or use CLS",
    Q_ABOVE_95: "look at the spectrum's residual",
    Q_ABOVE_99: "a feature the calibration does not explain: check the sample, extend the "
                "calibration",
    OUTSIDE_RANGE: "dilute into the calibrated range, or extend the calibration",
    INCOMPLETE_SPECTRUM: "re-measure the sample over the model's wavelengths",
}


def flag_fix(code: str) -> str:
    """What to do about one flag code such as ``at_zero:rose`` ("" for an unknown code)."""
    return FLAG_FIXES.get(code.partition(":")[0], "")

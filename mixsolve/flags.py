"""Status bits of a fitted spectrum and the short flag codes they become (docs/flags.md)."""

from __future__ import annotations

import numpy as np

NO_DOF = 1  # as many unknowns as wavelengths: no residual, uncertainty unknown
MISSING = 2  # some used wavelengths had no reading; fitted on the rest
TOO_FEW = 4  # too few readings left to fit: results are NaN
DEPENDENT = 8  # the wavelengths left make the design rank deficient: results are NaN
ABOVE_RANGE = 16  # peak absorbance above the reliable range
BELOW_RANGE = 32  # peak absorbance below the reliable range
LACK_OF_FIT = 64  # residual larger than the noise model allows
STRUCTURED = 128  # residual has shape (runs test), not noise
ILL_CONDITIONED = 256  # the wavelength set amplifies noise > 1000-fold (condition number)
NO_SIGNAL = 512  # every used reading is exactly zero: nothing was measured

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
}

#: A component is flagged shift-sensitive when a wavelength error of the stated tolerance
#: would move a quantifiable concentration by more than this fraction (judgement).
SHIFT_FLAG_FRACTION = 0.02
#: Variable-length str dtype (object dtype marked as holding str): netCDF and Zarr store
#: flags as variable-length text, and lazy flags need no computing to find their type.
VLEN_STR = np.dtype(object, metadata={"element_type": str})


def flag_texts(status: np.ndarray, at_zero: np.ndarray, conc: np.ndarray, u: np.ndarray,
               bias: np.ndarray | None, components: list[str], *, ols: bool,
               tolerance_nm: float, known: dict[object, str] | None = None) -> np.ndarray:
    """Each spectrum's flag codes joined with ``;`` (docs/flags.md).

    Parameters
    ----------
    status : array of int, shape (...)
        Status bits.
    at_zero : array of bool, shape (..., n_components)
        Components NNLS held at zero.
    conc, u : arrays, shape (..., n_components)
        Concentrations and their standard uncertainties (one unit).
    bias : array, shape (..., n_components), or None
        Concentration bias per +1 nm of wavelength error (same unit per nm); None: no
        ``shift_sensitive`` codes.
    components : list of str
    ols : bool
        Add ``negative:<component>`` where a concentration is below zero.
    tolerance_nm : float
        Wavelength accuracy for ``shift_sensitive``: flagged when a quantifiable
        concentration (c > 3u) would move by more than ``SHIFT_FLAG_FRACTION`` of itself.
    known : dict, optional
        Texts already built, by bit pattern (shared by the tasks of one call, which must
        have the same components and options); new ones are added.

    Returns
    -------
    array of str (``VLEN_STR``), shape (...)

    Notes
    -----
    Codes in this order: ``STATUS_CODES``, ``at_zero:``, ``negative:``,
    ``shift_sensitive:``. The codes of a spectrum are packed into bits, the distinct bit
    patterns found by hashing (``pandas.factorize``), and each pattern's text is built
    once, so a million spectra cost a few passes over small integer arrays.
    """
    lead = status.shape
    n = len(components)
    status = status.reshape(-1)
    groups = [at_zero.reshape(-1, n)]
    names = [f"at_zero:{c}" for c in components]
    conc, u = conc.reshape(-1, n), u.reshape(-1, n)
    if ols:
        groups.append(conc < 0)
        names += [f"negative:{c}" for c in components]
    if bias is not None:
        with np.errstate(invalid="ignore"):
            quantified = conc > 3 * np.where(np.isfinite(u), u, 0.0)
            risky = np.abs(bias.reshape(-1, n)) * tolerance_nm > \
                SHIFT_FLAG_FRACTION * np.abs(conc)
        groups.append(quantified & risky)
        names += [f"shift_sensitive:{c}" for c in components]
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

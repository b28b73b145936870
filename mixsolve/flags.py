"""Status bits of a fitted spectrum and the short flag codes they become (docs/flags.md)."""

from __future__ import annotations

NO_DOF = 1  # as many unknowns as wavelengths: no residual, uncertainty unknown
MISSING = 2  # some used wavelengths had no reading; fitted on the rest
TOO_FEW = 4  # too few readings left to fit: results are NaN
DEPENDENT = 8  # the wavelengths left make the design rank deficient: results are NaN
ABOVE_RANGE = 16  # peak absorbance above the reliable range
BELOW_RANGE = 32  # peak absorbance below the reliable range
LACK_OF_FIT = 64  # residual larger than the noise model allows
STRUCTURED = 128  # residual has shape (runs test), not noise
ILL_CONDITIONED = 256  # the wavelength set amplifies noise > 1000-fold (condition number)

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
}

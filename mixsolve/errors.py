"""Exceptions and warnings raised by mixsolve.

Every error a user can cause derives from :class:`InputError`, which is also a
``ValueError`` so callers may catch either. The command line maps these to exit
code 2 with the message on one line; anything else is a bug (exit code 1).
"""

from __future__ import annotations


class MixsolveError(Exception):
    """Root of all mixsolve exceptions."""


class InputError(MixsolveError, ValueError):
    """Bad input: a file, a table cell, an option or an array the user supplied.

    The message names where (file, line, column or sample), the offending value
    and what would be accepted.
    """


class FileFormatError(InputError):
    """A file could not be read as the table, library or model it should be."""


class UnitError(InputError):
    """A unit string was not understood or cannot be converted as asked."""


class SolveError(InputError):
    """The system of equations cannot be solved as posed (underdetermined, rank deficient)."""


class InfiniteReadingError(InputError):
    """An absorbance value is infinite (a missing reading is NaN).

    ``spectrum`` (position among the flattened spectra of the batch) and ``reading``
    (position among its wavelengths) say where, when known.
    """

    def __init__(self, message: str, spectrum: int | None = None,
                 reading: int | None = None) -> None:
        super().__init__(message)
        self.spectrum = spectrum
        self.reading = reading


class OutputError(MixsolveError, OSError):
    """An output file could not be written."""


class MixsolveWarning(UserWarning):
    """Root of mixsolve warnings."""


class LinearityWarning(MixsolveWarning):
    """A component's standards series is short or not linear enough."""


class ExtrapolationWarning(MixsolveWarning):
    """Measured wavelengths fall outside the library and were left out of the fit."""


class IllConditionedWarning(MixsolveWarning):
    """The wavelength set separates the components poorly (large condition number)."""


class LargeUncertaintyWarning(MixsolveWarning):
    """A stated relative uncertainty is above 10 %: perhaps a percentage written where a
    fraction belongs (0.8 for 0.8 %)."""


class OutdatedLibraryWarning(MixsolveWarning):
    """A library file built from standards before libraries kept their error's correlation
    (no ``error_pattern``): its u(ε) is taken as fully correlated, which can be several-fold
    off; rebuild it from the standards."""


class RenamedWarning(MixsolveWarning, FutureWarning):
    """A parameter or option was given by its old name, which works for one more release.

    The message names the new spelling; the old one will then be refused.
    """


def renamed(old: str, new: str, old_value: object, new_value: object,
            stacklevel: int = 3) -> object:
    """The value of a renamed keyword: ``new_value``, or ``old_value`` with a warning.

    Call it from the public function that renamed the keyword: the default ``stacklevel``
    points the :class:`RenamedWarning` at that function's caller.

    Raises
    ------
    InputError
        Both spellings given.
    """
    import warnings

    if old_value is None:
        return new_value
    if new_value is not None:
        raise InputError(f"{old} is the old name of {new}; give {new} only")
    warnings.warn(f"{old} is now called {new}; the old name works until the next release",
                  RenamedWarning, stacklevel=stacklevel)
    return old_value

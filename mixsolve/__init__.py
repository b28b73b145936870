"""mixsolve: resolve overlapping absorbance spectra into concentrations.

mixsolve keeps libraries of pure-component absorptivity spectra built from an analyst's own
standards, resolves measured spectra into concentrations with standard uncertainties by
least squares over a chosen wavelength window, and records whether each result is sound.
Everything is labelled with xarray; units travel with the numbers (pint).
"""

from mixsolve._version import __version__
from mixsolve.diagnostics.check import check_wavelengths
from mixsolve.diagnostics.choose import choose_wavelengths
from mixsolve.errors import InputError, MixsolveError, MixsolveWarning
from mixsolve.io.library_store import read_library, write_library
from mixsolve.io.spectra_io import read_spectra
from mixsolve.library import build_library, import_absorptivities, resample_library
from mixsolve.noise import NoiseModel
from mixsolve.report.tables import results_table
from mixsolve.solve.unmix import unmix
from mixsolve.spectra import make_spectra

__all__ = [
    "InputError",
    "MixsolveError",
    "MixsolveWarning",
    "NoiseModel",
    "__version__",
    "build_library",
    "check_wavelengths",
    "choose_wavelengths",
    "import_absorptivities",
    "make_spectra",
    "read_library",
    "read_spectra",
    "resample_library",
    "results_table",
    "unmix",
    "write_library",
]

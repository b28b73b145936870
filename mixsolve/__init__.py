"""mixsolve: resolve overlapping absorbance spectra into concentrations.

mixsolve keeps libraries of pure-component absorptivity spectra built from an analyst's own
standards, resolves measured spectra into concentrations with standard uncertainties by
least squares over a chosen wavelength window, and records whether each result is sound;
where spectra are not additive, it calibrates PLS models from mixtures of known composition.
Everything is labelled with xarray; units travel with the numbers (pint).
"""

from mixsolve._version import __version__
from mixsolve.diagnostics.check import check_wavelengths
from mixsolve.diagnostics.choose import choose_wavelengths
from mixsolve.errors import InputError, MixsolveError, MixsolveWarning
from mixsolve.io.layout_io import read_layout
from mixsolve.io.library_store import read_library, write_library
from mixsolve.io.model_store import read_model, write_model
from mixsolve.io.plates import read_plate
from mixsolve.io.spectra_io import read_spectra
from mixsolve.library import build_library, import_absorptivities, resample_library
from mixsolve.noise import NoiseModel
from mixsolve.report.tables import results_table
from mixsolve.solve.pls import calibrate, predict
from mixsolve.solve.unmix import unmix
from mixsolve.spectra import make_spectra
from mixsolve.workflows.plate import run_plates
from mixsolve.workflows.plate_analysis import analyse_plate

__all__ = [
    "InputError",
    "MixsolveError",
    "MixsolveWarning",
    "NoiseModel",
    "__version__",
    "analyse_plate",
    "build_library",
    "calibrate",
    "check_wavelengths",
    "choose_wavelengths",
    "import_absorptivities",
    "make_spectra",
    "predict",
    "read_layout",
    "read_library",
    "read_model",
    "read_plate",
    "read_spectra",
    "resample_library",
    "results_table",
    "run_plates",
    "unmix",
    "write_library",
    "write_model",
]

"""mixsolve: resolve overlapping absorbance spectra into concentrations.

mixsolve keeps libraries of pure-component absorptivity spectra built from an analyst's own
standards, resolves measured spectra into concentrations with standard uncertainties by
least squares over a chosen wavelength window, and records whether each result is sound;
where spectra are not additive, it calibrates PLS models from mixtures of known composition.
It states where each uncertainty comes from (a GUM budget) and checks the instrument itself.
Everything is labelled with xarray; units travel with the numbers (pint).
"""

from mixsolve._version import __version__
from mixsolve.corrections import cell_blank, correct_cells, shift_wavelengths
from mixsolve.diagnostics.absorbance_scale import check_absorbance_scale
from mixsolve.diagnostics.check import check_wavelengths
from mixsolve.diagnostics.choose import choose_wavelengths
from mixsolve.diagnostics.stray_light import check_stray_light
from mixsolve.diagnostics.wavelength_scale import check_wavelength_scale
from mixsolve.errors import InputError, MixsolveError, MixsolveWarning
from mixsolve.io.cubes import read_cube, write_cube
from mixsolve.io.layout_io import read_layout
from mixsolve.io.library_store import read_library, write_library
from mixsolve.io.model_store import read_model, write_model
from mixsolve.io.plates import read_plate
from mixsolve.io.spectra_io import read_spectra
from mixsolve.library import build_library, import_absorptivities, resample_library
from mixsolve.noise import NoiseModel
from mixsolve.repeatability import repeatability
from mixsolve.report.tables import results_table
from mixsolve.solve.pls_calibrate import calibrate
from mixsolve.solve.pls_predict import predict
from mixsolve.solve.unmix import flags_of, unmix
from mixsolve.spectra import make_spectra
from mixsolve.uncertainty import budget_table, uncertainty_budget
from mixsolve.volumetric import parse_dilution
from mixsolve.workflows.plate import run_plates
from mixsolve.workflows.plate_analysis import analyse_plate

__all__ = [
    "InputError",
    "MixsolveError",
    "MixsolveWarning",
    "NoiseModel",
    "__version__",
    "analyse_plate",
    "budget_table",
    "build_library",
    "calibrate",
    "cell_blank",
    "check_absorbance_scale",
    "check_stray_light",
    "check_wavelength_scale",
    "check_wavelengths",
    "choose_wavelengths",
    "correct_cells",
    "flags_of",
    "import_absorptivities",
    "make_spectra",
    "parse_dilution",
    "predict",
    "read_cube",
    "read_layout",
    "read_library",
    "read_model",
    "read_plate",
    "read_spectra",
    "repeatability",
    "resample_library",
    "results_table",
    "run_plates",
    "shift_wavelengths",
    "uncertainty_budget",
    "unmix",
    "write_cube",
    "write_library",
    "write_model",
]

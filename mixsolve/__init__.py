"""mixsolve: resolve overlapping absorbance spectra into concentrations.

mixsolve keeps libraries of pure-component absorptivity spectra built from an analyst's own
standards, resolves measured spectra into concentrations with standard uncertainties by
least squares over a chosen wavelength window, and records whether each result is sound;
where spectra are not additive, it calibrates PLS models from mixtures of known composition.
It states where each uncertainty comes from (a GUM budget) and checks the instrument itself.
Everything is labelled with xarray; units travel with the numbers (pint).
"""

from typing import TYPE_CHECKING

from mixsolve._version import __version__
from mixsolve.errors import InputError, MixsolveError, MixsolveWarning

# The public API: each name and the module that defines it, imported on first use so that
# `import mixsolve` (and every CLI call) does not pay for scikit-learn, scipy.stats,
# matplotlib and dask up front. Type checkers, IDEs and linters cannot read this dict: for
# them the same names are imported under TYPE_CHECKING and listed in __all__ (a computed
# __all__ would hide them). tests/test_public_api.py checks that the three lists agree.
_LAZY: dict[str, str] = {
    "NoiseModel": "mixsolve.noise",
    "analyse_plate": "mixsolve.plate.analysis",
    "apply_equations": "mixsolve.equations.apply",
    "BudgetInputs": "mixsolve.uncertainty.inputs",
    "budget_table": "mixsolve.uncertainty.budget",
    "build_library": "mixsolve.library",
    "calibrate": "mixsolve.pls.calibrate",
    "cell_blank": "mixsolve.uncertainty.corrections",
    "check_absorbance_scale": "mixsolve.instrument.absorbance_scale",
    "check_equations": "mixsolve.equations.check",
    "check_stray_light": "mixsolve.instrument.stray_light",
    "check_wavelength_scale": "mixsolve.instrument.wavelength_scale",
    "check_wavelengths": "mixsolve.wavelengths.check",
    "choose_wavelengths": "mixsolve.wavelengths.choose",
    "correct_cells": "mixsolve.uncertainty.corrections",
    "flags_of": "mixsolve.solve.unmix",
    "import_absorptivities": "mixsolve.library",
    "make_spectra": "mixsolve.spectra",
    "parse_dilution": "mixsolve.uncertainty.volumetric",
    "predict": "mixsolve.pls.predict",
    "prepared_standard": "mixsolve.uncertainty.preparation",
    "read_cube": "mixsolve.io.cubes",
    "read_equations": "mixsolve.io.equations_io",
    "read_layout": "mixsolve.io.layout_io",
    "read_library": "mixsolve.io.library_store",
    "read_model": "mixsolve.io.model_store",
    "read_plate": "mixsolve.io.plates",
    "read_results": "mixsolve.io.results_io",
    "read_spectra": "mixsolve.io.spectra_io",
    "repeatability": "mixsolve.instrument.repeatability",
    "resample_library": "mixsolve.library",
    "results_table": "mixsolve.report.tables",
    "run_plates": "mixsolve.workflows.plate",
    "shift_wavelengths": "mixsolve.uncertainty.corrections",
    "uncertainty_budget": "mixsolve.uncertainty.budget",
    "unmix": "mixsolve.solve.unmix",
    "write_cube": "mixsolve.io.cubes",
    "write_library": "mixsolve.io.library_store",
    "write_model": "mixsolve.io.model_store",
}

if TYPE_CHECKING:
    from mixsolve.equations.apply import apply_equations
    from mixsolve.equations.check import check_equations
    from mixsolve.instrument.absorbance_scale import check_absorbance_scale
    from mixsolve.instrument.repeatability import repeatability
    from mixsolve.instrument.stray_light import check_stray_light
    from mixsolve.instrument.wavelength_scale import check_wavelength_scale
    from mixsolve.io.cubes import read_cube, write_cube
    from mixsolve.io.equations_io import read_equations
    from mixsolve.io.layout_io import read_layout
    from mixsolve.io.library_store import read_library, write_library
    from mixsolve.io.model_store import read_model, write_model
    from mixsolve.io.plates import read_plate
    from mixsolve.io.results_io import read_results
    from mixsolve.io.spectra_io import read_spectra
    from mixsolve.library import build_library, import_absorptivities, resample_library
    from mixsolve.noise import NoiseModel
    from mixsolve.plate.analysis import analyse_plate
    from mixsolve.pls.calibrate import calibrate
    from mixsolve.pls.predict import predict
    from mixsolve.report.tables import results_table
    from mixsolve.solve.unmix import flags_of, unmix
    from mixsolve.spectra import make_spectra
    from mixsolve.uncertainty.budget import budget_table, uncertainty_budget
    from mixsolve.uncertainty.corrections import cell_blank, correct_cells, shift_wavelengths
    from mixsolve.uncertainty.inputs import BudgetInputs
    from mixsolve.uncertainty.preparation import prepared_standard
    from mixsolve.uncertainty.volumetric import parse_dilution
    from mixsolve.wavelengths.check import check_wavelengths
    from mixsolve.wavelengths.choose import choose_wavelengths
    from mixsolve.workflows.plate import run_plates


def __getattr__(name: str) -> object:
    """Import a public name from its module the first time it is asked for."""
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'mixsolve' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


__all__ = [
    "BudgetInputs",
    "InputError",
    "MixsolveError",
    "MixsolveWarning",
    "NoiseModel",
    "__version__",
    "analyse_plate",
    "apply_equations",
    "budget_table",
    "build_library",
    "calibrate",
    "cell_blank",
    "check_absorbance_scale",
    "check_equations",
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
    "prepared_standard",
    "read_cube",
    "read_equations",
    "read_layout",
    "read_library",
    "read_model",
    "read_plate",
    "read_results",
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

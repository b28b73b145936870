"""A plain ``mixsolve unmix`` imports only what it uses (issue 19 item 1).

Not timed (tests never assert on wall-clock time): the set of modules a fresh interpreter
holds after the command. The time is measured by ``benchmarks/bench_cli_start.py``
(docs/performance.md, "Starting the command line").

Kept, because a plain run uses them: numpy, pandas, xarray, scipy.linalg and scipy.special
(the fit), h5py and h5netcdf (reading the library), ``mixsolve.pls.model`` (recognising a
model file) and the budget's settings (``mixsolve.uncertainty.inputs``, ``corrections``,
``volumetric``: ``MeasurementOptions`` holds them). pint and dask are not in the list:
xarray itself imports them, when they are installed, the first time it builds an index or
checks an array for chunks (``xarray.namedarray.pycompat``); mixsolve's own unit registry
is not built (checked below).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr
from helpers_imports import modules_after

import mixsolve as ms

#: Modules that serve one option (or another command) and a plain unmix must not import.
AVOIDABLE = (
    "scipy.stats", "scipy.optimize", "scipy.interpolate", "scipy.signal",
    "sklearn", "matplotlib", "statsmodels", "numba", "distributed", "zarr", "openpyxl",
    "mixsolve.plate", "mixsolve.pls.predict", "mixsolve.pls.calibrate",
    "mixsolve.instrument", "mixsolve.wavelengths", "mixsolve.uncertainty.budget",
    "mixsolve.uncertainty.measurement_model", "mixsolve.uncertainty.montecarlo",
    "mixsolve.report.figures", "mixsolve.report.html", "mixsolve.report.unmix_page",
    "mixsolve.workflows.plate", "mixsolve.workflows.calibrate",
)
#: What the run reports after the command: mixsolve's unit registry built or not.
REGISTRY = ("\nfrom mixsolve import units\n"
            "assert units.registry.cache_info().currsize == 0, 'unit registry built'\n")


def _files(tmp_path: Path, molar_library: xr.Dataset, mix_spectra) -> tuple[Path, Path]:
    """A library file and a one-spectrum CSV (synthetic: invented bands, seeded noise)."""
    lib = tmp_path / "lib.nc"
    ms.write_library(molar_library, lib)
    spectrum = mix_spectra(np.array([2e-5, 1e-5, 3e-5]))
    noise = np.random.default_rng(19).normal(0.0, 1e-3, spectrum.shape[-1])
    rows = "\n".join(f"{w:g},{a:.6f}" for w, a in
                     zip(spectrum["wavelength"].values, spectrum.values[0] + noise, strict=True))
    one = tmp_path / "one.csv"
    one.write_text("wavelength_nm,s1\n" + rows + "\n", encoding="utf-8")
    return lib, one


def _run(*args: object) -> str:
    """Code that runs ``mixsolve ARGS`` in the fresh interpreter and checks it succeeded."""
    return ("from click.testing import CliRunner\n"
            "from mixsolve.cli import main\n"
            f"r = CliRunner().invoke(main, {[str(a) for a in args]!r})\n"
            "assert r.exit_code == 0, r.output\n")


def test_plain_unmix_imports_no_option_module(tmp_path, molar_library, mix_spectra):
    """``mixsolve unmix LIB one.csv --out r.csv``: none of AVOIDABLE, no unit registry."""
    lib, one = _files(tmp_path, molar_library, mix_spectra)
    out = tmp_path / "r.csv"
    assert modules_after(_run("unmix", lib, one, "--out", out) + REGISTRY, AVOIDABLE) == []
    assert out.exists()


def test_the_options_import_what_they_need(tmp_path, molar_library, mix_spectra):
    """The check above can see an import: the report, the budget and a noise model bring
    in matplotlib, the budget's modules and scipy.stats (the lack-of-fit p-value)."""
    lib, one = _files(tmp_path, molar_library, mix_spectra)
    code = _run("unmix", lib, one, "--out", tmp_path / "r.csv", "--report",
                tmp_path / "r.html", "--budget", tmp_path / "b.csv", "--noise", "0.001")
    assert set(modules_after(code, AVOIDABLE)) >= {
        "matplotlib", "mixsolve.report.figures", "mixsolve.uncertainty.budget",
        "scipy.stats"}

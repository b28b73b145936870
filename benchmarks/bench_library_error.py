"""Cost of the library's error in ``unmix``: the same call with and without error patterns.

Same invented problem as ``bench_nnls.py`` (300 wavelengths, 5 components, ~30 % absent).
The library is built with ``build_library`` from five synthetic standards per component,
each declared to 1.5 % with a shared stock declared to 1.5 %, so it carries 35 error
patterns (25 standards' scatter, 5 preparation, 5 stock). Timed in this one process, best of
``--repeat``:

- ``with``: ``unmix`` with that library (u_library computed for every spectrum);
- ``without``: the same library with its ``error_pattern`` variable and ``u_absorptivity``
  dropped (no library error stated: u_library = 0, nothing propagated), i.e. what every
  call cost before the library's error was propagated.

The ratio with/without is the target of issue 14 (no worse than 1.3). Printed for the
engine ``auto`` picks and for the numpy engine, eager, and for a dask-backed run.

With ``--noise PRESET`` (or a σ_A in AU) every call also states the noise, so the
lack-of-fit test runs, and with the library's error it adds the error the library leaves
in the residual (a product of m·n² per spectrum).

Run: ``python benchmarks/bench_library_error.py [--sizes 10000,100000] [--noise PRESET]``.
Never a test.
"""

from __future__ import annotations

import argparse
import os
import warnings

import numpy as np
import pandas as pd
import xarray as xr
from bench_nnls import WAVELENGTHS_NM, best_of, design, spectra
from bench_unmix import labelled

import mixsolve as ms
from mixsolve.solve.engine import ENGINE_VARIABLE


def library_from_standards(k: np.ndarray, seed: int = 7) -> xr.Dataset:
    """Five synthetic standards per component (1.5 % preparation, 1.5 % stock, declared)."""
    rng = np.random.default_rng(seed)
    rows, readings = [], []
    for j in range(k.shape[1]):
        stock = 1.0 + 0.015 * rng.standard_normal()
        for level in (0.2, 0.4, 0.6, 0.8, 1.0):
            nominal = level / k[:, j].max()
            actual = nominal * stock * (1.0 + 0.015 * rng.standard_normal())
            readings.append(k[:, j] * actual + 0.002 * rng.standard_normal(k.shape[0]))
            rows.append({"sample": f"c{j}_{level:g}", "component": f"c{j}",
                         "concentration": nominal, "unit": "g/L",
                         "u_concentration": 0.015 * nominal, "stock": f"stock {j}",
                         "u_stock_rel": 0.015})
    sheet = pd.DataFrame(rows)
    standards = ms.make_spectra(np.array(readings), WAVELENGTHS_NM, sheet["sample"].tolist())
    return ms.build_library(standards, sheet, source="invented benchmark standards")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="10000,100000")
    parser.add_argument("--chunk", type=int, default=32768)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--noise", default=None,
                        help="state a noise preset or σ_A (AU) to every call, so the lack-of-fit "
                        "test runs too (with the library's error left in the residual) [none]")
    args = parser.parse_args()
    options = {} if args.noise is None else {
        "noise": float(args.noise) if args.noise[0].isdigit() else args.noise}
    warnings.simplefilter("ignore")
    k = design()
    with_error = library_from_standards(k)
    without = with_error.drop_vars(["error_pattern", "error_kind", "error_source"])
    without["u_absorptivity"][:] = np.nan
    print(f"noise stated: {args.noise or 'none (no lack-of-fit test)'}")
    print(f"library: {with_error.sizes['error_source']} error patterns, "
          f"{with_error.sizes['component']} components, {with_error.sizes['wavelength']} "
          "wavelengths")
    ms.unmix(labelled(spectra(500, k)), with_error)  # warm up
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    print(f"{'N':>9} {'run':<14} {'with s':>9} {'without s':>10} {'ratio':>7}")
    for n in (int(s) for s in args.sizes.split(",")):
        sp = labelled(spectra(n, k))
        runs = {
            "eager, auto": lambda lib, sp=sp: ms.unmix(sp, lib, **options),
            "eager, numpy": None,
            "dask, auto": lambda lib, sp=sp: ms.unmix(sp.chunk({"sample": args.chunk}), lib,
                                                      **options)
            .drop_vars(["fitted", "residual"]).compute(),
        }
        for name, run in runs.items():
            if name == "eager, numpy":
                os.environ[ENGINE_VARIABLE] = "numpy"
                run = runs["eager, auto"]
            try:
                t_with = best_of(args.repeat, lambda run=run: run(with_error))
                t_without = best_of(args.repeat, lambda run=run: run(without))
            finally:
                os.environ.pop(ENGINE_VARIABLE, None)
            print(f"{n:>9} {name:<14} {t_with:>9.3f} {t_without:>10.3f} "
                  f"{t_with / t_without:>7.2f}")
    print(f"load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()

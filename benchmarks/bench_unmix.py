"""The whole ``mixsolve.unmix`` call against the scipy.optimize.nnls loop; time against N.

Same invented problem as ``bench_nnls.py`` (300 wavelengths, 5 components, ~30 % absent),
as a labelled spectra array and a mixsolve library. Timed in this one process:

1. ``unmix`` eager (numpy-backed), everything included: validation, design, the NNLS fit,
   standard uncertainties, trust checks, shift bias, flags, and the fitted and residual
   spectra (which an eager result computes when they are first read) — against
   ``scipy.optimize.nnls`` alone in a loop over the same spectra (timed on the first
   ``--scipy-sample`` spectra, extrapolated linearly; stated in the output). Printed for
   the engine ``auto`` picks (compiled when numba is installed), for the same call followed
   by ``result.load()`` (every spectra-sized output held in memory), and for the numpy
   engine (``MIXSOLVE_ENGINE=numpy``).
2. Time against N: ``unmix`` on dask-backed spectra in chunks of ``--chunk`` spectra,
   computing every per-spectrum result (the fitted and residual spectra are left out, as
   10⁶ of them would need 4.8 GB), for N = 10⁴, 10⁵, 10⁶; printed as µs per spectrum,
   which is constant when time is linear.

Run: ``python benchmarks/bench_unmix.py [--sizes 10000,100000,1000000]``. Never a test.
"""

from __future__ import annotations

import argparse
import os
import time
import warnings

import numpy as np
import xarray as xr
from bench_nnls import WAVELENGTHS_NM, best_of, blas_report, design, spectra
from scipy.optimize import nnls

import mixsolve as ms
from mixsolve.solve.engine import ENGINE_VARIABLE, choose_engine


def library(k: np.ndarray) -> xr.Dataset:
    da = xr.DataArray(k.T, dims=("component", "wavelength"),
                      coords={"component": [f"c{i}" for i in range(k.shape[1])],
                              "wavelength": WAVELENGTHS_NM})
    return ms.import_absorptivities(da, "L/(g*cm)", source="invented benchmark bands")


def labelled(a: np.ndarray) -> xr.DataArray:
    return xr.DataArray(a, dims=("sample", "wavelength"),
                        coords={"wavelength": WAVELENGTHS_NM}, name="absorbance")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="10000,100000,1000000")
    parser.add_argument("--eager-sizes", default="10000,100000")
    parser.add_argument("--chunk", type=int, default=32768)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--scipy-sample", type=int, default=20000)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    k = design()
    lib = library(k)
    ms.unmix(labelled(spectra(500, k)), lib)  # warm up
    print(f"BLAS: {blas_report()}")
    print(f"engine for 1e5 spectra: {choose_engine('auto', 100_000)}")
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    print("1. whole unmix (eager) vs the scipy.optimize.nnls loop (ratios: scipy loop / unmix)")
    print(f"{'N':>9} {'unmix s':>9} {'+load s':>9} {'numpy s':>9} {'scipy loop s':>13} "
          f"{'unmix':>7} {'+load':>7} {'numpy':>7}")
    for n in (int(s) for s in args.eager_sizes.split(",")):
        a = spectra(n, k)
        sp = labelled(a)
        t_auto = best_of(args.repeat, lambda sp=sp: ms.unmix(sp, lib))
        t_load = best_of(args.repeat, lambda sp=sp: ms.unmix(sp, lib).load())
        os.environ[ENGINE_VARIABLE] = "numpy"
        try:
            t_numpy = best_of(args.repeat, lambda sp=sp: ms.unmix(sp, lib))
        finally:
            os.environ.pop(ENGINE_VARIABLE)
        sample = min(n, args.scipy_sample)
        start = time.perf_counter()
        for row in a[:sample]:
            nnls(k, row)
        t_scipy = (time.perf_counter() - start) * n / sample
        note = "" if sample == n else f"  (scipy timed on {sample}, x{n / sample:g})"
        print(f"{n:>9} {t_auto:>9.3f} {t_load:>9.3f} {t_numpy:>9.3f} {t_scipy:>13.3f} "
              f"{t_scipy / t_auto:>7.1f} {t_scipy / t_load:>7.1f} {t_scipy / t_numpy:>7.1f}"
              f"{note}")
        del a, sp
    print(f"2. time against N: dask-backed unmix, chunks of {args.chunk} spectra, "
          "default threaded scheduler")
    print(f"{'N':>9} {'chunks':>7} {'s':>9} {'us/spectrum':>12}")
    for n in (int(s) for s in args.sizes.split(",")):
        sp = labelled(spectra(n, k)).chunk({"sample": args.chunk})
        start = time.perf_counter()
        ms.unmix(sp, lib).drop_vars(["fitted", "residual"]).compute()
        elapsed = time.perf_counter() - start
        print(f"{n:>9} {len(sp.chunks[0]):>7} {elapsed:>9.2f} {1e6 * elapsed / n:>12.2f}")
        del sp
    print(f"load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()

"""The whole-call targets of issue 19, measured in one run.

Same invented problem as ``bench_nnls.py`` (300 wavelengths, 5 components, ~30 % absent);
the library is built from synthetic standards with declared preparation and stock
(``bench_library_error.py``: 35 error patterns), so u_library is computed inside every
timed call. Timed in this one process, each the best of ``--repeat``:

1. eager ``unmix`` (the engine ``auto`` picks) at each of ``--eager-sizes`` against
   ``scipy.optimize.nnls`` in a loop (timed on the first ``--scipy-sample`` spectra and
   extrapolated linearly, stated in the output) and against the unconstrained floor
   ``pinv(K) @ Aᵀ`` (one GEMM; pinv of K computed outside the timing). Targets:
   at 10⁵ ≥ 30× the scipy loop and ≤ 3× the floor; at 10⁴ ≥ 20× the scipy loop.
2. ``--dask-size`` spectra (default 10⁶) dask-backed, chunked as ``io.cubes`` chunks a
   cube (or ``--chunk`` spectra), every per-spectrum output computed (fitted and residual
   spectra left out: 10⁶ of them would need 4.8 GB) on the default threaded scheduler,
   against the eager call at 10⁵ in µs per spectrum. Target: within 1.2×. Computed as the
   command line computes (``workflows.cluster.compute``: BLAS on one thread for the whole
   run) and with a plain ``.compute()``.

Pauses ``BLAS_IDLE_S`` before each timing (OpenBLAS threads spin after a product).
Run: ``python benchmarks/bench_targets.py [--repeat 5]``. Never a test.
"""

from __future__ import annotations

import argparse
import os
import time
import warnings

import numpy as np
from bench_library_error import library_from_standards
from bench_nnls import BLAS_IDLE_S, design, scipy_loop, spectra
from bench_unmix import labelled

import mixsolve as ms
from mixsolve.solve.engine import choose_engine

#: process CPU seconds (every thread) of the fastest call of the last :func:`best`
CPU = {"last": float("nan")}


def best(repeat: int, func) -> float:
    """Fastest wall time (s) of ``repeat`` calls, each after a pause of BLAS_IDLE_S; its
    process CPU time in ``CPU["last"]`` (less sensitive to other jobs on a shared machine)."""
    times = []
    for _ in range(repeat):
        time.sleep(BLAS_IDLE_S)
        cpu = time.process_time()
        start = time.perf_counter()
        func()
        times.append((time.perf_counter() - start, time.process_time() - cpu))
    wall, CPU["last"] = min(times)
    return wall


def load() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--eager-sizes", default="10000,100000")
    parser.add_argument("--dask-size", type=int, default=1_000_000)
    parser.add_argument("--chunk", type=int, default=None,
                        help="spectra per dask chunk [as io.cubes chunks a cube]")
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--scipy-sample", type=int, default=20000)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    k = design()
    lib = library_from_standards(k)
    pinv = np.linalg.pinv(k)
    ms.unmix(labelled(spectra(20000, k)), lib)  # warm up (compiled engine loaded)
    print(f"library: {lib.sizes['error_source']} error patterns; "
          f"engine at 1e5: {choose_engine('auto', 100_000)}")
    print(f"load average before: {load()}")
    print(f"{'N':>9} {'unmix s':>9} {'pinv s':>9} {'scipy s':>9} {'scipy/unmix':>12} "
          f"{'unmix/pinv':>11} {'us/spectrum':>12} {'cpu us/sp':>10}")
    per_spectrum = {}
    for n in (int(s) for s in args.eager_sizes.split(",")):
        a = spectra(n, k)
        sp = labelled(a)
        t_unmix = best(args.repeat, lambda sp=sp: ms.unmix(sp, lib))
        cpu_unmix = 1e6 * CPU["last"] / n
        t_pinv = best(args.repeat, lambda a=a: pinv @ a.T)
        t_scipy, note = scipy_loop(k, a, args.scipy_sample)
        per_spectrum[n] = 1e6 * t_unmix / n
        print(f"{n:>9} {t_unmix:>9.4f} {t_pinv:>9.4f} {t_scipy:>9.3f} "
              f"{t_scipy / t_unmix:>12.1f} {t_unmix / t_pinv:>11.2f} "
              f"{per_spectrum[n]:>12.3f} {cpu_unmix:>10.3f}{note}")
        del a, sp
    if args.dask_size:
        from mixsolve.io.cubes import chunk_plan
        from mixsolve.workflows.cluster import compute

        n = args.dask_size
        sp = labelled(spectra(n, k))
        plan = {"sample": args.chunk} if args.chunk else chunk_plan(dict(sp.sizes))
        sp = sp.chunk(plan)
        eager = per_spectrum.get(100_000, min(per_spectrum.values()))
        runs = {"cluster.compute": lambda: compute(
                    ms.unmix(sp, lib).drop_vars(["fitted", "residual"])),
                ".compute()": lambda: ms.unmix(sp, lib).drop_vars(
                    ["fitted", "residual"]).compute()}
        for name, run in runs.items():
            t = best(max(1, args.repeat // 2), run)
            print(f"dask {n}, {name}: {len(sp.chunks[0])} chunks of {sp.chunks[0][0]}, "
                  f"{t:.3f} s, {1e6 * t / n:.3f} us/spectrum = {1e6 * t / n / eager:.2f}x "
                  f"the eager call at 1e5; cpu {1e6 * CPU['last'] / n:.3f} us/spectrum")
    print(f"load average after: {load()}")


if __name__ == "__main__":
    main()

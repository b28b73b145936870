"""Batched NNLS against scipy.optimize.nnls in a loop and against unconstrained least squares.

Problem: N spectra × 300 wavelengths × 5 components (invented Gaussian bands, about 30 %
of the components absent in each spectrum, noise 0.003 AU), N = 10⁴, 10⁵, 10⁶.
Timed, each the best of ``--repeat`` runs in this one process (batched and unconstrained
interleaved, so that a change in the machine's load affects both):

- ``numpy``: :func:`mixsolve.solve.batch.nnls_batch` on all N spectra at once, numpy
  engine (the projection is one BLAS product, which uses every core);
- ``compiled``: the same with ``engine="compiled"`` (numba; projection and solve per
  spectrum in compiled code, the spectra shared by one thread per core), when numba is
  installed;
- ``unconstrained``: the least-squares floor, one GEMM ``pinv(K) @ Aᵀ`` (the fastest
  unconstrained batch solve found here; ``numpy.linalg.lstsq(K, Aᵀ)`` is also printed);
- ``scipy loop``: ``scipy.optimize.nnls`` spectrum by spectrum, timed on the first
  ``--scipy-sample`` spectra and extrapolated linearly to N (stated in the output).

Each timing starts after a pause of ``BLAS_IDLE_S`` (OpenBLAS's threads spin for a while
after a product and would compete with the compiled engine's threads). Prints the BLAS
threadpoolctl reports, the load average, the times and the ratios.
Run: ``python benchmarks/bench_nnls.py [--sizes 10000,100000,1000000]``. Never a test.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import time

import numpy as np
from scipy.optimize import nnls
from threadpoolctl import threadpool_info

from mixsolve.solve.batch import nnls_batch
from mixsolve.solve.cls import default_threads

WAVELENGTHS_NM = np.linspace(400.0, 700.0, 300)
CENTRES_NM = (440.0, 500.0, 560.0, 620.0, 670.0)
#: Pause (s) before each timing: OpenBLAS's worker threads keep spinning for a while after
#: a product (its thread timeout), which would take the cores from the compiled engine's
#: threads right after the unconstrained product is timed.
BLAS_IDLE_S = 0.3


def design() -> np.ndarray:
    """K (300 × 5): invented bands, L g⁻¹ cm⁻¹."""
    return np.stack([50.0 * np.exp(-0.5 * ((WAVELENGTHS_NM - c) / 32.0) ** 2)
                     for c in CENTRES_NM], axis=1)


def spectra(n: int, k: np.ndarray, seed: int = 1) -> np.ndarray:
    """n invented mixture spectra (n × 300, AU)."""
    rng = np.random.default_rng(seed)
    conc = rng.uniform(0.0, 0.02, (n, k.shape[1]))
    conc[rng.random(conc.shape) < 0.3] = 0.0
    out = conc @ k.T
    out += 0.003 * rng.standard_normal(out.shape)
    return out


def best_of(repeat: int, func, *args) -> float:
    """Fastest wall time (s) of ``repeat`` calls."""
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func(*args)
        times.append(time.perf_counter() - start)
    return min(times)


def scipy_loop(k: np.ndarray, a: np.ndarray, sample: int) -> tuple[float, str]:
    """Seconds of ``scipy.optimize.nnls`` over every row of ``a``, timed on the first
    ``sample`` rows and extrapolated linearly, and the note that says so (or "")."""
    n = a.shape[0]
    sample = min(n, sample)
    start = time.perf_counter()
    for row in a[:sample]:
        nnls(k, row)
    note = "" if sample == n else f"  (scipy timed on {sample}, x{n / sample:g})"
    return (time.perf_counter() - start) * n / sample, note


def blas_report() -> str:
    """What threadpoolctl says about the BLAS numpy and scipy use."""
    return "; ".join(f"{i.get('internal_api')} {i.get('version')} {i.get('architecture')} "
                     f"threads={i.get('num_threads')}" for i in threadpool_info()
                     if i.get("user_api") == "blas")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="10000,100000,1000000")
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--scipy-sample", type=int, default=20000)
    args = parser.parse_args()
    k = design()
    pinv = np.linalg.pinv(k)
    nnls_batch(k, spectra(2000, k), k.shape[1])  # warm up (imports, caches)
    print(f"BLAS: {blas_report()}")
    print(f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')} "
          f"OPENBLAS_L2_SIZE={os.environ.get('OPENBLAS_L2_SIZE', '(unset)')}")
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    threads = default_threads()
    engines = ["numpy"] + (["compiled"] if importlib.util.find_spec("numba") else [])
    for engine in engines[1:]:  # compile (or load) it before timing
        nnls_batch(k, spectra(3000, k), k.shape[1], engine=engine, threads=threads)
    print(f"engines: {', '.join(engines)}; compiled with {threads} threads")
    print(f"{'N':>9} {'engine':>9} {'batched s':>10} {'unconstr s':>10} {'lstsq s':>9} "
          f"{'scipy s':>9} {'scipy/batched':>14} {'batched/unconstr':>17} {'us/spectrum':>12}")
    for n in (int(s) for s in args.sizes.split(",")):
        a = spectra(n, k)
        repeat = args.repeat if n <= 100000 else max(2, args.repeat // 2)
        t_batch = dict.fromkeys(engines, np.inf)
        t_unc = np.inf
        for _ in range(repeat):  # interleaved, so that a change of machine load hits all
            for engine in engines:
                time.sleep(BLAS_IDLE_S)
                t_batch[engine] = min(t_batch[engine], best_of(
                    1, lambda a=a, e=engine: nnls_batch(k, a, k.shape[1], engine=e,
                                                        threads=threads)))
            t_unc = min(t_unc, best_of(1, lambda a=a: pinv @ a.T))
        t_lstsq = best_of(1, lambda a=a: np.linalg.lstsq(k, a.T, rcond=None)) \
            if n <= 100000 else float("nan")
        t_scipy, note = scipy_loop(k, a, args.scipy_sample)
        for engine in engines:
            t = t_batch[engine]
            print(f"{n:>9} {engine:>9} {t:>10.4f} {t_unc:>10.4f} {t_lstsq:>9.4f} "
                  f"{t_scipy:>9.3f} {t_scipy / t:>14.1f} {t / t_unc:>17.2f} "
                  f"{1e6 * t / n:>12.3f}{note}")
        del a
    print(f"load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()

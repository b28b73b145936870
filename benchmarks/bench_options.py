"""``unmix`` options that give every spectrum its own design, batched against the old loops.

Same invented problem as ``bench_nnls.py`` (300 wavelengths, 400-700 nm, 5 components,
~30 % absent, noise 0.003 AU; the spectra carry no wavelength shift, so the shift search
does its full work to find δ ≈ 0). Timed in this one process, for N = 1000 and 10000:

1. ``unmix(..., weights="noise", noise="diode_array")``: the two-pass weighted fit, whose
   second pass solves each spectrum with its rows scaled by √w
   (:mod:`mixsolve.solve.per_spectrum`, all spectra at once);
2. ``unmix(..., fit_shift=True, window=(400, 700))`` with the library on 380-720 nm
   (every 0.5 nm; same bands), so that ±3 nm stays inside it: coarse grid shared by all
   spectra, then Brent's search vectorised over spectra.

Each against the old per-spectrum code (kept below, in this file only: one group per
spectrum for the weights, ``scipy.optimize.minimize_scalar`` per spectrum for the shift),
plugged into the same ``unmix`` call, timed on the first ``--old-sample`` spectra and
extrapolated linearly to N (stated in the output). New times are the best of
``--repeat`` runs. ``max |dc|``: the largest change of a concentration between old and new
code on those spectra, relative to the largest concentration.

Run: ``python benchmarks/bench_options.py [--sizes 1000,10000]``. Never a test.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import time
import warnings
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import xarray as xr
from bench_nnls import CENTRES_NM, blas_report, design, spectra
from bench_unmix import labelled, library
from scipy.optimize import minimize_scalar

import mixsolve as ms
import mixsolve.solve.block as unmix_block
from mixsolve.flags import DEPENDENT, MISSING, NO_DOF, TOO_FEW
from mixsolve.solve.cls import Fit, _fit, _full_rank, _inverse_diag, fit_spectra
from mixsolve.solve.design import design_matrix
from mixsolve.solve.residuals import ResidualSummary, empty_summary, put, summarise

NOISE = "diode_array"
WIDE_NM = np.arange(380.0, 720.01, 0.5)


def wide_library() -> xr.Dataset:
    """The bands of ``bench_nnls.design()`` on 380-720 nm every 0.5 nm (L g⁻¹ cm⁻¹)."""
    k = np.stack([50.0 * np.exp(-0.5 * ((WIDE_NM - c) / 32.0) ** 2) for c in CENTRES_NM])
    da = xr.DataArray(k, dims=("component", "wavelength"),
                      coords={"component": [f"c{i}" for i in range(k.shape[0])],
                              "wavelength": WIDE_NM})
    return ms.import_absorptivities(da, "L/(g*cm)", source="invented benchmark bands")


# --- the old per-spectrum code (as it was before the batched versions) -------------------------

# (the rank test, the one-design solve and the (DᵀD)⁻¹ diagonal are still those of
# mixsolve.solve.cls)

def old_weighted_fit(spectra: np.ndarray, design: np.ndarray, n_components: int,
                     method: str, weights: np.ndarray) -> Fit:
    """The old weighted branch of ``fit_spectra``: one group per spectrum, rows × √w."""
    flat = spectra.reshape(-1, spectra.shape[-1])
    n_spec, n_terms = flat.shape[0], design.shape[1]
    w = np.broadcast_to(weights, spectra.shape).reshape(flat.shape)
    values = np.where(np.isfinite(w) & (w > 0), flat, np.nan)
    present = ~np.isnan(values)
    root_w = np.sqrt(np.where(present, w, 0.0))
    coef = np.full((n_spec, n_terms), np.nan)
    std_error = np.full((n_spec, n_terms), np.nan)
    dof = np.zeros(n_spec, dtype=np.int64)
    status = np.zeros(n_spec, dtype=np.int64)
    summary = empty_summary(n_spec)
    for i in range(n_spec):
        mask, rows = present[i], np.array([i])
        if not mask.all():
            status[rows] |= MISSING
        n_used = int(mask.sum())
        sub = design[mask]
        if n_used < n_terms:
            status[rows] |= TOO_FEW
            continue
        if not _full_rank(sub):
            status[rows] |= DEPENDENT
            continue
        scale = root_w[i, mask]
        sub = sub * scale[:, None]
        vals = values[np.ix_(rows, np.flatnonzero(mask))] * scale
        coef[rows] = _fit(sub, vals, n_components, method)
        put(summary, rows, summarise(values[rows], values[rows] - coef[rows] @ design.T))
        rss = np.sum((vals - coef[rows] @ sub.T) ** 2, axis=1)
        dof[rows] = n_used - n_terms
        if n_used > n_terms:
            std_error[rows] = np.sqrt(rss / (n_used - n_terms))[:, None] * \
                np.sqrt(_inverse_diag(sub))
        else:
            status[rows] |= NO_DOF
    return Fit(coef, std_error, dof, status, ResidualSummary(*summary))


def fit_one(row: np.ndarray, d: np.ndarray, n: int, method: Any) -> tuple[np.ndarray, ...]:
    """coef, std_error, fitted, dof, status of ``row`` (1, m) against one design."""
    fit = fit_spectra(row, d, n, method)
    return fit.coef, fit.std_error, fit.coef @ d.T, fit.dof, fit.status


def old_fit_with_shift(spectra: np.ndarray, eps: np.ndarray, grid_nm: np.ndarray,
                       wavelengths_nm: np.ndarray, baseline: Any, method: Any,
                       max_shift_nm: float) -> tuple[np.ndarray, ...]:
    """The old ``fit_with_shift``: minimize_scalar (bounded, xatol 1e-4) per spectrum."""
    def shifted(delta: float) -> np.ndarray:
        k = np.stack([np.interp(wavelengths_nm + delta, grid_nm, row) for row in eps], axis=1)
        return design_matrix(k, wavelengths_nm, baseline)

    n = eps.shape[0]
    slope = np.gradient(eps, grid_nm, axis=1)
    outs: list[list[np.ndarray]] = [[] for _ in range(7)]
    for a in spectra.reshape(-1, spectra.shape[-1]):
        row = a[None, :]

        def rss(delta: float, row: np.ndarray = row) -> float:
            fitted = fit_one(row, shifted(delta), n, method)[2]
            value = float(np.nansum((row - fitted) ** 2))
            return value if np.isfinite(value) else np.inf

        delta = float(minimize_scalar(rss, bounds=(-max_shift_nm, max_shift_nm),
                                      method="bounded", options={"xatol": 1e-4}).x)
        d = shifted(delta)
        coef, se, fitted, dof, status = fit_one(row, d, n, method)
        mask = np.isfinite(a)
        dof_s = int(dof[0]) - 1
        jac = np.stack([np.interp(wavelengths_nm + delta, grid_nm, s) for s in slope],
                       axis=1) @ np.nan_to_num(coef[0, :n])
        u_delta = np.nan
        if dof_s > 0 and not status[0] & ~NO_DOF & ~MISSING:
            full = np.hstack([d[mask], jac[mask, None]])
            s2 = np.sum((a[mask] - fitted[0, mask]) ** 2) / dof_s
            norms = np.linalg.norm(full, axis=0)
            norms[norms == 0] = 1.0
            try:
                cov = np.linalg.inv((full / norms).T @ (full / norms)) / np.outer(norms, norms)
                sd = np.sqrt(np.clip(np.diag(cov) * s2, 0, None))
                se, u_delta = sd[None, :-1], float(sd[-1])
            except np.linalg.LinAlgError:
                se = np.full_like(se, np.nan)
        else:
            se = np.full_like(se, np.nan)
            if dof_s <= 0:
                status = status | NO_DOF
        for store, value in zip(outs, (coef[0], se[0], fitted[0], np.array(max(dof_s, 0)),
                                       status[0], np.array(delta), np.array(u_delta)),
                                strict=True):
            store.append(np.asarray(value))
    lead = spectra.shape[:-1]
    coef, se, fitted, dof, status, shift, u_shift = (np.stack(o) for o in outs)
    return (coef.reshape(*lead, -1), se.reshape(*lead, -1), fitted.reshape(*lead, -1),
            dof.reshape(lead).astype(np.int64), status.reshape(lead).astype(np.int64),
            shift.reshape(lead), u_shift.reshape(lead))


@contextlib.contextmanager
def old_code() -> Iterator[None]:
    """Plug the old per-spectrum code into ``unmix`` for the duration."""
    def fit(spectra: np.ndarray, design: np.ndarray, n: int, method: Any,
            weights: np.ndarray | None = None, **kwargs: Any) -> Fit:
        if weights is None:
            return fit_spectra(spectra, design, n, method, **kwargs)
        return old_weighted_fit(spectra, design, n, method, weights)

    saved = unmix_block.fit_spectra, unmix_block.fit_with_shift
    unmix_block.fit_spectra, unmix_block.fit_with_shift = fit, old_fit_with_shift
    try:
        yield
    finally:
        unmix_block.fit_spectra, unmix_block.fit_with_shift = saved


# --- timing --------------------------------------------------------------------------------------

def best_of(repeat: int, func: Callable[[], object]) -> float:
    """Fastest wall time (s) of ``repeat`` calls."""
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def compare(name: str, run: Callable[[xr.DataArray], xr.Dataset], a: np.ndarray,
            sample: int, repeat: int) -> None:
    """One line: new time on all spectra, old time on ``sample`` extrapolated, ratio."""
    n = a.shape[0]
    sp = labelled(a)
    new = best_of(repeat, lambda: run(sp))
    part = labelled(a[:min(sample, n)])
    with old_code():
        start = time.perf_counter()
        before = run(part)
        old = (time.perf_counter() - start) * n / part.sizes["sample"]
    conc = before["concentration"].values
    change = np.nanmax(np.abs(run(part)["concentration"].values - conc)) / np.nanmax(conc)
    note = "" if part.sizes["sample"] == n else \
        f"  (old timed on {part.sizes['sample']}, x{n / part.sizes['sample']:g})"
    print(f"{name:<15} {n:>6} {new:>9.3f} {old:>10.2f} {old / new:>8.1f} {change:>9.1e}{note}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1000,10000")
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--old-sample", type=int, default=200)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    k = design()
    lib, wide = library(k), wide_library()

    def weighted(sp: xr.DataArray) -> xr.Dataset:
        return ms.unmix(sp, lib, weights="noise", noise=NOISE)

    def shifted(sp: xr.DataArray) -> xr.Dataset:
        return ms.unmix(sp, wide, window=(400, 700), fit_shift=True)

    warm = spectra(100, k)
    weighted(labelled(warm))
    shifted(labelled(warm))
    print(f"BLAS: {blas_report()}")
    print(f"load average before: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    print(f"300 wavelengths x 5 components; noise model {NOISE!r}; shift bound ±3 nm")
    print(f"{'option':<15} {'N':>6} {'new s':>9} {'old s':>10} {'old/new':>8} "
          f"{'max |dc|':>9}")
    for n in (int(s) for s in args.sizes.split(",")):
        a = spectra(n, k)
        compare('weights="noise"', weighted, a, args.old_sample, args.repeat)
        compare("fit_shift", shifted, a, args.old_sample, args.repeat)
    print(f"load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()

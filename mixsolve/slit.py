"""Spectral bandwidth: a library broadened with a triangular slit function.

A spectrum read through a monochromator is the true spectrum convolved with the
instrument's slit function. With equal entrance and exit slits (and slits wider than the
diffraction limit) the slit function is a triangle: the image of the entrance slit, a
rectangle, swept across the exit slit, a rectangle of the same width; its full width at
half maximum (FWHM) is the spectral bandpass, the slit width times the reciprocal linear
dispersion (Skoog, Holler & Crouch, *Principles of Instrumental Analysis*, chapter on
components of optical instruments, "effective bandwidth"; James & Sternberg, *The Design of
Optical Spectrometers*, Chapman & Hall 1969, on the slit function; both from memory).

A library measured with a bandpass b describes narrow bands less broadened than spectra
read with a wider bandpass X. Before a fit the library is convolved with a triangle of FWHM
w = √(X² − b²): convolution adds variances and a triangle of FWHM w has variance w²/6
(a symmetric triangle on [−w, w]: σ² = w²/6, a textbook moment), so the library's total
slit variance becomes X²/6, the spectra's. A smooth band g broadened by a slit of variance
σ² changes by σ²g''/2 + κ₄g''''/24 + …, so matching the variance leaves only the fourth
cumulant's term (κ₄ of a triangle of FWHM w is −w⁴/60; the two triangles' sum differs from
one triangle of FWHM X by b²w²/30 nm⁴, which is negligible for bands of 10 nm and wider:
measured in tests/test_slit.py).

Core code: no I/O, no printing (numpy, scipy, xarray).
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import scipy.sparse
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.flags import DOUBTFUL, LOOK, RunNote
from mixsolve.spectra import WAVELENGTH, check_number

#: Run-note code of a bandwidth mismatch (docs/flags.md).
BANDWIDTH_MISMATCH = "bandwidth_mismatch"
#: Bandpass (nm) assumed for spectra whose bandwidth was not stated, when no noise preset
#: gives a typical one: a monochromator plate reader's few nm (common practice; the case of
#: issue 15, a 4 nm bandpass against a narrow-band library).
ASSUMED_BANDWIDTH_NM = 4.0


def triangle_variance(fwhm_nm: float) -> float:
    """Variance (nm²) of a triangular slit function of FWHM ``fwhm_nm``: w²/6."""
    return float(fwhm_nm) ** 2 / 6.0


def extra_fwhm(target_nm: float, own_nm: float) -> float:
    """FWHM (nm) of the triangle that broadens a slit of FWHM ``own_nm`` to ``target_nm``.

    Notes
    -----
    Variances add under convolution: w²/6 + b²/6 = X²/6, so w = √(X² − b²); 0 when the
    target is not wider.
    """
    return float(np.sqrt(max(float(target_nm) ** 2 - float(own_nm) ** 2, 0.0)))


def usable_range(grid_nm: np.ndarray, fwhm_nm: float) -> tuple[float, float]:
    """The wavelengths (nm) where a triangle of FWHM ``fwhm_nm`` stays on the grid.

    The triangle reaches ``fwhm_nm`` either side of its centre, so the broadened values
    exist from the grid's first wavelength + FWHM to its last − FWHM (nothing invented
    beyond the data).
    """
    return float(grid_nm[0]) + float(fwhm_nm), float(grid_nm[-1]) - float(fwhm_nm)


def triangle_weights(grid_nm: np.ndarray, fwhm_nm: float,
                     at_nm: np.ndarray) -> scipy.sparse.csr_matrix:
    """The linear map from values on a grid to their triangle-convolved values at ``at_nm``.

    Parameters
    ----------
    grid_nm : array, shape (n,)
        Ascending wavelengths (nm) of the values; any spacing.
    fwhm_nm : float
        FWHM w (nm) of the triangle T(t) = (w − |t|)/w² for |t| ≤ w (unit area).
    at_nm : array, shape (m,)
        Where to evaluate (nm), each within :func:`usable_range`.

    Returns
    -------
    sparse matrix, shape (m, n)
        W with (W·y)_i = ∫ T(t)·y(λ_i − t) dt, y the values' local cubic interpolant.
        Rows sum to 1.

    Notes
    -----
    The values between grid wavelengths are the local cubic interpolant (4-point
    Lagrange, :func:`_cubic_basis`). The integral is exact, not sampled: between
    consecutive breakpoints (λ_i − w, λ_i, λ_i + w and every grid wavelength inside) the
    integrand is a cubic times a linear function, which three-point Gauss–Legendre
    quadrature integrates exactly. A narrow triangle on a coarse grid (4 nm on 1 nm) is
    therefore handled without a finer grid; uneven grids alike.
    """
    grid = np.asarray(grid_nm, dtype=float)
    at = np.asarray(at_nm, dtype=float)
    w = float(fwhm_nm)
    if w <= 0:
        raise InputError(f"slit: the triangle's FWHM must be above 0 nm, got {w:g}")
    lo, hi = usable_range(grid, w)
    tol = 1e-9 * max(1.0, float(abs(grid[-1])))
    if at.size and (at.min() < lo - tol or at.max() > hi + tol):
        raise InputError(f"slit: wavelengths must lie within {lo:g}-{hi:g} nm for a {w:g} nm "
                         "triangle on this grid")
    first = np.searchsorted(grid, at - w, side="right")
    last = np.searchsorted(grid, at + w, side="left")
    most = int(np.max(last - first, initial=0))
    rows_per_block = max(1, BLOCK_NODES // (most + 3))  # bounded memory on fine grids
    if at.size > rows_per_block:
        return scipy.sparse.vstack(
            [triangle_weights(grid, w, at[i:i + rows_per_block])
             for i in range(0, at.size, rows_per_block)], format="csr")
    inner = first[:, None] + np.arange(most)[None, :]
    inside = inner < last[:, None]
    inner_nm = np.where(inside, grid[np.minimum(inner, grid.size - 1)], (at + w)[:, None])
    nodes = np.sort(np.concatenate([inner_nm, np.stack([at - w, at, at + w], axis=1)], axis=1),
                    axis=1)
    left, right = nodes[:, :-1], nodes[:, 1:]
    half = 0.5 * (right - left)
    points = (0.5 * (left + right))[..., None] + half[..., None] * GAUSS_NODES  # (m, k, 3)
    tri = np.clip(w - np.abs(points - at[:, None, None]), 0.0, None) / w**2
    weight = (half[..., None] * GAUSS_WEIGHTS) * tri
    cols, basis = _cubic_basis(grid, points)
    rows = np.broadcast_to(np.arange(at.size)[:, None, None, None], cols.shape)
    return scipy.sparse.csr_matrix(((weight[..., None] * basis).ravel(),
                                    (rows.ravel(), cols.ravel())),
                                   shape=(at.size, grid.size))


#: Most quadrature pieces built at once by :func:`triangle_weights` (memory bound).
BLOCK_NODES = 200_000
#: Three-point Gauss-Legendre rule on [-1, 1], exact for polynomials up to degree 5
#: (numpy.polynomial.legendre.leggauss; nodes 0 and ±√(3/5), weights 8/9 and 5/9).
GAUSS_NODES, GAUSS_WEIGHTS = np.polynomial.legendre.leggauss(3)


def _cubic_basis(grid: np.ndarray, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Local cubic (4-point Lagrange) interpolation at ``points``: grid columns and weights.

    Each point between g_j and g_j+1 is interpolated from g_j-1 ... g_j+2 (the stencil
    shifted inwards at the ends; fewer points on a grid of fewer than 4), so the values at
    the grid wavelengths are kept exactly and the error is of order h⁴ times the fourth
    derivative instead of the h² times the second of straight lines. Straight lines would
    blur: their mean error over a cell, h²y''/12, is what a further blur of variance h²/6
    gives, as much as a further triangle of FWHM h (1 nm on a 1 nm grid).
    """
    order = min(4, grid.size)
    cell = np.clip(np.searchsorted(grid, points, side="right") - 1, 0, max(grid.size - 2, 0))
    first = np.clip(cell - (order - 1) // 2, 0, grid.size - order)
    cols = first[..., None] + np.arange(order)  # (..., order)
    nodes = grid[cols]
    basis = np.ones(cols.shape)
    for r in range(order):
        for k in range(order):
            if r != k:
                basis[..., k] *= (points - nodes[..., r]) / (nodes[..., k] - nodes[..., r])
    return cols, basis


def convolve_triangle(values: np.ndarray, grid_nm: np.ndarray, fwhm_nm: float
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Convolve values along their last axis with a triangle, inside the usable range.

    Parameters
    ----------
    values : array, shape (..., n)
        Values on ``grid_nm`` (any unit; linear in what they describe).
    grid_nm : array, shape (n,)
        Ascending wavelengths (nm).
    fwhm_nm : float
        FWHM of the triangle (nm).

    Returns
    -------
    convolved : ndarray, shape (..., m)
        The convolved values at the grid wavelengths within :func:`usable_range`.
    kept_nm : ndarray, shape (m,)
        Those wavelengths (nm).
    """
    grid = np.asarray(grid_nm, dtype=float)
    lo, hi = usable_range(grid, fwhm_nm)
    tol = 1e-9 * max(1.0, float(abs(grid[-1])))
    kept = grid[(grid >= lo - tol) & (grid <= hi + tol)]
    weights = triangle_weights(grid, fwhm_nm, np.clip(kept, lo, hi))
    flat = np.asarray(values, dtype=float).reshape(-1, grid.size)
    out = (weights @ flat.T).T
    return out.reshape(*np.shape(values)[:-1], kept.size), kept


def broaden_library(library: xr.Dataset, bandwidth_nm: float) -> xr.Dataset:
    """The library as it would have been measured with the wider bandpass ``bandwidth_nm``.

    Parameters
    ----------
    library : Dataset
        A checked library (:func:`mixsolve.library.check_library`) whose
        ``attrs["bandwidth_nm"]`` b is stated and below ``bandwidth_nm``.
    bandwidth_nm : float
        The spectra's bandpass X (FWHM, nm).

    Returns
    -------
    Dataset
        Every array over wavelength (absorptivity, intercepts, the error patterns)
        convolved with a triangle of FWHM w = √(X² − b²) (:func:`extra_fwhm`), on the
        library's own wavelengths from first + w to last − w (the usable range shrinks by
        w at each end); ``bandwidth_nm`` X; the provenance records the broadening
        (``"broadened"``: from, to, triangle FWHM, all nm).

    Notes
    -----
    The convolution is linear, so the error patterns convolved alike keep the library's
    error consistent with its broadened absorptivities (docs/uncertainty.md, "Library").
    A standard uncertainty (``u_*``: u_absorptivity, u_intercept) is convolved as the
    values are, which is exact when its errors are fully correlated over the triangle
    (how :func:`mixsolve.library_error.error_patterns` reads u_absorptivity) and an upper
    bound otherwise; it stays NaN (not stated) wherever a NaN enters the triangle.
    """
    own = float(library.attrs.get("bandwidth_nm", np.nan))
    target = float(bandwidth_nm)
    if not (np.isfinite(own) and target > own):
        raise InputError(f"bandwidth_nm: the library ({own:g} nm) can only be broadened to a "
                         f"wider, stated bandpass, got {target:g} nm")
    w = extra_fwhm(target, own)
    grid = library[WAVELENGTH].values.astype(float)
    lo, hi = usable_range(grid, w)
    tol = 1e-9 * max(1.0, float(abs(grid[-1])))
    keep = (grid >= lo - tol) & (grid <= hi + tol)
    if not keep.any():
        raise InputError(
            f"bandwidth_nm: broadening the library ({grid[0]:g}-{grid[-1]:g} nm) from "
            f"{own:g} to {target:g} nm needs {w:.3g} nm of data beyond each used wavelength, "
            "which leaves none; give a library over a wider range")
    weights = triangle_weights(grid, w, np.clip(grid[keep], lo, hi))
    data_vars: dict[str, Any] = {}
    for name, var in library.data_vars.items():
        if WAVELENGTH not in var.dims:
            data_vars[name] = var
            continue
        axis = var.dims.index(WAVELENGTH)
        moved = np.moveaxis(var.values.astype(float), axis, -1)
        flat = moved.reshape(-1, grid.size)
        out = (weights @ np.nan_to_num(flat, nan=0.0).T).T
        if str(name).startswith("u_") and np.isnan(flat).any():
            out[(weights @ np.isnan(flat).T.astype(float)).T > 0] = np.nan
        new = np.moveaxis(out.reshape(*moved.shape[:-1], int(keep.sum())), -1, axis)
        data_vars[name] = (var.dims, new, var.attrs)
    coords = {c: library.coords[c] for c in library.coords if c != WAVELENGTH}
    coords[WAVELENGTH] = (WAVELENGTH, library[WAVELENGTH].values[keep],
                          library[WAVELENGTH].attrs)
    provenance = json.loads(library.attrs.get("provenance") or "{}")
    provenance["broadened"] = {"from_nm": own, "to_nm": target, "triangle_fwhm_nm": w}
    attrs = {**library.attrs, "bandwidth_nm": target, "provenance": json.dumps(provenance)}
    return xr.Dataset(data_vars, coords=coords, attrs=attrs)


def fitted_range(library: xr.Dataset, bandwidth_nm: float | None) -> tuple[float, float]:
    """The wavelength range (nm) of the library a fit at ``bandwidth_nm`` uses: shrunk by
    the broadening triangle's FWHM at each end when the bandpass is wider than the
    library's stated one (:func:`broaden_library`), else the library's own range."""
    grid = library[WAVELENGTH].values.astype(float)
    own = float(library.attrs.get("bandwidth_nm", np.nan))
    if bandwidth_nm is not None:
        bandwidth_nm = check_number(bandwidth_nm, "bandwidth_nm", "nm", positive=True)
    if bandwidth_nm is None or not (np.isfinite(own) and bandwidth_nm > own):
        return float(grid[0]), float(grid[-1])
    return usable_range(grid, extra_fwhm(bandwidth_nm, own))


def as_fitted(library: xr.Dataset, attrs: Mapping[str, Any]) -> xr.Dataset:
    """The library as an unmix result with these ``attrs`` fitted it: broadened when the
    run broadened it (``attrs["library_broadened_nm"]`` > 0), else unchanged. Lets later
    steps (the uncertainty budget) use the absorptivities and error patterns of the fit."""
    if float(attrs.get("library_broadened_nm", 0.0) or 0.0) > 0:
        return broaden_library(library, float(attrs["bandwidth_nm"]))
    return library


def assumed_bandwidth(library_nm: float, typical_nm: float | None) -> float | None:
    """The spectra's bandpass (nm) a note assumes when none was stated: the noise preset's
    typical one (:data:`mixsolve.noise.TYPICAL_BANDWIDTH_NM`), else
    :data:`ASSUMED_BANDWIDTH_NM` when the library's is narrower, else twice the library's;
    None when neither the library's nor a typical one is known (nothing to compare)."""
    if typical_nm is not None:
        return float(typical_nm)
    if not np.isfinite(library_nm):
        return None
    return ASSUMED_BANDWIDTH_NM if library_nm < ASSUMED_BANDWIDTH_NM else 2.0 * library_nm


def mismatch_bias(eps: np.ndarray, grid_nm: np.ndarray, used_nm: np.ndarray,
                  extra: np.ndarray, coef: np.ndarray, fwhm_nm: float, *,
                  spectra_wider: bool) -> np.ndarray:
    """Predicted relative bias per component of a bandwidth mismatch, for one design.

    Parameters
    ----------
    eps : array, shape (n, g)
        The library's absorptivities on its grid ``grid_nm`` (nm).
    used_nm : array, shape (m,)
        The fit's wavelengths (nm).
    extra : array, shape (m, q)
        The fit's baseline columns at ``used_nm``.
    coef : array, shape (n,)
        A typical coefficient vector b·c.
    fwhm_nm : float
        FWHM of the triangle the mismatch amounts to (:func:`extra_fwhm`).
    spectra_wider : bool
        True: the spectra follow the library broadened by the triangle and are fitted
        with the library as it is; False: the library is the wider one, the spectra
        follow the library as it is and are fitted with it broadened.

    Returns
    -------
    ndarray, shape (n,)
        :func:`predicted_bias` over the used wavelengths inside the broadened library's
        range (NaN when fewer remain than unknowns).
    """
    wide, kept = convolve_triangle(eps, grid_nm, fwhm_nm)
    inside = (used_nm >= kept[0]) & (used_nm <= kept[-1]) if kept.size else used_nm < 0
    n = eps.shape[0]
    if inside.sum() < n + extra.shape[1]:
        return np.full(n, np.nan)
    at = used_nm[inside]
    narrow_at = np.stack([np.interp(at, grid_nm, row) for row in eps], axis=1)
    wide_at = np.stack([np.interp(at, kept, row) for row in wide], axis=1)
    fitted, true = (narrow_at, wide_at) if spectra_wider else (wide_at, narrow_at)
    return predicted_bias(fitted, true, extra[inside], coef)


def predicted_bias(fitted_eps: np.ndarray, true_eps: np.ndarray, extra: np.ndarray,
                   coef: np.ndarray) -> np.ndarray:
    """Relative bias of each component when spectra made with ``true_eps`` are fitted
    with ``fitted_eps``.

    Parameters
    ----------
    fitted_eps, true_eps : array, shape (m, n)
        Absorptivities (1 cm) at the m used wavelengths: those of the fit's design and
        those the spectra follow.
    extra : array, shape (m, q)
        The fit's other columns (baseline terms), q ≥ 0.
    coef : array, shape (n,)
        A typical coefficient vector b·c (the run's median result).

    Returns
    -------
    ndarray, shape (n,)
        (x̂ − x)/x with x̂ the least-squares fit of the noise-free spectrum
        true_eps·x by [fitted_eps | extra] (NaN where x is 0).

    Notes
    -----
    Least squares is linear, so this is the expected bias of every noisy spectrum with
    mean true_eps·x (Gauss–Markov; NNLS agrees while the components stay positive).
    """
    design = np.hstack([fitted_eps, extra])
    x = np.asarray(coef, dtype=float)
    fit = np.linalg.lstsq(design, true_eps @ x, rcond=None)[0][: x.size]
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x != 0, fit / x - 1.0, np.nan)


def mismatch_note(
    *,
    library_nm: float,
    spectra_nm: float | None,
    typical_nm: float | None,
    bias: Sequence[float],
    components: Sequence[str],
    u_relative: Sequence[float] | None,
    basis: str,
) -> RunNote:
    """The ``bandwidth_mismatch`` run note: what the mismatch costs, per component.

    Parameters
    ----------
    library_nm : float
        The library's bandpass (nm), NaN when not stated.
    spectra_nm : float or None
        The spectra's stated bandpass (nm); None when not stated.
    typical_nm : float or None
        The bandpass assumed when ``spectra_nm`` is None (:func:`assumed_bandwidth`).
    bias : sequence of float
        Predicted relative bias per component (:func:`predicted_bias`).
    components : sequence of str
    u_relative : sequence of float, optional
        The run's median relative standard uncertainty per component; the note is
        ``DOUBTFUL`` when a stated mismatch biases some component by more than it.
    basis : str
        The coefficient vector the bias was predicted at, in words.
    """
    parts = ", ".join(f"{c} {100 * b:+.2g} %" if np.isfinite(b) else f"{c} n/a (0 in the "
                      "median result)" for c, b in zip(components, bias, strict=True))
    at = f" (predicted at {basis})"
    if spectra_nm is None:
        lib = (f"{library_nm:g} nm" if np.isfinite(library_nm) else "an unstated bandwidth "
               "(taken as narrow)")
        text = (f"the spectra's bandwidth was not stated; the library was measured at {lib}. "
                f"Spectra read with a {typical_nm:g} nm bandpass would be biased by {parts}"
                f"{at}")
        fix = ("state the spectra's bandpass with bandwidth_nm (--bandwidth-nm) so the "
               "library is broadened to match")
        return RunNote(BANDWIDTH_MISMATCH, LOOK, text, fix)
    if not np.isfinite(library_nm):
        text = (f"the library's bandwidth is not stated; if it was measured with a narrow "
                f"bandpass, the spectra's {spectra_nm:g} nm biases results by up to {parts}{at}")
        fix = ("state the library's bandwidth (library import/build --bandwidth-nm) so unmix "
               "can broaden it to the spectra's")
    else:
        text = (f"the library was measured at {library_nm:g} nm, wider than the spectra's "
                f"{spectra_nm:g} nm, and cannot be sharpened: results are biased by {parts}"
                f"{at}")
        fix = (f"measure the library with a bandpass of {spectra_nm:g} nm or narrower, or read "
               "the spectra with the library's")
    worse = u_relative is not None and any(
        np.isfinite(b) and np.isfinite(u) and abs(b) > u
        for b, u in zip(bias, u_relative, strict=True))
    return RunNote(BANDWIDTH_MISMATCH, DOUBTFUL if worse else LOOK, text, fix)

"""Choose the wavelengths of a fit and build its design matrix.

The design matrix holds, per used wavelength λᵢ (rows), the library absorptivity of
each component at 1 cm (columns) followed by the optional baseline columns:
``offset`` (1 at every λ) and ``slope`` (λ − λ̄, nm, λ̄ the mean used wavelength), or
``offset`` and ``scatter`` ((λ/λ₀)^(−n), λ₀ the shortest used wavelength; ``unmix`` fits n
per spectrum, :mod:`mixsolve.solve.scatter`; the design here holds the nominal n = 4).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np

from mixsolve.errors import InputError, SolveError
from mixsolve.spectra import check_wavelength_list

Baseline = Literal["none", "offset", "linear", "scatter"]
BASELINES: tuple[str, ...] = ("none", "offset", "linear", "scatter")
BASELINE_TERMS: dict[str, tuple[str, ...]] = {
    "none": (),
    "offset": ("offset",),
    "linear": ("offset", "slope"),
    "scatter": ("offset", "scatter"),
}
#: The exponent of the scatter column of a design with ``baseline="scatter"`` where one
#: design stands for all spectra (figures of merit, the library's error, the shift bias):
#: Rayleigh scatter, λ⁻⁴, a linearisation at the usual case of small particles.
NOMINAL_SCATTER_EXPONENT = 4.0


def scatter_column(wavelengths_nm: np.ndarray, exponent: float | np.ndarray) -> np.ndarray:
    """(λ/λ₀)^(−n) at the wavelengths (λ₀ their shortest): shape (m,), or (k, m) for k
    exponents. 1 at λ₀, dimensionless."""
    wl = np.asarray(wavelengths_nm, dtype=float)
    ratio = wl / wl.min()
    n = np.asarray(exponent, dtype=float)
    return ratio ** (-n[..., None]) if n.ndim else ratio ** (-float(n))
#: How close (nm) a requested discrete wavelength must be to a measured one.
WAVELENGTH_MATCH_NM = 0.01


def _fmt(values: np.ndarray, most: int = 6) -> str:
    shown = ", ".join(f"{v:g}" for v in values[:most])
    return shown + (f" and {values.size - most} more" if values.size > most else "")


def select_wavelengths(
    measured_nm: np.ndarray,
    library_range_nm: tuple[float, float],
    *,
    window: tuple[float, float] | None = None,
    wavelengths: Sequence[float] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Pick the measured wavelengths a fit uses.

    Parameters
    ----------
    measured_nm : array, shape (n,)
        Measured wavelengths (nm), ascending.
    library_range_nm : (float, float)
        Lowest and highest library wavelength (nm).
    window : (float, float), optional
        Use the measured wavelengths from ``low`` to ``high`` nm, both included.
    wavelengths : sequence of float, optional
        Use exactly these wavelengths (nm); each must have been measured (within
        0.01 nm). Exclusive with ``window``.

    Returns
    -------
    index : ndarray of int
        Positions in ``measured_nm`` of the used wavelengths, ascending.
    left_out : ndarray
        Measured wavelengths (nm) left out because they lie outside the library
        (only when neither ``window`` nor ``wavelengths`` is given).

    Raises
    ------
    InputError
        Both selectors given, a requested wavelength not measured, a window holding no
        measured wavelength, or a selection reaching outside the library.
    """
    lo_lib, hi_lib = library_range_nm
    tol = 1e-9 * max(1.0, hi_lib)
    if window is not None and wavelengths is not None:
        raise InputError("give either a window or a list of wavelengths, not both")
    if wavelengths is not None:
        requested = check_wavelength_list(wavelengths)  # NaN would match the first one
        if np.unique(requested).size != requested.size:
            vals, counts = np.unique(requested, return_counts=True)
            raise InputError(f"wavelengths: {vals[counts > 1][0]:g} nm is listed twice")
        index = []
        for w in requested:
            pos = int(np.argmin(np.abs(measured_nm - w)))
            if abs(measured_nm[pos] - w) > WAVELENGTH_MATCH_NM:
                near = measured_nm[max(pos - 1, 0): pos + 2]
                raise InputError(
                    f"wavelengths: {w:g} nm was not measured (nearest measured: "
                    f"{_fmt(near)} nm); choose measured wavelengths or use a window")
            index.append(pos)
        index_arr = np.sort(np.asarray(index))
    elif window is not None:
        low, high = window
        index_arr = np.flatnonzero((measured_nm >= low - tol) & (measured_nm <= high + tol))
        if index_arr.size == 0:
            raise InputError(
                f"window {low:g}-{high:g} nm holds no measured wavelength (measured "
                f"{measured_nm[0]:g}-{measured_nm[-1]:g} nm)")
    else:
        inside = (measured_nm >= lo_lib - tol) & (measured_nm <= hi_lib + tol)
        index_arr = np.flatnonzero(inside)
        if index_arr.size == 0:
            raise InputError(
                f"no measured wavelength ({measured_nm[0]:g}-{measured_nm[-1]:g} nm) lies "
                f"within the library ({lo_lib:g}-{hi_lib:g} nm)")
        return index_arr, measured_nm[~inside]
    used = measured_nm[index_arr]
    outside = used[(used < lo_lib - tol) | (used > hi_lib + tol)]
    if outside.size:
        raise InputError(
            f"wavelength(s) {_fmt(outside)} nm lie outside the library "
            f"({lo_lib:g}-{hi_lib:g} nm), which is never extrapolated; "
            f"keep the selection within {lo_lib:g}-{hi_lib:g} nm")
    return index_arr, np.empty(0)


def design_matrix(
    absorptivity: np.ndarray, wavelengths_nm: np.ndarray, baseline: Baseline = "none"
) -> np.ndarray:
    """Stack absorptivities (1 cm) and baseline columns.

    Parameters
    ----------
    absorptivity : array, shape (n_wavelengths, n_components)
        Library ε at the used wavelengths, library unit.
    wavelengths_nm : array, shape (n_wavelengths,)
    baseline : {"none", "offset", "linear", "scatter"}
        ``scatter``: the offset and (λ/λ₀)^(−4) (``NOMINAL_SCATTER_EXPONENT``).

    Returns
    -------
    ndarray, shape (n_wavelengths, n_components + n_baseline_terms)
    """
    columns = [np.asarray(absorptivity, dtype=float)]
    if baseline in ("offset", "linear", "scatter"):
        columns.append(np.ones((wavelengths_nm.size, 1)))
    if baseline == "linear":
        columns.append((wavelengths_nm - wavelengths_nm.mean())[:, None])
    if baseline == "scatter":
        columns.append(scatter_column(wavelengths_nm, NOMINAL_SCATTER_EXPONENT)[:, None])
    return np.hstack(columns)


#: Scaled condition number above which a design is refused as numerically rank deficient:
#: it would lose six significant digits, more than any absorbance reading or absorptivity
#: table carries (typically 3-5), so the results would be noise.
MAX_CONDITION_NUMBER = 1e6
#: Scaled condition number above which every result is flagged ``ill_conditioned``
#: (the "poor" threshold of mixsolve.wavelengths.merit.verdict).
ILL_CONDITIONED_ABOVE = 1e3


def check_solvable(design: np.ndarray, term_names: Sequence[str]) -> float:
    """Refuse an underdetermined or rank-deficient design with a reason.

    Returns
    -------
    float
        The 2-norm condition number of the design with unit-length columns.

    Raises
    ------
    SolveError
        Fewer wavelengths than unknowns, or columns that are linearly dependent
        (for example two components with proportional spectra over the used range),
        exactly or numerically (scaled condition number above ``MAX_CONDITION_NUMBER``).
    """
    n_wl, n_terms = design.shape
    if n_wl < n_terms:
        raise SolveError(
            f"underdetermined: {n_wl} wavelength(s) for {n_terms} unknowns "
            f"({', '.join(term_names)}); use at least {n_terms} wavelengths, widen the "
            "window or drop a component or baseline term")
    norms = np.linalg.norm(design, axis=0)
    zero = np.flatnonzero(norms == 0)
    if zero.size:
        raise SolveError(
            f"{term_names[zero[0]]!r} has zero absorptivity at every used wavelength; "
            "choose wavelengths where it absorbs or drop it from the library")
    scaled = design / norms
    _, sv, vt = np.linalg.svd(scaled, full_matrices=False)
    tol = sv.max() * max(design.shape) * np.finfo(float).eps * 10
    if sv[-1] <= max(tol, sv.max() / MAX_CONDITION_NUMBER):
        null = vt[-1]
        involved = [term_names[i] for i in np.flatnonzero(np.abs(null) > 0.1)]
        raise SolveError(
            f"rank deficient: {' and '.join(map(repr, involved))} are linearly dependent over "
            "the used wavelengths (their spectra are proportional or combine to one "
            "another), so they cannot be told apart; drop one or choose other wavelengths")
    return float(sv.max() / sv[-1])

"""Classical least squares kernel: many spectra against one design matrix.

Works on plain float64 arrays; the public :func:`mixsolve.unmix` wraps it with labels.
Spectra with missing readings (NaN) are fitted on the wavelengths they have, grouped by
their pattern of missing values so each pattern is solved once; complete spectra (the
usual case) form one group that is solved without copying the data.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Literal, NamedTuple

import numpy as np

from mixsolve.flags import DEPENDENT, MISSING, NO_DOF, STATUS_CODES, TOO_FEW
from mixsolve.solve.nnls import nnls_batch

Method = Literal["ols", "nnls"]
#: Spectra per block when computing fitted values and residuals (a few MB at 300 nm).
BLOCK_SPECTRA = 1024
#: Rows per product coef @ designᵀ: small enough that OpenBLAS runs it on one thread
#: (threading a 5-deep product costs more than it saves, badly so on a busy machine).
GEMM_ROWS = 128
METHODS: tuple[str, ...] = ("nnls", "ols")

__all__ = ["DEPENDENT", "METHODS", "MISSING", "NO_DOF", "STATUS_CODES", "TOO_FEW", "Fit",
           "fit_spectra", "solve_cls"]


class Fit(NamedTuple):
    """Arrays of one batch fit; leading axes as the spectra's (see :func:`fit_spectra`)."""

    coef: np.ndarray
    std_error: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    dof: np.ndarray
    status: np.ndarray
    rms: np.ndarray


def solve_cls(
    spectra: np.ndarray,
    design: np.ndarray,
    n_components: int,
    method: Method,
    weights: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Fit every spectrum (last axis: wavelength) to the design matrix.

    Parameters and the returned ``coef, std_error, fitted, dof, status`` are those of
    :func:`fit_spectra` (which also returns the residual).
    """
    fit = fit_spectra(spectra, design, n_components, method, weights)
    return fit.coef, fit.std_error, fit.fitted, fit.dof, fit.status


def fit_spectra(
    spectra: np.ndarray,
    design: np.ndarray,
    n_components: int,
    method: Method,
    weights: np.ndarray | None = None,
    on_block: Callable[..., None] | None = None,
) -> Fit:
    """Fit every spectrum (last axis: wavelength) to the design matrix.

    Parameters
    ----------
    spectra : array, shape (..., n_wavelengths)
        Absorbance; NaN marks a missing reading.
    design : array, shape (n_wavelengths, n_terms)
        Absorptivity columns first (``n_components`` of them), then baseline columns.
    n_components : int
        How many leading columns are absorptivities (constrained ≥ 0 by ``nnls``).
    method : {"ols", "nnls"}
    weights : array, same shape as ``spectra``, optional
        Weights wᵢ = 1/σᵢ² per reading; each spectrum is then solved on its own with
        rows scaled by √wᵢ, and s² = Σ wᵢrᵢ²/(n − p) (so u stays in concentration units).
    on_block : callable, optional
        Called as ``on_block(rows, spectra, fitted, residual, dof, sum_squares)`` (the last
        Σ r² per spectrum, NaN where a reading is missing) for consecutive blocks
        of at most ``BLOCK_SPECTRA`` spectra (``rows`` a slice of the flattened leading
        axes), while the block's arrays are still in cache: for per-spectrum figures that
        would otherwise take another pass over the data.

    Returns
    -------
    Fit
        ``coef`` (..., n_terms): fitted coefficients (concentration × pathlength for
        components, AU for the offset, AU/nm for the slope). ``std_error`` (..., n_terms):
        √(s² · diag (DᵀD)⁻¹) with s² = RSS/(n − p); NaN when n − p = 0. ``fitted``
        (..., n_wavelengths): D·coef at every used wavelength (also where the reading was
        missing). ``residual`` (..., n_wavelengths): spectra − fitted (AU, unweighted;
        NaN where the reading is missing). ``dof`` (...): residual degrees of freedom
        n − p. ``status`` (...): bitwise OR of the status bits of :mod:`mixsolve.flags`.
        ``rms`` (...): √(Σ r²/n) over the n readings present (AU, unweighted); NaN when
        the spectrum could not be fitted.

    Notes
    -----
    ``ols``: ``numpy.linalg.lstsq`` on the column-scaled design. ``nnls``: fast
    combinatorial active-set NNLS (:func:`mixsolve.solve.nnls.nnls_batch`) with the
    baseline columns free, checked against ``scipy.optimize.nnls``.
    """
    spectra = np.asarray(spectra, dtype=float)
    if weights is not None:
        w = np.broadcast_to(np.asarray(weights, dtype=float), spectra.shape)
        spectra = np.where(np.isfinite(w) & (w > 0), spectra, np.nan)
    lead = spectra.shape[:-1]
    flat = spectra.reshape(-1, spectra.shape[-1])
    n_spec, n_wl = flat.shape
    n_terms = design.shape[1]
    coef = np.full((n_spec, n_terms), np.nan)
    std_error = np.full((n_spec, n_terms), np.nan)
    dof = np.zeros(n_spec, dtype=np.int64)
    status = np.zeros(n_spec, dtype=np.int64)
    n_read = np.full(n_spec, np.nan)
    if weights is None:
        groups = _missing_groups(flat)
        root_w = None
    else:
        present = ~np.isnan(flat)
        groups = [(present[i], np.array([i])) for i in range(n_spec)]
        root_w = np.sqrt(np.where(present, w.reshape(flat.shape), 0.0))
    solved = []
    for mask, rows in groups:
        if not mask.all():
            status[rows] |= MISSING
        sub = design[mask]
        n_used = int(mask.sum())
        if n_used < n_terms:
            status[rows] |= TOO_FEW
            continue
        norms = np.linalg.norm(sub, axis=0)
        if np.any(norms == 0) or np.linalg.matrix_rank(sub / np.where(norms == 0, 1, norms)) \
                < n_terms:
            status[rows] |= DEPENDENT
            continue
        values = _take(flat, rows, mask)
        n_read[rows] = n_used
        if root_w is not None:
            scale = root_w[rows[0], mask]
            sub = sub * scale[:, None]
            norms = np.linalg.norm(sub, axis=0)
            values = values * scale
        coef[rows] = _fit(sub, values, n_components, method)
        scaled = sub / norms
        inv = np.linalg.inv(scaled.T @ scaled) / np.outer(norms, norms)
        dof[rows] = n_used - n_terms
        solved.append((rows, np.clip(np.diag(inv), 0, None), None if root_w is None else
                       np.sum((values - coef[rows] @ sub.T) ** 2, axis=1)))
    fitted = np.empty((n_spec, n_wl))
    residual = np.empty((n_spec, n_wl))
    rss = np.empty(n_spec)
    design_t = np.ascontiguousarray(design.T)
    for start in range(0, n_spec, BLOCK_SPECTRA):  # blocks small enough to stay in cache
        block = slice(start, min(start + BLOCK_SPECTRA, n_spec))
        for sub in range(block.start, block.stop, GEMM_ROWS):
            np.matmul(coef[sub:sub + GEMM_ROWS], design_t, out=fitted[sub:sub + GEMM_ROWS])
        f = fitted[block]
        r = np.subtract(flat[block], f, out=residual[block])
        ss = np.einsum("ij,ij->i", r, r)  # NaN where a reading is missing
        rss[block] = _row_sum_squares(r, ss)
        if on_block is not None:
            on_block(block, flat[block], f, r, dof[block], ss)
    for rows, diag, weighted_rss in solved:
        k = int(dof[rows[0]])
        if k > 0:
            s2 = (rss[rows] if weighted_rss is None else weighted_rss) / k
            std_error[rows] = np.sqrt(np.outer(s2, diag))
        else:
            status[rows] |= NO_DOF
    return Fit(
        coef.reshape(*lead, n_terms),
        std_error.reshape(*lead, n_terms),
        fitted.reshape(*lead, n_wl),
        residual.reshape(*lead, n_wl),
        dof.reshape(lead),
        status.reshape(lead),
        np.sqrt(rss / n_read).reshape(lead),
    )


def _missing_groups(flat: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """(pattern of readings present, rows) for each pattern; complete rows come first."""
    n_spec, n_wl = flat.shape
    incomplete = np.isnan(flat.sum(axis=1))  # one pass, no temporary (infinities refused)
    if not incomplete.any():
        return [(np.ones(n_wl, dtype=bool), np.arange(n_spec))]
    groups = []
    complete = np.flatnonzero(~incomplete)
    if complete.size:
        groups.append((np.ones(n_wl, dtype=bool), complete))
    rest = np.flatnonzero(incomplete)
    patterns, group = np.unique(~np.isnan(flat[rest]), axis=0, return_inverse=True)
    group = group.ravel()
    groups += [(mask, rest[group == g]) for g, mask in enumerate(patterns)]
    return groups


def _take(flat: np.ndarray, rows: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """flat[rows][:, mask], without a copy when that is the whole array."""
    if rows.size == flat.shape[0] and mask.all():
        return flat
    if mask.all():
        return flat[rows]
    return flat[np.ix_(rows, np.flatnonzero(mask))]


def _row_sum_squares(residual: np.ndarray, rss: np.ndarray) -> np.ndarray:
    """Σ r² over present readings per row (NaN readings skipped), from the plain sums."""
    rss = rss.copy()
    bad = ~np.isfinite(rss)
    if bad.any():
        rss[bad] = np.nansum(residual[bad] ** 2, axis=1)
    return rss


def _fit(design: np.ndarray, values: np.ndarray, n_components: int, method: Method) -> np.ndarray:
    if method == "ols":
        # Column scaling keeps lstsq well behaved when ε (~1e4) and baseline (~1) mix.
        norms = np.linalg.norm(design, axis=0)
        sol = np.linalg.pinv(design / norms) @ values.T
        return (sol / norms[:, None]).T
    return nnls_batch(design, values, n_components).x

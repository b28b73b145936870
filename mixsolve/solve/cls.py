"""Classical least squares kernel: many spectra against one design matrix.

Works on plain float64 arrays; the public :func:`mixsolve.unmix` wraps it with labels.
Spectra with missing readings (NaN) are fitted on the wavelengths they have, grouped by
their pattern of missing values so each pattern is solved once.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from mixsolve.flags import DEPENDENT, MISSING, NO_DOF, STATUS_CODES, TOO_FEW
from mixsolve.solve.nnls import nnls_free

Method = Literal["ols", "nnls"]
METHODS: tuple[str, ...] = ("nnls", "ols")

__all__ = ["DEPENDENT", "METHODS", "MISSING", "NO_DOF", "STATUS_CODES", "TOO_FEW", "solve_cls"]


def solve_cls(
    spectra: np.ndarray,
    design: np.ndarray,
    n_components: int,
    method: Method,
    weights: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
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

    Returns
    -------
    coef : ndarray, shape (..., n_terms)
        Fitted coefficients (concentration × pathlength for components, AU for the offset,
        AU/nm for the slope).
    std_error : ndarray, shape (..., n_terms)
        √(s² · diag (DᵀD)⁻¹) with s² = RSS/(n − p); NaN when n − p = 0.
    fitted : ndarray, shape (..., n_wavelengths)
        D·coef at every used wavelength (also where the reading was missing).
    dof : ndarray of int, shape (...)
        Residual degrees of freedom n − p.
    status : ndarray of int, shape (...)
        Bitwise OR of the status bits of this module.
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
    present = ~np.isnan(flat)
    if weights is None:
        patterns, group = np.unique(present, axis=0, return_inverse=True)
        groups = [(mask, np.flatnonzero(group.ravel() == g)) for g, mask in enumerate(patterns)]
        root_w = np.ones_like(flat)
    else:
        groups = [(present[i], np.array([i])) for i in range(n_spec)]
        root_w = np.sqrt(np.where(present, w.reshape(flat.shape), 0.0))
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
        cols = np.flatnonzero(mask)
        if weights is not None:
            scale = root_w[rows[0], cols]
            sub = sub * scale[:, None]
            norms = np.linalg.norm(sub, axis=0)
            values = flat[np.ix_(rows, cols)] * scale
        else:
            values = flat[np.ix_(rows, cols)]
        coef[rows] = _fit(sub, values, n_components, method)
        resid = values - coef[rows] @ sub.T
        k = n_used - n_terms
        dof[rows] = k
        scaled = sub / norms
        inv = np.linalg.inv(scaled.T @ scaled) / np.outer(norms, norms)
        if k > 0:
            s2 = np.sum(resid**2, axis=1) / k
            std_error[rows] = np.sqrt(np.outer(s2, np.clip(np.diag(inv), 0, None)))
        else:
            status[rows] |= NO_DOF
    fitted = coef @ design.T
    return (
        coef.reshape(*lead, n_terms),
        std_error.reshape(*lead, n_terms),
        fitted.reshape(*lead, n_wl),
        dof.reshape(lead),
        status.reshape(lead),
    )


def _fit(design: np.ndarray, values: np.ndarray, n_components: int, method: Method) -> np.ndarray:
    if method == "ols":
        # Column scaling keeps lstsq well behaved when ε (~1e4) and baseline (~1) mix.
        norms = np.linalg.norm(design, axis=0)
        sol = np.linalg.lstsq(design / norms, values.T, rcond=None)[0].T
        return sol / norms
    c, beta = nnls_free(design[:, :n_components], design[:, n_components:], values)
    return np.hstack([c, beta])

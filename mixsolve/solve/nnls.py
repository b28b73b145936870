"""Non-negative least squares with some coefficients left free (baseline terms).

For min ‖a − K c − B β‖² with c ≥ 0 and β free, the free part is eliminated by
projecting onto the orthogonal complement of B: with P = I − Q Qᵀ (Q an orthonormal
basis of B's columns), c solves the plain NNLS problem min ‖P a − P K c‖², and then
β = B⁺ (a − K c). This is exact, not an approximation.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import nnls


def nnls_free(
    constrained: np.ndarray, free: np.ndarray, spectra: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Solve NNLS for many spectra sharing one design.

    Parameters
    ----------
    constrained : array, shape (n_wavelengths, n_constrained)
        Columns whose coefficients must be ≥ 0 (absorptivities).
    free : array, shape (n_wavelengths, n_free)
        Columns whose coefficients are unconstrained (baseline); may have 0 columns.
    spectra : array, shape (n_spectra, n_wavelengths)

    Returns
    -------
    c : ndarray, shape (n_spectra, n_constrained)
    beta : ndarray, shape (n_spectra, n_free)

    Notes
    -----
    Each spectrum is solved by ``scipy.optimize.nnls`` (Lawson–Hanson active set).
    """
    n_spec = spectra.shape[0]
    if free.shape[1]:
        q, _ = np.linalg.qr(free)
        k_proj = constrained - q @ (q.T @ constrained)
        a_proj = spectra - (spectra @ q) @ q.T
    else:
        k_proj, a_proj = constrained, spectra
    c = np.empty((n_spec, constrained.shape[1]))
    for i in range(n_spec):
        c[i], _ = nnls(k_proj, a_proj[i], maxiter=50 * max(constrained.shape[1], 1))
    if free.shape[1]:
        beta = np.linalg.lstsq(free, (spectra - c @ constrained.T).T, rcond=None)[0].T
    else:
        beta = np.empty((n_spec, 0))
    return c, beta

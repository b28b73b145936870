"""Wavelength-shift sensitivity: how far concentrations move per nm of wavelength error.

If the instrument's wavelength scale reads λ where the light is really at λ + δ, the
measured absorbance is A(λ + δ) ≈ A(λ) + δ·dA/dλ = b Σⱼ cⱼ (kⱼ + δ kⱼ′). Least squares
then returns x + δ·D⁺ K′ x, so the bias per +1 nm is

    S = D⁺ K′   (terms × components),   bias(x) = S x  per nm.

At a band maximum k′ = 0 and the shift costs nothing to first order; on a steep shoulder
|k′| is large. The self-sensitivity Sₖₖ is the relative bias of component k per nm when it
is alone in the solution.
"""

from __future__ import annotations

import numpy as np

#: Fewest library points needed to estimate a derivative.
MIN_POINTS_FOR_DERIVATIVE = 3


def library_derivative(absorptivity: np.ndarray, grid_nm: np.ndarray,
                       at_nm: np.ndarray) -> np.ndarray:
    """dε/dλ (unit per nm) on the library grid, interpolated to ``at_nm``.

    Parameters
    ----------
    absorptivity : array, shape (n_components, n_grid)
    grid_nm : array, shape (n_grid,)
    at_nm : array, shape (n_at,)

    Returns
    -------
    ndarray, shape (n_at, n_components)
        NaN everywhere when the library has fewer than 3 wavelengths (a discrete-wavelength
        library carries no slope information).
    """
    if grid_nm.size < MIN_POINTS_FOR_DERIVATIVE:
        return np.full((at_nm.size, absorptivity.shape[0]), np.nan)
    slope = np.gradient(absorptivity, grid_nm, axis=1)
    return np.stack([np.interp(at_nm, grid_nm, row) for row in slope], axis=1)


def shift_matrix(design: np.ndarray, derivative: np.ndarray) -> np.ndarray:
    """S = D⁺ K′: bias of every fitted term per +1 nm shift, per unit of each component.

    Parameters
    ----------
    design : array, shape (n_wavelengths, n_terms)
    derivative : array, shape (n_wavelengths, n_components)

    Returns
    -------
    ndarray, shape (n_terms, n_components), per nm
    """
    return np.linalg.pinv(design) @ derivative

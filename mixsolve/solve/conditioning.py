"""Conditioning and net analyte signal of a design matrix, shared by the capabilities.

Moved here from :mod:`mixsolve.wavelengths.merit` (which re-exports them) so that every
capability package that judges a design (wavelength sets, published equations) uses one
definition without importing another capability:

- condition number κ = σ_max/σ_min of D with columns scaled to unit 2-norm
  (``numpy.linalg.cond``), inf when D is rank deficient;
- sensitivity SENₖ = ‖NASₖ‖ = 1/‖row k of D⁺‖ (Lorber 1986; Olivieri et al. 2006, IUPAC).
"""

from __future__ import annotations

import numpy as np


def _scaled_rank(design: np.ndarray) -> int:
    """Numerical rank of ``design`` with its non-zero columns scaled to unit length."""
    norms = np.linalg.norm(design, axis=0)
    return int(np.linalg.matrix_rank(design / np.where(norms == 0, 1.0, norms)))


def scaled_condition_number(design: np.ndarray) -> float:
    """2-norm condition number of ``design`` with unit-length columns (inf if singular)."""
    norms = np.linalg.norm(design, axis=0)
    if np.any(norms == 0) or design.shape[0] < design.shape[1]:
        return float("inf")
    if _scaled_rank(design) < design.shape[1]:
        # numerically rank deficient: numpy would return a huge finite number
        return float("inf")
    return float(np.linalg.cond(design / norms))


def net_analyte_sensitivity(design: np.ndarray) -> np.ndarray:
    """SEN per column: 1/‖row k of D⁺‖ (D⁺ the Moore–Penrose pseudo-inverse).

    Returns 0 for a column that is a combination of the others (no net signal). When the
    design is rank deficient the identity with D⁺ no longer holds; the other columns'
    SEN is then the norm of their part orthogonal to all other columns, by projection.
    """
    p = design.shape[1]
    rank = _scaled_rank(design)
    if rank == p:
        row_norms = np.linalg.norm(np.linalg.pinv(design), axis=1)
        with np.errstate(divide="ignore"):
            return np.where(row_norms > 0, 1.0 / row_norms, 0.0)
    sen = np.zeros(p)
    for j in range(p):
        others = np.delete(design, j, axis=1)
        if np.linalg.norm(design[:, j]) > 0 and _scaled_rank(others) < rank:
            coef = np.linalg.lstsq(others, design[:, j], rcond=None)[0]
            sen[j] = float(np.linalg.norm(design[:, j] - others @ coef))
    return sen

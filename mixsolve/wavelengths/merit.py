"""Conditioning and net-analyte-signal figures of merit of a design matrix.

For a design matrix D (wavelengths × terms; absorptivity columns at 1 cm first, then any
baseline columns) and a constant reading noise σ_A (AU):

- condition number κ = σ_max/σ_min of D with columns scaled to unit 2-norm
  (``numpy.linalg.cond``), inf when D is rank deficient;
- sensitivity SENₖ = ‖NASₖ‖ = 1/‖row k of D⁺‖ (absorbance per concentration unit at 1 cm):
  the length of the part of column k orthogonal to all other columns (Lorber 1986;
  Olivieri et al. 2006, IUPAC);
- selectivity SELₖ = SENₖ/‖kₖ‖, in (0, 1]: 1 when no other column overlaps it;
- analytical sensitivity γₖ = SENₖ/σ_A (per concentration unit);
- predicted standard uncertainty σ(cₖ) = σ_A/SENₖ at 1 cm, LOD = 3.3 σ_A/SENₖ,
  LOQ = 10 σ_A/SENₖ;
- overlap of components i, j: cosine of the angle between their columns, kᵢ·kⱼ/(‖kᵢ‖‖kⱼ‖).
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


def overlap_matrix(absorptivity: np.ndarray) -> np.ndarray:
    """Cosine similarity between component columns (wavelengths × components)."""
    norms = np.linalg.norm(absorptivity, axis=0)
    unit = absorptivity / np.where(norms == 0, 1.0, norms)
    return unit.T @ unit


def verdict(condition_number: float) -> str:
    """Plain-language reading of a scaled condition number.

    Thresholds (judgement, stated so they can be argued with): below 10 well conditioned;
    10–100 usable, noise amplified up to that factor; 100–1000 poor; above 1000 or
    infinite, the components cannot be told apart reliably.
    """
    if not np.isfinite(condition_number):
        return "singular: the components cannot be separated at these wavelengths"
    if condition_number < 10:
        return "well conditioned (condition number below 10)"
    if condition_number < 100:
        return "usable (condition number 10-100): noise is amplified up to that factor"
    if condition_number < 1000:
        return ("poor (condition number 100-1000): small errors in absorbance or library "
                "move the results a lot; choose better wavelengths")
    return ("ill conditioned (condition number above 1000): results are not reliable; "
            "choose other wavelengths or drop a component")

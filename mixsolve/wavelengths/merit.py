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

from mixsolve.solve.conditioning import (  # noqa: F401  (shared; names kept here)
    net_analyte_sensitivity,
    scaled_condition_number,
)


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

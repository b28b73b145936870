"""Synthetic instrument-check spectra shared by the tests: built from the CHECKS.md values.

Invented, not measured.
"""

from __future__ import annotations

import numpy as np
from scipy.interpolate import CubicSpline

from mixsolve.instrument.absorbance_scale import DICHROMATE_SPECIFIC_ABSORBANCE

#: Wavelengths (nm) of the synthetic dichromate spectra.
UV = np.arange(220.0, 400.1, 1.0)


def dichromate(conc_mg_l: float, scale: float = 1.0) -> np.ndarray:
    """Synthetic dichromate absorbance at the table's nominal A(1 %, 1 cm)."""
    lam = np.array(list(DICHROMATE_SPECIFIC_ABSORBANCE))
    nominal = np.array([v[0] for v in DICHROMATE_SPECIFIC_ABSORBANCE.values()])
    return scale * CubicSpline(lam, nominal)(UV) * conc_mg_l / 1.0e4

"""Invented test data shared by tests and fixtures: Gaussian bands, seeded noise.

Kept out of conftest.py so test modules can import it (the tests folder is on sys.path
under pytest's default import mode); nothing here is measured.
"""

from __future__ import annotations

import numpy as np

SEED = 20240611


def gaussian_bands(wl: np.ndarray, bands: list[tuple[float, float, float]]) -> np.ndarray:
    """Sum of Gaussian bands (height, centre nm, width nm) evaluated at ``wl`` (nm)."""
    wl = np.asarray(wl, dtype=float)
    return sum(h * np.exp(-0.5 * ((wl - c) / w) ** 2) for h, c, w in bands)


#: Invented components: molar absorptivity bands (L/(mol*cm)), centre and width in nm.
COMPONENT_BANDS: dict[str, list[tuple[float, float, float]]] = {
    "yellow": [(12000.0, 440.0, 25.0), (3000.0, 520.0, 30.0)],
    "red": [(15000.0, 510.0, 30.0)],
    "blue": [(9000.0, 610.0, 35.0), (4000.0, 660.0, 20.0)],
}
#: Invented molar masses (g/mol).
COMPONENT_MOLAR_MASS = {"yellow": 350.0, "red": 480.0, "blue": 790.0}

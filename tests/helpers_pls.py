"""Invented PLS data shared by the calibration tests: three Gaussian bands mixed in seeded
random amounts with seeded noise. Nothing here is measured.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

import mixsolve as ms

WL = np.arange(420.0, 681.0, 4.0)
#: Invented bands: centre (nm), width (nm), absorbance per mg/L at 1 cm.
BANDS = {"amber": (450.0, 22.0, 0.10), "rose": (525.0, 25.0, 0.08), "teal": (610.0, 28.0, 0.11)}
COMPONENTS = list(BANDS)


def band(name: str, wl: np.ndarray = WL, shift_nm: np.ndarray | float = 0.0) -> np.ndarray:
    """Absorbance per mg/L of one band; ``shift_nm`` may hold one shift per sample."""
    centre, width, height = BANDS[name]
    shift = np.asarray(shift_nm, dtype=float)[..., None]
    return height * np.exp(-0.5 * ((wl - centre - shift) / width) ** 2)


def simulate(rng: np.random.Generator, n: int, *, shift_per_rose: float = 0.0,
             noise_au: float = 0.002, conc: np.ndarray | None = None,
             wl: np.ndarray = WL) -> tuple[np.ndarray, np.ndarray]:
    """Concentrations (mg/L, n × 3) and absorbance (n × wl); teal moves with rose if asked."""
    conc = rng.uniform([1.0, 0.5, 0.5], [10.0, 10.0, 10.0], (n, 3)) if conc is None else conc
    shift = shift_per_rose * conc[:, 1]
    absorbance = sum(conc[:, [k]] * band(c, wl, shift if c == "teal" else 0.0)
                     for k, c in enumerate(COMPONENTS))
    return conc, absorbance + noise_au * rng.standard_normal(absorbance.shape)


def as_inputs(conc: np.ndarray, absorbance: np.ndarray, wl: np.ndarray = WL,
              prefix: str = "cal") -> tuple[xr.DataArray, pd.DataFrame]:
    """Labelled spectra and a tidy reference table (mg/L)."""
    names = [f"{prefix}_{i + 1:02d}" for i in range(len(conc))]
    spectra = ms.make_spectra(absorbance, wl, names, source="invented")
    rows = [(s, c, conc[i, k], "mg/L") for i, s in enumerate(names)
            for k, c in enumerate(COMPONENTS)]
    return spectra, pd.DataFrame(rows, columns=["sample", "component", "concentration", "unit"])

"""Regenerate the synthetic demo data of mixsolve (an invented scenario).

Scenario (invented): "Hedgerow Colour Works", a small maker of natural colourants, checks
each batch extract for three pigments of its own, called here ``amber``, ``rose`` and
``teal``. None of them is a real compound: their spectra are sums of Gaussian bands chosen
to overlap the way real pigment bands do. Everything written by this script is synthetic.

Run from anywhere: ``python reference_spectra_demo/make_demo_data.py``; it rewrites the
CSV files beside itself. The random generator is seeded, so the files are reproducible.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20261201
WAVELENGTHS_NM = np.arange(380.0, 761.0, 2.0)

#: Bands per pigment: (centre nm, half-width nm, peak specific absorptivity L g⁻¹ cm⁻¹).
BANDS = {
    "amber": [(452.0, 32.0, 52.0), (482.0, 16.0, 14.0)],
    "rose": [(522.0, 38.0, 41.0), (560.0, 18.0, 9.0)],
    "teal": [(612.0, 30.0, 66.0), (568.0, 20.0, 18.0), (420.0, 40.0, 6.0)],
}
#: Invented molar masses (g/mol), so results can also be given in µmol/L.
MOLAR_MASS = {"amber": 352.4, "rose": 610.5, "teal": 792.9}
#: Standard levels (mg/L) of each pigment's dilution series.
LEVELS_MG_L = [2.0, 4.0, 8.0, 12.0, 16.0]
#: Batch extracts with their true content (mg/L), as the demo's known values.
BATCHES_MG_L = {
    "batch_01": (6.0, 4.0, 3.0),
    "batch_02": (9.5, 2.5, 5.0),
    "batch_03": (3.0, 8.0, 1.5),
    "batch_04": (12.0, 0.0, 6.0),
    "batch_05": (5.0, 5.0, 5.0),
    "batch_06": (1.0, 10.0, 8.0),
    "batch_07": (7.5, 6.0, 0.0),
    "batch_08": (4.0, 3.0, 10.0),
}


def absorptivity(name: str, wl: np.ndarray = WAVELENGTHS_NM) -> np.ndarray:
    """Specific absorptivity (L g⁻¹ cm⁻¹) of an invented pigment on ``wl`` (nm)."""
    return sum(h * np.exp(-0.5 * ((wl - c) / w) ** 2) for c, w, h in BANDS[name])


def noisy(absorbance: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Add photometric noise: 0.0015 AU constant plus 0.4 % of the reading (invented)."""
    sigma = 0.0015 + 0.004 * np.abs(absorbance)
    return absorbance + rng.normal(0.0, 1.0, absorbance.shape) * sigma


def main() -> None:
    """Write standards_spectra.csv, standards.csv, batches_spectra.csv, batches_truth.csv."""
    rng = np.random.default_rng(SEED)
    eps = {name: absorptivity(name) for name in BANDS}
    std_cols, sheet = {}, []
    for name in BANDS:
        for i, level in enumerate(LEVELS_MG_L, start=1):
            sample = f"std_{name}_{i}"
            std_cols[sample] = noisy(eps[name] * level / 1000.0, rng)
            sheet.append({"sample": sample, "component": name, "concentration": level,
                          "unit": "mg/L", "pathlength_cm": 1.0,
                          "molar_mass_g_per_mol": MOLAR_MASS[name]})
    batch_cols, truth = {}, []
    for sample, levels in BATCHES_MG_L.items():
        clean = sum(eps[n] * c / 1000.0 for n, c in zip(BANDS, levels, strict=True))
        batch_cols[sample] = noisy(clean, rng)
        truth += [{"sample": sample, "component": n, "concentration": c, "unit": "mg/L"}
                  for n, c in zip(BANDS, levels, strict=True)]
    fmt = "%.5f"
    pd.DataFrame({"wavelength_nm": WAVELENGTHS_NM, **std_cols}).to_csv(
        HERE / "standards_spectra.csv", index=False, float_format=fmt, lineterminator="\n")
    pd.DataFrame(sheet).to_csv(HERE / "standards.csv", index=False, lineterminator="\n")
    pd.DataFrame({"wavelength_nm": WAVELENGTHS_NM, **batch_cols}).to_csv(
        HERE / "batches_spectra.csv", index=False, float_format=fmt, lineterminator="\n")
    pd.DataFrame(truth).to_csv(HERE / "batches_truth.csv", index=False, lineterminator="\n")


if __name__ == "__main__":
    main()

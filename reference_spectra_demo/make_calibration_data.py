"""Write the synthetic PLS calibration data of the demo scenario (invented, like all demo data).

Scenario (invented, continuing ``make_demo_data.py``): "Hedgerow Colour Works" also sells
ready-mixed blends of its three invented pigments ``amber``, ``rose`` and ``teal``. In a
blend, an invented rose–teal complex moves teal's bands to longer wavelengths by
:data:`SHIFT_NM_PER_MG_L` nm per mg/L of rose, so a blend's spectrum is not the sum of the
pure pigments' spectra and a library of pure standards cannot describe it. The maker
therefore calibrates from blends of known composition (PLS, docs/calibration.md).

Written beside this script (the generator is seeded, so the files are reproducible):

- ``calibration_spectra.csv``: 30 calibration blends ``blend_01`` ... ``blend_30``, wide
  table on the grid of the other demo spectra (380–760 nm, 2 nm steps), 1 cm;
- ``calibration_reference.csv``: their composition, ``sample, component, concentration,
  unit`` (mg/L);
- ``calibration_test_spectra.csv``: four new lots ``lot_A`` ... ``lot_D``; ``lot_D`` also
  holds a contaminant with a band at :data:`CONTAMINANT_BAND` that no calibration blend
  contained;
- ``calibration_test_truth.csv``: the pigment contents (mg/L) the lots were made with.

Run from anywhere: ``python reference_spectra_demo/make_calibration_data.py``. The pigment
bands and the noise come from ``make_demo_data.py``, so the two scripts describe one world.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

try:  # imported as mixsolve.reference_spectra_demo.make_calibration_data
    from .make_demo_data import BANDS, WAVELENGTHS_NM, absorptivity, noisy
except ImportError:  # run as a script: python reference_spectra_demo/make_calibration_data.py
    from make_demo_data import BANDS, WAVELENGTHS_NM, absorptivity, noisy  # type: ignore[no-redef]

HERE = Path(__file__).resolve().parent
SEED = 20261206
PIGMENTS = tuple(BANDS)
#: Invented complex: teal's bands move this far (nm) per mg/L of rose in a blend.
SHIFT_NM_PER_MG_L = 0.6
#: Number of calibration blends and the range (mg/L) each pigment spans over them.
N_BLENDS = 30
BLEND_RANGE_MG_L = {"amber": (1.0, 12.0), "rose": (0.0, 10.0), "teal": (0.5, 10.0)}
#: New lots (mg/L of amber, rose, teal), measured after calibration.
LOTS_MG_L = {
    "lot_A": (6.0, 4.0, 3.0),
    "lot_B": (9.5, 2.5, 5.0),
    "lot_C": (3.0, 8.0, 1.5),
    "lot_D": (5.0, 5.0, 5.0),
}
#: The lot with the contaminant, and its Gaussian band: centre (nm), σ (nm), peak (AU, 1 cm).
CONTAMINATED_LOT = "lot_D"
CONTAMINANT_BAND = (675.0, 14.0, 0.05)


def blend_absorbance(amber: float, rose: float, teal: float,
                     wl: np.ndarray = WAVELENGTHS_NM) -> np.ndarray:
    """Absorbance (AU, 1 cm) of a blend of the three pigments (mg/L), before noise.

    A = Σ ε_k(λ) c_k b with ε from ``make_demo_data.absorptivity`` (L g⁻¹ cm⁻¹), except
    that teal's bands are centred :data:`SHIFT_NM_PER_MG_L` · c_rose nm higher.
    """
    shift_nm = SHIFT_NM_PER_MG_L * rose
    return (amber * absorptivity("amber", wl) + rose * absorptivity("rose", wl)
            + teal * absorptivity("teal", wl - shift_nm)) / 1000.0


def blend_design(rng: np.random.Generator) -> np.ndarray:
    """Compositions (mg/L, N_BLENDS × 3) spread evenly and independently over each range.

    Each pigment's range is cut into N_BLENDS equal slices, one value is drawn in each
    slice, and the values are shuffled independently per pigment (a Latin hypercube), so
    the pigments do not vary together. Rounded to 0.01 mg/L, as weighed.
    """
    columns = []
    for name in PIGMENTS:
        low, high = BLEND_RANGE_MG_L[name]
        levels = low + (high - low) * (np.arange(N_BLENDS) + rng.uniform(size=N_BLENDS)) / N_BLENDS
        columns.append(rng.permutation(levels))
    return np.round(np.column_stack(columns), 2)


def contaminant(wl: np.ndarray = WAVELENGTHS_NM) -> np.ndarray:
    """Absorbance (AU, 1 cm) of the contaminant of :data:`CONTAMINATED_LOT`."""
    centre, width, height = CONTAMINANT_BAND
    return height * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def tidy(compositions: dict[str, tuple[float, ...]]) -> pd.DataFrame:
    """Rows ``sample, component, concentration, unit`` (mg/L) of named compositions."""
    return pd.DataFrame([{"sample": s, "component": n, "concentration": c, "unit": "mg/L"}
                         for s, levels in compositions.items()
                         for n, c in zip(PIGMENTS, levels, strict=True)])


def write_calibration_data(folder: Path = HERE) -> list[Path]:
    """Write the four calibration files into ``folder``; return their paths."""
    rng = np.random.default_rng(SEED)
    design = blend_design(rng)
    blends = {f"blend_{i + 1:02d}": tuple(float(c) for c in row) for i, row in enumerate(design)}
    cal = {s: noisy(blend_absorbance(*c), rng) for s, c in blends.items()}
    lots = {}
    for s, c in LOTS_MG_L.items():
        clean = blend_absorbance(*c) + (contaminant() if s == CONTAMINATED_LOT else 0.0)
        lots[s] = noisy(clean, rng)
    paths = [folder / name for name in ("calibration_spectra.csv", "calibration_reference.csv",
                                        "calibration_test_spectra.csv",
                                        "calibration_test_truth.csv")]
    fmt = "%.5f"
    pd.DataFrame({"wavelength_nm": WAVELENGTHS_NM, **cal}).to_csv(
        paths[0], index=False, float_format=fmt, lineterminator="\n")
    tidy(blends).to_csv(paths[1], index=False, lineterminator="\n")
    pd.DataFrame({"wavelength_nm": WAVELENGTHS_NM, **lots}).to_csv(
        paths[2], index=False, float_format=fmt, lineterminator="\n")
    tidy(LOTS_MG_L).to_csv(paths[3], index=False, lineterminator="\n")
    return paths


if __name__ == "__main__":
    for path in write_calibration_data():
        print(f"wrote {path}")

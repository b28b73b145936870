"""Invented plate-reader exports and the plate scenario shared by the plate tests.

Two Gaussian bands ("red", "blue"; tests/helpers_io.py) in known amounts per well, written
in each generic export layout (grid blocks, well columns, long) with free-text lines; the
scenario is a 96-well plate of blanks, six samples in triplicate at two dilutions and
standards of both components, with seeded noise. Nothing here is measured.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
from helpers_io import WL, band, fmt, write_text, write_xlsx

from mixsolve.plate.wells import plate_wells

BACKGROUND_AU = 0.035  # invented plate + solvent absorbance, the same in every well
#: Free-text lines an export may carry (none is a wavelength line or a plate header).
JUNK = ["Invented plate reader export", "Operator: nobody in particular", "Run notes only"]

Markers = Mapping[tuple[str, float], str]


def export_rows(layout: str, wells: list[str], wl: np.ndarray, values: np.ndarray, *,
                size: int, markers: Markers | None = None, junk: bool = True,
                zero_pad: bool = False) -> list[list[object]]:
    """Cells of an export in one of the three layouts (floats stay floats)."""
    markers = markers or {}
    index = {w: i for i, w in enumerate(wells)}

    def cell(well: str, j: int) -> object:
        return markers.get((well, float(wl[j])), float(values[index[well], j]))

    def label(well: str) -> str:
        return f"{well[0]}{int(well[1:]):02d}" if zero_pad else well

    rows: list[list[object]] = [[JUNK[0]], [JUNK[1]]] if junk else []
    n_rows, n_cols = {96: (8, 12), 384: (16, 24)}[size]
    if layout == "grid blocks":
        for j, w in enumerate(wl):
            rows.append([f"Wavelength: {w:g} nm"])
            rows.append(["", *range(1, n_cols + 1)])
            for r in range(n_rows):
                letter = "ABCDEFGHIJKLMNOP"[r]
                rows.append([letter, *(cell(f"{letter}{c}", j) for c in range(1, n_cols + 1))])
            if junk:
                rows.append([JUNK[2]])
    elif layout == "well columns":
        rows.append(["wavelength_nm", *map(label, wells)])
        rows += [[float(w), *(cell(well, j) for well in wells)] for j, w in enumerate(wl)]
    else:
        rows.append(["well", "wavelength_nm", "absorbance"])
        rows += [[label(well), float(w), cell(well, j)] for well in wells
                 for j, w in enumerate(wl)]
    if junk:
        rows.append(["End of export"])
    return rows


def write_export(path: Path, rows: list[list[object]], *, sep: str = ",",
                 decimal: str = ".") -> Path:
    """Write export cells as delimited text, or as XLSX when ``path`` ends in .xlsx."""
    if path.suffix == ".xlsx":
        return write_xlsx(path, rows[0], rows[1:], sheet="Readings")
    text = "\n".join(sep.join(fmt(c, decimal) for c in row) for row in rows) + "\n"
    return write_text(path, text)


def synthetic_water(wl: np.ndarray) -> np.ndarray:
    """Invented absorbance of 1 cm of water: a flat 0.004 AU plus a band at 975 nm, scaled so
    that A(977) − A(900) is exactly 0.18 AU (the CHECKS.md value, from memory)."""
    shape = np.exp(-0.5 * ((wl - 975.0) / 28.0) ** 2)
    at = np.exp(-0.5 * ((np.array([900.0, 977.0]) - 975.0) / 28.0) ** 2)
    return 0.004 + 0.18 * shape / (at[1] - at[0])


#: Seed of the scenario's noise.
SCENARIO_SEED = 20240612
#: Invented samples (red, blue in mol/L).
SAMPLES = {"S1": (2.0e-5, 1.0e-5), "S2": (1.2e-5, 2.4e-5), "S3": (3.0e-5, 0.0),
           "S4": (0.8e-5, 0.8e-5), "S5": (2.5e-5, 3.0e-5), "S6": (1.5e-5, 1.8e-5)}
#: Standards in row H: well -> (component, mol/L).
STANDARDS = {"H1": ("red", 1e-5), "H2": ("red", 2e-5), "H3": ("red", 4e-5),
             "H4": ("blue", 1e-5), "H5": ("blue", 2e-5), "H6": ("blue", 4e-5)}


def scenario_layout() -> list[dict[str, object]]:
    """Blanks A1-A4; S1-S6 in rows B-G, columns 1-3 neat and 4-6 diluted 2-fold; standards
    H1-H6; H7 listed as empty. Other wells are not listed."""
    rows: list[dict[str, object]] = [{"well": f"A{c}", "role": "blank"} for c in range(1, 5)]
    for r, sample in zip("BCDEFG", SAMPLES, strict=True):
        rows += [{"well": f"{r}{c}", "role": "sample", "sample": sample,
                  "dilution": 1 if c <= 3 else 2} for c in range(1, 7)]
    rows += [{"well": w, "role": "standard", "sample": f"std_{comp}", "component": comp,
              "concentration": c * 1e3, "unit": "mmol/L"} for w, (comp, c) in STANDARDS.items()]
    rows.append({"well": "H7", "role": "empty"})
    return rows


def write_layout(path: Path, rows: list[dict[str, object]] | None = None) -> Path:
    """Write a layout CSV (columns well, role, sample, dilution, component, concentration,
    unit)."""
    frame = pd.DataFrame(rows if rows is not None else scenario_layout(),
                         columns=["well", "role", "sample", "dilution", "component",
                                  "concentration", "unit"])
    frame.to_csv(path, index=False, lineterminator="\n")
    return path


def in_well(well: str, layout: list[dict[str, object]]) -> tuple[float, float]:
    """Concentrations (mol/L) actually in a well of the scenario."""
    entry = next((e for e in layout if e["well"] == well), None)
    if entry is None or entry["role"] in ("blank", "empty"):
        return 0.0, 0.0
    if entry["role"] == "standard":
        comp, c = STANDARDS[well]
        return (c, 0.0) if comp == "red" else (0.0, c)
    red, blue = SAMPLES[str(entry["sample"])]
    d = float(entry["dilution"])  # type: ignore[arg-type]
    return red / d, blue / d


def scenario_values(pathlength: np.ndarray | float = 0.5, wl: np.ndarray = WL, *,
                    water: bool = False, noise_au: float = 0.0008, seed: int = SCENARIO_SEED
                    ) -> tuple[list[str], np.ndarray]:
    """Raw absorbance of all 96 wells of the scenario (wells × wavelengths)."""
    rng = np.random.default_rng(seed)
    layout = scenario_layout()
    wells = plate_wells(96)
    conc = np.array([in_well(w, layout) for w in wells])
    b = np.broadcast_to(np.asarray(pathlength, dtype=float), (len(wells),))[:, None]
    eps = np.vstack([band("red", wl), band("blue", wl)])
    values = BACKGROUND_AU + b * (conc @ eps)
    if water:
        values = values + b * synthetic_water(wl)[None, :]
    return wells, values + noise_au * rng.standard_normal(values.shape)


def write_scenario(folder: Path, name: str = "plate1.csv", **kwargs: object) -> Path:
    """Write the scenario as a grid-block export (comma, point) with free-text lines."""
    wl = kwargs.pop("wl", WL)
    wells, values = scenario_values(wl=wl, **kwargs)  # type: ignore[arg-type]
    return write_export(folder / name, export_rows("grid blocks", wells, wl, values, size=96))

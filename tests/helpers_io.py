"""Small invented input files for the I/O and command-line tests.

Everything here is invented: two Gaussian absorption bands ("red" at 450 nm, "blue" at
620 nm) over 400–700 nm in 10 nm steps, mixed in known amounts. Numbers are chosen so
the absorbances stay near 0.1–1 AU.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

import mixsolve as ms

WL = np.arange(400.0, 701.0, 10.0)
"""Wavelength grid of the invented data (nm), 31 points."""

#: Peak molar absorptivities (L/(mol*cm)), centres and widths (nm) of the two bands.
BANDS = {"red": (2.0e4, 450.0, 30.0), "blue": (1.5e4, 620.0, 40.0)}
MOLAR_MASS = {"red": 500.0, "blue": 800.0}
#: Known mixtures (mol/L) used for the spectra files; peaks within the reliable 0.3–2 AU.
MIXTURES = {"mix_1": {"red": 2.0e-5, "blue": 3.0e-5}, "mix_2": {"red": 2.5e-5, "blue": 2.0e-5}}


def band(name: str, wl: np.ndarray = WL) -> np.ndarray:
    """Molar absorptivity (L/(mol*cm)) of one invented component at ``wl`` (nm)."""
    peak, centre, width = BANDS[name]
    return peak * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def absorptivity_frame(wl: np.ndarray = WL) -> pd.DataFrame:
    """Absorptivities of both components, wavelengths (nm) as index."""
    return pd.DataFrame({name: band(name, wl) for name in BANDS}, index=wl)


def mixture_absorbance(conc: Mapping[str, float], wl: np.ndarray = WL,
                       pathlength_cm: float = 1.0) -> np.ndarray:
    """Beer–Lambert absorbance (AU) of a mixture (mol/L)."""
    return pathlength_cm * sum(c * band(name, wl) for name, c in conc.items())


def mixture_columns(wl: np.ndarray = WL, *, noise_au: float = 0.0,
                    seed: int = 20240601) -> dict[str, np.ndarray]:
    """Absorbance of every mixture in MIXTURES, by sample name, plus seeded noise (AU)."""
    rng = np.random.default_rng(seed)
    return {name: mixture_absorbance(conc, wl) + noise_au * rng.standard_normal(wl.size)
            for name, conc in MIXTURES.items()}


def flagged_columns(wl: np.ndarray = WL, *, noise_au: float = 1e-3,
                    seed: int = 7) -> dict[str, np.ndarray]:
    """One clean mixture and one whose blue share is negative (NNLS holds blue at zero).

    Seeded noise (AU) keeps the residuals realistic: a noise-free fit leaves only
    round-off, which says nothing about the model.
    """
    rng = np.random.default_rng(seed)
    return {"clean": mixture_absorbance(MIXTURES["mix_1"], wl)
            + noise_au * rng.standard_normal(wl.size),
            "odd": mixture_absorbance({"red": 2.0e-5, "blue": -0.5e-5}, wl)
            + noise_au * rng.standard_normal(wl.size)}


def fmt(value: object, decimal: str = ".") -> str:
    """Format one cell as text, with the given decimal mark; NaN becomes an empty cell."""
    if isinstance(value, float | np.floating):
        if np.isnan(value):
            return ""
        text = repr(float(value))
        return text.replace(".", ",") if decimal == "," else text
    return str(value)


def table_text(header: Sequence[str], rows: Sequence[Sequence[object]], *, sep: str = ",",
               decimal: str = ".", newline: str = "\n") -> str:
    """Join a header and rows into delimited text."""
    lines = [sep.join(header)]
    lines += [sep.join(fmt(v, decimal) for v in row) for row in rows]
    return newline.join(lines) + newline


def write_text(path: Path, text: str, *, encoding: str = "utf-8") -> Path:
    """Write text exactly as given (no newline translation)."""
    path.write_bytes(text.encode(encoding))
    return path


def wide_rows(columns: Mapping[str, np.ndarray], wl: np.ndarray = WL) -> list[list[object]]:
    """Rows of a wide table: wavelength then one value per column."""
    return [[float(w), *(float(v[i]) for v in columns.values())] for i, w in enumerate(wl)]


def write_wide(path: Path, columns: Mapping[str, np.ndarray] | None = None,
               wl: np.ndarray = WL, *, first: str = "wavelength_nm", sep: str = ",",
               decimal: str = ".", newline: str = "\n", encoding: str = "utf-8") -> Path:
    """Write a wide spectra (or absorptivity) table."""
    columns = mixture_columns(wl) if columns is None else columns
    text = table_text([first, *columns], wide_rows(columns, wl), sep=sep, decimal=decimal,
                      newline=newline)
    return write_text(path, text, encoding=encoding)


def write_long(path: Path, columns: Mapping[str, np.ndarray] | None = None,
               wl: np.ndarray = WL, *, sep: str = ",", decimal: str = ".") -> Path:
    """Write a long spectra table: sample, wavelength_nm, absorbance."""
    columns = mixture_columns(wl) if columns is None else columns
    rows = [[name, float(w), float(values[i])] for name, values in columns.items()
            for i, w in enumerate(wl)]
    return write_text(path, table_text(["sample", "wavelength_nm", "absorbance"], rows,
                                       sep=sep, decimal=decimal))


def write_xlsx(path: Path, header: Sequence[object], rows: Sequence[Sequence[object]], *,
               sheet: str = "Sheet1") -> Path:
    """Write a one-sheet XLSX workbook with openpyxl."""
    import openpyxl

    book = openpyxl.Workbook()
    ws = book.active
    ws.title = sheet
    ws.append(list(header))
    for row in rows:
        ws.append(list(row))
    book.save(path)
    return path


def write_absorptivity_table(path: Path, wl: np.ndarray = WL) -> Path:
    """Write the absorptivity table (L/(mol*cm)) of both components."""
    frame = absorptivity_frame(wl)
    return write_wide(path, {c: frame[c].to_numpy() for c in frame.columns}, wl)


def make_library(wl: np.ndarray = WL) -> xr.Dataset:
    """Library of the two invented components, molar basis, with molar masses."""
    return ms.import_absorptivities(absorptivity_frame(wl), "L/(mol*cm)",
                                    molar_mass_g_per_mol=MOLAR_MASS, solvent="water",
                                    bandwidth_nm=2.0, source="invented")


def write_library_file(path: Path, wl: np.ndarray = WL) -> Path:
    """Write :func:`make_library` to ``path`` (netCDF)."""
    ms.write_library(make_library(wl), path)
    return path


#: Standards: sample -> (component, concentration in mmol/L); three levels each.
STANDARDS = {
    "r1": ("red", 0.01), "r2": ("red", 0.02), "r3": ("red", 0.04),
    "b1": ("blue", 0.01), "b2": ("blue", 0.03), "b3": ("blue", 0.05),
}


def write_standards(folder: Path) -> tuple[Path, Path]:
    """Write spectra of pure standards and their sheet; return (spectra, sheet) paths."""
    columns = {s: mixture_absorbance({comp: c * 1e-3}) for s, (comp, c) in STANDARDS.items()}
    spectra = write_wide(folder / "standards.csv", columns)
    rows = [[s, comp, c, "mmol/L"] for s, (comp, c) in STANDARDS.items()]
    sheet = write_text(folder / "sheet.csv",
                       table_text(["sample", "component", "concentration", "unit"], rows))
    return spectra, sheet


def leftovers(folder: Path) -> list[str]:
    """Names of temporary ``.part`` files left in ``folder``."""
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".part"))


#: The fix every "is not a number" refusal of a table cell ends with (regex; the empty-cell
#: advice only where a cell may be missing).
NUMBER_FIX = (r"; write it as a number \(digits and one decimal separator, no unit\)"
              r"( or leave the cell empty)?$")

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
#: How well the invented lab makes up its standards (relative standard uncertainties),
#: declared in the standards sheet as the lab would: each standard's own dilution
#: (u_concentration) and the stock every standard of a pigment is diluted from (u_stock_rel).
#: The true concentrations are drawn with these errors; the sheet states the nominal ones.
PREPARATION_REL = 0.01
STOCK_REL = 0.005
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
    """Write standards_spectra.csv, standards.csv, batches_spectra.csv, batches_truth.csv,
    then the plate files (:func:`write_plate_demo`)."""
    rng = np.random.default_rng(SEED)
    # the preparation errors from a stream of their own, so the noise draws stay as they were
    made_up = np.random.default_rng(np.random.SeedSequence(SEED).spawn(1)[0])
    eps = {name: absorptivity(name) for name in BANDS}
    std_cols, sheet = {}, []
    for name in BANDS:
        stock = 1.0 + STOCK_REL * made_up.standard_normal()
        for i, level in enumerate(LEVELS_MG_L, start=1):
            sample = f"std_{name}_{i}"
            actual = level * stock * (1.0 + PREPARATION_REL * made_up.standard_normal())
            std_cols[sample] = noisy(eps[name] * actual / 1000.0, rng)
            sheet.append({"sample": sample, "component": name, "concentration": level,
                          "unit": "mg/L", "pathlength_cm": 1.0,
                          "molar_mass_g_per_mol": MOLAR_MASS[name],
                          "u_concentration": round(PREPARATION_REL * level, 6),
                          "stock": f"{name} stock", "u_stock_rel": STOCK_REL})
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
    write_plate_demo()


#: The plate run (invented): eight stronger extracts (mg/L), each in triplicate at two
#: dilutions, read on a 96-well plate filled with 300 µL per well.
PLATE_SEED = 20261202
PLATE_WAVELENGTHS_NM = np.arange(400.0, 701.0, 5.0)
PLATE_EXTRACTS_MG_L = {
    "extract_01": (24.0, 10.0, 8.0),
    "extract_02": (12.0, 30.0, 6.0),
    "extract_03": (30.0, 0.0, 14.0),
    "extract_04": (8.0, 16.0, 24.0),
    "extract_05": (18.0, 18.0, 18.0),
    "extract_06": (40.0, 6.0, 0.0),
    "extract_07": (5.0, 24.0, 30.0),
    "extract_08": (20.0, 12.0, 12.0),
}
PLATE_VOLUME_UL = 300.0
PLATE_WELL_DIAMETER_MM = 6.96
#: A reading the invented reader marked as saturated (a bubble, say), to show the handling.
PLATE_MARKERS = {("D3", 450.0): "OVER", ("D3", 455.0): "OVER"}


def plate_layout_rows() -> list[dict[str, object]]:
    """Column 1 blanks; rows A-H one extract each, columns 2-4 diluted 2-fold and 5-7
    4-fold; columns 8-12 empty."""
    rows: list[dict[str, object]] = []
    for letter, sample in zip("ABCDEFGH", PLATE_EXTRACTS_MG_L, strict=True):
        for col in range(1, 13):
            role, name, dilution = "empty", "", ""
            if col == 1:
                role = "blank"
            elif col <= 7:
                role, name, dilution = "sample", sample, 2 if col <= 4 else 4
            rows.append({"well": f"{letter}{col}", "role": role, "sample": name,
                         "dilution": dilution})
    return rows


def write_plate_demo() -> None:
    """Write plate_export.csv (grid blocks), plate_layout.csv and plate_truth.csv."""
    rng = np.random.default_rng(PLATE_SEED)
    wl = PLATE_WAVELENGTHS_NM
    eps = np.vstack([absorptivity(name, wl) for name in BANDS])
    layout = plate_layout_rows()
    radius_cm = PLATE_WELL_DIAMETER_MM / 20.0
    plastic = 0.045 + 2e-5 * (wl - 400.0)  # invented plate absorbance, every well
    readings = {}
    for row in layout:
        if row["role"] == "sample":
            conc = np.array(PLATE_EXTRACTS_MG_L[str(row["sample"])]) / float(row["dilution"])
        else:
            conc = np.zeros(len(BANDS))
        volume = PLATE_VOLUME_UL * (1.0 + 0.01 * rng.standard_normal())  # pipetting, 1 %
        b = volume * 1e-3 / (np.pi * radius_cm**2)
        liquid = b * (conc / 1000.0) @ eps if row["role"] != "empty" else 0.0 * wl
        readings[str(row["well"])] = noisy(plastic + liquid, rng)
    lines = ["Hedgerow Colour Works - weekly extracts, plate run (synthetic data)",
             "Reader: invented; absorbance; 61 wavelengths", ""]
    for j, w in enumerate(wl):
        lines += [f"Wavelength: {w:g} nm", ";" + ";".join(str(c) for c in range(1, 13))]
        for letter in "ABCDEFGH":
            cells = [PLATE_MARKERS.get((f"{letter}{c}", float(w)),
                                       f"{readings[f'{letter}{c}'][j]:.4f}".replace(".", ","))
                     for c in range(1, 13)]
            lines.append(letter + ";" + ";".join(cells))
        lines.append("")
    lines.append("End of run")
    (HERE / "plate_export.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    pd.DataFrame(layout).to_csv(HERE / "plate_layout.csv", index=False, lineterminator="\n")
    truth = [{"sample": s, "component": n, "concentration": c, "unit": "mg/L"}
             for s, levels in PLATE_EXTRACTS_MG_L.items()
             for n, c in zip(BANDS, levels, strict=True)]
    pd.DataFrame(truth).to_csv(HERE / "plate_truth.csv", index=False, lineterminator="\n")


if __name__ == "__main__":
    main()

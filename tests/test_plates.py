"""Plate exports (mixsolve.io.plates) and plate maths (mixsolve.plate.wells).

Every export here is invented: two Gaussian bands ("red", "blue"; tests/helpers_io.py) mixed
in known, seeded concentrations per well, written in each generic layout (grid blocks, well
columns, long), 96 and 384 wells, CSV/TSV/XLSX, with decimal commas, free-text lines and
saturation markers. The tests read them back and recover the concentrations.
"""

from __future__ import annotations

import json
from collections.abc import Mapping

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_io import WL, band, make_library, write_text
from helpers_plate import BACKGROUND_AU, export_rows, synthetic_water, write_export

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.plate.analysis import analyse_plate
from mixsolve.plate.wells import (
    parse_well,
    pathlength_from_volume,
    plate_wells,
    replicate_statistics,
    subtract_blank,
    water_band_pathlength,
)

SEED = 20240611
PATHLENGTH_CM = 0.5


def plate_concentrations(size: int, rng: np.random.Generator) -> dict[str, tuple[float, float]]:
    """Known red/blue concentrations (mol/L) per well; row A holds blanks (0, 0)."""
    out = {}
    for well in plate_wells(size):
        out[well] = (0.0, 0.0) if well.startswith("A") else tuple(rng.uniform(4e-6, 3e-5, 2))
    return out


def plate_absorbance(conc: Mapping[str, tuple[float, float]], wl: np.ndarray = WL, *,
                     pathlength_cm: float = PATHLENGTH_CM, noise_au: float = 0.0,
                     rng: np.random.Generator | None = None) -> np.ndarray:
    """Raw absorbance (wells × wavelengths): background + b·Σ ε c, plus seeded noise."""
    eps = np.vstack([band("red", wl), band("blue", wl)])
    values = BACKGROUND_AU + pathlength_cm * np.array(list(conc.values())) @ eps
    if noise_au:
        values = values + noise_au * (rng or np.random.default_rng(SEED)).standard_normal(
            values.shape)
    return values


def layout_frame(wells: list[str], *, source: str = "layout.csv") -> pd.DataFrame:
    """A layout as read_layout returns it: row A blanks, one sample per remaining well."""
    roles = ["blank" if w.startswith("A") else "sample" for w in wells]
    frame = pd.DataFrame({"line": np.arange(len(wells)) + 2, "well": wells, "role": roles,
                          "sample": [w if r == "sample" else "" for w, r in
                                     zip(wells, roles, strict=True)],
                          "dilution": 1.0, "component": "", "concentration": np.nan,
                          "unit": ""})
    frame.attrs["source"] = source
    return frame


FORMATS = {  # name: (file suffix, separator, decimal mark, separator as recorded)
    "csv": (".csv", ",", ".", "comma"),
    "csv-semicolon-decimal-comma": (".csv", ";", ",", "semicolon"),
    "tsv": (".tsv", "\t", ".", "tab"),
    "tsv-decimal-comma": (".tsv", "\t", ",", "tab"),
    "xlsx": (".xlsx", None, ".", "xlsx"),
}


# --- every layout × plate size × file format, with markers: read back and recover --------


@pytest.mark.parametrize("fmt_name", list(FORMATS))
@pytest.mark.parametrize("size", [96, 384])
@pytest.mark.parametrize("layout", ["grid blocks", "well columns", "long"])
def test_exports_read_back_and_concentrations_recovered(tmp_path, layout, size, fmt_name):
    rng = np.random.default_rng(SEED + size)
    conc = plate_concentrations(size, rng)
    wells = list(conc)
    wl = WL if size == 96 else WL[::2]  # 31 or 16 wavelengths: enough, and quick
    values = plate_absorbance(conc, wl, noise_au=0.001, rng=rng)
    markers = {("C4", 440.0): "OVER", ("C4", 460.0): "OVER", ("D2", 620.0): "*****"}
    suffix, sep, decimal, sep_name = FORMATS[fmt_name]
    path = write_export(tmp_path / f"export{suffix}", export_rows(
        layout, wells, wl, values, size=size, markers=markers, zero_pad=size == 96),
        sep=sep or ",", decimal=decimal)

    plate = ms.read_plate(path)

    assert plate.dims == ("well", "wavelength")
    assert (plate.attrs["layout"], plate.attrs["plate_size"]) == (layout, size)
    assert (plate.attrs["separator"], plate.attrs["decimal"]) == (sep_name, decimal)
    assert list(plate["well"].values) == wells  # plate order, A01 read as A1
    np.testing.assert_allclose(plate["wavelength"].values, wl)
    expected = values.copy()
    for (well, w), _ in markers.items():
        expected[wells.index(well), list(wl).index(w)] = np.nan
    np.testing.assert_allclose(plate.values, expected, rtol=1e-12)
    assert json.loads(plate.attrs["markers"]) == {
        "C4": [[440.0, "OVER"], [460.0, "OVER"]], "D2": [[620.0, "*****"]]}

    done = analyse_plate(plate, layout_frame(wells), make_library(),
                         pathlength_cm=PATHLENGTH_CM)
    found = done.wells.pivot(index="well", columns="component", values="concentration")
    u = done.wells.pivot(index="well", columns="component", values="std_uncertainty")
    truth = pd.DataFrame(conc, index=["red", "blue"]).T
    samples = [w for w in wells if not w.startswith("A")]
    error = (found.loc[samples, ["red", "blue"]] - truth.loc[samples]).abs().to_numpy()
    z = error / u.loc[samples, ["red", "blue"]].to_numpy()
    # |z| of normal errors has median 0.67; the blank mean's own noise, common to all wells
    # and not in u (docs/plates.md), adds a little. 720 values may hold one beyond 5.
    assert np.median(z) < 1.0 and z.max() < 6.5
    assert error.max() < 5e-7  # mol/L, against 4e-6 to 3e-5 in the wells
    flags = done.wells.drop_duplicates("well").set_index("well")["flags"]
    assert "marker:OVER" in flags["C4"] and "missing_readings" in flags["C4"]
    assert "marker:_____" in flags["D2"]
    assert "marker" not in flags["B5"]


def test_xlsx_sheet_is_chosen_by_name(tmp_path):
    import openpyxl

    conc = plate_concentrations(96, np.random.default_rng(SEED))
    rows = export_rows("long", list(conc), WL, plate_absorbance(conc), size=96, junk=False)
    book = openpyxl.Workbook()
    book.active.title = "Notes"
    book.active.append(["nothing to see here"])
    sheet = book.create_sheet("Data")
    for row in rows:
        sheet.append(row)
    book.save(tmp_path / "two_sheets.xlsx")
    plate = ms.read_plate(tmp_path / "two_sheets.xlsx", sheet="Data")
    assert plate.attrs["layout"] == "long" and plate.sizes["well"] == 96
    assert plate.attrs["sheet"] == "sheet 'Data'"
    with pytest.raises(FileFormatError, match=r"^two_sheets\.xlsx: no plate layout found"):
        ms.read_plate(tmp_path / "two_sheets.xlsx")


@pytest.mark.parametrize("line", ["450", "Wavelength;450 nm", "λ = 450nm",
                                  "Absorbance @ 450 nm (read 1)", "Wavelength [nm]: 450"])
def test_wavelength_line_variants(tmp_path, line):
    header = ";" + ";".join(map(str, range(1, 13)))
    body = "\n".join(f"{r};" + ";".join(["0,25"] * 12) for r in "ABCDEFGH")
    path = write_text(tmp_path / "w.csv", f"Export\n{line}\n{header}\n{body}\n")
    plate = ms.read_plate(path)
    assert plate["wavelength"].values.tolist() == [450.0]
    assert plate.attrs["decimal"] == ","
    np.testing.assert_allclose(plate.values, 0.25)


def test_empty_cell_is_missing_but_not_a_marker(tmp_path):
    text = "wavelength_nm,A1,A2\n400,0.1,\n410,0.2,0.3\n"
    plate = ms.read_plate(write_text(tmp_path / "gap.csv", text))
    assert np.isnan(plate.sel(well="A2", wavelength=400.0))
    assert json.loads(plate.attrs["markers"]) == {}
    assert plate.attrs["plate_size"] == 96


def test_any_non_numeric_reading_is_a_marker(tmp_path):
    text = _grid_text().replace("A,0.2,0.2,0.2,", "A,>3.5,Err,0.2;5,", 1)
    plate = ms.read_plate(write_text(tmp_path / "marks.csv", text))
    assert json.loads(plate.attrs["markers"]) == {
        "A1": [[450.0, ">3.5"]], "A2": [[450.0, "Err"]], "A3": [[450.0, "0.2;5"]]}
    assert np.isnan(plate.sel(well=["A1", "A2", "A3"])).all()
    assert np.isfinite(plate.sel(well="A4")).all()


def test_384_is_chosen_when_a_well_lies_beyond_h12(tmp_path):
    text = "well,wavelength_nm,absorbance\nA1,400,0.1\nI13,400,0.2\n"
    assert ms.read_plate(write_text(tmp_path / "big.csv", text)).attrs["plate_size"] == 384


# --- errors: each names the file, line, well and value -----------------------------------


def _grid_text(rows: int = 8, cols: int = 12, wavelength_line: str = "Wavelength: 450 nm",
               extra: str = "") -> str:
    header = "," + ",".join(map(str, range(1, cols + 1)))
    body = "\n".join(f"{'ABCDEFGHIJKLMNOP'[r]}," + ",".join(["0.2"] * cols) + extra
                     for r in range(rows))
    return f"{wavelength_line}\n{header}\n{body}\n"


@pytest.mark.parametrize(
    ("text", "error", "message"),
    [
        ("hello,world\n1,2\n", FileFormatError,
         r"^p\.csv: no plate layout found; expected grid blocks \(a line naming the "
         r"wavelength, a header of column numbers 1-12 or 1-24, rows lettered A-H or A-P\), "
         r"well columns \(wavelength_nm, A1, A2, \.\.\.\) or long \(well, wavelength_nm, "
         r"absorbance\); see docs/plates\.md$"),
        (_grid_text(rows=7), FileFormatError,
         r"^p\.csv, line 2: the block at 450 nm has rows A-G \(7\); a 96-well block has "
         r"rows A-H$"),
        (_grid_text() + _grid_text(), InputError,
         r"^p\.csv, line 11: wavelength 450 nm appears twice \(also on line 1\)$"),
        (_grid_text() + _grid_text(16, 24, "Wavelength: 460 nm"), FileFormatError,
         r"^p\.csv, line 12: a 384-well block at 460 nm after 96-well blocks; one export "
         r"holds one plate format$"),
        (_grid_text(extra=",0.3"), FileFormatError,
         r"^p\.csv, line 3: row A of the block at 450 nm has values beyond column 12$"),
        (_grid_text(wavelength_line="Plate 2 read 3"), FileFormatError,
         r"^p\.csv, line 1: cannot tell the wavelength of the next block from 'Plate 2 read "
         r"3'; the line before a header of plate columns must name one wavelength"),
        ("Export\n" + _grid_text().split("\n", 1)[1], FileFormatError,
         r"^p\.csv, line 1: cannot tell the wavelength of the next block from 'Export'"),
        ("wavelength_nm,A1,B2,Temp\n400,0.1,0.2,25\n", FileFormatError,
         r"^p\.csv, line 1, column 4: 'Temp' is not a well name \(A1 or A01\); a "
         r"well-columns export has wavelength_nm, then one column per well$"),
        ("wavelength_nm,A1,A01\n400,0.1,0.2\n", InputError,
         r"^p\.csv, line 1: well A1 appears twice \(columns 2 and 3\)$"),
        ("wavelength_nm,A1\n400,0.1\nnote\n410,0.2\n", FileFormatError,
         r"^p\.csv, line 3: 'note' interrupts the data rows \(a wavelength in the first "
         r"column expected\); remove the line or fix it$"),
        ("wavelength_nm,A1\n400,0.1\n400 nm,0.2\n", InputError,
         r"^p\.csv, line 3: wavelength 400 nm appears twice \(also on line 2\)$"),
        ("well,wavelength_nm,absorbance\nB3,400,0.1\nB03,400,0.2\n", InputError,
         r"^p\.csv, line 3: well B3 has wavelength 400 nm twice \(also on line 2\)$"),
        ("well,wavelength_nm,absorbance\nA1,-5,0.1\n", InputError,
         r"^p\.csv, line 2: wavelength -5 nm is not positive$"),
    ],
)
def test_export_errors(tmp_path, text, error, message):
    path = write_text(tmp_path / "p.csv", text)
    with pytest.raises(error, match=message):
        ms.read_plate(path)


def test_decimal_point_in_a_decimal_comma_export_is_an_error(tmp_path):
    text = "wavelength_nm;A1;A2\n400;0,1;0,2\n410;0,3;0.4\n"
    with pytest.raises(FileFormatError, match=r"^p\.csv: mixed decimal marks \(comma on line "
                                              r"2, point on line 3\)"):
        ms.read_plate(write_text(tmp_path / "p.csv", text))


def test_well_off_the_requested_plate(tmp_path):
    path = write_text(tmp_path / "p.csv", "well,wavelength_nm,absorbance\nM5,400,0.1\n")
    with pytest.raises(InputError, match=r"^p\.csv: well M5 is not on a 96-well plate "
                                         r"\(A1-H12\)$"):
        ms.read_plate(path, plate_size=96)
    with pytest.raises(InputError, match=r"^plate_size: 48 is not one of 96, 384$"):
        ms.read_plate(path, plate_size=48)


def test_well_beyond_any_plate(tmp_path):
    path = write_text(tmp_path / "p.csv", "well,wavelength_nm,absorbance\nA30,400,0.1\n")
    with pytest.raises(InputError, match=r"^p\.csv: well A30 is not on a 384-well plate$"):
        ms.read_plate(path)


# --- core plate maths ---------------------------------------------------------------------


@pytest.mark.parametrize(("text", "position"), [
    ("A1", (0, 1)), ("a01", (0, 1)), (" H12 ", (7, 12)), ("P24", (15, 24)), ("B007", None),
    ("Q1", None), ("A0", None), ("AA1", None), ("", None), ("1A", None)])
def test_parse_well(text, position):
    assert parse_well(text) == position


def test_pathlength_from_volume():
    # b = V / (π r²): 200 µL = 0.2 cm³ in a 6.96 mm well → 0.2 / (π · 0.348²) cm.
    assert pathlength_from_volume(200.0, 6.96) == pytest.approx(0.2 / (np.pi * 0.348**2))
    assert pathlength_from_volume(200.0, 6.96) == pytest.approx(0.5257, abs=1e-4)
    with pytest.raises(InputError, match=r"^well_diameter_mm: 0 mm is not a positive number$"):
        pathlength_from_volume(200.0, 0.0)


def test_water_band_pathlength_from_a_synthetic_water_spectrum():
    wl = np.concatenate([WL, np.arange(880.0, 1001.0, 1.0)])
    b_true = np.array([0.31, 0.52, 0.78, 0.0])  # the last well is dry
    plastic = 0.04  # invented flat plate absorbance: it cancels in the difference
    spectra = xr.DataArray(plastic + b_true[:, None] * synthetic_water(wl)[None, :],
                           dims=("well", "wavelength"),
                           coords={"well": ["A1", "A2", "A3", "A4"], "wavelength": wl})
    b = water_band_pathlength(spectra)
    np.testing.assert_allclose(b.values[:3], b_true[:3], rtol=1e-9)
    assert np.isnan(b.values[3])  # no water: no pathlength rather than zero
    warm = water_band_pathlength(spectra, au_per_cm=0.17)  # the constant is settable
    np.testing.assert_allclose(warm.values[:3], b_true[:3] * 0.18 / 0.17, rtol=1e-9)
    with pytest.raises(InputError, match=r"^exp\.csv: the water-band pathlength needs readings "
                                         r"at 900 and 977 nm, but 900 nm was not read \(read "
                                         r"400-700 nm\); give pathlength_cm, or volume_ul with "
                                         r"well_diameter_mm, instead$"):
        water_band_pathlength(spectra.sel(wavelength=WL), name="exp.csv")
    with pytest.raises(InputError, match=r"^au_per_cm: -1 AU/cm is not a positive number$"):
        water_band_pathlength(spectra, au_per_cm=-1.0)


def test_subtract_blank():
    wl = np.array([400.0, 410.0])
    data = np.array([[0.10, 0.20], [0.12, np.nan], [0.50, 0.60]])
    spectra = xr.DataArray(data, dims=("well", "wavelength"),
                           coords={"well": ["A1", "A2", "B1"], "wavelength": wl})
    corrected, mean, sd = subtract_blank(spectra, ["A1", "A2"])
    np.testing.assert_allclose(mean.values, [0.11, 0.20])
    np.testing.assert_allclose(sd.values, [np.std([0.10, 0.12], ddof=1), np.nan])
    np.testing.assert_allclose(corrected.sel(well="B1").values, [0.39, 0.40])
    same, zero, none = subtract_blank(spectra, [])
    assert same is spectra and (zero.values == 0).all() and np.isnan(none.values).all()


def test_replicate_statistics_rule():
    # Replicates scatter more than their fits say: SD²/n rules.
    stats = replicate_statistics(np.array([1.0, 1.2, 0.8]), np.array([0.01, 0.01, 0.01]))
    assert stats["n"] == 3 and stats["mean"] == pytest.approx(1.0)
    assert stats["sd"] == pytest.approx(0.2) and stats["cv_percent"] == pytest.approx(20.0)
    assert stats["std_uncertainty"] == pytest.approx(0.2 / np.sqrt(3))
    # Replicates agree by chance better than the fit noise allows: the fit variance is a floor.
    close = replicate_statistics(np.array([1.0, 1.001, np.nan]), np.array([0.05, 0.03, 0.02]))
    assert close["n"] == 2
    assert close["std_uncertainty"] == pytest.approx(np.sqrt((0.05**2 + 0.03**2) / 2 / 2))
    # One well: its own fit uncertainty, no SD or CV.
    one = replicate_statistics(np.array([2.0]), np.array([0.1]))
    assert one["std_uncertainty"] == pytest.approx(0.1)
    assert np.isnan(one["sd"]) and np.isnan(one["cv_percent"])
    # No result at all: NaN throughout, n = 0.
    none = replicate_statistics(np.array([np.nan]), np.array([np.nan]))
    assert none["n"] == 0 and np.isnan(none["std_uncertainty"])
    # Unknown fit uncertainty (no_dof): only the scatter is used.
    blind = replicate_statistics(np.array([1.0, 1.2]), np.array([np.nan, 0.1]))
    assert blind["std_uncertainty"] == pytest.approx(np.std([1.0, 1.2], ddof=1) / np.sqrt(2))


def test_student_t_coverage_factor_of_a_mean_of_wells():
    """Where the wells' spread sets u(mean), k = t(0.975, n - 1): 4.303 for n = 3 and 12.706
    for n = 2 (Student's t table, e.g. NIST/SEMATECH e-Handbook of Statistical Methods,
    1.3.6.7.2; from memory); where the fit's variance sets it (many degrees of freedom),
    k = 2; the shared library and stray terms keep k = 2 and are not averaged down
    (JCGM 100:2008, G.3 and 5.2.2; issue 17 item 4)."""
    spread = replicate_statistics(np.array([1.0, 1.2, 0.8]), np.full(3, 0.01))
    assert spread["dof"] == 2
    assert spread["coverage_factor"] == pytest.approx(4.303, abs=5e-4)
    assert spread["expanded_uncertainty"] == pytest.approx(4.303 * 0.2 / np.sqrt(3), rel=1e-3)
    two = replicate_statistics(np.array([1.0, 1.2]), np.full(2, 0.01))
    assert two["coverage_factor"] == pytest.approx(12.706, abs=5e-4)
    floor = replicate_statistics(np.array([1.0, 1.001, 0.999]), np.full(3, 0.05))
    assert np.isinf(floor["dof"]) and floor["coverage_factor"] == 2.0
    one = replicate_statistics(np.array([2.0]), np.array([0.1]))
    assert one["coverage_factor"] == 2.0 and one["expanded_uncertainty"] == pytest.approx(0.2)
    # parts: U = sqrt((t u_noise)^2 + (2 u_shared)^2), k = U / u
    both = replicate_statistics(np.array([1.0, 1.2, 0.8]), np.full(3, 0.01),
                                u_shared=[np.full(3, 0.1)])
    u_noise = 0.2 / np.sqrt(3)
    assert both["std_uncertainty"] == pytest.approx(np.hypot(u_noise, 0.1))
    assert both["expanded_uncertainty"] == pytest.approx(np.hypot(4.303 * u_noise, 0.2),
                                                         rel=1e-3)
    assert both["coverage_factor"] == pytest.approx(both["expanded_uncertainty"]
                                                    / both["std_uncertainty"])


def test_student_t_interval_covers_95_percent_of_triplicate_means():
    """Synthetic, seeded: triplicate wells whose well-to-well scatter (SD 0.1) dwarfs the
    fit noise (0.001). mean ± U covers the true value in 95 % of runs with the Student-t
    factor; with k = 2 it would cover P(|T₂| < 2) = 0.816 (scipy.stats.t, 2 degrees of
    freedom), the trap the factor removes."""
    from scipy.stats import t

    rng = np.random.default_rng(17)
    truth, trials = 1.0, 4000
    draws = truth + 0.1 * rng.standard_normal((trials, 3))
    covered_t = covered_2 = 0
    for wells in draws:
        stats = replicate_statistics(wells, np.full(3, 0.001))
        error = abs(stats["mean"] - truth)
        covered_t += error <= stats["expanded_uncertainty"]
        covered_2 += error <= 2 * stats["std_uncertainty"]
    sigma = np.sqrt(0.95 * 0.05 / trials)  # binomial SD of the rate
    assert abs(covered_t / trials - 0.95) < 4 * sigma
    assert abs(covered_2 / trials - (2 * t.cdf(2, 2) - 1)) < 4 * np.sqrt(0.2 / trials)

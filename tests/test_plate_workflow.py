"""Plate batches: layout files, processing, outputs, the report page and `mixsolve plate`.

All plates here are invented (tests/helpers_plate.py builds them): blanks, samples in
triplicate at two dilutions and standards of the two invented components, from known
concentrations with seeded noise.
"""

from __future__ import annotations

import base64
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from helpers_cli import assert_cli_error
from helpers_io import NUMBER_FIX, WL, band, make_library, write_library_file, write_text
from helpers_plate import (
    BACKGROUND_AU,
    SAMPLES,
    SCENARIO_SEED,
    export_rows,
    scenario_layout,
    scenario_values,
    write_export,
    write_layout,
    write_scenario,
)

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError, RenamedWarning, UnitError
from mixsolve.plate.wells import plate_wells
from mixsolve.report.html import SAFETY_CAUTIONS
from mixsolve.report.plate_text import plate_notes, plate_settings
from mixsolve.report.text import CAUTION
from mixsolve.workflows.plate import find_exports


@pytest.fixture
def files(tmp_path: Path) -> dict[str, Path]:
    """Export, layout and library files of the scenario."""
    return {"export": write_scenario(tmp_path), "layout": write_layout(tmp_path / "layout.csv"),
            "library": write_library_file(tmp_path / "lib.nc")}


def _samples(result: ms.plate.analysis.PlateResult) -> pd.DataFrame:
    return result.samples.set_index(["sample", "component"])


def assert_recovers_samples(samples: pd.DataFrame, *, z: float = 5.0) -> None:
    """Every sample's mean lies within z standard uncertainties of the truth."""
    for sample, (red, blue) in SAMPLES.items():
        for comp, true in (("red", red), ("blue", blue)):
            row = samples.loc[(sample, comp)]
            assert abs(row["concentration"] - true) <= z * row["std_uncertainty"] + 1e-9, \
                (sample, comp, row["concentration"], true, row["std_uncertainty"])


# --- layout files ----------------------------------------------------------------------


def test_read_layout_csv_and_xlsx(tmp_path):
    from helpers_io import write_xlsx

    frame = ms.read_layout(write_layout(tmp_path / "layout.csv"))
    assert frame.attrs["source"] == "layout.csv"
    assert len(frame) == 4 + 36 + 6 + 1
    row = frame.set_index("well").loc["B4"]
    assert (row["role"], row["sample"], row["dilution"]) == ("sample", "S1", 2.0)
    assert frame.set_index("well").loc["A1", "dilution"] == 1.0  # empty dilution: 1
    std = frame.set_index("well").loc["H3"]
    assert (std["component"], std["concentration"], std["unit"]) == ("red", 0.04, "mmol/L")
    path = write_xlsx(tmp_path / "layout.xlsx", ["Well", "Role", "Sample", "Dilution"],
                      [["A01", "Blank", None, None], ["b2", "sample", "S9", 4]])
    xl = ms.read_layout(path)
    assert xl[["well", "role", "sample", "dilution"]].values.tolist() == [
        ["A1", "blank", "", 1.0], ["B2", "sample", "S9", 4.0]]


@pytest.mark.parametrize(
    ("text", "error", "message"),
    [
        ("well,sample\nA1,S1\n", FileFormatError,
         r"^l\.csv, line 1: missing column\(s\) role; a layout has columns well, role, "
         r"sample, dilution \(standards also component, concentration, unit\)$"),
        ("well,role,sample\nA1,sample,S1\n,sample,S2\n", InputError,
         r"^l\.csv, line 3: sample 'S2' has no well; give the well \(A1 or A01\) the row is "
         r"about$"),
        ("well,role,sample\nZ1,sample,S1\n", InputError,
         r"^l\.csv, line 2: 'Z1' is not a well name \(A1-P24, or A01\)$"),
        ("well,role,sample\nB1,sample,S1\nA1,blank,\nB01,sample,S2\n", InputError,
         r"^l\.csv, line 4, well B1: appears twice \(also on line 2\)$"),
        ("well,role,sample\nB1,smaple,S1\n", InputError,
         r"^l\.csv, line 2, well B1: role 'smaple' is not one of blank, sample, standard, "
         r"empty$"),
        ("well,role,sample\nB1,sample,\n", InputError,
         r"^l\.csv, line 2, well B1: a sample well needs a sample name$"),
        ("well,role,sample,dilution\nB1,sample,S1,0\n", InputError,
         r"^l\.csv, line 2, well B1, dilution: 0 is not a positive number$"),
        ("well,role,sample,dilution\nB1,sample,S1,two\n", InputError,
         r"^l\.csv, line 2, well B1, dilution: 'two' is not a number" + NUMBER_FIX),
        ("well,role,sample\nH1,standard,s\n", FileFormatError,
         r"^l\.csv: standard wells need the column\(s\) component, concentration, unit$"),
        ("well,role,component,concentration,unit\nH1,standard,,1,mg/L\n", InputError,
         r"^l\.csv, line 2, well H1: a standard well needs a component$"),
        ("well,role,component,concentration,unit\nH1,standard,red,-1,mg/L\n", InputError,
         r"^l\.csv, line 2, well H1, concentration: -1 is not a number ≥ 0$"),
        ("well,role,component,concentration,unit\nH1,standard,red,1,furlongs\n", UnitError,
         r"^l\.csv, line 2, well H1: unit: 'furlongs' is not a concentration; expected "
         r"amount/volume such as mmol/L"),
    ],
)
def test_layout_errors(tmp_path, text, error, message):
    with pytest.raises(error, match=message):
        ms.read_layout(write_text(tmp_path / "l.csv", text))


# --- processing one plate ------------------------------------------------------------------


def test_plate_with_library_recovers_samples_and_lists_every_well(files):
    plate = ms.read_plate(files["export"])
    done = ms.analyse_plate(plate, ms.read_layout(files["layout"]),
                            ms.read_library(files["library"]), pathlength_cm=0.5)
    assert_recovers_samples(_samples(done))
    # Every well of the plate has rows, with a result or a flag saying why not.
    per_well = done.wells.drop_duplicates("well").set_index("well")
    assert list(per_well.index) == plate_wells(96)
    assert per_well.loc["H7", "role"] == "empty" and "empty_well" in per_well.loc["H7", "flags"]
    assert per_well.loc["H8", "role"] == "unassigned"
    assert "not_in_layout" in per_well.loc["H8", "flags"]
    assert per_well.loc[["H7", "H8"], "rms_residual_au"].isna().all()
    # Dilution: a 2-fold well reports the sample's concentration, not the well's.
    wells = done.wells.set_index(["well", "component"])
    assert wells.loc[("B4", "red"), "dilution"] == 2.0
    assert wells.loc[("B4", "red"), "concentration"] == pytest.approx(2.0e-5, rel=0.05)
    # The blank (background 0.035 AU) was subtracted and its scatter reported.
    np.testing.assert_allclose(done.blank_mean.values, BACKGROUND_AU, atol=0.002)
    assert 0.0002 < float(np.nanmedian(done.blank_sd.values)) < 0.002
    settings = plate_settings(done)
    assert settings["blank"].startswith("4 well(s), mean spectrum subtracted; SD")
    assert settings["export"].startswith("plate1.csv (grid blocks, 96-well, separator comma")
    assert settings["pathlength"] == "0.5 cm (given)"
    assert settings["high_cv flag"].startswith("CV > 20 % for a component")
    assert done.options.pathlength_mode == "fixed" and done.options.max_cv_percent == 20.0
    assert len(done.options.blank_wells) == 4
    # Sample statistics follow the documented rule, from the wells' own numbers.
    s1 = wells.loc[[(f"B{c}", "red") for c in range(1, 7)]]
    row = _samples(done).loc[("S1", "red")]
    assert row["n_wells"] == 6 and row["wells"] == "B1;B2;B3;B4;B5;B6"
    assert row["sd"] == pytest.approx(s1["concentration"].std(ddof=1))
    floor = np.mean(s1["std_uncertainty"] ** 2)
    assert row["std_uncertainty"] == pytest.approx(np.sqrt(max(row["sd"] ** 2, floor) / 6))
    assert row["cv_percent"] == pytest.approx(100 * row["sd"] / row["concentration"])
    # S3 has no blue: its wells were held at zero, but the sample's mean is formed from the
    # unconstrained (OLS) fit of the same wells and the bound applied to the mean alone.
    assert wells.loc[[(f"D{c}", "blue") for c in range(1, 7)], "flags"].str.contains(
        "at_zero:blue").any()
    free = done.unconstrained["concentration"].sel(component="blue")
    s3 = _samples(done).loc[("S3", "blue")]
    mean = np.mean([float(free.sel(well=f"D{c}")) * (1 if c <= 3 else 2) for c in range(1, 7)])
    assert s3["mean_unconstrained"] == pytest.approx(mean)
    assert s3["concentration"] == max(mean, 0.0)
    assert ("at_zero:blue" in s3["flags"]) == (mean < 0)
    assert "at_zero:blue" not in _samples(done).loc[("S3", "red"), "flags"]


def test_wells_missing_from_the_export_are_flagged_not_dropped(tmp_path):
    layout = scenario_layout()
    wells, values = scenario_values()
    keep = [i for i, w in enumerate(wells) if w not in ("C1", "C2", "C3", "C4", "C5", "C6",
                                                       "D2")]
    path = write_export(tmp_path / "part.csv", export_rows(
        "long", [wells[i] for i in keep], WL, values[keep], size=96, junk=False))
    done = ms.analyse_plate(ms.read_plate(path), ms.read_layout(write_layout(
        tmp_path / "layout.csv", layout)), make_library(), pathlength_cm=0.5)
    samples = _samples(done)
    assert np.isnan(samples.loc[("S2", "red"), "concentration"])
    assert {"not_read", "no_result"} <= set(samples.loc[("S2", "red"), "flags"].split(";"))
    s3 = samples.loc[("S3", "red")]
    assert s3["n_wells"] == 5 and "wells_without_result:1" in s3["flags"]
    assert "not_read" in done.wells.set_index("well").loc["D2", "flags"].iloc[0]


def test_water_band_pathlength_per_well(tmp_path):
    wl = np.concatenate([WL, [900.0, 977.0]])
    b = np.random.default_rng(SCENARIO_SEED).uniform(0.40, 0.60, 96)  # pipetting scatter
    path = write_scenario(tmp_path, wl=wl, pathlength=b, water=True, noise_au=0.0004)
    layout = ms.read_layout(write_layout(tmp_path / "layout.csv"))
    done = ms.analyse_plate(ms.read_plate(path), layout, make_library(), water_band=True)
    found = done.pathlength_cm
    truth = pd.Series(b, index=plate_wells(96))[found.index]
    sigma_b = 0.0004 * np.sqrt(2) / 0.18  # cm: noise of a difference of two readings
    np.testing.assert_allclose(found, truth, atol=5 * sigma_b)
    assert np.abs(found - truth).mean() < sigma_b
    assert_recovers_samples(_samples(done), z=6.0)
    assert "water band" in plate_settings(done)["pathlength"]
    assert any("900, 977 nm) were not fitted (used for the pathlength)" in n
               for n in plate_notes(done))
    # The water constant is settable (it depends on temperature).
    warm = ms.analyse_plate(ms.read_plate(path), layout, make_library(), water_band=True,
                            water_k_au_per_cm=0.2)
    np.testing.assert_allclose(warm.pathlength_cm, found * 0.18 / 0.2)


def test_volume_pathlength_and_option_conflicts(files):
    plate, layout = ms.read_plate(files["export"]), ms.read_layout(files["layout"])
    lib = make_library()
    b = 0.5
    volume = b * np.pi * 0.32**2 * 1000  # µL filling a 6.4 mm well to 0.5 cm
    done = ms.analyse_plate(plate, layout, lib, volume_ul=volume, well_diameter_mm=6.4)
    np.testing.assert_allclose(done.pathlength_cm, b)
    assert_recovers_samples(_samples(done))
    with pytest.raises(InputError, match=r"^pathlength given 2 ways \(fixed, volume\); give "
                                         r"one of pathlength_cm, volume_ul with "
                                         r"well_diameter_mm, or water_band$"):
        ms.analyse_plate(plate, layout, lib, pathlength_cm=0.5, volume_ul=100,
                         well_diameter_mm=6.4)
    with pytest.raises(InputError, match=r"^volume_ul and well_diameter_mm go together"):
        ms.analyse_plate(plate, layout, lib, volume_ul=100)
    with pytest.raises(InputError, match=r"^volume_ul: 0 µL is not a positive number$"):
        ms.analyse_plate(plate, layout, lib, volume_ul=0, well_diameter_mm=6.4)
    with pytest.raises(InputError, match=r"^give either a library or library_from_plate, not "
                                         r"both$"):
        ms.analyse_plate(plate, layout, lib, library_from_plate=True)
    with pytest.raises(InputError, match=r"^no library: give a library, or build it from the "
                                         r"plate's standard wells \(library_from_plate\)$"):
        ms.analyse_plate(plate, layout)
    for options, message in (
            ({"pathlength_cm": 0.0}, r"^pathlength_cm: 0 cm is not a positive number$"),
            ({"max_cv_percent": -5}, r"^max_cv_percent: -5 % is not a positive number; a "
                                     r"percent of the mean: 20 flags a CV above 20 %$"),
            ({"water_band": True, "water_k_au_per_cm": 0.0},
             r"^water_k_au_per_cm: 0 AU/cm is not a positive number$")):
        with pytest.raises(InputError, match=message):
            ms.analyse_plate(plate, layout, lib, **options)
    with pytest.raises(InputError, match=r"^plate1\.csv: the water-band pathlength needs "
                                         r"readings at 900 and 977 nm"):
        ms.analyse_plate(plate, layout, lib, water_band=True)


def test_no_pathlength_is_refused_with_the_three_ways(files):
    """A plate run states its pathlength: without one (formerly 1 cm with a note, which
    halves results in 0.5 cm wells) it is refused naming the three ways to give it
    (issue 17 item 4)."""
    with pytest.raises(InputError, match=r"^no pathlength: a well is not 1 cm deep .* give one "
                                         r"of pathlength_cm \(one value for every well\), "
                                         r"volume_ul with well_diameter_mm \(fill volume and "
                                         r"well geometry\), or water_band \(per well from the "
                                         r"water band at 900 and 977 nm\)$"):
        ms.analyse_plate(ms.read_plate(files["export"]), ms.read_layout(files["layout"]),
                         make_library())


def test_layout_well_off_the_plate(files, tmp_path):
    plate = ms.read_plate(files["export"])
    layout = ms.read_layout(write_text(tmp_path / "big.csv",
                                       "well,role,sample\nA1,blank,\nJ13,sample,S1\n"))
    with pytest.raises(InputError, match=r"^big\.csv, line 3: well J13 is not on the 96-well "
                                         r"plate of plate1\.csv \(A1-H12\)$"):
        ms.analyse_plate(plate, layout, make_library(), pathlength_cm=0.5)


def test_library_from_plate_standards(files, tmp_path):
    plate, layout = ms.read_plate(files["export"]), ms.read_layout(files["layout"])
    done = ms.analyse_plate(plate, layout, library_from_plate=True, pathlength_cm=0.5,
                            unit="umol/L")
    assert "built from standards" in done.library.attrs["provenance"]
    assert plate_settings(done)["library"].startswith("built from 6 standard wells of this "
                                                      "plate")
    samples = _samples(done)
    for sample, (red, _) in SAMPLES.items():
        assert samples.loc[(sample, "red"), "concentration"] == pytest.approx(red * 1e6,
                                                                               rel=0.08, abs=0.3)
    no_std = ms.read_layout(write_text(tmp_path / "nostd.csv", "well,role\nA1,blank\n"))
    with pytest.raises(InputError, match=r"^nostd\.csv: library_from_plate needs standard "
                                         r"wells read in plate1\.csv; the layout has none$"):
        ms.analyse_plate(plate, no_std, library_from_plate=True, pathlength_cm=0.5)


def test_high_cv_and_single_well_flags(tmp_path):
    layout = [{"well": "A1", "role": "blank"}, {"well": "A2", "role": "blank"},
              {"well": "B1", "role": "sample", "sample": "S1"},
              {"well": "B2", "role": "sample", "sample": "S1"},
              {"well": "B3", "role": "sample", "sample": "S1"},
              {"well": "C1", "role": "sample", "sample": "S5"}]
    wells, values = scenario_values(noise_au=0.0003)
    values[wells.index("B3")] = BACKGROUND_AU + 0.5 * 3e-5 * band("red", WL)  # pipetting slip
    path = write_export(tmp_path / "cv.csv", export_rows("well columns", wells, WL, values,
                                                         size=96))
    done = ms.analyse_plate(ms.read_plate(path), ms.read_layout(
        write_layout(tmp_path / "l.csv", layout)), make_library(), pathlength_cm=0.5)
    samples = _samples(done)
    assert "high_cv" in samples.loc[("S1", "red"), "flags"]
    assert samples.loc[("S1", "red"), "cv_percent"] > 20
    assert "single_well" in samples.loc[("S5", "red"), "flags"]
    assert samples.loc[("S5", "red"), "std_uncertainty"] == pytest.approx(
        done.wells.set_index(["well", "component"]).loc[("C1", "red"), "std_uncertainty"])
    relaxed = ms.analyse_plate(ms.read_plate(path), ms.read_layout(tmp_path / "l.csv"),
                               make_library(), pathlength_cm=0.5, max_cv_percent=1000)
    assert "high_cv" not in _samples(relaxed).loc[("S1", "red"), "flags"]
    with pytest.warns(RenamedWarning, match=r"^max_cv \(a fraction\) is now max_cv_percent"):
        old = ms.analyse_plate(ms.read_plate(path), ms.read_layout(tmp_path / "l.csv"),
                               make_library(), pathlength_cm=0.5, max_cv=10.0)
    assert old.options.max_cv_percent == 1000
    pd.testing.assert_frame_equal(old.samples, relaxed.samples)


# --- batches, outputs, report ---------------------------------------------------------------


class WellFormed(HTMLParser):
    """Check that every non-void element is closed in order; collect images."""

    VOID = frozenset({"img", "meta", "br", "hr", "link", "input", "col", "source", "wbr",
                      "area"})

    def __init__(self) -> None:
        super().__init__()
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.images: list[dict[str, str | None]] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        if tag == "img":
            self.images.append(dict(attrs))
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.tags.add(tag)
        if tag == "img":
            self.images.append(dict(attrs))
        if tag not in self.VOID:
            self.problems.append(f"<{tag}/> is not a void element")

    def handle_endtag(self, tag):
        if tag in self.VOID:
            self.problems.append(f"end tag for void <{tag}>")
        elif not self.stack or self.stack[-1] != tag:
            self.problems.append(f"</{tag}> closes <{self.stack[-1] if self.stack else ''}>")
        else:
            self.stack.pop()


def check_report(path: Path, components: list[str]) -> WellFormed:
    """Parse a report page; assert it is well formed, self-contained, one map per component."""
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    parser = WellFormed()
    parser.feed(text)
    parser.close()
    assert parser.problems == [] and parser.stack == []
    assert not parser.tags & {"script", "link", "iframe"}
    assert not re.search(r'(src|href)="(?!data:)', text)
    for image in parser.images:
        prefix, data = str(image["src"]).split(",", 1)
        assert prefix == "data:image/png;base64"
        assert base64.b64decode(data).startswith(b"\x89PNG\r\n\x1a\n")
    alts = [img["alt"] for img in parser.images]
    assert [a for a in alts if str(a).startswith("heat map")] == [f"heat map of {c}"
                                                                   for c in components]
    assert "residual spectra" in alts
    return parser


def test_batch_of_a_folder_writes_every_output(tmp_path, files):
    folder = files["export"].parent
    write_scenario(folder, "plate2.csv", seed=SCENARIO_SEED + 1)
    calls = []
    out = tmp_path / "results"
    batch = ms.run_plates([folder], files["layout"], out=out, library=files["library"],
                          pathlength_cm=0.5, unit="umol/L",
                          progress=lambda *args: calls.append(args))
    assert [c[:2] for c in calls] == [(1, 2), (2, 2)]
    assert calls[0][2].startswith("plate1.csv: grid blocks, 96-well; 46 wells fitted")
    assert [f.name for f in batch.folders] == ["plate1", "plate2"]  # layout.csv, lib.nc skipped
    for sub in batch.folders:
        assert sorted(p.name for p in sub.iterdir()) == ["report.html", "results.xlsx",
                                                         "samples.csv", "wells.csv"]
        wells = pd.read_csv(sub / "wells.csv", keep_default_na=False)
        assert list(wells.columns) == ["well", "sample", "role", "component", "concentration",
                                       "std_uncertainty", "unit", "dilution", "pathlength_cm",
                                       "rms_residual_au", "flags"]
        assert len(wells) == 96 * 2 and set(wells["unit"]) == {"umol/L"}
        samples = pd.read_csv(sub / "samples.csv")
        assert list(samples.columns) == ["sample", "component", "concentration",
                                         "std_uncertainty", "coverage_factor",
                                         "expanded_uncertainty", "unit", "n_wells",
                                         "mean_unconstrained", "sd", "cv_percent", "wells",
                                         "flags"]
        book = pd.read_excel(sub / "results.xlsx", sheet_name=None)
        assert list(book) == ["wells", "samples", "settings"]
        assert len(book["wells"]) == len(wells) and len(book["samples"]) == len(samples)
        check_report(sub / "report.html", ["red", "blue"])
    combined = pd.read_csv(out / "samples.csv")
    assert list(combined.columns[:2]) == ["plate", "sample"]
    assert combined.groupby("plate").size().to_dict() == {"plate1": 12, "plate2": 12}
    s1 = combined[(combined["sample"] == "S1") & (combined["component"] == "red")]
    np.testing.assert_allclose(s1["concentration"], 20.0, rtol=0.05)
    assert batch.text.splitlines()[-1] == CAUTION
    assert f"Wrote {out / 'samples.csv'}: 6 samples from 2 plate(s)." in batch.text
    assert not list(out.rglob("*.part"))


def test_report_carries_cautions_settings_and_flagged_wells(tmp_path, files):
    out = tmp_path / "o"
    ms.run_plates([files["export"]], files["layout"], out=out, library=files["library"],
                  pathlength_cm=0.5)
    text = (out / "plate1" / "report.html").read_text(encoding="utf-8")
    for caution in SAFETY_CAUTIONS:
        assert caution.replace("'", "&#x27;") in text
    assert "Settings" in text and "u_noise = sqrt(max(SD^2, mean(u_fit^2)) / n)" in text
    assert "unconstrained (OLS) results, held at 0 afterwards" in text
    assert "(shared by every well, not divided by sqrt(n))" in text
    assert "Flagged wells" in text and "not_in_layout" in text


def test_failed_batch_leaves_no_output(tmp_path, files):
    bad = write_text(files["export"].parent / "plate9.csv", "nothing,useful\n1,2\n")
    out = tmp_path / "never"
    with pytest.raises(FileFormatError, match=r"^plate9\.csv: no plate layout found"):
        ms.run_plates([files["export"], bad], files["layout"], out=out,
                      library=files["library"], pathlength_cm=0.5)
    assert not out.exists()


def test_find_exports(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    one = write_text(tmp_path / "a" / "plate.csv", "x")
    two = write_text(tmp_path / "b" / "plate.csv", "x")
    write_text(tmp_path / "a" / ".hidden.csv", "x")
    write_text(tmp_path / "a" / "notes.md", "x")
    assert find_exports([tmp_path / "a", two]) == [one, two]
    with pytest.raises(InputError, match=r"plate\.csv: export given twice$"):
        find_exports([one, tmp_path / "a"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match=r"empty: no plate exports \(\.csv, \.tsv, \.txt, "
                                         r"\.xlsx\) in the folder$"):
        find_exports([tmp_path / "empty"])


def test_same_export_names_and_library_from_plate(tmp_path, files):
    (tmp_path / "day2").mkdir()
    again = write_scenario(tmp_path / "day2", "plate1.csv", seed=SCENARIO_SEED + 2)
    batch = ms.run_plates([files["export"], again], files["layout"], out=tmp_path / "o",
                          library_from_plate=True, pathlength_cm=0.5)
    assert [f.name for f in batch.folders] == ["plate1", "plate1-2"]
    assert set(batch.samples["plate"]) == {"plate1", "plate1-2"}
    for folder in batch.folders:  # each plate's own library, built from its standards
        lib = ms.read_library(folder / "library.nc")
        assert list(lib["component"].values) == ["red", "blue"]
    first, second = (ms.read_library(f / "library.nc") for f in batch.folders)
    assert not np.array_equal(first["absorptivity"].values, second["absorptivity"].values)


# --- command line -----------------------------------------------------------------------


def test_cli_plate(tmp_path, files, cli):
    out = tmp_path / "cli"
    run = cli("plate", files["library"], files["export"], "--layout", files["layout"],
              "--out", out, "--volume-ul", "160.8495",
              "--well-diameter-mm", "6.4", "--unit", "umol/L", "--max-cv", "25")
    assert run.exit_code == 0, run.output
    assert run.stdout.startswith("plate1.csv: grid blocks, 96-well; 46 wells fitted")
    assert run.stderr.startswith("plate 1/1: plate1.csv: grid blocks")
    samples = pd.read_csv(out / "plate1" / "samples.csv").set_index(["sample", "component"])
    assert samples.loc[("S2", "blue"), "concentration"] == pytest.approx(24.0, rel=0.05)
    assert (out / "samples.csv").exists()


def test_cli_plate_takes_the_library_first_as_unmix_does(tmp_path, files, cli):
    """``plate LIB EXPORTS...`` as ``unmix LIB SPECTRA...``; the old ``--library LIB`` still
    works, with a note on stderr, and gives the same results; an export in the library's
    place, or no export after it, is refused in one line (issue 17 item 6)."""
    common = ["--layout", files["layout"], "--pathlength", "0.5"]
    cli.ok("plate", files["library"], files["export"], *common, "--out", tmp_path / "new")
    old = cli.ok("plate", files["export"], "--library", files["library"], *common, "--out",
                 tmp_path / "old")
    assert old.stderr.startswith("note: --library LIB is now given as the first argument, "
                                 "as for unmix")
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "old" / "samples.csv"),
                                  pd.read_csv(tmp_path / "new" / "samples.csv"))
    assert_cli_error(cli("plate", files["export"], *common, "--out", tmp_path / "x"),
                     r"^error: .*plate1\.csv: the first path is the library file \(\.nc\), "
                     r"then the exports; give the library first", must_not_exist=[tmp_path / "x"])
    assert_cli_error(cli("plate", files["library"], *common, "--out", tmp_path / "y"),
                     r"^error: no plate export after the library .*lib\.nc",
                     must_not_exist=[tmp_path / "y"])


@pytest.mark.parametrize(("extra", "message"), [
    (["--library-from-plate"], "error: give either a library or --library-from-plate, not "
                               "both"),
    (["--water-band"], "error: pathlength given 2 ways (fixed, water "
                                              "band); give one of --pathlength, --volume-ul "
                                              "with --well-diameter-mm, or --water-band\n"),
    (["--volume-ul", "100"], "error: --volume-ul and --well-diameter-mm go together: the "
                             "pathlength from the fill volume needs both\n"),
    (["--range", "high"], "error: --range: 'high' is not LOW-HIGH"),
])
def test_cli_plate_errors_are_one_line_exit_2(tmp_path, files, extra, message, cli):
    out = tmp_path / "cli"
    run = cli("plate", files["library"], files["export"], "--layout", files["layout"],
              "--out", out, "--pathlength", "0.5", *extra)
    assert_cli_error(run, "^" + re.escape(message.rstrip("\n")) + ("$" if message.endswith(
        "\n") else ""), must_not_exist=[out])


# --- demo -------------------------------------------------------------------------------


def test_demo_runs_the_plate_path(tmp_path):
    from mixsolve.workflows.demo import demo_file, run_demo

    plate = ms.read_plate(demo_file("plate_export.csv"))
    assert (plate.attrs["layout"], plate.attrs["separator"], plate.attrs["decimal"]) == (
        "grid blocks", "semicolon", ",")
    run = run_demo(tmp_path / "demo")
    assert run.plate is not None and run.plate_comparison is not None
    assert (tmp_path / "demo" / "plate" / "plate_export" / "report.html").exists()
    assert (tmp_path / "demo" / "plate" / "comparison.csv").exists()
    table = run.plate_comparison
    assert len(table) == 8 * 3
    assert (np.abs(table["difference"]) <= 3 * table["std_uncertainty"]).mean() > 0.8
    assert "Plate run: a synthetic 96-well export" in run.text
    assert "marker:OVER" in table.set_index("sample").loc["extract_04", "flags"].iloc[0]
    # Issue 15: the first screen says which wells need attention and why. The demo's one
    # doubtful well is D3, the well its generator gave OVER markers
    # (reference_spectra_demo/make_demo_data.py, PLATE_MARKERS); no well carries the old
    # per-row shift_sensitive, and the design's shift risk is said once, with its fix.
    done = run.plate.plates[0]
    assert not done.wells["flags"].str.contains("shift_sensitive").any()
    from mixsolve.report.plate_text import attention_table, well_counts

    attention = attention_table(done.wells)
    assert list(attention["well"]) == ["D3"] and list(attention["code"]) == ["marker:OVER"]
    fitted, doubtful, look = well_counts(done.wells)
    assert doubtful == 1 and fitted == 56 and look < fitted / 4
    text = run.text.splitlines()
    head = next(i for i, line in enumerate(text) if "plate_export.csv: grid blocks" in line)
    assert f"{fitted} wells fitted, 1 doubtful, {look} worth a look" in text[head]
    assert "Wells that need attention" in text[head + 1]
    assert text[head + 3].split()[:3] == ["D3", "extract_04", "marker:OVER"]
    assert sum("[shift_risk]" in line for line in text) == 2  # unmix demo and plate, once each
    page = (tmp_path / "demo" / "plate" / "plate_export" / "report.html").read_text(
        encoding="utf-8")
    body = page[page.index("<body>"):]
    assert body.index("Wells that need attention") < body.index("Concentration per well")
    assert body.count("shift_risk") == 1
    from mixsolve.report.plate_page import heat_map

    fig = heat_map(done.wells, "amber", 96, "mg/L")
    crosses = [c.get_offsets().tolist() for c in fig.axes[0].collections]
    assert crosses == [[[2.0, 3.0]]]  # x = column 3 - 1, y = row D: only the doubtful well

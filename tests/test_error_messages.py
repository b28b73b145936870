"""What the command line says when the input is wrong.

Contract (docs: DESIGN.md, "Command line"): exit code 2, exactly one plain line on stderr
starting with ``error:`` that names the file (and line/column or option) and the value,
no traceback, and no output file (nor a ``.part`` temporary) left behind.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from helpers_cli import assert_cli_error, assert_nothing_written
from helpers_io import (
    NUMBER_FIX,
    WL,
    absorptivity_frame,
    leftovers,
    mixture_absorbance,
    mixture_columns,
    write_absorptivity_table,
    write_standards,
    write_text,
    write_wide,
)

import mixsolve as ms
from mixsolve.errors import InputError


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """Good input files: a library (with molar masses), one without, spectra, standards."""
    folder = tmp_path_factory.mktemp("good_inputs")
    lib = folder / "lib.nc"
    ms.write_library(ms.import_absorptivities(absorptivity_frame(), "L/(mol*cm)",
                                              molar_mass_g_per_mol={"red": 500.0,
                                                                    "blue": 800.0}), lib)
    bare = folder / "bare.nc"
    ms.write_library(ms.import_absorptivities(absorptivity_frame(), "L/(mol*cm)"), bare)
    standards, sheet = write_standards(folder)
    return {"lib": lib, "bare": bare, "mix": write_wide(folder / "mix.csv"),
            "eps": write_absorptivity_table(folder / "eps.csv"),
            "standards": standards, "sheet": sheet, "folder": folder}


# --- bad tables: every reader error reaches the user as one line -------------------------

Writer = Callable[[Path], Path]


def _text(name: str, text: str) -> Writer:
    return lambda folder: write_text(folder / name, text)


def _bytes(name: str, raw: bytes) -> Writer:
    def write(folder: Path) -> Path:
        (folder / name).write_bytes(raw)
        return folder / name
    return write


def _folder(folder: Path) -> Path:
    (folder / "spectra_dir").mkdir()
    return folder / "spectra_dir"


BAD_SPECTRA = {
    "duplicate wavelength": (
        _text("dup.csv", "wavelength_nm,a\n400,0.1\n410,0.2\n400,0.3\n"),
        [r"^error: dup\.csv, line 4: wavelength 400 nm appears twice \(also on line 2\)$"]),
    "empty file": (_text("empty.csv", ""), [r"^error: empty\.csv: the file is empty$"]),
    "header only": (_text("head.csv", "wavelength_nm,a,b\n"),
                    [r"^error: head\.csv: header only, no data rows$"]),
    "non-numeric cell": (
        _text("text.csv", "wavelength_nm,a,b\n400,0.1,0.2\n410,0.1,n.d.\n"),
        [r"text\.csv", r"line 3", r"column 3 \('b'\)", r"'n\.d\.' is not a number"]),
    "missing file": (lambda folder: folder / "absent.csv",
                     [r"absent\.csv: file not found$"]),
    "an empty folder": (_folder, [r"spectra_dir: the folder holds no spectra file \(ending in "
                                  r"\.csv, \.tsv, \.txt, \.xlsx, \.jdx, \.dx\)$"]),
    "binary data": (_bytes("data.csv", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR"),
                    [r"^error: data\.csv: binary data, not a text table"]),
    "latin-1 micro sign": (
        _bytes("latin1.csv", "wavelength_nm,5 µL\n400,0.1\n".encode("latin-1")),
        [r"^error: latin1\.csv, line 1: byte 0xb5 is not UTF-8 text; save the file as UTF-8"]),
    "unknown layout": (
        _text("odd.csv", "energy,a\n400,0.1\n"),
        [r"^error: odd\.csv, line 1: cannot tell the layout from the header 'energy', 'a';",
         r"expected wide .* or long"]),
    "duplicate sample names": (
        _text("names.csv", "wavelength_nm,a,a\n400,0.1,0.2\n"),
        [r"^error: names\.csv, line 1: sample name 'a' appears twice \(columns 2 and 3\)$"]),
    "mixed decimal marks": (
        _text("mixed.csv", "wavelength_nm;a\n400;0,1\n410;0.2\n"),
        [r"^error: mixed\.csv: mixed decimal marks \(comma on line 2, point on line 3\)"]),
    "too few cells": (
        _text("short.csv", "wavelength_nm,a,b\n400,0.1,0.2\n410,0.1\n"),
        [r"^error: short\.csv, line 3: 2 cells, but the header has 3$"]),
    "infinite value": (
        _text("inf.csv", "wavelength_nm,a\n400,0.1\n410,inf\n"),
        [r"^error: inf\.csv, line 3, column 2 \('a'\): 'inf' is infinite"]),
    "one column": (_text("one.csv", "wavelength_nm\n400\n"),
                   [r"^error: one\.csv, line 1: the header has one column only"]),
}


@pytest.mark.parametrize("case", list(BAD_SPECTRA), ids=list(BAD_SPECTRA))
def test_unmix_bad_spectra(tmp_path, inputs, case, cli):
    writer, parts = BAD_SPECTRA[case]
    spectra = writer(tmp_path)
    out = tmp_path / "results.csv"
    assert_cli_error(cli("unmix", inputs["lib"], spectra, "--out", out), *parts)
    assert_nothing_written(out)


@pytest.mark.parametrize("case", ["duplicate wavelength", "non-numeric cell", "binary data",
                                  "latin-1 micro sign", "too few cells", "infinite value"])
def test_library_build_bad_spectra(tmp_path, inputs, case, cli):
    writer, parts = BAD_SPECTRA[case]
    out = tmp_path / "lib.nc"
    result = cli("library", "build", writer(tmp_path), "--standards", inputs["sheet"],
                 "--out", out)
    assert_cli_error(result, *parts)
    assert_nothing_written(out)


@pytest.mark.parametrize(
    ("text", "parts"),
    [("wavelength_nm,red,red\n400,1,2\n",
      [r"^error: eps\.csv, line 1: component name 'red' appears twice"]),
     ("sample,wavelength_nm,absorbance\na,400,1\n",
      [r"^error: eps\.csv, line 1: first column is 'sample'; an absorptivity table starts "
       r"with wavelength_nm"]),
     ("wavelength_nm,red\n400,1\n410,\n",
      [r"^error: eps\.csv: component 'red' has no value at 410 nm"]),
     ("wavelength_nm,red\n400,1\n410,x\n",
      [r"^error: eps\.csv, line 3, column 2 \('red'\): 'x' is not a number" + NUMBER_FIX])],
    ids=["duplicate component", "not wide", "incomplete", "non-numeric"],
)
def test_library_import_bad_table(tmp_path, text, parts, cli):
    out = tmp_path / "lib.nc"
    table = write_text(tmp_path / "eps.csv", text)
    assert_cli_error(cli("library", "import", table, "--absorptivity-unit", "L/(mol*cm)",
                         "--out", out),
                     *parts)
    assert_nothing_written(out)


# --- bad standards sheets ----------------------------------------------------------------


def test_library_build_sheet_missing_columns(tmp_path, inputs, cli):
    sheet = write_text(tmp_path / "sheet.csv", "sample,component,amount\nr1,red,1\n")
    out = tmp_path / "lib.nc"
    result = cli("library", "build", inputs["standards"], "--standards", sheet, "--out", out)
    assert_cli_error(result,
                     r"^error: sheet\.csv, line 1: missing column\(s\) concentration, unit;")
    assert_nothing_written(out)


def test_library_build_sheet_non_numeric(tmp_path, inputs, cli):
    text = inputs["sheet"].read_text().replace("0.03", "0.03 mM")
    sheet = write_text(tmp_path / "sheet.csv", text)
    result = cli("library", "build", inputs["standards"], "--standards", sheet, "--out",
                 tmp_path / "lib.nc")
    assert_cli_error(result, r"^error: sheet\.csv, line 6, column 3 \('concentration'\): "
                             r"'0\.03 mM' is not a number" + NUMBER_FIX)
    assert_nothing_written(tmp_path / "lib.nc")


def test_library_build_sheet_unknown_sample(tmp_path, inputs, cli):
    text = inputs["sheet"].read_text() + "zz,red,0.05,mmol/L\n"
    sheet = write_text(tmp_path / "sheet.csv", text)
    result = cli("library", "build", inputs["standards"], "--standards", sheet, "--out",
                 tmp_path / "lib.nc")
    assert_cli_error(result, r"line 8", r"sample 'zz' has no spectrum")
    assert_nothing_written(tmp_path / "lib.nc")


def test_library_build_sheet_bad_unit(tmp_path, inputs, cli):
    text = inputs["sheet"].read_text().replace("mmol/L", "parsecs")
    sheet = write_text(tmp_path / "sheet.csv", text)
    result = cli("library", "build", inputs["standards"], "--standards", sheet, "--out",
                 tmp_path / "lib.nc")
    assert_cli_error(result, r"line 2", r"'parsecs'")


def test_library_build_missing_sheet(tmp_path, inputs, cli):
    result = cli("library", "build", inputs["standards"], "--standards",
                 tmp_path / "none.csv", "--out", tmp_path / "lib.nc")
    assert_cli_error(result, r"none\.csv: file not found$")


# --- library files that are not libraries ------------------------------------------------


def _other_netcdf(folder: Path) -> Path:
    import xarray as xr

    path = folder / "other.nc"
    xr.Dataset({"t": (("x",), [1.0, 2.0])}).to_netcdf(path, engine="h5netcdf")
    return path


NOT_LIBRARIES = {
    "csv": (lambda folder: write_wide(folder / "spectra.csv"),
            [r"^error: spectra\.csv: not a readable netCDF file", r"library import"]),
    "empty": (_bytes("empty.nc", b""), [r"^error: empty\.nc: not a readable netCDF file"]),
    "other netCDF": (_other_netcdf,
                     [r"^error: other\.nc: not a mixsolve library \(not written by mixsolve\)$"]),
    "missing": (lambda folder: folder / "absent.nc", [r"absent\.nc: file not found$"]),
}


@pytest.mark.parametrize("case", list(NOT_LIBRARIES), ids=list(NOT_LIBRARIES))
def test_unmix_not_a_library(tmp_path, inputs, case, cli):
    writer, parts = NOT_LIBRARIES[case]
    out = tmp_path / "r.csv"
    assert_cli_error(cli("unmix", writer(tmp_path), inputs["mix"], "--out", out), *parts)
    assert_nothing_written(out)


@pytest.mark.parametrize("case", list(NOT_LIBRARIES), ids=list(NOT_LIBRARIES))
def test_library_show_not_a_library(tmp_path, case, cli):
    writer, parts = NOT_LIBRARIES[case]
    assert_cli_error(cli("library", "show", writer(tmp_path)), *parts)


# --- bad options -------------------------------------------------------------------------


@pytest.mark.parametrize("window", ["abc", "400", "400-500-600", "400-", "four-700"])
def test_bad_window_text(tmp_path, inputs, window, cli):
    out = tmp_path / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--window", window, "--out", out)
    assert_cli_error(result, rf"^error: --window: '{re.escape(window)}' is not LOW-HIGH",
                     r"e\.g\. 400-700$")
    assert_nothing_written(out)


def test_window_reversed(inputs, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--window", "700-400")
    assert_cli_error(result, r"^error: --window: 700-400 nm is not an increasing pair of "
                             r"wavelengths$")


def test_window_outside_data(tmp_path, inputs, cli):
    out = tmp_path / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--window", "800-900", "--out", out)
    assert_cli_error(result, r"^error: window 800-900 nm holds no measured wavelength \(measured "
                             r"400-700 nm\)$")
    assert_nothing_written(out)


def test_window_beyond_library(tmp_path, inputs, cli):
    wide = np.arange(380.0, 721.0, 10.0)
    spectra = write_wide(tmp_path / "wide.csv",
                         {"m": mixture_absorbance({"red": 1e-5}, wide)}, wl=wide)
    result = cli("unmix", inputs["lib"], spectra, "--window", "380-700")
    assert_cli_error(result, r"380, 390 nm lie outside the library \(400-700 nm\), which is never "
                             r"extrapolated")


def test_window_holding_too_few_wavelengths(inputs, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--window", "441-449")
    assert_cli_error(result, r"^error: window 441-449 nm holds no measured wavelength")


def test_underdetermined_selection(inputs, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--wavelengths", "450")
    assert_cli_error(result, r"^error: underdetermined: 1 wavelength\(s\) for 2 unknowns "
                             r"\(red, blue\)")


@pytest.mark.parametrize("text", ["450;620", "450,six hundred", "abc"])
def test_bad_wavelengths_text(inputs, text, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--wavelengths", text)
    assert_cli_error(result, rf"^error: --wavelengths: '{re.escape(text)}' is not a "
                             r"comma-separated list of nm")


def test_wavelength_not_measured(inputs, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--wavelengths", "450,625")
    assert_cli_error(result, r"^error: --wavelengths: 625 nm was not measured \(nearest measured: "
                             r"610, 620, 630 nm\)")


def test_window_and_wavelengths_together(inputs, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], "--window", "400-700",
                 "--wavelengths", "450,620")
    assert_cli_error(result, r"^error: give either a window or a list of wavelengths, not both$")


@pytest.mark.parametrize(
    ("unit", "parts"),
    [("furlongs", [r"^error: --unit: ", r"'furlongs'"]),
     ("kg", [r"^error: --unit: 'kg' is not a concentration; expected amount/volume"]),
     ("mg/", [r"^error: --unit: ", r"'mg/'"]),
     ("2 mg/L", [r"'2 mg/L' carries a factor"])],
)
def test_unknown_unit(tmp_path, inputs, unit, parts, cli):
    out = tmp_path / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--unit", unit, "--out", out)
    assert_cli_error(result, *parts)
    assert_nothing_written(out)


def test_mass_unit_without_molar_masses(inputs, cli):
    result = cli("unmix", inputs["bare"], inputs["mix"], "--unit", "mg/L")
    assert_cli_error(result, r"^error: --unit: converting mol/L to mg/L needs the molar mass of "
                             r"every component; add molar masses to the library "
                             r"\(molar_mass_g_per_mol\)$")


@pytest.mark.parametrize("value", ["0", "-1", "-0.5", "inf", "nan"])
def test_non_positive_pathlength(tmp_path, inputs, value, cli):
    out = tmp_path / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--pathlength", value, "--out", out)
    kind = "finite" if value in ("inf", "nan") else "positive"
    assert_cli_error(result, rf"^error: --pathlength: -?{value.lstrip('-')} cm is not a {kind} "
                             r"number$")
    assert_nothing_written(out)


def test_library_build_non_positive_pathlength(tmp_path, inputs, cli):
    result = cli("library", "build", inputs["standards"], "--standards", inputs["sheet"],
                 "--out", tmp_path / "lib.nc", "--pathlength", "0")
    assert_cli_error(result, r"^error: --pathlength: 0 cm is not a positive number$")
    assert_nothing_written(tmp_path / "lib.nc")


@pytest.mark.parametrize(
    ("unit", "parts"),
    [("mol/L", [r"absorptivity unit 'mol/L' has dimensions"]),
     ("bananas", [r"^error: absorptivity unit: unknown unit 'bananas'"])],
)
def test_library_import_bad_unit(tmp_path, inputs, unit, parts, cli):
    out = tmp_path / "lib.nc"
    result = cli("library", "import", inputs["eps"], "--absorptivity-unit", unit, "--out", out)
    assert_cli_error(result, *parts)
    assert_nothing_written(out)


@pytest.mark.parametrize(
    ("text", "parts"),
    [("red:500", [r"^error: --molar-mass: 'red:500' is not NAME=G_PER_MOL$"]),
     ("green=500", [r"molar mass given for 'green', which is not a component"]),
     ("red=-5", [r"^error: --molar-mass of 'red': -5 g/mol is not a positive number$"])],
)
def test_library_import_bad_molar_mass(tmp_path, inputs, text, parts, cli):
    out = tmp_path / "lib.nc"
    result = cli("library", "import", inputs["eps"], "--absorptivity-unit", "L/(mol*cm)",
                 "--out", out,
                 "--molar-mass", text)
    assert_cli_error(result, *parts)
    assert_nothing_written(out)


# --- outputs that cannot be written ------------------------------------------------------


def test_unmix_out_folder_missing(tmp_path, inputs, cli):
    out = tmp_path / "no_such_folder" / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--out", out)
    assert_cli_error(result, r"^error: .*r\.csv: folder .*no_such_folder does not exist$")
    assert not out.parent.exists()
    assert list(tmp_path.iterdir()) == []


def test_unmix_out_is_a_folder(tmp_path, inputs, cli):
    out = tmp_path / "results.csv"
    out.mkdir()
    result = cli("unmix", inputs["lib"], inputs["mix"], "--out", out)
    assert_cli_error(result, r"results\.csv: is a folder; give a file name to write$")
    assert leftovers(tmp_path) == []


def test_library_import_out_folder_missing(tmp_path, inputs, cli):
    out = tmp_path / "missing" / "lib.nc"
    result = cli("library", "import", inputs["eps"], "--absorptivity-unit", "L/(mol*cm)",
                 "--out", out)
    assert_cli_error(result, r"lib\.nc: folder .*missing does not exist$")
    assert list(tmp_path.iterdir()) == []


def test_library_build_out_folder_missing(tmp_path, inputs, cli):
    out = tmp_path / "missing" / "lib.nc"
    result = cli("library", "build", inputs["standards"], "--standards", inputs["sheet"],
                 "--out", out)
    assert_cli_error(result, r"lib\.nc: folder .*missing does not exist$")
    assert list(tmp_path.iterdir()) == []


def test_failed_write_keeps_previous_results(tmp_path, inputs, monkeypatch, cli):
    import pandas as pd

    out = tmp_path / "r.csv"
    out.write_text("previous results\n")

    def full_disk(self, path, *args, **kwargs):
        if hasattr(path, "write"):  # an open file (after the provenance lines)
            path.write("sample,comp")
        else:
            Path(path).write_text("sample,comp")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(pd.DataFrame, "to_csv", full_disk)
    result = cli("unmix", inputs["lib"], inputs["mix"], "--out", out)
    assert_cli_error(result, r"r\.csv: cannot write the file \(No space left on device\)$")
    assert out.read_text() == "previous results\n"
    assert leftovers(tmp_path) == []


def test_demo_out_is_a_file(tmp_path, cli):
    pytest.importorskip("mixsolve.workflows.demo")
    target = write_text(tmp_path / "demo", "not a folder")
    assert_cli_error(cli("demo", "--out", target),
                     r"demo: exists and is not a folder; choose another output folder$")
    assert target.read_text() == "not a folder"


# --- click's own usage errors and --debug ------------------------------------------------


@pytest.mark.parametrize(
    ("args", "what"),
    [(["--method", "lsq"], "'--method'"), (["--baseline", "quadratic"], "'--baseline'"),
     (["--pathlength", "one"], "'--pathlength'")],
)
def test_click_usage_errors_exit_2_without_traceback(inputs, args, what, cli):
    result = cli("unmix", inputs["lib"], inputs["mix"], *args)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert result.stdout == ""
    assert what in result.stderr.splitlines()[-1]


def test_missing_argument_exits_2(inputs, cli):
    result = cli("unmix", inputs["lib"])
    assert result.exit_code == 2
    assert "Missing argument 'SPECTRA...'" in result.stderr
    assert "Traceback" not in result.output


def test_unknown_command_exits_2(cli):
    result = cli("unmixx")
    assert result.exit_code == 2
    assert "No such command 'unmixx'" in result.stderr


def test_debug_raises_the_error(inputs, cli):
    result = cli("--debug", "unmix", inputs["lib"], inputs["mix"], "--window", "800-900")
    assert result.exit_code == 1
    assert isinstance(result.exception, InputError)
    assert "holds no measured wavelength" in str(result.exception)


def test_errors_are_single_line_even_for_multiline_messages(tmp_path, inputs, monkeypatch, cli):
    import mixsolve.workflows.unmix_files as unmix_files

    def fail(*args, **kwargs):
        raise InputError("first part\n  second part")

    monkeypatch.setattr(unmix_files, "unmix", fail)
    result = cli("unmix", inputs["lib"], inputs["mix"])
    assert_cli_error(result, r"^error: first part second part$")


def test_good_inputs_are_good(tmp_path, inputs, cli):
    """The fixtures themselves run cleanly (so each error above comes from its one defect)."""
    out = tmp_path / "r.csv"
    result = cli("unmix", inputs["lib"], inputs["mix"], "--out", out, "--unit", "mg/L")
    assert result.exit_code == 0, result.output
    assert out.is_file()
    build = cli("library", "build", inputs["standards"], "--standards", inputs["sheet"],
                "--out", tmp_path / "lib.nc")
    assert build.exit_code == 0, build.output
    assert len(mixture_columns()) == 2 and WL.size == 31


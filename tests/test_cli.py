"""The command line (mixsolve.cli): every command through click's CliRunner.

click ≥ 8.2 keeps stderr apart from stdout in ``Result``: ``stdout`` is the data,
``stderr`` the logs and messages, ``output`` both interleaved.
"""

from __future__ import annotations

import json
import os
import shutil
import stat

import numpy as np
import pandas as pd
import pytest
from helpers_io import (
    MIXTURES,
    MOLAR_MASS,
    WL,
    absorptivity_frame,
    flagged_columns,
    leftovers,
    mixture_absorbance,
    mixture_columns,
    wide_rows,
    write_absorptivity_table,
    write_long,
    write_standards,
    write_wide,
    write_xlsx,
)

import mixsolve as ms

RESULT_COLUMNS = ["sample", "component", "concentration", "std_uncertainty", "unit",
                  "sample_flags"]


def read_results(path) -> pd.DataFrame:
    """Parse a results CSV (its `#` provenance lines skipped); empty flags stay empty."""
    table = pd.read_csv(path, dtype={"sample_flags": str, "sample": str}, comment="#",
                        keep_default_na=False,
                        na_values={"concentration": ["nan"], "std_uncertainty": ["nan"]})
    return table


def conc(table: pd.DataFrame, sample: str, component: str) -> float:
    """One concentration from a results table."""
    row = table[(table["sample"] == sample) & (table["component"] == component)]
    assert len(row) == 1
    return float(row["concentration"].iloc[0])


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Input files shared by the tests: tables, a library, spectra, standards."""
    folder = tmp_path_factory.mktemp("cli_inputs")
    paths = {
        "eps": write_absorptivity_table(folder / "eps.csv"),
        "mix": write_wide(folder / "mix.csv", mixture_columns(noise_au=1e-3)),
        "exact": write_wide(folder / "exact.csv"),
        "long": write_long(folder / "long.tsv", mixture_columns(noise_au=1e-3), sep="\t",
                           decimal=","),
        "flagged": write_wide(folder / "flagged.csv", flagged_columns()),
    }
    cols = mixture_columns(noise_au=1e-3)
    paths["xlsx"] = write_xlsx(folder / "mix.xlsx", ["wavelength_nm", *cols], wide_rows(cols))
    paths["standards"], paths["sheet"] = write_standards(folder)
    offset = {k: v + 0.05 for k, v in mixture_columns().items()}
    paths["offset"] = write_wide(folder / "offset.csv", offset)
    sloped = {k: v + 0.02 + 2e-4 * (WL - 400) for k, v in mixture_columns().items()}
    paths["sloped"] = write_wide(folder / "sloped.csv", sloped)
    paths["lib"] = folder / "lib.nc"
    ms.write_library(ms.import_absorptivities(absorptivity_frame(), "L/(mol*cm)",
                                              molar_mass_g_per_mol=MOLAR_MASS), paths["lib"])
    return paths


# --- top level ---------------------------------------------------------------------------


def test_version(cli):
    result = cli.ok("--version")
    assert result.stdout == f"mixsolve, version {ms.__version__}\n"


@pytest.mark.parametrize("flag", ["--help", "-h"])
def test_help_lists_commands(flag, cli):
    result = cli.ok(flag)
    assert result.stdout.startswith("Usage:")
    for command in ("demo", "library", "unmix"):
        assert f"  {command} " in result.stdout
    assert "--debug" in result.stdout


def test_library_help_lists_subcommands(cli):
    result = cli.ok("library", "--help")
    for command in ("import", "build", "show"):
        assert f"  {command} " in result.stdout


@pytest.mark.parametrize(
    ("command", "options"),
    [(["unmix"], ["--window", "--wavelengths", "--method", "--baseline", "--pathlength",
                  "--unit", "--out"]),
     (["library", "import"], ["--absorptivity-unit", "--out", "--molar-mass", "--solvent",
                              "--bandwidth-nm"]),
     (["library", "build"], ["--standards", "--out", "--intercept", "--pathlength"]),
     (["library", "show"], []),
     (["demo"], ["--out"])],
)
def test_command_help(command, options, cli):
    result = cli.ok(*command, "--help")
    assert result.stdout.startswith("Usage:")
    for option in options:
        assert option in result.stdout


def test_no_command_shows_usage(cli):
    result = cli()
    assert result.exit_code in (0, 2)  # click 8.2 exits 2 when a group gets no command
    assert "Usage:" in result.output
    assert "Traceback" not in result.output


# --- library import ----------------------------------------------------------------------


def test_library_import(tmp_path, files, cli):
    out = tmp_path / "lib.nc"
    result = cli.ok("library", "import", files["eps"], "--absorptivity-unit", "L/(mol*cm)",
                    "--out", out)
    assert result.stdout == ""
    assert result.stderr == f"wrote {out}: 2 components, 31 wavelengths, L/(mol*cm)\n"
    lib = ms.read_library(out)
    assert list(lib["component"].values) == ["red", "blue"]
    np.testing.assert_allclose(lib["absorptivity"].values, absorptivity_frame().to_numpy().T,
                               rtol=1e-15)
    assert json.loads(lib.attrs["provenance"])["source"] == "eps.csv"
    assert np.isnan(lib["molar_mass_g_per_mol"].values).all()
    assert leftovers(tmp_path) == []


def test_library_import_options(tmp_path, files, cli):
    out = tmp_path / "lib.nc"
    cli.ok("library", "import", files["eps"], "--absorptivity-unit", "L mol^-1 cm^-1", "--out", out,
           "--molar-mass", "red=500, blue=800", "--solvent", "90 % acetone",
           "--bandwidth-nm", "1.5")
    lib = ms.read_library(out)
    assert lib.attrs["solvent"] == "90 % acetone"
    assert lib.attrs["bandwidth_nm"] == 1.5
    assert dict(zip(lib["component"].values, lib["molar_mass_g_per_mol"].values,
                    strict=True)) == MOLAR_MASS


def test_library_import_converts_units(tmp_path, files, cli):
    out = tmp_path / "mass.nc"
    result = cli.ok("library", "import", files["eps"], "--absorptivity-unit", "mL/(mg*cm)",
                    "--out", out)
    assert result.stderr.endswith("L/(g*cm)\n")
    lib = ms.read_library(out)
    assert lib.attrs["unit"] == "L/(g*cm)"
    # 1 mL/(mg*cm) = 1 L/(g*cm)
    np.testing.assert_allclose(lib["absorptivity"].values, absorptivity_frame().to_numpy().T)


# --- library build -----------------------------------------------------------------------


def test_library_build(tmp_path, files, cli):
    out = tmp_path / "built.nc"
    result = cli.ok("library", "build", files["standards"], "--standards", files["sheet"],
                    "--out", out)
    assert result.stdout.startswith(f"Library {out}\n")
    assert "  components    2: red, blue" in result.stdout
    assert "built from standards (through the origin) from standards.csv" in result.stdout
    assert "levels" in result.stdout
    lib = ms.read_library(out)
    assert list(lib["n_levels"].values) == [3, 3]
    np.testing.assert_allclose(lib["absorptivity"].sel(component="blue").max(), 1.5e4,
                               rtol=1e-9)
    assert leftovers(tmp_path) == []


def test_library_build_intercept_pathlength_solvent(tmp_path, files, cli):
    out = tmp_path / "built.nc"
    result = cli.ok("library", "build", files["standards"], "--standards", files["sheet"],
                    "--out", out, "--intercept", "--pathlength", "2", "--solvent", "water",
                    "--bandwidth-nm", "2", "--molar-mass", "red=500")
    assert "(slope and intercept)" in result.stdout
    assert "  solvent       water" in result.stdout
    lib = ms.read_library(out)
    assert "intercept" in lib
    # the same absorbances at twice the pathlength mean half the absorptivity
    np.testing.assert_allclose(lib["absorptivity"].sel(component="red").max(), 1.0e4,
                               rtol=1e-9)
    assert lib["molar_mass_g_per_mol"].sel(component="red").item() == 500.0


def test_library_build_warns_on_few_levels(tmp_path, files, cli):
    sheet = tmp_path / "sheet.csv"
    text = files["sheet"].read_text().replace("0.04", "0.02")  # red: 2 levels only
    sheet.write_text(text)
    result = cli.ok("library", "build", files["standards"], "--standards", sheet, "--out",
                    tmp_path / "lib.nc")
    assert "warning: component 'red'" in result.stderr
    assert "warning" not in result.stdout


# --- library show ------------------------------------------------------------------------


def test_library_show(files, cli):
    result = cli.ok("library", "show", files["lib"])
    assert result.stdout.startswith(f"Library {files['lib']}\n")
    assert "  components    2: red, blue" in result.stdout
    assert "  absorptivity  L/(mol*cm) (concentrations in mol/L at 1 cm)" in result.stdout
    assert "  wavelengths   31 from 400 to 700 nm (step 10 nm)" in result.stdout
    rows = {line.split()[0]: line.split() for line in result.stdout.splitlines()
            if line.startswith(("red ", "blue "))}
    assert rows["red"][1:3] == ["450", "2e+04"]
    assert rows["blue"][1:3] == ["620", "1.5e+04"]
    assert result.stdout.rstrip().endswith(
        "with the bandwidth the library was made with.")
    assert result.stderr == ""


# --- unmix -------------------------------------------------------------------------------


def test_unmix_prints_results_without_writing(tmp_path, files, monkeypatch, cli):
    monkeypatch.chdir(tmp_path)
    result = cli.ok("unmix", files["lib"], files["mix"])
    lines = result.stdout.splitlines()
    assert lines[0] == "Concentrations by classical least squares (nnls, baseline none)"
    assert "  wavelengths   31 used, 400-700 nm" in lines
    assert "  pathlength    1 cm" in lines
    assert any(line.startswith("mix_1 ") for line in lines)
    assert any(line.startswith("mix_2 ") for line in lines)
    assert result.stderr == ""
    assert list(tmp_path.iterdir()) == []


def test_unmix_out_csv(tmp_path, files, cli):
    out = tmp_path / "results.csv"
    result = cli.ok("unmix", files["lib"], files["mix"], "--out", out)
    assert result.stderr == f"wrote {out}\n"
    table = read_results(out)
    assert list(table.columns[: len(RESULT_COLUMNS) - 1]) == RESULT_COLUMNS[:-1]
    assert "sample_flags" in table.columns
    assert len(table) == 4
    assert list(table["sample"]) == ["mix_1", "mix_1", "mix_2", "mix_2"]
    assert list(table["component"]) == ["red", "blue", "red", "blue"]
    assert set(table["unit"]) == {"mol/L"}
    assert (table["sample_flags"] == "").all()
    for sample, truth in MIXTURES.items():
        for component, value in truth.items():
            assert conc(table, sample, component) == pytest.approx(value, rel=0.05)
    assert (table["std_uncertainty"] > 0).all()
    assert leftovers(tmp_path) == []


def test_unmix_out_relative_path_and_mode(tmp_path, files, monkeypatch, cli):
    monkeypatch.chdir(tmp_path)
    old = os.umask(0o022)
    try:
        cli.ok("unmix", files["lib"], files["mix"], "--out", "results.csv")
    finally:
        os.umask(old)
    out = tmp_path / "results.csv"
    assert out.is_file()
    # written through a private temporary file, but readable like any other new file
    assert stat.S_IMODE(out.stat().st_mode) == 0o644
    assert leftovers(tmp_path) == []


def test_unmix_exact_data_recovers_truth(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    cli.ok("unmix", files["lib"], files["exact"], "--method", "ols", "--out", out)
    table = read_results(out)
    for sample, truth in MIXTURES.items():
        for component, value in truth.items():
            assert conc(table, sample, component) == pytest.approx(value, rel=1e-5)


@pytest.mark.parametrize("key", ["long", "xlsx"])
def test_unmix_other_formats(tmp_path, files, key, cli):
    out = tmp_path / "r.csv"
    cli.ok("unmix", files["lib"], files[key], "--out", out)
    table = read_results(out)
    assert conc(table, "mix_1", "red") == pytest.approx(2.0e-5, rel=0.05)


def test_unmix_window(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    result = cli.ok("unmix", files["lib"], files["mix"], "--window", "420-680", "--out", out)
    # both ends included: 420, 430, ..., 680 nm
    assert "  wavelengths   27 used, 420-680 nm" in result.stdout.splitlines()
    assert conc(read_results(out), "mix_2", "blue") == pytest.approx(
        MIXTURES["mix_2"]["blue"], rel=0.05)


def test_unmix_window_with_colon(files, cli):
    result = cli.ok("unmix", files["lib"], files["mix"], "--window", "500:600")
    assert "  wavelengths   11 used, 500-600 nm" in result.stdout.splitlines()


def test_unmix_wavelengths(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    result = cli.ok("unmix", files["lib"], files["exact"], "--wavelengths", "620,450,530",
                    "--out", out)
    assert "  wavelengths   3 used, 450-620 nm" in result.stdout.splitlines()
    assert conc(read_results(out), "mix_1", "red") == pytest.approx(2.0e-5, rel=1e-6)


def test_unmix_methods_and_flags(tmp_path, files, cli):
    nnls, ols = tmp_path / "nnls.csv", tmp_path / "ols.csv"
    result = cli.ok("unmix", files["lib"], files["flagged"], "--out", nnls)
    assert "at_zero:blue" in result.stdout
    table = read_results(nnls)
    flags = dict(zip(table["sample"], table["sample_flags"], strict=False))
    assert flags["clean"] == ""
    assert "at_zero:blue" in flags["odd"].split(";")
    assert conc(table, "odd", "blue") == 0.0

    result = cli.ok("unmix", files["lib"], files["flagged"], "--method", "ols", "--out", ols)
    assert result.stdout.startswith("Concentrations by classical least squares (ols,")
    table = read_results(ols)
    flags = dict(zip(table["sample"], table["sample_flags"], strict=False))
    assert flags["clean"] == ""
    assert "negative:blue" in flags["odd"].split(";")
    assert "at_zero:blue" not in flags["odd"]
    assert conc(table, "odd", "blue") == pytest.approx(-0.5e-5, rel=0.1)


def test_unmix_baseline_offset(tmp_path, files, cli):
    plain, fitted = tmp_path / "plain.csv", tmp_path / "offset.csv"
    cli.ok("unmix", files["lib"], files["offset"], "--method", "ols", "--out", plain)
    result = cli.ok("unmix", files["lib"], files["offset"], "--method", "ols", "--baseline",
                    "offset", "--out", fitted)
    assert "baseline offset)" in result.stdout.splitlines()[0]
    # without the offset term the 0.05 AU offset biases the result; with it, it does not
    red = MIXTURES["mix_2"]["red"]
    assert conc(read_results(plain), "mix_2", "red") != pytest.approx(red, rel=0.05)
    assert conc(read_results(fitted), "mix_2", "red") == pytest.approx(red, rel=1e-6)


def test_unmix_baseline_linear(tmp_path, files, cli):
    out = tmp_path / "linear.csv"
    result = cli.ok("unmix", files["lib"], files["sloped"], "--baseline", "linear", "--out", out)
    assert "baseline linear)" in result.stdout.splitlines()[0]
    table = read_results(out)
    for sample, truth in MIXTURES.items():
        for component, value in truth.items():
            assert conc(table, sample, component) == pytest.approx(value, rel=1e-6)


def test_unmix_pathlength(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    result = cli.ok("unmix", files["lib"], files["exact"], "--pathlength", "0.5", "--out", out)
    assert "  pathlength    0.5 cm" in result.stdout.splitlines()
    assert conc(read_results(out), "mix_1", "blue") == pytest.approx(6.0e-5, rel=1e-6)


@pytest.mark.parametrize(("unit", "factor"), [("umol/L", 1e6), ("µmol/L", 1e6),
                                              ("mmol/L", 1e3), ("M", 1.0)])
def test_unmix_unit_same_basis(tmp_path, files, unit, factor, cli):
    out = tmp_path / "r.csv"
    result = cli.ok("unmix", files["lib"], files["exact"], "--unit", unit, "--out", out)
    assert f"  unit          {unit}, value ± standard uncertainty" in result.stdout
    table = read_results(out)
    assert set(table["unit"]) == {unit}
    assert conc(table, "mix_1", "red") == pytest.approx(2.0e-5 * factor, rel=1e-6)


def test_unmix_unit_mass_needs_molar_mass(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    cli.ok("unmix", files["lib"], files["exact"], "--unit", "mg/L", "--out", out)
    table = read_results(out)
    # mol/L × g/mol × 1000 mg/g
    assert conc(table, "mix_1", "red") == pytest.approx(2.0e-5 * 500 * 1e3, rel=1e-6)
    assert conc(table, "mix_1", "blue") == pytest.approx(3.0e-5 * 800 * 1e3, rel=1e-6)


def test_unmix_all_options_together(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    result = cli.ok("unmix", files["lib"], files["offset"], "--window", "400-700", "--method",
                    "nnls", "--baseline", "offset", "--pathlength", "1", "--unit", "umol/L",
                    "--out", out)
    assert result.stderr == f"wrote {out}\n"
    table = read_results(out)
    assert conc(table, "mix_2", "blue") == pytest.approx(MIXTURES["mix_2"]["blue"] * 1e6,
                                                          rel=1e-6)


def test_unmix_overwrites_existing_out(tmp_path, files, cli):
    out = tmp_path / "r.csv"
    out.write_text("old contents\n")
    cli.ok("unmix", files["lib"], files["mix"], "--out", out)
    assert list(read_results(out).columns[:2]) == ["sample", "component"]
    assert leftovers(tmp_path) == []


def test_unmix_missing_readings_are_flagged(tmp_path, files, cli):
    spectra = tmp_path / "gaps.csv"
    cols = mixture_columns(noise_au=1e-3)
    cols["mix_1"][3] = np.nan
    write_wide(spectra, cols)
    out = tmp_path / "r.csv"
    cli.ok("unmix", files["lib"], spectra, "--out", out)
    table = read_results(out)
    flags = dict(zip(table["sample"], table["sample_flags"], strict=False))
    assert flags["mix_1"] == "missing_readings"
    assert flags["mix_2"] == ""


def test_unmix_spectra_beyond_library_warn(tmp_path, files, cli):
    wide = np.arange(380.0, 721.0, 10.0)
    spectra = write_wide(tmp_path / "wide.csv",
                         {"m": mixture_absorbance(MIXTURES["mix_1"], wide)}, wl=wide)
    result = cli.ok("unmix", files["lib"], spectra)
    assert result.stderr.startswith("warning: 4 measured wavelength(s) outside the library")
    assert result.stderr.count("\n") == 1
    assert "lie outside the library and were left out (380-720 nm)" in result.stdout


# --- demo --------------------------------------------------------------------------------


def test_demo(tmp_path, cli):
    pytest.importorskip("mixsolve.workflows.demo")
    out = tmp_path / "demo_out"
    result = cli.ok("demo", "--out", out)
    assert "synthetic" in result.stdout.lower()
    assert "Concentrations by classical least squares" in result.stdout
    written = sorted(p.name for p in out.iterdir())
    assert "library.nc" in written
    assert "results.csv" in written
    assert leftovers(out) == []
    ms.read_library(out / "library.nc")
    table = read_results(out / "results.csv")
    for column in RESULT_COLUMNS:
        assert column in table.columns
    assert len(table) > 0


def test_demo_default_folder(tmp_path, monkeypatch, cli):
    pytest.importorskip("mixsolve.workflows.demo")
    monkeypatch.chdir(tmp_path)
    cli.ok("demo")
    assert (tmp_path / "mixsolve-demo" / "results.csv").is_file()
    shutil.rmtree(tmp_path / "mixsolve-demo")

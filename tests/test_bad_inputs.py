"""Corpus of broken inputs driven through every command (policy: docs/errors.md).

Each case is either a clear error — exit code 2, exactly one ``error:`` line on stderr, no
traceback, no output file or temporary left behind — or a run that completes and flags
the problem in its output. Inputs are invented, small and written fresh per test.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest
from helpers_cli import assert_cli_error

from mixsolve.workflows.demo import demo_file

WL = np.arange(400.0, 701.0, 10.0)
BANDS = {"red": (450.0, 30.0), "blue": (620.0, 35.0)}


def _eps(name: str, wl: np.ndarray = WL) -> np.ndarray:
    centre, width = BANDS[name]
    return 10000.0 * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def _wide(path: Path, columns: dict[str, np.ndarray], wl: np.ndarray = WL) -> Path:
    lines = ["wavelength_nm," + ",".join(columns)]
    lines += [f"{w:g}," + ",".join(f"{col[i]:.6g}" for col in columns.values())
              for i, w in enumerate(wl)]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture
def files(tmp_path: Path, cli) -> dict[str, Path]:
    """Good inputs (a library table and file, spectra) and a folder of broken ones."""
    f: dict[str, Path] = {"dir": tmp_path}
    f["table"] = _wide(tmp_path / "eps.csv", {n: _eps(n) for n in BANDS})
    mix = {f"mix_{i}": (1e-5 * (i + 1)) * _eps("red") + 3e-5 * _eps("blue") for i in range(3)}
    f["spectra"] = _wide(tmp_path / "mix.csv", mix)
    f["lib"] = tmp_path / "lib.nc"
    result = cli("library", "import", f["table"], "--absorptivity-unit", "L/(mol*cm)",
                 "--out", f["lib"])
    assert result.exit_code == 0, result.output
    broken = {
        "missing": None,
        "empty": b"",
        "header_only": b"wavelength_nm,a,b\n",
        "binary": bytes(range(256)) * 4,
        "latin1": "wavelength_nm,\xb5g\n400,0.1\n".encode("latin-1"),
        "utf16": "wavelength_nm,a\n400,0.1\n410,0.2\n".encode("utf-16"),
        "text_cell": b"wavelength_nm,a\n400,0.1\n410,abc\n420,0.2\n",
        "inf_cell": b"wavelength_nm,a\n400,0.1\n410,inf\n420,0.2\n",
        "dup_wavelength": b"wavelength_nm,a\n400,0.1\n410,0.2\n410,0.3\n",
        "unknown_layout": b"foo,bar\n1,2\n",
        "short_row": b"wavelength_nm,a,b\n400,0.1,0.2\n410,0.1\n",
    }
    for name, data in broken.items():
        path = tmp_path / f"{name}.csv"
        if data is not None:
            path.write_bytes(data)
        f[name] = path
    f["not_library"] = tmp_path / "not_library.nc"
    f["not_library"].write_text("this is not netCDF\n")
    return f


BAD_SPECTRA = ["missing", "empty", "header_only", "binary", "latin1", "utf16", "text_cell",
               "inf_cell",
               "dup_wavelength", "unknown_layout", "short_row"]


@pytest.mark.parametrize("bad", BAD_SPECTRA)
def test_unmix_with_broken_spectra(files, bad, cli):
    """unmix LIB BROKEN --out r.csv: an error and no r.csv."""
    out = files["dir"] / "r.csv"
    assert_cli_error(cli("unmix", files["lib"], files[bad], "--out", out),
                     must_not_exist=[out])


@pytest.mark.parametrize("bad", BAD_SPECTRA)
def test_library_import_with_broken_table(files, bad, cli):
    """library import BROKEN: an error and no library file."""
    out = files["dir"] / "new.nc"
    assert_cli_error(cli("library", "import", files[bad], "--absorptivity-unit", "L/(mol*cm)",
                         "--out", out), must_not_exist=[out])


@pytest.mark.parametrize("bad", BAD_SPECTRA)
def test_library_build_with_broken_standards(files, bad, cli):
    """library build BROKEN --standards SHEET: an error and no library file."""
    sheet = files["dir"] / "sheet.csv"
    sheet.write_text("sample,component,concentration,unit\na,red,1,mg/L\n")
    out = files["dir"] / "built.nc"
    assert_cli_error(cli("library", "build", files[bad], "--standards", sheet,
                         "--out", out), must_not_exist=[out])


@pytest.mark.parametrize("bad", BAD_SPECTRA)
def test_calibrate_with_broken_spectra(files, bad, cli):
    """calibrate BROKEN --reference REF: an error and no model file."""
    ref = files["dir"] / "ref.csv"
    ref.write_text("sample,component,concentration,unit\nmix_0,red,1,mg/L\n")
    out = files["dir"] / "model.nc"
    assert_cli_error(cli("calibrate", files[bad], "--reference", ref, "--out", out),
                     must_not_exist=[out])


@pytest.mark.parametrize("command", [
    ["instrument", "absorbance", "{bad}", "--concentration", "60"],
    ["instrument", "wavelength", "{bad}"],
    ["instrument", "stray-light", "{bad}"],
    ["instrument", "repeatability", "{bad}"],
])
@pytest.mark.parametrize("bad", ["missing", "empty", "binary", "text_cell", "dup_wavelength"])
def test_instrument_checks_with_broken_spectra(files, command, bad, cli):
    """Every instrument check refuses a broken spectra file cleanly (no log written)."""
    log = files["dir"] / "log.csv"
    args = [files[bad] if a == "{bad}" else a for a in command]
    if command[1] != "repeatability":
        args += ["--log", log]
    assert_cli_error(cli(*args), must_not_exist=[log])


@pytest.mark.parametrize("bad", ["missing", "empty", "binary", "not_library", "table"])
@pytest.mark.parametrize("command", [
    ["library", "show", "{lib}"],
    ["unmix", "{lib}", "{spectra}"],
    ["wavelengths", "check", "{lib}"],
    ["wavelengths", "choose", "{lib}", "--count", "3"],
])
def test_commands_with_a_file_that_is_not_a_library(files, command, bad, cli):
    """A file that is missing, empty, binary, not netCDF or a CSV where a library belongs."""
    args = [files[bad] if a == "{lib}" else files["spectra"] if a == "{spectra}" else a
            for a in command]
    assert_cli_error(cli(*args))


@pytest.mark.parametrize(("options", "what"), [
    (["--window", "800-900"], "window outside the data"),
    (["--window", "700-400"], "reversed window"),
    (["--window", "abc"], "window text"),
    (["--wavelengths", "405"], "wavelength not measured"),
    (["--wavelengths", "450"], "fewer wavelengths than components"),
    (["--pathlength", "0"], "zero pathlength"),
    (["--pathlength", "-1"], "negative pathlength"),
    (["--unit", "furlong"], "unknown unit"),
    (["--unit", "mg/L"], "mass unit without molar masses"),
    (["--noise", "nonsense"], "unknown noise preset"),
    (["--weights", "noise"], "weights without a noise model"),
    (["--range", "2-0.3"], "reversed range"),
    (["--method", "lsq"], "unknown method"),
    (["--out", "/nonexistent-folder/r.csv"], "unwritable output"),
    (["--report", "/nonexistent-folder/r.html"], "unwritable report"),
])
def test_unmix_with_bad_options(files, options, what, cli):
    """Each bad option of unmix is one clear error line ({what})."""
    assert_cli_error(cli("unmix", files["lib"], files["spectra"], *options))


def test_spectra_range_not_matching_the_library(files, cli):
    """Spectra measured at 800-900 nm against a 400-700 nm library: nothing to fit."""
    far = _wide(files["dir"] / "far.csv", {"s": np.ones(11)}, np.arange(800.0, 901.0, 10.0))
    assert_cli_error(cli("unmix", files["lib"], far))


@pytest.mark.parametrize("kind", ["identical", "collinear"])
def test_library_with_inseparable_components(files, kind, cli):
    """Identical or proportional component spectra are refused as rank deficient."""
    red = _eps("red")
    table = _wide(files["dir"] / "bad_eps.csv",
                  {"a": red, "b": red if kind == "identical" else 2.5 * red})
    lib = files["dir"] / "bad.nc"
    assert cli("library", "import", table, "--absorptivity-unit", "L/(mol*cm)",
               "--out", lib).exit_code == 0
    result = cli("unmix", lib, files["spectra"])
    assert_cli_error(result)
    assert "rank deficient" in result.stderr


def test_more_components_than_wavelengths(files, cli):
    """Three components at two wavelengths: underdetermined, refused."""
    wl = np.array([450.0, 620.0])
    table = _wide(files["dir"] / "three.csv", {"a": np.array([1.0, 2.0]),
                                              "b": np.array([2.0, 1.0]),
                                              "c": np.array([1.0, 1.5])}, wl)
    lib = files["dir"] / "three.nc"
    assert cli("library", "import", table, "--absorptivity-unit", "L/(mol*cm)",
               "--out", lib).exit_code == 0
    spectra = _wide(files["dir"] / "two.csv", {"s": np.array([0.5, 0.6])}, wl)
    result = cli("unmix", lib, spectra)
    assert_cli_error(result)
    assert "underdetermined" in result.stderr


def test_missing_readings_are_flagged_not_fatal(files, cli):
    """An empty cell is a missing reading: the run completes and the sample is flagged."""
    text = files["spectra"].read_text().splitlines()
    cells = text[3].split(",")
    cells[1] = ""
    text[3] = ",".join(cells)
    gappy = files["dir"] / "gappy.csv"
    gappy.write_text("\n".join(text) + "\n")
    out = files["dir"] / "r.csv"
    result = cli("unmix", files["lib"], gappy, "--method", "ols", "--out", out)
    assert result.exit_code == 0, result.output
    rows = [r for r in out.read_text().splitlines() if not r.startswith("#")]  # provenance
    assert len(rows) == 1 + 3 * 2  # every sample × component is there
    assert any("missing_readings" in r and r.startswith("mix_0") for r in rows)


def test_descending_wavelengths_are_fine(files, cli):
    """Non-monotonic (descending) wavelengths are sorted on reading, not an error."""
    lines = files["spectra"].read_text().splitlines()
    reversed_file = files["dir"] / "desc.csv"
    reversed_file.write_text("\n".join([lines[0], *lines[:0:-1]]) + "\n")
    a = cli("unmix", files["lib"], files["spectra"], "--method", "ols")
    b = cli("unmix", files["lib"], reversed_file, "--method", "ols")
    assert a.exit_code == b.exit_code == 0
    assert a.stdout == b.stdout


@pytest.mark.parametrize(("layout", "message"), [
    ("well,role,sample,dilution\nA1,blank,,\nZ99,sample,s1,1\n", "Z99"),
    ("well,role,sample,dilution\nA1,blank,,\nA1,sample,s1,1\n", "A1"),
    ("well,role,sample,dilution\nA1,blank,,\nA2,wizard,s1,1\n", "wizard"),
    ("well,role,sample,dilution\nA1,blank,,\nA2,sample,s1,zero\n", "zero"),
    ("wellname,kind\nA1,blank\n", "column"),
])
def test_plate_with_a_malformed_layout(tmp_path, layout, message, cli):
    """Unknown, duplicated or badly typed layout lines are errors naming the line."""
    export = tmp_path / "export.csv"
    shutil.copy(demo_file("plate_export.csv"), export)
    lay = tmp_path / "layout.csv"
    lay.write_text(layout)
    lib = tmp_path / "lib.nc"
    cli("library", "build", demo_file("standards_spectra.csv"), "--standards",
        demo_file("standards.csv"), "--out", lib)
    out = tmp_path / "out"
    result = cli("plate", lib, export, "--layout", lay, "--out", out, "--pathlength", "0.5")
    assert_cli_error(result)
    assert message in result.stderr
    assert not out.exists() or not any(out.iterdir())


@pytest.mark.parametrize(("reference", "message"), [
    ("sample,component,concentration,unit\nmix_0,red,1,mg/L\n", "mix_1"),
    ("sample,component,concentration,unit\nmix_0,red,abc,mg/L\n", "abc"),
    ("sample,component,concentration,unit\nmix_0,red,1,furlong\n", "furlong"),
    ("sample,thing\nmix_0,1\n", "column"),
])
def test_calibrate_with_a_malformed_reference(files, reference, message, cli):
    """Missing samples, text numbers, unknown units or columns in the reference table."""
    ref = files["dir"] / "ref.csv"
    ref.write_text(reference)
    out = files["dir"] / "model.nc"
    result = cli("calibrate", files["spectra"], "--reference", ref, "--out", out)
    assert_cli_error(result, must_not_exist=[out])
    assert message in result.stderr


def test_unmix_with_a_model_file_that_is_not_a_model(files, cli):
    """A netCDF library is not a PLS model, and text is neither: both handled cleanly."""
    assert cli("unmix", files["lib"], files["spectra"]).exit_code == 0
    assert_cli_error(cli("unmix", files["not_library"], files["spectra"]))


def test_demo_with_an_output_path_that_is_a_file(tmp_path, cli):
    """demo --out FILE (not a folder) is refused."""
    target = tmp_path / "occupied"
    target.write_text("x")
    assert_cli_error(cli("demo", "--out", target))


@pytest.mark.parametrize("which", ["spectra", "library", "same_twice"])
def test_outputs_never_overwrite_inputs(files, which, cli):
    """--out naming an input (or two outputs naming one file) is refused; nothing changes."""
    before = {p: p.read_bytes() for p in (files["spectra"], files["lib"])}
    if which == "same_twice":
        target = files["dir"] / "both.csv"
        args = ["unmix", files["lib"], files["spectra"], "--out", target,
                "--budget", target]
    else:
        target = files["spectra"] if which == "spectra" else files["lib"]
        args = ["unmix", files["lib"], files["spectra"], "--out", target]
    result = cli(*args)
    assert_cli_error(result)
    assert "would destroy" in result.stderr
    assert all(p.read_bytes() == data for p, data in before.items())


def test_library_import_onto_its_own_table_is_refused(files, cli):
    """library import TABLE --out TABLE would replace the table with netCDF."""
    before = files["table"].read_bytes()
    assert_cli_error(cli("library", "import", files["table"], "--absorptivity-unit", "L/(mol*cm)",
                         "--out", files["table"]))
    assert files["table"].read_bytes() == before


@pytest.mark.parametrize("noise", ["0", "-1"])
def test_wavelengths_choose_refuses_non_positive_noise(files, noise, cli):
    """σ_A must be positive in choose as in check."""
    assert_cli_error(cli("wavelengths", "choose", files["lib"], "--count", "3",
                         "--noise", noise))


def test_negative_bandwidth_is_refused(files, cli):
    """A spectral bandwidth must be a positive number of nm."""
    out = files["dir"] / "bw.nc"
    assert_cli_error(cli("library", "import", files["table"], "--absorptivity-unit", "L/(mol*cm)",
                         "--bandwidth-nm", "-1", "--out", out), must_not_exist=[out])


def test_plate_with_unwritable_out_fails_before_any_work(tmp_path, cli):
    """An --out below a file is refused at once (one line), not after the analysis."""
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    result = cli("plate", demo_file("plate_export.csv"), "--layout",
                 demo_file("plate_layout.csv"), "--library-from-plate", "--out",
                 blocker / "po")
    assert_cli_error(result)


def test_cube_paths_without_the_scale_extra_are_refused(files, monkeypatch, cli):
    """Without dask/zarr installed, a .zarr output is one clear error, not a traceback."""
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name in ("dask", "zarr") else real(name, *a))
    result = cli("unmix", files["lib"], files["spectra"], "--out", files["dir"] / "r.zarr")
    assert_cli_error(result)
    assert "mixsolve[scale]" in result.stderr


@pytest.mark.parametrize("option", [["--method", "ols"], ["--fit-shift"],
                                    ["--noise", "microplate"], ["--range", "0.1-1"]])
def test_least_squares_options_are_refused_with_a_pls_model(tmp_path, option, cli):
    """A PLS model fixes its own preprocessing: least-squares options are refused, not ignored."""
    model = tmp_path / "model.nc"
    made = cli("calibrate", demo_file("calibration_spectra.csv"), "--reference",
               demo_file("calibration_reference.csv"), "--out", model)
    assert made.exit_code == 0, made.output
    result = cli("unmix", model, demo_file("calibration_test_spectra.csv"), *option)
    assert_cli_error(result)
    assert "does not apply to the PLS model" in result.stderr


def test_report_shows_the_budget_when_one_is_asked_for(files, cli):
    """unmix --budget B --report R: the page carries the budget section and its table."""
    budget = files["dir"] / "b.csv"
    page = files["dir"] / "r.html"
    result = cli("unmix", files["lib"], files["spectra"], "--budget", budget,
                 "--report", page)
    assert result.exit_code == 0, result.output
    text = page.read_text()
    assert "Uncertainty budget" in text and "spectral_noise" in text.replace(" ", "_")


def test_utf16_gets_a_hint_to_save_as_utf8(files, cli):
    """UTF-16 text (some spreadsheet exports) is named as such, with the fix."""
    result = cli("unmix", files["lib"], files["utf16"])
    assert_cli_error(result)
    assert "UTF-16 text; save the file as UTF-8" in result.stderr


def test_plate_refuses_a_non_positive_max_cv(tmp_path, cli):
    """--max-cv is a percentage above 0."""
    result = cli("plate", demo_file("plate_export.csv"), "--layout",
                 demo_file("plate_layout.csv"), "--library-from-plate", "--out",
                 tmp_path / "po", "--max-cv", "-5")
    assert_cli_error(result)
    assert "--max-cv: -5 % is not a positive number" in result.stderr


def test_unmix_refuses_an_implausible_wavelength_offset(files, cli):
    """A 100 nm 'correction' is a mistake (sign or unit), not a scale offset."""
    result = cli("unmix", files["lib"], files["spectra"], "--wavelength-offset", "100")
    assert_cli_error(result)
    assert ("--wavelength-offset: 100 nm is not a number from -10 to 10 nm; an error that "
            "large is a fault to repair") in result.stderr

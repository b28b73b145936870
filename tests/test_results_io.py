"""Results files an analyst can file (issue 17, items 1 and 3): the wide table, the results
workbook, provenance in every output, and mixsolve reading its own results back.

Data: the invented two-band mixtures of helpers_io (synthetic). Outside checks: pandas'
own ``pivot`` for the wide table, Python's ``float``/``repr`` round trip for full
precision, the FIPS 180-2 SHA-256 test vector and coreutils ``sha256sum`` for the
checksum, ``datetime.fromisoformat`` for the date, and the GUM (JCGM 100:2008) 7.2.2
example for rounding to u's two significant digits.
"""

from __future__ import annotations

import datetime
import json
import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest
from helpers_cli import assert_cli_error
from helpers_io import flagged_columns, mixture_columns, write_library_file, write_wide

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.flags import FLAG_FIXES, FLAG_MEANINGS, severity_of
from mixsolve.io.provenance import header_lines, parse_header, sha256_of
from mixsolve.io.reference_io import read_reference
from mixsolve.io.results_io import SHEETS, read_results, write_results
from mixsolve.report.tables import results_sheets
from mixsolve.report.text import value_with_uncertainty


@pytest.fixture
def files(tmp_path):
    """A library file and a spectra file (one clean mixture, one with NNLS at zero)."""
    lib = write_library_file(tmp_path / "lib.nc")
    spectra = write_wide(tmp_path / "mix.csv", {**flagged_columns(), **mixture_columns()})
    return {"dir": tmp_path, "lib": lib, "spectra": spectra}


@pytest.fixture
def result(files):
    return ms.unmix(ms.read_spectra(files["spectra"]), ms.read_library(files["lib"]),
                    unit="mg/L")


# --- the wide table ------------------------------------------------------------------------


def test_wide_table_is_the_tidy_table_pivoted(result):
    """One row per sample: each component's value and u in its own columns, equal to the
    tidy table pivoted by pandas (``DataFrame.pivot``, outside the project)."""
    tidy = ms.results_table(result)
    wide = ms.results_table(result, shape="wide")
    assert list(wide.columns) == ["sample", "red", "u(red)", "blue", "u(blue)", "unit",
                                  "sample_flags", "rms_residual_au", "dof"]
    assert list(wide["sample"]) == ["clean", "odd", "mix_1", "mix_2"]
    pivot = tidy.pivot(index="sample", columns="component")
    for comp in ("red", "blue"):
        np.testing.assert_array_equal(wide.set_index("sample")[comp],
                                      pivot["concentration"][comp].loc[wide["sample"]])
        np.testing.assert_array_equal(wide.set_index("sample")[f"u({comp})"],
                                      pivot["std_uncertainty"][comp].loc[wide["sample"]])
    first = tidy.groupby("sample", sort=False).first()
    assert list(wide["sample_flags"]) == list(first["sample_flags"])
    assert "at_zero:blue" in wide.loc[wide["sample"] == "odd", "sample_flags"].item()


def test_the_flags_column_does_not_shadow_pandas(result):
    """``DataFrame.flags`` is pandas' own attribute (pandas docs, "DataFrame.flags"): the
    column is ``sample_flags`` in both shapes, so ``table.flags`` stays pandas'."""
    for shape in ("tidy", "wide"):
        table = ms.results_table(result, shape=shape)
        assert "sample_flags" in table and "flags" not in table
        assert isinstance(table.flags, pd.Flags)


def test_wide_table_refuses_a_component_named_as_a_column(files):
    """A component called ``unit`` would give two columns of that name: refused, naming it."""
    lib = ms.read_library(files["lib"])
    lib = lib.assign_coords(component=["unit", "blue"])
    res = ms.unmix(ms.read_spectra(files["spectra"]), lib)
    with pytest.raises(InputError, match=r"^components: the wide table would have two "
                       r"columns named 'unit' .*use the tidy table"):
        ms.results_table(res, shape="wide")
    assert len(ms.results_table(res)) == 8  # the tidy table still works


def test_unknown_shape_is_refused(result):
    with pytest.raises(InputError, match=r"^shape: 'long' is not one of 'tidy', 'wide'"):
        ms.results_table(result, shape="long")  # type: ignore[arg-type]


# --- files: full precision, provenance, round trip -----------------------------------------


def test_csv_numbers_keep_full_precision(result, tmp_path):
    """Every float is written as the shortest text that reads back to the same float64
    (Python's repr round trip): the file's numbers equal the result's bit for bit."""
    path = write_results(ms.results_table(result), tmp_path / "r.csv")
    back = pd.read_csv(path, keep_default_na=False)
    np.testing.assert_array_equal(back["concentration"].to_numpy(float),
                                  result["concentration"].values.ravel())
    np.testing.assert_array_equal(back["std_uncertainty"].to_numpy(float),
                                  result["std_uncertainty"].values.ravel())


@pytest.mark.parametrize(("out", "args"), [("r.csv", []), ("r.csv", ["--shape", "tidy"]),
                                           ("w.csv", ["--shape", "wide"]), ("r.xlsx", [])])
def test_cli_results_read_back_as_the_tidy_table(files, result, cli, out, args):
    """`unmix --out` in each shape, read back with read_results: the tidy table of the
    result (pandas ``assert_frame_equal``), exactly from CSV, to 16 significant digits from
    XLSX; a wide file has the columns that hold one value per sample or the value and u of
    a component."""
    path = files["dir"] / out
    cli.ok("unmix", files["lib"], files["spectra"], "--unit", "mg/L", "--out", path, *args)
    back = read_results(path)
    expected = ms.results_table(result)
    if "wide" in args:
        expected = expected[list(back.table.columns)]
        assert "u_library" not in back.table  # per-component parts: tidy files only
    if out.endswith(".csv"):  # exact: the shortest text that reads back to the float64
        pd.testing.assert_frame_equal(back.table, expected, check_exact=True)
    else:  # openpyxl writes numbers with 16 significant digits ("%.16g"): 1 ulp or so
        pd.testing.assert_frame_equal(back.table, expected, check_exact=False, rtol=1e-15,
                                      atol=0)
    prov = back.provenance
    assert prov["mixsolve_version"] == ms.__version__
    assert prov["library"] == str(files["lib"])
    assert prov["spectra"] == [str(files["spectra"])]
    assert prov["library_sha256"] == sha256_of(files["lib"])
    assert prov["settings"]["method"] == "nnls"
    assert prov["settings"]["unit"] == "mg/L"
    assert prov["settings"]["pathlength_cm"] == 1.0
    assert prov["settings"]["window_nm"] is None  # not given


def test_csv_and_workbook_carry_the_same_provenance(files, cli):
    """The `#` lines of a CSV and the settings sheet of a workbook hold one record."""
    csv, book = files["dir"] / "r.csv", files["dir"] / "r.xlsx"
    cli.ok("unmix", files["lib"], files["spectra"], "--out", csv)
    cli.ok("unmix", files["lib"], files["spectra"], "--out", book)
    a, b = read_results(csv).provenance, read_results(book).provenance
    a.pop("created_utc"), b.pop("created_utc")
    assert a == b


def test_provenance_header_lines(files, cli):
    """The CSV opens with `#` lines: a title, then one item each; the date is UTC ISO 8601
    (``datetime.fromisoformat``) within the run's minute."""
    path = files["dir"] / "r.csv"
    start = datetime.datetime.now(datetime.UTC).replace(microsecond=0)
    cli.ok("unmix", files["lib"], files["spectra"], "--out", path)
    lines = path.read_text().splitlines()
    head = [ln for ln in lines if ln.startswith("#")]
    assert lines[: len(head)] == head and head[0] == "# mixsolve results"
    assert lines[len(head)].startswith("sample,component,")
    items = [ln[2:].partition(": ")[0] for ln in head[1:]]
    assert items[:5] == ["mixsolve_version", "created_utc", "library", "library_sha256",
                         "spectra"]
    assert "setting method" in items
    when = datetime.datetime.fromisoformat(read_results(path).provenance["created_utc"])
    assert when.utcoffset() == datetime.timedelta(0)
    assert start <= when <= start + datetime.timedelta(minutes=1)


def test_sha256_is_the_standard_digest(tmp_path):
    """FIPS 180-2, Appendix B.1: SHA-256("abc") (from memory; hashlib agrees); and the
    digest of a library file as coreutils ``sha256sum`` prints it."""
    abc = tmp_path / "abc.txt"
    abc.write_bytes(b"abc")
    assert sha256_of(abc) == ("ba7816bf8f01cfea414140de5dae2223"
                              "b00361a396177a9cb410ff61f20015ad")
    lib = write_library_file(tmp_path / "lib.nc")
    if shutil.which("sha256sum"):
        printed = subprocess.run(["sha256sum", str(lib)], capture_output=True, text=True,
                                 check=True).stdout.split()[0]
        assert sha256_of(lib) == printed


def test_header_lines_stay_one_spreadsheet_cell(tmp_path):
    """A spectra file named with a comma, a semicolon and a formula start: every `#` line
    has no separator (one cell, beginning with `#`, never a formula: the OWASP CSV
    injection guidance, common practice), and the name reads back exactly."""
    prov = {"mixsolve_version": "x", "spectra": ["a,b;=HYPERLINK(\"x\").csv", "tab\there"],
            "settings": {"window_nm": "400-700", "noise_model": None, "fit_shift": 0}}
    lines = header_lines(prov)
    assert not any("," in ln or ";" in ln or "\t" in ln for ln in lines)
    assert all(ln.startswith("# ") for ln in lines)
    assert parse_header(lines) == prov
    assert parse_header(["# my own note", "# another: 1"]) == {}  # not mixsolve's header


def test_old_results_files_read_with_the_new_column_name(tmp_path):
    """A results CSV written before issue 17 (``flags`` column, no `#` lines, 6 digits)
    reads back with ``sample_flags`` and an empty provenance."""
    path = tmp_path / "old.csv"
    path.write_text("sample,component,concentration,std_uncertainty,unit,rms_residual_au,"
                    "dof,flags\ns1,red,1.5,0.1,mg/L,0.002,29,at_zero:blue\n"
                    "s1,blue,0,0.05,mg/L,0.002,29,at_zero:blue\n")
    back = read_results(path)
    assert back.provenance == {}
    assert list(back.table["sample_flags"]) == ["at_zero:blue"] * 2
    assert back.table["concentration"].tolist() == [1.5, 0.0]


def test_results_read_back_as_a_reference_table(files, cli):
    """A results CSV with its `#` lines, and a results workbook (its tidy sheet), serve as
    the reference table of a calibration (io/reference_io.py)."""
    csv, book = files["dir"] / "r.csv", files["dir"] / "r.xlsx"
    cli.ok("unmix", files["lib"], files["spectra"], "--out", csv)
    cli.ok("unmix", files["lib"], files["spectra"], "--out", book)
    a, b = read_reference(csv), read_reference(book)
    assert list(a["sample"]) == list(b["sample"]) == ["clean"] * 2 + ["odd"] * 2 + \
        ["mix_1"] * 2 + ["mix_2"] * 2
    np.testing.assert_allclose(a["concentration"], b["concentration"], rtol=1e-15, atol=0)


def test_not_a_results_table_is_refused(tmp_path):
    path = tmp_path / "x.csv"
    path.write_text("sample,a,b\ns1,1,2\n")
    with pytest.raises(ms.MixsolveError, match=r"^x.csv, line 1: neither a 'component' "
                       r"column nor 'u\(<component>\)' columns; not a mixsolve results"):
        read_results(path)


# --- the workbook ---------------------------------------------------------------------------


def test_workbook_sheets(result, files, cli):
    """Sheets in order: results (wide), tidy, flags explained (each code present with
    its meaning, severity and fix), run notes, settings (item, value)."""
    book = files["dir"] / "r.xlsx"
    cli.ok("unmix", files["lib"], files["spectra"], "--out", book)
    sheets = pd.read_excel(book, sheet_name=None, keep_default_na=False)
    assert tuple(sheets) == SHEETS
    assert list(sheets["results"]["sample"]) == ["clean", "odd", "mix_1", "mix_2"]
    flags = sheets["flags explained"]
    present = {c.partition(":")[0] for text in ms.results_table(result)["sample_flags"]
               for c in text.split(";") if c}
    assert set(flags["code"]) == present and "at_zero" in present
    row = flags.set_index("code").loc["at_zero"]
    assert row["meaning"] == FLAG_MEANINGS["at_zero"]
    assert row["what_to_do"] == FLAG_FIXES["at_zero"]
    assert row["severity"] == severity_of("at_zero") and row["samples"] == 1
    assert all(flags["meaning"] == [FLAG_MEANINGS[c] for c in flags["code"]])
    notes = sheets["run notes"]
    assert list(notes.columns) == ["code", "severity", "text", "fix"]
    settings = sheets["settings"]
    assert list(settings.columns) == ["item", "value"]
    assert settings["item"].iloc[0] == "mixsolve_version"


def test_flags_explained_lists_doubtful_codes_first(result):
    sheets = results_sheets(result)
    table = sheets["flags explained"]
    assert list(table.columns) == ["code", "severity", "meaning", "what_to_do", "samples"]
    from mixsolve.report.tables import flags_explained

    table = flags_explained(["at_zero:red;missing_readings", "above_range;at_zero:blue", ""])
    assert list(table["code"]) == ["above_range", "at_zero", "missing_readings"]
    assert list(table["samples"]) == [1, 2, 1]
    assert list(table["severity"]) == ["doubtful", "look", "look"]


def test_every_flag_code_has_a_fix():
    """The flags sheet needs a "what to do" for every code docs/flags.md lists."""
    assert set(FLAG_FIXES) == set(FLAG_MEANINGS)
    assert all(FLAG_FIXES.values())


# --- cubes and the budget CSV ---------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_cube_result_carries_its_provenance(files, cli, suffix):
    """A cube output (.nc, .zarr) holds the record as its ``provenance`` attribute (JSON)."""
    pytest.importorskip("dask")
    if suffix == ".zarr":
        pytest.importorskip("zarr")
    out = files["dir"] / f"r{suffix}"
    cli.ok("unmix", files["lib"], files["spectra"], "--out", out)
    from mixsolve.workflows.unmix_files import open_result

    with open_result(out) as ds:
        prov = json.loads(ds.attrs["provenance"])
    assert prov["library_sha256"] == sha256_of(files["lib"])
    assert prov["spectra"] == [str(files["spectra"])]
    assert prov["settings"]["method"] == "nnls"


def test_table_shape_with_a_cube_is_refused(files, cli):
    pytest.importorskip("dask")
    out = files["dir"] / "r.nc"
    assert_cli_error(cli("unmix", files["lib"], files["spectra"], "--out", out,
                         "--shape", "wide"),
                     r"shape: 'wide' shapes a CSV; a cube \(r.nc\) holds the whole result")
    assert not out.exists()


def test_api_result_carries_its_provenance(files):
    """unmix_files returns the result with its record in attrs["provenance"]."""
    from mixsolve.io.provenance import provenance_of
    from mixsolve.workflows.unmix_files import unmix_files

    res = unmix_files(files["lib"], files["spectra"])
    prov = provenance_of(res)
    assert prov["library_sha256"] == sha256_of(files["lib"])


# --- what people read ----------------------------------------------------------------------


def test_readable_numbers_round_to_two_significant_digits_of_u():
    """GUM (JCGM 100:2008) 7.2.2: m_S = 100.021 47 g with u_c = 0.35 mg (seen); u to two
    significant digits, the value to the same decimal place (GUM 7.2.6)."""
    assert value_with_uncertainty(100.02147, 0.00035) == "100.02147 ± 0.00035"
    assert value_with_uncertainty(6.020745295377044, 0.04862672020173451) == "6.021 ± 0.049"
    # u that rounds up to the next decade keeps two digits, not three
    assert value_with_uncertainty(1.23456, 0.0996) == "1.23 ± 0.10"

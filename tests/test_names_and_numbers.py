"""Names compared as people read them, and numbers that cannot be right (issue 12, parts 5-6).

Names: component, sample and well names are put in one normal form (mixsolve.names) where
they enter; two names that then differ only in case, or that were two spellings of one
name, are refused with both spellings named. Numbers: NaN or infinite options are refused
with one line naming the option; a wavelength choice is judged by the singular values of
its design, never by an inverse; an all-zero spectrum is a result with the ``no_signal``
flag; names with ``$`` and readings of 1e308 still give a report.

Every refusal through the command line is checked as docs/errors.md promises it: exit 2,
one ``error:`` line, no output written, every input byte-for-byte as before. All data are
invented (two Gaussian bands, tests/helpers_io.py).
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from helpers_io import (
    WL,
    absorptivity_frame,
    band,
    make_library,
    mixture_absorbance,
    table_text,
    write_absorptivity_table,
    write_library_file,
    write_standards,
    write_text,
    write_wide,
)
from helpers_plate import (
    SAMPLES,
    export_rows,
    scenario_layout,
    scenario_values,
    write_export,
    write_layout,
    write_scenario,
)

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.flags import FLAG_MEANINGS, NO_SIGNAL, STATUS_CODES
from mixsolve.instrument.absorbance_scale import check_absorbance_scale
from mixsolve.instrument.stray_light import check_stray_light
from mixsolve.instrument.wavelength_scale import check_wavelength_scale
from mixsolve.io.layout_io import read_layout
from mixsolve.io.reference_io import read_reference
from mixsolve.io.standards_io import read_standards
from mixsolve.names import check_spellings, check_unique_names, normalise_name
from mixsolve.plate.wells import parse_well, plate_wells
from mixsolve.report.figures import PLOT_LIMIT, drawable, literal, sample_figure
from mixsolve.report.plate_page import heat_map, residual_figure
from mixsolve.solve.design import MAX_CONDITION_NUMBER
from mixsolve.spectra import check_number, check_wavelength_list
from mixsolve.wavelengths.check import check_wavelengths
from mixsolve.wavelengths.choose import _variances, choose_wavelengths
from mixsolve.workflows.demo import demo_file

NEAR = r"names 'Ext_03 ' and 'ext_03' differ only in case or spacing; rename one"
#: The same from a spectra file: the table reader strips every cell first (mixsolve.io.tables).
NEAR_FILE = "names 'Ext_03' and 'ext_03' differ only in case or spacing; rename one"
#: The fix named when a column that may repeat a name holds two spellings of one.
ONE_SPELLING = "write one name the same way on every line, or rename one"


def digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file below ``folder``, by relative name."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def assert_refused(result, folder: Path, before: dict[str, str], *needles: str) -> None:
    """The one-line error holding each needle, and ``folder`` exactly as before: inputs
    byte-for-byte unchanged, no output and no temporary file added."""
    assert_cli_error(result, *needles, literal=True)
    assert digest(folder) == before


def mixtures() -> dict[str, np.ndarray]:
    """Two invented mixtures, absorbance (AU) on WL."""
    return {"s1": mixture_absorbance({"red": 2e-5, "blue": 3e-5}),
            "s2": mixture_absorbance({"red": 1e-5, "blue": 2e-5})}


@pytest.fixture
def cuvette(tmp_path: Path) -> dict[str, Path]:
    """A library file, its table and spectra of two mixtures in tmp_path."""
    return {"dir": tmp_path, "table": write_absorptivity_table(tmp_path / "eps.csv"),
            "lib": write_library_file(tmp_path / "lib.nc"),
            "spectra": write_wide(tmp_path / "mix.csv", mixtures())}


# --- names: the normal form -----------------------------------------------------------------

@pytest.mark.parametrize(("given", "normal"), [
    ("Ext\u00a003", "Ext 03"),           # no-break space
    ("Ext\u202f03", "Ext 03"),           # narrow no-break space
    ("Ext\u300003", "Ext 03"),           # ideographic space
    ("\u200bExt_03\u200c", "Ext_03"),    # zero-width space and non-joiner
    ("Ext\u200d_03\ufeff", "Ext_03"),    # zero-width joiner, zero-width no-break space
    ("Cafe\u0301", "Caf\u00e9"),         # NFD: e + combining acute becomes é
    ("  Ext_03\t", "Ext_03"),            # surrounding white space
    ("\u00a0 Ext 03 \u2009", "Ext 03"),  # surrounding no-break and thin spaces
    ("Ext\t03", "Ext 03"),              # a tab inside counts as a space
    ("Ext\t\u00a003\r\n", "Ext  03"),   # ... in the non-ASCII path too; line breaks
    ("Ext\u202803", "Ext 03"),           # line separator (white space, not Zs)
])
def test_normal_form(given, normal):
    """Zero-width characters go, NFC, every white-space character a plain space,
    stripped."""
    assert normalise_name(given) == normal


@pytest.mark.parametrize(("first", "second", "message"), [
    ("Ext_03 ", "ext_03", NEAR),
    ("Ext\u00a003", "Ext 03", r"names 'Ext\\xa003' and 'Ext 03' differ only in case or "
                               "spacing"),
    ("Ext\u200b03", "Ext03", r"names 'Ext\\u200b03' and 'Ext03' differ only in case or "
                             "spacing"),
    ("Cafe\u0301", "Caf\u00e9", r"names 'Cafe\\u0301' and 'Caf\\xe9' differ only in Unicode "
                                "form"),
    ("red", "red", "name 'red' appears twice; rename one"),
])
def test_near_duplicates_refused_with_both_spellings(first, second, message):
    """Two names a person reads as one are refused, each spelling shown so they differ."""
    with pytest.raises(InputError, match=r"^where: " + message):
        check_unique_names([first, "other", second], "where")


def test_repeated_names_are_one_name_only_under_one_spelling():
    """In a column that may repeat a name, one spelling on many rows is one name, in
    normal form; two spellings of one name (space, Unicode form or case) are refused,
    naming both and, when given, the first line of each."""
    assert check_spellings(["Ext\u00a003", "Ext\u00a003", "x", ""], "w") == \
        ["Ext 03", "Ext 03", "x", ""]
    with pytest.raises(InputError, match=r"^w: names 'Ext\\xa003' and 'Ext 03' differ only in "
                                         "case or spacing; " + ONE_SPELLING + "$"):
        check_spellings(["Ext\u00a003", "Ext 03", "x"], "w")
    with pytest.raises(InputError, match=r"^w: names 'Mix 1' \(line 2\) and 'mix\\xa01' "
                                         r"\(line 4\) differ only in case or spacing"):
        check_spellings(["Mix 1", "Mix 1", "mix\u00a01"], "w", [2, 3, 4])
    with pytest.raises(InputError, match=r"names 'Ext03' \(line 7\) and 'Ext03 ' \(line 9\)"):
        check_spellings(["Ext03", "Ext03", "Ext03 "], "w", [7, 8, 9])


def test_a_name_of_spaces_only_is_refused():
    """A name that is empty once normalised names nothing."""
    with pytest.raises(InputError, match=r"name '\\u200b\\xa0' is empty once spaces"):
        check_unique_names(["a", "\u200b\u00a0"], "where")


# --- names: where they enter ----------------------------------------------------------------

def test_spectra_arrays_get_normal_names():
    """make_spectra/check_spectra: sample labels in normal form, near-duplicates refused."""
    values = np.vstack(list(mixtures().values()))
    spectra = ms.make_spectra(values, WL, ["\u200bs1", "s\u00a02"])
    assert list(spectra["sample"].values) == ["s1", "s 2"]
    with pytest.raises(InputError, match=NEAR):
        ms.make_spectra(values, WL, ["Ext_03 ", "ext_03"])


def test_wide_table_header_near_duplicates(tmp_path):
    """A wide header with 'mix\\xa01' and 'mix 1' (they print alike) is refused naming the
    line; a lone no-break space becomes a plain one."""
    cols = list(mixtures().values())
    bad = write_wide(tmp_path / "bad.csv", {"mix\u00a01": cols[0], "mix 1": cols[1]})
    with pytest.raises(InputError, match=r"bad.csv, line 1: names 'mix\\xa01' and 'mix 1' "
                                         "differ only in case or spacing"):
        ms.read_spectra(bad)
    good = write_wide(tmp_path / "good.csv", {"mix\u00a01": cols[0], "mix\u200b2": cols[1]})
    assert list(ms.read_spectra(good)["sample"].values) == ["mix 1", "mix2"]


def test_long_table_case_near_duplicates(tmp_path):
    """A long table whose sample column holds 'Ext_03 ' and 'ext_03' is refused."""
    rows = [[name, float(w), 0.5] for name in ("Ext_03", "ext_03") for w in WL]
    path = write_text(tmp_path / "long.csv",
                      table_text(["sample", "wavelength_nm", "absorbance"], rows))
    with pytest.raises(InputError, match=r"names 'Ext_03' and 'ext_03' differ only in case"):
        ms.read_spectra(path)


def test_library_import_names_and_molar_masses():
    """Component names in normal form; 'red'/'Red' refused; a molar mass given for
    'red\\xa0' belongs to 'red'."""
    frame = absorptivity_frame()
    frame.columns = ["red\u200b", "blue"]
    lib = ms.import_absorptivities(frame, "L/(mol*cm)",
                                   molar_mass_g_per_mol={"red\u00a0": 500.0})
    assert list(lib["component"].values) == ["red", "blue"]
    assert lib["molar_mass_g_per_mol"].values[0] == 500.0
    frame.columns = ["red", "Red"]
    with pytest.raises(InputError, match=r"names 'red' and 'Red' differ only in case"):
        ms.import_absorptivities(frame, "L/(mol*cm)")


def _edited_library(**changes) -> xr.Dataset:
    lib = make_library()
    if "components" in changes:
        lib = lib.assign_coords(component=changes["components"])
    if "masses" in changes:
        lib["molar_mass_g_per_mol"] = ("component", np.asarray(changes["masses"], float))
    return lib


@pytest.mark.parametrize(("changes", "message"), [
    ({"components": ["red", "red"]}, r"library, components: name 'red' appears twice"),
    ({"components": ["red", "RED "]}, r"names 'red' and 'RED ' differ only in case"),
    ({"masses": [-500.0, 800.0]}, r"molar mass of 'red' is -500 g/mol; a molar mass must be "
                                  "a positive number"),
    ({"masses": [500.0, 0.0]}, r"molar mass of 'blue' is 0 g/mol"),
    ({"masses": [500.0, np.inf]}, r"molar mass of 'blue' is inf g/mol"),
])
def test_library_with_duplicate_names_or_bad_molar_mass_refused(changes, message):
    """A library (a hand-made one, or one read from a file) with a duplicate component
    name or a molar mass that is not positive is refused where it is used."""
    with pytest.raises(InputError, match=message):
        ms.unmix(ms.make_spectra(np.vstack(list(mixtures().values())), WL),
                 _edited_library(**changes))


def test_library_file_with_negative_molar_mass_refused_by_cli(cuvette, cli):
    """unmix with a library file holding a negative molar mass: exit 2, nothing written."""
    folder = cuvette["dir"]
    lib = _edited_library(masses=[-500.0, 800.0])
    lib.to_netcdf(folder / "neg.nc")
    before = digest(folder)
    result = cli("unmix", folder / "neg.nc", cuvette["spectra"], "--out", folder / "r.csv")
    assert_refused(result, folder, before, "molar mass of 'red' is -500 g/mol")


def test_standards_sheet_names(tmp_path):
    """Standards: the sheet's 'r1\\xa0' finds spectrum 'r1'; 'red' and 'Red' are refused
    by the reader and by build_library (a DataFrame from Python)."""
    spectra_path, sheet_path = write_standards(tmp_path)
    sheet = pd.read_csv(sheet_path)
    sheet.loc[0, "sample"] = "r1\u00a0"
    lib = ms.build_library(ms.read_spectra(spectra_path), sheet)
    assert list(lib["component"].values) == ["red", "blue"]
    sheet.loc[1, "component"] = "Red"
    with pytest.raises(InputError, match=r"standards sheet, components: names 'red' and "
                                         "'Red' differ only in case"):
        ms.build_library(ms.read_spectra(spectra_path), sheet)
    sheet.to_csv(sheet_path, index=False)
    with pytest.raises(InputError, match=r"sheet.csv, components: names 'red' \(line 2\) and "
                                         r"'Red' \(line 3\) differ only in case"):
        read_standards(sheet_path)
    sheet.loc[1, "component"] = "red\u200b"
    sheet.to_csv(sheet_path, index=False)
    with pytest.raises(InputError, match=r"sheet.csv, components: names 'red' \(line 2\) and "
                                         r"'red\\u200b' \(line 3\) differ only in case or "
                                         "spacing; " + ONE_SPELLING):
        read_standards(sheet_path)


def test_layout_names(tmp_path):
    """Layout: well '\\u200bA1' is A1; 'Ext\\xa003' in two wells is one sample 'Ext 03';
    'Ext 03' beside 'Ext\\xa003', and 'Ext_03 ' beside 'ext_03', are refused naming both
    spellings as written, their lines and wells; so are 'Ext-03' beside 'ext_03' and
    'Ext  03' (two spaces) beside 'ext 03' (issue 17 item 4)."""
    rows = [["\u200bA1", "sample", "Ext\u00a003"], ["A2", "sample", "Ext\u00a003"],
            ["A3", "blank", ""]]
    path = write_text(tmp_path / "layout.csv", table_text(["well", "role", "sample"], rows))
    layout = read_layout(path)
    assert list(layout["well"]) == ["A1", "A2", "A3"]
    assert list(layout["sample"]) == ["Ext 03", "Ext 03", ""]
    rows[1][2] = "Ext 03"
    path.write_text(table_text(["well", "role", "sample"], rows))
    with pytest.raises(InputError, match=r"^layout.csv, samples: names 'Ext\\xa003' \(line 2, "
                                         r"well A1\) and 'Ext 03' \(line 3, well A2\) differ "
                                         "only in case or spacing; " + ONE_SPELLING + "$"):
        read_layout(path)
    rows[1][2] = "ext_03"
    rows[0][2] = "Ext_03 "
    path.write_text(table_text(["well", "role", "sample"], rows))
    with pytest.raises(InputError, match=r"layout.csv, samples: names 'Ext_03 ' \(line 2, "
                                         r"well A1\) and 'ext_03' \(line 3, well A2\) differ "
                                         "only in case"):
        read_layout(path)
    for first, second, shown in (("Ext-03", "ext_03", "'Ext-03'"),
                                 ("Ext  03", "ext 03", r"'Ext\\x20\\x2003'")):
        rows[0][2], rows[1][2] = first, second
        path.write_text(table_text(["well", "role", "sample"], rows))
        with pytest.raises(InputError, match=rf"^layout.csv, samples: names {shown} \(line 2, "
                                             rf"well A1\) and '{second}' \(line 3, well A2\) "
                                             r"differ only in case, spacing or - and _; "
                                             + ONE_SPELLING + "$"):
            read_layout(path)


def test_reference_table_names(tmp_path):
    """Reference table: 'mix\\xa01' reads as 'mix 1'; 'mix\\xa01' beside 'mix 1', and
    'red' beside 'Red', are refused."""
    rows = [["mix\u00a01", "red", 1.0, "mg/L"], ["mix\u00a01", "blue", 2.0, "mg/L"]]
    header = ["sample", "component", "concentration", "unit"]
    path = write_text(tmp_path / "ref.csv", table_text(header, rows))
    assert list(read_reference(path)["sample"]) == ["mix 1", "mix 1"]
    rows[1][0] = "mix 1"
    path.write_text(table_text(header, rows))
    with pytest.raises(InputError, match=r"ref.csv, samples: names 'mix\\xa01' \(line 2\) and "
                                         r"'mix 1' \(line 3\) differ only in case or spacing"):
        read_reference(path)
    rows[1][0] = "mix\u00a01 "  # a trailing space: the reader keeps it to compare
    path.write_text(table_text(header, rows))
    with pytest.raises(InputError, match=r"ref.csv, samples: names 'mix\\xa01' \(line 2\) and "
                                         r"'mix\\xa01 ' \(line 3\) differ only in case"):
        read_reference(path)
    rows[1][0] = "mix\u00a01"
    rows[1][1] = "Red"
    path.write_text(table_text(header, rows))
    with pytest.raises(InputError, match=r"ref.csv, components: names 'red' \(line 2\) and "
                                         r"'Red' \(line 3\)"):
        read_reference(path)


def test_check_wavelengths_components_as_people_read_them():
    """--components 'red\\xa0' finds component 'red'."""
    check = check_wavelengths(make_library(), components=["red\u00a0"])
    assert list(check["component"].values) == ["red"]


@pytest.mark.parametrize("command", ["unmix", "import", "plate"])
def test_near_duplicate_names_refused_by_cli(tmp_path, command, cli):
    """Through the command line: exit 2, one line naming both spellings, nothing written,
    inputs unchanged."""
    cols = list(mixtures().values())
    if command == "unmix":
        lib = write_library_file(tmp_path / "lib.nc")
        data = write_wide(tmp_path / "mix.csv", {"Ext_03 ": cols[0], "ext_03": cols[1]})
        args = ["unmix", lib, data, "--out", tmp_path / "r.csv"]
    elif command == "import":
        table = write_wide(tmp_path / "eps.csv", {"Ext_03 ": band("red"),
                                                  "ext_03": band("blue")})
        args = ["library", "import", table, "--absorptivity-unit", "L/(mol*cm)", "--out",
                tmp_path / "new.nc"]
    else:
        lib = tmp_path / "lib.nc"
        assert cli("library", "build", demo_file("standards_spectra.csv"), "--standards",
                   demo_file("standards.csv"), "--out", lib).exit_code == 0
        text = Path(demo_file("plate_layout.csv")).read_text()
        text = text.replace("A2,sample,extract_01,", "A2,sample,Ext_03 ,").replace(
            "A3,sample,extract_01,", "A3,sample,ext_03,")
        layout = write_text(tmp_path / "layout.csv", text)
        args = ["plate", lib, demo_file("plate_export.csv"), "--layout", layout,
                "--out", tmp_path / "out", "--pathlength", "0.5"]
    before = digest(tmp_path)
    # a layout keeps its cells as written, so the layout's 'Ext_03 ' is shown with its space
    needle = (NEAR_FILE if command != "plate" else
              "names 'Ext_03 ' (line 3, well A2) and 'ext_03' (line 4, well A3) differ only "
              "in case or spacing")
    assert_refused(cli(*args), tmp_path, before, needle)


# --- numbers: options -----------------------------------------------------------------------

def test_number_and_wavelength_list_checks():
    """The base checks: finite numbers, positive finite wavelengths."""
    assert check_number("2.5", "x") == 2.5
    for bad, message in ((np.nan, "x: nan nm is not a finite number"),
                         (-np.inf, "x: -inf nm is not a finite number"),
                         ("abc", "x: 'abc' is not a number")):
        with pytest.raises(InputError, match=message):
            check_number(bad, "x", "nm")
    with pytest.raises(InputError, match="x: 0 nm is not a positive number"):
        check_number(0, "x", "nm", positive=True)


@pytest.mark.parametrize(("value", "bounds", "message"), [
    (-1, {"low": 0}, "x: -1 nm is not a number ≥ 0"),
    (0, {"low": 0, "low_open": True}, "x: 0 nm is not a positive number"),
    (0, {"low": 0, "low_open": True, "integer": True}, "x: 0 nm is not a positive whole number"),
    (1, {"low": 0, "high": 1, "high_open": True}, "x: 1 nm is not a number ≥ 0 and below 1 nm"),
    (2, {"high": 1}, "x: 2 nm is not a number ≤ 1 nm"),
    (12, {"low": -10, "high": 10}, "x: 12 nm is not a number from -10 to 10 nm"),
    (-3, {"low": -2, "low_open": True}, "x: -3 nm is not a number > -2 nm"),
    (2.5, {"integer": True}, "x: 2.5 nm is not a whole number"),
    (999, {"low": 1000, "integer": True, "hint": "fewer say little"},
     "x: 999 nm is not a whole number ≥ 1000 nm; fewer say little"),
    (True, {}, "x: True is not a number"),
    (np.bool_(False), {}, "x: np.False_ is not a number"),
    (None, {"positive": True}, "x: None is not a number"),
])
def test_check_number_bounds_in_one_message_shape(value, bounds, message):
    """check_number: what, which value, what is allowed; bounds in or out, whole numbers."""
    with pytest.raises(InputError, match="^" + re.escape(message[:-1]) + ""):
        check_number(value, "x", "nm", **bounds)


def test_check_number_accepts_the_ends_it_includes():
    assert check_number(0, "x", low=0) == 0.0
    assert check_number("10", "x", low=-10, high=10) == 10.0
    assert check_number(1000.0, "x", low=1000, integer=True) == 1000.0
    assert check_number(0.999, "x", low=0, high=1, high_open=True) == 0.999


def test_reader_options_refused_before_the_file_is_read(tmp_path):
    """A bad option of a reader is named before the (here missing) file is opened."""
    with pytest.raises(InputError, match=r"^pathlength_cm: 0 cm is not a positive number$"):
        ms.read_spectra(tmp_path / "missing.csv", pathlength_cm=0)
    with pytest.raises(InputError, match=r"^chunk_spectra: 0 is not a whole number ≥ 1$"):
        ms.read_cube(tmp_path / "missing.zarr", chunk_spectra=0)
    assert list(check_wavelength_list([450, 620])) == [450.0, 620.0]
    for bad in ([450, np.nan, 620], [np.inf], [-3.0]):
        with pytest.raises(InputError, match=r"wavelengths: \S+ nm is not a positive finite"):
            check_wavelength_list(bad)


def test_nan_wavelength_refused_by_the_api():
    """wavelengths=[450, nan, 620] once fitted 400 nm in place of NaN; now every public
    function that takes wavelengths refuses it."""
    lib = make_library()
    spectra = ms.make_spectra(np.vstack(list(mixtures().values())), WL)
    message = r"wavelengths: nan nm is not a positive finite wavelength"
    with pytest.raises(InputError, match=message):
        ms.unmix(spectra, lib, wavelengths=[450.0, np.nan, 620.0])
    with pytest.raises(InputError, match=message):
        check_wavelengths(lib, wavelengths=[450.0, np.nan, 620.0])
    with pytest.raises(InputError, match=message):
        choose_wavelengths(lib, 3, against=[450.0, np.nan, 620.0])
    with pytest.raises(InputError, match=r"max_shift_nm: nan nm is not a finite number"):
        ms.unmix(spectra, lib, max_shift_nm=np.nan)


def test_instrument_options_refused_by_the_api():
    """bandwidth (recorded in the log) and holmium band positions must be finite."""
    flat = ms.make_spectra(np.full((1, WL.size), 0.5), WL)
    with pytest.raises(InputError, match=r"^bandwidth_nm: nan nm is not a finite number$"):
        check_absorbance_scale(flat, concentration_mg_l=60.0, bandwidth_nm=np.nan)
    with pytest.raises(InputError, match=r"^bandwidth_nm: -1 nm is not a positive number$"):
        check_stray_light(flat, bandwidth_nm=-1.0)
    with pytest.raises(InputError, match=r"^bandwidth_nm: 0 nm is not a positive number$"):
        check_wavelength_scale(flat, bandwidth_nm=0.0)
    with pytest.raises(InputError, match=r"^reference_u_nm: -0\.1 nm is not a number ≥ 0$"):
        check_wavelength_scale(flat, reference_u_nm=-0.1)
    with pytest.raises(InputError, match=r"^bands_nm: inf nm is not a positive finite"):
        check_wavelength_scale(flat, bands_nm=[450.0, np.inf])


@pytest.mark.parametrize(("args", "needle"), [
    (["unmix", "{lib}", "{spectra}", "--wavelengths", "450,nan,620", "--out", "{out}"],
     "--wavelengths: nan in '450,nan,620' is not a finite number"),
    (["unmix", "{lib}", "{spectra}", "--window", "400-nan", "--out", "{out}"],
     "--window: nan in '400-nan' is not a finite number"),
    (["unmix", "{lib}", "{spectra}", "--range", "0.3-inf", "--out", "{out}"],
     "--range: inf in '0.3-inf' is not a finite number"),
    (["unmix", "{lib}", "{spectra}", "--noise", "nan", "--out", "{out}"],
     "--noise: nan in 'nan' is not a finite number"),
    (["unmix", "{lib}", "{spectra}", "--pathlength", "inf", "--out", "{out}"],
     "--pathlength: inf cm is not a finite number"),
    (["unmix", "{lib}", "{spectra}", "--max-shift", "nan", "--out", "{out}"],
     "--max-shift: nan nm is not a finite number"),
    (["library", "import", "{table}", "--absorptivity-unit", "L/(mol*cm)",
      "--molar-mass", "red=nan",
      "--out", "{out}"], "--molar-mass: nan in 'red=nan' is not a finite number"),
    (["wavelengths", "check", "{lib}", "--wavelengths", "450,nan,620"],
     "--wavelengths: nan in '450,nan,620' is not a finite number"),
    (["wavelengths", "choose", "{lib}", "--count", "3", "--against", "450,inf,620"],
     "--against: inf in '450,inf,620' is not a finite number"),
    (["instrument", "wavelength", "{spectra}", "--bands", "241.15,nan"],
     "--bands: nan in '241.15,nan' is not a finite number"),
    (["instrument", "stray-light", "{spectra}", "--bandwidth", "nan"],
     "--bandwidth: nan nm is not a finite number"),
])
def test_nan_and_infinite_options_refused_by_cli(cuvette, args, needle, cli):
    """One line naming the option and value, exit 2, nothing written, inputs unchanged."""
    names = {k: str(v) for k, v in cuvette.items()}
    names["out"] = str(cuvette["dir"] / "out.csv")
    before = digest(cuvette["dir"])
    assert_refused(cli(*[a.format(**names) for a in args]), cuvette["dir"], before, needle)


# --- numbers: singular wavelength choices ---------------------------------------------------

def _zero_tail_library(cut_nm: float) -> xr.Dataset:
    """Three bands set to exactly 0 farther than ``cut_nm`` from their centres."""
    def cut(centre: float, width: float) -> np.ndarray:
        values = 1e4 * np.exp(-0.5 * ((WL - centre) / width) ** 2)
        values[np.abs(WL - centre) > cut_nm] = 0.0
        return values
    frame = pd.DataFrame({"a": cut(450, 30), "b": cut(620, 35), "c": cut(530, 30)}, index=WL)
    return ms.import_absorptivities(frame, "L/(mol*cm)")


def test_variances_from_singular_values_not_an_inverse():
    """A numerically singular design (two columns equal to rounding) has infinite
    variances; numpy's inverse of its Gram matrix returns huge numbers of either sign."""
    rng = np.random.default_rng(3)
    col = rng.random(8)
    design = np.column_stack([col, col * (1 + 1e-15), rng.random(8)])
    assert np.all(np.isinf(_variances(design, 3)))
    good = rng.random((8, 3))
    assert np.allclose(_variances(good, 3), np.diag(np.linalg.inv(good.T @ good)))


@pytest.mark.parametrize("cut_nm", [30.0, 50.0, 80.0])
def test_choice_on_a_library_with_zero_tails_is_well_conditioned(cut_nm):
    """A library whose tails are exact zeros: the chosen set separates the components
    (finite, positive criterion; scaled condition number finite and below the limit unmix
    accepts); a contiguous run that cannot is refused, not returned with κ = inf."""
    lib = _zero_tail_library(cut_nm)
    choice = choose_wavelengths(lib, 3)
    assert 0 < choice.criterion < np.inf
    assert choice.chosen.attrs["condition_number"] < MAX_CONDITION_NUMBER
    assert sorted(choice.wavelengths_nm) == [450.0, 530.0, 620.0]
    if cut_nm <= 50:
        with pytest.raises(InputError, match=r"count: no contiguous run of 3 candidate "
                                             "wavelengths separates the components"):
            choose_wavelengths(lib, 3, contiguous=True)


def test_cli_choose_on_zero_tails(tmp_path, cli):
    """wavelengths choose --json on the zero-tailed library: a finite condition number."""
    import json

    path = tmp_path / "tails.nc"
    ms.write_library(_zero_tail_library(80.0), path)
    result = cli("wavelengths", "choose", path, "--count", "3", "--json")
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["chosen"]["condition_number"] is not None


# --- numbers: all-zero spectra --------------------------------------------------------------

@pytest.mark.parametrize("zero", [0.0, -0.0])
@pytest.mark.parametrize("method", ["nnls", "ols"])
def test_all_zero_spectrum_is_flagged_no_signal(zero, method):
    """An all-zero (or -0.0) spectrum gives a result flagged no_signal (not below_range),
    with no dilution suggested; the other sample is untouched."""
    values = np.vstack([mixtures()["s1"], np.full(WL.size, zero)])
    result = ms.unmix(ms.make_spectra(values, WL, ["s1", "zero"]), make_library(),
                      method=method)
    flags = list(result["flags"].values)
    assert "no_signal" not in flags[0]
    assert flags[1].split(";")[0] == "no_signal" and "below_range" not in flags[1]
    assert result["status"].values[1] & NO_SIGNAL
    assert np.isnan(result["suggested_dilution"].values[1])
    assert np.all(result["concentration"].values[1] == 0)


def test_every_status_code_is_explained():
    """no_signal (and every other status code) is explained on the plate page and in
    docs/flags.md."""
    doc = (Path(__file__).parents[1] / "docs" / "flags.md").read_text(encoding="utf-8")
    for code in STATUS_CODES.values():
        assert code in FLAG_MEANINGS, code
        assert f"| `{code}` |" in doc, code


@pytest.mark.parametrize("zero", ["0", "-0.0"])
def test_all_zero_spectrum_through_cli(cuvette, zero, cli):
    """unmix --out --report with an all-zero column: exit 0 (it crashed after writing the
    CSV), the CSV and page written, the sample flagged no_signal."""
    folder = cuvette["dir"]
    text = cuvette["spectra"].read_text().splitlines()
    spectra = write_text(folder / "zero.csv", "\n".join(
        [text[0] + ",empty"] + [line + "," + zero for line in text[1:]]) + "\n")
    out, page = folder / "r.csv", folder / "r.html"
    result = cli("unmix", cuvette["lib"], spectra, "--out", out, "--report", page)
    assert result.exit_code == 0, (result.output, result.exception)
    table = pd.read_csv(out, comment="#")
    assert {f.split(";")[0] for f in table.loc[table["sample"] == "empty", "sample_flags"]} == \
        {"no_signal"}
    assert "every reading is exactly zero" in result.stdout
    assert page.stat().st_size > 0


# --- names with $ and a reading of 1e308 in figures -----------------------------------------

@pytest.mark.parametrize("name", ["$\\frac$", "a$_$", "$x^$", "cost $5", "\\$"])
def test_literal_text_reads_as_written(name):
    """What matplotlib draws from literal(name) is the name itself, no mathtext."""
    from matplotlib.figure import Figure

    text = Figure().text(0, 0, literal(name))
    assert text._preprocess_math(text.get_text()) == (name, False)


def test_drawable_hides_what_axes_cannot_hold():
    """Values beyond ±PLOT_LIMIT and infinities become NaN and are counted."""
    values, hidden = drawable([0.5, 1e308, -np.inf, -2.0, np.nan])
    assert hidden == 2
    assert np.array_equal(values, [0.5, np.nan, np.nan, -2.0, np.nan], equal_nan=True)
    assert PLOT_LIMIT < 1e300


def test_unmix_report_with_dollar_names_and_huge_reading(tmp_path, cli):
    """Component and sample names with $ (matplotlib mathtext) and one reading of 1e308:
    unmix --report writes the page (both crashed with a traceback)."""
    frame = absorptivity_frame()
    table = write_wide(tmp_path / "eps.csv", {"$\\frac$": frame["red"].to_numpy(),
                                              "a$_$": frame["blue"].to_numpy()})
    lib = tmp_path / "lib.nc"
    assert cli("library", "import", table, "--absorptivity-unit", "L/(mol*cm)", "--out",
               lib).exit_code == 0
    cols = list(mixtures().values())
    huge = cols[1].copy()
    huge[3] = 1e308
    spectra = write_wide(tmp_path / "mix.csv", {"$x^$": cols[0], "cost $5": huge})
    page = tmp_path / "page.html"
    result = cli("unmix", lib, spectra, "--out", tmp_path / "r.csv", "--report", page)
    assert result.exit_code == 0, (result.output, result.exception)
    html = page.read_text(encoding="utf-8")
    assert "$x^$" in html and "$\\frac$" in html
    assert len(re.findall("data:image/png;base64", html)) == 4


@pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")
@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")
def test_sample_figure_with_a_huge_reading_draws():
    """The sample figure of a spectrum with a 1e308 reading renders (axis limits once
    overflowed) and says what it left out."""
    import io

    values = np.vstack([mixtures()["s1"]])
    values[0, 3] = 1e308
    result = ms.unmix(ms.make_spectra(values, WL, ["$big$"]), make_library())
    fig = sample_figure(result, "$big$")
    fig.savefig(io.BytesIO(), format="png")
    assert "not drawn" in fig.axes[0].get_title()


def test_plate_figures_with_dollar_names_draw():
    """Heat map and residual figure of the plate page with $ in component and well labels
    render as written."""
    import io

    wells = pd.DataFrame({"well": ["A1", "A2"], "component": ["$\\frac$"] * 2,
                          "concentration": [1.0, 1e308], "role": ["sample", "blank"],
                          "flags": ["", ""]})
    fig = heat_map(wells, "$\\frac$", 96, "mg/L")
    fig.savefig(io.BytesIO(), format="png")
    result = xr.Dataset({"residual": (("well", "wavelength"), np.ones((1, WL.size)))},
                        coords={"well": ["A1"], "wavelength": WL})
    fig = residual_figure(result, ["A1"], {"A1": "A1 (sample $x_$)"})
    fig.savefig(io.BytesIO(), format="png")


def test_plate_with_dollar_component_names(tmp_path, cli):
    """plate with a library whose component is named '$\\frac$': the report is written."""
    sheet = Path(demo_file("standards.csv")).read_text().replace(",amber,", ",$\\frac$,")
    std = write_text(tmp_path / "std.csv", sheet)
    lib = tmp_path / "lib.nc"
    assert cli("library", "build", demo_file("standards_spectra.csv"), "--standards", std,
               "--out", lib).exit_code == 0
    out = tmp_path / "out"
    result = cli("plate", lib, demo_file("plate_export.csv"), "--layout",
                 demo_file("plate_layout.csv"), "--out", out, "--pathlength", "0.5")
    assert result.exit_code == 0, (result.output, result.exception)
    assert (out / "plate_export" / "report.html").stat().st_size > 0


# --- names: two spellings of one sample in a plate layout -----------------------------------

def _plate_run(folder: Path, samples: dict[str, str] | None = None,
               components: dict[str, str] | None = None) -> list[object]:
    """The scenario's export, a library and its layout with some wells' sample (or
    component) names as written here (well -> name); the ``mixsolve plate`` arguments."""
    layout = scenario_layout()
    for row in layout:
        row["sample"] = (samples or {}).get(str(row["well"]), row.get("sample", ""))
        row["component"] = (components or {}).get(str(row["well"]), row.get("component", ""))
    return ["plate", write_library_file(folder / "lib.nc"), write_scenario(folder), "--layout",
            write_layout(folder / "layout.csv", layout), "--out", folder / "out",
            "--pathlength", "0.5"]


#: Sample S1 fills wells B1-B6 of the scenario (layout lines 6-11).
S1_WELLS = [f"B{c}" for c in range(1, 7)]


@pytest.mark.parametrize(("name", "variant", "shown", "how"), [
    ("Ext03", "Ext03 ", "'Ext03' (line 6) and 'Ext03 ' (line 11)", "case or spacing"),
    ("Ext03", " Ext03", "'Ext03' (line 6) and ' Ext03' (line 11)", "case or spacing"),
    ("Ext03", "Ext03\u00a0", r"'Ext03' (line 6) and 'Ext03\xa0' (line 11)", "case or spacing"),
    ("Ext 03", "Ext\u00a003", r"'Ext 03' (line 6) and 'Ext\xa003' (line 11)",
     "case or spacing"),
    ("Ext03", "Ext\u200b03", r"'Ext03' (line 6) and 'Ext\u200b03' (line 11)",
     "case or spacing"),
    ("Ext 03", "Ext\t03", r"'Ext 03' (line 6) and 'Ext\t03' (line 11)", "case or spacing"),
    ("Ext\u00e903", "Exte\u030103", r"'Ext\xe903' (line 6) and 'Exte\u030103' (line 11)",
     "Unicode form"),
    ("Ext03", "ext03", "'Ext03' (line 6) and 'ext03' (line 11)", "case or spacing"),
    ("Ext_03", "ext-03", "'Ext_03' (line 6) and 'ext-03' (line 11)",
     "case, spacing or - and _"),
    ("Ext 03", "Ext  03", r"'Ext 03' (line 6) and 'Ext\x20\x2003' (line 11)",
     "case, spacing or - and _"),
])
def test_plate_layout_refuses_two_spellings_of_one_sample(tmp_path, name, variant, shown,
                                                          how, cli):
    """A layout whose sample fills five wells as ``name`` and one as ``variant`` (a
    trailing or leading space, a no-break, zero-width or tab space, another Unicode form,
    another case) is refused, not pooled: exit 2, one line naming the file, both
    spellings as they differ and their lines, and the fix; inputs intact, nothing
    written."""
    shown = shown.replace("(line 6)", "(line 6, wells B1, B2, B3, B4, B5)").replace(
        "(line 11)", "(line 11, well B6)")
    spellings = dict.fromkeys(S1_WELLS, name) | {"B6": variant}
    args = _plate_run(tmp_path, samples=spellings)
    before = digest(tmp_path)
    line = assert_cli_error(cli(*args), must_not_exist=[tmp_path / "out"])
    assert line == (f"error: layout.csv, samples: names {shown} differ only in {how}; "
                    f"{ONE_SPELLING}")
    assert digest(tmp_path) == before


def test_plate_layout_refuses_two_spellings_of_one_component(tmp_path, cli):
    """Standard wells H1-H3 hold 'red'; 'red ' in H3 is refused naming both (lines 42,
    44)."""
    args = _plate_run(tmp_path, components={"H3": "red "})
    before = digest(tmp_path)
    assert_refused(cli(*args), tmp_path, before,
                   "layout.csv, components: names 'red' (line 42) and 'red ' (line 44) "
                   "differ only in case or spacing; " + ONE_SPELLING)
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(("written", "normal"), [
    ("Ext\u00a003", "Ext 03"), ("Ext03 ", "Ext03"), ("Cafe\u0301", "Caf\u00e9"),
    ("Ext\t03", "Ext 03"),
])
def test_plate_layout_one_spelling_in_many_wells_is_one_sample(tmp_path, written, normal,
                                                                cli):
    """The same spelling in all six wells of a sample (replicates and dilutions) is one
    sample, named in normal form, with all six wells."""
    args = _plate_run(tmp_path, samples=dict.fromkeys(S1_WELLS, written))
    cli.ok(*args)
    samples = pd.read_csv(tmp_path / "out" / "plate1" / "samples.csv", keep_default_na=False)
    assert set(samples["sample"]) == {normal, *SAMPLES} - {"S1"}
    mine = samples[samples["sample"] == normal]
    assert list(mine["n_wells"]) == [6, 6]
    assert len(samples) == 2 * len(SAMPLES)


@pytest.mark.parametrize("layout", ["well columns", "long"])
def test_plate_export_well_names_in_normal_form(tmp_path, layout):
    """Well names in an export are read in normal form: a zero-width space before A1 and
    a no-break space after B2 still name A1 and B2."""
    wells, values = scenario_values()
    rows = export_rows(layout, wells, WL, values, size=96)
    changed = {"A1": "\u200bA1", "B2": "B2\u00a0"}
    rows = [[changed.get(c, c) if isinstance(c, str) else c for c in row] for row in rows]
    assert any("\u200bA1" in row for row in rows)
    plate = ms.read_plate(write_export(tmp_path / "plate.csv", rows))
    assert list(plate["well"].values) == plate_wells(96)
    assert parse_well("\u200bA01\u00a0") == (0, 1)
    assert parse_well("A\t1") is None


def test_one_component_given_twice_by_name_is_refused() -> None:
    """Molar masses and scale uncertainties by component: two spellings of one name
    ('red', 'Red ') are refused like every other pair of spellings (mixsolve.names)."""
    table = pd.DataFrame({"red": [1.0, 2.0], "blue": [2.0, 1.0]}, index=[400.0, 500.0])
    with pytest.raises(InputError, match=r"^molar mass: 'red' is given twice; give each "
                                         r"component once$"):
        ms.import_absorptivities(table, "L/(mol*cm)",
                                 molar_mass_g_per_mol={"red": 300.0, "red ": 310.0})
    with pytest.raises(InputError, match=r"^u_scale_rel: 'red' is given twice"):
        ms.import_absorptivities(table, "L/(mol*cm)", u_scale_rel={"red": 0.01, "red ": 0.02})

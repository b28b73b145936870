"""Spectra files shaped as instruments and archives write them (issue 16, items 1 and 2).

Each test writes one file (or folder) of one shape and checks that it reads to the same
numbers as the plain wide table, or is refused with a line that says what was seen and the
fix. The data are invented (the two-band mixtures of ``helpers_io``, synthetic). The
expected values are the numbers the test itself wrote into the file: the check is that
reading gives back what was written, whatever the shape around it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from helpers_io import WL, mixture_columns, write_text

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.spectra_io import read_notes, spectra_paths
from mixsolve.io.tables import axis_of


def _wide_text(header: str, columns: dict[str, np.ndarray], sep: str = ",") -> str:
    lines = [sep.join([header, *columns])]
    lines += [sep.join([f"{w:g}", *(f"{columns[n][i]:.6f}" for n in columns)])
              for i, w in enumerate(WL)]
    return "\n".join(lines) + "\n"


@pytest.fixture
def columns():
    return mixture_columns()


@pytest.fixture
def plain(tmp_path, columns):
    return ms.read_spectra(write_text(tmp_path / "plain.csv", _wide_text("wavelength_nm",
                                                                          columns)))


def _same(da, plain):
    assert list(da["sample"].values) == list(plain["sample"].values)
    np.testing.assert_array_equal(da["wavelength"].values, plain["wavelength"].values)
    np.testing.assert_array_equal(da.values, plain.values)


@pytest.mark.parametrize("header", ["nm", "Wavelength nm", "Wavelength (nm)", "Wavelength [nm]",
                                    "λ (nm)", "lambda", "LAMBDA", "wavelength/nm", "WL",
                                    "Wavelength"])
def test_wavelength_header_spellings(tmp_path, columns, plain, header):
    _same(ms.read_spectra(write_text(tmp_path / "s.csv", _wide_text(header, columns))), plain)


@pytest.mark.parametrize("cell, axis", [("Wavenumber (cm-1)", "wavenumber"),
                                        ("cm-1", "wavenumber"), ("1/cm", "wavenumber"),
                                        ("Wavelength (µm)", "micrometre"), ("um", "micrometre"),
                                        ("Wavelength (cm-1)", "wavenumber"),
                                        ("absorbance", None), ("time (s)", None), ("", None)])
def test_axis_of_other_units(cell, axis):
    assert axis_of(cell) == axis


def test_wavenumber_header_read_as_wavelength(tmp_path, columns, plain):
    """A cm-1 header is read, not refused: the axis values become λ = 10⁷/ν̃ nm (the
    definition of wavenumber, ν̃ = 1/λ; IUPAC Green Book, 3rd ed., 2007, section 2.7, from
    memory) and the numbers are the ones written (tests/test_wavenumber.py has the rest)."""
    da = ms.read_spectra(write_text(tmp_path / "ir.csv", _wide_text("Wavenumber (cm-1)",
                                                                    columns)))
    assert da.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(da["wavelength"].values, np.sort(1e7 / WL), rtol=1e-15)
    np.testing.assert_array_equal(da.values, plain.values[:, ::-1])


def test_preamble_is_skipped_and_said(tmp_path, columns, plain):
    text = ("Instrument: benchtop UV-Vis\nDate: 2026-03-01, 10:04\nOperator: A. N. Other\n"
            + _wide_text("Wavelength (nm)", columns))
    da = ms.read_spectra(write_text(tmp_path / "pre.csv", text))
    _same(da, plain)
    assert read_notes(da) == ["pre.csv: skipped 3 line(s) before the header (lines 1-3, from "
                              "'Instrument: benchtop UV-Vis')"]


def test_preamble_with_semicolons_and_decimal_comma(tmp_path, columns, plain):
    body = _wide_text("nm", columns, sep=";").replace(".", ",")
    text = "Gerät;Photometer 2\nDatum;01.03.2026\n\n" + body
    _same(ms.read_spectra(write_text(tmp_path / "pre.csv", text)), plain)


def test_comment_lines_are_skipped_and_said(tmp_path, columns, plain):
    lines = _wide_text("wavelength_nm", columns).splitlines()
    lines.insert(0, "# exported 2026-03-01")
    lines.insert(5, "  # lamp change here")
    da = ms.read_spectra(write_text(tmp_path / "c.csv", "\n".join(lines) + "\n"))
    _same(da, plain)
    assert read_notes(da) == ["c.csv: skipped 2 comment line(s) starting with '#' (lines 1, 6)"]


def test_units_row_is_skipped_and_said(tmp_path, columns, plain):
    lines = _wide_text("Wavelength", columns).splitlines()
    lines.insert(1, "nm,AU,AU")
    da = ms.read_spectra(write_text(tmp_path / "u.csv", "\n".join(lines) + "\n"))
    _same(da, plain)
    assert read_notes(da) == ["u.csv: skipped the units row on line 2 (read as absorbance)"]


def test_units_row_percent_t_converts(tmp_path, columns, plain):
    """%T in the units row: A = 2 − log10 %T (IUPAC Gold Book, "absorbance", seen)."""
    percent = {n: 100 * 10 ** -v for n, v in columns.items()}
    lines = _wide_text("nm", percent).splitlines()
    lines.insert(1, "(nm),(%T),(%T)")
    text = "\n".join(lines) + "\n"
    da = ms.read_spectra(write_text(tmp_path / "t.csv", text))
    assert da.attrs["quantity_read"] == "percent_transmittance"
    np.testing.assert_allclose(da.values, plain.values, atol=1e-5)
    with pytest.raises(InputError, match=r"^quantity: 'absorbance', but the units row of t\.csv "
                                         r"says 'percent_transmittance'; leave quantity out, "
                                         r"or correct the row$"):
        ms.read_spectra(tmp_path / "t.csv", quantity="absorbance")


def test_units_row_unknown_unit_refused(tmp_path, columns):
    lines = _wide_text("nm", columns).splitlines()
    lines.insert(1, "nm,counts,counts")
    with pytest.raises(InputError, match=r"^u\.csv, line 2, column 2 \(units row\): 'counts' is "
                                         r"not a unit mixsolve reads \(AU, A, mAU, T, %T\); "
                                         r"correct it, or delete the units row"):
        ms.read_spectra(write_text(tmp_path / "u.csv", "\n".join(lines) + "\n"))


def test_units_row_cm1_decides_a_bare_header_and_contradicts_a_unit(tmp_path, columns, plain):
    """Under a header naming no unit the units row says the axis; under ``nm`` a ``cm-1``
    row is a contradiction, refused naming both."""
    lines = _wide_text("x", columns).splitlines()
    lines[0] = "Wavelength,mix_1,mix_2"
    lines.insert(1, "cm-1,A,A")
    da = ms.read_spectra(write_text(tmp_path / "u.csv", "\n".join(lines) + "\n"))
    assert da.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(da["wavelength"].values, np.sort(1e7 / WL), rtol=1e-15)
    np.testing.assert_array_equal(da.values, plain.values[:, ::-1])
    lines[0] = "Wavelength (nm),mix_1,mix_2"
    with pytest.raises(InputError, match=r"^v\.csv, line 2 \(units row\): 'cm-1' says "
                                         r"wavenumber in cm⁻¹, but the header 'Wavelength "
                                         r"\(nm\)' says wavelength in nm; correct one of them$"):
        ms.read_spectra(write_text(tmp_path / "v.csv", "\n".join(lines) + "\n"))


def test_trailing_empty_columns(tmp_path, columns, plain):
    text = "\n".join(line + ",," for line in _wide_text("nm", columns).splitlines()) + "\n"
    _same(ms.read_spectra(write_text(tmp_path / "t.csv", text)), plain)


def test_all_at_once_xlsx(tmp_path, columns, plain):
    """Preamble, a comment, a units row and trailing empty cells in a workbook."""
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["Instrument", "benchtop"])
    sheet.append(["# a comment"])
    sheet.append(["Wavelength (nm)", *columns, None])
    sheet.append(["nm", "AU", "AU"])
    for i, w in enumerate(WL):
        sheet.append([float(w), *(float(f"{columns[n][i]:.6f}") for n in columns)])
    book.save(tmp_path / "all.xlsx")
    da = ms.read_spectra(tmp_path / "all.xlsx")
    _same(da, plain)
    assert read_notes(da) == [
        "all.xlsx: skipped 1 line(s) before the header (line 1, from 'Instrument benchtop')",
        "all.xlsx: skipped 1 comment line(s) starting with '#' (line 2)",
        "all.xlsx: skipped the units row on line 4 (read as absorbance)"]


def test_long_table_after_preamble(tmp_path, columns, plain):
    rows = ["run 12", "sample,Wavelength (nm),absorbance"]
    rows += [f"{n},{w:g},{columns[n][i]:.6f}" for n in columns for i, w in enumerate(WL)]
    _same(ms.read_spectra(write_text(tmp_path / "long.csv", "\n".join(rows) + "\n")), plain)


def test_second_header_refused(tmp_path, columns):
    text = _wide_text("nm", columns) + _wide_text("nm", columns)
    with pytest.raises(FileFormatError, match=r"^two\.csv, line 33: a second header \('nm', "
                                              r"'mix_1', 'mix_2'\); one table per file: split "
                                              r"the file there, or delete the line$"):
        ms.read_spectra(write_text(tmp_path / "two.csv", text))


def test_no_header_refused_naming_what_was_seen(tmp_path):
    with pytest.raises(FileFormatError, match=r"^h\.csv, line 1: cannot tell the layout from the "
                                              r"header '400', '0.1'; expected wide"):
        ms.read_spectra(write_text(tmp_path / "h.csv", "400,0.1\n410,0.2\n"))


# --- one spectrum per file; several files -------------------------------------------------


def _one_file(folder, stem, header, values, wl=WL):
    lines = [f"wavelength_nm,{header}"] + [f"{w:g},{v:.6f}" for w, v in zip(wl, values,
                                                                              strict=True)]
    return write_text(folder / f"{stem}.csv", "\n".join(lines) + "\n")


def test_one_spectrum_named_from_file_or_header(tmp_path, columns):
    a = ms.read_spectra(_one_file(tmp_path, "run_7", "Absorbance (AU)", columns["mix_1"]))
    assert list(a["sample"].values) == ["run_7"]
    assert read_notes(a) == ["run_7.csv: one spectrum, named 'run_7' from the file name (its "
                             "column header 'Absorbance (AU)' is a generic word)"]
    b = _one_file(tmp_path, "run_8", "blank 2", columns["mix_1"])
    alone = ms.read_spectra(b)
    assert list(alone["sample"].values) == ["blank 2"] and read_notes(alone) == []
    both = ms.read_spectra([tmp_path / "run_7.csv", b])
    assert list(both["sample"].values) == ["run_7", "blank 2"]
    assert read_notes(both)[1] == ("run_8.csv: one spectrum, named 'blank 2' from its column "
                                   "header")


def test_folder_of_one_spectrum_files_equals_wide_table(tmp_path, columns, plain):
    folder = tmp_path / "cuvette"
    folder.mkdir()
    for name, values in columns.items():
        _one_file(folder, name, "A", values)
    write_text(folder / "notes.docx", "not a table")
    da = ms.read_spectra(folder)
    _same(da, plain)
    assert da.attrs["layout"] == "files"
    assert json.loads(da.attrs["files"]) == ["mix_1.csv", "mix_2.csv"]
    assert read_notes(da)[0] == (f"{folder}: skipped 1 file(s) that are not spectra tables "
                                 "(notes.docx)")


def test_list_and_glob_of_files(tmp_path, columns, plain):
    paths = [_one_file(tmp_path, n, "absorbance", v) for n, v in columns.items()]
    _same(ms.read_spectra(paths), plain)
    _same(ms.read_spectra(str(tmp_path / "mix_*.csv")), plain)


def test_natural_order(tmp_path, columns):
    for stem in ("s10", "s2", "s1"):
        _one_file(tmp_path, stem, "abs", columns["mix_1"])
    assert [p.name for p in spectra_paths(tmp_path)] == ["s1.csv", "s2.csv", "s10.csv"]


def test_wide_and_one_spectrum_files_together(tmp_path, columns):
    wide = write_text(tmp_path / "wide.csv", _wide_text("nm", columns))
    one = _one_file(tmp_path, "extra", "abs", columns["mix_1"] * 0.5)
    da = ms.read_spectra([wide, one])
    assert list(da["sample"].values) == ["mix_1", "mix_2", "extra"]


def test_same_sample_in_two_files_refused(tmp_path, columns):
    wide = write_text(tmp_path / "wide.csv", _wide_text("nm", columns))
    one = _one_file(tmp_path, "again", "MIX_1", columns["mix_1"])
    with pytest.raises(InputError, match=r"^sample 'MIX_1' is in both wide\.csv and again\.csv; "
                                         r"sample names must be unique across the files: "
                                         r"rename the file or its column$"):
        ms.read_spectra([wide, one])


def test_grids_must_agree(tmp_path, columns):
    a = _one_file(tmp_path, "a1", "abs", columns["mix_1"])
    shifted = WL.copy()
    shifted[3] += 1
    b = _one_file(tmp_path, "b1", "abs", columns["mix_1"], wl=shifted)
    with pytest.raises(InputError, match=r"^b1\.csv: its wavelength grid \(31 points 400-700 nm\) "
                                         r"differs from that of a1\.csv \(31 points 400-700 nm\), "
                                         r"first at point 4: 430 nm against 431 nm; give files "
                                         r"measured on one grid"):
        ms.read_spectra([a, b])
    c = _one_file(tmp_path, "c1", "abs", columns["mix_1"][:-1], wl=WL[:-1])
    with pytest.raises(InputError, match=r"^c1\.csv: its wavelength grid \(30 points 400-690 nm\) "
                                         r"differs from that of a1\.csv \(31 points 400-700 nm\), "
                                         r"first at c1\.csv stops after 30 points"):
        ms.read_spectra([a, c])


def test_file_named_twice_and_empty_glob(tmp_path, columns):
    a = _one_file(tmp_path, "a1", "abs", columns["mix_1"])
    with pytest.raises(InputError, match=r"a1\.csv: named twice among the spectra"):
        ms.read_spectra([a, tmp_path / "." / "a1.csv"])
    with pytest.raises(InputError, match=r"nothing_\*\.csv: no file matches$"):
        ms.read_spectra(str(tmp_path / "nothing_*.csv"))

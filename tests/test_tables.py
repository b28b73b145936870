"""Reading delimited text and XLSX tables (mixsolve.io.tables), seen through read_spectra.

Separator and decimal detection, encodings, line endings, and the file-level errors:
every message names the file (and the line where there is one).
"""

from __future__ import annotations

import os
import re

import numpy as np
import pytest
from helpers_io import (
    NUMBER_FIX,
    WL,
    mixture_columns,
    table_text,
    write_text,
    write_wide,
    write_xlsx,
)

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.tables import parse_number, read_table


@pytest.fixture
def expected():
    """Noise-free absorbance of the invented mixtures, one row per sample."""
    return np.vstack(list(mixture_columns().values()))


# --- separators, decimal marks, encodings, line endings ----------------------------------


@pytest.mark.parametrize(
    ("sep", "decimal", "name", "sep_name"),
    [
        (",", ".", "comma.csv", "comma"),
        (";", ",", "semicolon_decimal_comma.csv", "semicolon"),
        (";", ".", "semicolon_point.csv", "semicolon"),
        ("\t", ",", "tab_decimal_comma.tsv", "tab"),
        ("\t", ".", "tab_point.tsv", "tab"),
    ],
)
def test_separator_and_decimal_are_detected_and_recorded(tmp_path, expected, sep, decimal,
                                                         name, sep_name):
    path = write_wide(tmp_path / name, sep=sep, decimal=decimal)
    da = ms.read_spectra(path)
    assert da.attrs["separator"] == sep_name
    assert da.attrs["decimal"] == decimal
    np.testing.assert_allclose(da["wavelength"].values, WL)
    np.testing.assert_allclose(da.values, expected, rtol=1e-12)


def test_utf8_bom_is_ignored(tmp_path, expected):
    path = write_wide(tmp_path / "bom.csv", encoding="utf-8-sig")
    assert path.read_bytes().startswith(b"\xef\xbb\xbf")
    da = ms.read_spectra(path)
    assert da.attrs["layout"] == "wide"
    np.testing.assert_allclose(da.values, expected, rtol=1e-12)


def test_utf8_bom_with_semicolons_and_decimal_commas(tmp_path, expected):
    path = write_wide(tmp_path / "excel.csv", sep=";", decimal=",", newline="\r\n",
                      encoding="utf-8-sig")
    da = ms.read_spectra(path)
    assert (da.attrs["separator"], da.attrs["decimal"]) == ("semicolon", ",")
    np.testing.assert_allclose(da.values, expected, rtol=1e-12)


@pytest.mark.parametrize("newline", ["\r\n", "\r", "\n"])
def test_any_line_ending(tmp_path, expected, newline):
    path = write_wide(tmp_path / "lines.csv", newline=newline)
    assert newline.encode() in path.read_bytes()
    da = ms.read_spectra(path)
    np.testing.assert_allclose(da.values, expected, rtol=1e-12)


def test_crlf_line_numbers_in_messages(tmp_path):
    path = write_text(tmp_path / "crlf.csv", "wavelength_nm,a\r\n400,1\r\n410,oops\r\n")
    with pytest.raises(InputError, match=r"crlf\.csv, line 3, column 2 \('a'\): 'oops'"):
        ms.read_spectra(path)


def test_utf8_sample_names(tmp_path):
    path = write_text(tmp_path / "names.csv", "wavelength_nm,µ-extract,Probe Ä\n400,0.1,0.2\n")
    da = ms.read_spectra(path)
    assert list(da["sample"].values) == ["µ-extract", "Probe Ä"]


def test_blank_lines_are_skipped_but_line_numbers_kept(tmp_path):
    path = write_text(tmp_path / "blank.csv", "\nwavelength_nm,a\n\n400,1\n   \n410,x\n")
    with pytest.raises(InputError, match=r"blank\.csv, line 6, column 2 \('a'\): 'x'"):
        ms.read_spectra(path)


def test_quoted_cells(tmp_path):
    path = write_text(tmp_path / "quoted.csv",
                      'wavelength_nm,"sample, diluted"\n400,"0.5"\n410,"0.25"\n')
    da = ms.read_spectra(path)
    assert list(da["sample"].values) == ["sample, diluted"]
    np.testing.assert_allclose(da.values, [[0.5, 0.25]])


def test_read_table_keeps_cells_and_places(tmp_path):
    path = write_text(tmp_path / "t.tsv", "wavelength_nm\ta\n\n400\t1,5\n410\t2,5\n")
    table = read_table(path)
    assert table.header == ["wavelength_nm", "a"]
    assert table.rows == [["400", "1,5"], ["410", "2,5"]]
    assert table.lines == [3, 4]
    assert table.header_line == 1
    assert (table.separator, table.decimal) == ("\t", ",")
    assert table.where(1, 1) == "t.tsv, line 4, column 2 ('a')"


def test_read_table_xlsx_by_content_not_suffix(tmp_path):
    path = write_xlsx(tmp_path / "book.xlsx", ["wavelength_nm", "a"], [[400, 0.5]])
    renamed = tmp_path / "book.dat"
    os.replace(path, renamed)
    table = read_table(renamed)
    assert table.separator is None
    assert table.rows == [[400, 0.5]]


# --- parse_number ------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("cell", "decimal", "value"),
    [("1.5", ".", 1.5), ("1,5", ",", 1.5), ("-2,5e-3", ",", -2.5e-3), (" 7 ", ".", 7.0),
     (3, ".", 3.0), (0.25, ".", 0.25)],
)
def test_parse_number(cell, decimal, value):
    assert parse_number(cell, decimal, "here") == value


@pytest.mark.parametrize("cell", ["", "  ", "NaN", "nan", "NA", "n/a", float("nan")])
def test_parse_number_missing(cell):
    assert np.isnan(parse_number(cell, ".", "here"))
    with pytest.raises(InputError, match=r"^here: value is missing$"):
        parse_number(cell, ".", "here", allow_missing=False)


@pytest.mark.parametrize("cell", ["inf", "-inf", "Infinity", "1e999", float("inf")])
def test_parse_number_refuses_infinity(cell):
    with pytest.raises(InputError, match=r"^here: .* is infinite; leave the cell empty"):
        parse_number(cell, ".", "here")


def test_parse_number_refuses_text_and_booleans():
    with pytest.raises(InputError, match=r"^here: 'abc' is not a number" + NUMBER_FIX):
        parse_number("abc", ".", "here")
    with pytest.raises(InputError, match=r"^here: True is not a number" + NUMBER_FIX):
        parse_number(True, ".", "here")
    with pytest.raises(InputError, match=r"^here: '1\.5' uses a decimal point but the file "
                                         "uses decimal commas$"):
        parse_number("1.5", ",", "here")


# --- file-level errors -------------------------------------------------------------------


def test_empty_file(tmp_path):
    path = write_text(tmp_path / "empty.csv", "")
    with pytest.raises(FileFormatError, match=r"^empty\.csv: the file is empty$"):
        ms.read_spectra(path)


@pytest.mark.parametrize("content", ["\n\n", "  \r\n \t\n", "\ufeff"])
def test_blank_only_file_is_empty(tmp_path, content):
    path = write_text(tmp_path / "blank.csv", content)
    with pytest.raises(FileFormatError, match=r"^blank\.csv: the file is empty$"):
        ms.read_spectra(path)


def test_header_only_file(tmp_path):
    path = write_text(tmp_path / "header.csv", "wavelength_nm,a,b\n\n")
    with pytest.raises(FileFormatError, match=r"^header\.csv: header only, no data rows$"):
        ms.read_spectra(path)


def test_one_column_header(tmp_path):
    path = write_text(tmp_path / "one.csv", "wavelength_nm\n400\n")
    with pytest.raises(FileFormatError,
                       match=r"^one\.csv, line 1: the header has one column only; expected "
                             "columns separated by commas, semicolons or tabs$"):
        ms.read_spectra(path)


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.csv"
    with pytest.raises(FileFormatError, match=r"nowhere\.csv: file not found$"):
        ms.read_spectra(path)


def test_folder_instead_of_file(tmp_path):
    folder = tmp_path / "spectra_dir"
    folder.mkdir()
    with pytest.raises(FileFormatError, match=r"spectra_dir: is a folder, not a table file$"):
        read_table(folder)
    # read_spectra reads a folder's spectra files; an empty one says what it looked for
    with pytest.raises(InputError, match=r"spectra_dir: the folder holds no spectra file"):
        ms.read_spectra(folder)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0,
                    reason="needs POSIX permissions and a non-root user")
def test_unreadable_file(tmp_path):
    path = write_wide(tmp_path / "locked.csv")
    path.chmod(0)
    try:
        with pytest.raises(FileFormatError, match=r"locked\.csv: cannot read the file"):
            ms.read_spectra(path)
    finally:
        path.chmod(0o600)


@pytest.mark.parametrize(
    "raw",
    [b"\x89HDF\r\n\x1a\n\x00\x00\x00\x00", b"wavelength_nm,a\n400,\x00\x01\n",
     bytes(range(256))],
)
def test_binary_data(tmp_path, raw):
    path = tmp_path / "image.csv"
    path.write_bytes(raw)
    with pytest.raises(FileFormatError,
                       match=r"^image\.csv: binary data, not a text table \(CSV, TSV\) or "
                             r"XLSX file$"):
        ms.read_spectra(path)


def test_latin1_micro_sign_names_line_and_byte(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("wavelength_nm,a\n400,0.1\n410,0.2\n# 5 µL\n".encode("latin-1"))
    with pytest.raises(FileFormatError,
                       match=r"^latin1\.csv, line 4: byte 0xb5 is not UTF-8 text; save the "
                             r"file as UTF-8"):
        ms.read_spectra(path)


def test_latin1_in_header(tmp_path):
    path = tmp_path / "latin1_header.csv"
    path.write_bytes("wavelength_nm;extract 5 µL\n400;0,1\n".encode("latin-1"))
    with pytest.raises(FileFormatError, match=r"latin1_header\.csv, line 1: byte 0xb5"):
        ms.read_spectra(path)


def test_mixed_decimal_marks(tmp_path):
    text = table_text(["wavelength_nm", "a", "b"],
                      [["400", "0,5", "0,25"], ["410", "0,5", "0,75"], ["420", "0.5", "1"]],
                      sep=";")
    path = write_text(tmp_path / "mixed.csv", text)
    with pytest.raises(FileFormatError,
                       match=r"^mixed\.csv: mixed decimal marks \(comma on line 2, point on "
                             r"line 4\); use one decimal mark throughout$"):
        ms.read_spectra(path)


def test_damaged_xlsx(tmp_path):
    path = tmp_path / "damaged.xlsx"
    path.write_bytes(b"PK\x03\x04 this is not really a zip file")
    with pytest.raises(FileFormatError, match=r"^damaged\.xlsx: not a readable XLSX workbook"):
        ms.read_spectra(path)


def test_empty_xlsx_sheet(tmp_path):
    path = write_xlsx(tmp_path / "blank.xlsx", [], [])
    with pytest.raises(FileFormatError, match=r"^blank\.xlsx: the first sheet is empty$"):
        ms.read_spectra(path)


def test_header_only_xlsx(tmp_path):
    path = write_xlsx(tmp_path / "head.xlsx", ["wavelength_nm", "a"], [])
    with pytest.raises(FileFormatError, match=r"^head\.xlsx: header only, no data rows$"):
        ms.read_spectra(path)


def test_unknown_xlsx_sheet(tmp_path):
    path = write_xlsx(tmp_path / "book.xlsx", ["wavelength_nm", "a"], [[400, 1]],
                      sheet="plate 1")
    with pytest.raises(FileFormatError,
                       match=re.escape("book.xlsx: no sheet 'plate 2'; sheets are plate 1")):
        ms.read_spectra(path, sheet="plate 2")
    assert ms.read_spectra(path, sheet="plate 1").sizes["sample"] == 1

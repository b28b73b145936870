"""Reading spectra tables (mixsolve.read_spectra) and absorptivity tables.

Wide and long layouts from CSV, TSV and XLSX; ordering, missing readings, recorded
attributes; and the messages for bad tables (file, line, column, value).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from helpers_io import (
    NUMBER_FIX,
    WL,
    absorptivity_frame,
    mixture_columns,
    table_text,
    wide_rows,
    write_absorptivity_table,
    write_long,
    write_text,
    write_wide,
    write_xlsx,
)

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.spectra_io import read_absorptivity_table


@pytest.fixture
def columns():
    """Absorbance of the invented mixtures with a little seeded noise, by sample name."""
    return mixture_columns(noise_au=1e-3)


def _as_matrix(columns):
    return np.vstack(list(columns.values()))


# --- layouts and formats -----------------------------------------------------------------


def test_wide_csv(tmp_path, columns):
    da = ms.read_spectra(write_wide(tmp_path / "wide.csv", columns))
    assert da.dims == ("sample", "wavelength")
    assert da.name == "absorbance"
    assert list(da["sample"].values) == list(columns)
    np.testing.assert_array_equal(da["wavelength"].values, WL)
    assert da["wavelength"].dtype == np.float64
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)
    assert da.attrs == {"quantity": "absorbance", "source": "wide.csv", "layout": "wide",
                        "separator": "comma", "decimal": ".", "quantity_read": "absorbance"}


@pytest.mark.parametrize("first", ["wavelength_nm", "wavelength", "Wavelength (nm)",
                                   "WAVELENGTH [nm]", " wavelength_nm "])
def test_wide_wavelength_header_spellings(tmp_path, columns, first):
    da = ms.read_spectra(write_wide(tmp_path / "w.csv", columns, first=first))
    assert da.attrs["layout"] == "wide"
    assert da.sizes == {"sample": 2, "wavelength": WL.size}


def test_long_csv(tmp_path, columns):
    da = ms.read_spectra(write_long(tmp_path / "long.csv", columns))
    assert da.dims == ("sample", "wavelength")
    assert da.attrs["layout"] == "long"
    assert list(da["sample"].values) == list(columns)
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)


def test_long_columns_in_any_order_and_case(tmp_path):
    text = ("Absorbance,Wavelength_nm,Sample\n"
            "0.3,410,b\n0.1,400,a\n0.2,410,a\n")
    da = ms.read_spectra(write_text(tmp_path / "long.csv", text))
    assert da.attrs["layout"] == "long"
    assert list(da["sample"].values) == ["b", "a"]
    np.testing.assert_array_equal(da["wavelength"].values, [400.0, 410.0])
    np.testing.assert_array_equal(da.sel(sample="a").values, [0.1, 0.2])
    # b was not measured at 400 nm: a missing reading, not a zero
    assert np.isnan(da.sel(sample="b", wavelength=400.0).item())
    assert da.sel(sample="b", wavelength=410.0).item() == 0.3


def test_long_with_wavelength_column_first(tmp_path):
    # a long table is recognised by its three columns, whatever their order; it must not be
    # taken for a wide table just because wavelength_nm comes first
    text = "wavelength_nm,sample,absorbance\n400,a,0.1\n410,a,0.2\n400,b,0.3\n410,b,0.4\n"
    da = ms.read_spectra(write_text(tmp_path / "long.csv", text))
    assert da.attrs["layout"] == "long"
    assert list(da["sample"].values) == ["a", "b"]
    np.testing.assert_array_equal(da.values, [[0.1, 0.2], [0.3, 0.4]])


def test_long_tsv_with_decimal_commas(tmp_path, columns):
    path = write_long(tmp_path / "long.tsv", columns, sep="\t", decimal=",")
    da = ms.read_spectra(path)
    assert (da.attrs["layout"], da.attrs["separator"], da.attrs["decimal"]) == (
        "long", "tab", ",")
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)


def test_wide_semicolon_decimal_comma(tmp_path, columns):
    path = write_wide(tmp_path / "de.csv", columns, sep=";", decimal=",")
    assert b"," in path.read_bytes() and b"." not in path.read_bytes().split(b"\n", 1)[1]
    da = ms.read_spectra(path)
    assert (da.attrs["separator"], da.attrs["decimal"]) == ("semicolon", ",")
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)


def test_wide_xlsx(tmp_path, columns):
    path = write_xlsx(tmp_path / "wide.xlsx", ["wavelength_nm", *columns],
                      wide_rows(columns))
    da = ms.read_spectra(path)
    assert da.attrs["layout"] == "wide"
    assert da.attrs["separator"] == "xlsx"
    assert da.attrs["decimal"] == "."
    assert da.attrs["source"] == "wide.xlsx"
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)


def test_long_xlsx_with_blank_row_and_empty_cell(tmp_path):
    rows = [["a", 400, 0.1], ["a", 410, None], [None, None, None], ["b", 400, 0.3],
            ["b", 410, 0.4]]
    da = ms.read_spectra(write_xlsx(tmp_path / "long.xlsx",
                                    ["sample", "wavelength_nm", "absorbance"], rows))
    assert da.attrs["layout"] == "long"
    assert list(da["sample"].values) == ["a", "b"]
    np.testing.assert_array_equal(da.sel(sample="b").values, [0.3, 0.4])
    assert np.isnan(da.sel(sample="a", wavelength=410.0).item())


def test_xlsx_numbers_as_text_and_numeric_sample_names(tmp_path):
    rows = [[400, "0.5", 1], [410, 0.25, " 2 "]]
    da = ms.read_spectra(write_xlsx(tmp_path / "mixed.xlsx", ["wavelength_nm", 1, "b"], rows))
    assert list(da["sample"].values) == ["1", "b"]
    np.testing.assert_array_equal(da.values, [[0.5, 0.25], [1.0, 2.0]])


def test_pathlength_recorded(tmp_path, columns):
    da = ms.read_spectra(write_wide(tmp_path / "w.csv", columns), pathlength_cm=0.5)
    assert da.attrs["pathlength_cm"] == 0.5
    assert "pathlength_cm" not in ms.read_spectra(tmp_path / "w.csv").attrs


# --- ordering and missing readings -------------------------------------------------------


def test_descending_wavelengths_are_sorted_ascending(tmp_path, columns):
    path = write_wide(tmp_path / "desc.csv", {k: v[::-1] for k, v in columns.items()},
                      wl=WL[::-1])
    da = ms.read_spectra(path)
    np.testing.assert_array_equal(da["wavelength"].values, WL)
    np.testing.assert_allclose(da.values, _as_matrix(columns), rtol=1e-15)


def test_shuffled_wavelengths_keep_their_values(tmp_path):
    text = "wavelength_nm,a\n420,3\n400,1\n410,2\n"
    da = ms.read_spectra(write_text(tmp_path / "shuffled.csv", text))
    np.testing.assert_array_equal(da["wavelength"].values, [400.0, 410.0, 420.0])
    np.testing.assert_array_equal(da.values, [[1.0, 2.0, 3.0]])


def test_long_unsorted_wavelengths(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,420,3\na,400,1\na,410,2\n"
    da = ms.read_spectra(write_text(tmp_path / "long.csv", text))
    np.testing.assert_array_equal(da["wavelength"].values, [400.0, 410.0, 420.0])
    np.testing.assert_array_equal(da.values, [[1.0, 2.0, 3.0]])


def test_empty_cells_are_nan(tmp_path):
    text = "wavelength_nm,a,b\n400,,0.2\n410,0.1,\n420,NaN,0.3\n"
    da = ms.read_spectra(write_text(tmp_path / "gaps.csv", text))
    np.testing.assert_array_equal(np.isnan(da.values),
                                  [[True, False, True], [False, True, False]])
    assert da.sel(sample="b", wavelength=420.0).item() == 0.3


def test_empty_cells_with_semicolons(tmp_path):
    text = "wavelength_nm;a;b\n400;;0,2\n410;0,1;\n"
    da = ms.read_spectra(write_text(tmp_path / "gaps.csv", text))
    assert da.attrs["decimal"] == ","
    assert np.isnan(da.values[0, 0]) and np.isnan(da.values[1, 1])
    assert da.values[0, 1] == 0.1


def test_trailing_empty_header_cells_are_ignored(tmp_path):
    text = "wavelength_nm,mix,,\n400,0.1,,\n410,0.2,,\n"
    da = ms.read_spectra(write_text(tmp_path / "trail.csv", text))
    assert list(da["sample"].values) == ["mix"]


# --- errors ------------------------------------------------------------------------------


def test_duplicate_wavelength_wide(tmp_path):
    text = "wavelength_nm,a\n400,0.1\n410,0.2\n460,0.3\n460,0.4\n"
    with pytest.raises(InputError, match=r"^dup\.csv, line 5: wavelength 460 nm appears twice "
                                         r"\(also on line 4\)$"):
        ms.read_spectra(write_text(tmp_path / "dup.csv", text))


def test_duplicate_wavelength_xlsx(tmp_path):
    path = write_xlsx(tmp_path / "dup.xlsx", ["wavelength_nm", "a"],
                      [[400, 0.1], [410, 0.2], [400, 0.3]])
    with pytest.raises(InputError, match=r"^dup\.xlsx, line 4: wavelength 400 nm appears twice "
                                         r"\(also on line 2\)$"):
        ms.read_spectra(path)


def test_duplicate_wavelength_long(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,400,0.1\na,410,0.2\nb,400,0.3\na,400.0,0.4\n"
    with pytest.raises(InputError, match=r"^dup\.csv, line 5: sample 'a' has wavelength 400 nm "
                                         r"twice \(also on line 2\)$"):
        ms.read_spectra(write_text(tmp_path / "dup.csv", text))


def test_duplicate_sample_names(tmp_path):
    text = "wavelength_nm,a,b,a\n400,0.1,0.2,0.3\n"
    with pytest.raises(FileFormatError,
                       match=r"^names\.csv, line 1: sample name 'a' appears twice "
                             r"\(columns 2 and 4\)$"):
        ms.read_spectra(write_text(tmp_path / "names.csv", text))


def test_duplicate_sample_names_after_trimming(tmp_path):
    text = "wavelength_nm,a , a\n400,0.1,0.2\n"
    with pytest.raises(FileFormatError, match=r"sample name 'a' appears twice"):
        ms.read_spectra(write_text(tmp_path / "names.csv", text))


def test_empty_sample_name(tmp_path):
    text = "wavelength_nm,,b\n400,0.1,0.2\n"
    with pytest.raises(FileFormatError, match=r"^names\.csv, line 1, column 2: empty sample "
                                              r"name$"):
        ms.read_spectra(write_text(tmp_path / "names.csv", text))


def test_non_numeric_cell_names_line_column_and_value(tmp_path):
    text = "wavelength_nm,a,b\n400,0.1,0.2\n410,0.1,0.2\n420,0.3,0.4 AU\n"
    with pytest.raises(InputError,
                       match=r"^text\.csv, line 4, column 3 \('b'\): '0\.4 AU' is not a "
                             r"number" + NUMBER_FIX):
        ms.read_spectra(write_text(tmp_path / "text.csv", text))


def test_non_numeric_wavelength(tmp_path):
    text = "wavelength_nm,a\n400,0.1\n410 nm,0.2\n"
    with pytest.raises(InputError,
                       match=r"^wl\.csv, line 3, column 1 \('wavelength_nm'\) wavelength: "
                             r"'410 nm' is not a number" + NUMBER_FIX):
        ms.read_spectra(write_text(tmp_path / "wl.csv", text))


def test_missing_wavelength(tmp_path):
    text = "wavelength_nm,a\n400,0.1\n,0.2\n"
    with pytest.raises(InputError, match=r"^wl\.csv, line 3, column 1 \('wavelength_nm'\) "
                                         r"wavelength: value is missing$"):
        ms.read_spectra(write_text(tmp_path / "wl.csv", text))


def test_non_positive_wavelength(tmp_path):
    text = "wavelength_nm,a\n400,0.1\n0,0.2\n"
    with pytest.raises(InputError, match=r"^wl\.csv, line 3, column 1 \('wavelength_nm'\): "
                                         r"wavelength 0 nm is not positive$"):
        ms.read_spectra(write_text(tmp_path / "wl.csv", text))


def test_non_numeric_cell_long(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,400,0.1\na,410,high\n"
    with pytest.raises(InputError, match=r"^long\.csv, line 3, column 3 \('absorbance'\): "
                                         r"'high' is not a number" + NUMBER_FIX):
        ms.read_spectra(write_text(tmp_path / "long.csv", text))


def test_non_numeric_cell_xlsx(tmp_path):
    path = write_xlsx(tmp_path / "text.xlsx", ["wavelength_nm", "a", "b"],
                      [[400, 0.1, 0.2], [410, "#DIV/0!", 0.3]])
    with pytest.raises(InputError, match=r"^text\.xlsx, line 3, column 2 \('a'\): '#DIV/0!' is "
                                         r"not a number" + NUMBER_FIX):
        ms.read_spectra(path)


def test_decimal_point_in_decimal_comma_file(tmp_path):
    # decimal commas everywhere except one cell with both marks
    text = "wavelength_nm;a\n400;0,1\n410;1.000,5\n"
    with pytest.raises(InputError, match=r"^dec\.csv, line 3, column 2 \('a'\): '1\.000,5' uses "
                                         r"a decimal point but the file uses decimal commas$"):
        ms.read_spectra(write_text(tmp_path / "dec.csv", text))


def test_mixed_decimal_marks_tab(tmp_path):
    text = "wavelength_nm\ta\n400\t0,1\n410\t0.2\n"
    with pytest.raises(FileFormatError, match=r"^mixed\.tsv: mixed decimal marks \(comma on "
                                              r"line 2, point on line 3\)"):
        ms.read_spectra(write_text(tmp_path / "mixed.tsv", text))


def test_unknown_layout(tmp_path):
    text = "energy,a,b\n400,0.1,0.2\n"
    with pytest.raises(FileFormatError,
                       match=r"^odd\.csv, line 1: cannot tell the layout from the header "
                             r"'energy', 'a', 'b'; expected wide \(first column the wavelength: "
                             r"wavelength_nm, nm, Wavelength \(nm\), λ \(nm\); then one column "
                             r"per sample\) or long \(columns sample, wavelength_nm, "
                             r"absorbance\): rename the wavelength column, or delete the lines "
                             r"above the header if they hold one$"):
        ms.read_spectra(write_text(tmp_path / "odd.csv", text))


def test_long_layout_needs_all_three_columns(tmp_path):
    text = "sample,wavelength_nm,value\na,400,0.1\n"
    with pytest.raises(FileFormatError, match=r"^long\.csv, line 1: cannot tell the layout "
                                              r"from the header 'sample', 'wavelength_nm', "
                                              r"'value'"):
        ms.read_spectra(write_text(tmp_path / "long.csv", text))


def test_row_with_too_few_cells(tmp_path):
    text = "wavelength_nm,a,b\n400,0.1,0.2\n410,0.1\n"
    with pytest.raises(FileFormatError, match=r"^short\.csv, line 3: 2 cells, but the header "
                                              r"has 3$"):
        ms.read_spectra(write_text(tmp_path / "short.csv", text))


def test_row_with_too_many_cells(tmp_path):
    text = "wavelength_nm,a,b\n400,0.1,0.2\n410,0.1,0.2,0.3\n"
    with pytest.raises(FileFormatError, match=r"^long_row\.csv, line 3: 4 cells, but the "
                                              r"header has 3$"):
        ms.read_spectra(write_text(tmp_path / "long_row.csv", text))


def test_long_row_with_too_few_cells(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,400,0.1\na,410\n"
    with pytest.raises(FileFormatError, match=r"^short\.csv, line 3: 2 cells, expected at "
                                              r"least 3$"):
        ms.read_spectra(write_text(tmp_path / "short.csv", text))


def test_long_empty_sample_name(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,400,0.1\n,410,0.2\n"
    with pytest.raises(FileFormatError, match=r"^long\.csv, line 3, column 1 \('sample'\): "
                                              r"empty sample name$"):
        ms.read_spectra(write_text(tmp_path / "long.csv", text))


@pytest.mark.parametrize("cell", ["inf", "-inf", "1e400", "Infinity"])
def test_infinite_value(tmp_path, cell):
    text = f"wavelength_nm,a,b\n400,0.1,0.2\n410,{cell},0.2\n"
    with pytest.raises(InputError, match=rf"^inf\.csv, line 3, column 2 \('a'\): "
                                         rf"'{re.escape(cell)}' is infinite; leave the cell "
                                         r"empty for a missing reading$"):
        ms.read_spectra(write_text(tmp_path / "inf.csv", text))


def test_infinite_wavelength(tmp_path):
    text = "wavelength_nm,a\n400,0.1\ninf,0.2\n"
    with pytest.raises(InputError, match=r"^inf\.csv, line 3, column 1 \('wavelength_nm'\) "
                                         r"wavelength: 'inf' is infinite"):
        ms.read_spectra(write_text(tmp_path / "inf.csv", text))


def test_infinite_value_long(tmp_path):
    text = "sample,wavelength_nm,absorbance\na,400,0.1\na,410,-inf\n"
    with pytest.raises(InputError, match=r"^inf\.csv, line 3, column 3 \('absorbance'\): "
                                         r"'-inf' is infinite"):
        ms.read_spectra(write_text(tmp_path / "inf.csv", text))


# --- absorptivity tables -----------------------------------------------------------------


def test_read_absorptivity_table(tmp_path):
    da = read_absorptivity_table(write_absorptivity_table(tmp_path / "eps.csv"))
    frame = absorptivity_frame()
    assert da.dims == ("component", "wavelength")
    assert list(da["component"].values) == list(frame.columns)
    np.testing.assert_allclose(da.values, frame.to_numpy().T, rtol=1e-15)


def test_absorptivity_table_must_start_with_wavelength(tmp_path):
    text = table_text(["sample", "wavelength_nm", "absorbance"], [["a", 400.0, 0.1]])
    with pytest.raises(FileFormatError,
                       match=r"^eps\.csv, line 1: first column is 'sample'; an absorptivity "
                             r"table starts with wavelength_nm"):
        read_absorptivity_table(write_text(tmp_path / "eps.csv", text))


def test_absorptivity_table_must_be_complete(tmp_path):
    text = "wavelength_nm,red,blue\n400,100,200\n410,,210\n"
    with pytest.raises(InputError, match=r"^eps\.csv: component 'red' has no value at 410 nm; "
                                         r"an absorptivity table must be complete$"):
        read_absorptivity_table(write_text(tmp_path / "eps.csv", text))

"""Reading standards sheets (mixsolve.io.standards_io)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from helpers_io import NUMBER_FIX, STANDARDS, write_standards, write_text, write_xlsx

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.standards_io import molar_masses_from_sheet, read_standards


def test_columns_values_and_line_numbers(tmp_path):
    _, sheet = write_standards(tmp_path)
    frame = read_standards(sheet)
    assert set(frame.columns) == {"line", "sample", "component", "concentration", "unit",
                                  "pathlength_cm"}
    assert list(frame["sample"]) == list(STANDARDS)
    assert list(frame["component"]) == [c for c, _ in STANDARDS.values()]
    np.testing.assert_allclose(frame["concentration"], [v for _, v in STANDARDS.values()])
    assert frame["concentration"].dtype == np.float64
    assert set(frame["unit"]) == {"mmol/L"}
    assert frame["pathlength_cm"].isna().all()
    assert list(frame["line"]) == list(range(2, 2 + len(STANDARDS)))


def test_blank_lines_keep_file_line_numbers(tmp_path):
    text = ("\nsample,component,concentration,unit,pathlength_cm\n\n"
            "r1,red,0.01,mmol/L,\n\nr2,red,0.02,mmol/L,0.5\n")
    frame = read_standards(write_text(tmp_path / "sheet.csv", text))
    assert list(frame["line"]) == [4, 6]
    assert np.isnan(frame["pathlength_cm"].iloc[0])
    assert frame["pathlength_cm"].iloc[1] == 0.5


def test_header_case_order_and_extra_columns(tmp_path):
    text = ("Unit;Concentration;Note;Component;Sample\n"
            "mg/L;0,5;first;red;r1\nmg/L;1,5;;red;r2\n")
    frame = read_standards(write_text(tmp_path / "sheet.csv", text))
    assert list(frame["sample"]) == ["r1", "r2"]
    np.testing.assert_allclose(frame["concentration"], [0.5, 1.5])
    assert "note" not in frame.columns


def test_short_rows_are_padded(tmp_path):
    text = "sample,component,concentration,unit,pathlength_cm\nr1,red,0.01,mmol/L\n"
    frame = read_standards(write_text(tmp_path / "sheet.csv", text))
    assert np.isnan(frame["pathlength_cm"].iloc[0])


def test_molar_mass_column(tmp_path):
    text = ("sample,component,concentration,unit,molar_mass_g_per_mol\n"
            "r1,red,1,mg/L,500\nr2,red,2,mg/L,500\nb1,blue,1,mg/L,\nb2,blue,2,mg/L,800\n")
    frame = read_standards(write_text(tmp_path / "sheet.csv", text))
    assert molar_masses_from_sheet(frame) == {"red": 500.0, "blue": 800.0}


def test_molar_masses_absent_or_conflicting(tmp_path):
    assert molar_masses_from_sheet(pd.DataFrame({"component": ["a"]})) == {}
    text = ("sample,component,concentration,unit,molar_mass_g_per_mol\n"
            "r1,red,1,mg/L,500\nr2,red,2,mg/L,501\n")
    frame = read_standards(write_text(tmp_path / "sheet.csv", text))
    with pytest.raises(FileFormatError, match=r"component 'red' has different molar masses "
                                              r"500, 501"):
        molar_masses_from_sheet(frame)


def test_xlsx_sheet(tmp_path):
    path = write_xlsx(tmp_path / "sheet.xlsx",
                      ["sample", "component", "concentration", "unit", "pathlength_cm"],
                      [["r1", "red", 0.01, "mmol/L", 1], ["r2", "red", 0.02, "mmol/L", None]])
    frame = read_standards(path)
    assert list(frame["line"]) == [2, 3]
    np.testing.assert_allclose(frame["concentration"], [0.01, 0.02])
    np.testing.assert_array_equal(frame["pathlength_cm"], [1.0, np.nan])


def test_missing_columns(tmp_path):
    text = "sample,component,conc\nr1,red,0.01\n"
    with pytest.raises(FileFormatError,
                       match=r"^sheet\.csv, line 1: missing column\(s\) concentration, unit; a "
                             r"standards sheet has columns sample, component, concentration, "
                             r"unit \(optional: pathlength_cm, u_concentration, stock, "
                             r"u_stock_rel\)$"):
        read_standards(write_text(tmp_path / "sheet.csv", text))


def test_non_numeric_concentration(tmp_path):
    text = "sample,component,concentration,unit\nr1,red,0.01,mmol/L\nr2,red,ten,mmol/L\n"
    with pytest.raises(InputError, match=r"^sheet\.csv, line 3, column 3 \('concentration'\): "
                                         r"'ten' is not a number" + NUMBER_FIX):
        read_standards(write_text(tmp_path / "sheet.csv", text))


def test_missing_concentration(tmp_path):
    text = "sample,component,concentration,unit\nr1,red,,mmol/L\n"
    with pytest.raises(InputError, match=r"^sheet\.csv, line 2, column 3 \('concentration'\): "
                                         r"value is missing$"):
        read_standards(write_text(tmp_path / "sheet.csv", text))


def test_non_numeric_pathlength(tmp_path):
    text = "sample,component,concentration,unit,pathlength_cm\nr1,red,1,mmol/L,1 cm\n"
    with pytest.raises(InputError, match=r"^sheet\.csv, line 2, column 5 \('pathlength_cm'\): "
                                         r"'1 cm' is not a number" + NUMBER_FIX):
        read_standards(write_text(tmp_path / "sheet.csv", text))


@pytest.mark.parametrize(("row", "column", "name"),
                         [(",red,1,mmol/L", 1, "sample"), ("r1,,1,mmol/L", 2, "component"),
                          ("r1,red,1,", 4, "unit")])
def test_empty_text_cells(tmp_path, row, column, name):
    text = f"sample,component,concentration,unit\n{row}\n"
    with pytest.raises(FileFormatError, match=rf"^sheet\.csv, line 2, column {column} "
                                              rf"\('{name}'\): empty {name}$"):
        read_standards(write_text(tmp_path / "sheet.csv", text))


def test_missing_and_header_only_files(tmp_path):
    with pytest.raises(FileFormatError, match=r"none\.csv: file not found"):
        read_standards(tmp_path / "none.csv")
    path = write_text(tmp_path / "head.csv", "sample,component,concentration,unit\n")
    with pytest.raises(FileFormatError, match=r"^head\.csv: header only, no data rows$"):
        read_standards(path)

"""Spreadsheet-safe text (mixsolve.io.cell_text): no output cell can be opened as a formula.

The rule is common practice, the OWASP "CSV Injection" guidance: a text cell beginning with
``=``, ``+``, ``-``, ``@``, a tab or a carriage return is written as text (a leading
apostrophe in CSV, a string cell in XLSX); numbers stay numbers. All data here are invented
(tests/helpers_io.py, tests/helpers_plate.py).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from helpers_instrument import UV, dichromate
from helpers_io import (
    MIXTURES,
    mixture_absorbance,
    write_library_file,
    write_wide,
)
from helpers_plate import scenario_layout, write_layout, write_scenario

from mixsolve.io.cell_text import FORMULA_START, safe_cell, safe_frame, unquote_cell
from mixsolve.io.log_io import LOG_COLUMNS, append_log, read_log
from mixsolve.io.reference_io import read_reference
from mixsolve.io.results_io import write_table, write_workbook

#: Names a spreadsheet would read as formulas (common practice: the six OWASP characters).
NAMES = ["=1+1", "+A1", "-x", "@SUM(A1)", "\tx", "\rx"]


def csv_cells(path: Path) -> list[list[str]]:
    """Every row of a CSV file as the raw text of its cells (header included)."""
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.reader(handle))


def formula_cells(path: Path) -> list[str]:
    """Coordinates (sheet!cell) of every formula cell of an XLSX workbook."""
    book = openpyxl.load_workbook(path)
    return [f"{sheet.title}!{cell.coordinate}" for sheet in book for row in sheet.iter_rows()
            for cell in row if cell.data_type == "f"]


def assert_no_formula_text(rows: list[list[str]]) -> None:
    """No raw CSV cell begins with a formula character unless it is a plain number."""
    for row in rows:
        for cell in row:
            if cell.startswith(FORMULA_START):
                float(cell)  # only a number such as -0.5 may start with '-' or '+'


def names_frame() -> pd.DataFrame:
    """One row per dangerous name, a negative number beside each."""
    return pd.DataFrame({"sample": NAMES, "value": -0.5 - np.arange(len(NAMES)),
                         "count": -np.arange(1, len(NAMES) + 1)})


# --- the rule ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", NAMES)
def test_safe_cell_quotes_formula_text_and_round_trips(name):
    assert safe_cell(name) == "'" + name
    assert unquote_cell(safe_cell(name)) == name


@pytest.mark.parametrize("value", ["S1", "", "a=b", " =x", "-0.5", "+1e-3", "-inf", -0.5, 3,
                                   None, float("nan")])
def test_numbers_and_plain_text_are_left_alone(value):
    assert safe_cell(value) is value


@pytest.mark.parametrize("name", ["'=a", "''=a", "'-x", "'", "'x", "'-0.5", "it's"])
def test_apostrophes_round_trip_exactly(name):
    """A name that already begins with apostrophes still reads back as itself."""
    assert unquote_cell(safe_cell(name)) == name


def test_safe_frame_leaves_the_callers_frame_and_numbers_alone():
    frame = names_frame().rename(columns={"count": "=cmd"})
    before = frame.copy(deep=True)
    out = safe_frame(frame)
    pd.testing.assert_frame_equal(frame, before)
    assert list(out["sample"]) == ["'" + n for n in NAMES]
    assert list(out.columns) == ["sample", "value", "'=cmd"]
    assert out["value"].dtype == float and (out["value"] < 0).all()
    plain = pd.DataFrame({"sample": ["S1"], "value": [-1.0]})
    assert safe_frame(plain) is plain


# --- writers ----------------------------------------------------------------------------


def test_write_table_quotes_text_keeps_negative_numbers(tmp_path):
    frame = names_frame()
    before = frame.copy(deep=True)
    rows = csv_cells(write_table(frame, tmp_path / "t.csv"))
    pd.testing.assert_frame_equal(frame, before)
    assert [r[0] for r in rows[1:]] == ["'" + n for n in NAMES]
    assert [r[1] for r in rows[1:]] == ["-0.5", "-1.5", "-2.5", "-3.5", "-4.5", "-5.5"]
    assert [r[2] for r in rows[1:]] == [str(-k) for k in range(1, 7)]
    assert_no_formula_text(rows)
    assert len(rows) == len(NAMES) + 1  # the carriage return did not start a row


def test_a_carriage_return_inside_text_is_quoted(tmp_path):
    """Left bare, a CR ends the row in a spreadsheet and what follows could be a formula."""
    frame = pd.DataFrame({"sample": ["a\r=HYPERLINK(\"x\")", "b"], "value": [-1.0, 2.0]})
    path = write_table(frame, tmp_path / "cr.csv")
    assert csv_cells(path) == [["sample", "value"], ["a\r=HYPERLINK(\"x\")", "-1"],
                               ["b", "2"]]
    assert path.read_bytes() == b'sample,value\r\n"a\r=HYPERLINK(""x"")",-1\r\nb,2\r\n'
    plain = write_table(frame.iloc[1:], tmp_path / "plain.csv")
    assert plain.read_bytes() == b"sample,value\nb,2\n"  # the usual line end otherwise


def test_write_workbook_text_cells_never_formulas(tmp_path):
    frame = names_frame()
    before = frame.copy(deep=True)
    path = write_workbook({"names": frame, "=sheet data": frame.rename(columns={"sample": "=h"})},
                          tmp_path / "r.xlsx")
    pd.testing.assert_frame_equal(frame, before)
    assert formula_cells(path) == []
    book = openpyxl.load_workbook(path)
    for sheet in book:
        cells = list(sheet.iter_rows(min_row=2, values_only=False))
        # The text exactly, no apostrophe; XML end-of-line handling reads a stored
        # carriage return back as a line feed.
        assert [row[0].value for row in cells] == [n.replace("\r", "\n") for n in NAMES]
        assert {row[0].data_type for row in cells} == {"s"}
        assert [row[1].value for row in cells] == [-0.5, -1.5, -2.5, -3.5, -4.5, -5.5]
        assert {row[1].data_type for row in cells} == {"n"}
        assert {row[2].data_type for row in cells} == {"n"}
    assert book["=sheet data"]["A1"].value == "=h"
    assert book["=sheet data"]["A1"].data_type == "s"


def log_records(items: list[str]) -> pd.DataFrame:
    """Instrument-log records with the given item names and negative measurements."""
    n = len(items)
    return pd.DataFrame({"timestamp": "2024-06-01T10:00:00+02:00", "check": "absorbance",
                         "item": items, "measured": -0.25 * np.arange(1, n + 1),
                         "expected": 0.0, "low": -1.0, "high": 1.0, "unit": "%",
                         "result": "pass", "source": "=HYPERLINK(\"x\").csv",
                         "settings": "{}", "note": "-"})


def test_instrument_log_quotes_text_and_reads_back(tmp_path):
    log = tmp_path / "log.csv"
    append_log(log_records(NAMES), log)
    rows = csv_cells(log)
    assert tuple(rows[0]) == LOG_COLUMNS
    assert [r[2] for r in rows[1:]] == ["'" + n for n in NAMES]
    assert {r[9] for r in rows[1:]} == {"'=HYPERLINK(\"x\").csv"} and {r[11] for r in rows[1:]} \
        == {"'-"}
    assert [r[3] for r in rows[1:]] == ["-0.25", "-0.5", "-0.75", "-1", "-1.25", "-1.5"]
    assert_no_formula_text(rows)
    assert len(rows) == len(NAMES) + 1  # the carriage return is quoted, inside its cell
    back = read_log(log)
    assert [r[2] for r in back] == NAMES and back[0][9] == "=HYPERLINK(\"x\").csv"
    before = log.read_text(encoding="utf-8")
    append_log(log_records(["k at 350 nm"]), log)  # earlier rows stay byte for byte
    assert log.read_text(encoding="utf-8").startswith(before)
    assert len(read_log(log)) == len(NAMES) + 1


def test_a_log_written_before_the_rule_is_made_safe_on_the_next_append(tmp_path):
    log = tmp_path / "old.csv"
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(LOG_COLUMNS)
    writer.writerow(["2023-01-01T00:00:00", "wavelength", "=cmd|' /C calc'!A0", "-0.12",
                     "0", "-0.5", "0.5", "nm", "pass", "@x.csv", "{}", ""])
    log.write_text(buffer.getvalue(), encoding="utf-8")
    append_log(log_records(["ok"]), log)
    rows = csv_cells(log)
    assert rows[1][2] == "'=cmd|' /C calc'!A0" and rows[1][9] == "'@x.csv"
    assert rows[1][3] == "-0.12" and rows[1][5] == "-0.5"  # numbers untouched
    assert_no_formula_text(rows)
    assert read_log(log)[0][2] == "=cmd|' /C calc'!A0"


# --- end to end -------------------------------------------------------------------------


def test_cli_plate_with_formula_sample_names(tmp_path, cli):
    """A layout whose sample names begin with '=': CSVs quoted, no formula in results.xlsx."""
    layout = scenario_layout()
    for row in layout:
        if row.get("sample"):
            row["sample"] = f"={row['sample']}"
    export = write_scenario(tmp_path)
    layout_file = write_layout(tmp_path / "layout.csv", layout)
    library = write_library_file(tmp_path / "lib.nc")
    out = tmp_path / "out"
    run = cli("plate", library, export, "--layout", layout_file, "--out", out,
              "--pathlength", "0.5")
    assert run.exit_code == 0, run.output
    plate = out / "plate1"
    assert formula_cells(plate / "results.xlsx") == []
    book = openpyxl.load_workbook(plate / "results.xlsx")
    names = {c.value for c in book["samples"]["A"][1:]}
    assert names == {f"=S{k}" for k in range(1, 7)}
    assert {c.data_type for c in book["samples"]["A"][1:]} == {"s"}
    assert {c.data_type for c in book["samples"]["C"][1:]} == {"n"}  # concentration
    for name in ("wells.csv", "samples.csv"):
        rows = csv_cells(plate / name)
        assert_no_formula_text(rows)
        column = rows[0].index("sample")
        assert "'=S1" in {r[column] for r in rows[1:]}
    combined = csv_cells(out / "samples.csv")
    assert_no_formula_text(combined)
    assert {r[1] for r in combined[1:]} == {f"'=S{k}" for k in range(1, 7)}


def test_cli_unmix_formula_sample_keeps_negative_numbers_and_round_trips(tmp_path, cli):
    """A sample column named '=cmd' beside one whose OLS blue share is negative."""
    spectra = write_wide(tmp_path / "s.csv", {
        "=cmd": mixture_absorbance(MIXTURES["mix_1"]),
        "-odd": mixture_absorbance({"red": 2.0e-5, "blue": -0.5e-5})})
    library = write_library_file(tmp_path / "lib.nc")
    out = tmp_path / "results.csv"
    run = cli("unmix", library, spectra, "--method", "ols", "--out", out)
    assert run.exit_code == 0, run.output
    rows = csv_cells(out)
    assert_no_formula_text(rows)  # the provenance lines too
    assert rows[0] == ["# mixsolve results"]
    rows = [r for r in rows if not r[0].startswith("#")]
    sample, component, conc = (rows[0].index(c) for c in ("sample", "component",
                                                           "concentration"))
    assert [r[sample] for r in rows[1:]] == ["'=cmd", "'=cmd", "'-odd", "'-odd"]
    negative = next(r[conc] for r in rows[1:] if r[sample] == "'-odd"
                    and r[component] == "blue")
    assert negative.startswith("-") and float(negative) == pytest.approx(-0.5e-5, rel=1e-3)
    reference = read_reference(out)  # a results CSV read back as a reference table
    assert list(reference["sample"]) == ["=cmd", "=cmd", "-odd", "-odd"]


def test_cli_instrument_log_with_formula_names(tmp_path, cli):
    """A spectra file and column whose names begin with '=' and '@' reach the log quoted."""
    spectra = write_wide(tmp_path / "=cmd.csv", {"@k": dichromate(60.0)}, UV)
    log = tmp_path / "log.csv"
    run = cli("instrument", "absorbance", spectra, "--concentration", "60", "--log", log)
    assert run.exit_code == 0, run.output
    rows = csv_cells(log)
    assert_no_formula_text(rows)
    assert {r[9] for r in rows[1:]} == {"'=cmd.csv"}
    assert all(r[2].startswith("'@k ") for r in rows[1:])
    assert {r[9] for r in read_log(log)} == {"=cmd.csv"}

"""Write tables, text and workbooks atomically (the tables are made in report/); read
mixsolve's own results files back (:func:`read_results`).

Text cells are spreadsheet-safe (:mod:`mixsolve.io.cell_text`): no cell of a CSV or XLSX
output can be opened as a formula.
"""

from __future__ import annotations

import gc
import io
import json
import os
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from mixsolve.errors import FileFormatError, OutputError
from mixsolve.io.atomic import atomic_path
from mixsolve.io.cell_text import csv_line_end, safe_frame, text_not_formulas, unquote_cell
from mixsolve.io.outputs import RECORD, recorded_files
from mixsolve.io.provenance import header_lines, parse_header, provenance_from_rows
from mixsolve.io.tables import is_comment, parse_number, read_table

#: The column of a sample's flag codes in the results tables. Not ``flags``, which would
#: shadow pandas' ``DataFrame.flags`` (``table.flags`` is pandas' own object); tables
#: written before issue 17 used ``flags``, and :func:`read_results` reads it as this.
FLAGS_COLUMN = "sample_flags"
#: The name of that column in results files written before issue 17.
OLD_FLAGS_COLUMN = "flags"
#: The first columns of the tidy results table (:func:`mixsolve.results_table`).
RESULT_COLUMNS = ("sample", "component", "concentration", "std_uncertainty", "unit",
                  "rms_residual_au", "dof", FLAGS_COLUMN)
#: Text columns of a results table; every other column holds numbers.
TEXT_COLUMNS = ("sample", "component", "unit", FLAGS_COLUMN)
#: Sheets of a results workbook, in order (docs/formats.md, "Results workbook").
SHEETS = ("results", "tidy", "flags explained", "run notes", "settings")
#: Columns of the settings sheet.
SETTINGS_COLUMNS = ("item", "value")
#: ``#`` lines read at most at the top of a results CSV.
MAX_HEADER_LINES = 10_000


def u_column(component: str) -> str:
    """The wide table's column of a component's standard uncertainty: ``u(<component>)``."""
    return f"u({component})"


def write_table(table: pd.DataFrame, path: str | os.PathLike[str]) -> Path:
    """Write any DataFrame as UTF-8 CSV without its index; atomic.

    Text cells and column names that would start a formula get a leading apostrophe
    (:func:`mixsolve.io.cell_text.safe_cell`); ``table`` itself is not changed. Lines end
    in ``\n`` (``\r\n`` when a text cell holds a carriage return, which is then quoted).
    """
    safe = safe_frame(table)
    with atomic_path(path) as tmp:
        safe.to_csv(tmp, index=False, float_format="%.6g", lineterminator=csv_line_end(safe))
    return Path(path)


def write_results(table: pd.DataFrame, path: str | os.PathLike[str],
                  provenance: Mapping[str, Any] | None = None) -> Path:
    """Write a results table as CSV, numbers at full precision, under its provenance; atomic.

    As :func:`write_table`, but every float is written with the shortest text that reads
    back to the same float64 (Python's ``repr``), and the provenance record
    (:func:`mixsolve.io.provenance.run_provenance`) comes first as ``#`` lines
    (:func:`mixsolve.io.provenance.header_lines`). mixsolve's readers skip them;
    :func:`read_results` reads them back.
    """
    safe = safe_frame(table)
    end = csv_line_end(safe)
    head = "".join(line + end for line in header_lines(provenance)) if provenance else ""
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(head)
            safe.to_csv(handle, index=False, lineterminator=end)
    return Path(path)


class Results(NamedTuple):
    """A results file read back (:func:`read_results`)."""

    #: The tidy table (one row per sample × component), as :func:`mixsolve.results_table`.
    table: pd.DataFrame
    #: The provenance record (``{}`` for a file written without one).
    provenance: dict[str, Any]


def read_results(path: str | os.PathLike[str]) -> Results:
    """Read a results file mixsolve wrote: a tidy or wide CSV, or a results workbook.

    Parameters
    ----------
    path : path-like
        ``unmix --out`` output: CSV (tidy or wide, by its columns) or XLSX (its ``tidy``
        and ``settings`` sheets).

    Returns
    -------
    Results
        ``table``: the tidy table, columns as :func:`mixsolve.results_table` gives them
        (``sample``, ``component``, ``concentration``, ``std_uncertainty``, ``unit``,
        ``rms_residual_au``, ``dof``, ``sample_flags`` and the optional ones the file has);
        a file's old ``flags`` column is read as ``sample_flags``; text undone from its
        spreadsheet-safe form (:func:`mixsolve.io.cell_text.unquote_cell`). A wide table
        is turned back into tidy rows (its per-sample columns repeated on each component's
        row; the per-component parts of u are only in tidy files). ``provenance``: the
        record of the ``#`` header lines or the settings sheet, ``{}`` when the file has
        none.

    Raises
    ------
    FileFormatError
        Not a results table (no ``sample`` column, neither ``component`` nor a
        ``u(<component>)`` column), a number that is not one (file, line and column named).
    """
    raw = read_table(path, sheet=tidy_sheet(path), keep_spaces=True,
                     find_header=_is_results_header)
    provenance = _workbook_provenance(path) if raw.separator is None else \
        parse_header(_top_comments(path))
    csv = raw.separator is not None
    header = [unquote_cell(h) if csv else h for h in raw.header]
    header = [FLAGS_COLUMN if h == OLD_FLAGS_COLUMN else h for h in header]
    columns: dict[str, list[Any]] = {h: [] for h in header}
    for row in raw.rows:
        cells = list(row) + [""] * (len(header) - len(row))
        for h, cell in zip(header, cells, strict=False):
            columns[h].append(cell)
    frame = pd.DataFrame({h: _column(h, values, raw, header.index(h), csv)
                          for h, values in columns.items()}, columns=header)
    if "sample" not in frame:
        raise FileFormatError(f"{raw.name}, line {raw.header_line}: no 'sample' column; not "
                              "a mixsolve results table")
    if "component" not in frame:
        frame = _tidy_from_wide(frame, raw.name, raw.header_line)
    return Results(_as_written(frame), provenance)


def _as_written(frame: pd.DataFrame) -> pd.DataFrame:
    """Column types as :func:`mixsolve.results_table` gives them: pandas' text dtype for
    text, float64 for numbers, int64 for a ``dof`` column of whole numbers."""
    for name in frame.columns:
        column = frame[name]
        if not pd.api.types.is_numeric_dtype(column.dtype):
            frame[name] = pd.Series(column.tolist(), index=frame.index, dtype=str)
    dof = frame.get("dof")
    if dof is not None and pd.api.types.is_float_dtype(dof.dtype) \
            and np.all(np.isfinite(dof)) and np.all(dof == np.round(dof)):
        frame["dof"] = dof.astype(np.int64)
    return frame


def _is_results_header(cells: list[str]) -> bool:
    """A results table's header row: ``sample, component, ...`` (tidy) or
    ``sample, <c>, u(<c>), ...`` (wide)."""
    return len(cells) >= 3 and cells[0] == "sample" and (
        cells[1] == "component" or cells[2] == u_column(str(unquote_cell(cells[1]))))


def _column(name: str, values: list[Any], raw: Any, j: int, csv: bool) -> pd.Series:
    """One column read back: text (spreadsheet quoting undone) or numbers."""
    if name not in TEXT_COLUMNS:
        try:
            return pd.Series([parse_number(v, raw.decimal, raw.where(i, j))
                              for i, v in enumerate(values)], dtype=float)
        except Exception:  # not a number column (a dimension of text labels): text
            pass
    text = ["" if v is None else str(v) for v in values]
    if csv:
        text = [unquote_cell(t) for t in text]
    return pd.Series(text, dtype=str)


def _tidy_from_wide(wide: pd.DataFrame, name: str, line: int) -> pd.DataFrame:
    """A wide results table (``<c>``, ``u(<c>)`` per component) as tidy rows."""
    comps = [c for c in wide.columns if u_column(c) in wide.columns]
    if not comps:
        raise FileFormatError(f"{name}, line {line}: neither a 'component' column nor "
                              "'u(<component>)' columns; not a mixsolve results table")
    per_sample = [c for c in wide.columns
                  if c not in comps and c not in map(u_column, comps) and c != "sample"]
    n_c, n_s = len(comps), len(wide)
    data: dict[str, Any] = {
        "sample": np.repeat(wide["sample"].to_numpy(dtype=object), n_c),
        "component": np.tile(np.array(comps, dtype=object), n_s),
        "concentration": wide[comps].to_numpy(dtype=float).ravel(),
        "std_uncertainty": wide[[u_column(c) for c in comps]].to_numpy(dtype=float).ravel(),
    }
    data.update({c: np.repeat(wide[c].to_numpy(), n_c) for c in per_sample})
    order = [c for c in RESULT_COLUMNS if c in data]
    return pd.DataFrame(data, columns=[*order, *(c for c in data if c not in order)])


def _top_comments(path: str | os.PathLike[str]) -> list[str]:
    """The ``#`` lines at the top of a text file (at most :data:`MAX_HEADER_LINES`)."""
    lines = []
    with open(path, encoding="utf-8-sig", errors="replace", newline="") as handle:
        for _ in range(MAX_HEADER_LINES):
            line = handle.readline()
            if not line or not is_comment(line):
                break
            lines.append(line.rstrip("\r\n"))
    return lines


def tidy_sheet(path: str | os.PathLike[str]) -> str | None:
    """The sheet to read a tidy table from: ``tidy`` in a results workbook, else None (the
    first sheet, or a text file)."""
    names = _sheet_names(path)
    return SHEETS[1] if names[:2] == list(SHEETS[:2]) else None


def _sheet_names(path: str | os.PathLike[str]) -> list[str]:
    """The sheet names of an XLSX file ([] for anything else)."""
    try:
        with open(path, "rb") as handle:
            if handle.read(4) != b"PK\x03\x04":
                return []
    except OSError:  # missing or unreadable: read_table says so, naming the file
        return []
    import openpyxl  # deferred: only XLSX input needs it

    try:
        book = openpyxl.load_workbook(path, read_only=True)
    except Exception:  # a damaged workbook: read_table says so, naming the file
        return []
    try:
        return list(book.sheetnames)
    finally:
        book.close()


def _workbook_provenance(path: str | os.PathLike[str]) -> dict[str, Any]:
    """The record in a results workbook's settings sheet; ``{}`` without one."""
    if SHEETS[-1] not in _sheet_names(path):
        return {}
    sheet = read_table(path, sheet=SHEETS[-1], keep_spaces=True)
    if [str(h) for h in sheet.header[:2]] != list(SETTINGS_COLUMNS):
        return {}
    rows = [(str(r[0]), None if len(r) < 2 or r[1] == "" else r[1]) for r in sheet.rows]
    return provenance_from_rows(rows)


def write_text(text: str, path: str | os.PathLike[str]) -> Path:
    """Write UTF-8 text (an HTML page, a report) to ``path``; atomic."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def record_outputs(folder: str | os.PathLike[str], names: Sequence[str]) -> Path:
    """Add ``names`` (relative to ``folder``) to the folder's record of mixsolve's own files.

    A later run given only the folder may replace these and no other existing file
    (:func:`mixsolve.io.outputs.check_own_files`). The record is staged with the run's
    other outputs.
    """
    files = sorted({*recorded_files(folder), *names})
    text = json.dumps({"written_by": "mixsolve", "files": files}, indent=1) + "\n"
    return write_text(text, Path(folder) / RECORD)


def write_workbook(sheets: dict[str, pd.DataFrame], path: str | os.PathLike[str]) -> Path:
    """Write DataFrames as the sheets of one XLSX workbook (openpyxl); atomic.

    Text is written exactly, as string cells: text beginning with ``=`` is never a
    formula (:func:`mixsolve.io.cell_text.text_not_formulas`). The workbook is built in
    memory, then written in one call.

    Raises
    ------
    OutputError
        Also when openpyxl's own temporary files cannot be written (disk full, a file-size
        limit).
    """
    buffer = io.BytesIO()
    failure = None
    hook = sys.unraisablehook
    # On a write failure openpyxl's half-closed sheet generators report the error again
    # when collected ("Exception ignored in ..."); the error below already says it.
    sys.unraisablehook = lambda _: None
    try:
        try:
            with pd.ExcelWriter(buffer, engine="openpyxl") as writer:
                for name, frame in sheets.items():
                    frame.to_excel(writer, sheet_name=name, index=False)
                    text_not_formulas(writer.sheets[name])
        except OSError as exc:
            failure = exc.strerror or str(exc)
        gc.collect()
    finally:
        sys.unraisablehook = hook
    if failure is not None:
        raise OutputError(f"{path}: cannot write the file ({failure})")
    with atomic_path(path) as tmp:
        tmp.write_bytes(buffer.getvalue())
    return Path(path)

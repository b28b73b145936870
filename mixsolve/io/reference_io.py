"""Read a reference table of known concentrations: ``sample, component, concentration, unit``
and an optional ``group``.

The layout is that of the tidy results CSV, so the results of one run can serve as the
reference of another (its ``#`` provenance lines skipped; a results workbook read from its
``tidy`` sheet); other columns (``std_uncertainty``, ``sample_flags`` ...) are ignored. The
apostrophe mixsolve puts before a CSV name that would start a spreadsheet formula
(:mod:`mixsolve.io.cell_text`) is removed, so ``=a`` written as ``'=a`` reads back as ``=a``.
"""

from __future__ import annotations

import os

import pandas as pd

from mixsolve.errors import FileFormatError
from mixsolve.io.cell_text import unquote_cell
from mixsolve.io.results_io import tidy_sheet
from mixsolve.io.tables import header_names, parse_number, read_table
from mixsolve.names import check_spellings

REQUIRED = ("sample", "component", "concentration", "unit")


def _has_columns(cells: list[str]) -> bool:
    """The header row: it names every required column."""
    names = {c.strip().lower() for c in cells}
    return all(c in names for c in REQUIRED)


def read_reference(path: str | os.PathLike[str], *, sheet: str | None = None) -> pd.DataFrame:
    """Read a tidy reference table (CSV, TSV or XLSX).

    Returns
    -------
    DataFrame
        Columns ``sample``, ``component``, ``concentration`` (float), ``unit``, ``group``
        when the file has that optional column (which spectra belong together, for
        cross-validation: :func:`mixsolve.pls.reference.reference_matrix`) and ``line``
        (the file's line number, for messages); ``attrs["source"]`` is the file name.

    Raises
    ------
    FileFormatError, InputError
        Missing columns, an empty name or unit, a missing or non-numeric concentration;
        the message names the file, line and column. Two spellings of one sample or
        component name (``mix 1`` and ``mix 1 ``, ``Red`` and ``red``) are refused,
        naming both and their lines (:func:`mixsolve.names.check_spellings`).
    """
    # names as written; '#' lines (a results CSV's provenance) and a preamble skipped
    table = read_table(path, sheet=sheet if sheet is not None else tidy_sheet(path),
                       keep_spaces=True, find_header=_has_columns)
    names = header_names(table, REQUIRED, "a reference table", optional_note="optional: group")
    cols = {c: names.index(c) for c in (*REQUIRED, *(["group"] if "group" in names else []))}
    records = []
    for i, row in enumerate(table.rows):
        cells = list(row) + [""] * (len(names) - len(row))
        rec: dict[str, object] = {"line": table.lines[i]}
        for col, j in cols.items():
            if col == "concentration":
                rec[col] = parse_number(cells[j], table.decimal, table.where(i, j),
                                        allow_missing=False)
                continue
            text = str(cells[j])  # as written: check_spellings compares spellings
            core = text.strip()
            if not core:
                raise FileFormatError(f"{table.where(i, j)}: empty {col}")
            if col in ("unit", "group"):
                text = core
            # CSV/TSV only: an XLSX cell is text as it stands (mixsolve writes no apostrophe)
            if table.separator is not None and unquote_cell(core) != core:
                text = text.replace(core, unquote_cell(core), 1)  # spaces around kept
            rec[col] = text
        records.append(rec)
    frame = pd.DataFrame.from_records(records, columns=[*cols, "line"])
    for col in ("sample", "component"):  # names as people read them (mixsolve.names)
        frame[col] = check_spellings(frame[col], f"{table.name}, {col}s",
                                     frame["line"].tolist())
    frame.attrs["source"] = table.name
    return frame

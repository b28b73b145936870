"""Write tables, text and workbooks atomically (the tables are made in report/).

Text cells are spreadsheet-safe (:mod:`mixsolve.io.cell_text`): no cell of a CSV or XLSX
output can be opened as a formula.
"""

from __future__ import annotations

import gc
import io
import json
import os
import sys
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from mixsolve.errors import OutputError
from mixsolve.io.atomic import atomic_path
from mixsolve.io.cell_text import csv_line_end, safe_frame, text_not_formulas
from mixsolve.io.outputs import RECORD, recorded_files


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

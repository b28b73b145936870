"""Write tables, text and workbooks atomically (the tables are made in report/)."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from mixsolve.io.atomic import atomic_path


def write_table(table: pd.DataFrame, path: str | os.PathLike[str]) -> Path:
    """Write any DataFrame as UTF-8 CSV without its index; atomic."""
    with atomic_path(path) as tmp:
        table.to_csv(tmp, index=False, float_format="%.6g", lineterminator="\n")
    return Path(path)


def write_text(text: str, path: str | os.PathLike[str]) -> Path:
    """Write UTF-8 text (an HTML page, a report) to ``path``; atomic."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def write_workbook(sheets: dict[str, pd.DataFrame], path: str | os.PathLike[str]) -> Path:
    """Write DataFrames as the sheets of one XLSX workbook (openpyxl); atomic."""
    with atomic_path(path) as tmp, pd.ExcelWriter(tmp, engine="openpyxl") as writer:
        for name, frame in sheets.items():
            frame.to_excel(writer, sheet_name=name, index=False)
    return Path(path)

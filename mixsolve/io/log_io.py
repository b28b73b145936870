"""The instrument-check log: a CSV file that grows by one dated record per checked item.

Appending is atomic: the existing log and the new records are written together to a
temporary file beside the log, which then replaces it (:func:`mixsolve.io.atomic.atomic_path`),
so an interrupted run leaves the old log whole. Existing rows are kept as text, unchanged,
except that a cell that would start a spreadsheet formula is written with a leading
apostrophe (:mod:`mixsolve.io.cell_text`; a log written before that rule gains it on the
next append). :func:`read_log` gives back the text without that apostrophe.
"""

from __future__ import annotations

import csv
import io
import os
from pathlib import Path

import pandas as pd

from mixsolve.errors import FileFormatError
from mixsolve.io.atomic import atomic_path
from mixsolve.io.cell_text import csv_line_end, safe_cell, safe_frame, unquote_cell

#: Columns of the log, in order (docs/instrument_checks.md).
LOG_COLUMNS = ("timestamp", "check", "item", "measured", "expected", "low", "high", "unit",
               "result", "source", "settings", "note")


def read_log(path: str | os.PathLike[str]) -> list[list[str]]:
    """Rows of an existing log as text (header excluded); [] when the file does not exist.

    The apostrophe that makes a cell spreadsheet-safe is removed
    (:func:`mixsolve.io.cell_text.unquote_cell`), so the text is that of the records.

    Raises
    ------
    FileFormatError
        The file is not UTF-8 or its header is not that of a mixsolve instrument log.
    """
    target = Path(path)
    if not target.exists():
        return []
    if target.is_dir():
        raise FileFormatError(f"{target}: is a folder; give the log's file name")
    try:
        text = target.read_bytes().decode("utf-8")  # no newline translation: keep a CR cell
    except UnicodeDecodeError:
        raise FileFormatError(f"{target}: not UTF-8 text, so not a mixsolve instrument log") \
            from None
    except OSError as exc:
        raise FileFormatError(f"{target}: cannot read the log ({exc.strerror})") from None
    rows = [row for row in csv.reader(io.StringIO(text)) if row]
    if not rows:
        return []
    if tuple(rows[0]) != LOG_COLUMNS:
        raise FileFormatError(f"{target}, line 1: header {','.join(rows[0])[:60]!r} is not that "
                              f"of a mixsolve instrument log ({','.join(LOG_COLUMNS)})")
    return [[unquote_cell(cell) for cell in row] for row in rows[1:]]


def append_log(records: pd.DataFrame, path: str | os.PathLike[str]) -> Path:
    """Append ``records`` (columns :data:`LOG_COLUMNS`) to the log at ``path``, atomically.

    Numbers are written with 6 significant digits; the log is created with its header
    when it does not exist. Text cells of new and existing rows that would start a
    spreadsheet formula get a leading apostrophe (:func:`mixsolve.io.cell_text.safe_cell`).

    Raises
    ------
    FileFormatError
        ``path`` exists but is not a mixsolve instrument log.
    OutputError
        The log cannot be written.
    """
    old = [[safe_cell(cell) for cell in row] for row in read_log(path)]
    new = safe_frame(records.loc[:, list(LOG_COLUMNS)])
    end = csv_line_end(new, old)  # "\r\n" only when a cell holds a carriage return
    buffer = io.StringIO()
    new.to_csv(buffer, index=False, header=False, float_format="%.6g", lineterminator=end)
    with atomic_path(path) as tmp, tmp.open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle, lineterminator=end)
        writer.writerow(LOG_COLUMNS)
        writer.writerows(old)
        handle.write(buffer.getvalue())
    return Path(path)

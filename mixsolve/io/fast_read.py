"""Fast path for large, clean spectra text files (pandas' C parser into float arrays).

The careful reader (:mod:`mixsolve.io.tables`) keeps every cell as text so that it can name
the line and column of any problem; for a file with 10⁵ sample columns or 10⁶ long rows
that costs gigabytes and minutes. This path sniffs the separator and decimal mark from the
first lines, parses the body straight into float64 with ``pandas.read_csv`` and checks the
result (row widths, finite values, unique wavelengths and names). It returns ``None``
whenever anything is off; the careful reader then runs and reports the problem with its
place. Files too large for the careful reader get a streaming scan that finds the first
bad line without holding the file in memory.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import pandas as pd

from mixsolve.errors import FileFormatError
from mixsolve.io.tables import _detect_decimal, _detect_separator, _split, parse_number

#: Files at least this large use the fast path first (smaller ones are quick either way).
FAST_PATH_MIN_BYTES = 1_000_000
_NA = ["", "nan", "NaN", "NAN", "na", "NA", "n/a", "N/A"]
_HEAD_LINES = 200


def sniff(path: Path) -> tuple[list[tuple[int, str]], str, str] | None:
    """First non-blank lines (numbered), separator and decimal mark, or None if unsure."""
    numbered: list[tuple[int, str]] = []
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            for number, line in enumerate(fh, start=1):
                if line.strip():
                    numbered.append((number, line.rstrip("\r\n")))
                if len(numbered) >= _HEAD_LINES or sum(len(t) for _, t in numbered) > 4e6:
                    break
    except (UnicodeDecodeError, OSError):
        return None
    if len(numbered) < 2 or "\x00" in numbered[0][1]:
        return None
    try:
        sep = _detect_separator(numbered, path.name)
        parsed = _split(numbered, sep, path.name)
        decimal = _detect_decimal([[c.strip() for c in cells] for _, cells in parsed[1:]],
                                  [n for n, _ in parsed[1:]], sep, path.name)
    except FileFormatError:
        return None
    return numbered, sep, decimal


def read_numeric(path: Path, sep: str, decimal: str, header: list[str],
                 text_columns: tuple[int, ...] = ()) -> pd.DataFrame | None:
    """Parse the whole body with pandas; None if it does not parse cleanly as numbers.

    Columns listed in ``text_columns`` stay text; every other must be numeric. Rows are
    checked to have exactly the header's width (pandas would pad short rows silently).
    """
    width = len(header)
    if decimal == "." and not text_columns:
        try:  # numpy's C reader is several times faster than pandas for very wide tables
            values = np.loadtxt(path, delimiter=sep, skiprows=_first_data_skip(path),
                                dtype=float, ndmin=2, comments=None, encoding="utf-8-sig")
        except (ValueError, UnicodeDecodeError):
            values = None
        if values is not None:
            if values.shape[1] != width or np.isinf(values).any():
                return None
            return pd.DataFrame(values)
    dtypes: object = {i: (str if i in text_columns else float) for i in text_columns} \
        if text_columns else float
    if text_columns:
        dtypes = {i: (str if i in text_columns else float) for i in range(width)}
    try:
        frame = pd.read_csv(
            path, sep=sep, decimal=decimal, header=None, skiprows=_first_data_skip(path),
            names=list(range(width)), dtype=dtypes, encoding="utf-8-sig",
            keep_default_na=False, na_values=_NA, skip_blank_lines=True, engine="c",
            skipinitialspace=True, on_bad_lines="error", index_col=False)
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError, OverflowError):
        return None
    if not _widths_ok(path, sep, width):
        return None
    numeric = [c for c in frame.columns if c not in text_columns]
    if np.isinf(frame[numeric].to_numpy(dtype=float)).any():
        return None
    return frame


def _first_data_skip(path: Path) -> int:
    """Lines to skip so that the first data line is next (blank lines before the header)."""
    with open(path, encoding="utf-8-sig", newline="") as fh:
        for number, line in enumerate(fh):
            if line.strip():
                return number + 1
    return 0


def _widths_ok(path: Path, sep: str, width: int) -> bool:
    """Every non-blank line has ``width - 1`` separators (quoted files go the careful way)."""
    with open(path, encoding="utf-8-sig", newline="") as fh:
        for line in fh:
            if '"' in line:
                return False
            if line.strip() and line.count(sep) != width - 1:
                return False
    return True


def locate_problem(path: Path, sep: str, decimal: str, width: int,
                   text_columns: tuple[int, ...] = ()) -> None:
    """Stream the file and raise the first row-width or number problem with its place.

    Raises
    ------
    FileFormatError, InputError
        The first problem found. Returns quietly when every row parses.
    """
    name = path.name
    with open(path, encoding="utf-8-sig", newline="") as fh:
        header_seen = False
        for number, line in enumerate(fh, start=1):
            if not line.strip():
                continue
            cells = next(csv.reader(io.StringIO(line.rstrip("\r\n")), delimiter=sep))
            if not header_seen:
                header_seen = True
                continue
            if (len(cells) != width and any(c.strip() for c in cells[width:])) or \
                    len(cells) < width:
                raise FileFormatError(f"{name}, line {number}: {len(cells)} cells, but the "
                                      f"header has {width}")
            for j, cell in enumerate(cells[:width]):
                if j not in text_columns:
                    parse_number(cell.strip(), decimal, f"{name}, line {number}, column {j + 1}")

r"""Spreadsheet-safe text: no cell mixsolve writes can be run as a formula.

A spreadsheet opening a CSV file treats a cell that begins with ``=``, ``+``, ``-``, ``@``,
a tab or a carriage return as a formula, so a sample named ``=HYPERLINK(...)`` would run
when a lab opens its results. Following the common guidance on CSV (formula) injection
(common practice, e.g. the OWASP "CSV Injection" page), every text cell that begins with one
of those characters is written with one leading apostrophe (:func:`safe_cell`), which makes
it text. Numbers are left alone: a number cell, or text that is only a number such as
``-0.5`` (not a formula in any spreadsheet), is written as it is. XLSX cells keep their text
exactly but are string cells, never formulas (:func:`text_not_formulas`).

A carriage return inside a text cell must be quoted too, or a spreadsheet starts a new row
there (and may read what follows as a formula); Python's csv writer quotes only the
characters of its line terminator, so such a table is written with ``\r\n`` line ends
(:func:`csv_line_end`).

Escaping is undone by :func:`unquote_cell`, so names round-trip when mixsolve reads its own
CSV outputs back (a results CSV used as a reference table, the instrument log). A text that
already begins with apostrophes before one of those characters gets one more, so the round
trip is exact for every text.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from typing import Any

import pandas as pd

#: First characters that make a spreadsheet read a cell as a formula (common practice:
#: the OWASP "CSV Injection" guidance lists these six).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

# Text that is only a number (as mixsolve writes numbers: point decimal, exponent, inf, nan).
_NUMBER = re.compile(r"[+-]?(?:(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|inf(?:inity)?|nan)",
                     re.IGNORECASE | re.ASCII)


def _needs_quote(text: str) -> bool:
    """True when ``text`` (after any leading apostrophes) would start a formula."""
    bare = text.lstrip("'")
    return bare.startswith(FORMULA_START) and _NUMBER.fullmatch(bare) is None


def safe_cell(value: Any) -> Any:
    """One cell as written to CSV: text that would start a formula gets a leading ``'``.

    Parameters
    ----------
    value : object
        A cell value. Only ``str`` values are ever changed; numbers, NaN and other
        objects are returned as they are.

    Returns
    -------
    object
        ``"'" + value`` when ``value`` is text beginning with ``=``, ``+``, ``-``, ``@``, a
        tab or a carriage return (after any apostrophes) and is not just a number;
        otherwise ``value`` unchanged.
    """
    if isinstance(value, str) and _needs_quote(value):
        return "'" + value
    return value


def unquote_cell(text: Any) -> Any:
    """Undo :func:`safe_cell`: the text a cell held before it was written.

    Non-text values are returned unchanged; ``unquote_cell(safe_cell(x)) == x`` for any
    ``x``.
    """
    if isinstance(text, str) and text.startswith("'") and _needs_quote(text):
        return text[1:]
    return text


def _texts(column: pd.Series) -> list[str]:
    """The distinct text values of a column ([] for numeric, boolean and date columns)."""
    dtype = column.dtype
    if pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype) \
            or pd.api.types.is_datetime64_any_dtype(dtype):
        return []
    return [v for v in pd.unique(column.to_numpy(dtype=object)) if isinstance(v, str)]


def _safe_column(column: pd.Series) -> pd.Series | None:
    """``column`` with :func:`safe_cell` applied; None when no cell needs it."""
    changed = {v: safe_cell(v) for v in _texts(column) if _needs_quote(v)}
    if not changed:
        return None
    return column.astype(object).where(~column.isin(list(changed)), column.map(changed))


def safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A table ready for CSV: :func:`safe_cell` applied to every text cell and column name.

    Numeric, boolean and date columns are untouched (a negative number stays a number).
    The caller's DataFrame is never modified; it is returned itself when nothing needs
    escaping, else a shallow copy with the escaped columns replaced.
    """
    out = None
    for i in range(frame.shape[1]):
        column = _safe_column(frame.iloc[:, i])
        if column is not None:
            out = frame.copy(deep=False) if out is None else out
            out.isetitem(i, column)
    columns = [safe_cell(c) for c in frame.columns]
    if columns != list(frame.columns):
        out = frame.copy(deep=False) if out is None else out
        out.columns = columns
    return frame if out is None else out


def csv_line_end(frame: pd.DataFrame, rows: Iterable[Sequence[Any]] = ()) -> str:
    r"""Line end for a CSV of ``frame`` (and text ``rows``): ``"\n"``, or ``"\r\n"`` when a
    text cell or column name holds a carriage return, so that the csv writer quotes it."""
    texts = [c for c in frame.columns if isinstance(c, str)]
    texts += [v for i in range(frame.shape[1]) for v in _texts(frame.iloc[:, i])]
    texts += [v for row in rows for v in row if isinstance(v, str)]
    return "\r\n" if any("\r" in t for t in texts) else "\n"


def text_not_formulas(sheet: Any) -> None:
    """Make every formula cell of an openpyxl worksheet a string cell, text unchanged.

    openpyxl stores any text beginning with ``=`` as a formula; mixsolve never writes
    formulas, so each such cell is text from the data (a sample name) and is turned back
    into a string cell (``data_type = "s"``), which no spreadsheet evaluates.
    """
    for row in sheet.iter_rows():
        for cell in row:
            if cell.data_type == "f":
                cell.data_type = "s"

"""Read a delimited text table (CSV/TSV) or the first sheet of an XLSX workbook.

Text files: UTF-8 with or without BOM, any line ending; the separator (comma, semicolon
or tab) and the decimal mark (point or comma) are detected and recorded, never guessed
silently: an ambiguous or mixed file is refused with the reason. Cells stay as read
(text, or numbers from XLSX), stripped of surrounding white space unless the reader asks to
keep it (``keep_spaces``: readers that must tell ``'Ext03 '`` from ``'Ext03'``, see
:func:`mixsolve.names.check_spellings`); :func:`parse_number` turns one into a float and
names its place when it cannot.
"""

from __future__ import annotations

import csv
import io
import os
import re
import zipfile
import zlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io import limits
from mixsolve.io.limits import MAX_TEXT_BYTES, size_text

SEPARATORS = ("\t", ";", ",")
SEPARATOR_NAMES = {"\t": "tab", ";": "semicolon", ",": "comma", None: "xlsx"}
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+([eE][+-]?\d+)?$")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+([eE][+-]?\d+)?$")
_MISSING = {"", "nan", "na", "n/a"}
# Wide exports can hold 10^5 samples on one line: lift the csv module's 128 KiB cell cap.
csv.field_size_limit(2**31 - 1)
#: Lines searched for a table's header when the reader says what a header looks like: a
#: preamble (instrument, date, operator) longer than this is not looked through.
MAX_PREAMBLE_LINES = 200
#: Spellings of the axis units in a header cell or a units row, by the axis they mean.
AXIS_UNITS = {
    "nm": ("nm", "nanometer", "nanometers", "nanometre", "nanometres"),
    "wavenumber": ("cm-1", "cm^-1", "cm⁻¹", "1/cm", "/cm"),
    "micrometre": ("µm", "μm", "um", "micrometer", "micrometers", "micrometre", "micrometres",
                   "micron", "microns"),
}
_AXIS_NAMES = {"wavelength": "nm", "wave length": "nm", "λ": "nm", "lambda": "nm",
               "wl": "nm", "wavenumber": "wavenumber", "wave number": "wavenumber",
               "wavenumbers": "wavenumber"}
_AXIS_CELL = re.compile(
    r"^(?P<name>wavelength|wave length|λ|lambda|wl|wavenumbers?|wave number)?"
    r"(?:[\s_/]*(?:[(\[]\s*(?P<bracketed>[^)\]]+?)\s*[)\]]|(?P<bare>[^\s_/(\[][^\s(\[]*)))?$")


def axis_of(cell: object) -> str | None:
    """The axis a header cell names: ``"nm"``, ``"wavenumber"``, ``"micrometre"`` or None.

    Recognised, case-insensitive: a name (``wavelength``, ``λ``, ``lambda``, ``wl``,
    ``wavenumber``), a unit (``nm``, ``cm-1``, ``1/cm``, ``µm``...), or a name followed by
    its unit bare, after ``_`` or ``/``, or in brackets or parentheses: ``wavelength_nm``,
    ``Wavelength nm``, ``Wavelength (nm)``, ``Wavelength [nm]``, ``λ (nm)``,
    ``wavelength/nm``, ``Wavenumber (cm-1)``. A wavelength without a unit is in nm; a
    stated unit decides (``Wavelength (cm-1)`` is a wavenumber axis). Anything else
    (another unit, other words) is not an axis header.
    """
    text = " ".join(str(cell).strip().lstrip("\ufeff").lower().split())
    m = _AXIS_CELL.match(text)
    if m is None or not text:
        return None
    unit = m.group("bracketed") or m.group("bare")
    named = _AXIS_NAMES.get(m.group("name") or "")
    if unit is None:
        return named
    # the unit decides: "Wavelength (cm-1)" is a wavenumber axis, mislabelled
    return next((axis for axis, units in AXIS_UNITS.items() if unit in units), None)


def is_comment(line: str) -> bool:
    """A ``#`` comment line (its first character that is not white space is ``#``)."""
    return line.lstrip().startswith("#")



@dataclass
class RawTable:
    """Cells of a table as read, with their places in the file."""

    name: str
    header: list[str]
    rows: list[list[Any]]
    lines: list[int]
    header_line: int
    separator: str | None
    decimal: str
    notes: list[str] = field(default_factory=list)
    #: What the reader skipped before the header and between the rows (preamble lines,
    #: ``#`` comments), in words for the user; empty when nothing was skipped.
    skipped: list[str] = field(default_factory=list)

    def where(self, i: int, column: int | None = None) -> str:
        """Describe data row ``i`` (and a column) for an error message."""
        text = f"{self.name}, line {self.lines[i]}"
        if column is not None:
            label = self.header[column] if column < len(self.header) else ""
            text += f", column {column + 1}" + (f" ({label!r})" if label else "")
        return text


HeaderTest = Callable[[list[str]], bool]


def read_table(path: str | os.PathLike[str], *, sheet: str | None = None,
               keep_spaces: bool = False, find_header: HeaderTest | None = None) -> RawTable:
    """Read a CSV, TSV or XLSX table.

    Parameters
    ----------
    path : path-like
        The file. XLSX is recognised by its content, not only its suffix.
    sheet : str, optional
        XLSX sheet name; default the first sheet.
    keep_spaces : bool
        Keep the white space around the text of data cells (the header is always
        stripped), for readers that compare names as written; by default it is stripped.

    Returns
    -------
    RawTable
        Header (first non-blank row) and data rows, blank rows skipped.

    Raises
    ------
    FileFormatError
        Missing, unreadable, binary, non-UTF-8, empty or header-only files, and a second
        header below the first (with ``find_header``).
    """
    table = _load(path, sheet, _read_text, keep_spaces, find_header)
    if not table.rows:
        raise FileFormatError(f"{table.name}: header only, no data rows")
    return table


def read_rows(path: str | os.PathLike[str], *, sheet: str | None = None) -> RawTable:
    """Read every non-blank row of a CSV, TSV or XLSX file, assuming no header.

    For files that open with free text rather than a header (plate-reader exports): the
    separator is the one that splits the most lines into two or more cells (ties go to
    tab, then semicolon, then comma), and the decimal mark is detected over all cells,
    as :func:`read_table` does.

    Returns
    -------
    RawTable
        ``header`` empty and ``header_line`` 0; ``rows`` and ``lines`` hold every
        non-blank row (for XLSX, the first one too).

    Raises
    ------
    FileFormatError
        Missing, unreadable, binary, non-UTF-8 or empty files, or a text file in which
        no line has two cells.
    """
    table = _load(path, sheet, _read_text_rows, False, None)
    if table.header_line:  # XLSX: the reader took the first row as the header
        first = list(table.header)
        table = RawTable(table.name, [], [first, *table.rows],
                         [table.header_line, *table.lines], 0, None, ".", table.notes)
    return table


def _load(path: str | os.PathLike[str], sheet: str | None,
          read_text: Callable[..., RawTable], keep_spaces: bool,
          find_header: HeaderTest | None) -> RawTable:
    """Open ``path`` and read it as XLSX (by content) or with ``read_text``."""
    p = Path(path)
    name = p.name
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    if p.is_dir():
        raise FileFormatError(f"{path}: is a folder, not a table file")
    try:
        size = p.stat().st_size
        if size > MAX_TEXT_BYTES:
            raise FileFormatError(
                f"{name}: {size / 1e9:.1f} GB is more than the {MAX_TEXT_BYTES / 1e9:g} GB a "
                "text table may have; store large data as netCDF or Zarr")
        with open(p, "rb") as fh:
            head = fh.read(8)
            if head.startswith(b"PK\x03\x04"):
                return _read_xlsx(p, name, sheet, keep_spaces, find_header)
            return read_text(head + fh.read(), name, keep_spaces, find_header)
    except OSError as exc:
        raise FileFormatError(f"{path}: cannot read the file ({exc.strerror})") from None


def _numbered_lines(raw: bytes, name: str) -> list[tuple[int, str]]:
    """Decode UTF-8 text and number its non-blank lines (1 = first line of the file)."""
    if not raw.strip():
        raise FileFormatError(f"{name}: the file is empty")
    head = raw[:65536]
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or (
            len(head) >= 4 and head.count(b"\x00") * 3 > len(head)
            and (head[1::2].count(0) > len(head) // 3 or head[0::2].count(0) > len(head) // 3)):
        raise FileFormatError(f"{name}: UTF-16 text; save the file as UTF-8 (CSV UTF-8 in a "
                              "spreadsheet program)")
    if b"\x00" in head:
        raise FileFormatError(f"{name}: binary data, not a text table (CSV, TSV) or XLSX file")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise FileFormatError(
            f"{name}, line {line}: byte 0x{raw[exc.start]:02x} is not UTF-8 text; save the "
            "file as UTF-8 (CSV UTF-8 in a spreadsheet program)") from None
    lines = text.splitlines()
    numbered = [(i + 1, ln) for i, ln in enumerate(lines) if ln.strip()]
    if not numbered:
        raise FileFormatError(f"{name}: the file is empty")
    return numbered


def _read_text(raw: bytes, name: str, keep_spaces: bool,
               find_header: HeaderTest | None = None) -> RawTable:
    numbered = _numbered_lines(raw, name)
    skipped: list[str] = []
    if find_header is not None:
        numbered, skipped = _after_preamble(numbered, find_header, name)
    separator = _detect_separator(numbered, name)
    parsed = _split(numbered, separator, name)
    if find_header is not None:
        _refuse_second_header([c for _, c in parsed[2:]], [n for n, _ in parsed[2:]],
                              find_header, name)
    header_line, header = parsed[0]
    header = [h.strip() for h in header]
    stripped = [[c.strip() for c in cells] for _, cells in parsed[1:]]
    row_lines = [ln for ln, _ in parsed[1:]]
    decimal = _detect_decimal(stripped, row_lines, separator, name)
    rows = [cells for _, cells in parsed[1:]] if keep_spaces else stripped
    return RawTable(name, header, rows, row_lines, header_line, separator, decimal,
                    skipped=skipped)


def _line_range(numbers: list[int]) -> str:
    if len(numbers) == 1:
        return f"line {numbers[0]}"
    if numbers[-1] - numbers[0] + 1 == len(numbers):
        return f"lines {numbers[0]}-{numbers[-1]}"
    return "lines " + ", ".join(map(str, numbers[:5])) + (", ..." if len(numbers) > 5 else "")


def _skipped_text(preamble: list[tuple[int, str]], comments: list[int]) -> list[str]:
    """What was skipped, in words: the preamble (with its first line) and the comments."""
    out = []
    if preamble:
        first = " ".join(str(preamble[0][1]).split())[:60]
        out.append(f"skipped {len(preamble)} line(s) before the header "
                   f"({_line_range([n for n, _ in preamble])}, from {first!r})")
    if comments:
        out.append(f"skipped {len(comments)} comment line(s) starting with '#' "
                   f"({_line_range(comments)})")
    return out


def _after_preamble(numbered: list[tuple[int, str]], find_header: HeaderTest, name: str
                    ) -> tuple[list[tuple[int, str]], list[str]]:
    """The lines from the header on, without ``#`` comments, and what was skipped."""
    comments = [n for n, line in numbered if is_comment(line)]
    lines = [(n, line) for n, line in numbered if not is_comment(line)]
    if not lines:
        raise FileFormatError(f"{name}: every line is a '#' comment; no table")
    for k, (_, line) in enumerate(lines[:MAX_PREAMBLE_LINES]):
        for sep in SEPARATORS:
            try:
                cells = next(csv.reader(io.StringIO(line), delimiter=sep))
            except csv.Error:
                continue
            if len(cells) >= 2 and find_header([c.strip() for c in cells]):
                return lines[k:], _skipped_text(lines[:k], comments)
    return lines, _skipped_text([], comments)


def _refuse_second_header(rows: Sequence[Sequence[Any]], lines: list[int],
                          find_header: HeaderTest, name: str) -> None:
    """Refuse a header among ``rows`` (from the second row under the header on: the first
    may be a units row, ``nm, AU``, which the caller judges)."""
    for cells, number in zip(rows, lines, strict=True):
        texts = [str(c).strip() for c in cells]
        if texts and find_header(texts):
            raise FileFormatError(
                f"{name}, line {number}: a second header ({', '.join(map(repr, texts[:3]))}); "
                "one table per file: split the file there, or delete the line")


def _read_text_rows(raw: bytes, name: str, keep_spaces: bool,
                    find_header: HeaderTest | None = None) -> RawTable:
    numbered = _numbered_lines(raw, name)
    scores = {sep: sum(len(next(csv.reader(io.StringIO(line), delimiter=sep))) >= 2
                       for _, line in numbered) for sep in SEPARATORS}
    separator = max(SEPARATORS, key=lambda sep: scores[sep])  # first of the best: tab, ;, ,
    if scores[separator] == 0:
        raise FileFormatError(
            f"{name}: no line has two or more cells separated by commas, semicolons or tabs")
    parsed = _split(numbered, separator, name)
    stripped = [[c.strip() for c in cells] for _, cells in parsed]
    lines = [ln for ln, _ in parsed]
    decimal = _detect_decimal(stripped, lines, separator, name)
    rows = [cells for _, cells in parsed] if keep_spaces else stripped
    return RawTable(name, [], rows, lines, 0, separator, decimal)


def _split(numbered: list[tuple[int, str]], sep: str, name: str) -> list[tuple[int, list[str]]]:
    out = []
    for number, line in numbered:
        try:
            cells = next(csv.reader(io.StringIO(line), delimiter=sep))
        except csv.Error as exc:
            raise FileFormatError(f"{name}, line {number}: {exc}") from None
        out.append((number, cells))
    return out


def _detect_separator(numbered: list[tuple[int, str]], name: str) -> str:
    header = numbered[0][1]
    sample = numbered[: 200]
    best, best_score = None, -1
    for sep in SEPARATORS:
        width = len(next(csv.reader(io.StringIO(header), delimiter=sep)))
        if width < 2:
            continue
        score = sum(
            len(next(csv.reader(io.StringIO(line), delimiter=sep))) == width
            for _, line in sample)
        if score > best_score:
            best, best_score = sep, score
    if best is None:
        raise FileFormatError(
            f"{name}, line {numbered[0][0]}: the header has one column only; expected columns "
            "separated by commas, semicolons or tabs")
    return best


def _detect_decimal(rows: list[list[str]], lines: list[int], sep: str, name: str) -> str:
    if sep == ",":
        return "."
    comma = point = None
    for row, line in zip(rows, lines, strict=True):
        for cell in row:
            if comma is None and _DECIMAL_COMMA.match(cell):
                comma = line
            elif point is None and _DECIMAL_POINT.match(cell):
                point = line
        if comma is not None and point is not None:
            raise FileFormatError(
                f"{name}: mixed decimal marks (comma on line {comma}, point on line {point}); "
                "use one decimal mark throughout")
    return "," if comma is not None else "."


def xlsx_expanded_bytes(data: bytes) -> int:
    """Declared uncompressed size (bytes) of the XML a workbook's reader would parse.

    The sizes come from the zip directory (``zipfile.ZipInfo.file_size``), before anything
    is decompressed. They cannot understate what is read: :mod:`zipfile`, which openpyxl
    uses, stops a member's stream at its declared size and then fails its CRC check.

    Raises
    ------
    zipfile.BadZipFile
        Not a zip archive.
    """
    with zipfile.ZipFile(io.BytesIO(data)) as archive:
        return sum(info.file_size for info in archive.infolist()
                   if info.filename.lower().endswith((".xml", ".rels")))


def _check_xlsx_size(data: bytes, name: str) -> None:
    """Refuse a workbook whose XML expands beyond the in-memory limit, before parsing it."""
    limit = limits.CAREFUL_MAX_BYTES
    try:
        size = xlsx_expanded_bytes(data)
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise FileFormatError(f"{name}: not a readable XLSX workbook ({exc})") from None
    if size > limit:
        raise FileFormatError(
            f"{name}: the workbook expands to {size_text(size)} of XML (declared "
            f"uncompressed size), more than the {size_text(limit)} an XLSX input may hold; "
            "save the sheet as CSV or split the workbook")


def _read_xlsx(p: Path, name: str, sheet: str | None, keep_spaces: bool,
               find_header: HeaderTest | None = None) -> RawTable:
    import openpyxl  # deferred: only XLSX input needs it

    data = p.read_bytes()
    _check_xlsx_size(data, name)
    try:
        # From bytes, not the path: openpyxl judges a path by its suffix, and a workbook
        # saved under another name (data.csv) is still a workbook.
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises zipfile/KeyError/etc. on damaged files
        raise FileFormatError(f"{name}: not a readable XLSX workbook ({exc})") from None
    try:
        if sheet is not None and sheet not in book.sheetnames:
            raise FileFormatError(
                f"{name}: no sheet {sheet!r}; sheets are {', '.join(book.sheetnames)}")
        ws = book[sheet] if sheet is not None else book.worksheets[0]
        numbered = []
        try:  # read-only sheets are decompressed and parsed only now, row by row
            for number, values in enumerate(ws.iter_rows(values_only=True), start=1):
                cells = ["" if v is None else v for v in values]
                if any(str(c).strip() for c in cells):
                    numbered.append((number, cells))
        except (zipfile.BadZipFile, zlib.error, EOFError, SyntaxError, ValueError,
                KeyError, TypeError) as exc:  # XML parse errors subclass SyntaxError
            raise FileFormatError(f"{name}: sheet {ws.title!r} is damaged "
                                  f"({' '.join(str(exc).split())[:120]})") from None
    finally:
        book.close()
    if not numbered:
        raise FileFormatError(f"{name}: the first sheet is empty")
    skipped: list[str] = []
    if find_header is not None:
        comments = [n for n, cells in numbered if is_comment(str(cells[0]))]
        numbered = [(n, cells) for n, cells in numbered if not is_comment(str(cells[0]))]
        start = next((k for k, (_, cells) in enumerate(numbered[:MAX_PREAMBLE_LINES])
                      if find_header([str(c).strip() for c in cells])), 0)
        skipped = _skipped_text([(n, " ".join(str(c) for c in cells if str(c).strip()))
                                 for n, cells in numbered[:start]], comments)
        numbered = numbered[start:]
        if not numbered:
            raise FileFormatError(f"{name}: every row is a '#' comment; no table")
        _refuse_second_header([c for _, c in numbered[2:]], [n for n, _ in numbered[2:]],
                              find_header, name)
    header_line, header = numbered[0]
    header_text = [str(h).strip() for h in header]
    while header_text and not header_text[-1]:
        header_text.pop()
    rows = [[c.strip() if isinstance(c, str) and not keep_spaces else c for c in cells]
            for _, cells in numbered[1:]]
    return RawTable(name, header_text, rows, [n for n, _ in numbered[1:]], header_line, None,
                    ".", [f"sheet {ws.title!r}"], skipped)


def parse_number(cell: Any, decimal: str, where: str, *, allow_missing: bool = True) -> float:
    """Turn one table cell into a float.

    Empty cells and ``NaN``/``NA`` text are missing readings (NaN) when
    ``allow_missing``; anything else that is not a finite number is refused.

    Raises
    ------
    InputError
        Text that is not a number, an infinite value, or a missing value where one
        is required; the message starts with ``where``.
    """
    fix = "; write it as a number (digits and one decimal separator, no unit)" + (
        " or leave the cell empty" if allow_missing else "")
    if isinstance(cell, bool):
        raise InputError(f"{where}: {cell!r} is not a number{fix}")
    if isinstance(cell, int | float):
        value = float(cell)
    else:
        text = str(cell).strip()
        if text.lower() in _MISSING:
            value = float("nan")
        else:
            if decimal == ",":
                if "." in text:
                    raise InputError(f"{where}: {text!r} uses a decimal point but the file "
                                     "uses decimal commas")
                text = text.replace(",", ".")
            try:
                value = float(text)
            except ValueError:
                raise InputError(f"{where}: {str(cell)!r} is not a number{fix}") from None
    if np.isnan(value):
        if not allow_missing:
            raise InputError(f"{where}: value is missing")
        return value
    if not np.isfinite(value):
        raise InputError(f"{where}: {cell!r} is infinite; leave the cell empty for a missing "
                         "reading")
    return value


def header_names(table: RawTable, required: Sequence[str], what: str,
                 *, optional_note: str = "") -> list[str]:
    """The header of ``table`` as lower-case column names, checked for required columns.

    Parameters
    ----------
    table : RawTable
        From :func:`read_table`.
    required : sequence of str
        Lower-case names every such table must have, in the order a message lists them.
    what : str
        What the table is, for the message (``"a reference table"``).
    optional_note : str
        Added in brackets after the list of required columns (``"optional: pathlength_cm"``).

    Returns
    -------
    list of str
        Every header cell stripped, without a byte-order mark, lower-cased; a column's
        index in this list is its index in the rows.

    Raises
    ------
    FileFormatError
        ``"<file>, line <n>: missing column(s) <names>; <what> has columns <required>"``.
    """
    names = [str(h).strip().lstrip("\ufeff").lower() for h in table.header]
    missing = [c for c in required if c not in names]
    if missing:
        note = f" ({optional_note})" if optional_note else ""
        raise FileFormatError(
            f"{table.name}, line {table.header_line}: missing column(s) {', '.join(missing)}; "
            f"{what} has columns {', '.join(required)}{note}")
    return names

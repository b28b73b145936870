"""Read microplate exports in three generic layouts into a labelled array.

- **grid blocks**: per wavelength, a line naming it (``Wavelength: 450 nm``, ``450``,
  ``λ;450 nm``), a header row of column numbers (1–12 or 1–24), then one row per plate
  row lettered A, B, ... with the readings. Blank and free-text lines before, between and
  after blocks are ignored.
- **well columns**: a ``wavelength_nm`` column and one column per well (``A1`` or ``A01``).
- **long**: columns ``well``, ``wavelength_nm`` and ``absorbance``, in any order.

96-well (8 × 12) and 384-well (16 × 24) plates; comma, semicolon or tab separators,
decimal comma, CSV/TSV/XLSX (:func:`mixsolve.io.tables.read_rows`). A non-numeric reading
(``OVER``, ``*****``, ``Err``) is a missing reading of that well at that wavelength; it is
kept as NaN and recorded in ``attrs["markers"]``, never dropped silently. Readings in
transmittance are converted to absorbance (``quantity``); a transmittance ≤ 0 is a
missing reading recorded as the marker ``dark``.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Callable
from typing import Any

import numpy as np
import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.tables import SEPARATOR_NAMES, RawTable, axis_of, parse_number, read_rows
from mixsolve.plate.wells import (
    PLATE_SHAPES,
    ROW_LETTERS,
    WELL,
    on_plate,
    parse_well,
    plate_range,
    plate_size_for,
    well_name,
)
from mixsolve.spectra import (
    QUANTITIES,
    WAVELENGTH,
    Quantity,
    check_option,
    check_spectra,
    to_absorbance,
)

GRID, WELL_COLUMNS, LONG = "grid blocks", "well columns", "long"
_NUMERIC = re.compile(r"^[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?$")
_NM = re.compile(r"(\d+(?:[.,]\d+)?)\s*nm\b", re.IGNORECASE)
_NUMBER = re.compile(r"(?<![\w.,])(\d+(?:[.,]\d+)?)(?![\w.,])")
LAYOUT_HELP = (
    "expected grid blocks (a line naming the wavelength, a header of column numbers 1-12 or "
    "1-24, rows lettered A-H or A-P), well columns (wavelength_nm, A1, A2, ...) or long "
    "(well, wavelength_nm, absorbance); see docs/plates.md")

#: The marker of a transmittance reading ≤ 0 (no light reached the detector).
DARK = "dark"

Readings = tuple[list[str], np.ndarray, np.ndarray, dict[str, list[tuple[float, str]]]]


def read_plate(
    path: str | os.PathLike[str],
    *,
    sheet: str | None = None,
    plate_size: int | None = None,
    quantity: Quantity | None = None,
) -> xr.DataArray:
    """Read a plate-reader export (grid blocks, well columns or long; see the module doc).

    Parameters
    ----------
    path : path-like
        CSV, TSV or XLSX export.
    sheet : str, optional
        XLSX sheet; default the first.
    plate_size : {96, 384}, optional
        Plate format; by default the grid's size, or for the other layouts the smallest
        format holding every well named.
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What the readings are, converted to absorbance
        (:func:`mixsolve.spectra.to_absorbance`); a transmittance ≤ 0 becomes NaN with
        the marker ``dark``. Omitted: absorbance, and readings that cannot be absorbance
        are refused, naming the option.

    Returns
    -------
    DataArray with dims ("well", "wavelength")
        Raw absorbance (AU), wells in plate order (A1, A2, ...), wavelengths ascending
        (nm); NaN where a reading is missing. ``attrs``: ``layout`` (which of the three
        was found), ``plate_size``, ``separator``, ``decimal``, ``source``, ``markers``
        (JSON: well → list of [wavelength nm, marker text]) and ``quantity_read``.

    Raises
    ------
    FileFormatError, InputError
        No layout recognised, malformed blocks, unknown or repeated wells, repeated
        wavelengths, wells off the plate, readings that cannot be absorbance when
        ``quantity`` is omitted; the message names file, line, well and value.
    """
    if plate_size is not None and plate_size not in PLATE_SHAPES:
        raise InputError(f"plate_size: {plate_size!r} is not one of 96, 384")
    if quantity is not None:
        check_option(quantity, QUANTITIES, "quantity")
    table = read_rows(path, sheet=sheet)
    layout, reader = _detect(table)
    wells, wavelengths, values, markers = reader(table)
    positions = [parse_well(w) for w in wells]
    size = plate_size or plate_size_for(p for p in positions if p is not None)
    for w, pos in zip(wells, positions, strict=True):
        if pos is None or size is None or not on_plate(pos, size):
            shown = f"a {size}-well plate ({plate_range(size)})" if size else "a 384-well plate"
            raise InputError(f"{table.name}: well {w} is not on {shown}")
    order = np.argsort([r * 100 + c for r, c in positions])  # type: ignore[misc]
    wl_order = np.argsort(wavelengths)
    da = xr.DataArray(
        values[np.ix_(order, wl_order)],
        dims=(WELL, WAVELENGTH),
        coords={WELL: [wells[i] for i in order], WAVELENGTH: wavelengths[wl_order]},
        name="absorbance",
        attrs={
            "quantity": "absorbance",
            "source": table.name,
            "layout": layout,
            "plate_size": int(size),  # type: ignore[arg-type]
            "separator": SEPARATOR_NAMES[table.separator],
            "decimal": table.decimal,
            "sheet": "; ".join(table.notes),
        },
    )
    absorbance = to_absorbance(da, quantity, table.name)
    dark = np.isfinite(da.values) & np.isnan(absorbance.values)
    for i, j in zip(*np.nonzero(dark), strict=True):
        well, wl = str(da[WELL].values[i]), float(da[WAVELENGTH].values[j])
        markers.setdefault(well, []).append((wl, DARK))
    absorbance.attrs["markers"] = json.dumps(markers)
    return check_spectra(absorbance, table.name)


# --- cells -------------------------------------------------------------------------------


def _is_wavelength(cell: Any) -> bool:
    """A header cell naming a wavelength column in nm (the spectra tables' spellings,
    :func:`mixsolve.io.tables.axis_of`)."""
    return axis_of(_text(cell)) == "nm"


def _text(cell: Any) -> str:
    return "" if cell is None else str(cell).strip().lstrip("\ufeff")


def _trimmed(row: list[Any]) -> list[Any]:
    end = len(row)
    while end and not _text(row[end - 1]):
        end -= 1
    return row[:end]


def _reading(cell: Any, decimal: str, where: str) -> tuple[float, str | None]:
    """A reading as a float, or NaN and the marker text for a non-numeric cell."""
    if isinstance(cell, str) and (decimal == "." or "." not in cell) and "_" not in cell:
        try:  # fast path for plain numbers; anything unusual takes the checked path below
            value = float(cell.replace(",", ".") if decimal == "," else cell)
            if math.isfinite(value):
                return value, None
        except ValueError:
            pass
    if isinstance(cell, str) and not _NUMERIC.match(cell.strip()):
        try:
            return parse_number(cell, decimal, where), None  # empty, NaN, NA: missing
        except InputError:
            return float("nan"), cell.strip()
    return parse_number(cell, decimal, where), None


def _wavelength_cell(cell: Any, decimal: str, where: str) -> float:
    text = cell if not isinstance(cell, str) else re.sub(r"\s*nm$", "", cell.strip(),
                                                         flags=re.IGNORECASE)
    w = parse_number(text, decimal, f"{where} wavelength", allow_missing=False)
    if w <= 0:
        raise InputError(f"{where}: wavelength {w:g} nm is not positive")
    return w


def _is_number(cell: Any) -> bool:
    if isinstance(cell, bool):
        return False
    return isinstance(cell, int | float) or bool(_NUMERIC.match(re.sub(
        r"\s*nm$", "", _text(cell), flags=re.IGNORECASE)))


def _int_cell(cell: Any) -> int | None:
    if isinstance(cell, bool):
        return None
    if isinstance(cell, int | float) and float(cell).is_integer():
        return int(cell)
    text = _text(cell)
    return int(text) if text.isdigit() else None


# --- layout detection --------------------------------------------------------------------


def _detect(table: RawTable) -> tuple[str, Callable[[RawTable], Readings]]:
    for i, row in enumerate(table.rows[:-1]):
        head = _grid_header(row)
        if head is not None:
            nxt = table.rows[i + 1]
            if len(nxt) > head[0] and _text(nxt[head[0]]).upper() == "A":
                return GRID, _read_grid
    for row in table.rows:
        names = [_text(c).lower() for c in row]
        if "well" in names and "absorbance" in names and any(
                _is_wavelength(n) for n in names):
            return LONG, _read_long
    for row in table.rows:
        if row and _is_wavelength(row[0]) and any(
                parse_well(c) for c in row[1:]):
            return WELL_COLUMNS, _read_well_columns
    raise FileFormatError(f"{table.name}: no plate layout found; {LAYOUT_HELP}")


def _grid_header(row: list[Any]) -> tuple[int, int] | None:
    """(column of the row letters, number of plate columns) for a header 1..N, else None."""
    cells = _trimmed(row)
    for start in range(4):
        numbers = cells[start:]
        if len(numbers) not in (12, 24):
            continue
        if all(_int_cell(c) == k + 1 for k, c in enumerate(numbers)) and all(
                _int_cell(c) is None for c in cells[:start]):
            return max(start - 1, 0), len(numbers)
    return None


# --- grid blocks -------------------------------------------------------------------------


def _block_wavelength(table: RawTable, i: int) -> float:
    """The wavelength named on line ``i`` (the line before a block's header)."""
    text = " ".join(_text(c) for c in table.rows[i] if _text(c))
    found = _NM.findall(text) or _NUMBER.findall(text)
    where = f"{table.name}, line {table.lines[i]}"
    if len(found) != 1:
        raise FileFormatError(
            f"{where}: cannot tell the wavelength of the next block from {text!r}; the line "
            "before a header of plate columns must name one wavelength, e.g. "
            "'Wavelength: 450 nm'")
    w = float(found[0].replace(",", "."))
    if w <= 0:
        raise InputError(f"{where}: wavelength {w:g} nm is not positive")
    return w


def _read_grid(table: RawTable) -> Readings:
    blocks: list[tuple[float, np.ndarray, list[list[str | None]]]] = []
    seen: dict[float, int] = {}
    shape: tuple[int, int] | None = None
    i, used_until = 0, -1
    while i < len(table.rows):
        head = _grid_header(table.rows[i])
        if head is None:
            i += 1
            continue
        where = f"{table.name}, line {table.lines[i]}"
        if i - 1 <= used_until:
            raise FileFormatError(
                f"{where}: no wavelength line before this header of plate columns; a block "
                "starts with a line naming its wavelength, e.g. 'Wavelength: 450 nm'")
        wl = _block_wavelength(table, i - 1)
        if wl in seen:
            raise InputError(f"{table.name}, line {table.lines[i - 1]}: wavelength {wl:g} nm "
                             f"appears twice (also on line {seen[wl]})")
        seen[wl] = table.lines[i - 1]
        letter_col, n_cols = head
        values, marks, end = _grid_rows(table, i + 1, letter_col, n_cols, wl)
        n_rows = values.shape[0]
        expected = {12: 8, 24: 16}[n_cols]
        if n_rows != expected:
            raise FileFormatError(
                f"{where}: the block at {wl:g} nm has rows A-{ROW_LETTERS[n_rows - 1]} "
                f"({n_rows}); a {expected * n_cols}-well block has rows "
                f"A-{ROW_LETTERS[expected - 1]}")
        if shape is not None and shape != values.shape:
            raise FileFormatError(
                f"{where}: a {values.size}-well block at {wl:g} nm after "
                f"{shape[0] * shape[1]}-well blocks; one export holds one plate format")
        shape = values.shape
        blocks.append((wl, values, marks))
        used_until = end - 1
        i = end
    n_rows, n_cols = shape  # type: ignore[misc]
    wells = [well_name(r, c) for r in range(n_rows) for c in range(1, n_cols + 1)]
    wavelengths = np.array([b[0] for b in blocks])
    values = np.stack([b[1].ravel() for b in blocks], axis=1)
    markers: dict[str, list[tuple[float, str]]] = {}
    for wl, _, marks in blocks:
        for r, row_marks in enumerate(marks):
            for c, text in enumerate(row_marks):
                if text is not None:
                    markers.setdefault(well_name(r, c + 1), []).append((wl, text))
    return wells, wavelengths, values, markers


def _grid_rows(table: RawTable, start: int, letter_col: int, n_cols: int, wl: float
               ) -> tuple[np.ndarray, list[list[str | None]], int]:
    """Read the lettered rows of one block from row ``start``; return values, markers, end."""
    rows: list[list[float]] = []
    marks: list[list[str | None]] = []
    i = start
    max_rows = {12: 8, 24: 16}[n_cols]
    while i < len(table.rows) and len(rows) < max_rows:
        cells = table.rows[i]
        letter = _text(cells[letter_col]).upper() if len(cells) > letter_col else ""
        if letter != ROW_LETTERS[len(rows)]:
            break
        where = f"{table.name}, line {table.lines[i]}"
        first = letter_col + 1
        row_cells = list(cells[first:first + n_cols])
        if len(row_cells) < n_cols:
            raise FileFormatError(f"{where}: row {letter} of the block at {wl:g} nm has "
                                  f"{len(row_cells)} cells for {n_cols} columns")
        if any(_text(c) for c in cells[first + n_cols:]):
            raise FileFormatError(f"{where}: row {letter} of the block at {wl:g} nm has values "
                                  f"beyond column {n_cols}")
        parsed = [_reading(c, table.decimal,
                           f"{where}, well {letter}{k + 1}") for k, c in enumerate(row_cells)]
        rows.append([v for v, _ in parsed])
        marks.append([m for _, m in parsed])
        i += 1
    if not rows:
        raise FileFormatError(
            f"{table.name}, line {table.lines[start - 1]}: the header of the block at {wl:g} nm "
            "is not followed by a row lettered A")
    return np.array(rows, dtype=float), marks, i


# --- well columns and long tables --------------------------------------------------------


def _data_rows(table: RawTable, start: int, is_data: Callable[[list[Any]], bool],
               expect: str) -> list[int]:
    """Indices of the data rows from ``start``; free text may follow them, not interrupt."""
    out = []
    i = start
    while i < len(table.rows) and is_data(table.rows[i]):
        out.append(i)
        i += 1
    stop = i
    for j in range(stop, len(table.rows)):
        if is_data(table.rows[j]):
            raise FileFormatError(
                f"{table.name}, line {table.lines[stop]}: {_text(table.rows[stop][0])!r} "
                f"interrupts the data rows ({expect} expected); remove the line or fix it")
    if not out:
        raise FileFormatError(f"{table.name}, line {table.lines[start - 1]}: header without "
                              f"data rows ({expect} expected on the next line)")
    return out


def _check_duplicate_wells(table: RawTable, i: int, names: list[str]) -> None:
    """Refuse a well named twice in the header (``names`` start in the second column)."""
    seen: dict[str, int] = {}
    for j, name in enumerate(names):
        if name in seen:
            raise InputError(f"{table.name}, line {table.lines[i]}: well {name} appears twice "
                             f"(columns {seen[name] + 2} and {j + 2})")
        seen[name] = j


def _read_well_columns(table: RawTable) -> Readings:
    h = next(i for i, row in enumerate(table.rows) if row and _is_wavelength(row[0])
             and any(parse_well(c) for c in row[1:]))
    header = _trimmed(table.rows[h])
    wells = []
    for j, cell in enumerate(header[1:], start=1):
        pos = parse_well(cell)
        if pos is None:
            raise FileFormatError(
                f"{table.name}, line {table.lines[h]}, column {j + 1}: {_text(cell)!r} is not a "
                "well name (A1 or A01); a well-columns export has wavelength_nm, then one "
                "column per well")
        wells.append(well_name(*pos))
    _check_duplicate_wells(table, h, wells)
    data = _data_rows(table, h + 1, lambda r: bool(r) and _is_number(r[0]),
                      "a wavelength in the first column")
    wavelengths = np.empty(len(data))
    values = np.empty((len(wells), len(data)))
    markers: dict[str, list[tuple[float, str]]] = {}
    first_line: dict[float, int] = {}
    for k, i in enumerate(data):
        row, where = table.rows[i], f"{table.name}, line {table.lines[i]}"
        if len(_trimmed(row)) > len(header):
            raise FileFormatError(f"{where}: {len(_trimmed(row))} cells, but the header has "
                                  f"{len(header)}")
        w = _wavelength_cell(row[0], table.decimal, where)
        if w in first_line:
            raise InputError(f"{where}: wavelength {w:g} nm appears twice (also on line "
                             f"{first_line[w]})")
        first_line[w] = table.lines[i]
        wavelengths[k] = w
        cells = list(row[1:len(header)]) + [""] * (len(header) - len(row))
        for j, cell in enumerate(cells):
            values[j, k], mark = _reading(cell, table.decimal, f"{where}, well {wells[j]}")
            if mark is not None:
                markers.setdefault(wells[j], []).append((w, mark))
    return wells, wavelengths, values, markers


def _read_long(table: RawTable) -> Readings:
    def names_of(row: list[Any]) -> list[str]:
        return [_text(c).lower() for c in row]

    h = next(i for i, row in enumerate(table.rows) if "well" in names_of(row)
             and "absorbance" in names_of(row)
             and any(_is_wavelength(n) for n in names_of(row)))
    names = names_of(table.rows[h])
    w_col, a_col = names.index("well"), names.index("absorbance")
    l_col = next(j for j, n in enumerate(names) if _is_wavelength(n))
    need = max(w_col, l_col, a_col) + 1
    data = _data_rows(table, h + 1, lambda r: len(r) > w_col and parse_well(r[w_col])
                      is not None, f"a well name in column {w_col + 1}")
    readings: dict[str, dict[float, float]] = {}
    markers: dict[str, list[tuple[float, str]]] = {}
    first_line: dict[tuple[str, float], int] = {}
    for i in data:
        row, where = table.rows[i], f"{table.name}, line {table.lines[i]}"
        if len(row) < need:
            raise FileFormatError(f"{where}: {len(row)} cells, expected at least {need}")
        well = well_name(*parse_well(row[w_col]))  # type: ignore[misc]
        w = _wavelength_cell(row[l_col], table.decimal, where)
        if (well, w) in first_line:
            raise InputError(f"{where}: well {well} has wavelength {w:g} nm twice (also on "
                             f"line {first_line[(well, w)]})")
        first_line[(well, w)] = table.lines[i]
        value, mark = _reading(row[a_col], table.decimal, f"{where}, well {well}")
        readings.setdefault(well, {})[w] = value
        if mark is not None:
            markers.setdefault(well, []).append((w, mark))
    grid = np.unique(np.concatenate([np.fromiter(r, float) for r in readings.values()]))
    values = np.full((len(readings), grid.size), np.nan)
    for k, spectrum in enumerate(readings.values()):
        values[k, np.searchsorted(grid, np.fromiter(spectrum, float))] = list(spectrum.values())
    return list(readings), grid, values, markers

"""Read spectra tables (wide or long layout) into labelled arrays.

Wide: first column ``wavelength_nm`` (or ``wavelength``), one column per sample.
Long: columns ``sample``, ``wavelength_nm`` (or ``wavelength``) and ``absorbance``,
in any order. The layout found is recorded in ``attrs["layout"]``.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io import fast_read, limits
from mixsolve.io.tables import (
    MAX_TEXT_BYTES,
    SEPARATOR_NAMES,
    RawTable,
    parse_number,
    read_table,
)
from mixsolve.names import check_unique_names, normalise_name
from mixsolve.spectra import (
    QUANTITIES,
    SAMPLE,
    WAVELENGTH,
    Quantity,
    check_number,
    check_option,
    check_spectra,
    to_absorbance,
)

WAVELENGTH_HEADERS = ("wavelength_nm", "wavelength", "wavelength (nm)", "wavelength [nm]")


def _norm(text: object) -> str:
    return str(text).strip().lstrip("\ufeff").lower()


def read_spectra(
    path: str | os.PathLike[str],
    *,
    sheet: str | None = None,
    pathlength_cm: float | None = None,
    quantity: Quantity | None = None,
) -> xr.DataArray:
    """Read absorbance spectra (or transmittance, converted) from CSV, TSV or XLSX.

    Parameters
    ----------
    path : path-like
        Wide or long table (see the module docstring).
    sheet : str, optional
        XLSX sheet; default the first.
    pathlength_cm : float, optional
        Pathlength (cm) to record in ``attrs``.
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What the file's numbers are; converted to absorbance by
        :func:`mixsolve.spectra.to_absorbance` (a transmittance ≤ 0 becomes NaN).
        Omitted: absorbance, and a file whose values cannot be absorbance (all within
        5–100 with the median above 10, or all above 10) is refused, naming the option.
        In a long table the value column is still headed ``absorbance``.

    Returns
    -------
    DataArray with dims ("sample", "wavelength")
        Absorbance (AU), wavelengths ascending (nm). Empty cells are NaN (missing).
        ``attrs["quantity_read"]`` says what the file held.

    Raises
    ------
    FileFormatError, InputError
        Unreadable files, unknown layout, duplicate wavelengths or samples, text in
        numeric cells, values that cannot be absorbance when ``quantity`` is omitted;
        the message names the file, line, column and value.
    """
    if pathlength_cm is not None:
        pathlength_cm = check_number(pathlength_cm, "pathlength_cm", "cm", positive=True)
    if quantity is not None:
        check_option(quantity, QUANTITIES, "quantity")  # before reading the file
    da = _read_large_text(Path(path)) if sheet is None else None
    if da is None:
        table = read_table(path, sheet=sheet)
        da = _to_array(table, SAMPLE)
    da = to_absorbance(da, quantity, str(da.attrs.get("source") or Path(path).name))
    if pathlength_cm is not None:
        da.attrs["pathlength_cm"] = pathlength_cm
    return da


def _read_large_text(p: Path) -> xr.DataArray | None:
    """Fast path for big text files (:mod:`mixsolve.io.fast_read`); None to read carefully."""
    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            is_xlsx = fh.read(4) == b"PK\x03\x04"
    except OSError:
        return None
    if is_xlsx or size < fast_read.FAST_PATH_MIN_BYTES or size > MAX_TEXT_BYTES:
        return None
    sniffed = fast_read.sniff(p)
    if sniffed is None:
        return None
    numbered, sep, decimal = sniffed
    header = [h.strip() for h in fast_read._split(numbered[:1], sep, p.name)[0][1]]
    names = [_norm(h) for h in header]
    attrs = {"quantity": "absorbance", "source": p.name, "separator": SEPARATOR_NAMES[sep],
             "decimal": decimal}
    text_columns: tuple[int, ...] = ()
    if names[0] in WAVELENGTH_HEADERS:
        samples = [normalise_name(h) for h in header[1:]]
        if not all(samples) or len({n.casefold() for n in samples}) != len(samples):
            return None  # the careful reader names the column
        frame = fast_read.read_numeric(p, sep, decimal, header)
        da = None if frame is None else _fast_wide(frame, samples, attrs)
    else:
        wl_cols = [i for i, n in enumerate(names) if n in WAVELENGTH_HEADERS]
        if not ("sample" in names and "absorbance" in names and wl_cols):
            return None
        cols = (names.index("sample"), wl_cols[0], names.index("absorbance"))
        text_columns = tuple(i for i in range(len(header)) if i not in cols[1:])
        frame = fast_read.read_numeric(p, sep, decimal, header, text_columns)
        da = None if frame is None else _fast_long(frame, cols, attrs)
    if da is None and size > limits.CAREFUL_MAX_BYTES:
        fast_read.locate_problem(p, sep, decimal, len(header), text_columns)
        raise FileFormatError(
            f"{p.name}: {size / 1e6:.0f} MB is too large for the line-by-line check "
            f"(limit {limits.CAREFUL_MAX_BYTES / 1e6:.0f} MB) and did not read cleanly: "
            "look for duplicate wavelengths or names, or store it as netCDF/Zarr")
    return da


def _fast_wide(frame: object, samples: list[str], attrs: dict[str, object]
               ) -> xr.DataArray | None:
    values = frame.to_numpy(dtype=float)  # type: ignore[attr-defined]
    wl = values[:, 0]
    if np.isnan(wl).any() or np.any(wl <= 0) or np.unique(wl).size != wl.size:
        return None
    order = np.argsort(wl)
    da = xr.DataArray(values[order, 1:].T, dims=(SAMPLE, WAVELENGTH),
                      coords={SAMPLE: samples, WAVELENGTH: wl[order]},
                      attrs={**attrs, "layout": "wide"}, name="absorbance")
    return check_spectra(da, str(attrs["source"]))


def _fast_long(frame: object, cols: tuple[int, int, int], attrs: dict[str, object]
               ) -> xr.DataArray | None:
    s_col, w_col, a_col = cols
    names = frame[s_col].fillna("").str.strip()  # type: ignore[index]
    wl = frame[w_col].to_numpy(dtype=float)  # type: ignore[index]
    absorb = frame[a_col].to_numpy(dtype=float)  # type: ignore[index]
    if (names == "").any() or np.isnan(wl).any() or np.any(wl <= 0):
        return None
    codes, uniques = pd.factorize(names)
    uniques = [normalise_name(u) for u in uniques]
    if not all(uniques) or len({u.casefold() for u in uniques}) != len(uniques):
        return None  # the careful reader names the line
    grid, w_idx = np.unique(wl, return_inverse=True)
    flat = codes.astype(np.int64) * grid.size + w_idx
    if np.unique(flat).size != flat.size:
        return None
    values = np.full((len(uniques), grid.size), np.nan)
    values[codes, w_idx] = absorb
    da = xr.DataArray(values, dims=(SAMPLE, WAVELENGTH),
                      coords={SAMPLE: uniques, WAVELENGTH: grid},
                      attrs={**attrs, "layout": "long"}, name="absorbance")
    return check_spectra(da, str(attrs["source"]))


def read_absorptivity_table(path: str | os.PathLike[str], *, sheet: str | None = None
                            ) -> xr.DataArray:
    """Read a wide table of absorptivities: ``wavelength_nm`` then one column per component.

    Returns
    -------
    DataArray with dims ("component", "wavelength")
    """
    table = read_table(path, sheet=sheet)
    if _norm(table.header[0]) not in WAVELENGTH_HEADERS:
        raise FileFormatError(
            f"{table.name}, line {table.header_line}: first column is {table.header[0]!r}; an "
            "absorptivity table starts with wavelength_nm, then one column per component")
    da = _wide(table, "component")
    for i, _ in enumerate(da["component"].values):
        values = da.values[i]
        if np.isnan(values).any():
            w = da[WAVELENGTH].values[np.isnan(values)][0]
            raise InputError(
                f"{table.name}: component {str(da['component'].values[i])!r} has no value at "
                f"{w:g} nm; an absorptivity table must be complete")
    return da


def _to_array(table: RawTable, label: str) -> xr.DataArray:
    first = _norm(table.header[0])
    names = [_norm(h) for h in table.header]
    wl_cols = [i for i, n in enumerate(names) if n in WAVELENGTH_HEADERS]
    # Long first: its columns may come in any order, wavelength_nm first included.
    if "sample" in names and "absorbance" in names and wl_cols:
        return _long(table, names.index("sample"), wl_cols[0], names.index("absorbance"))
    if first in WAVELENGTH_HEADERS:
        return _wide(table, label)
    raise FileFormatError(
        f"{table.name}, line {table.header_line}: cannot tell the layout from the header "
        f"{', '.join(map(repr, table.header[:4]))}; expected wide (first column wavelength_nm, "
        "then one column per sample) or long (columns sample, wavelength_nm, absorbance)")


def _attrs(table: RawTable, layout: str) -> dict[str, object]:
    return {
        "quantity": "absorbance",
        "source": table.name,
        "layout": layout,
        "separator": SEPARATOR_NAMES[table.separator],
        "decimal": table.decimal,
    }


def _wide(table: RawTable, label: str) -> xr.DataArray:
    header = list(table.header)
    while len(header) > 1 and not str(header[-1]).strip():
        header.pop()  # trailing empty header cells from spreadsheet exports
    names = [str(h).strip() for h in header[1:]]
    if not names:
        raise FileFormatError(f"{table.name}, line {table.header_line}: no {label} columns "
                              "after the wavelength column")
    for j, n in enumerate(names):
        if not normalise_name(n):
            raise FileFormatError(f"{table.name}, line {table.header_line}, column {j + 2}: "
                                  f"empty {label} name")
        if n in names[:j]:
            raise FileFormatError(
                f"{table.name}, line {table.header_line}: {label} name {n!r} appears twice "
                f"(columns {names.index(n) + 2} and {j + 2})")
    # the cells as written, so that a message shows 'Ext_03 ' beside 'ext_03'
    names = check_unique_names([str(h) for h in header[1:]],
                               f"{table.name}, line {table.header_line}")
    width = len(header)
    wl = np.empty(len(table.rows))
    values = np.empty((len(table.rows), width - 1))
    for i, row in enumerate(table.rows):
        if len(row) < width:
            raise FileFormatError(f"{table.where(i)}: {len(row)} cells, but the header has "
                                  f"{width}")
        extra = [c for c in row[width:] if str(c).strip()]
        if extra:
            raise FileFormatError(f"{table.where(i)}: {len(row)} cells, but the header has "
                                  f"{width}")
        wl[i] = parse_number(row[0], table.decimal, table.where(i, 0) + " wavelength",
                             allow_missing=False)
        for j in range(1, width):
            values[i, j - 1] = parse_number(row[j], table.decimal, table.where(i, j))
    _check_wavelengths(table, wl)
    order = np.argsort(wl)
    da = xr.DataArray(
        values[order].T,
        dims=(label, WAVELENGTH),
        coords={label: names, WAVELENGTH: wl[order]},
        attrs=_attrs(table, "wide"),
        name="absorbance" if label == SAMPLE else "absorptivity",
    )
    return check_spectra(da, table.name)


def _check_wavelengths(table: RawTable, wl: np.ndarray) -> None:
    for i, w in enumerate(wl):
        if w <= 0:
            raise InputError(f"{table.where(i, 0)}: wavelength {w:g} nm is not positive")
    _, first, counts = np.unique(wl, return_index=True, return_counts=True)
    if (counts > 1).any():
        w = wl[first[counts > 1][0]]
        dup_rows = np.flatnonzero(wl == w)
        raise InputError(f"{table.name}, line {table.lines[dup_rows[1]]}: wavelength {w:g} nm "
                         f"appears twice (also on line {table.lines[dup_rows[0]]})")


def _long(table: RawTable, s_col: int, w_col: int, a_col: int) -> xr.DataArray:
    samples: dict[str, dict[float, float]] = {}
    first_line: dict[tuple[str, float], int] = {}
    need = max(s_col, w_col, a_col) + 1
    for i, row in enumerate(table.rows):
        if len(row) < need:
            raise FileFormatError(f"{table.where(i)}: {len(row)} cells, expected at least {need}")
        name = str(row[s_col]).strip()
        if not normalise_name(name):
            raise FileFormatError(f"{table.where(i, s_col)}: empty sample name")
        w = parse_number(row[w_col], table.decimal, table.where(i, w_col), allow_missing=False)
        if w <= 0:
            raise InputError(f"{table.where(i, w_col)}: wavelength {w:g} nm is not positive")
        a = parse_number(row[a_col], table.decimal, table.where(i, a_col))
        spectrum = samples.setdefault(name, {})
        if w in spectrum:
            raise InputError(
                f"{table.where(i)}: sample {name!r} has wavelength {w:g} nm twice (also on line "
                f"{first_line[(name, w)]})")
        spectrum[w] = a
        first_line[(name, w)] = table.lines[i]
    names = check_unique_names(samples, f"{table.name}, column {s_col + 1} (sample)")
    grid = np.unique(np.concatenate([np.fromiter(s, float) for s in samples.values()]))
    values = np.full((len(samples), grid.size), np.nan)
    for k, spectrum in enumerate(samples.values()):
        pos = np.searchsorted(grid, np.fromiter(spectrum, float))
        values[k, pos] = np.fromiter(spectrum.values(), float)
    da = xr.DataArray(values, dims=(SAMPLE, WAVELENGTH),
                      coords={SAMPLE: names, WAVELENGTH: grid},
                      attrs=_attrs(table, "long"), name="absorbance")
    return check_spectra(da, table.name)


def describe_source(path: str | os.PathLike[str]) -> str:
    """Short display name of an input file."""
    return Path(path).name

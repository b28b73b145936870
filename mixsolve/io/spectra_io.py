"""Read spectra tables (wide or long layout) and JCAMP-DX files into labelled arrays.

Wide: first column the wavelength (``wavelength_nm``, ``nm``, ``Wavelength (nm)``, ``λ
(nm)``...: :func:`mixsolve.io.tables.axis_of`), one column per sample. Long: columns
``sample``, the wavelength and ``absorbance``, in any order. The layout found is recorded
in ``attrs["layout"]``. A preamble before the header, ``#`` comment lines and a units row
under the header are skipped and said in ``attrs["read_notes"]``
(:func:`read_notes`). JCAMP-DX files: :mod:`mixsolve.io.jcamp`.

A wavenumber axis (``wavenumber_cm-1``, ``Wavenumber (cm-1)``, ``cm-1``, ``1/cm``) is read
as wavelength λ = 10⁷/ν̃ nm with ``attrs["axis"] = "wavenumber_cm-1"``
(:data:`mixsolve.spectra.AXES`; docs/formats.md, "Wavenumber axes").

Several files (a list, a folder, a glob) read into one array: their wavelength grids must
agree, their axes (nm or cm⁻¹) too, and their sample names be unique across files. A file
with one spectrum (two columns) names its sample from the column header, or from the file
name when the header is a generic word (``absorbance``, ``A``, ``abs``:
:data:`GENERIC_VALUE_HEADERS`).
"""

from __future__ import annotations

import glob
import json
import os
import re
from collections.abc import Sequence
from pathlib import Path
from typing import TextIO

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io import fast_read, limits
from mixsolve.io.jcamp import JCAMP_SUFFIXES, is_jcamp, jcamp_quantity, read_jcamp
from mixsolve.io.tables import (
    MAX_TEXT_BYTES,
    SEPARATOR_NAMES,
    RawTable,
    axis_of,
    parse_number,
    read_table,
)
from mixsolve.names import check_unique_names, normalise_name
from mixsolve.spectra import (
    AXIS_WORDS,
    QUANTITIES,
    SAMPLE,
    WAVELENGTH,
    WAVENUMBER_AXIS,
    Quantity,
    check_number,
    check_option,
    check_spectra,
    native_axis,
    nm_from_wavenumber,
    to_absorbance,
)

PathLike = str | os.PathLike[str]
#: File endings a folder or a glob of spectra is read for (others in a folder are skipped).
SPECTRA_SUFFIXES = (".csv", ".tsv", ".txt", ".xlsx", *JCAMP_SUFFIXES)
#: Column headers that say what the numbers are rather than which sample they belong to:
#: a one-spectrum file headed so is named after its file (compared without case and
#: without a unit in brackets).
GENERIC_VALUE_HEADERS = ("absorbance", "abs", "a", "au", "absorbance (au)", "a (au)", "value",
                         "values", "y", "signal", "data", "spectrum", "sample", "od",
                         "transmittance", "t", "%t", "mau", "milliabsorbance", "intensity")
#: What a units row under the header may say of the numbers, by quantity (no case).
VALUE_UNITS = {"au": "absorbance", "a": "absorbance", "abs": "absorbance",
               "absorbance": "absorbance", "t": "transmittance",
               "transmittance": "transmittance", "%t": "percent_transmittance",
               "%": "percent_transmittance", "% t": "percent_transmittance",
               "mau": "milliabsorbance", "milliabsorbance": "milliabsorbance"}
_UNSUPPORTED_AXIS = {
    "micrometre": "wavelengths in µm are not read; give them in nm (µm × 1000)",
}

#: Axes a header may name (:func:`mixsolve.io.tables.axis_of`), as ``attrs["axis"]``.
_READ_AXES = {"nm": "nm", "wavenumber": WAVENUMBER_AXIS}
#: The word and unit of each axis's values, for messages.
_AXIS_UNIT = {"nm": ("wavelength", "nm"), WAVENUMBER_AXIS: ("wavenumber", "cm-1")}


def _on_axis(attrs: dict[str, object], x: np.ndarray) -> tuple[dict[str, object], np.ndarray]:
    """Attributes and wavelengths (nm) of axis values ``x`` read on ``attrs["axis"]``.

    Wavenumbers become λ = 10⁷/ν̃ nm and keep ``axis``; an nm axis leaves no ``axis`` key
    (spectra without one are in nm).
    """
    axis = attrs.get("axis", "nm")
    attrs = {k: v for k, v in attrs.items() if k != "axis"}
    if axis == "nm":
        return attrs, x
    return {**attrs, "axis": axis}, nm_from_wavenumber(x)


def _norm(text: object) -> str:
    return str(text).strip().lstrip("\ufeff").lower()


def _is_axis(cell: object) -> bool:
    return axis_of(cell) is not None


def is_spectra_header(cells: list[str]) -> bool:
    """Whether a row is the header of a spectra table: the wavelength first (wide), or the
    columns ``sample``, a wavelength and ``absorbance`` in any order (long)."""
    if not cells:
        return False
    if _is_axis(cells[0]):
        return True
    names = [_norm(c) for c in cells]
    return "sample" in names and "absorbance" in names and any(map(_is_axis, cells))


def read_notes(spectra: xr.DataArray) -> list[str]:
    """What reading the spectra skipped or decided (``attrs["read_notes"]``), as lines."""
    return list(json.loads(spectra.attrs.get("read_notes", "[]")))


def _natural(p: Path) -> list[object]:
    return [int(t) if t.isdigit() else t.casefold() for t in re.split(r"(\d+)", p.name)]


def spectra_paths(spectra: PathLike | Sequence[PathLike]) -> list[Path]:
    """The files a spectra argument names: files as given, folders and globs expanded.

    A folder gives its files ending in :data:`SPECTRA_SUFFIXES` (not hidden, not in
    subfolders), a glob (``data/*.csv``, when no file has that very name) its matches; both
    in natural order (``s2`` before ``s10``). A ``.zarr`` store is one path.

    Raises
    ------
    InputError
        Nothing given, a folder with no spectra file, a glob matching nothing, or one
        file named twice.
    """
    items = [spectra] if isinstance(spectra, str | os.PathLike) else list(spectra)
    if not items:
        raise InputError("spectra: no file given; name one or more files, a folder or a glob")
    out: list[Path] = []
    for item in items:
        p = Path(item)
        if p.is_dir() and p.suffix.lower() != ".zarr":
            found = sorted((f for f in p.iterdir() if f.is_file() and not f.name.startswith(".")
                            and f.suffix.lower() in SPECTRA_SUFFIXES), key=_natural)
            if not found:
                raise InputError(f"{item}: the folder holds no spectra file (ending in "
                                 f"{', '.join(SPECTRA_SUFFIXES)})")
            out += found
        elif not os.path.lexists(p) and glob.has_magic(os.fspath(item)):
            found = sorted((Path(f) for f in glob.glob(os.fspath(item)) if Path(f).is_file()),
                           key=_natural)
            if not found:
                raise InputError(f"{item}: no file matches")
            out += found
        else:
            out.append(p)
    seen: dict[str, Path] = {}
    for p in out:
        real = os.path.realpath(p)
        if real in seen:
            raise InputError(f"{p}: named twice among the spectra (also as {seen[real]}); "
                             "give each file once")
        seen[real] = p
    return out


def spectra_inputs(spectra: PathLike | Sequence[PathLike]) -> list[PathLike]:
    """Everything a spectra argument reads, for the output guard: each path as given (a
    folder too: no output may lie in it) and the files it names (:func:`spectra_paths`)."""
    items = [spectra] if isinstance(spectra, str | os.PathLike) else list(spectra)
    return [*items, *spectra_paths(items)]


def one_or_many(spectra: PathLike | Sequence[PathLike]) -> PathLike | list[PathLike]:
    """A spectra argument as one path when it names one (a sequence of one), else a list."""
    if isinstance(spectra, str | os.PathLike):
        return spectra
    items = list(spectra)
    return items[0] if len(items) == 1 else items


def write_notes(spectra: xr.DataArray, stream: TextIO | None) -> None:
    """Write what reading skipped or decided (:func:`read_notes`) as ``note:`` lines."""
    if stream is not None:
        for note in read_notes(spectra):
            stream.write(f"note: {note}\n")


def _skipped_in_folders(items: Sequence[PathLike]) -> list[str]:
    notes = []
    for item in items:
        p = Path(item)
        if p.is_dir() and p.suffix.lower() != ".zarr":
            other = sorted(f.name for f in p.iterdir() if f.is_file() and not f.name.startswith(
                ".") and f.suffix.lower() not in SPECTRA_SUFFIXES)
            if other:
                notes.append(f"{item}: skipped {len(other)} file(s) that are not spectra "
                             f"tables ({', '.join(other[:3])}{', ...' if len(other) > 3 else ''})")
    return notes


def read_spectra(
    path: PathLike | Sequence[PathLike],
    *,
    sheet: str | None = None,
    pathlength_cm: float | None = None,
    quantity: Quantity | None = None,
) -> xr.DataArray:
    """Read absorbance spectra (or transmittance, converted) from CSV, TSV, XLSX or JCAMP-DX.

    Parameters
    ----------
    path : path-like, or a sequence of them
        A wide or long table, a JCAMP-DX file (``.jdx``, ``.dx``), a folder of such files
        or a glob, or a list of any of these (:func:`spectra_paths`); see the module
        docstring and docs/formats.md.
    sheet : str, optional
        XLSX sheet; default the first (of every XLSX file read).
    pathlength_cm : float, optional
        Pathlength (cm) to record in ``attrs``.
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What the file's numbers are; converted to absorbance by
        :func:`mixsolve.spectra.to_absorbance` (a transmittance ≤ 0 becomes NaN).
        Omitted: absorbance, and a file whose values cannot be absorbance (all within
        5–100 with the median above 10, or all above 10) is refused, naming the option.
        In a long table the value column is still headed ``absorbance``. A units row
        (``%T``, ``mAU``) or a JCAMP-DX ``##YUNITS`` says it too; a contradiction is refused.

    Returns
    -------
    DataArray with dims ("sample", "wavelength")
        Absorbance (AU), wavelengths ascending (nm). Empty cells are NaN (missing).
        ``attrs["quantity_read"]`` says what the file held; ``attrs["read_notes"]`` (JSON
        list, :func:`read_notes`) what was skipped or decided (preamble, comments, units
        row, how a one-spectrum file was named); with several files ``attrs["files"]``
        (JSON list of names) and ``layout`` ``"files"``. A file on a wavenumber axis gives
        λ = 10⁷/ν̃ nm and ``attrs["axis"] = "wavenumber_cm-1"`` (none for nm).

    Raises
    ------
    FileFormatError, InputError
        Unreadable files, unknown layout, duplicate wavelengths or samples, text in
        numeric cells, values that cannot be absorbance when ``quantity`` is omitted,
        micrometre axes; several files whose grids or axes (nm, cm⁻¹) differ or that
        share a sample name;
        the message names the file, line, column and value.
    """
    if pathlength_cm is not None:
        pathlength_cm = check_number(pathlength_cm, "pathlength_cm", "cm", positive=True)
    if quantity is not None:
        check_option(quantity, QUANTITIES, "quantity")  # before reading the file
    items = [path] if isinstance(path, str | os.PathLike) else list(path)
    files = spectra_paths(items)
    parts = [_read_one(p, sheet, quantity, several=len(files) > 1) for p in files]
    da = parts[0] if len(parts) == 1 else _combine(parts, files)
    notes = _skipped_in_folders(items) + read_notes(da)
    if notes:
        da.attrs["read_notes"] = json.dumps(notes)
    if pathlength_cm is not None:
        da.attrs["pathlength_cm"] = pathlength_cm
    return da


def _read_one(p: Path, sheet: str | None, quantity: Quantity | None, *, several: bool
              ) -> xr.DataArray:
    """One file as absorbance (the JCAMP-DX or the table path), one spectrum named."""
    if p.is_file() and is_jcamp(p):
        return _read_jcamp(p, quantity)
    da = _read_large_text(p) if sheet is None else None
    units: str | None = None
    if da is None:
        table = read_table(p, sheet=sheet, find_header=is_spectra_header)
        da, units = _to_array(table, SAMPLE)
    where = str(da.attrs.get("source") or p.name)
    if units is not None:
        if quantity is not None and quantity != units:
            raise InputError(f"quantity: {quantity!r}, but the units row of {where} says "
                             f"{units!r}; leave quantity out, or correct the row")
        quantity = units  # type: ignore[assignment]
    da = to_absorbance(da, quantity, where)
    return _name_single(da, p, several)


def _name_single(da: xr.DataArray, p: Path, several: bool) -> xr.DataArray:
    """A one-spectrum table whose column header is a generic word is named after its file.

    The note says which name was used: always when it is the file's, and among several
    files also when it is the header's (alone, a file named by its header reads as before).
    """
    if da.sizes[SAMPLE] != 1 or da.attrs.get("layout") != "wide":
        return da
    header = str(da[SAMPLE].values[0])
    bare = re.sub(r"\s*[(\[][^)\]]*[)\]]\s*$", "", header).strip().casefold()
    notes = read_notes(da)
    if bare in GENERIC_VALUE_HEADERS or header.casefold() in GENERIC_VALUE_HEADERS:
        name = normalise_name(p.stem)
        da = da.assign_coords({SAMPLE: [name]})
        notes.append(f"{p.name}: one spectrum, named {name!r} from the file name (its column "
                     f"header {header!r} is a generic word)")
    elif several:
        notes.append(f"{p.name}: one spectrum, named {header!r} from its column header")
    if notes:
        da.attrs["read_notes"] = json.dumps(notes)
    return da


def _read_jcamp(p: Path, quantity: Quantity | None) -> xr.DataArray:
    """A JCAMP-DX file as absorbance: one sample per spectrum, named by ##TITLE."""
    parts = []
    blocks = read_jcamp(p)
    for k, spectrum in enumerate(blocks):
        where = f"{p.name}, line {spectrum.line}"
        read_as = jcamp_quantity(spectrum, quantity, where)
        title = normalise_name(spectrum.title)
        notes = []
        if not title:
            title = normalise_name(p.stem if len(blocks) == 1 else f"{p.stem}_{k + 1}")
            notes.append(f"{where}: ##TITLE is empty; the spectrum is named {title!r}")
        wl, values = spectrum.wavelength_nm, spectrum.values
        if np.any(wl <= 0):
            raise InputError(f"{where}: wavelength {wl[wl <= 0][0]:g} nm is not positive")
        if np.unique(wl).size != wl.size:
            raise InputError(f"{where}: a wavelength appears twice among the points")
        order = np.argsort(wl)
        da = xr.DataArray(values[order][None, :], dims=(SAMPLE, WAVELENGTH),
                          coords={SAMPLE: [title], WAVELENGTH: wl[order]}, name="absorbance",
                          attrs={"quantity": "absorbance", "source": p.name, "layout": "jcamp-dx",
                                 "read_notes": json.dumps(notes),
                                 **({} if spectrum.axis == "nm" else {"axis": spectrum.axis})})
        parts.append(to_absorbance(check_spectra(da, where), read_as, where))  # type: ignore[arg-type]
    if len(parts) == 1:
        return parts[0]
    return _combine(parts, [f"{p.name}, line {b.line}" for b in blocks], source=p.name)


def _grid_text(wl: np.ndarray) -> str:
    return f"{wl.size} points {wl[0]:g}-{wl[-1]:g} nm" if wl.size else "no points"


def _combine(parts: list[xr.DataArray], places: Sequence[PathLike],
             source: str | None = None) -> xr.DataArray:
    """Spectra read from several places as one array: one grid, unique sample names.

    Raises
    ------
    InputError
        Grids that differ (naming both places and the first difference), or a sample
        name in two places (naming both).
    """
    names = [str(Path(p).name) if not isinstance(p, str) or os.path.exists(p) else str(p)
             for p in places]
    axis = native_axis(parts[0], names[0])
    for part, name in zip(parts[1:], names[1:], strict=True):
        if native_axis(part, name) != axis:
            raise InputError(
                f"{name}: its axis is {AXIS_WORDS[native_axis(part, name)]}, but {names[0]} "
                f"gives {AXIS_WORDS[axis]}; files read together share one axis: convert one "
                "(λ nm = 10⁷/ν̃ cm⁻¹), or read them in separate runs")
    grid = parts[0][WAVELENGTH].values
    for part, name in zip(parts[1:], names[1:], strict=True):
        wl = part[WAVELENGTH].values
        if wl.shape == grid.shape and np.allclose(wl, grid, rtol=0, atol=1e-9):
            continue
        if wl.size != grid.size:
            first = (f"{grid.size} against {wl.size} wavelengths" if not np.array_equal(
                wl[:min(wl.size, grid.size)], grid[:min(wl.size, grid.size)])
                else f"{name} {'stops' if wl.size < grid.size else 'goes on'} after "
                     f"{min(wl.size, grid.size)} points")
            k = int(np.argmax(wl[:min(wl.size, grid.size)] != grid[:min(wl.size, grid.size)]))
        else:
            k = int(np.argmax(np.abs(wl - grid) > 1e-9))
            first = ""
        detail = (f"point {k + 1}: {grid[k]:g} nm against {wl[k]:g} nm"
                  if k < min(wl.size, grid.size) and grid[k] != wl[k] else first)
        raise InputError(
            f"{name}: its wavelength grid ({_grid_text(wl)}) differs from that of "
            f"{names[0]} ({_grid_text(grid)}), first at {detail}; give files measured on one "
            "grid (resample them first), or read them in separate runs")
    seen: dict[str, str] = {}
    samples: list[str] = []
    for part, name in zip(parts, names, strict=True):
        for sample in part[SAMPLE].values:
            key = str(sample).casefold()
            if key in seen:
                raise InputError(
                    f"sample {str(sample)!r} is in both {seen[key]} and {name}; sample names "
                    "must be unique across the files: rename the file or its column")
            seen[key] = name
            samples.append(str(sample))
    notes = [n for part in parts for n in read_notes(part)]
    read = sorted({str(part.attrs.get("quantity_read", "absorbance")) for part in parts})
    attrs: dict[str, object] = {
        "quantity": "absorbance",
        "quantity_read": read[0] if len(read) == 1 else ", ".join(read),
        "source": source or (f"{len(parts)} files: {names[0]}, ..., {names[-1]}"
                             if len(parts) > 2 else ", ".join(names)),
        "layout": "files" if source is None else "jcamp-dx",
        "files": json.dumps(names),
        "read_notes": json.dumps(notes),
    }
    dark = sum(int(part.attrs.get("dark_readings", 0)) for part in parts)
    if dark:
        attrs["dark_readings"] = dark
    if axis != "nm":
        attrs["axis"] = axis
    da = xr.DataArray(np.vstack([part.values for part in parts]), dims=(SAMPLE, WAVELENGTH),
                      coords={SAMPLE: samples, WAVELENGTH: grid}, name="absorbance",
                      attrs=attrs)
    return check_spectra(da, str(attrs["source"]))


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
    if axis_of(names[0]) in _READ_AXES:
        attrs["axis"] = _READ_AXES[axis_of(names[0])]
        samples = [normalise_name(h) for h in header[1:]]
        if not all(samples) or len({n.casefold() for n in samples}) != len(samples):
            return None  # the careful reader names the column
        frame = fast_read.read_numeric(p, sep, decimal, header)
        da = None if frame is None else _fast_wide(frame, samples, attrs)
    else:
        wl_cols = [i for i, n in enumerate(names) if axis_of(n) is not None]
        if not ("sample" in names and "absorbance" in names and wl_cols) \
                or axis_of(names[wl_cols[0]]) not in _READ_AXES:
            return None
        attrs["axis"] = _READ_AXES[axis_of(names[wl_cols[0]])]
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
    attrs, wl = _on_axis(attrs, wl)
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
    attrs, grid = _on_axis(attrs, grid)
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
    axis = _check_axis(table, 0)
    if axis_of(table.header[0]) is None:
        raise FileFormatError(
            f"{table.name}, line {table.header_line}: first column is {table.header[0]!r}; an "
            "absorptivity table starts with wavelength_nm (or wavenumber_cm-1), then one "
            "column per component")
    da = _wide(table, "component", axis)
    for i, _ in enumerate(da["component"].values):
        values = da.values[i]
        if np.isnan(values).any():
            w = da[WAVELENGTH].values[np.isnan(values)][0]
            raise InputError(
                f"{table.name}: component {str(da['component'].values[i])!r} has no value at "
                f"{w:g} nm; an absorptivity table must be complete")
    return da


def _check_axis(table: RawTable, column: int) -> str:
    """The axis (``attrs["axis"]`` value) a header cell names; a micrometre axis refused,
    naming the header cell and the fix."""
    axis = axis_of(table.header[column])
    if axis in _UNSUPPORTED_AXIS:
        raise InputError(f"{table.name}, line {table.header_line}, column {column + 1}: "
                         f"{str(table.header[column])!r}: {_UNSUPPORTED_AXIS[axis]}")
    return _READ_AXES.get(str(axis), "nm")


def _to_array(table: RawTable, label: str) -> tuple[xr.DataArray, str | None]:
    """The table as spectra, and the quantity its units row states (None: no row)."""
    names = [_norm(h) for h in table.header]
    wl_cols = [i for i, n in enumerate(names) if _is_axis(n)]
    # Long first: its columns may come in any order, wavelength_nm first included.
    if "sample" in names and "absorbance" in names and wl_cols:
        axis = _check_axis(table, wl_cols[0])
        units, axis = _units_row(table, wl_cols[0], [names.index("absorbance")], axis)
        return _long(table, names.index("sample"), wl_cols[0], names.index("absorbance"),
                     axis), units
    if wl_cols and wl_cols[0] == 0:
        axis = _check_axis(table, 0)
        units, axis = _units_row(table, 0, range(1, len(table.header)), axis)
        return _wide(table, label, axis), units
    seen = ", ".join(map(repr, table.header[:4]))
    raise FileFormatError(
        f"{table.name}, line {table.header_line}: cannot tell the layout from the header "
        f"{seen}; expected wide (first column the wavelength: wavelength_nm, nm, "
        "Wavelength (nm), λ (nm); then one column per sample) or long (columns sample, "
        "wavelength_nm, absorbance): rename the wavelength column, or delete the lines "
        "above the header if they hold one")


def _units_row(table: RawTable, wl_col: int, value_cols: Sequence[int], axis: str
               ) -> tuple[str | None, str]:
    """Drop a units row under the header (``nm``, ``cm-1``, ``AU``, ``%T``) and say what it
    states.

    Returns the quantity the value columns' units name (one for all; None when the row
    names none, or when the first data row is not a units row), and the axis: the row's
    unit under a header that names no unit (``wavelength``, ``λ``), else the header's
    ``axis``; a row contradicting a header's unit is refused.
    """
    if not table.rows:
        return None, axis
    row = table.rows[0]
    cell = str(row[wl_col]).strip() if wl_col < len(row) else ""
    bare = cell.strip("()[] ").lower()
    if axis_of(bare) is None or bare in ("wavelength", "λ", "lambda", "wl"):
        return None, axis
    where = f"{table.name}, line {table.lines[0]}"
    if axis_of(bare) in _UNSUPPORTED_AXIS:
        raise InputError(f"{where} (units row): {cell!r}: {_UNSUPPORTED_AXIS[axis_of(bare)]}")
    row_axis = _READ_AXES[str(axis_of(bare))]
    header = _norm(table.header[wl_col])
    if row_axis != axis:
        if header not in ("wavelength", "wave length", "λ", "lambda", "wl"):
            raise InputError(
                f"{where} (units row): {cell!r} says {AXIS_WORDS[row_axis]}, but the header "
                f"{str(table.header[wl_col])!r} says {AXIS_WORDS[axis]}; correct one of them")
        axis = row_axis
    found: dict[str, str] = {}
    for j in value_cols:
        text = str(row[j]).strip() if j < len(row) else ""
        unit = text.strip("()[] ").lower()
        if not unit:
            continue
        if unit not in VALUE_UNITS:
            raise InputError(
                f"{where}, column {j + 1} (units row): {text!r} is not a unit mixsolve reads "
                "(AU, A, mAU, T, %T); correct it, or delete the units row and say what the "
                "numbers are with quantity")
        found.setdefault(VALUE_UNITS[unit], text)
    if len(found) > 1:
        raise InputError(f"{where} (units row): the columns are in different units "
                         f"({', '.join(found.values())}); one file holds one quantity")
    del table.rows[0], table.lines[0]
    quantity = next(iter(found), None)
    table.skipped.append(f"skipped the units row on line {int(where.rsplit(' ', 1)[1])}"
                         + (f" (read as {quantity.replace('_', ' ')})" if quantity else ""))
    return quantity, axis


def _attrs(table: RawTable, layout: str) -> dict[str, object]:
    attrs: dict[str, object] = {
        "quantity": "absorbance",
        "source": table.name,
        "layout": layout,
        "separator": SEPARATOR_NAMES[table.separator],
        "decimal": table.decimal,
    }
    if table.skipped:
        attrs["read_notes"] = json.dumps([f"{table.name}: {t}" for t in table.skipped])
    return attrs


def _wide(table: RawTable, label: str, axis: str = "nm") -> xr.DataArray:
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
        wl[i] = parse_number(row[0], table.decimal,
                             f"{table.where(i, 0)} {_AXIS_UNIT[axis][0]}", allow_missing=False)
        for j in range(1, width):
            values[i, j - 1] = parse_number(row[j], table.decimal, table.where(i, j))
    _check_wavelengths(table, wl, axis)
    attrs, wl = _on_axis({**_attrs(table, "wide"), "axis": axis}, wl)
    order = np.argsort(wl)
    da = xr.DataArray(
        values[order].T,
        dims=(label, WAVELENGTH),
        coords={label: names, WAVELENGTH: wl[order]},
        attrs=attrs,
        name="absorbance" if label == SAMPLE else "absorptivity",
    )
    return check_spectra(da, table.name)


def _check_wavelengths(table: RawTable, wl: np.ndarray, axis: str = "nm") -> None:
    word, unit = _AXIS_UNIT[axis]
    for i, w in enumerate(wl):
        if w <= 0:
            raise InputError(f"{table.where(i, 0)}: {word} {w:g} {unit} is not positive")
    _, first, counts = np.unique(wl, return_index=True, return_counts=True)
    if (counts > 1).any():
        w = wl[first[counts > 1][0]]
        dup_rows = np.flatnonzero(wl == w)
        raise InputError(f"{table.name}, line {table.lines[dup_rows[1]]}: {word} {w:g} {unit} "
                         f"appears twice (also on line {table.lines[dup_rows[0]]})")


def _long(table: RawTable, s_col: int, w_col: int, a_col: int, axis: str = "nm"
          ) -> xr.DataArray:
    word, unit = _AXIS_UNIT[axis]
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
            raise InputError(f"{table.where(i, w_col)}: {word} {w:g} {unit} is not positive")
        a = parse_number(row[a_col], table.decimal, table.where(i, a_col))
        spectrum = samples.setdefault(name, {})
        if w in spectrum:
            raise InputError(
                f"{table.where(i)}: sample {name!r} has {word} {w:g} {unit} twice (also on line "
                f"{first_line[(name, w)]})")
        spectrum[w] = a
        first_line[(name, w)] = table.lines[i]
    names = check_unique_names(samples, f"{table.name}, column {s_col + 1} (sample)")
    grid = np.unique(np.concatenate([np.fromiter(s, float) for s in samples.values()]))
    values = np.full((len(samples), grid.size), np.nan)
    for k, spectrum in enumerate(samples.values()):
        pos = np.searchsorted(grid, np.fromiter(spectrum, float))
        values[k, pos] = np.fromiter(spectrum.values(), float)
    attrs, grid = _on_axis({**_attrs(table, "long"), "axis": axis}, grid)
    da = xr.DataArray(values, dims=(SAMPLE, WAVELENGTH),
                      coords={SAMPLE: names, WAVELENGTH: grid},
                      attrs=attrs, name="absorbance")
    return check_spectra(da, table.name)


def describe_source(path: str | os.PathLike[str]) -> str:
    """Short display name of an input file."""
    return Path(path).name

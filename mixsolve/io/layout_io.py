"""Read a plate layout file: which well holds what.

Columns ``well, role, sample, dilution`` (CSV, TSV or XLSX; first sheet or ``sheet``),
plus ``component, concentration, unit`` for standard wells. Roles: ``blank``, ``sample``,
``standard``, ``empty``. Dilution d (default 1) means the well holds the sample diluted
d-fold; the sample's result is multiplied by d.
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.tables import parse_number, read_table
from mixsolve.names import check_spellings, normalise_name
from mixsolve.plate.wells import check_sample_names, parse_well, well_name
from mixsolve.spectra import check_number
from mixsolve.units import concentration_basis

ROLES = ("blank", "sample", "standard", "empty")
LAYOUT_COLUMNS = ("line", "well", "role", "sample", "dilution", "component", "concentration",
                  "unit")
_STANDARD_COLUMNS = ("component", "concentration", "unit")


def read_layout(path: str | os.PathLike[str], *, sheet: str | None = None) -> pd.DataFrame:
    """Read and check a plate layout.

    Parameters
    ----------
    path : path-like
        CSV, TSV or XLSX with columns ``well, role`` and, as needed, ``sample``,
        ``dilution``, ``component``, ``concentration``, ``unit`` (any order, any case).
    sheet : str, optional
        XLSX sheet; default the first.

    Returns
    -------
    DataFrame
        One row per listed well, columns ``line`` (file line), ``well`` (canonical, e.g.
        ``A1``), ``role``, ``sample`` (empty string when not given), ``dilution`` (float,
        1 when empty), ``component``, ``concentration`` (float, NaN except for standards)
        and ``unit``. ``attrs["source"]`` is the file name.

    Raises
    ------
    FileFormatError, InputError
        Missing columns, unknown or duplicated wells, a row naming a sample but no well,
        unknown roles, sample wells without a sample name, non-positive dilutions and
        incomplete standards; the message names the file, line and well. Well, sample
        and component names are compared in normal form (:mod:`mixsolve.names`): one
        sample (or component) may fill many wells under one spelling, but two spellings
        of one name (``Ext03`` and ``Ext03 ``, a no-break or zero-width space, another
        Unicode form, another case) are refused naming both and their lines; two sample
        names that differ only in case, runs of white space or ``-`` against ``_``
        (``Ext_03 `` and ``ext-03``) are refused naming both and their wells
        (:func:`mixsolve.plate.wells.check_sample_names`).
    """
    table = read_table(path, sheet=sheet, keep_spaces=True)  # names as written
    names = [str(h).strip().lstrip("\ufeff").lower() for h in table.header]
    missing = [c for c in ("well", "role") if c not in names]
    if missing:
        raise FileFormatError(
            f"{table.name}, line {table.header_line}: missing column(s) {', '.join(missing)}; "
            "a layout has columns well, role, sample, dilution (standards also component, "
            "concentration, unit)")
    col = {c: names.index(c) for c in LAYOUT_COLUMNS[1:] if c in names}
    records = []
    seen: dict[str, int] = {}
    for i, row in enumerate(table.rows):
        cells = list(row) + [""] * (len(names) - len(row))
        line = table.lines[i]
        where = f"{table.name}, line {line}"
        raw_well, sample = _cell(cells, col, "well"), _cell(cells, col, "sample")
        if not normalise_name(raw_well):
            what = f"sample {sample!r} has no well" if sample else "the well is empty"
            raise InputError(f"{where}: {what}; give the well (A1 or A01) the row is about")
        pos = parse_well(normalise_name(raw_well))
        if pos is None:
            raise InputError(f"{where}: {raw_well!r} is not a well name (A1-P24, or A01)")
        well = well_name(*pos)
        where = f"{where}, well {well}"
        if well in seen:
            raise InputError(f"{where}: appears twice (also on line {seen[well]})")
        seen[well] = line
        role = normalise_name(_cell(cells, col, "role")).lower()
        if role not in ROLES:
            raise InputError(f"{where}: role {_cell(cells, col, 'role')!r} is not one of "
                             f"{', '.join(ROLES)}")
        if role == "sample" and not normalise_name(sample):
            raise InputError(f"{where}: a sample well needs a sample name")
        dilution = 1.0
        if _cell(cells, col, "dilution"):
            dilution = parse_number(cells[col["dilution"]], table.decimal, f"{where}, dilution",
                                    allow_missing=False)
            check_number(dilution, f"{where}, dilution", positive=True)
        # the sample as written: check_spellings below puts it in normal form and shows
        # 'Ext_03 ' beside 'Ext_03' when two spellings differ only in case or spacing
        raw_sample = str(cells[col["sample"]]) if "sample" in col else ""
        record = {"line": line, "well": well, "role": role, "sample": raw_sample,
                  "dilution": dilution, "component": "", "concentration": np.nan, "unit": ""}
        if role == "standard":
            record.update(_standard(table.name, where, col, cells, table.decimal))
        records.append(record)
    frame = pd.DataFrame.from_records(records, columns=list(LAYOUT_COLUMNS))
    check_sample_names(frame["sample"].tolist(), frame["well"].tolist(), table.name,
                       frame["line"].tolist())
    for name in ("sample", "component"):  # one spelling per name (mixsolve.names)
        frame[name] = check_spellings(frame[name], f"{table.name}, {name}s",
                                       frame["line"].tolist())
    frame.attrs["source"] = table.name
    return frame


def _cell(cells: list[object], col: dict[str, int], name: str) -> str:
    """Text of the cell in column ``name`` (empty when the layout has no such column)."""
    return str(cells[col[name]]).strip() if name in col else ""


def _standard(name: str, where: str, col: dict[str, int], cells: list[object],
              decimal: str) -> dict[str, object]:
    """Component, concentration and unit of a standard well, checked."""
    absent = [c for c in _STANDARD_COLUMNS if c not in col]
    if absent:
        raise FileFormatError(f"{name}: standard wells need the column(s) {', '.join(absent)}")
    component = _cell(cells, col, "component")
    if not normalise_name(component):
        raise InputError(f"{where}: a standard well needs a component")
    concentration = parse_number(cells[col["concentration"]], decimal, f"{where}, concentration",
                                 allow_missing=False)
    check_number(concentration, f"{where}, concentration", low=0)
    unit = _cell(cells, col, "unit")
    concentration_basis(unit, f"{where}: unit")
    return {"component": str(cells[col["component"]]), "concentration": concentration,
            "unit": unit}  # the component as written: check_spellings normalises it

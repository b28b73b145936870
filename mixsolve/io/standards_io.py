"""Read a standards sheet: ``sample, component, concentration, unit`` [, ``pathlength_cm``,
``u_concentration``, ``stock``, ``u_stock_rel``]."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from mixsolve.errors import FileFormatError
from mixsolve.io.tables import header_names, parse_number, read_table
from mixsolve.names import check_spellings, normalise_name

REQUIRED = ("sample", "component", "concentration", "unit")
OPTIONAL = ("pathlength_cm", "molar_mass_g_per_mol", "u_concentration", "u_stock_rel")
#: Optional text columns.
OPTIONAL_TEXT = ("stock",)


def read_standards(path: str | os.PathLike[str], *, sheet: str | None = None) -> pd.DataFrame:
    """Read a standards sheet into a DataFrame with a ``line`` column for messages.

    Returns
    -------
    DataFrame
        Columns ``sample``, ``component``, ``concentration`` (float), ``unit``,
        ``pathlength_cm`` (float, NaN when not given) and ``line`` (file line number);
        when present, ``u_concentration`` and ``u_stock_rel`` (float, NaN when empty) and
        ``stock`` (text, "" when empty).

    Raises
    ------
    FileFormatError, InputError
        Missing columns, text where a number belongs; the message names line and column.
        Sample and component names are put in normal form (:mod:`mixsolve.names`); two
        spellings of one name (``Red`` and ``red``, ``red `` and ``red``) are refused,
        naming both and their lines.
    """
    table = read_table(path, sheet=sheet, keep_spaces=True)  # names as written
    names = header_names(table, REQUIRED, "a standards sheet",
                         optional_note="optional: pathlength_cm, u_concentration, stock, "
                         "u_stock_rel")
    records = []
    for i, row in enumerate(table.rows):
        cells = list(row) + [""] * (len(names) - len(row))
        rec: dict[str, object] = {"line": table.lines[i]}
        for col in REQUIRED + OPTIONAL + OPTIONAL_TEXT:
            if col not in names:
                continue
            j = names.index(col)
            if col in ("concentration",):
                rec[col] = parse_number(cells[j], table.decimal, table.where(i, j),
                                        allow_missing=False)
            elif col in OPTIONAL:
                rec[col] = parse_number(cells[j], table.decimal, table.where(i, j))
            elif col in OPTIONAL_TEXT:
                rec[col] = str(cells[j]).strip()
            else:
                text = str(cells[j])  # as written: check_spellings compares spellings
                if not normalise_name(text):
                    raise FileFormatError(f"{table.where(i, j)}: empty {col}")
                rec[col] = text.strip() if col == "unit" else text
        records.append(rec)
    frame = pd.DataFrame.from_records(records)
    for col in ("sample", "component"):  # names as people read them (mixsolve.names)
        if col in frame:
            frame[col] = check_spellings(frame[col], f"{table.name}, {col}s",
                                         frame["line"].tolist())
    if "pathlength_cm" not in frame:
        frame["pathlength_cm"] = np.nan
    return frame


def molar_masses_from_sheet(frame: pd.DataFrame) -> dict[str, float]:
    """Molar masses (g/mol) per component from an optional ``molar_mass_g_per_mol`` column."""
    if "molar_mass_g_per_mol" not in frame:
        return {}
    out: dict[str, float] = {}
    for comp, group in frame.groupby("component"):
        values = group["molar_mass_g_per_mol"].dropna().unique()
        if values.size > 1:
            raise FileFormatError(f"standards sheet: component {comp!r} has different molar "
                                  f"masses {', '.join(f'{v:g}' for v in values)}")
        if values.size:
            out[str(comp)] = float(values[0])
    return out

"""Where a result came from: mixsolve version, library file and its SHA-256, spectra files,
settings and the date, written into every output of an unmix run (docs/formats.md,
"Provenance").

The record is a flat dict of JSON values (:func:`run_provenance`), kept on the result as
JSON text in ``attrs["provenance"]`` (so netCDF and Zarr outputs carry it as an attribute)
and written as ``#`` header lines of a results CSV and as the ``settings`` sheet of a
results workbook (:mod:`mixsolve.io.results_io`).
"""

from __future__ import annotations

import datetime
import hashlib
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from mixsolve._version import __version__

PathLike = str | os.PathLike[str]
#: The result attribute holding the record (JSON text of an object).
PROVENANCE_ATTR = "provenance"
#: Result attributes that describe the result rather than set the run: not settings.
NOT_SETTINGS = ("run_notes", "uncertainty_basis", "library_provenance", "source",
                "model_source", "mixsolve_version", "condition_number", PROVENANCE_ATTR,
                "stray_correction")
#: Prefix of the uncertainty budget's attributes on a result (not settings of the fit).
BUDGET_PREFIX = "budget_"
#: Bytes read at a time when hashing a file.
_CHUNK = 1 << 20


def sha256_of(path: PathLike) -> str:
    """The SHA-256 of a file's bytes, as 64 hex digits (FIPS 180-4, via :mod:`hashlib`).

    A folder (a Zarr store) is hashed over its files in sorted order, each as its path
    relative to the folder, a NUL byte, then its bytes.
    """
    p = Path(path)
    digest = hashlib.sha256()
    files = sorted(f for f in p.rglob("*") if f.is_file()) if p.is_dir() else [p]
    for f in files:
        if p.is_dir():
            digest.update(f.relative_to(p).as_posix().encode() + b"\0")
        with open(f, "rb") as handle:
            for block in iter(lambda h=handle: h.read(_CHUNK), b""):
                digest.update(block)
    return digest.hexdigest()


def settings_of(result: xr.Dataset) -> dict[str, Any]:
    """The settings a result records: its attributes that set the run, as JSON values.

    Every attribute except those describing the result (:data:`NOT_SETTINGS`, the budget's
    ``budget_*``), plus ``pathlength_cm`` (one value, or ``"per sample"``; left out when
    dask-backed). NaN or empty text (a setting not given) becomes ``None``.
    """
    out = {k: _plain(v) for k, v in result.attrs.items()
           if k not in NOT_SETTINGS and not k.startswith(BUDGET_PREFIX)}
    if "pathlength_cm" in result.variables and "pathlength_cm" not in out \
            and result["pathlength_cm"].chunks is None:  # a lazy one is not computed here
        values = np.unique(np.asarray(result["pathlength_cm"].values, dtype=float).ravel())
        out["pathlength_cm"] = float(values[0]) if values.size == 1 else "per sample"
    return out


def run_provenance(result: xr.Dataset, library: PathLike, spectra: Sequence[PathLike],
                   *, now: datetime.datetime | None = None) -> dict[str, Any]:
    """The provenance record of one run.

    Parameters
    ----------
    result : Dataset
        The run's result (:func:`mixsolve.unmix` or :func:`mixsolve.predict`).
    library : path-like
        The library (or PLS model) file used.
    spectra : sequence of path-like
        The spectra files read.
    now : datetime, optional
        The run's time (default: now, UTC).

    Returns
    -------
    dict
        ``mixsolve_version``, ``created_utc`` (ISO 8601, UTC, to the second),
        ``library`` (the path as given), ``library_sha256``, ``spectra`` (list of paths),
        ``settings`` (:func:`settings_of`).
    """
    when = (now or datetime.datetime.now(datetime.UTC)).astimezone(datetime.UTC)
    return {
        "mixsolve_version": __version__,
        "created_utc": when.replace(microsecond=0).isoformat().replace("+00:00", "Z"),
        "library": str(library),
        "library_sha256": sha256_of(library),
        "spectra": [str(p) for p in spectra],
        "settings": settings_of(result),
    }


def with_provenance(result: xr.Dataset, provenance: Mapping[str, Any]) -> xr.Dataset:
    """``result`` with the record as JSON text in ``attrs["provenance"]`` (a shallow copy)."""
    out = result.copy(deep=False)
    out.attrs = {**result.attrs, PROVENANCE_ATTR: json.dumps(dict(provenance))}
    return out


def provenance_of(result: xr.Dataset | Mapping[str, Any]) -> dict[str, Any]:
    """The record kept in a result's attrs (a Dataset or its attrs); ``{}`` when none."""
    attrs = result.attrs if isinstance(result, xr.Dataset) else result
    text = attrs.get(PROVENANCE_ATTR) or "{}"
    value = json.loads(text)
    return value if isinstance(value, dict) else {}


def _plain(value: Any) -> Any:
    """An attribute value as a JSON value (numpy scalars to Python, NaN to None)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None if np.isnan(value) else str(value)
    if isinstance(value, str) and not value:
        return None
    if isinstance(value, str | int | float | bool) or value is None:
        return value
    if isinstance(value, np.ndarray | list | tuple):  # as JSON text: settings stay scalars
        return json.dumps([_plain(v) for v in np.asarray(value).tolist()])
    return str(value)


#: The first ``#`` line of a results CSV written with its provenance.
HEADER_TITLE = "mixsolve results"
#: Item names of the settings in the header lines and the settings sheet: ``setting <name>``.
SETTING_PREFIX = "setting "
#: Items given once per spectra file.
LIST_ITEMS = ("spectra",)


def provenance_rows(provenance: Mapping[str, Any]) -> list[tuple[str, Any]]:
    """The record as (item, value) rows: one per field, one per spectra file, one per
    setting (``setting <name>``); the lines of a CSV header and the settings sheet."""
    rows: list[tuple[str, Any]] = []
    for key, value in provenance.items():
        if key == "settings":
            rows += [(SETTING_PREFIX + k, v) for k, v in dict(value).items()]
        elif key in LIST_ITEMS:
            rows += [(key, v) for v in value]
        else:
            rows.append((key, value))
    return rows


def provenance_from_rows(rows: Sequence[tuple[str, Any]]) -> dict[str, Any]:
    """Undo :func:`provenance_rows`."""
    out: dict[str, Any] = {}
    settings: dict[str, Any] = {}
    for item, value in rows:
        if item.startswith(SETTING_PREFIX):
            settings[item[len(SETTING_PREFIX):]] = value
        elif item in LIST_ITEMS:
            out.setdefault(item, []).append(value)
        else:
            out[item] = value
    if settings:
        out["settings"] = settings
    return out


def header_lines(provenance: Mapping[str, Any]) -> list[str]:
    """The ``#`` lines of a results CSV: a title, then ``# <item>: <JSON value>``.

    Values are JSON (strings quoted, so ``"1"`` and ``1`` stay apart) with every comma and
    semicolon inside a string written as the JSON escape ``\\u002c`` / ``\\u003b``: a
    spreadsheet opening the CSV keeps each header line in one cell, which begins with
    ``#`` and so is never a formula.
    """
    lines = [f"# {HEADER_TITLE}"]
    for item, value in provenance_rows(provenance):
        text = json.dumps(value, ensure_ascii=False)
        lines.append(f"# {item}: " + text.replace(",", "\\u002c").replace(";", "\\u003b"))
    return lines


def parse_header(lines: Sequence[str]) -> dict[str, Any]:
    """The record in a results CSV's ``#`` lines (:func:`header_lines`); ``{}`` without one.

    Lines that are not ``# <item>: <JSON>`` (a comment added by hand) are ignored.
    """
    body = [line.strip()[1:].strip() for line in lines]
    if HEADER_TITLE not in body:
        return {}
    rows = []
    for text in body:
        item, sep, value = text.partition(": ")
        if not sep:
            continue
        try:
            rows.append((item, json.loads(value)))
        except json.JSONDecodeError:
            continue
    return provenance_from_rows(rows)

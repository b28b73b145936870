"""Known concentrations of the calibration mixtures, as one labelled array in one unit."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.library import COMPONENT
from mixsolve.spectra import SAMPLE, check_number
from mixsolve.units import kind_words, reference_unit


def reference_matrix(reference: pd.DataFrame | xr.DataArray, *,
                     unit: str | None = None) -> xr.DataArray:
    """Turn known concentrations into a labelled (sample, component) array in one unit.

    Parameters
    ----------
    reference : DataFrame or DataArray
        Tidy table with columns ``sample, component, concentration, unit`` (one row per
        sample × component; a ``line`` column, if present, names rows in messages; other
        columns are ignored), or a DataArray with dims ``("sample", "component")``.
        An optional ``group`` column (a ``group`` coordinate along ``sample`` of a
        DataArray) says which samples belong together (replicates, a temperature series
        of one mixture): cross-validation never splits a group. Every row of a sample
        must name the same, non-empty group.
    unit : str, optional
        Unit of a DataArray's values (default its ``attrs["unit"]``). Ignored for tables,
        whose values are converted to the unit of their first row.

    Returns
    -------
    DataArray with dims ("sample", "component")
        Concentrations; ``attrs["unit"]`` is the common unit; a ``group`` coordinate
        (sample; text) when groups are given.

    Raises
    ------
    InputError
        Missing columns, a sample × component given twice or not at all, a negative or
        missing value, units of mixed kind (amount and mass concentrations, mole, mass and
        volume fractions: :func:`mixsolve.units.reference_unit`) or of no such kind, a
        sample with an empty group or two groups.
    """
    if isinstance(reference, xr.DataArray):
        return _reference_from_array(reference, unit)
    if not isinstance(reference, pd.DataFrame):
        raise InputError(f"reference: expected a DataFrame or DataArray, got "
                         f"{type(reference).__name__}")
    source = reference.attrs.get("source", "reference")
    missing = [c for c in ("sample", "component", "concentration", "unit")
               if c not in reference.columns]
    if missing:
        raise InputError(f"{source}: missing column(s) {', '.join(missing)}; a reference table "
                         "has columns sample, component, concentration, unit")
    if reference.empty:
        raise InputError(f"{source}: no rows")
    lines = (reference["line"].tolist() if "line" in reference.columns
             else list(range(1, len(reference) + 1)))
    label = "line" if "line" in reference.columns else "row"
    first_unit = str(reference["unit"].iloc[0])
    basis0, f0 = reference_unit(first_unit, f"{source}, {label} {lines[0]}: unit")
    values: dict[tuple[str, str], float] = {}
    seen: dict[tuple[str, str], Any] = {}
    groups: dict[str, tuple[str, Any]] = {}
    has_group = "group" in reference.columns
    for line, row in zip(lines, reference.itertuples(index=False), strict=True):
        where = f"{source}, {label} {line}"
        key = (str(row.sample), str(row.component))
        if key in seen:
            raise InputError(f"{where}: sample {key[0]!r}, component {key[1]!r} appears twice "
                             f"(also {label} {seen[key]})")
        seen[key] = line
        if has_group:
            _add_group(groups, key[0], row.group, where, label, line)
        value = float(row.concentration)
        if not np.isfinite(value):
            raise InputError(f"{where}: concentration of {key[1]!r} in {key[0]!r} is missing; "
                             "a calibration needs every known value")
        check_number(value, f"{where}, concentration", low=0)
        basis, factor = reference_unit(str(row.unit), f"{where}: unit")
        if basis != basis0:
            raise InputError(
                f"{where}: unit {row.unit!r} is {kind_words(basis)} but {label} {lines[0]} "
                f"uses {first_unit!r} ({kind_words(basis0)}); give all reference values of "
                "one kind: amount (mol/L) or mass (g/L) concentrations, or mole, mass or "
                "volume fractions")
        values[key] = value * factor / f0
    samples = list(dict.fromkeys(k[0] for k in values))
    comps = list(dict.fromkeys(k[1] for k in values))
    matrix = np.empty((len(samples), len(comps)))
    for i, s in enumerate(samples):
        for j, c in enumerate(comps):
            if (s, c) not in values:
                raise InputError(f"{source}: sample {s!r} has no concentration for {c!r}; give "
                                 "every component for every sample (0 where absent)")
            matrix[i, j] = values[(s, c)]
    coords: dict[str, Any] = {SAMPLE: samples, COMPONENT: comps}
    if has_group:
        coords["group"] = (SAMPLE, [groups[s][0] for s in samples])
    return xr.DataArray(matrix, dims=(SAMPLE, COMPONENT), coords=coords,
                        attrs={"unit": first_unit, "source": source}, name="concentration")


def _add_group(groups: dict[str, tuple[str, Any]], sample: str, group: Any, where: str,
               label: str, line: Any) -> None:
    """Record the group of ``sample``; refuse an empty one or a second, different one."""
    name = "" if group is None or (isinstance(group, float) and np.isnan(group)) \
        else str(group).strip()
    if not name:
        raise InputError(f"{where}: sample {sample!r} has an empty group; name the group of "
                         "every sample (its own name if it stands alone) or leave the group "
                         "column out")
    if sample in groups and groups[sample][0] != name:
        raise InputError(f"{where}: sample {sample!r} is in group {name!r} but in "
                         f"{groups[sample][0]!r} at {label} {groups[sample][1]}; a sample "
                         "belongs to one group")
    groups.setdefault(sample, (name, line))


def _reference_from_array(reference: xr.DataArray, unit: str | None) -> xr.DataArray:
    if set(reference.dims) != {SAMPLE, COMPONENT}:
        raise InputError(f"reference: expected dims ('sample', 'component'), got "
                         f"{reference.dims}")
    unit = unit or reference.attrs.get("unit")
    if not unit:
        raise InputError("reference: the concentration unit is not given (attrs['unit'] or "
                         "unit=...)")
    reference_unit(str(unit), "reference unit")
    ref = reference.transpose(SAMPLE, COMPONENT).astype(float)
    if "group" in ref.coords:
        if ref["group"].dims != (SAMPLE,):
            raise InputError("reference: the group coordinate must lie along 'sample'")
        names = [str(g).strip() for g in ref["group"].values]
        if not all(names) or any(g.lower() == "nan" for g in names):
            i = next(k for k, g in enumerate(names) if not g or g.lower() == "nan")
            raise InputError(f"reference: sample {str(ref[SAMPLE].values[i])!r} has no group; "
                             "name the group of every sample")
        ref = ref.assign_coords(group=(SAMPLE, names))
    values = ref.values
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"reference: concentration of {str(ref[COMPONENT].values[j])!r} in "
                         f"{str(ref[SAMPLE].values[i])!r} is {values[i, j]:g}; known values "
                         "must be finite and not negative")
    return ref.assign_coords({SAMPLE: [str(s) for s in ref[SAMPLE].values],
                              COMPONENT: [str(c) for c in ref[COMPONENT].values]}
                             ).assign_attrs(unit=str(unit))


def _names(values: Sequence[str], most: int = 5) -> str:
    shown = ", ".join(map(repr, values[:most]))
    return shown + (f" and {len(values) - most} more" if len(values) > most else "")


def match_samples(spectra: xr.DataArray, ref: xr.DataArray) -> xr.DataArray:
    """The reference rows of the spectra's samples, in the spectra's order.

    Parameters
    ----------
    spectra : DataArray with a "sample" dimension
    ref : DataArray with dims ("sample", "component")
        From :func:`reference_matrix`.

    Raises
    ------
    InputError
        A spectrum without reference values, or reference values without a spectrum;
        the message names them (the first five).
    """
    measured = [str(s) for s in spectra[SAMPLE].values]
    known = [str(s) for s in ref[SAMPLE].values]
    no_ref = [s for s in measured if s not in set(known)]
    no_spec = [s for s in known if s not in set(measured)]
    if no_ref:
        raise InputError(f"reference: no concentrations for spectra {_names(no_ref)}; every "
                         "calibration spectrum needs its known composition")
    if no_spec:
        raise InputError(f"spectra: no spectrum for reference samples {_names(no_spec)}; "
                         "remove them from the reference or add their spectra")
    return ref.sel({SAMPLE: measured})

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
from mixsolve.units import concentration_basis


def reference_matrix(reference: pd.DataFrame | xr.DataArray, *,
                     unit: str | None = None) -> xr.DataArray:
    """Turn known concentrations into a labelled (sample, component) array in one unit.

    Parameters
    ----------
    reference : DataFrame or DataArray
        Tidy table with columns ``sample, component, concentration, unit`` (one row per
        sample × component; a ``line`` column, if present, names rows in messages; other
        columns are ignored), or a DataArray with dims ``("sample", "component")``.
    unit : str, optional
        Unit of a DataArray's values (default its ``attrs["unit"]``). Ignored for tables,
        whose values are converted to the unit of their first row.

    Returns
    -------
    DataArray with dims ("sample", "component")
        Concentrations; ``attrs["unit"]`` is the common unit.

    Raises
    ------
    InputError
        Missing columns, a sample × component given twice or not at all, a negative or
        missing value, units of mixed kind (amount and mass) or not a concentration.
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
    basis0, f0 = concentration_basis(first_unit, f"{source}, {label} {lines[0]}: unit")
    values: dict[tuple[str, str], float] = {}
    seen: dict[tuple[str, str], Any] = {}
    for line, row in zip(lines, reference.itertuples(index=False), strict=True):
        where = f"{source}, {label} {line}"
        key = (str(row.sample), str(row.component))
        if key in seen:
            raise InputError(f"{where}: sample {key[0]!r}, component {key[1]!r} appears twice "
                             f"(also {label} {seen[key]})")
        seen[key] = line
        value = float(row.concentration)
        if not np.isfinite(value):
            raise InputError(f"{where}: concentration of {key[1]!r} in {key[0]!r} is missing; "
                             "a calibration needs every known value")
        check_number(value, f"{where}, concentration", low=0)
        basis, factor = concentration_basis(str(row.unit), f"{where}: unit")
        if basis != basis0:
            raise InputError(
                f"{where}: unit {row.unit!r} is {basis}-based but {label} {lines[0]} uses "
                f"{first_unit!r}; give all reference values as amount (mol/L) or all as mass "
                "(g/L) concentrations")
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
    return xr.DataArray(matrix, dims=(SAMPLE, COMPONENT),
                        coords={SAMPLE: samples, COMPONENT: comps},
                        attrs={"unit": first_unit, "source": source}, name="concentration")


def _reference_from_array(reference: xr.DataArray, unit: str | None) -> xr.DataArray:
    if set(reference.dims) != {SAMPLE, COMPONENT}:
        raise InputError(f"reference: expected dims ('sample', 'component'), got "
                         f"{reference.dims}")
    unit = unit or reference.attrs.get("unit")
    if not unit:
        raise InputError("reference: the concentration unit is not given (attrs['unit'] or "
                         "unit=...)")
    concentration_basis(str(unit), "reference unit")
    ref = reference.transpose(SAMPLE, COMPONENT).astype(float)
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
